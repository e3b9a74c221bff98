"""Power-law fits ``y = A x^p`` with confidence intervals.

Method: weighted linear least squares on ``log y = log A + p log x``. With
per-point standard errors ``s_i`` of ``y_i`` the log-space errors are
``s_i / y_i`` (first-order propagation) and the weights ``1 / (s_i/y_i)^2``;
without them all weights are equal (ordinary least squares).

The parameter covariance is ``(X^T W X)^{-1}``, by default scaled by the
reduced chi-square ``chi2 / (n - 2)`` (the per-point errors are then trusted
only in their ratios), and intervals use the Student t distribution with
``n - 2`` degrees of freedom: under Gaussian errors in log space this
interval has exact coverage (standard linear-regression theory, e.g. Draper &
Smith, *Applied Regression Analysis*). With ``absolute_sigma=True`` the
covariance is not scaled and intervals use the normal distribution.

The exponents expected from docs/equations.md#regimes ("facts of the trade", no
published source given there) are in :data:`EXPECTED_EXPONENTS`;
:func:`compare_exponent` reports how a fitted exponent sits against them.
"""
from __future__ import annotations

import csv
from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

__all__ = [
    "PowerLawFit",
    "EXPECTED_EXPONENTS",
    "fit_power_law",
    "compare_exponent",
    "read_table",
    "fit_table",
]

#: Scaling exponents against BPe listed in docs/equations.md#regimes for the
#: stratified-turbulence regime (facts of the trade, no published source).
EXPECTED_EXPONENTS = {
    ("BPe", "Lz_turb"): -1.0 / 3.0,
    ("BPe", "w_rms"): -1.0 / 6.0,
    ("BPe", "D_flux"): -1.0 / 2.0,
    ("BPe", "D_estimate"): -1.0 / 2.0,
}


@dataclass(frozen=True)
class PowerLawFit:
    """Result of :func:`fit_power_law`.

    Attributes
    ----------
    A, p : float
        Prefactor and exponent of ``y = A x^p``.
    p_stderr, logA_stderr : float
        Standard errors of ``p`` and of ``ln A``.
    p_ci, A_ci : tuple of float
        Confidence intervals at level ``confidence`` (``A_ci`` is the
        exponential of the interval of ``ln A``).
    cov : tuple
        2x2 covariance of ``(ln A, p)`` as nested tuples.
    confidence : float
    n : int
        Number of points used.
    dof : int
        ``n - 2``.
    chi2_red : float
        Weighted residual sum of squares over ``dof``.
    x_range : tuple of float
        Smallest and largest ``x`` used.
    absolute_sigma : bool
    """

    A: float
    p: float
    p_stderr: float
    logA_stderr: float
    p_ci: tuple
    A_ci: tuple
    cov: tuple
    confidence: float
    n: int
    dof: int
    chi2_red: float
    x_range: tuple
    absolute_sigma: bool

    def as_dict(self):
        """Return the fields as a plain dict."""
        return asdict(self)

    def __call__(self, x):
        """Evaluate ``A x^p``."""
        return self.A * np.asarray(x, dtype=float) ** self.p


def fit_power_law(x, y, y_err=None, confidence=0.95, x_range=None, absolute_sigma=False):
    """Fit ``y = A x^p`` by least squares in log-log space.

    Parameters
    ----------
    x, y : array_like
        Positive data.
    y_err : array_like, optional
        One-standard-deviation errors of ``y``, finite and positive for every
        point used (give all or none).
    confidence : float
        Level of the intervals, in (0, 1).
    x_range : (float, float), optional
        Only points with ``lo <= x <= hi`` are used.
    absolute_sigma : bool
        Trust ``y_err`` in absolute terms (no chi-square scaling, normal
        quantiles) instead of only in ratios (scaled, Student t).

    Returns
    -------
    PowerLawFit
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ValueError(f"x and y must be 1-D of equal length, got shapes {x.shape} and {y.shape}")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    sel = np.ones(x.shape, dtype=bool)
    if x_range is not None:
        lo, hi = map(float, x_range)
        if not lo <= hi:
            raise ValueError(f"range must be lo <= hi, got {x_range}")
        sel &= (x >= lo) & (x <= hi)
    x, y = x[sel], y[sel]
    if np.any(~np.isfinite(x)) or np.any(~np.isfinite(y)) or np.any(x <= 0) or np.any(y <= 0):
        raise ValueError("power-law fit needs finite, positive x and y")
    if y_err is not None:
        s = np.asarray(y_err, dtype=float)
        if s.shape != sel.shape:
            raise ValueError(f"y_err has shape {s.shape}, expected {sel.shape}")
        s = s[sel]
        if np.any(~np.isfinite(s)) or np.any(s <= 0):
            raise ValueError("y_err must be finite and positive for every point used")
        slog = s / y
    else:
        if absolute_sigma:
            raise ValueError("absolute_sigma=True needs y_err")
        slog = np.ones_like(y)
    n = x.size
    if n < 3:
        raise ValueError(f"power-law fit with intervals needs at least 3 points, got {n}")
    X = np.column_stack([np.ones(n), np.log(x)])
    w = 1.0 / slog**2
    XtW = X.T * w
    cov = np.linalg.inv(XtW @ X)
    beta = cov @ (XtW @ np.log(y))
    resid = np.log(y) - X @ beta
    dof = n - 2
    chi2_red = float(np.sum(w * resid**2) / dof)
    if absolute_sigma:
        q = stats.norm.ppf(0.5 + confidence / 2)
    else:
        cov = cov * chi2_red
        q = stats.t.ppf(0.5 + confidence / 2, dof)
    se = np.sqrt(np.diag(cov))
    lnA, p = beta
    return PowerLawFit(
        A=float(np.exp(lnA)),
        p=float(p),
        p_stderr=float(se[1]),
        logA_stderr=float(se[0]),
        p_ci=(float(p - q * se[1]), float(p + q * se[1])),
        A_ci=(float(np.exp(lnA - q * se[0])), float(np.exp(lnA + q * se[0]))),
        cov=tuple(map(tuple, cov.tolist())),
        confidence=float(confidence),
        n=int(n),
        dof=int(dof),
        chi2_red=chi2_red,
        x_range=(float(x.min()), float(x.max())),
        absolute_sigma=bool(absolute_sigma),
    )


def compare_exponent(fit, expected):
    """Compare a fitted exponent with an expected value.

    Parameters
    ----------
    fit : PowerLawFit
    expected : float

    Returns
    -------
    dict
        ``expected``, ``fitted``, ``difference`` (fitted - expected),
        ``z`` (difference / stderr), ``consistent`` (expected inside the
        fit's confidence interval) and ``confidence``.
    """
    diff = fit.p - float(expected)
    return {
        "expected": float(expected),
        "fitted": fit.p,
        "difference": diff,
        "z": diff / fit.p_stderr if fit.p_stderr > 0 else float("inf"),
        "consistent": bool(fit.p_ci[0] <= expected <= fit.p_ci[1]),
        "confidence": fit.confidence,
    }


def read_table(path):
    """Read a CSV table (header row) into a dict of column name -> list of str."""
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    if not rows:
        raise ValueError(f"table {path} has no data rows")
    return {k: [r[k] for r in rows] for k in rows[0]}


def _column(table, name, path):
    if name not in table:
        raise ValueError(f"column '{name}' not in table {path}; columns are: {', '.join(table)}")
    out = np.full(len(table[name]), np.nan)
    for i, v in enumerate(table[name]):
        try:
            out[i] = float(v)
        except ValueError:
            pass  # empty cells (quantity absent for that run) stay NaN
    return out


def segment_notes(path):
    """One-line notes on the segments a summary table's rows averaged
    (:mod:`shearmix.tools.analysis.segments`): which ones, and a warning for each
    row averaged across changes (``segment`` = ``all``) or from a table that
    records none."""
    table = read_table(path)
    if "segment" not in table:
        return [f"warning: {path} records no segments (written by an older shearmix): its "
                "rows may average across restarts that changed the case"]
    names = table.get("run") or table.get("member") or [str(i) for i in range(len(table["segment"]))]
    notes = []
    multi = [(n, s, c) for n, s, c in zip(names, table["segment"], table.get("segments", ["1"] * len(names)))
             if c not in ("", "1")]
    for n, seg, count in multi:
        if seg == "all":
            notes.append(f"warning: {n} averaged across all its {count} segments (crosses a change)")
        else:
            notes.append(f"{n}: segment {seg} of {count}")
    return notes


def fit_table(path, x, y, x_range=None, confidence=0.95, use_errors=True):
    """Fit ``y = A x^p`` to two columns of a summary table.

    Rows with a missing or non-positive value are skipped. The error column
    ``<y>_err`` is used as per-point error when present and ``use_errors``.

    Returns
    -------
    fit : PowerLawFit
    comparison : dict or None
        :func:`compare_exponent` against :data:`EXPECTED_EXPONENTS` when the
        pair ``(x, y)`` is listed there.
    """
    table = read_table(path)
    xs = _column(table, x, path)
    ys = _column(table, y, path)
    err_name = f"{y}_err"
    es = _column(table, err_name, path) if (use_errors and err_name in table) else None
    ok = np.isfinite(xs) & np.isfinite(ys) & (xs > 0) & (ys > 0)
    if es is not None:
        ok &= np.isfinite(es) & (es > 0)
    fit = fit_power_law(xs[ok], ys[ok], None if es is None else es[ok], confidence, x_range)
    exp = EXPECTED_EXPONENTS.get((x, y))
    return fit, (None if exp is None else compare_exponent(fit, exp))
