"""The reported numbers of docs/equations.md#reported-numbers, computed in spectral space.

Volume averages use Parseval's identity on the half spectrum (see
:meth:`shearmix.solver.grid.Grid.volume_sum`). With these definitions, exactly
``dK/dt = I - eps + J`` for the continuous equations; the time series checks
it through ``budget_residual`` (see :class:`BudgetCheck`).
"""
from __future__ import annotations

import math

import numpy as np

from shearmix.solver.compute import kernels

#: quantities recorded every ``output.diagnostics_every`` steps, in order
SERIES_NAMES = ("t", "step", "dt", "K", "Kx", "Ky", "Kz", "I", "eps", "J", "chi", "eta",
                "u_rms", "v_rms", "w_rms", "T_rms", "b_rms", "umax", "budget_residual",
                "kmax_etaK", "Lz_turb", "D_flux", "D_estimate", "Pe_turb")


def compute(view) -> dict:
    """All instantaneous diagnostics of a step boundary (collective call).

    ``view``: a :class:`shearmix.solver.run.stepview.StepView`.
    """
    g, basis, comm, par = view.grid, view.basis, view.comm, view.params
    y = view.state
    a, p = y[0], y[1]
    local, e_h = kernels.spectral_sums(a, p, y[2] if "T" in view.fields else None, basis, g)
    sums = dict(zip(kernels.SUM_NAMES, local))
    sums["I"] = view.forcing.injection(a, p)
    keys = sorted(sums)
    totals = comm.sum(np.array([sums[k] for k in keys]))
    tot = dict(zip(keys, totals))
    e_h = comm.sum(e_h)

    Re = par.Re
    K = tot["Kx"] + tot["Ky"] + tot["Kz"]
    eps = tot["grad2"] / Re
    nan = float("nan")
    d = {"t": view.t, "step": view.step_count, "dt": view.dt, "K": K, "Kx": tot["Kx"],
         "Ky": tot["Ky"], "Kz": tot["Kz"], "I": tot["I"], "eps": eps}
    Pe = par.Pe
    if "T" in view.fields:
        B = par.B
        d["J"] = B * tot["wT"]
        d["chi"] = (B / Pe) * tot["gradT2"]
        d["T_rms"] = math.sqrt(tot["T2"])
        d["b_rms"] = B * d["T_rms"]
        d["D_flux"] = -tot["wT"]
    else:
        BPe = par.BPe
        d["J"] = BPe * tot["w_ilap_w"]
        d["chi"] = -d["J"]  # T = Pe lap^-1 w makes (B/Pe)<|grad T|^2> = -J exactly
        d["b_rms"] = BPe * math.sqrt(tot["b2"])
        d["T_rms"] = Pe * math.sqrt(tot["b2"]) if Pe else nan
        d["D_flux"] = -Pe * tot["w_ilap_w"] if Pe else nan  # -<w T>, T = Pe lap^-1 w
    denom = eps - d["J"]
    d["eta"] = -d["J"] / denom if denom > 0 else nan
    for name, key in (("u_rms", "Kx"), ("v_rms", "Ky"), ("w_rms", "Kz")):
        d[name] = math.sqrt(2 * tot[key])
    d["umax"] = view.max_speed
    d["kmax_etaK"] = g.kmax * (Re ** 3 * eps) ** -0.25 if eps > 0 else nan
    kz = 2 * np.pi / g.lengths[2] * np.arange(g.nzc)
    num = e_h[1:].sum()
    den = (kz[1:] * e_h[1:]).sum()
    d["Lz_turb"] = 2 * np.pi * num / den if den > 0 else nan
    d["D_estimate"] = d["w_rms"] * d["Lz_turb"]
    d["Pe_turb"] = Pe * d["w_rms"] * d["Lz_turb"] if Pe else nan
    d["budget_residual"] = nan
    return {k: (int(v) if k == "step" else float(v)) for k, v in d.items()}


class BudgetCheck:
    """``dK/dt - (I - eps + J)`` between consecutive records.

    ``dK/dt`` is the difference quotient of two records and the right-hand side
    their trapezoidal mean, so the residual measures time-stepping error (second
    order in the record spacing) plus any inconsistency of the reported terms.
    """

    def __init__(self):
        self.previous = None

    def __call__(self, d: dict) -> float:
        prev, self.previous = self.previous, d
        if prev is None or d["t"] <= prev["t"]:
            return float("nan")
        rate = (d["K"] - prev["K"]) / (d["t"] - prev["t"])
        rhs = 0.5 * ((d["I"] - d["eps"] + d["J"]) + (prev["I"] - prev["eps"] + prev["J"]))
        return rate - rhs
