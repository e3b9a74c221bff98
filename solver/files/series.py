"""The run's time series: one HDF5 file, one growing 1-D dataset per quantity.

``<run folder>/timeseries.h5`` holds a float64 dataset per name of
:data:`shearmix.solver.physics.diagnostics.SERIES_NAMES` and root attributes ``case`` (the full
case as YAML), ``version``, ``model`` and ``convention``. Rank 0 writes.

Segments: the records between two changes of the physics or the resolution
(:data:`SEGMENT_KEYS`, as a restart may change them). The root attributes
``segment_steps``, ``segment_times``, ``segment_cases`` and
``segment_versions`` hold, per segment, the step and time of its first
record, its case (YAML) and the program version that began it; the root
``case`` stays the first segment's. A file without them (written before
segments were recorded) is one segment, its case the root ``case``.
Records are buffered and written together (every :attr:`TimeSeriesWriter.max_wait`
seconds of wall clock, every :attr:`TimeSeriesWriter.max_records` records, before
each checkpoint and at the end): a crash loses at most those, and a record
every step costs little.
"""
from __future__ import annotations

import time

import h5py
import numpy as np

from shearmix.solver.version import __version__

SERIES_FILE = "timeseries.h5"

#: Case keys (and key prefixes ending in '.') whose change starts a new segment. A
#: tracer added, removed or changed at a restart starts one too: its statistics
#: begin there (the flow's may be averaged across with ``--segment all``).
SEGMENT_KEYS = ("model", "parameters.", "forcing.", "grid.", "box.", "tracers.")
_SEGMENT_ATTRS = ("segment_steps", "segment_times", "segment_cases", "segment_versions")


def stamp_provenance(attrs, case, **extra) -> None:
    """Record the full case, the program version, the model and the convention."""
    attrs["case"] = case.to_yaml()
    attrs["version"] = __version__
    attrs["model"] = case.model
    attrs["convention"] = case.convention
    for key, value in extra.items():
        attrs[key] = value
    attrs["created"] = time.strftime("%Y-%m-%dT%H:%M:%S%z")


class TimeSeriesWriter:
    """Append records to ``timeseries.h5`` (call on rank 0 only)."""

    max_records = 256
    max_wait = 10.0  # seconds

    def __init__(self, path: str, case, names, append: bool = False):
        self.path = path
        self.names = tuple(names)
        self.pending: list = []
        self.last_flush = time.monotonic()
        self.fh = h5py.File(path, "a" if append else "w")
        attrs = self.fh.attrs
        if not append or "version" not in attrs:
            stamp_provenance(attrs, case)
        # a segment begins at the first record written with a changed case
        # (then the writer knows its step and time)
        self.new_segment = None
        segs = segments_of(attrs) or self._unrecorded()
        if not segs or segment_changes(segs[-1]["case"], case.to_yaml()):
            self.new_segment = case.to_yaml()
        # a column new in this segment (a tracer added at a restart) holds NaN
        # for the records before it, so every dataset keeps one entry per record
        have = int(self.fh["step"].shape[0]) if "step" in self.fh else 0
        for name in self.names:
            if name not in self.fh:
                self.fh.create_dataset(name, data=np.full(have, np.nan), maxshape=(None,),
                                       dtype="f8", chunks=(1024,))

    def _unrecorded(self) -> list:
        """A file from before segments, with records: they are one segment."""
        fh = self.fh
        if "step" not in fh or fh["step"].shape[0] == 0:
            return []
        return [{"step": int(fh["step"][0]), "t": float(fh["t"][0]),
                 "case": _text(fh.attrs["case"]), "version": _text(fh.attrs["version"])}]

    def append(self, record: dict) -> None:
        self.pending.append(record)
        if len(self.pending) >= self.max_records or \
                time.monotonic() - self.last_flush >= self.max_wait:
            self.flush()

    def flush(self) -> None:
        """Write the buffered records and flush the file."""
        self.last_flush = time.monotonic()
        if not self.pending or self.fh is None:
            return
        k = len(self.pending)
        if self.new_segment is not None:
            first = self.pending[0]
            if not segments_of(self.fh.attrs):
                _store_segments(self.fh.attrs, self._unrecorded())
            add_segment(self.fh.attrs, int(first["step"]), float(first["t"]), self.new_segment)
            self.new_segment = None
        # every column, also one no longer recorded (a tracer removed at a restart: NaN)
        for name in self.fh:
            ds = self.fh[name]
            n = ds.shape[0]
            ds.resize((n + k,))
            ds[n:] = np.array([float(r.get(name, np.nan)) for r in self.pending])
        self.pending = []
        self.fh.flush()

    def close(self) -> None:
        if self.fh:
            self.flush()
            self.fh.close()
            self.fh = None


def flat_keys(tree, prefix=""):
    """A nested case mapping as ``{dotted.key: value}``."""
    out = {}
    for key, value in (tree or {}).items():
        if isinstance(value, dict):
            out.update(flat_keys(value, f"{prefix}{key}."))
        else:
            out[f"{prefix}{key}"] = value
    return out


def segment_changes(old_yaml: str, new_yaml: str) -> dict:
    """``{key: [old, new]}`` for the :data:`SEGMENT_KEYS` that differ between two cases."""
    import yaml
    old, new = (flat_keys(yaml.safe_load(text) or {}) for text in (old_yaml, new_yaml))
    diff = {}
    for key in sorted(set(old) | set(new)):
        if any(key == k or (k.endswith(".") and key.startswith(k)) for k in SEGMENT_KEYS):
            if old.get(key) != new.get(key):
                diff[key] = [old.get(key), new.get(key)]
    return diff


def _text(v):
    return v.decode() if isinstance(v, bytes) else str(v)


def segments_of(attrs) -> list:
    """The segments recorded in a series file's root attributes, in order: dicts with
    ``step`` and ``t`` (of the first record), ``case`` (YAML) and ``version``. Empty
    when the file records none (an empty file, or one from before segments)."""
    if "segment_steps" not in attrs:
        return []
    steps, times, cases, versions = (list(np.atleast_1d(attrs[a])) for a in _SEGMENT_ATTRS)
    return [{"step": int(s), "t": float(t), "case": _text(c), "version": _text(v)}
            for s, t, c, v in zip(steps, times, cases, versions)]


def _store_segments(attrs, segs) -> None:
    if not segs:
        for a in _SEGMENT_ATTRS:
            if a in attrs:
                del attrs[a]
        return
    attrs["segment_steps"] = np.array([s["step"] for s in segs], dtype="i8")
    attrs["segment_times"] = np.array([s["t"] for s in segs], dtype="f8")
    text = h5py.string_dtype()
    attrs.create("segment_cases", np.array([s["case"] for s in segs], dtype=object), dtype=text)
    attrs.create("segment_versions", np.array([s["version"] for s in segs], dtype=object),
                 dtype=text)


def add_segment(attrs, step: int, t: float, case_yaml: str) -> None:
    """Record a segment beginning at ``step``, ``t``."""
    segs = segments_of(attrs)
    segs.append({"step": int(step), "t": float(t), "case": case_yaml, "version": __version__})
    _store_segments(attrs, segs)


def drop_segments_from(attrs, step: int) -> None:
    """Forget the segments beginning at ``step`` or later (their records were cut)."""
    _store_segments(attrs, [s for s in segments_of(attrs) if s["step"] < step])


def read_series(path: str) -> dict:
    """All datasets of a time-series file as arrays, plus its attributes under ``'attrs'``."""
    with h5py.File(path, "r") as fh:
        out = {name: fh[name][()] for name in fh}
        out["attrs"] = dict(fh.attrs)
    return out
