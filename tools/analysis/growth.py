"""The growth phase of a run read against linear theory (``shearmix growth``).

A run started near the laminar flow first shows its perturbations growing
exponentially, then saturating. Two families are followed, from the flow split
of every record (docs/equations.md#jet-diagnostics):

* two-dimensional (``kz = 0``): amplitude ``A_2d = sqrt(K2d_pert)``;
* three-dimensional (``kz != 0``): amplitude ``A_3d = sqrt(K3d)``.

**Exponential phase.** A stretch of records ``[t_a, t_b]`` is *straight
within* ``tol`` when some line lies within ``tol`` of ``y = ln A`` at every
record of it (the Chebyshev, or minimax, line fit; :func:`chebyshev_halfwidth`).
This property is inherited by every sub-stretch, so the maximal stretches
are found exactly by a two-pointer sweep (:func:`straight_stretches`). The
growth phases of a family are the maximal straight stretches that grow by at
least ``min_efolds`` e-folds and hold at least ``min_records`` records,
taken longest first; a stretch that shares records with a longer phase
keeps its longest part outside it (two phases meeting at a bend share the
record at the bend). The principal phase is the longest (in time). An initial transient (decaying modes still present) and the
onset of saturation bend ``ln A`` and so end the stretch.

**Rate and its uncertainty** (:func:`fit_phase`). ``ln A = c + s t`` by
least squares over the phase; ``s`` is the amplitude growth rate (the energy
grows at ``2 s``). Two parts:

* *scatter*: the usual standard error ``se = sqrt(SSR/(n-2) / sum (t - tbar)^2)``
  with Student's t at ``n - 2`` degrees of freedom (standard regression
  theory). It treats the residuals as independent, which holds for round-off
  and the weak record-to-record noise of a deterministic linear phase; the
  lag-1 autocorrelation of the residuals is reported to show how far that is
  from true (near 1: the residual is a smooth curvature, not scatter);
* *ends*: the phase is deterministic, so its main uncertainty is where it
  starts and stops. The fit is repeated with ``end_trim`` (a quarter) of the
  phase's duration dropped at its start, at its end, and at both;
  ``ends = max |s_trimmed - s|`` over the three. A transient and the onset of
  saturation both bend the ends of the phase, so the middle half is the
  least biased of the four fits.

The interval is ``s -+ (t_q se + ends)``: the two parts are added, not
combined in quadrature, because the ends part is a bias bound, not a random
error (a choice of this tool).

**Linear theory.** The fastest box mode of each family (``j = 0`` and
``j != 0`` box modes of :func:`shearmix.tools.stability.boxfit.scan`) grows in
amplitude at ``Re sigma``. A three-dimensional phase whose interval lies
entirely above the fastest linear 3D rate (or any 3D growth when no 3D box
mode is unstable) is *secondary*: driven by the saturated 2D state, not a
linear mode of the laminar flow.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import asdict, dataclass, field

import numpy as np

__all__ = ["GrowthOptions", "Phase", "GrowthError", "FAMILIES", "NEEDED", "chebyshev_halfwidth",
           "straight_stretches", "fit_phase", "find_phases", "read_run", "linear_rates",
           "analyse_run", "verdict_3d", "write_json"]

#: family name -> (series key, what it holds)
FAMILIES = {"2d": ("K2d_pert", "kz = 0 modes other than the laminar flow"),
            "3d": ("K3d", "kz != 0 modes")}
#: the series columns the analysis needs (written since the flow split existed)
NEEDED = ("K2d_laminar", "K2d_pert", "K3d")


class GrowthError(ValueError):
    """Bad input or nothing to analyse: one line naming the file and what is missing."""


@dataclass(frozen=True)
class GrowthOptions:
    """Settings of the phase finder and the fit.

    Attributes
    ----------
    tolerance : float
        Largest distance of ``ln A`` from a line within a phase (0.02: 2% in
        amplitude; a choice of this tool).
    confidence : float
        Level of the intervals (0.95).
    min_records : int
        Fewest records in a phase (8; also the fewest a segment must hold).
    min_efolds : float
        Least growth of ``ln A`` over a phase (1 e-fold), so that a flat or
        decaying stretch is not taken for growth.
    end_trim : float
        Fraction of a phase's duration dropped at either end for the ends part
        of the uncertainty (0.25).
    max_points : int
        Candidate phase ends on a longer series are spread evenly over its
        records (400), then each chosen phase is extended record by record to
        its exact ends; the straightness check always uses every record.
    segment : int or None
        Segment of the series (``None``: the last; see tools/analysis/segments.py).
    """

    tolerance: float = 0.02
    confidence: float = 0.95
    min_records: int = 8
    min_efolds: float = 1.0
    end_trim: float = 0.25
    max_points: int = 400
    segment: int | None = None

    def __post_init__(self):
        checks = (("tolerance", self.tolerance > 0, "a number > 0"),
                  ("confidence", 0 < self.confidence < 1, "a number between 0 and 1"),
                  ("min_records", self.min_records >= 3, "a whole number >= 3"),
                  ("min_efolds", self.min_efolds > 0, "a number > 0"),
                  ("end_trim", 0 < self.end_trim < 0.5, "a number between 0 and 0.5"),
                  ("max_points", self.max_points >= 10, "a whole number >= 10"))
        for name, ok, allowed in checks:
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and ok):
                raise GrowthError(f"{name}: must be {allowed}, got {value!r}")


# --------------------------------------------------------------------- straight stretches
def _width(t, y, s):
    r = y - s * t
    return float(r.max() - r.min())


def chebyshev_halfwidth(t, y, limit=None):
    """``min over lines c + s t of max_k |y_k - c - s t_k|`` (the minimax line fit).

    For a slope ``s`` the best offset leaves the half range of ``y - s t``, so
    the half-width is ``min_s W(s)/2`` with ``W(s) = max(y - s t) - min(y - s t)``,
    convex and piecewise linear in ``s``. Its minimum lies between the smallest
    and largest slope of consecutive records (the extreme pairwise slopes of
    points sorted in ``t``) and is found by bisection on the sign of the
    subgradient ``t[argmin] - t[argmax]``. With ``limit`` given, the search
    stops as soon as a line within ``limit`` is found (the answer is then an
    upper bound at most ``limit``). ``t`` must increase.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    if t.size < 3:
        return 0.0
    tc = t - t.mean()  # centred: W(s) does not depend on the origin, round-off does
    ds = np.diff(y) / np.diff(tc)
    lo, hi = float(ds.min()), float(ds.max())
    best = min(_width(tc, y, lo), _width(tc, y, hi))
    if limit is not None:
        sl = float(np.polyfit(tc, y, 1)[0])  # least squares: usually near the optimum
        best = min(best, _width(tc, y, sl))
        if best <= 2 * limit:
            return best / 2
    for _ in range(200):
        if hi - lo <= 1e-15 * max(abs(lo), abs(hi), 1.0):
            break
        s = 0.5 * (lo + hi)
        r = y - s * tc
        imax, imin = int(np.argmax(r)), int(np.argmin(r))
        best = min(best, float(r[imax] - r[imin]))
        if limit is not None and best <= 2 * limit:
            break
        g = tc[imin] - tc[imax]  # dW/ds
        if g > 0:
            hi = s
        elif g < 0:
            lo = s
        else:
            break
    return best / 2


def straight_stretches(t, y, tol, max_points=400):
    """Maximal stretches ``(a, b)`` (record indices, inclusive) on which ``y`` is straight
    within ``tol`` (:func:`chebyshev_halfwidth`), each holding at least 3 records.

    Two-pointer sweep over candidate ends (every record, or ``max_points`` spread
    evenly over a longer series): straightness is inherited by sub-stretches, so
    the largest end ``b(a)`` never decreases with ``a``. Stretches found on a
    thinned grid are extended record by record to their exact maximal ends.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    n = t.size
    if n < 3:
        return []
    cand = np.unique(np.round(np.linspace(0, n - 1, min(n, max_points))).astype(int))
    m = cand.size

    def ok(a, b):
        return b - a < 2 or chebyshev_halfwidth(t[a:b + 1], y[a:b + 1], limit=tol) <= tol

    out, j, last_b = [], 0, -1
    for k in range(m - 1):
        j = max(j, k + 1)
        if not ok(cand[k], cand[j]):
            continue
        while j + 1 < m and ok(cand[k], cand[j + 1]):
            j += 1
        a, b = int(cand[k]), int(cand[j])
        if b > last_b:
            out.append((a, b))
            last_b = b
    exact = []
    for a, b in out:
        while a > 0 and ok(a - 1, b):
            a -= 1
        while b < n - 1 and ok(a, b + 1):
            b += 1
        if b - a >= 2 and (a, b) not in exact:
            exact.append((a, b))
    return exact


# ------------------------------------------------------------------------------ fits
@dataclass
class Phase:
    """One exponential phase of a family and its fitted amplitude growth rate.

    ``rate`` is ``s`` of ``ln A = c + s t``; ``stderr`` the scatter part and
    ``ends`` the ends part of its uncertainty; ``interval`` = ``rate -+
    (t_quantile stderr + ends)`` at ``confidence``; ``deviation`` the largest
    distance of ``ln A`` from the least-squares line; ``lag1`` the lag-1
    autocorrelation of the residuals; ``efolds = rate (t_end - t_start)``.
    """

    family: str
    first: int
    last: int
    t_start: float
    t_end: float
    records: int
    rate: float
    intercept: float
    stderr: float
    t_quantile: float
    ends: float
    interval: tuple
    confidence: float
    deviation: float
    lag1: float
    efolds: float
    rates_trimmed: tuple = field(default=())

    @property
    def duration(self):
        return self.t_end - self.t_start


def _lsq(t, y):
    tb = t.mean()
    tc = t - tb
    sxx = float(tc @ tc)
    s = float(tc @ (y - y.mean())) / sxx
    c = float(y.mean() - s * tb)
    return s, c, y - (c + s * t), sxx


def fit_phase(t, y, first, last, family="", confidence=0.95, end_trim=0.25):
    """Least-squares rate of ``y = ln A`` over records ``first..last`` with the two parts of
    its uncertainty (module docstring)."""
    from scipy import stats
    tt, yy = t[first:last + 1], y[first:last + 1]
    n = tt.size
    s, c, res, sxx = _lsq(tt, yy)
    dof = n - 2
    se = math.sqrt(float(res @ res) / dof / sxx) if dof > 0 else float("nan")
    q = float(stats.t.ppf(0.5 + confidence / 2, dof)) if dof > 0 else float("nan")
    cut = end_trim * (tt[-1] - tt[0])
    trimmed = []
    for keep in (tt >= tt[0] + cut, tt <= tt[-1] - cut, (tt >= tt[0] + cut) & (tt <= tt[-1] - cut)):
        if np.count_nonzero(keep) >= 3:
            trimmed.append(_lsq(tt[keep], yy[keep])[0])
    ends = max((abs(r - s) for r in trimmed), default=float("nan"))
    half = q * se + ends
    r0, r1 = res[:-1], res[1:]
    den = float(res @ res)
    lag1 = float(r0 @ r1) / den if den > 0 else float("nan")
    return Phase(family=family, first=int(first), last=int(last), t_start=float(tt[0]),
                 t_end=float(tt[-1]), records=int(n), rate=s, intercept=c, stderr=se,
                 t_quantile=q, ends=ends, interval=(s - half, s + half), confidence=confidence,
                 deviation=float(np.max(np.abs(res))), lag1=lag1,
                 efolds=s * float(tt[-1] - tt[0]), rates_trimmed=tuple(trimmed))


def find_phases(t, energy, options=None, family=""):
    """The growth phases of one family, longest first (module docstring).

    ``energy``: the family's energy per record (``K2d_pert`` or ``K3d``); its
    amplitude is ``sqrt(energy)``. Records with a non-positive or non-finite
    energy split the series; no phase crosses them. Returns a list of
    :class:`Phase` (empty when none qualifies).
    """
    opts = options or GrowthOptions()
    t = np.asarray(t, dtype=float)
    e = np.asarray(energy, dtype=float)
    good = np.isfinite(e) & (e > 0) & np.isfinite(t)
    y = np.full(e.shape, np.nan)
    y[good] = 0.5 * np.log(e[good])
    cands = []
    idx = np.flatnonzero(good)
    if idx.size == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) > 1)
    for run in np.split(idx, breaks + 1):
        if run.size < opts.min_records:
            continue
        lo = int(run[0])
        for a, b in straight_stretches(t[run], y[run], opts.tolerance, opts.max_points):
            a, b = a + lo, b + lo
            if b - a + 1 < opts.min_records:
                continue
            p = fit_phase(t, y, a, b, family, opts.confidence, opts.end_trim)
            if p.rate > 0 and p.efolds >= opts.min_efolds:
                cands.append(p)
    cands.sort(key=lambda p: (-p.duration, p.t_start))
    chosen = []
    for p in cands:
        # a stretch sharing records with a longer phase keeps its longest part outside it
        free = np.ones(p.last - p.first + 1, dtype=bool)
        for q in chosen:
            free[max(q.first, p.first) - p.first:max(min(q.last, p.last) - p.first + 1, 0)] = False
        if not free.all():
            parts = np.split(np.arange(p.first, p.last + 1), np.flatnonzero(np.diff(free.astype(int))) + 1)
            part = max((r for r in parts if free[r[0] - p.first]), key=len, default=None)
            if part is None or part.size < opts.min_records:
                continue
            p = fit_phase(t, y, int(part[0]), int(part[-1]), family, opts.confidence, opts.end_trim)
            if not (p.rate > 0 and p.efolds >= opts.min_efolds):
                continue
        chosen.append(p)
    return sorted(chosen, key=lambda p: (-p.duration, p.t_start))


# ------------------------------------------------------------------------------ the run
def read_run(path, segment=None, min_records=8):
    """``(t, series, attrs, seg, segs, fname)`` of one segment of a run's time series,
    checked for the flow-split columns and the number of records (GrowthError)."""
    from shearmix.tools.analysis.segments import choose, split
    from shearmix.tools.analysis.summary import _series_path, read_timeseries
    fname = _series_path(path)
    try:
        data, attrs, _ = read_timeseries(fname)
    except (OSError, ValueError) as exc:
        raise GrowthError(str(exc)) from None
    missing = [k for k in NEEDED if k not in data]
    if missing:
        raise GrowthError(f"{fname}: no {', '.join(missing)} in the time series (written before the "
                          f"flow split); growth needs {', '.join(NEEDED)}: rerun the growth phase "
                          "with this version")
    segs = split(data, attrs)
    try:
        seg = choose(segs, segment, fname)
    except ValueError as exc:
        raise GrowthError(str(exc)) from None
    data = {k: v[seg.records] for k, v in data.items()}
    n = data["t"].size
    if n < min_records:
        where = f"segment {seg.index} of {len(segs)}" if len(segs) > 1 else "the series"
        raise GrowthError(f"{fname}: {where} holds {n} records; at least {min_records} are needed "
                          "(--min-records)")
    return data["t"], data, attrs, seg, segs, fname


def linear_rates(case):
    """The fastest box mode of each family from the stability tool's box scan, as
    ``{"2d": BoxMode or None, "3d": ...}`` (the least stable one when none grows;
    ``None`` when the box holds no candidate of that family), and the scan's
    warnings."""
    from shearmix.tools.stability import params_from_case
    from shearmix.tools.stability.boxfit import Box, scan
    rep = scan(params_from_case(case), Box.from_case(case), free=False)
    out = {}
    for fam, test in (("2d", lambda m: m.j == 0), ("3d", lambda m: m.j != 0)):
        modes = [m for m in rep.modes if test(m)]
        out[fam] = max(modes, key=lambda m: m.growth) if modes else None
    return out, rep


def verdict_3d(phase, linear):
    """``(label, sentence)`` for a 3D phase against the fastest linear 3D box mode."""
    if phase is None:
        return "none", "no 3D growth phase"
    lo, hi = phase.interval
    pct = f"{100 * phase.confidence:g}%"
    if linear is None or linear.growth <= 0:
        what = ("the box holds no 3D mode below the energy bound" if linear is None
                else f"no 3D box mode grows (fastest {linear.growth:.4g})")
        return "secondary", (f"secondary: the 3D family grows at {phase.rate:.4g} although {what}; "
                             "its growth is driven by the 2D state")
    if lo > linear.growth:
        return "secondary", (f"secondary: the 3D rate {phase.rate:.4g} exceeds the fastest linear 3D "
                             f"rate {linear.growth:.4g} beyond its {pct} interval "
                             f"[{lo:.4g}, {hi:.4g}]")
    if hi < linear.growth:
        return "slower", (f"slower than linear: the 3D rate {phase.rate:.4g} lies below the fastest "
                          f"linear 3D rate {linear.growth:.4g} beyond its {pct} interval")
    return "linear", (f"linear: the fastest linear 3D rate {linear.growth:.4g} lies in the "
                      f"{pct} interval [{lo:.4g}, {hi:.4g}] of the 3D rate")


def analyse_run(path, options=None, theory=True, progress=None):
    """Phases of both families of one run, with linear theory (``theory=False`` skips the
    eigenproblem). Raises GrowthError when neither family has a phase. Returns a dict
    (the JSON written by ``--json``, with :class:`Phase` objects under ``phases``).
    ``progress(message)`` is called before the eigenproblem, the slow part."""
    from shearmix.solver.case import CaseError, case_from_text
    from shearmix.solver.version import __version__
    opts = options or GrowthOptions()
    t, data, attrs, seg, segs, fname = read_run(path, opts.segment, opts.min_records)
    phases = {fam: find_phases(t, data[key], opts, fam) for fam, (key, _) in FAMILIES.items()}
    where = f" in segment {seg.index} of {len(segs)}" if len(segs) > 1 else ""
    if not any(phases.values()):
        raise GrowthError(
            f"{fname}: no exponential growth phase{where} in sqrt(K2d_pert) or sqrt(K3d): no "
            f"stretch of at least {opts.min_records} records growing by {opts.min_efolds:g} e-folds "
            f"is straight within tolerance {opts.tolerance:g} in ln(amplitude)")
    result = {"run": os.path.basename(os.path.dirname(os.path.abspath(fname))), "path": fname,
              "version": __version__, "analysed_by": f"shearmix growth {__version__}",
              "run_version": seg.version, "case": seg.case_yaml, "segment": seg.index,
              "segments": len(segs), "records": int(t.size), "t_first": float(t[0]),
              "t_last": float(t[-1]), "options": asdict(opts), "phases": phases,
              "linear": {"2d": None, "3d": None}, "warnings": []}
    if theory:
        try:
            case = case_from_text(seg.case_yaml, fname)
        except CaseError as exc:
            raise GrowthError(f"{fname}: the recorded case does not load: {exc}") from None
        if progress:
            progress("solving the eigenproblem of every box mode (--no-theory skips it)")
        result["linear"], rep = linear_rates(case)
        result["warnings"] += rep.warnings
    p2 = phases["2d"][0] if phases["2d"] else None
    p3 = phases["3d"][0] if phases["3d"] else None
    result["onset"] = _onset(p2, p3)
    result["verdict_3d"] = verdict_3d(p3, result["linear"]["3d"]) if theory else None
    return result


def _onset(p2, p3):
    if p2 is None or p3 is None:
        only = p2 or p3
        return f"only the {only.family.upper()} family has a growth phase (from t = {only.t_start:.6g})"
    first, second = (p2, p3) if p2.t_start <= p3.t_start else (p3, p2)
    text = (f"{first.family.upper()} first (from t = {first.t_start:.6g}), {second.family.upper()} "
            f"after (from t = {second.t_start:.6g})")
    if first is p2 and p3.t_start >= p2.t_end:
        text += f"; the 3D phase begins after the 2D phase has ended (t = {p2.t_end:.6g})"
    return text


def _jsonable(v):
    if isinstance(v, Phase):
        return {**{k: _jsonable(x) for k, x in asdict(v).items()}, "duration": v.duration}
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, complex):
        return {"real": v.real, "imag": v.imag}
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if hasattr(v, "__dataclass_fields__"):
        return _jsonable(asdict(v))
    if isinstance(v, np.generic):
        return _jsonable(v.item())
    return v


def write_json(result, path):
    """Write :func:`analyse_run`'s result as JSON (NaN -> null), via a temporary name."""
    tmp = path + ".part"
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(_jsonable(result), fh, indent=1)
        fh.write("\n")
    os.replace(tmp, path)
