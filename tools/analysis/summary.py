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
   default 1, lowpe model only).

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
    """

    start: float | None = None
    steady_quantities: tuple = ("K", "eps")
    n_batches: int = 20
    kmax_etaK_min: float = 1.0
    min_correlation_times: float = 50.0
    pe_turb_max: float = 1.0
    thresholds: RegimeThresholds = field(default_factory=RegimeThresholds)
    segment: int | str | None = None


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
    short = t.size < 2 * opts.n_batches
    if short:
        return _short_row(fname, data, attrs, case, segs, seg, opts, warnings)
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
                          opts, warnings)
    row["t_start"] = float(t[win][0])
    row["window"] = row["t_end"] - row["t_start"]
    n_corr = []
    for q in AVERAGED:
        row[q] = row[f"{q}_err"] = row[f"{q}_tau"] = float("nan")
        if q not in data:
            continue
        x = data[q][win]
        ok = np.isfinite(x)
        if not ok.any():
            continue  # quantity not defined for this run (e.g. Pe_turb without Pe)
        if not ok.all():
            warnings.append(f"{q}: {np.count_nonzero(~ok)} non-finite records in the window skipped")
        try:
            avg = time_average(t[win][ok], x[ok], n_batches=opts.n_batches, name=q)
        except ValueError as exc:
            raise ValueError(f"{fname}: {exc}") from None
        row[q], row[f"{q}_err"], row[f"{q}_tau"] = avg.mean, avg.sigma, avg.tau
        if avg.tau > 0:
            n_corr.append(((avg.t_end - avg.t_start) / avg.tau, q))
        if not avg.tau_reliable:
            warnings.append(f"{q}: autocorrelation window not reached; its error bar is unreliable")
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


def _short_row(fname, data, attrs, case, segs, seg, opts, warnings):
    """Summary of a series too short for error bars: time means over all its
    records, errors NaN, the shortness in ``short`` and the warnings."""
    t = data["t"]
    need = 2 * opts.n_batches
    warnings.append(f"short: {t.size} records; at least {need} are needed for error bars and a "
                    "steady-state window (means over all records, no error bars)")
    row = _head(fname, attrs, case, segs, seg, opts)
    row.update({"t_first": float(t[0]), "t_last": float(t[-1]), "t_start": float(t[0]),
                "t_end": float(t[-1]), "window": float(t[-1] - t[0]),
                "steady_method": "none (short)", "steady_reliable": False, "short": True})
    for q in AVERAGED:
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
