"""The segments of a run's time series: the stretches between changes of the physics or grid.

A restart that changes the parameters, the forcing, the model, the grid, the box
or the tracers
begins a new segment (:mod:`shearmix.solver.files.series` records where and
with which case). Averages, fits and regime labels mean something only
within one segment; :func:`split` cuts the records of
:func:`shearmix.tools.analysis.summary.read_timeseries` into them and
:func:`choose` picks one (the last by default).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import yaml

from shearmix.solver.files.series import segment_changes, segments_of

__all__ = ["Segment", "split", "choose"]


@dataclass(frozen=True)
class Segment:
    """One segment of a series.

    Attributes
    ----------
    index : int
        0 for the first.
    step, t : int, float
        Step and time of its first record.
    case : dict
        Its case (parsed); ``case_yaml`` the text.
    version : str
        Program version that began it.
    changes : dict
        ``{key: [before, after]}`` against the previous segment (empty for the first).
    records : ndarray of bool
        Which records of the series belong to it.
    """

    index: int
    step: int
    t: float
    case: dict
    case_yaml: str
    version: str
    changes: dict
    records: np.ndarray

    def describe_changes(self) -> str:
        """``'parameters.Re 20 -> 25'`` (comma-separated), or ``''``."""
        return ", ".join(f"{k} {_show(a)} -> {_show(b)}" for k, (a, b) in self.changes.items())


def _show(value):
    return f"{value:g}" if isinstance(value, float) else str(value)


def split(data: dict, attrs: dict) -> list:
    """The segments of a series read by ``read_timeseries`` (``attrs['case_yaml']`` is
    the root case text). A file that records none is one segment. Records
    before the first recorded start (none in files this program writes) join
    the first segment."""
    recorded = segments_of(attrs)
    root = attrs.get("case_yaml", "")
    if not recorded:
        recorded = [{"step": int(data["step"][0]) if "step" in data and data["step"].size else 0,
                     "t": float(data["t"][0]) if data["t"].size else float("nan"),
                     "case": root, "version": str(attrs.get("version", ""))}]
    t = data["t"]
    # a segment holds the records from its start time to the next one's
    starts = [s["t"] for s in recorded]
    out, previous = [], None
    for i, s in enumerate(recorded):
        lo = -np.inf if i == 0 else starts[i]
        hi = starts[i + 1] if i + 1 < len(starts) else np.inf
        mask = (t >= lo) & (t < hi)
        case = yaml.safe_load(s["case"]) if s["case"] else {}
        out.append(Segment(index=i, step=s["step"], t=s["t"],
                           case=case if isinstance(case, dict) else {}, case_yaml=s["case"],
                           version=s["version"],
                           changes=segment_changes(previous, s["case"]) if previous else {},
                           records=mask))
        previous = s["case"]
    return out


def choose(segments: list, which, source: str = "series"):
    """The segment numbered ``which`` (negative counts from the end; ``None`` is the
    last). Raises ValueError naming ``source`` and the allowed numbers."""
    if which is None:
        return segments[-1]
    n = len(segments)
    try:
        k = int(which)
    except (TypeError, ValueError):
        raise ValueError(f"{source}: segment must be a whole number, got {which!r}") from None
    if not -n <= k < n:
        raise ValueError(f"{source}: no segment {k}; the series has {n} "
                         f"(0 to {n - 1}, or -1 for the last)")
    return segments[k]
