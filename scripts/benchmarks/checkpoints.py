"""Checkpoint write and read times and file sizes (run by ``scripts/bench_checkpoint``).

    mpiexec -n P python scripts/benchmarks/checkpoints.py [--size 128] [--models boussinesq lowpe]
                                                  [--repeats 3] [--dir DIR] [--json FILE]

For each model, a ``size^3`` state (laminar flow plus noise) is written
``--repeats`` times with :func:`shearmix.solver.files.checkpoint.write_checkpoint` (rank-ordered
slabs, checksums, ``fsync``, rename) and read back with
:func:`shearmix.solver.files.checkpoint.read_fields` on every rank (checksums of the columns
read are checked), the times being the slowest rank's, best and median of the
repeats. ``verify`` is the one-process full check of ``shearmix info
--verify``. The file was just written, so reads come from the page cache:
they show the cost of parsing and checksumming, not of the disk.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import tempfile
import time


def _case(model: str, n: int):
    from shearmix.solver.case import case_from_dict
    params = {"lowpe": {"Re": 400.0, "BPe": 1.0},
              "boussinesq": {"Re": 400.0, "B": 1.0, "Pr": 1.0}}[model]
    return case_from_dict({
        "name": f"bench-checkpoint-{model}-{n}", "model": model, "parameters": params,
        "grid": {"Nx": n, "Ny": n, "Nz": n}, "time": {"max_steps": 1},
        "initial": {"kind": "laminar_noise", "amplitude": 0.1},
        "compute": {"fftw_effort": "estimate", "wisdom": ""}})


def _timed(comm, work):
    comm.barrier()
    t0 = time.perf_counter()
    out = work()
    comm.barrier()
    return comm.max(time.perf_counter() - t0), out


def measure(model: str, n: int, repeats: int, directory: str) -> dict | None:
    """One model at ``n^3`` on the world communicator; the record on rank 0."""
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.files.checkpoint import (
        read_checkpoint_header,
        read_fields,
        verify,
        write_checkpoint,
    )
    from shearmix.solver.run.simulation import Simulation
    comm = world()
    sim = Simulation(_case(model, n), comm)
    writes, reads = [], []
    for _ in range(repeats):
        seconds, path = _timed(comm, lambda: write_checkpoint(sim, directory))
        writes.append(seconds)
        header = read_checkpoint_header(path)
        seconds, data = _timed(comm, lambda: read_fields(path, header, sim.grid, sim.fields))
        reads.append(seconds)
    for i, name in enumerate(sim.fields):  # what was read is what was written
        assert (data[name] == sim.state[i]).all()
    record = None
    if comm.rank == 0:
        t0 = time.perf_counter()
        verify(path)
        size = os.path.getsize(path)
        record = {"model": model, "size": n, "ranks": comm.size, "fields": len(sim.fields),
                  "bytes": size, "write_best_s": min(writes),
                  "write_median_s": statistics.median(writes), "read_best_s": min(reads),
                  "read_median_s": statistics.median(reads),
                  "verify_s": time.perf_counter() - t0,
                  "write_MiB_per_s": size / 2 ** 20 / statistics.median(writes)}
        os.remove(path)
    comm.barrier()
    return record


def main(argv=None) -> int:
    from shearmix.solver.compute.parallel import world
    parser = argparse.ArgumentParser(prog="checkpoint_bench", description=__doc__.split("\n")[0])
    parser.add_argument("--size", type=int, default=128)
    parser.add_argument("--models", nargs="+", default=["boussinesq", "lowpe"])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--dir", help="folder to write in (default: a new temporary folder)")
    parser.add_argument("--json", help="append the records to this JSON-lines file")
    args = parser.parse_args(argv)
    comm = world()
    made = None
    if args.dir:
        directory = args.dir
    elif comm.rank == 0:
        made = directory = tempfile.mkdtemp(prefix="shearmix-ckbench-", dir=".")
    else:
        directory = None
    directory = comm.bcast(directory)
    if comm.rank == 0:
        os.makedirs(directory, exist_ok=True)
    comm.barrier()
    for model in args.models:
        rec = measure(model, args.size, args.repeats, directory)
        if rec is None:
            continue
        print(f"{rec['size']}^3 {rec['model']:10s} {rec['ranks']} rank(s): "
              f"{rec['bytes'] / 2 ** 20:7.1f} MiB  write {rec['write_median_s']:.3f} s "
              f"(best {rec['write_best_s']:.3f}, {rec['write_MiB_per_s']:.0f} MiB/s)  "
              f"read {rec['read_median_s']:.3f} s (best {rec['read_best_s']:.3f})  "
              f"verify {rec['verify_s']:.3f} s", flush=True)
        if args.json:
            with open(args.json, "a", encoding="utf-8") as fh:
                fh.write(json.dumps(rec) + "\n")
    comm.barrier()
    if made and comm.rank == 0:
        shutil.rmtree(made, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
