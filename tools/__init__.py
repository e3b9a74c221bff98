"""Everything around a run: command line, stability analysis, sweeps, analysis, plots.

``tools`` imports ``solver`` for shared pieces (case schema, grid, file
reading); ``solver`` never imports ``tools``.
"""
