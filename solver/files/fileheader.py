"""The header every checkpoint and snapshot carries, and reading it with one-line errors.

Root attributes of both kinds of file:

==============  ==========================================================
format          ``"shearmix checkpoint"`` or ``"shearmix snapshot"``
format_version  integer, :data:`FORMAT_VERSION` when written by this version
version         program version that wrote the file
case            the full case of the run segment that wrote it (YAML text)
model           ``boussinesq`` or ``lowpe``
fields          JSON list of the dataset names holding fields
t, step, dt     simulated time, step count, last full time step
grid            ``(Nx, Ny, Nz)`` of the run
lengths         ``(Lx, Ly, Lz)``
ranks           rank count of the run that wrote it
written         local date and time of writing
history         JSON list of events: the start of the run, then one per
                restart (time, step, file restarted from, rank counts,
                program versions, and every case key that changed as
                ``{key: [old, new]}``)
complete        1, written last (checkpoints: after every slab and checksum)
==============  ==========================================================

:func:`read_header` reads these without touching any field data.
"""
from __future__ import annotations

import json
import os
import time

import h5py
import numpy as np

from shearmix.solver.version import __version__

FORMAT_VERSION = 1
KINDS = {"checkpoint": "shearmix checkpoint", "snapshot": "shearmix snapshot"}


class HeaderError(ValueError):
    """A file that is missing, damaged, foreign or of the wrong kind (one-line message)."""


def now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%S%z")


def start_event(sim) -> dict:
    """History entry for a run that starts from its case's initial state."""
    return {"event": "start", "t": float(sim.t), "step": int(sim.step_count),
            "ranks": int(sim.comm.size), "version": __version__, "date": now(),
            "initial": sim.case.get("initial.kind")}


def history_of(sim) -> list:
    """The run's history; a run without one gets its start event."""
    if not getattr(sim, "history", None):
        sim.history = [start_event(sim)]
    return sim.history


def common_attributes(sim, kind: str, fields) -> dict:
    """Root attributes of a file of ``kind`` written from ``sim``'s current state."""
    return {"format": KINDS[kind], "format_version": FORMAT_VERSION, "version": __version__,
            "case": sim.case.to_yaml(), "model": sim.case.model,
            "fields": json.dumps(list(fields)), "t": float(sim.t),
            "step": int(sim.step_count), "dt": float(sim.dt),
            "grid": np.array(sim.grid.shape, dtype=np.int64),
            "lengths": np.array(sim.grid.lengths, dtype=np.float64),
            "ranks": int(sim.comm.size), "written": now(),
            "history": json.dumps(history_of(sim))}


def _plain(value):
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.ndarray):
        return tuple(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    return value


def read_header(path: str, kind: str | None = None) -> dict:
    """Root attributes of a checkpoint or snapshot (``kind`` to insist on one), decoded.

    Raises :class:`HeaderError` for a missing, unreadable, truncated, foreign,
    newer-format or (checkpoints) incomplete file. ``fields`` and ``history``
    come back as lists, ``grid`` and ``lengths`` as tuples; ``kind`` is added.
    """
    if not os.path.exists(path):
        raise HeaderError(f"{path}: no such file")
    if os.path.isdir(path):
        raise HeaderError(f"{path}: is a folder, not a checkpoint or snapshot file")
    try:
        with open(path, "rb"):
            pass
    except OSError as exc:
        raise HeaderError(f"{path}: cannot be read ({exc.strerror})") from None
    if not h5py.is_hdf5(path):
        raise HeaderError(f"{path}: not an HDF5 file, so not a shearmix checkpoint or snapshot")
    try:
        fh = h5py.File(path, "r")
    except OSError as exc:
        detail = " ".join(str(exc).split())
        what = "truncated" if "truncated" in detail else "damaged"
        raise HeaderError(f"{path}: {what} HDF5 file, cannot be opened ({detail[:160]})") from None
    with fh:
        attrs = {k: _plain(v) for k, v in fh.attrs.items()}
        datasets = _dataset_shapes(fh)
    found = attrs.get("format")
    names = {v: k for k, v in KINDS.items()}
    if found not in names:
        raise HeaderError(f"{path}: not a shearmix checkpoint or snapshot (HDF5 file without "
                          f"the 'format' attribute of one)")
    attrs["kind"] = names[found]
    if kind is not None and attrs["kind"] != kind:
        raise HeaderError(f"{path}: is a shearmix {attrs['kind']}, not a {kind}")
    if int(attrs.get("format_version", 0)) > FORMAT_VERSION:
        raise HeaderError(f"{path}: format version {attrs['format_version']} is newer than "
                          f"this program reads ({FORMAT_VERSION}); use a newer shearmix")
    missing = [k for k in ("case", "model", "fields", "t", "step", "grid", "lengths", "history")
               if k not in attrs]
    if missing:
        raise HeaderError(f"{path}: damaged {attrs['kind']}: attribute {missing[0]} is missing")
    if attrs.get("complete") != 1:
        raise HeaderError(f"{path}: incomplete {attrs['kind']} (no completion mark): it was "
                          "being written when its run stopped")
    attrs["fields"] = json.loads(attrs["fields"])
    attrs["history"] = json.loads(attrs["history"])
    attrs["datasets"] = datasets
    return attrs


def _dataset_shapes(fh) -> dict:
    out = {}

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            out[name] = tuple(obj.shape)
    fh.visititems(visit)
    return out
