"""Run under mpiexec (or plainly) by the checkpoint/restart tests; not collected by pytest.

    checkpoint_probe.py straight DIR OUT.npz            20 steps in one go
    checkpoint_probe.py split DIR OUT.npz               8 steps, then a restart from the
                                                        step-8 checkpoint to step 20
    checkpoint_probe.py resume CHECKPOINT DIR OUT.npz   restart from CHECKPOINT to step 20
    checkpoint_probe.py snapshot DIR                    analytic fields, snapshot at stride 3

OUT.npz holds the gathered final state, t, dt, step and the rank count.
"""
import os
import sys

import numpy as np

from shearmix.solver.case import case_from_dict  # noqa: E402
from shearmix.solver.compute.parallel import world  # noqa: E402
from shearmix.solver.files.checkpoint import FOLDER, checkpoint_path  # noqa: E402
from shearmix.solver.run.restart import apply, check  # noqa: E402
from shearmix.solver.run.simulation import Simulation  # noqa: E402

STEPS, FIRST = 20, 8


def probe_case(max_steps):
    """A nonlinear boussinesq case whose adaptive step changes from step to step."""
    return case_from_dict({
        "model": "boussinesq", "parameters": {"Re": 80.0, "B": 3.0, "Pr": 0.7},
        "grid": {"Nx": 16, "Ny": 16, "Nz": 8},
        "time": {"max_steps": max_steps, "dt": 0.02, "cfl": 0.5},
        "initial": {"kind": "laminar_noise", "amplitude": 0.3, "seed": 5},
        "output": {"diagnostics_every": 4, "progress_every": 1000},
        "compute": {"fftw_effort": "estimate", "wisdom": ""}})


def gather(comm, local):
    if comm.size == 1:
        return local
    parts = comm.comm.gather(local, root=0)
    return np.concatenate(parts, axis=-2) if comm.rank == 0 else None


def save(sim, out):
    full = gather(sim.comm, sim.state.copy())
    if sim.comm.rank == 0:
        np.savez(out, state=full, t=sim.t, dt=sim.dt, step=sim.step_count, size=sim.comm.size)


def run(case, directory, restart_from=None):
    comm = world()
    sim = Simulation(case, comm, initial=restart_from is None)
    if restart_from:
        apply(sim, restart_from, check(restart_from, case, comm))
    # run(append=True) cuts the folder's time series back to the checkpoint itself
    code = sim.run(output=directory, append=restart_from is not None, log=lambda m: None)
    assert code == 0, code
    return sim


def snapshot(directory):
    from shearmix.solver.files.snapshots import write_snapshot
    comm = world()
    case = case_from_dict({"model": "lowpe", "parameters": {"Re": 50.0, "BPe": 2.0},
                           "grid": {"Nx": 16, "Ny": 16, "Nz": 8}, "time": {"max_steps": 1},
                           "compute": {"fftw_effort": "estimate", "wisdom": ""}})
    sim = Simulation(case, comm, initial=False)
    x, y, z = sim.grid.physical_coordinates()
    one = np.ones(sim.grid.physical_shape)
    kx = 2 * np.pi / case.Lx
    sim.set_physical(np.sin(2 * y) * np.cos(z) * one, np.cos(x) * one,
                     np.cos(kx * x) * np.sin(y) * one)
    os.makedirs(directory, exist_ok=True)
    write_snapshot(sim, directory, single=False, stride=3)


if __name__ == "__main__":
    mode = sys.argv[1]
    if mode == "straight":
        save(run(probe_case(STEPS), sys.argv[2]), sys.argv[3])
    elif mode == "split":
        run(probe_case(FIRST), sys.argv[2])
        ckpt = checkpoint_path(os.path.join(sys.argv[2], FOLDER), FIRST)
        save(run(probe_case(STEPS - FIRST), sys.argv[2], ckpt), sys.argv[3])
    elif mode == "resume":
        save(run(probe_case(STEPS - FIRST), sys.argv[3], sys.argv[2]), sys.argv[4])
    elif mode == "snapshot":
        snapshot(sys.argv[2])
    else:
        raise SystemExit(f"unknown mode {mode}")
