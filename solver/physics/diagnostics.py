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
from shearmix.solver.physics.flowsplit import FLOW_SPLIT_NAMES, flow_split

#: quantities recorded every ``output.diagnostics_every`` steps, in order
SERIES_NAMES = ("t", "step", "dt", "K", "Kx", "Ky", "Kz", "I", "eps", "J", "chi", "eta",
                "u_rms", "v_rms", "w_rms", "T_rms", "b_rms", "umax", "budget_residual",
                "kmax_etaK", "Lz_turb", "D_flux", "D_estimate", "Pe_turb") + FLOW_SPLIT_NAMES


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
    d.update(flow_split(view, K, (tot["Kx"], tot["Ky"], tot["Kz"])))
    d.update(tracer_diagnostics(view))
    return {k: (int(v) if k == "step" else float(v)) for k, v in d.items()}


#: per-tracer quantities, recorded as ``<name>.<tracer>`` (docs/equations.md#tracers)
TRACER_NAMES = ("c_rms", "wc", "D_c", "chi_c", "D_chi", "c_budget_residual")


def tracer_series_names(tracers) -> tuple:
    """The series keys of the case's tracers, in order."""
    return tuple(f"{q}.{tr.name}" for tr in tracers for q in TRACER_NAMES)


def tracer_diagnostics(view) -> dict:
    """Per tracer ``c`` (mean gradient ``G``, Peclet number ``Pe_c``): ``c_rms``, the
    flux ``<w c>``, ``D_c = -<w c>/G``, ``chi_c = (1/Pe_c) <|grad c|^2>`` and
    ``D_chi = chi_c/G^2`` (collective call; one reduction for all tracers)."""
    tracers = view.case.tracers
    if not tracers:
        return {}
    g, basis, y = view.grid, view.basis, view.state
    w = -basis.alpha * y[1]  # w_k = -alpha p_k
    local = []
    for tr in tracers:
        c = y[view.fields.index(tr.field)]
        c2 = (c * c.conj()).real
        local += [g.volume_sum(c2), g.volume_sum((w * c.conj()).real), g.volume_sum(g.k2 * c2)]
    tot = view.comm.sum(np.array(local))
    d = {}
    for i, tr in enumerate(tracers):
        c2, wc, grad2 = tot[3 * i:3 * i + 3]
        chi = grad2 / tr.Pe
        d[f"c_rms.{tr.name}"] = math.sqrt(max(c2, 0.0))
        d[f"wc.{tr.name}"] = wc
        d[f"D_c.{tr.name}"] = -wc / tr.G if tr.G else float("nan")
        d[f"chi_c.{tr.name}"] = chi
        d[f"D_chi.{tr.name}"] = chi / tr.G ** 2 if tr.G else float("nan")
        d[f"c_budget_residual.{tr.name}"] = float("nan")
    return d


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

    def tracers(self, d: dict, prev: dict | None, tracers) -> None:
        """In place: each tracer's ``d/dt <c^2/2> - (-G <w c> - chi_c)``, the same
        difference quotient and trapezoid as the kinetic residual."""
        if prev is None or d["t"] <= prev["t"]:
            return
        for tr in tracers:
            n = tr.name
            rate = 0.5 * (d[f"c_rms.{n}"] ** 2 - prev[f"c_rms.{n}"] ** 2) / (d["t"] - prev["t"])
            rhs = 0.5 * sum(-tr.G * r[f"wc.{n}"] - r[f"chi_c.{n}"] for r in (d, prev))
            d[f"c_budget_residual.{n}"] = rate - rhs
