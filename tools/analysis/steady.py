"""Detection of the start of the statistically steady part of a time series.

Method: the MSER truncation rule (Marginal Standard Error Rule, White 1997,
"An effective truncation heuristic for bias reduction in simulation output",
Simulation 69(6), 323-334), in its batched form MSER-m (White, Cobb & Spratt
2000, Proc. Winter Simulation Conference; m = 5 there). The series is
resampled onto a uniform time grid (linear interpolation, spacing the median
sample spacing, see :func:`shearmix.tools.analysis.averages.uniform_resample`) so that every
point stands for the same amount of time, averaged in consecutive batches of
``m`` points ``z_1..z_n``, and the truncation ``d`` minimises

    MSER(d) = 1/(n - d)^2 * sum_{j > d} (z_j - zbar_d)^2,

``zbar_d`` being the mean of the retained batches. The search is limited to
``d <= n/2`` (as recommended by White et al.). When the minimum over all
truncations that keep at least ``tail`` batches (10 by default: with fewer,
the statistic is dominated by chance, the known end effect of MSER) lies in
the second half, the series is judged too short or not yet steady and the
result is flagged ``reliable = False``.

For several quantities the steady start is the latest of their individual
starts. A user-given start time overrides the detection (``method='user'``).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from shearmix.tools.analysis.averages import check_time_axis, uniform_resample

__all__ = ["SteadyState", "mser", "detect_steady_state"]


@dataclass(frozen=True)
class SteadyState:
    """Start of the steady part of a run.

    Attributes
    ----------
    t_start : float
        Start time of the steady part.
    method : str
        ``'MSER-m'`` (with the batch size) or ``'user'``.
    reliable : bool
        False if, for some quantity, the MSER minimum (over truncations that
        keep at least ``tail`` batches) lies in its second half.
    quantity : str
        Quantity whose truncation was the latest (the one that set ``t_start``).
    per_quantity : dict
        Start time found for each quantity.
    """

    t_start: float
    method: str
    reliable: bool
    quantity: str = ""
    per_quantity: dict = field(default_factory=dict)

    def as_dict(self):
        """Return the fields as a plain dict."""
        return asdict(self)


def mser(x, batch=5):
    """MSER statistic of a uniformly sampled series.

    Parameters
    ----------
    x : array_like
        Uniformly sampled series.
    batch : int
        Batch size ``m`` (1 gives the original MSER of White 1997).

    Returns
    -------
    stat : ndarray
        ``MSER(d)`` for ``d = 0 .. n-2`` batches truncated (``n`` batches;
        leftover points at the end that do not fill a batch are dropped).
    """
    x = np.asarray(x, dtype=float)
    if batch < 1:
        raise ValueError(f"MSER batch size must be >= 1, got {batch}")
    n = x.size // batch
    if n < 4:
        raise ValueError(f"MSER needs at least 4 batches of {batch} points, series has {x.size} points")
    z = x[: n * batch].reshape(n, batch).mean(axis=1)
    # Suffix sums give every truncation's mean and sum of squares in O(n).
    s1 = np.cumsum(z[::-1])[::-1]
    s2 = np.cumsum((z * z)[::-1])[::-1]
    k = n - np.arange(n)
    ss = np.maximum(s2 - s1 * s1 / k, 0.0)
    return (ss / k**2)[:-1]


def detect_steady_state(t, series, start=None, batch=5, max_fraction=0.5, tail=10):
    """Start time of the steady part of one or several series.

    Parameters
    ----------
    t : array_like
        Strictly increasing sample times (may be non-uniform).
    series : array_like or dict of str -> array_like
        One series, or several sampled at ``t`` (the latest start is used).
    start : float, optional
        User override: returned as is (``method='user'``) after checking it
        lies inside ``[t[0], t[-1])``.
    batch : int
        MSER batch size (5 after White, Cobb & Spratt 2000).
    max_fraction : float
        Largest fraction of the series that may be truncated (0.5 after
        White et al.).
    tail : int
        Batches always kept when judging reliability (see module docstring).

    Returns
    -------
    SteadyState
    """
    if not isinstance(series, dict):
        series = {"x": series}
    if not series:
        raise ValueError("detect_steady_state needs at least one series")
    t = check_time_axis(t)[0]
    if start is not None:
        start = float(start)
        if not (t[0] <= start < t[-1]):
            raise ValueError(f"start time {start} is outside the time series range [{t[0]}, {t[-1]})")
        return SteadyState(t_start=start, method="user", reliable=True, quantity="", per_quantity={})
    if not 0 < max_fraction < 1:
        raise ValueError(f"max_fraction must be in (0, 1), got {max_fraction}")
    starts = {}
    reliable = True
    for name, x in series.items():
        _, x = check_time_axis(t, x, name)
        tu, xu = uniform_resample(t, x)
        stat = mser(xu, batch)
        n = stat.size + 1
        dmax = int(np.floor(max_fraction * n))
        d = int(np.argmin(stat[: dmax + 1]))
        if int(np.argmin(stat[: max(n - tail, dmax + 1)])) > dmax:
            reliable = False
        starts[name] = float(tu[d * batch])
    name = max(starts, key=starts.get)
    return SteadyState(
        t_start=starts[name], method=f"MSER-{batch}", reliable=reliable, quantity=name, per_quantity=starts
    )
