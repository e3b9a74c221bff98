"""The run's time series: one HDF5 file, one growing 1-D dataset per quantity.

``<run folder>/timeseries.h5`` holds a float64 dataset per name of
:data:`solver.diagnostics.SERIES_NAMES` and root attributes ``case`` (the full
case as YAML), ``version``, ``model`` and ``convention``. Rank 0 writes; each
record is flushed so a crash loses at most the record being written.
"""
from __future__ import annotations

import time

import h5py
import numpy as np

from .version import __version__

SERIES_FILE = "timeseries.h5"


class TimeSeriesWriter:
    """Append records to ``timeseries.h5`` (call on rank 0 only)."""

    def __init__(self, path: str, case, names, append: bool = False):
        self.path = path
        self.names = tuple(names)
        self.fh = h5py.File(path, "a" if append else "w")
        attrs = self.fh.attrs
        if not append or "version" not in attrs:
            attrs["case"] = case.to_yaml()
            attrs["version"] = __version__
            attrs["model"] = case.model
            attrs["convention"] = case.convention
            attrs["created"] = time.strftime("%Y-%m-%dT%H:%M:%S%z")
        for name in self.names:
            if name not in self.fh:
                self.fh.create_dataset(name, shape=(0,), maxshape=(None,), dtype="f8",
                                       chunks=(1024,))

    def append(self, record: dict) -> None:
        for name in self.names:
            ds = self.fh[name]
            n = ds.shape[0]
            ds.resize((n + 1,))
            ds[n] = float(record.get(name, np.nan))
        self.fh.flush()

    def close(self) -> None:
        if self.fh:
            self.fh.close()
            self.fh = None


def read_series(path: str) -> dict:
    """All datasets of a time-series file as arrays, plus its attributes under ``'attrs'``."""
    with h5py.File(path, "r") as fh:
        out = {name: fh[name][()] for name in fh}
        out["attrs"] = dict(fh.attrs)
    return out
