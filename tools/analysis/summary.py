"""Per-run summary of a ``timeseries.h5`` file, tables of many runs, and ``Lz_turb``.

A summary is one flat row: the run's parameters, the averaging window, and
for each reported quantity its time average ``q``, uncertainty ``q_err`` and
integrated autocorrelation time ``q_tau`` (see :mod:`shearmix.tools.analysis.averages`), the
intermittency of the dissipation, the regime label with the numbers behind it
(:mod:`shearmix.tools.analysis.regimes`) and warnings.

Steps (:func:`summarize_run`):

1. read the series; records written twice after a restart (times that do
   not increase) keep the later write;
2. find the steady start with the MSER-5 rule on ``K`` and ``eps``
   (:mod:`shearmix.tools.analysis.steady`), unless a start time is given;
3. average each quantity from the start to the last record;
4. warn when the run is under-resolved (time-averaged ``kmax_etaK`` below
   ``kmax_etaK_min``, default 1.0, common practice), too short (window
   shorter than ``min_correlation_times`` integrated autocorrelation times of
   some quantity, default 50, a choice; or no reliable steady start), or
   outside the low-Peclet validity (``Pe_turb`` above ``pe_turb_max``,
   default 1, lowpe model only);
5. per passive tracer ``NAME`` (docs/equations.md#tracers): the averages of
   :data:`TRACER_AVERAGED` as ``q.NAME``, its ``Sc``, ``Pe_c`` and ``G``, and
   warnings when it is under-resolved (``kmax_etaB.NAME`` below
   ``kmax_etaK_min``, Batchelor 1959) or not at equilibrium (``D_c`` and
   ``D_chi`` more than ``tracer_sigmas`` combined standard errors apart, or
   the ``c_rms`` means of the window's halves more than ``tracer_drift_max``
   apart, relative to their mean).

``Lz_turb`` (docs/equations.md#reported-numbers) of a spectrum is :func:`lz_turb`; of a
physical-space velocity field, :func:`lz_turb_from_field`.
"""
from __future__ import annotations

import csv
import json
import math
import os
from dataclasses import dataclass, field, replace

import h5py
import numpy as np
import yaml

from shearmix.tools.analysis.averages import time_average, uniform_resample
from shearmix.tools.analysis.regimes import (FLUCT_KEYS, RegimeThresholds, classify, flow_reason,
                                             flow_numbers, flow_state, flux_intermittency)
from shearmix.tools.analysis.segments import choose, split
from shearmix.tools.analysis.steady import detect_steady_state

__all__ = [
    "SummaryOptions",
    "AVERAGED",
    "TRACER_AVERAGED",
    "averaged_names",
    "batchelor_factor",
    "read_timeseries",
    "summarize_run",
    "summarize_runs",
    "write_csv",
    "write_json",
    "lz_turb",
    "horizontal_spectrum_kz",
    "lz_turb_from_field",
]

SERIES_FILE = "timeseries.h5"

#: Quantities averaged in a summary (those absent or all-NaN are left empty).
AVERAGED = ("eta", "I", "eps", "J", "u_rms", "v_rms", "w_rms", "Lz_turb", "D_flux",
            "D_estimate", "kmax_etaK", "Pe_turb",
            # the streamwise-mean / fluctuation split (docs/equations.md#reported-numbers)
            "Kmean", "Kfluct", "u_fluct_rms", "v_fluct_rms", "w_fluct_rms", "isotropy_fluct",
            "K2d_laminar", "K2d_pert", "K3d", "Lz_jets", "Ri_jets")

#: Per-tracer quantities averaged in a summary, in its columns as ``q.NAME``
#: (docs/equations.md#tracers): the rms, the diffusivity from the flux, the one
#: from the dissipation (the equilibrium estimate) and the resolution number.
TRACER_AVERAGED = ("c_rms", "D_c", "D_chi", "kmax_etaB")


@dataclass(frozen=True)
class SummaryOptions:
    """Settings of :func:`summarize_run`.

    Attributes
    ----------
    start : float or None
        Steady start time given by the user (overrides detection).
    steady_quantities : tuple of str
        Series used by the steady-state detection.
    n_batches : int
        Batches of the batch-means error.
    kmax_etaK_min : float
        Under-resolution threshold on ``kmax * eta_K`` (1.0, common practice).
    min_correlation_times : float
        Shortest acceptable window, in integrated autocorrelation times
        (50 by default, a choice: the batch-means error needs batches several
        correlation times long).
    pe_turb_max : float
        Largest ``Pe_turb`` for which the low-Peclet model is deemed valid (1).
    thresholds : RegimeThresholds
        Regime thresholds.
    segment : int, 'all' or None
        Segment of the series to average (:mod:`shearmix.tools.analysis.segments`):
        ``None`` the last, a number (negative from the end), or ``'all'`` to
        average across every change (with a warning naming them).
    tracer_sigmas : float
        A tracer is not at equilibrium when its ``D_c`` and ``D_chi`` differ by
        more than this many combined standard errors (2, a choice: about the
        95% two-sided level of a normal difference).
    tracer_drift_max : float
        ... or when the ``c_rms`` means of the window's two halves differ by more
        than this fraction of their mean (0.1, a choice).
    """

    start: float | None = None
    steady_quantities: tuple = ("K", "eps")
    n_batches: int = 20
    kmax_etaK_min: float = 1.0
    min_correlation_times: float = 50.0
    pe_turb_max: float = 1.0
    thresholds: RegimeThresholds = field(default_factory=RegimeThresholds)
    segment: int | str | None = None
    tracer_sigmas: float = 2.0
    tracer_drift_max: float = 0.1


def _series_path(path):
    path = os.fspath(path)
    return os.path.join(path, SERIES_FILE) if os.path.isdir(path) else path


def read_timeseries(path):
    """Read a run's time series.

    Parameters
    ----------
    path : str or path-like
        Run folder (holding ``timeseries.h5``) or the file itself.

    Returns
    -------
    data : dict of str -> ndarray
        Every 1-D dataset, restricted to records with strictly increasing
        ``t`` (for repeated times after a restart the later record is kept).
    attrs : dict
        Root attributes (``case`` parsed from YAML into a dict under
        ``case``, its text under ``case_yaml``).
    dropped : int
        Number of records removed as overwritten.
    """
    fname = _series_path(path)
    if not os.path.isfile(fname):
        raise FileNotFoundError(f"{fname}: no time-series file (expected {SERIES_FILE} in the run folder)")
    with h5py.File(fname, "r") as fh:
        if "t" not in fh:
            raise ValueError(f"{fname}: no dataset 't'; not a run time series")
        data = {k: np.asarray(fh[k][()], dtype=float) for k in fh if isinstance(fh[k], h5py.Dataset) and fh[k].ndim == 1}
        attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in fh.attrs.items()}
    n = data["t"].size
    for k, v in data.items():
        if v.size != n:
            raise ValueError(f"{fname}: dataset '{k}' has {v.size} records, 't' has {n}")
    t = data["t"]
    # Keep record i when it is earlier than every record written after it:
    # a restart rewrites the times after its checkpoint, and the rewrite wins.
    later_min = np.minimum.accumulate(np.r_[t[1:], np.inf][::-1])[::-1]
    keep = t < later_min
    data = {k: v[keep] for k, v in data.items()}
    case_text = attrs.get("case", "")
    try:
        case = yaml.safe_load(case_text) if case_text else {}
    except yaml.YAMLError as exc:
        raise ValueError(f"{fname}: attribute 'case' is not valid YAML ({exc.problem})") from None
    attrs["case_yaml"] = case_text
    attrs["case"] = case if isinstance(case, dict) else {}
    return data, attrs, int(n - keep.sum())


def _parameters(attrs):
    """Re, B, Pe, BPe from the case (Pe from Pr*Re, BPe = B*Pe if not given) and the
    forcing wavenumber kf (1 when the case does not give it, the schema default)."""
    case = attrs.get("case", {})
    p = case.get("parameters", {}) if isinstance(case.get("parameters"), dict) else {}
    forcing = case.get("forcing", {}) if isinstance(case.get("forcing"), dict) else {}
    try:
        kf = float(forcing.get("kf", 1.0))
    except (TypeError, ValueError):
        kf = float("nan")

    def num(key):
        v = p.get(key)
        try:
            return float(v)
        except (TypeError, ValueError):
            return float("nan")

    Re, B, Pe, Pr, BPe = (num(k) for k in ("Re", "B", "Pe", "Pr", "BPe"))
    if math.isnan(Pe) and not math.isnan(Pr):
        Pe = Pr * Re
    if math.isnan(BPe) and not (math.isnan(B) or math.isnan(Pe)):
        BPe = B * Pe
    return {"Re": Re, "B": B, "Pe": Pe, "BPe": BPe, "kf": kf}


def _dissipation_intermittency(t, eps):
    """Coefficient of variation and flatness of ``eps`` on a uniform resampling."""
    ok = np.isfinite(eps)
    if np.count_nonzero(ok) < 2:
        return float("nan"), float("nan")
    _, e = uniform_resample(t[ok], eps[ok])
    m = e.mean()
    d = e - m
    var = np.mean(d * d)
    cv = math.sqrt(var) / m if m > 0 else float("nan")
    flat = float(np.mean(d**4) / var**2) if var > 0 else float("nan")
    return cv, flat


def batchelor_factor(Sc):
    """``kmax eta_B / (kmax eta_K)``: ``Sc^(-1/2)`` for ``Sc > 1`` (the Batchelor scale
    ``eta_B = eta_K Sc^(-1/2)``, Batchelor 1959, J. Fluid Mech. 5, 113), else 1: a
    tracer diffusing faster than momentum has no finer scale than the flow's."""
    return Sc ** -0.5 if Sc > 1 else 1.0


def _tracer_spec(case, name, run_folder):
    """The case keys of tracer ``name``: from the segment's case, else (a tracer added
    at a restart that began no segment) from the run folder's latest ``case.yaml``."""
    spec = (case.get("tracers") or {}).get(name) if isinstance(case.get("tracers"), dict) else None
    if isinstance(spec, dict):
        return spec
    try:
        with open(os.path.join(run_folder, "case.yaml")) as fh:
            latest = yaml.safe_load(fh) or {}
    except (OSError, yaml.YAMLError):
        return {}
    spec = (latest.get("tracers") or {}).get(name) if isinstance(latest.get("tracers"), dict) else None
    return spec if isinstance(spec, dict) else {}


def _tracers(data, case, run_folder, Re):
    """``{name: {"Sc", "Pe_c", "G"}}`` of the tracers this segment recorded (a column
    ``D_c.NAME`` with a finite record), in the case's order, then any others by name."""
    recorded = [k.split(".", 1)[1] for k in data if k.startswith("D_c.")
                and np.isfinite(data[k]).any()]
    listed = list((case.get("tracers") or {}) if isinstance(case.get("tracers"), dict) else ())
    names = [n for n in listed if n in recorded] + sorted(n for n in recorded if n not in listed)
    out = {}
    for n in names:
        spec = _tracer_spec(case, n, run_folder)

        def num(key, default=float("nan")):
            try:
                return float(spec.get(key, default))
            except (TypeError, ValueError):
                return float("nan")
        Pe_c, Sc = num("Pe"), num("Sc")
        if math.isnan(Pe_c):
            Pe_c = Sc * Re
        elif math.isnan(Sc):
            Sc = Pe_c / Re
        out[n] = {"Sc": Sc, "Pe_c": Pe_c, "G": num("gradient", 1.0)}
    return out


def _with_resolution(data, tracers):
    """``data`` with each tracer's ``kmax_etaB.NAME = kmax_etaK * batchelor_factor(Sc)``."""
    data = dict(data)
    for n, p in tracers.items():
        if "kmax_etaK" in data and math.isfinite(p["Sc"]):
            data[f"kmax_etaB.{n}"] = data["kmax_etaK"] * batchelor_factor(p["Sc"])
    return data


def _half_means(t, x):
    """Trapezoidal time means of ``x`` over the first and the second half of ``t``'s span."""
    ok = np.isfinite(x)
    t, x = t[ok], x[ok]
    if t.size < 4:
        return float("nan"), float("nan")
    mid = 0.5 * (t[0] + t[-1])
    xm = np.interp(mid, t, x)
    lo, hi = t < mid, t > mid
    t1, x1 = np.r_[t[lo], mid], np.r_[x[lo], xm]
    t2, x2 = np.r_[mid, t[hi]], np.r_[xm, x[hi]]
    return (float(np.trapezoid(x1, t1) / (mid - t[0])),
            float(np.trapezoid(x2, t2) / (t[-1] - mid)))


def _tracer_columns(row, name, p):
    """A tracer's parameters, in the row before its averages."""
    row[f"Sc.{name}"], row[f"Pe_c.{name}"], row[f"G.{name}"] = p["Sc"], p["Pe_c"], p["G"]


def _tracer_checks(row, t, data, tracers, opts, warnings):
    """The equilibrium numbers of each tracer (columns ``D_gap_z.NAME``, the difference
    ``D_c - D_chi`` in combined standard errors, and ``c_rms_drift.NAME``, the halves'
    relative difference) and the tracer warnings."""
    for n, p in tracers.items():
        dc, dchi = row[f"D_c.{n}"], row[f"D_chi.{n}"]
        err = math.hypot(row[f"D_c.{n}_err"], row[f"D_chi.{n}_err"])
        row[f"D_gap_z.{n}"] = (dc - dchi) / err if err > 0 else float("nan")
        m1, m2 = _half_means(t, data[f"c_rms.{n}"]) if f"c_rms.{n}" in data else (np.nan, np.nan)
        mid = 0.5 * (m1 + m2)
        row[f"c_rms_drift.{n}"] = (m2 - m1) / mid if mid > 0 else float("nan")
        kb = row.get(f"kmax_etaB.{n}", float("nan"))
        # for Sc <= 1 kmax_etaB is kmax_etaK: the flow's own warning says it
        if p["Sc"] > 1 and kb < opts.kmax_etaK_min and not row["flow"]:
            warnings.append(f"under-resolved tracer {n}: kmax*eta_B = {kb:.3g} < "
                            f"{opts.kmax_etaK_min:g} (Sc = {p['Sc']:.3g})")
        z = row[f"D_gap_z.{n}"]
        if abs(z) > opts.tracer_sigmas:
            warnings.append(f"tracer {n} not at equilibrium: D_c = {dc:.4g} +- "
                            f"{row[f'D_c.{n}_err']:.2g} and D_chi = {dchi:.4g} +- "
                            f"{row[f'D_chi.{n}_err']:.2g} differ by {abs(z):.3g} combined "
                            f"standard errors (> {opts.tracer_sigmas:g})")
        drift = row[f"c_rms_drift.{n}"]
        if abs(drift) > opts.tracer_drift_max:
            warnings.append(f"tracer {n} not at equilibrium: c_rms over the window's halves "
                            f"{m1:.4g} then {m2:.4g} ({100 * drift:+.3g}%, beyond "
                            f"{100 * opts.tracer_drift_max:g}%)")


def averaged_names(row):
    """The averaged quantities of a summary row: :data:`AVERAGED`, then each tracer's
    :data:`TRACER_AVERAGED` as ``q.NAME`` (those with a column in the row)."""
    names = list(AVERAGED)
    tracers = [k.split(".", 1)[1] for k in row if k.startswith("Sc.")]
    names += [f"{q}.{n}" for n in tracers for q in TRACER_AVERAGED if f"{q}.{n}" in row]
    return names


def _average_into(row, q, t, x, opts, fname, warnings, n_corr):
    """``q, q_err, q_tau`` of ``x(t)`` into the row (NaN when undefined); its window
    in correlation times into ``n_corr`` unless that is None."""
    row[q] = row[f"{q}_err"] = row[f"{q}_tau"] = float("nan")
    if x is None:
        return
    ok = np.isfinite(x)
    if not ok.any():
        return  # quantity not defined for this run (e.g. Pe_turb without Pe)
    if not ok.all():
        warnings.append(f"{q}: {np.count_nonzero(~ok)} non-finite records in the window skipped")
    try:
        avg = time_average(t[ok], x[ok], n_batches=opts.n_batches, name=q)
    except ValueError as exc:
        raise ValueError(f"{fname}: {exc}") from None
    row[q], row[f"{q}_err"], row[f"{q}_tau"] = avg.mean, avg.sigma, avg.tau
    if avg.tau > 0 and n_corr is not None:
        n_corr.append(((avg.t_end - avg.t_start) / avg.tau, q))
    if not avg.tau_reliable:
        warnings.append(f"{q}: autocorrelation window not reached; its error bar is unreliable")


def summarize_run(path, options=None, **overrides):
    """Summary row of one run.

    Parameters
    ----------
    path : str or path-like
        Run folder or its ``timeseries.h5``.
    options : SummaryOptions, optional
    **overrides
        Fields of :class:`SummaryOptions` to replace (e.g. ``start=120.0``).

    Returns
    -------
    dict
        Flat row; ``warnings`` is a list of strings. Absent quantities are NaN.
    """
    opts = options or SummaryOptions()
    if overrides:
        allowed = SummaryOptions.__dataclass_fields__
        for k in overrides:
            if k not in allowed:
                raise ValueError(f"unknown summary option '{k}'; allowed: {', '.join(allowed)}")
        if isinstance(overrides.get("thresholds"), dict):
            overrides["thresholds"] = RegimeThresholds.from_dict(overrides["thresholds"])
        opts = replace(opts, **overrides)
    fname = _series_path(path)
    data, attrs, dropped = read_timeseries(fname)
    warnings = []
    if dropped:
        warnings.append(f"{dropped} records overwritten by a restart were ignored")
    segs = split(data, attrs)
    if opts.segment == "all":
        seg = segs[-1]
        if len(segs) > 1:
            warnings.append("averaged across all {} segments, over the changes: {}".format(
                len(segs), "; ".join(f"t = {g.t:.6g}: {g.describe_changes()}" for g in segs[1:])))
        case = segs[-1].case
    else:
        seg = choose(segs, opts.segment, fname)
        data = {k: v[seg.records] for k, v in data.items()}
        case = seg.case
        if len(segs) > 1:
            warnings.append(f"segment {seg.index} of {len(segs)} averaged (from t = {seg.t:.6g}"
                            + (f", after {seg.describe_changes()}" if seg.changes else "") + ")")
        if opts.start is not None and opts.start < seg.t and seg.index > 0:
            warnings.append(f"start {opts.start:g} lies before segment {seg.index} (t = {seg.t:.6g}, "
                            f"{seg.describe_changes()}); averaging from t = {seg.t:.6g} only "
                            "(use segment 'all' to cross the change)")
            opts = replace(opts, start=None)
    t = data["t"]
    if t.size == 0:
        raise ValueError(f"{fname}: segment {seg.index} holds no records")
    tracers = _tracers(data, case, os.path.dirname(os.path.abspath(fname)),
                       _parameters({"case": case})["Re"])
    data = _with_resolution(data, tracers)
    short = t.size < 2 * opts.n_batches
    if short:
        return _short_row(fname, data, attrs, case, segs, seg, opts, warnings, tracers)
    steady_in = {}
    for q in opts.steady_quantities:
        if q not in data:
            raise ValueError(f"{fname}: steady-state quantity '{q}' not in the time series")
        ok = np.isfinite(data[q])
        if not ok.all():
            raise ValueError(f"{fname}: steady-state quantity '{q}' has non-finite records")
        steady_in[q] = data[q]
    try:
        steady = detect_steady_state(t, steady_in, start=opts.start)
    except ValueError as exc:
        raise ValueError(f"{fname}: {exc}") from None
    if not steady.reliable:
        warnings.append("no reliable steady state: MSER truncation falls in the second half (run too short or drifting)")
    row = _head(fname, attrs, case, segs, seg, opts)
    row.update({
        "t_first": float(t[0]),
        "t_last": float(t[-1]),
        "t_start": float("nan"),
        "t_end": float(t[-1]),
        "window": float("nan"),
        "steady_method": steady.method,
        "steady_reliable": steady.reliable,
        "short": False,
    })
    win = t >= steady.t_start
    if np.count_nonzero(win) < 2 * opts.n_batches:
        warnings.append(f"steady window from t = {steady.t_start:.6g} ({steady.method})")
        return _short_row(fname, {k: v[win] for k, v in data.items()}, attrs, case, segs, seg,
                          opts, warnings, tracers)
    row["t_start"] = float(t[win][0])
    row["window"] = row["t_end"] - row["t_start"]
    n_corr = []
    for q in AVERAGED:
        _average_into(row, q, t[win], data[q][win] if q in data else None, opts, fname,
                      warnings, n_corr)
    for n, p in tracers.items():
        _tracer_columns(row, n, p)
        for q in TRACER_AVERAGED:
            key = f"{q}.{n}"
            # kmax_etaB is kmax_etaK times a constant: its correlation time is that one's
            _average_into(row, key, t[win], data[key][win] if key in data else None, opts,
                          fname, warnings, None if q == "kmax_etaB" else n_corr)
    if "eps" in data:
        cv, flat = _dissipation_intermittency(t[win], data["eps"][win])
    else:
        cv = flat = float("nan")
    row["eps_cv"], row["eps_flatness"] = cv, flat
    row["quiet_fraction"], row["flux_cv"] = (flux_intermittency(t[win], data["J"][win]) if "J" in data
                                             else (float("nan"), float("nan")))
    if n_corr:
        shortest, qname = min(n_corr)
        row["correlation_times"] = shortest
        if shortest < opts.min_correlation_times:
            warnings.append(
                f"too short to average: window holds {shortest:.3g} autocorrelation times of {qname} "
                f"(< {opts.min_correlation_times:g})"
            )
    else:
        row["correlation_times"] = float("nan")
    row.update(flow_numbers(t[win], {k: v[win] for k, v in data.items()}))
    row["flow"] = flow_state(t[win], {k: v[win] for k, v in data.items()}, opts.thresholds)
    if row["kmax_etaK"] < opts.kmax_etaK_min and not row["flow"]:
        warnings.append(f"under-resolved: kmax*eta_K = {row['kmax_etaK']:.3g} < {opts.kmax_etaK_min:g}")
    _tracer_checks(row, t[win], {k: v[win] for k, v in data.items()}, tracers, opts, warnings)
    # spectral tail over the same window, where the run wrote spectra (tools/analysis/spectral_tail.py)
    from shearmix.tools.analysis.spectral_tail import tail_ratio, tail_warning
    row["tail_ratio"] = tail_ratio(os.path.dirname(os.path.abspath(fname)), row["t_start"])
    tail = tail_warning(row["tail_ratio"])
    if tail:
        warnings.append(tail)
    if row["model"] == "lowpe" and row["Pe_turb"] > opts.pe_turb_max:
        warnings.append(f"outside low-Peclet validity: Pe_turb = {row['Pe_turb']:.3g} > {opts.pe_turb_max:g}")
    _label(row, opts, warnings, data)
    return row


def _head(fname, attrs, case, segs, seg, opts):
    """The columns naming the run, its segment and that segment's parameters."""
    pars = _parameters({"case": case})
    return {
        "run": os.path.basename(os.path.dirname(os.path.abspath(fname))),
        "path": os.path.abspath(fname),
        "model": case.get("model", attrs.get("model", "")),
        "convention": attrs.get("convention", ""),
        "version": attrs.get("version", ""),
        "segment": "all" if opts.segment == "all" else seg.index,
        "segments": len(segs),
        "segment_t": float("nan") if opts.segment == "all" else seg.t,
        **pars,
    }


def _label(row, opts, warnings, data):
    """The regime label, unless the flow is laminar or growing (then that is the label),
    with the numbers behind it; a series without the fluctuation keys is classified
    on the older numbers, with a warning."""
    # the row holds NaN for every averaged key the series lacks: classify must see
    # those as absent (fallback), not as undefined numbers
    given = {k: v for k, v in row.items() if k not in FLUCT_KEYS or k in data}
    reg = classify(given, opts.thresholds)
    row.update({k: reg.numbers[k] for k in ("isotropy", "viscous_ratio", "l_nu")})
    row["regime_basis"] = reg.basis
    if row.get("flow"):
        row["regime"] = row["flow"]
        row["regime_reason"] = flow_reason(row["flow"], opts.thresholds)
    else:
        row["regime"] = reg.label
        row["regime_reason"] = reg.reason
    if reg.fallback:
        warnings.append(reg.fallback)
    row["warnings"] = warnings


def _short_row(fname, data, attrs, case, segs, seg, opts, warnings, tracers=None):
    """Summary of a series too short for error bars: time means over all its
    records, errors NaN, the shortness in ``short`` and the warnings (no tracer
    equilibrium check: it needs the error bars)."""
    t = data["t"]
    need = 2 * opts.n_batches
    warnings.append(f"short: {t.size} records; at least {need} are needed for error bars and a "
                    "steady-state window (means over all records, no error bars)")
    row = _head(fname, attrs, case, segs, seg, opts)
    row.update({"t_first": float(t[0]), "t_last": float(t[-1]), "t_start": float(t[0]),
                "t_end": float(t[-1]), "window": float(t[-1] - t[0]),
                "steady_method": "none (short)", "steady_reliable": False, "short": True})
    tracers = tracers or {}
    for q in list(AVERAGED) + [f"{q}.{n}" for n in tracers for q in TRACER_AVERAGED]:
        base, _, n = q.partition(".")
        if n and base == TRACER_AVERAGED[0]:
            _tracer_columns(row, n, tracers[n])  # each tracer's parameters before its means
        row[q] = row[f"{q}_err"] = row[f"{q}_tau"] = float("nan")
        if q not in data:
            continue
        ok = np.isfinite(data[q])
        if np.count_nonzero(ok) >= 2 and t[ok][-1] > t[ok][0]:
            row[q] = float(np.trapezoid(data[q][ok], t[ok]) / (t[ok][-1] - t[ok][0]))
        elif np.count_nonzero(ok) == 1:
            row[q] = float(data[q][ok][0])
    if "eps" in data:
        row["eps_cv"], row["eps_flatness"] = _dissipation_intermittency(t, data["eps"])
    else:
        row["eps_cv"] = row["eps_flatness"] = float("nan")
    row["quiet_fraction"], row["flux_cv"] = (flux_intermittency(t, data["J"]) if "J" in data
                                             else (float("nan"), float("nan")))
    row["correlation_times"] = float("nan")
    row["tail_ratio"] = float("nan")
    row.update(flow_numbers(t, data))
    row["flow"] = flow_state(t, data, opts.thresholds)
    _label(row, opts, warnings, data)
    return row


def summarize_runs(paths, options=None, **overrides):
    """Summaries of several runs (a list of rows, in the given order)."""
    return [summarize_run(p, options, **overrides) for p in paths]


def _cell(v):
    if isinstance(v, list):
        return "; ".join(map(str, v))
    if isinstance(v, float) and math.isnan(v):
        return ""
    return v


def write_csv(rows, path):
    """Write summary rows to one CSV table (union of columns, first-seen order).

    Empty cells mean "not available"; warnings are joined with ``'; '``.
    """
    if isinstance(rows, dict):
        rows = [rows]
    cols = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=cols)
        w.writeheader()
        for r in rows:
            w.writerow({k: _cell(r.get(k, "")) for k in cols})


def _json_value(v):
    if isinstance(v, float) and not math.isfinite(v):
        return None
    if isinstance(v, (np.floating, np.integer, np.bool_)):
        return _json_value(v.item())
    return v


def write_json(rows, path):
    """Write summary rows as JSON (one object, or a list for several; NaN -> null)."""
    single = isinstance(rows, dict)
    rows = [rows] if single else list(rows)
    clean = [{k: _json_value(v) for k, v in r.items()} for r in rows]
    with open(path, "w") as fh:
        json.dump(clean[0] if single else clean, fh, indent=1)
        fh.write("\n")


# ----------------------------------------------------------------- Lz_turb
def lz_turb(E_h, kz):
    """Vertical scale of a horizontal kinetic energy spectrum in ``kz``.

    ``Lz_turb = 2 pi sum_{kz>0} E_h(kz) / sum_{kz>0} kz E_h(kz)``
    (docs/equations.md#reported-numbers); entries with ``kz <= 0`` are ignored.

    Parameters
    ----------
    E_h, kz : array_like
        Spectrum and its wavenumbers (same shape).

    Returns
    -------
    float
    """
    E_h = np.asarray(E_h, dtype=float)
    kz = np.asarray(kz, dtype=float)
    if E_h.shape != kz.shape:
        raise ValueError(f"E_h has shape {E_h.shape}, kz has shape {kz.shape}; they must match")
    pos = kz > 0
    den = np.sum(kz[pos] * E_h[pos])
    if not den > 0:
        raise ValueError("Lz_turb undefined: no horizontal kinetic energy at kz > 0")
    return float(2 * np.pi * np.sum(E_h[pos]) / den)


def horizontal_spectrum_kz(u, v, Lz, axis=-1):
    """Horizontal kinetic energy spectrum in ``kz`` of a physical-space field.

    ``E_h(kz_m) = sum over kx, ky and +-m of (|u_k|^2 + |v_k|^2) / 2`` with
    normalised Fourier amplitudes ``u_k = FFT(u) / N``, so that by Parseval
    ``sum_m E_h(kz_m) = <(u^2 + v^2)/2>``.

    Parameters
    ----------
    u, v : array_like
        Horizontal velocity components on a uniform periodic grid (same shape).
    Lz : float
        Period along ``axis``.
    axis : int
        Vertical axis (last by default, as in the engine's ``(Nx, Ny, Nz)``).

    Returns
    -------
    E_h : ndarray
        For ``m = 0 .. Nz//2``.
    kz : ndarray
        ``2 pi m / Lz``.
    """
    u = np.asarray(u, dtype=float)
    v = np.asarray(v, dtype=float)
    if u.shape != v.shape:
        raise ValueError(f"u has shape {u.shape}, v has shape {v.shape}; they must match")
    if not Lz > 0:
        raise ValueError(f"Lz must be positive, got {Lz}")
    u = np.moveaxis(u, axis, -1)
    v = np.moveaxis(v, axis, -1)
    nz = u.shape[-1]
    power = np.zeros(nz)
    for f in (u, v):
        fk = np.fft.fftn(f) / f.size
        power += 0.5 * np.sum(np.abs(fk) ** 2, axis=tuple(range(f.ndim - 1)))
    m = np.arange(nz // 2 + 1)
    E = power[m].copy()
    # Fold negative kz onto positive; the Nyquist index (even nz) has no partner.
    neg = (nz - m[1:]) % nz
    partner = neg != m[1:]
    E[1:][partner] += power[neg[partner]]
    return E, 2 * np.pi * m / Lz


def lz_turb_from_field(u, v, Lz, axis=-1):
    """``Lz_turb`` of a physical-space velocity field (see :func:`horizontal_spectrum_kz`)."""
    E, kz = horizontal_spectrum_kz(u, v, Lz, axis)
    return lz_turb(E, kz)
