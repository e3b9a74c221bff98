"""Regime classification of a run from its measured, time-averaged quantities.

The four regimes of docs/equations.md#regimes, seen as ``BPe`` grows at fixed
``Re``, are told apart with four numbers computed from a run summary:

``isotropy``
    ``w_rms / sqrt((u_rms^2 + v_rms^2) / 2)``: 1 for isotropic velocity,
    small when vertical motion is suppressed.
``eta``
    Mixing efficiency ``-J / (eps - J)`` (time average).
``eps_cv``
    Intermittency of the dissipation: coefficient of variation
    ``std(eps) / mean(eps)`` of the dissipation time series over the
    averaging window.
``viscous_ratio``
    ``Lz_turb / l_nu`` with the viscous vertical scale
    ``l_nu = 2 pi / sqrt(Re u_h)``, ``u_h = sqrt((u_rms^2 + v_rms^2)/2)``:
    ``(viscous_ratio)^2 = Re u_h (Lz_turb / 2 pi)^2`` is the Reynolds number
    of the vertical shear over a layer, taking the case's unit length as the
    horizontal scale. Below 1, vertical viscous diffusion across a layer is
    faster than horizontal advection: viscously dominated layers.

Decision, in this order (first match wins):

1. any of the four numbers is not finite -> ``'undetermined'``;
2. ``viscous_ratio < viscous_ratio_min`` -> ``'viscous_layers'``;
3. ``isotropy >= isotropy_min`` -> ``'isotropic'``;
4. ``eps_cv > eps_cv_max`` or ``eta < eta_min`` -> ``'intermittent'``;
5. otherwise -> ``'stratified_turbulence'``.

Before these rules, :func:`flow_state` looks at the time series for a flow
that is not turbulent at all, whose label is then what it is:

* ``'growing'``: the departure from the laminar flow ``u = U_L sin(kf y)``,
  measured by ``q = sqrt(v_rms^2 + w_rms^2)`` (both vanish in the laminar
  flow), grows by more than :data:`GROWTH_FACTOR` (10) over the window, by a
  least-squares fit of ``ln q`` against ``t``: a linear instability still
  growing, not a statistically steady state;
* ``'laminar'``: otherwise, when ``q`` stays below :data:`LAMINAR_RATIO`
  (1e-3) of ``u_rms`` over the whole window.

Neither label is "intermittent", and the Kolmogorov-scale resolution test
(``kmax eta_K``) does not apply to them: a laminar or growing flow is
resolved when its few modes are (the spectral tail test still applies).
Both numbers are a choice of this tool, not a published criterion.

Default thresholds (:class:`RegimeThresholds`): ``viscous_ratio_min = 1``,
``isotropy_min = 0.6``, ``eps_cv_max = 0.5``, ``eta_min = 0.2``. These are a
choice made for this tool, guided by the regime descriptions of docs/equations.md#regimes
(mixing efficiency about 0.4 in stratified turbulence, falling in the
intermittent regime); they are **not** a published criterion. Override them
per study (``RegimeThresholds.from_yaml``).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields

import yaml

import numpy as np

__all__ = ["RegimeThresholds", "RegimeResult", "regime_numbers", "classify", "REGIMES",
           "flow_state", "FLOW_REASONS", "GROWTH_FACTOR", "LAMINAR_RATIO"]

#: Labels returned by :func:`classify`.
REGIMES = ("isotropic", "stratified_turbulence", "intermittent", "viscous_layers", "undetermined")

#: Growth of ``sqrt(v_rms^2 + w_rms^2)`` over the window above which a run is 'growing'.
GROWTH_FACTOR = 10.0
#: ``sqrt(v_rms^2 + w_rms^2) / u_rms`` below which (throughout) a run is 'laminar'.
LAMINAR_RATIO = 1e-3

FLOW_REASONS = {
    "growing": f"departure from the laminar flow grows by more than {GROWTH_FACTOR:g} over the window",
    "laminar": f"departure from the laminar flow below {LAMINAR_RATIO:g} of u_rms throughout",
}


def flow_state(t, series):
    """``'growing'``, ``'laminar'`` or ``''`` (turbulent or unknown) from the series
    ``u_rms``, ``v_rms``, ``w_rms`` over times ``t`` (rules in the module docstring)."""
    if not all(k in series for k in ("u_rms", "v_rms", "w_rms")) or len(t) < 2:
        return ""
    n = len(t)
    u, v, w = (np.asarray(series[k], dtype=float)[-n:] for k in ("u_rms", "v_rms", "w_rms"))
    t = np.asarray(t, dtype=float)
    q = np.sqrt(v * v + w * w)
    ok = np.isfinite(q) & np.isfinite(u)
    if np.count_nonzero(ok) < 2:
        return ""
    t, q, u = t[ok], q[ok], u[ok]
    pos = q > 0
    if np.count_nonzero(pos) >= 2 and t[pos][-1] > t[pos][0]:
        rate = np.polyfit(t[pos], np.log(q[pos]), 1)[0]
        if rate * (t[pos][-1] - t[pos][0]) > math.log(GROWTH_FACTOR):
            return "growing"
    if np.all(q <= LAMINAR_RATIO * u) and np.any(u > 0):
        return "laminar"
    return ""

_NEEDED = ("u_rms", "v_rms", "w_rms", "eta", "eps_cv", "Lz_turb", "Re")


@dataclass(frozen=True)
class RegimeThresholds:
    """Thresholds of :func:`classify` (a choice of this tool, see module doc).

    Attributes
    ----------
    viscous_ratio_min : float
        Below this ``Lz_turb / l_nu`` the run is ``'viscous_layers'``.
    isotropy_min : float
        At or above this ``w_rms / u_h`` the run is ``'isotropic'``.
    eps_cv_max : float
        Above this coefficient of variation of ``eps`` the run is
        ``'intermittent'``.
    eta_min : float
        Below this mixing efficiency the run is ``'intermittent'``.
    """

    viscous_ratio_min: float = 1.0
    isotropy_min: float = 0.6
    eps_cv_max: float = 0.5
    eta_min: float = 0.2

    def __post_init__(self):
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
                raise ValueError(f"regime threshold '{f.name}' must be a finite number >= 0, got {v!r}")

    @classmethod
    def from_dict(cls, data, source="thresholds"):
        """Build from a mapping; unknown keys are an error naming the key."""
        if data is None:
            return cls()
        if not isinstance(data, dict):
            raise ValueError(f"{source}: expected a mapping of threshold names to numbers")
        allowed = [f.name for f in fields(cls)]
        for key in data:
            if key not in allowed:
                raise ValueError(f"{source}: unknown regime threshold '{key}'; allowed: {', '.join(allowed)}")
        return cls(**data)

    @classmethod
    def from_yaml(cls, path):
        """Load from a YAML file holding a mapping (missing keys keep defaults)."""
        with open(path) as fh:
            data = yaml.safe_load(fh)
        return cls.from_dict(data, source=str(path))

    def as_dict(self):
        """Return the thresholds as a plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class RegimeResult:
    """Label and the numbers that produced it.

    Attributes
    ----------
    label : str
        One of :data:`REGIMES`.
    numbers : dict
        ``isotropy``, ``eta``, ``eps_cv``, ``viscous_ratio``.
    reason : str
        The rule that fired, with the values compared.
    thresholds : dict
    """

    label: str
    numbers: dict
    reason: str
    thresholds: dict


def _num(summary, key):
    if key not in summary:
        raise ValueError(f"run summary lacks '{key}'; regime classification needs: {', '.join(_NEEDED)}")
    try:
        return float(summary[key])
    except (TypeError, ValueError):
        return float("nan")


def regime_numbers(summary):
    """The four classification numbers from a summary mapping.

    Parameters
    ----------
    summary : mapping
        Needs ``u_rms, v_rms, w_rms, eta, eps_cv, Lz_turb, Re``.

    Returns
    -------
    dict
        ``isotropy``, ``eta``, ``eps_cv``, ``viscous_ratio`` (NaN where
        undefined, e.g. no horizontal motion).
    """
    u, v, w = (_num(summary, k) for k in ("u_rms", "v_rms", "w_rms"))
    re, lz = _num(summary, "Re"), _num(summary, "Lz_turb")
    uh = math.sqrt((u * u + v * v) / 2.0) if math.isfinite(u) and math.isfinite(v) else float("nan")
    nan = float("nan")
    iso = w / uh if uh > 0 else nan
    ratio = lz * math.sqrt(re * uh) / (2.0 * math.pi) if (uh > 0 and re > 0) else nan
    return {"isotropy": iso, "eta": _num(summary, "eta"), "eps_cv": _num(summary, "eps_cv"), "viscous_ratio": ratio}


def classify(summary, thresholds=None):
    """Regime label of a run summary (rules in the module docstring).

    Parameters
    ----------
    summary : mapping
        Needs ``u_rms, v_rms, w_rms, eta, eps_cv, Lz_turb, Re``.
    thresholds : RegimeThresholds or dict, optional

    Returns
    -------
    RegimeResult
    """
    if thresholds is None:
        thresholds = RegimeThresholds()
    elif isinstance(thresholds, dict):
        thresholds = RegimeThresholds.from_dict(thresholds)
    th = thresholds
    n = regime_numbers(summary)
    bad = [k for k, v in n.items() if not math.isfinite(v)]
    if bad:
        label, reason = "undetermined", f"not finite: {', '.join(bad)}"
    elif n["viscous_ratio"] < th.viscous_ratio_min:
        label, reason = "viscous_layers", f"viscous_ratio {n['viscous_ratio']:.3g} < {th.viscous_ratio_min:g}"
    elif n["isotropy"] >= th.isotropy_min:
        label, reason = "isotropic", f"isotropy {n['isotropy']:.3g} >= {th.isotropy_min:g}"
    elif n["eps_cv"] > th.eps_cv_max:
        label, reason = "intermittent", f"eps_cv {n['eps_cv']:.3g} > {th.eps_cv_max:g}"
    elif n["eta"] < th.eta_min:
        label, reason = "intermittent", f"eta {n['eta']:.3g} < {th.eta_min:g}"
    else:
        label, reason = "stratified_turbulence", (
            f"isotropy {n['isotropy']:.3g} < {th.isotropy_min:g}, eps_cv {n['eps_cv']:.3g} <= "
            f"{th.eps_cv_max:g}, eta {n['eta']:.3g} >= {th.eta_min:g}"
        )
    return RegimeResult(label=label, numbers=n, reason=reason, thresholds=th.as_dict())
