"""The run's time series: one HDF5 file, one growing 1-D dataset per quantity.

``<run folder>/timeseries.h5`` holds a float64 dataset per name of
:data:`shearmix.solver.physics.diagnostics.SERIES_NAMES` and root attributes ``case`` (the full
case as YAML), ``version``, ``model`` and ``convention``. Rank 0 writes.
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
        for name in self.names:
            if name not in self.fh:
                self.fh.create_dataset(name, shape=(0,), maxshape=(None,), dtype="f8",
                                       chunks=(1024,))

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
        for name in self.names:
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


def read_series(path: str) -> dict:
    """All datasets of a time-series file as arrays, plus its attributes under ``'attrs'``."""
    with h5py.File(path, "r") as fh:
        out = {name: fh[name][()] for name in fh}
        out["attrs"] = dict(fh.attrs)
    return out
