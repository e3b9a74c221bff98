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

Each function returns the path it wrote.
"""
from __future__ import annotations

import math
import os

import numpy as np

__all__ = ["plot_series", "plot_spectra", "plot_slices", "plot_regime_map", "plot_scaling",
           "steady_start"]

#: marker colours of the regime labels (shearmix.tools.analysis.regimes.REGIMES)
REGIME_COLOURS = {"isotropic": "tab:blue", "stratified_turbulence": "tab:green",
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


def steady_start(data, start=None):
    """Start of the steady window: ``start`` if given, else MSER on K and eps (shearmix.tools.analysis.steady)."""
    if start is not None:
        return float(start)
    from shearmix.tools.analysis.steady import detect_steady_state
    t = data["t"]
    try:
        return detect_steady_state(t, {q: data[q] for q in ("K", "eps")}).t_start
    except (ValueError, KeyError):
        return float(t[len(t) // 2])  # too short for MSER: the second half


def plot_series(run_dir, path, start=None):
    """Time series of a run: energies, budget terms and mixing efficiency."""
    from shearmix.tools.analysis.summary import read_timeseries
    data, attrs, _ = read_timeseries(run_dir)
    plt = _pyplot()
    t = data["t"]
    t0 = steady_start(data, start) if t.size >= 40 else None
    fig, ax = plt.subplots(3, 1, figsize=(8, 8), sharex=True)
    for q, lab in (("K", "K"), ("Kx", "K_x"), ("Ky", "K_y"), ("Kz", "K_z")):
        if q in data:
            ax[0].plot(t, data[q], label=f"${lab}$", lw=1)
    ax[0].set_yscale("log")
    ax[0].set_ylabel("kinetic energy")
    for q, lab, sign in (("I", "I", 1), ("eps", r"\varepsilon", 1), ("J", "-J", -1)):
        if q in data:
            ax[1].plot(t, sign * data[q], label=f"${lab}$", lw=1)
    ax[1].set_yscale("symlog", linthresh=1e-3)
    ax[1].set_ylabel("budget terms")
    if "eta" in data:
        ax[2].plot(t, data["eta"], color="k", lw=1)
    ax[2].set_ylabel(r"mixing efficiency $\eta$")
    ax[2].set_xlabel("t")
    for a in ax:
        if t0 is not None:
            a.axvspan(t0, t[-1], color="0.9", zorder=0)
        if a.get_legend_handles_labels()[0]:
            a.legend(loc="best", fontsize=8)
    case = attrs.get("case", {})
    p = case.get("parameters", {}) if isinstance(case, dict) else {}
    title = f"{case.get('name', os.path.basename(os.path.abspath(run_dir)))} ({attrs.get('model', '')}, " + \
        ", ".join(f"{k}={v:g}" for k, v in p.items() if isinstance(v, (int, float))) + ")"
    ax[0].set_title(title + ("\nshaded: steady window" if t0 is not None else ""), fontsize=9)
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
            t0 = steady_start(data) if data["t"].size >= 40 else None
        except (OSError, ValueError):
            t0 = None
    sel = t >= t0 if t0 is not None else np.ones(t.size, bool)
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
        ax[1, j].set_xlabel(d if d != "shell" else "|k| (shells)")
    ax[0, 0].set_ylabel("kinetic energy spectrum")
    ax[1, 0].set_ylabel(f"spectrum of {sp['attrs'].get('thermal_field', 'thermal field')}")
    ax[0, 0].legend(fontsize=8)
    span = f"t in [{t[sel][0]:.4g}, {t[sel][-1]:.4g}], {int(sel.sum())} records"
    fig.suptitle(f"{os.path.basename(os.path.abspath(run_dir))}: spectra averaged over {span}",
                 fontsize=10)
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
            fig.colorbar(im, ax=ax[i, j], shrink=0.8)
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


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
    ax.set_title("regimes (labels: tools/analysis/regimes.py; numbers: mixing efficiency)", fontsize=9)
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
        ax.set_xlabel("BPe")
        ax.set_title(q, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)
