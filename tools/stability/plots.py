"""Figures of the stability tool (matplotlib, optional, imported only here, Agg backend).

Each PNG records the program version, the parameters and the case in its
``Description`` metadata field.
"""
from __future__ import annotations

import math

import numpy as np


def require_matplotlib():
    """Import matplotlib with the Agg backend; ValueError (one line) if it is missing."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise ValueError("--png: matplotlib is not installed (optional dependency of the tools); "
                         "install it or leave out --png") from None
    return plt


def _save(fig, path, description):
    from .modefile import program_version
    fig.savefig(path, dpi=120, metadata={"Software": f"shearmix {program_version()}",
                                         "Description": description})


def growth_map_figure(gmap, path, description, box=None, optimum=None):
    """Growth rate over (kx, kz), zero contour, box modes (if ``box``) and the optimum marked."""
    plt = require_matplotlib()
    fig, ax = plt.subplots(figsize=(6.4, 4.8))
    g = gmap.growth.T
    vmax = float(np.max(np.abs(g))) or 1.0
    if gmap.kx.size > 1 and gmap.kz.size > 1:
        pc = ax.pcolormesh(gmap.kx, gmap.kz, g, cmap="RdBu_r", vmin=-vmax, vmax=vmax,
                           shading="nearest")
        fig.colorbar(pc, ax=ax, label="growth rate Re(sigma)")
        if np.any(g > 0) and np.any(g < 0):
            ax.contour(gmap.kx, gmap.kz, g, levels=[0.0], colors="k", linewidths=1.0)
    else:
        if gmap.kz.size == 1:
            ax.plot(gmap.kx, gmap.growth[:, 0], "k-")
            ax.set_ylabel("growth rate Re(sigma)")
        else:
            ax.plot(gmap.kz, gmap.growth[0, :], "k-")
            ax.set_ylabel("growth rate Re(sigma)")
    if box is not None and gmap.kx.size > 1 and gmap.kz.size > 1:
        dkx, dkz = 2 * math.pi / box.Lx, 2 * math.pi / box.Lz
        bx = np.arange(math.ceil(gmap.kx[0] / dkx - 1e-9), math.floor(gmap.kx[-1] / dkx + 1e-9) + 1) * dkx
        bz = np.arange(math.ceil(gmap.kz[0] / dkz - 1e-9), math.floor(gmap.kz[-1] / dkz + 1e-9) + 1) * dkz
        X, Z = np.meshgrid(bx, bz, indexing="ij")
        ax.plot(X.ravel(), Z.ravel(), "o", mfc="none", mec="k", ms=5, label="box modes")
    if optimum is not None and gmap.kx.size > 1 and gmap.kz.size > 1:
        ax.plot([optimum.kx], [optimum.kz], "*", color="gold", mec="k", ms=14,
                label=f"fastest: {optimum.growth:.3g}")
    ax.set_xlabel("kx")
    if gmap.kx.size > 1 and gmap.kz.size > 1:
        ax.set_ylabel("kz")
    ax.set_title(f"{gmap.params.model}: {gmap.params.describe().split(' kf')[0].split(' ', 1)[1]}, "
                 f"ky0={gmap.ky0:g}\nforcing convention {gmap.params.convention}", fontsize=9)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    _save(fig, path, description)
    plt.close(fig)


def neutral_figure(curve, path, description):
    """Neutral value of the varied parameter against the wavenumber."""
    plt = require_matplotlib()
    fig, ax = plt.subplots(figsize=(6.0, 4.5))
    ok = np.isfinite(curve.value)
    ax.plot(curve.k[ok], curve.value[ok], "k.-")
    ax.set_xlabel(curve.axis)
    ax.set_ylabel(f"neutral {curve.name}")
    if curve.name in ("Re", "BPe", "B") and np.all(curve.value[ok] > 0) and ok.any():
        ax.set_yscale("log")
    other = "maximised over" if curve.other_mode == "max" else "fixed"
    ax.set_title(f"{curve.params.describe(curve.name).split(' [')[0]}; other wavenumber {other}\n"
                 f"forcing convention {curve.params.convention}", fontsize=9)
    fig.tight_layout()
    _save(fig, path, description)
    plt.close(fig)
