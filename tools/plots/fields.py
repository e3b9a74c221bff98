"""Velocity fields of a run for figures: from its newest snapshot, else its newest checkpoint.

Snapshots (``<run>/snapshots/snap_<step>.h5``, solver/files/snapshots.py) hold the
physical fields as ``(nz, ny, nx)`` arrays, possibly strided; they are read
as they are and transposed to the engine's ``(x, y, z)`` order.

Checkpoints (``<run>/checkpoints/chk_<step>.h5``) are read with the solver's own
reader (:func:`shearmix.solver.files.checkpoint.read_fields`, which checks every
column's checksum): the Craya-Herring amplitudes ``a``, ``p`` as normalised
coefficients, ``f(x) = sum_k f_k exp(i k.x)``. The Cartesian components follow from
:meth:`shearmix.solver.physics.basis.CrayaHerring.to_cartesian` on a one-rank grid, and the
physical field is ``N * irfftn(f_k)`` (numpy's inverse carries ``1/N``).
Only complete files (root attribute ``complete == 1``) are used.
"""
from __future__ import annotations

import glob
import os
import re

import h5py
import numpy as np

__all__ = ["FieldsNotFound", "run_fields", "fields_from_snapshot", "fields_from_checkpoint"]


class FieldsNotFound(ValueError):
    """A run folder without a usable snapshot or checkpoint (one-line message)."""


def _newest(pattern):
    found = []
    for path in glob.glob(pattern):
        m = re.search(r"_(\d+)\.h5$", path)
        if m:
            found.append((int(m.group(1)), path))
    for _, path in sorted(found, reverse=True):
        try:
            with h5py.File(path, "r") as fh:
                if fh.attrs.get("complete") == 1:
                    return path
        except OSError:
            continue  # being written or damaged: try an older one
    return None


def _attr(fh, name):
    v = fh.attrs[name]
    return v.decode() if isinstance(v, bytes) else v


def fields_from_snapshot(path):
    """``{'u', 'w'}`` as ``(x, y, z)`` arrays, the lengths, ``t`` and a label."""
    with h5py.File(path, "r") as fh:
        u = fh["u"][()].transpose(2, 1, 0)
        w = fh["w"][()].transpose(2, 1, 0)
        lengths = tuple(float(x) for x in fh.attrs["lengths"])
        t = float(fh.attrs["t"])
    return {"u": u, "w": w, "lengths": lengths, "t": t, "source": path}


def fields_from_checkpoint(path):
    """As :func:`fields_from_snapshot`, from a checkpoint's spectral state.

    Raises :class:`shearmix.solver.files.checkpoint.CheckpointError` (one line) for a
    damaged or incomplete file.
    """
    from shearmix.solver.files.checkpoint import read_checkpoint_header, read_fields
    from shearmix.solver.grid import Grid
    from shearmix.solver.physics.basis import CrayaHerring
    header = read_checkpoint_header(path)
    shape = tuple(int(n) for n in header["grid"])
    lengths = tuple(float(x) for x in header["lengths"])
    t = float(header["t"])
    grid = Grid(shape, lengths)
    data = read_fields(path, header, grid, ["a", "p"])
    a, p = data["a"], data["p"]
    basis = CrayaHerring(grid)
    n = grid.npoints
    out = {}
    comp = np.empty(grid.spectral_shape, complex)
    for i, name in ((0, "u"), (2, "w")):
        basis.to_cartesian(a, p, i, comp)
        out[name] = n * np.fft.irfftn(comp, s=shape, axes=(0, 1, 2))
    return {**out, "lengths": lengths, "t": t, "source": path}


def run_fields(run_dir):
    """Newest complete snapshot of ``run_dir``, else its newest complete checkpoint.

    Raises
    ------
    FieldsNotFound
    """
    snap = _newest(os.path.join(run_dir, "snapshots", "snap_*.h5"))
    if snap:
        return fields_from_snapshot(snap)
    chk = _newest(os.path.join(run_dir, "checkpoints", "chk_*.h5"))
    if chk:
        return fields_from_checkpoint(chk)
    raise FieldsNotFound(f"{run_dir}: no complete snapshot or checkpoint to take slices from; "
                         "set output.snapshot_every or output.checkpoint_every in the case")
