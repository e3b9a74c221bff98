"""Across a sweep: one table of all members, power-law fits against BPe, figures.

Per member the row is :func:`shearmix.tools.analysis.summary.summarize_run` (time averages with
uncertainties, regime label and warnings; see docs/analysis.md) with the
member's name and state in front; it averages the member's last segment
(a restart that changed the case begins a new one) and says so. The fits are :func:`shearmix.tools.analysis.fits.fit_power_law`
of ``Lz_turb``, ``w_rms``, ``D_flux`` and ``D_estimate`` (and, per passive tracer
``NAME``, ``D_c.NAME`` and ``D_chi.NAME``) against ``BPe``
(weighted by the rows' ``_err`` columns when every selected error is usable,
unweighted otherwise), compared with :data:`shearmix.tools.analysis.fits.EXPECTED_EXPONENTS`.
The selection can be restricted to a ``BPe`` range and to one regime label;
the scalings are only expected inside one regime.

Files written to the output folder (the sweep folder by default):
``summary.csv`` (every member: one not summarised has its reason in
``warnings`` and empty numbers; a short one has its means, no error bars,
``short`` true, and is left out of the fits), ``fits.csv`` (one row per fitted quantity) and,
unless disabled, ``regime-map.png`` and ``scaling.png``.
"""
from __future__ import annotations

import csv
import math
import numbers
import os

import numpy as np

from shearmix.tools.analysis.fits import EXPECTED_EXPONENTS, compare_exponent, fit_power_law
from shearmix.tools.analysis.summary import SERIES_FILE, SummaryOptions, summarize_run, write_csv
from shearmix.tools.sweeps.status import sweep_status

__all__ = ["FIT_QUANTITIES", "TRACER_FIT_QUANTITIES", "fit_quantities", "summarize_sweep",
           "fit_rows", "write_fits"]

#: Quantities fitted against BPe (docs/equations.md#regimes).
FIT_QUANTITIES = ("Lz_turb", "w_rms", "D_flux", "D_estimate")
#: Per tracer, fitted as ``q.NAME`` beside them: its two diffusivities (docs/equations.md#tracers).
TRACER_FIT_QUANTITIES = ("D_c", "D_chi")


def fit_quantities(rows):
    """:data:`FIT_QUANTITIES`, then :data:`TRACER_FIT_QUANTITIES` of every tracer some
    row carries (a column ``Sc.NAME``), tracers in first-seen order."""
    names = []
    for r in rows:
        names += [k.split(".", 1)[1] for k in r if k.startswith("Sc.") and k[3:] not in names]
    return FIT_QUANTITIES + tuple(f"{q}.{n}" for n in names for q in TRACER_FIT_QUANTITIES)


def _select(rows, x, x_range, regime):
    out = []
    for r in rows:
        v = r.get(x, float("nan"))
        # any real number (a BPe of 1 may come as int 1), not a bool or a text cell
        if isinstance(v, bool) or not isinstance(v, numbers.Real) or not (math.isfinite(v) and v > 0):
            continue
        if x_range is not None and not (x_range[0] <= v <= x_range[1]):
            continue
        if regime is not None and r.get("regime") != regime:
            continue
        out.append(r)
    return out


def fit_rows(rows, x="BPe", quantities=FIT_QUANTITIES, x_range=None, regime=None,
             confidence=0.95):
    """Power-law fits of ``quantities`` against ``x`` over summary rows.

    Returns
    -------
    list of dict
        One per quantity: ``y``, ``x``, ``n``, ``weighted`` and, when a fit
        was possible, the fit's numbers and the comparison with the expected
        exponent; otherwise ``note`` says why not.
    """
    sel = _select(rows, x, x_range, regime)
    out = []
    for q in quantities:
        pts = [r for r in sel if math.isfinite(r.get(q, float("nan"))) and r[q] > 0]
        res = {"y": q, "x": x, "n": len(pts), "weighted": False, "note": ""}
        xs = {r[x] for r in pts}
        if len(xs) < 3:
            res["note"] = f"needs 3 or more distinct {x} values with positive {q}, got {len(xs)}"
            out.append(res)
            continue
        xv = np.array([r[x] for r in pts])
        yv = np.array([r[q] for r in pts])
        ev = np.array([r.get(f"{q}_err", float("nan")) for r in pts])
        usable = np.all(np.isfinite(ev) & (ev > 0))
        fit = fit_power_law(xv, yv, ev if usable else None, confidence=confidence)
        res.update(weighted=bool(usable), p=fit.p, p_err=fit.p_stderr, p_lo=fit.p_ci[0],
                   p_hi=fit.p_ci[1], A=fit.A, chi2_red=fit.chi2_red, confidence=fit.confidence,
                   x_lo=fit.x_range[0], x_hi=fit.x_range[1])
        if not usable:
            res["note"] = "unweighted: some runs have no usable error bar"
        exp = EXPECTED_EXPONENTS.get((x, q))
        if exp is not None:
            c = compare_exponent(fit, exp)
            res.update(expected=c["expected"], consistent=c["consistent"], z=c["z"])
        out.append(res)
    return out


FIT_COLUMNS = ("y", "x", "n", "p", "p_err", "p_lo", "p_hi", "confidence", "A", "chi2_red",
               "weighted", "expected", "consistent", "z", "x_lo", "x_hi", "selection", "note",
               "sweep", "version")


def write_fits(fits, path, selection="", sweep=""):
    """Write fit results as CSV (one row per quantity; empty cells where undefined).

    Each row names the sweep file it came from and the program version.
    """
    from shearmix.solver.version import __version__
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=FIT_COLUMNS)
        w.writeheader()
        for f in fits:
            row = {k: f.get(k) for k in FIT_COLUMNS}
            row["selection"] = f.get("selection", selection)
            row["sweep"] = sweep
            row["version"] = __version__
            w.writerow({k: ("" if v is None else v) for k, v in row.items()})


def _fmt(v, err=None):
    if not (isinstance(v, float) and math.isfinite(v)):
        return "-"
    return f"{v:.4g}" if err is None or not math.isfinite(err) else f"{v:.4g}+-{err:.2g}"


def _numbers(r):
    """The numbers behind a row's label, in the order of the rules (docs/analysis.md#regimes)."""
    return ", ".join(_fmt(r.get(k, float("nan"))) for k in ("isotropy", "viscous_ratio", "eta",
                                                             "quiet_fraction"))


def summarize_sweep(sweep, start=None, x_range=None, regime=None, thresholds=None, plots=True,
                    out_dir=None, log=print):
    """Summaries of every member with results, the fits, and the files (module docstring).

    Returns
    -------
    dict
        ``rows`` (summary rows), ``fits``, ``skipped`` (member -> reason),
        ``files`` (paths written).
    """
    out_dir = out_dir or sweep.directory
    os.makedirs(out_dir, exist_ok=True)
    opts = SummaryOptions(start=start, **({"thresholds": thresholds} if thresholds else {}))
    states = {r["member"]: r["state"] for r in sweep_status(sweep)}
    rows, skipped = [], {}
    for m in sweep.members:
        run_dir = sweep.run_dir(m)
        if not os.path.exists(os.path.join(run_dir, SERIES_FILE)):
            skipped[m.name] = "no results"
        else:
            try:
                row = summarize_run(run_dir, opts)
            except (ValueError, OSError) as exc:
                skipped[m.name] = str(exc)
        if m.name in skipped:
            # every member has its line in the table, with the reason it holds no numbers
            rows.append({"member": m.name, "state": states.get(m.name, ""), "regime": "",
                         "warnings": [f"not summarised: {skipped[m.name]}"]})
            continue
        rows.append({"member": m.name, "state": states.get(m.name, ""), **row})
    files = []
    done = len(sweep.members) - len(skipped)
    log(f"sweep {sweep.name}: {done} of {len(sweep.members)} members summarised")
    for name, why in skipped.items():
        log(f"  {name}: not summarised ({why})")
    table = os.path.join(out_dir, "summary.csv")
    write_csv(rows, table)
    files.append(table)
    if not done:
        log(f"  wrote {os.path.relpath(table)}")
        return {"rows": rows, "fits": [], "skipped": skipped, "files": files}
    rows_done = [r for r in rows if r["member"] not in skipped]
    head = f"  {'member':14s} {'state':13s} {'BPe':>7s} {'eta':>14s} {'w_rms':>15s} " \
           f"{'Lz_turb':>15s} {'D_flux':>15s}  regime  (isotropy, viscous_ratio, eta, quiet_fraction)"
    log(head)
    for r in rows_done:
        log(f"  {r['member']:14s} {r['state']:13s} {r['BPe']:7.3g} {_fmt(r['eta'], r['eta_err']):>14s} "
            f"{_fmt(r['w_rms'], r['w_rms_err']):>15s} {_fmt(r['Lz_turb'], r['Lz_turb_err']):>15s} "
            f"{_fmt(r['D_flux'], r['D_flux_err']):>15s}  {r['regime']} ({_numbers(r)})"
            + (f"  [segment {r['segment']} of {r['segments']}]" if r["segments"] > 1 else "")
            + ("  [short]" if r["short"] else "")
            + (f"  [{len(r['warnings'])} warning(s)]" if r["warnings"] else ""))
    # short members have no error bars and no steady window: they stay in the table, not the fits
    quantities = fit_quantities(rows_done)
    fits = fit_rows([r for r in rows_done if not r["short"]], quantities=quantities,
                    x_range=x_range, regime=regime)
    selection = "all runs" if x_range is None and regime is None else \
        ", ".join(s for s in (f"BPe in [{x_range[0]:g}, {x_range[1]:g}]" if x_range else "",
                              f"regime {regime}" if regime else "") if s)
    fpath = os.path.join(out_dir, "fits.csv")
    write_fits(fits, fpath, selection, sweep.source)
    files.append(fpath)
    log(f"  power laws y = A BPe^p ({selection}):")
    for f in fits:
        if "p" not in f:
            log(f"    {f['y']:10s} no fit: {f['note']}")
            continue
        line = (f"    {f['y']:10s} p = {f['p']:.3f} +- {f['p_err']:.2g}, "
                f"{100 * f['confidence']:g}% [{f['p_lo']:.3f}, {f['p_hi']:.3f}] ({f['n']} runs)")
        if "expected" in f:
            line += (f"; expected {f['expected']:.3f}: "
                     f"{'consistent' if f['consistent'] else 'not consistent'} ({f['z']:+.1f} s.e.)")
        if f["note"]:
            line += f"; {f['note']}"
        log(line)
    if plots:
        from shearmix.tools.plots import figures as P
        files.append(P.plot_regime_map(rows_done, os.path.join(out_dir, "regime-map.png")))
        files.append(P.plot_scaling(rows_done, fits, os.path.join(out_dir, "scaling.png"),
                                    quantities=quantities))
    for p in files:
        log(f"  wrote {os.path.relpath(p)}")
    return {"rows": rows, "fits": fits, "skipped": skipped, "files": files}
