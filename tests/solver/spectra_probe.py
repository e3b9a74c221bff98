"""Run under mpiexec by tests/solver/test_spectra.py (not collected by pytest).

    spectra_probe.py OUT.npz    spectra of a seeded noise state, saved on rank 0
"""
import os
import sys

import numpy as np

from shearmix.solver.case import case_from_dict  # noqa: E402
from shearmix.solver.compute.parallel import world  # noqa: E402
from shearmix.solver.files.spectra import DIRECTIONS, compute_spectra  # noqa: E402
from shearmix.solver.run.simulation import Simulation  # noqa: E402

CASE = {"model": "lowpe", "parameters": {"Re": 40.0, "BPe": 3.0},
        "grid": {"Nx": 16, "Ny": 8, "Nz": 8}, "time": {"t_end": 1.0},
        "initial": {"kind": "laminar_noise", "amplitude": 0.3, "seed": 9},
        "compute": {"fftw_effort": "estimate", "wisdom": ""}}


def spectra(comm=None):
    sim = Simulation(case_from_dict(CASE), comm)
    s = compute_spectra(sim)
    return {f"{g}_{d}": s[g][d] for g in ("kinetic", "thermal") for d in DIRECTIONS}


if __name__ == "__main__":
    comm = world()
    out = spectra(comm)
    if comm.rank == 0:
        np.savez(sys.argv[1], size=comm.size, **out)
