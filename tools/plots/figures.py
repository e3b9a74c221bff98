"""Figures as PNG files, without a display (matplotlib's Agg backend, imported lazily).

Single run (from its folder):

* :func:`plot_series`: energies, budget terms ``I``, ``eps``, ``-J`` and the
  mixing efficiency ``eta`` against time, the steady window shaded;
* :func:`plot_spectra`: kinetic (horizontal and vertical components) and
  thermal spectra in ``kx``, ``ky``, ``kz`` and shells, averaged over the
  records in the steady window;
* :func:`plot_slices`: ``u`` and ``w`` on the horizontal mid-plane
  ``z = Lz/2`` and on the vertical mid-planes ``x = Lx/2`` (the ``y``-``z``
  cut, across the shear) and ``y = Ly/2`` (the ``x``-``z`` cut), where
  layering shows.

Across a sweep: :func:`plot_regime_map` (regime labels over ``(BPe, Re)``) and
:func:`plot_scaling` (quantities against ``BPe`` with error bars, the fitted
power law and the expected slope).

Every title names the run's model, parameters and forcing convention (``Re``
means different things in the ``laminar`` and ``unit`` conventions); every
colour bar and axis says what it shows. Each function returns the path it wrote.
"""
from __future__ import annotations

import math
import os

import numpy as np

__all__ = ["plot_series", "plot_spectra", "plot_slices", "plot_regime_map", "plot_scaling",
           "steady_window", "run_title"]

#: marker colours of the regime labels (shearmix.tools.analysis.regimes.REGIMES)
REGIME_COLOURS = {"laminar": "tab:cyan", "growing": "tab:purple",
                  "isotropic": "tab:blue", "stratified_turbulence": "tab:green",
                  "intermittent": "tab:orange", "viscous_layers": "tab:red",
                  "undetermined": "tab:gray"}


def _pyplot():
    import matplotlib
    matplotlib.use("Agg")  # no display needed; must precede the pyplot import
    import matplotlib.pyplot as plt
    return plt


def _save(fig, path):
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fig.savefig(path, dpi=90)
    _pyplot().close(fig)
    return path


#: how the figures name the series quantities (docs/analysis.md)
QUANTITY_LABELS = {"Lz_turb": r"vertical scale $L_z$", "w_rms": r"$w_{rms}$",
                   "D_flux": r"mixing coefficient $D$ (from the flux)",
                   "D_estimate": r"mixing coefficient $D$ (estimate)", "eta": r"$\eta$"}



def quantity_label(q):
    """Axis label of a summary column; a tracer's ``D_c.NAME`` / ``D_chi.NAME`` name it."""
    base, _, tracer = q.partition(".")
    if tracer and base in ("D_c", "D_chi"):
        how = "from the flux" if base == "D_c" else r"from $\chi_c$"
        return f"tracer {tracer}: $D_c$ ({how})"
    return QUANTITY_LABELS.get(q, q)


def steady_window(data, start=None):
    """Start of the steady window, or ``None`` when there is no reliable one.

    ``start`` if given; else the MSER start on ``K`` and ``eps``
    (shearmix.tools.analysis.steady) when that detection calls it reliable, as
    ``shearmix summary`` does; never a window ``summary`` would not report.
    """
    if start is not None:
        return float(start)
    from shearmix.tools.analysis.steady import detect_steady_state
    try:
        found = detect_steady_state(data["t"], {q: data[q] for q in ("K", "eps")})
    except (ValueError, KeyError):
        return None  # too short for MSER
    return float(found.t_start) if found.reliable else None


def _case_dict(attrs):
    case = attrs.get("case", {})
    if isinstance(case, (str, bytes)):
        import yaml
        case = yaml.safe_load(case)
    return case if isinstance(case, dict) else {}


def run_title(case, fallback="run"):
    """``name (model, Re=..., BPe=...)`` and, on a second line, the forcing convention."""
    from shearmix.solver.case import CaseError, case_from_dict
    try:
        c = case_from_dict(case)
    except CaseError:
        return fallback
    p = {k: v for k, v in c.raw["parameters"].items() if isinstance(v, (int, float))}
    pars = ", ".join(f"{k}={v:g}" for k, v in p.items())
    return f"{c.name} ({c.model}, {pars})\nforcing convention {c.convention}"


def _log_ticks(ax, axis="x"):
    """Log-axis labels at 1, 2, 5 x 10^n as plain numbers, unlabelled minor ticks (no overlap)."""
    from matplotlib import ticker
    a = ax.xaxis if axis == "x" else ax.yaxis
    a.set_major_locator(ticker.LogLocator(base=10, subs=(1.0, 2.0, 5.0), numticks=8))
    a.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    a.set_minor_locator(ticker.LogLocator(base=10, subs=tuple(range(1, 10)), numticks=12))
    a.set_minor_formatter(ticker.NullFormatter())


def _mark_segments(ax, data, attrs):
    """A dashed vertical line at each segment start after the first, labelled with the
    change (:mod:`shearmix.tools.analysis.segments`)."""
    from shearmix.tools.analysis.segments import split
    for seg in split(data, attrs)[1:]:
        for a in ax:
            a.axvline(seg.t, color="k", ls="--", lw=0.8)
        ax[0].annotate(f"segment {seg.index}: {seg.describe_changes()}", xy=(seg.t, 1.0),
                       xycoords=("data", "axes fraction"), xytext=(3, -10),
                       textcoords="offset points", fontsize=7, va="top")


def plot_series(run_dir, path, start=None):
    """Time series of a run: energies, budget terms and mixing efficiency."""
    from shearmix.tools.analysis.summary import read_timeseries
    data, attrs, _ = read_timeseries(run_dir)
    plt = _pyplot()
    t = data["t"]
    t0 = steady_window(data, start)
    fig, ax = plt.subplots(3, 1, figsize=(8, 8.4), sharex=True)
    for q, lab in (("K", "K"), ("Kx", "K_x"), ("Ky", "K_y"), ("Kz", "K_z")):
        if q in data:
            ax[0].plot(t, data[q], label=f"${lab}$", lw=1)
    ax[0].set_yscale("log")
    ax[0].set_ylabel("kinetic energy")
    for q, lab, sign in (("I", "$I$ (power input)", 1), ("eps", r"$\varepsilon$ (dissipation)", 1),
                         ("J", "$-J$ (buoyancy flux)", -1)):
        if q in data:
            ax[1].plot(t, sign * data[q], label=lab, lw=1)
    ax[1].set_yscale("symlog", linthresh=1e-3)
    ax[1].set_ylabel("kinetic energy budget")
    if "eta" in data:
        ax[2].plot(t, data["eta"], color="k", lw=1)
    ax[2].set_ylabel(r"mixing efficiency $\eta$")
    ax[2].set_xlabel("time $t$")
    for a in ax:
        if t0 is not None:
            a.axvspan(t0, t[-1], color="0.9", zorder=0)
        if a.get_legend_handles_labels()[0]:
            a.legend(loc="best", fontsize=8)
    _mark_segments(ax, data, attrs)
    # the last segment's case: a restart that changed the case makes the root one stale
    from shearmix.tools.analysis.segments import split
    title = run_title(split(data, attrs)[-1].case or _case_dict(attrs),
                      os.path.basename(os.path.abspath(run_dir)))
    if t0 is not None:
        note = f"shaded: steady window from t = {t0:.4g}" + (" (given)" if start is not None else "")
    else:
        note = "no reliable steady state (as in 'shearmix summary'): nothing shaded"
    ax[0].set_title(f"{title}\n{note}", fontsize=9)
    fig.tight_layout()
    return _save(fig, path)


def plot_spectra(run_dir, path, start=None):
    """Spectra of a run averaged over the steady window (all records if none is found)."""
    from shearmix.solver.files.spectra import read_spectra
    sp = read_spectra(run_dir)
    t = sp["t"]
    if t.size == 0:
        raise ValueError(f"{run_dir}: the spectra file has no records")
    t0 = start
    if t0 is None:
        try:
            from shearmix.tools.analysis.summary import read_timeseries
            data, _, _ = read_timeseries(run_dir)
            t0 = steady_window(data)
        except (OSError, ValueError):
            t0 = None
    if t0 is not None:
        sel = t >= t0
        how = "given window" if start is not None else "steady window"
    else:
        sel = t >= t[t.size // 2]
        how = "no reliable steady state: last half of the records"
    if not sel.any():
        sel[-1] = True
    plt = _pyplot()
    fig, ax = plt.subplots(2, 4, figsize=(13, 6))
    for j, d in enumerate(("kx", "ky", "kz", "shell")):
        k = sp["wavenumbers"][d]
        kin = sp["kinetic"][d][sel].mean(axis=0)
        th = sp["thermal"][d][sel].mean(axis=0)
        pos = k > 0
        for y, lab in ((kin[0] + kin[1], r"$E_h$ (u, v)"), (kin[2], r"$E_w$"),
                       (kin.sum(axis=0), r"$E$")):
            ax[0, j].loglog(k[pos], np.where(y[pos] > 0, y[pos], np.nan), label=lab, lw=1)
        ax[1, j].loglog(k[pos], np.where(th[pos] > 0, th[pos], np.nan), color="tab:red", lw=1)
        ax[1, j].set_xlabel(f"${d[0]}_{d[1]}$" if d != "shell" else "$|k|$ (shells)")
        for a in ax[:, j]:
            _log_ticks(a, "x")
    ax[0, 0].set_ylabel("kinetic energy spectrum")
    thermal = str(sp["attrs"].get("thermal_field", "thermal field")).replace("lap^-1", "∇⁻²")
    ax[1, 0].set_ylabel(f"spectrum of {thermal}")
    ax[0, 0].legend(fontsize=8)
    span = f"t in [{t[sel][0]:.4g}, {t[sel][-1]:.4g}], {int(sel.sum())} records ({how})"
    title = run_title(_case_dict(sp["attrs"]), os.path.basename(os.path.abspath(run_dir)))
    fig.suptitle(f"{title}\nspectra averaged over {span}", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_slices(fields, lengths, path, title=""):
    """Mid-plane cuts of ``u`` and ``w``.

    Parameters
    ----------
    fields : dict
        ``u`` and ``w`` as arrays ``(Nx, Ny, Nz)`` (x first, as the engine).
    lengths : (Lx, Ly, Lz)
    """
    plt = _pyplot()
    u, w = np.asarray(fields["u"]), np.asarray(fields["w"])
    nx, ny, nz = u.shape
    lx, ly, lz = lengths
    cuts = (
        (r"$z = L_z/2$", lambda f: f[:, :, nz // 2].T, (0, lx, 0, ly), ("x", "y")),
        (r"$x = L_x/2$", lambda f: f[nx // 2, :, :].T, (0, ly, 0, lz), ("y", "z")),
        (r"$y = L_y/2$", lambda f: f[:, ny // 2, :].T, (0, lx, 0, lz), ("x", "z")),
    )
    fig, ax = plt.subplots(2, 3, figsize=(13, 6.5))
    for i, (name, f) in enumerate((("u", u), ("w", w))):
        vmax = float(np.abs(f).max()) or 1.0
        for j, (where, cut, ext, labels) in enumerate(cuts):
            im = ax[i, j].imshow(cut(f), origin="lower", extent=ext, cmap="RdBu_r",
                                 vmin=-vmax, vmax=vmax, aspect="equal", interpolation="nearest")
            ax[i, j].set_title(f"${name}$ at {where}", fontsize=9)
            ax[i, j].set_xlabel(labels[0])
            ax[i, j].set_ylabel(labels[1])
            fig.colorbar(im, ax=ax[i, j], shrink=0.8, label=f"${name}$")
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def _conventions(rows):
    """'model M, forcing convention C' shared by the rows, or says that they differ."""
    def one(key, what):
        # the convention's name only: its laminar amplitude differs with Re
        seen = sorted({str(r.get(key)).split(" (")[0] for r in rows if r.get(key)})
        return f"{what} {seen[0]}" if len(seen) == 1 else (f"{what}s differ: " + "; ".join(seen)
                                                           if seen else f"{what} not recorded")
    return f"{one('model', 'model')}, {one('convention', 'forcing convention')}"


def plot_regime_map(rows, path):
    """Regime label of each run over ``(BPe, Re)``, the mixing efficiency beside it."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(6.5, 4.5))
    seen = set()
    for r in rows:
        x, y = r.get("BPe", float("nan")), r.get("Re", float("nan"))
        if not (math.isfinite(x) and math.isfinite(y) and x > 0 and y > 0):
            continue
        lab = r.get("regime", "undetermined")
        ax.scatter([x], [y], s=70, color=REGIME_COLOURS.get(lab, "k"),
                   label=None if lab in seen else lab, edgecolor="k", zorder=3)
        seen.add(lab)
        eta = r.get("eta", float("nan"))
        if math.isfinite(eta):
            ax.annotate(f"{eta:.2f}", (x, y), textcoords="offset points", xytext=(6, 6), fontsize=8)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("BPe")
    ax.set_ylabel("Re")
    ax.set_title(f"flow regime of each run (numbers: mixing efficiency $\\eta$)\n"
                 f"{_conventions(rows)}", fontsize=9)
    if seen:
        ax.legend(fontsize=8, loc="best")
    fig.tight_layout()
    return _save(fig, path)


def plot_scaling(rows, fits, path, quantities=("Lz_turb", "w_rms", "D_flux", "D_estimate")):
    """Quantities against ``BPe`` (log-log) with error bars, fitted and expected power laws."""
    plt = _pyplot()
    fig, axes = plt.subplots(1, len(quantities), figsize=(3.6 * len(quantities), 3.8))
    by_q = {f["y"]: f for f in fits}
    for ax, q in zip(np.atleast_1d(axes), quantities):
        pts = [r for r in rows if math.isfinite(r.get("BPe", float("nan"))) and r["BPe"] > 0
               and math.isfinite(r.get(q, float("nan"))) and r[q] > 0]
        for r in pts:
            err = r.get(f"{q}_err", float("nan"))
            ax.errorbar([r["BPe"]], [r[q]], yerr=[err if math.isfinite(err) else 0], fmt="o",
                        color=REGIME_COLOURS.get(r.get("regime"), "k"), ms=5, capsize=2)
        f = by_q.get(q, {})
        if pts and "p" in f:
            xs = np.geomspace(f["x_lo"], f["x_hi"], 50)
            ax.plot(xs, f["A"] * xs ** f["p"], "k-", lw=1,
                    label=f"fit p = {f['p']:.2f} [{f['p_lo']:.2f}, {f['p_hi']:.2f}]")
            if "expected" in f:
                xm = math.exp(np.mean(np.log([r["BPe"] for r in pts])))
                ym = math.exp(np.mean(np.log([r[q] for r in pts])))
                ax.plot(xs, ym * (xs / xm) ** f["expected"], "k:", lw=1,
                        label=f"slope {f['expected']:.3g} (expected)")
            ax.legend(fontsize=7)
        ax.set_xscale("log")
        ax.set_yscale("log")
        _log_ticks(ax, "y")
        ax.set_xlabel("BPe")
        ax.set_ylabel(quantity_label(q))
    fig.suptitle(f"steady-state averages against BPe (error bars: one standard error)\n"
                 f"{_conventions(rows)}", fontsize=9)
    fig.tight_layout()
    return _save(fig, path)
