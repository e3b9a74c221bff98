"""Checkpoint files: a run's whole state at a step boundary, in one HDF5 file.

``<run folder>/checkpoints/chk_<step, 9 digits>.h5``; the layout does not
depend on the rank count that wrote it. Root attributes: the common header of
:mod:`shearmix.solver.files.fileheader` (case, version, model, ``t``, ``step``, ``dt``, grid,
history, completion mark). Datasets, for each field ``f`` of the model
(``a``, ``p`` and, for boussinesq, ``T``):

``state/f``  float64 ``(Nx, Ny, Nz/2+1, 2)``
    the Fourier coefficients ``f_k`` of ``f(x) = sum_k f_k exp(i k.x)`` in the
    spectral layout of :mod:`shearmix.solver.grid` (axis 0: ``n_x mod Nx``, axis 1:
    ``n_y mod Ny``, axis 2: ``n_z >= 0``), last axis (real, imaginary).
    ``a`` and ``p`` are the Craya-Herring amplitudes of :mod:`shearmix.solver.physics.basis`.
``crc32/f``  uint32 ``(Ny,)``
    CRC-32 (zlib) of the little-endian bytes of ``state/f[:, j]`` for each
    ``j``: a per-column checksum, so any rank count computes and checks it
    on its own columns, and a damaged file is told from a complete one.

The state, ``t``, ``step`` and ``dt`` (the last full step, from which the
adaptive step continues) are all exact continuation needs: the stepper keeps
nothing else between steps.

Writing goes through :func:`shearmix.solver.files.slabfile.write_global` (temporary name,
rank-ordered slabs, ``fsync``, rename). :func:`prune` removes older files only
after a newer one is complete.
"""
from __future__ import annotations

import os
import re
import time
import zlib

import numpy as np

from shearmix.solver.files.fileheader import HeaderError, common_attributes, read_header
from shearmix.solver.files.slabfile import prepare_folder, write_global
from shearmix.solver.run.outputs import EveryTime, Output

FOLDER = "checkpoints"
_NAME = re.compile(r"^chk_(\d{9,})\.h5$")


class CheckpointError(ValueError):
    """A checkpoint that cannot be used; the message is one line naming the file."""


def checkpoint_path(directory: str, step: int) -> str:
    return os.path.join(directory, f"chk_{step:09d}.h5")


def _columns_crc(block: np.ndarray) -> np.ndarray:
    """CRC-32 of ``block[:, j]`` for each ``j`` of a ``(nx, ncols, nzc, 2)`` float64 block."""
    block = block.astype("<f8", copy=False)
    return np.array([zlib.crc32(np.ascontiguousarray(block[:, j]).data)
                     for j in range(block.shape[1])], dtype=np.uint32)


def _local_block(sim, i: int) -> np.ndarray:
    g = sim.grid
    return sim.state[i].view(np.float64).reshape(g.shape[0], g.ny_local, g.nzc, 2)


def write_checkpoint(sim, directory: str) -> str:
    """Write ``sim``'s state to ``directory`` (collective); return the file's path.

    Raises :class:`shearmix.solver.files.slabfile.WriteFailed` (on every rank) if it fails;
    a previous file of the same name is then left as it was.
    """
    g = sim.grid
    nx, ny, _ = g.shape
    path = checkpoint_path(directory, sim.step_count)
    # one set of values for all ranks (the mpio driver writes attributes collectively)
    attrs = sim.comm.bcast(common_attributes(sim, "checkpoint", sim.fields))

    def create(fh):
        for key, value in attrs.items():
            fh.attrs[key] = value
        for name in sim.fields:
            fh.create_dataset(f"state/{name}", shape=(nx, ny, g.nzc, 2), dtype="<f8")
            fh.create_dataset(f"crc32/{name}", shape=(ny,), dtype="<u4")

    def fill(fh):
        y0, y1 = g.y_start, g.y_start + g.ny_local
        for i, name in enumerate(sim.fields):
            block = _local_block(sim, i)
            fh[f"state/{name}"][:, y0:y1] = block
            fh[f"crc32/{name}"][y0:y1] = _columns_crc(block)

    def finish(fh):
        fh.attrs["complete"] = 1

    write_global(sim.comm, path, create, fill, finish)
    return path


def read_checkpoint_header(path: str) -> dict:
    """Header of a checkpoint, checked to be complete and whole (no field data read)."""
    try:
        h = read_header(path, "checkpoint")
    except HeaderError as exc:
        raise CheckpointError(str(exc)) from None
    nx, ny, nz = h["grid"]
    for name in h["fields"]:
        for ds, shape in ((f"state/{name}", (nx, ny, nz // 2 + 1, 2)), (f"crc32/{name}", (ny,))):
            if h["datasets"].get(ds) != shape:
                got = h["datasets"].get(ds)
                raise CheckpointError(f"{path}: damaged checkpoint: dataset {ds} "
                                      f"{'is missing' if got is None else f'has shape {got}'}, "
                                      f"expected {shape}")
    return h


def _damaged(path, name, j):
    return CheckpointError(f"{path}: damaged checkpoint: checksum mismatch in state/{name} at "
                           f"ky column {j}; restart from an older checkpoint")


def read_fields(path: str, header: dict, grid, names) -> dict:
    """This rank's spectral slabs on ``grid`` of the fields ``names`` stored in ``path``.

    On the grid the file was written on, the coefficients come back bit for
    bit, whatever the rank counts. On another grid (same box) a mode is
    copied exactly when both grids keep it after 2/3 dealiasing
    (``|n| <= min((N_old-1)//3, (N_new-1)//3)`` in each direction) and set to
    zero otherwise: spectral truncation or zero padding. Every column read is
    checked against its CRC. Not collective; raises :class:`CheckpointError`.
    """
    import h5py
    old = tuple(header["grid"])
    same = old == grid.shape
    if same:
        cols = list(range(grid.y_start, grid.y_start + grid.ny_local))
    else:
        cut = [min((a - 1) // 3, (b - 1) // 3) for a, b in zip(old, grid.shape)]
        ny_new = grid.ny_index.ravel()
        keep_y = np.nonzero(np.abs(ny_new) <= cut[1])[0]
        old_y = ny_new[keep_y] % old[1]
        order = np.argsort(old_y)  # h5py reads a list of columns in increasing order
        keep_y, old_y = keep_y[order], old_y[order]
        cols = [int(j) for j in old_y]
        nx_new = grid.nx_index.ravel()
        keep_x = np.nonzero(np.abs(nx_new) <= cut[0])[0]
        old_x = nx_new[keep_x] % old[0]
        nz_keep = cut[2] + 1
    out = {}
    try:
        with h5py.File(path, "r") as fh:
            for name in names:
                crc = fh[f"crc32/{name}"][()]
                if same:
                    block = fh[f"state/{name}"][:, cols[0]:cols[-1] + 1]
                elif cols:
                    block = fh[f"state/{name}"][:, cols]
                else:
                    block = np.zeros((old[0], 0, old[2] // 2 + 1, 2))
                sums = _columns_crc(block)
                for pos, j in enumerate(cols):
                    if sums[pos] != crc[j]:
                        raise _damaged(path, name, j)
                coeffs = np.ascontiguousarray(block).view(np.complex128)[..., 0]
                if same:
                    out[name] = coeffs
                    continue
                local = np.zeros(grid.spectral_shape, dtype=np.complex128)
                local[np.ix_(keep_x, keep_y, np.arange(nz_keep))] = \
                    coeffs[np.ix_(old_x, np.arange(len(cols)), np.arange(nz_keep))]
                out[name] = local
    except OSError as exc:
        raise CheckpointError(f"{path}: damaged checkpoint, reading failed "
                              f"({' '.join(str(exc).split())[:160]})") from None
    return out


def verify(path: str, columns_at_once: int = 64) -> dict:
    """Check a whole checkpoint (header, shapes, every checksum) on one process.

    Reads ``columns_at_once`` ky-columns at a time, never the whole field.
    Returns the header; raises :class:`CheckpointError` naming the problem.
    """
    import h5py
    h = read_checkpoint_header(path)
    ny = h["grid"][1]
    try:
        with h5py.File(path, "r") as fh:
            for name in h["fields"]:
                crc = fh[f"crc32/{name}"][()]
                for j0 in range(0, ny, columns_at_once):
                    j1 = min(ny, j0 + columns_at_once)
                    bad = np.nonzero(_columns_crc(fh[f"state/{name}"][:, j0:j1]) != crc[j0:j1])[0]
                    if bad.size:
                        raise _damaged(path, name, j0 + int(bad[0]))
    except OSError as exc:
        raise CheckpointError(f"{path}: damaged checkpoint, reading failed "
                              f"({' '.join(str(exc).split())[:160]})") from None
    return h


def list_checkpoints(directory: str) -> list:
    """``(step, path)`` of the finished-looking checkpoint files in ``directory``, by step.

    Temporary files of writes that never completed are not listed.
    """
    try:
        names = os.listdir(directory)
    except OSError:
        return []
    found = []
    for name in names:
        m = _NAME.match(name)
        if m:
            found.append((int(m.group(1)), os.path.join(directory, name)))
    return sorted(found)


def latest(directory: str, skipped: list | None = None) -> str | None:
    """Newest checkpoint in ``directory`` whose header is complete and whole, or None.

    Files that fail the header check are passed over (newest first), each
    with its one-line reason appended to ``skipped``.
    """
    for _, path in reversed(list_checkpoints(directory)):
        try:
            read_checkpoint_header(path)
            return path
        except CheckpointError as exc:
            if skipped is not None:
                skipped.append(str(exc))
    return None


def set_aside(path: str, why: str) -> str:
    """Rename ``path`` to ``path.<why>`` (``damaged``, ``superseded``): out of every
    listing, never deleted. Returns the new name (a free one: ``.<why>.2``, ...)."""
    target, n = f"{path}.{why}", 1
    while os.path.exists(target):
        n += 1
        target = f"{path}.{why}.{n}"
    os.replace(path, target)
    return target


def prune(directory: str, keep: int, newest: str) -> list:
    """Keep the ``keep`` newest good checkpoints; remove older ones and stale temporaries.

    ``newest`` is the file just completed; nothing is touched unless it
    exists. A file whose header fails its checks does not count among the
    kept: it is set aside as ``*.damaged``. Returns the removed paths (set
    aside ones included). Call on one rank.
    """
    if not os.path.exists(newest):
        return []
    removed = []
    kept = 0
    for _, path in reversed(list_checkpoints(directory)):
        if os.path.abspath(path) != os.path.abspath(newest):
            try:
                read_checkpoint_header(path)
            except CheckpointError:
                try:
                    set_aside(path, "damaged")
                    removed.append(path)
                except OSError:
                    pass
                continue
        if kept < keep or os.path.abspath(path) == os.path.abspath(newest):
            kept += 1
            continue
        try:
            os.remove(path)
            removed.append(path)
        except OSError:
            pass  # an old file we cannot remove does no harm
    for name in os.listdir(directory):
        if name.startswith(".chk_") and name.endswith(".tmp"):
            try:  # left by a write that was killed; its run is not writing any more
                os.remove(os.path.join(directory, name))
                removed.append(os.path.join(directory, name))
            except OSError:
                pass
    return removed


class CheckpointOutput(Output):
    """Checkpoints every ``every`` of simulated time and/or ``minutes`` of wall clock,
    and when the run finishes or stops early; the newest ``keep`` are kept.

    A checkpoint is written at the first step boundary at or after each
    multiple of ``every`` (the adaptive step does not land on them), and when
    ``minutes`` have passed since the last one (or the start). Put it last in
    the list of outputs so that whatever else is due at that boundary is
    already written when the checkpoint is.
    """

    def __init__(self, every: float | None = None, minutes: float | None = None,
                 keep: int = 3):
        self.cadence = EveryTime(every) if every else None
        self.minutes = minutes
        self.keep = int(keep)
        self.last_step = None
        self.last_path = None
        self.write_seconds = 0.0

    def open(self, sim, out_dir, append):
        super().open(sim, out_dir, append)
        self.directory = os.path.join(out_dir, FOLDER)
        # a replaced run's checkpoints are gone already (shearmix.solver.run.rundir)
        prepare_folder(sim.comm, self.directory, "checkpoints")
        if self.cadence is not None:
            self.cadence.start(sim.t, now=False)
        self.last_wall = time.monotonic()
        # the state a restart starts from is already on disk
        self.last_step = sim.step_count if append else None

    def due(self, sim):
        if self.cadence is not None and self.cadence(sim):
            return True
        if self.minutes is not None:
            waited = sim.comm.max(time.monotonic() - self.last_wall)  # one clock for all ranks
            return waited >= 60.0 * self.minutes
        return False

    def write(self, sim):
        start = time.monotonic()
        path = write_checkpoint(sim, self.directory)
        if sim.comm.rank == 0:
            prune(self.directory, self.keep, path)
        self.last_step, self.last_path = sim.step_count, path
        self.last_wall = time.monotonic()
        self.write_seconds = self.last_wall - start
        if self.cadence is not None:
            self.cadence.advance(sim.t)

    def close(self, sim, reason):
        if reason in ("finished", "stopped") and self.last_step != sim.step_count:
            self.write(sim)


def checkpoint_outputs(case) -> list:
    """The checkpoint output of a case: always one, so a run ends with a checkpoint."""
    return [CheckpointOutput(case.get("output.checkpoint_every"),
                             case.get("output.checkpoint_minutes"),
                             case.get("output.checkpoint_keep"))]
