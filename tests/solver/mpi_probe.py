"""Run under mpiexec by tests/solver/test_mpi.py (not collected by pytest).

    mpi_probe.py fft OUT.npz TRANSPOSE          distributed FFT vs numpy.fft on the whole grid
    mpi_probe.py steps MODEL N OUT.npz PATHS    N steps of a nonlinear case along each path
                                                (comma-separated PASS/TRANSPOSE/KERNELS, the
                                                compute.* keys); gathered states
"""
import sys

import numpy as np

from shearmix.solver.case import case_from_dict  # noqa: E402
from shearmix.solver.compute import kernels, roundtrip  # noqa: E402
from shearmix.solver.compute.parallel import world  # noqa: E402
from shearmix.solver.compute.phaseclock import PhaseClock  # noqa: E402
from shearmix.solver.compute.roundtrip import RoundTrip  # noqa: E402
from shearmix.solver.compute.transforms import SlabTransform  # noqa: E402
from shearmix.solver.grid import Grid  # noqa: E402
from shearmix.solver.run.simulation import Simulation  # noqa: E402


def gather_spectral(comm, local):
    """Global spectral array (..., Nx, Ny, Nzc) on rank 0, from ky-slabs."""
    if comm.size == 1:
        return local
    parts = comm.comm.gather(local, root=0)
    return np.concatenate(parts, axis=-2) if comm.rank == 0 else None


def check_fft(out, transpose):
    comm = world()
    shape = (12, 8, 10)
    grid = Grid(shape, (1.0, 2.0, 3.0), comm.rank, comm.size)
    fft = SlabTransform(grid, comm, effort="estimate", transpose=transpose)
    # three fields back to back, so that the shared-memory path uses both of its
    # arrays in turn and then the first again
    fields = [np.random.default_rng(seed).standard_normal(shape) for seed in (7, 8, 9)]
    specs, phys = [], []
    for field in fields:  # the same on every rank
        p = fft.empty_physical()
        p[...] = field[grid.x_start:grid.x_start + grid.nx_local]
        phys.append(p)
        specs.append(fft.forward(p, fft.empty_spectral()))
    fulls = [gather_spectral(comm, s.copy()) for s in specs]
    # the band-pruned forward agrees inside the 2/3-rule band
    err_band = 0.0
    for p, spec in zip(phys, specs):
        band = fft.forward_band(p, fft.empty_spectral())
        diff = np.abs(band - spec)[grid.dealias]
        err_band = max(err_band, comm.max(float(diff.max() if diff.size else 0.0)))
    err_back = 0.0
    for p, spec, field in zip(phys, specs, fields):
        spec /= field.size
        back = fft.inverse(spec, fft.empty_physical())
        err_back = max(err_back, comm.max(float(np.abs(back - p).max())))
    trip, err_trip = check_round_trip(comm, grid, fft, phys, fields)
    unused_change = check_trip_leaves_unused_rows(comm, grid, fft, phys, trip)
    # with Alltoall transposes the round trip claims no blocks: -1 if it has no counter
    counter = (check_counter(comm) if fft.transpose.kind == "shared"
               else -1 if getattr(fft.transpose, "counter", None) is None else 0)
    if comm.rank == 0:
        err = max(np.abs(full - np.fft.rfftn(f)).max() / np.abs(np.fft.rfftn(f)).max()
                  for full, f in zip(fulls, fields))
        np.savez(out, err_forward=err, err_inverse=err_back, err_band=err_band, size=comm.size,
                 err_round_trip=err_trip, counter=counter, unused_change=unused_change,
                 transpose=fft.transpose.kind)


def check_counter(comm):
    """1 if claims from a node counter are unique and complete on both slots, after
    a reset too; 0 if not; -1 without shared memory (no counter)."""
    counter = comm.node_counter(2)
    if counter is None:
        return -1
    ok = True
    for slot in (0, 1, 0):
        got = [counter.fetch_add(slot) for _ in range(50 + 7 * comm.rank)]
        every = comm.gather(got)
        if comm.rank == 0:
            flat = sorted(x for g in every for x in g)
            ok = ok and flat == list(range(len(flat)))
        comm.barrier()
        if comm.rank == 0:
            counter.reset(slot)
        comm.barrier()
    counter.close()
    counter.close()   # idempotent; the exit handler calls it again
    return int(comm.bcast(ok))


def _products(blocks):
    u, v, w = blocks[0], blocks[1], blocks[2]
    blocks[3][...] = u * v
    blocks[4][...] = u * u - w * w
    np.multiply(v, w, out=w)


def whole_arrays_trip(trip, inputs, outputs, pointwise):
    """A round trip from and into whole spectral arrays (chunks copied out and back)."""
    nkz = trip.fft.grid.nz_kept

    def start(chunks, lo, hi):
        for chunk, spec in zip(chunks, inputs):
            np.copyto(chunk, spec[:, lo:hi, :nkz])

    def finish(chunks, lo, hi):
        for chunk, spec in zip(chunks, outputs):
            np.copyto(spec[:, lo:hi, :nkz], chunk)

    trip(inputs, outputs, pointwise, finish, start)


def check_round_trip(comm, grid, fft, phys, fields):
    """Three round trips in a row (the shared arrays reused, the node counter's two
    slots in turn), after plain transforms, in blocks of at most two x-planes;
    the trip and the relative error inside the band on rank 0."""
    nx, ny, nz = grid.shape
    roundtrip.BLOCK_BYTES = 2 * ny * nz * 8
    trip = RoundTrip(fft, 5)
    nkz = grid.nz_kept
    cut = []
    cy = grid.cutoff[1]
    for f in fields:   # inputs zero outside the kept ky; past the kz cutoff unread
        full = np.fft.rfftn(f)
        full[:, :, nkz:] = 0
        full[:, cy + 1:ny - cy, :] = 0
        cut.append(np.fft.irfftn(full, s=f.shape, axes=(0, 1, 2)))
    u, v, w = cut
    expected = [np.fft.rfftn(f) for f in (u, v, v * w, u * v, u * u - w * w)]
    keep = Grid(grid.shape, grid.lengths).dealias
    err = 0.0
    for _ in range(3):
        specs = []
        for p in phys:
            s = fft.forward(p, fft.empty_spectral())
            s /= p.size * comm.size
            s[:, ~grid.keep_y, :] = 0   # inputs are zero outside the kept ky
            s[:, :, nkz:] = 1e3   # never read
            specs.append(s)
        outs = specs + [fft.empty_spectral() for _ in range(2)]
        whole_arrays_trip(trip, specs, outs, _products)
        for got, ref in zip(outs, expected):
            full = gather_spectral(comm, got.copy())
            if comm.rank == 0:
                keep3 = np.broadcast_to(keep, ref.shape)
                err = max(err, np.abs(full - ref)[keep3].max() / np.abs(ref).max())
    return trip, err


def check_trip_leaves_unused_rows(comm, grid, fft, phys, trip):
    """A round trip of 3 fields in a trip made for 5 (check_round_trip): the
    largest change it makes to the rows of fields 4 and 5 (0: it transforms its
    own fields only), twice (both counter slots); 1 if the ranks' work (phase
    clock) does not add up to one rank's."""
    nkz = grid.nz_kept
    change = 0.0
    for _ in range(2):
        specs = []
        for p in phys:
            s = fft.forward(p, fft.empty_spectral())
            s[:, ~grid.keep_y, :] = 0
            s[:, :, nkz:] = 0
            specs.append(s)
        unused = trip.plan.rows[3:]
        for rows in unused:
            rows[:, :, :nkz] = 5.0 + 1.0j
        comm.barrier()
        clock = fft.clock = PhaseClock()
        whole_arrays_trip(trip, specs, specs, _products)
        fft.clock = None
        for rows in unused:
            change = max(change, comm.max(float(np.abs(rows[:, :, :nkz] - (5.0 + 1.0j)).max())))
        # the ranks' work adds up to that of one rank: 3 fields in and out
        columns = int(Grid(grid.shape, grid.lengths).keep_y.sum()) * nkz
        for phase, whole in (("yz inverse", 3 * grid.shape[0]), ("yz forward", 3 * grid.shape[0]),
                             ("x inverse", 3 * columns), ("x forward", 3 * columns)):
            if comm.sum(clock.work.get(phase, 0)) != whole:
                change = max(change, 1.0)
    return change


def run_steps(model, nsteps, out, paths, tracers=False):
    """One simulation per path (``PASS/TRANSPOSE/KERNELS``), in turn in this job;
    saves ``state_<path>``, ``t_<path>`` and what each simulation really used
    (``used_<path>``: blocks or whole, shared, alltoall or single, numba or numpy)."""
    comm = world()
    params = {"lowpe": {"Re": 80.0, "BPe": 3.0},
              "boussinesq": {"Re": 80.0, "B": 3.0, "Pr": 0.7}}[model]
    saved = {"size": comm.size}
    for path in paths.split(","):
        product_pass, transpose, backend = path.split("/")
        case = case_from_dict({
            "model": model, "parameters": params,
            "grid": {"Nx": 16, "Ny": 16, "Nz": 8},
            "time": {"t_end": 10.0, "dt": 0.02, "cfl": 0.5},
            "initial": {"kind": "laminar_noise", "amplitude": 0.2, "seed": 11},
            **({"tracers": {"s1": {"Sc": 1.0, "initial": {"kind": "mode", "nx": 1, "nz": 1}},
                            "s10": {"Pe": 800.0, "gradient": 0.5}}} if tracers else {}),
            "compute": {"fftw_effort": "estimate", "wisdom": "", "product_pass": product_pass,
                        "transpose": transpose, "kernels": backend}})
        sim = Simulation(case, comm)
        used = ("blocks" if sim.tendency.blocks else "whole",
                "single" if comm.size == 1 else
                sim.fft.transpose.kind,
                "numba" if kernels.use_numba() else "numpy")
        sim.add_mode(1, 1, 1, "poloidal", 0.2)
        for _ in range(nsteps):
            sim.advance()
        full = gather_spectral(comm, sim.state.copy())
        diag = sim.diagnostics()  # reductions over ranks: the same numbers on any count
        saved.update({f"state_{path}": full, f"t_{path}": sim.t, f"used_{path}": "/".join(used),
                      f"diag_{path}": np.array([diag[k] for k in sorted(diag)]),
                      "diag_keys": np.array(sorted(diag))})
    if comm.rank == 0:
        np.savez(out, **saved)


if __name__ == "__main__":
    if sys.argv[1] == "fft":
        check_fft(sys.argv[2], sys.argv[3])
    else:
        run_steps(sys.argv[2], int(sys.argv[3]), sys.argv[4], sys.argv[5],
                  tracers=len(sys.argv) > 6 and sys.argv[6] == "tracers")
