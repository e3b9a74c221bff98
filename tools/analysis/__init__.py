"""From a run folder to numbers: time averages with errors, steady-state detection, summaries, power-law fits, regimes, the spectral tail."""
