"""`shearmix summary` warns when a run's kinetic spectrum is still high at kmax.

The threshold (1e-3 of the spectral peak) is this tool's choice
(tools/analysis/spectral_tail.py); the check here is that a run far too coarse for its
Reynolds number trips it and a viscous one does not.
"""
import pytest

from shearmix.solver.run.simulation import Simulation
from shearmix.tools.analysis.summary import summarize_run


@pytest.mark.parametrize("Re,forcing,noise,expect_warning", [
    (2000.0, "laminar", 0.5, True),   # strong noise at Re = 2000 on a 16^3 grid
    (5.0, "laminar", 0.01, False),    # laminar flow at Re = 5: a single mode, damped noise
])
def test_spectral_tail_warning_in_run_summary(make_case, tmp_path, Re, forcing, noise,
                                              expect_warning):
    case = make_case(parameters={"Re": Re, "BPe": 1.0}, forcing={"amplitude": forcing},
                     grid={"Nx": 16, "Ny": 16, "Nz": 16},
                     time={"t_end": 1.0, "dt": 0.01, "adaptive": False},
                     initial={"kind": "laminar_noise", "amplitude": noise},
                     output={"diagnostics_every": 1, "progress_every": 10 ** 6,
                             "spectra_every": 0.1})
    sim = Simulation(case)
    code = sim.run(output=str(tmp_path), log=lambda m: None)
    assert code == 0, "the run under test must finish for its summary to be checked"
    row = summarize_run(str(tmp_path), start=0.3)
    tail = [w for w in row["warnings"] if "spectrum at k_max" in w]
    assert bool(tail) == expect_warning, (row["tail_ratio"], row["warnings"])
