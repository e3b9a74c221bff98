"""Time a 40 x 40 growth-rate map on one core at a converged truncation.

Usage: scripts/bench_stability (runs this file with the venv's Python) [--quick]

Runs with one BLAS/OpenMP thread (set before numpy is imported).  For each
parameter set prints the truncation chosen by the automatic convergence
check, the change of the fastest grid point's eigenvalue when the truncation
grows by 1.5, and the CPU time of the map (and its wall time, which
includes whatever else the machine is running).  The issue's target: < 30 s.
"""
import os
import sys

for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[var] = "1"

import time  # noqa: E402

import numpy as np  # noqa: E402

from shearmix.tools.stability import FlowParams, growth_map  # noqa: E402
from shearmix.tools.stability.modefile import program_version  # noqa: E402

CASES = [
    ("lowpe Re=50 BPe=1", FlowParams("lowpe", Re=50.0, BPe=1.0)),
    ("boussinesq Re=1000 B=1 Pe=100", FlowParams("boussinesq", Re=1000.0, B=1.0, Pe=100.0)),
    ("lowpe Re=1000 BPe=10", FlowParams("lowpe", Re=1000.0, BPe=10.0)),
    ("boussinesq Re=5000 B=1 Pe=5000", FlowParams("boussinesq", Re=5000.0, B=1.0, Pe=5000.0)),
]


def main():
    quick = "--quick" in sys.argv[1:]
    n = 10 if quick else 40
    kx = np.linspace(0.025, 1.0, n)
    kz = np.linspace(0.0, 2.0, n)
    print(f"shearmix {program_version()}: {n} x {n} growth-rate map, kx in [0.025, 1], "
          f"kz in [0, 2], ky0 = 0, one thread")
    worst = 0.0
    for name, p in CASES:
        c0 = time.process_time()
        gm = growth_map(p, kx, kz)
        cpu = time.process_time() - c0
        f = gm.check["fastest"]
        worst = max(worst, cpu)
        print(f"  {name:32s} M={gm.M:3d} ({gm.check and len(gm.check['samples'])} sample points "
              f"converged: {all(s[4] for s in gm.check['samples'])}), fastest growth "
              f"{f['sigma'].real:.6f} at kx={f['kx']:.3f} kz={f['kz']:.3f}, change at M={f['M_check']}: "
              f"{f['change']:.1e}; CPU {cpu:6.2f} s (wall {gm.seconds:6.2f} s)")
    # CPU time, not wall time: on a shared machine the wall clock counts other jobs
    print(f"slowest map: {worst:.2f} s CPU on one thread (target < 30 s)")
    return 0 if worst < 30 or quick else 1


if __name__ == "__main__":
    sys.exit(main())
