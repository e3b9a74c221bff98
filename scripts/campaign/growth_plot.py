"""Figure of a run's growth phase: the 2D and 3D perturbation amplitudes with the
phases and rates `shearmix growth --json` found, and the linear rates beside them.

    python scripts/campaign/growth_plot.py RUN_DIR GROWTH.json OUT.png
"""
from __future__ import annotations

import json
import os
import sys

import numpy as np

from shearmix.solver.files.series import read_series
from shearmix.solver.version import __version__


def main(argv):
    run, js, out = argv[1:4]
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    s = read_series(os.path.join(run, "timeseries.h5"))
    g = json.load(open(js))
    t = s["t"]
    fig, ax = plt.subplots(figsize=(7, 4), dpi=90)
    families = (("2d", "K2d_pert", "C0", "2D: sqrt(K2d_pert)"), ("3d", "K3d", "C3", "3D: sqrt(K3d)"))
    for fam, key, colour, label in families:
        ax.semilogy(t, np.sqrt(np.maximum(s[key], 1e-300)), color=colour, lw=1.2, label=label)
        lin = (g.get("linear") or {}).get(fam) or {}
        for i, ph in enumerate(g["phases"][fam]):
            tt = np.linspace(ph["t_start"], ph["t_end"], 20)
            text = f"{fam.upper()} fit {ph['rate']:.3g} [{ph['interval'][0]:.3g}, {ph['interval'][1]:.3g}]"
            if i == 0 and lin.get("rate") is not None:
                text += f", linear {lin['rate']:.3g}"
            ax.semilogy(tt, np.exp(ph["intercept"] + ph["rate"] * tt), "k--", lw=1.0)
            ax.annotate(text, (ph["t_end"], np.exp(ph["intercept"] + ph["rate"] * ph["t_end"])),
                        xytext=(6, -4 - 10 * i), textcoords="offset points", fontsize=7)
    ax.semilogy(t, np.sqrt(s["K2d_laminar"]), color="0.6", lw=1.0, label="laminar: sqrt(K2d_laminar)")
    ax.set_xlim(0, min(t[-1], 3.0))
    ax.set_xlabel("t")
    ax.set_ylabel("amplitude")
    case = g.get("case", "")
    name = next((ln.split(":", 1)[1].strip() for ln in case.splitlines() if ln.startswith("name:")), "")
    ax.set_title(f"growth phase, {name} (shearmix {__version__})", fontsize=9)
    ax.legend(fontsize=7, loc="lower right")
    fig.tight_layout()
    fig.savefig(out, metadata={"Software": f"shearmix {__version__}", "Description": case})
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
