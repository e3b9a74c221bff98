"""Regime classification of a run from its measured, time-averaged quantities.

The regimes of docs/equations.md#regimes (as ``BPe`` grows at fixed ``Re``)
are told apart with four numbers of a run summary; the definitions and the
derivation of the viscous scale are in docs/equations.md#regimes:

``isotropy``
    Time average of ``isotropy_fluct = w' / sqrt((u'^2 + v'^2)/2)``, the rms
    components of the fluctuations about the streamwise (``x``) mean: 1 for
    isotropic eddies, small when vertical motion is suppressed.
``viscous_ratio``
    ``Lz_jets / l_nu``: the vertical scale of the ``x``-mean jets over the
    viscous vertical scale ``l_nu = 2 pi / sqrt(Re U kf)``, where the vertical
    viscous diffusion of a jet balances its horizontal advection
    (``U = sqrt(2 Kmean)``, the rms speed of the ``x``-mean flow).
    ``viscous_ratio^2`` is the Reynolds number of a layer.
``eta``
    Mixing efficiency ``-J / (eps - J)`` (time average).
``quiet_fraction``
    Intermittency of the mixing: the fraction of the window during which the
    buoyancy flux ``-J`` is below half its window mean
    (:func:`flux_intermittency`). Steady mixing with Gaussian fluctuations of
    relative size ``c`` spends ``Phi(-1/(2c))`` there (5% for ``c = 0.3``);
    a flow that mixes in bursts separated by quiet spells spends the quiet
    spells there, whatever the bursts' height.

Decision, in this order (first match wins):

1. any of the four numbers is not finite -> ``'undetermined'``;
2. ``viscous_ratio < viscous_ratio_min`` -> ``'viscous_layers'``;
3. ``isotropy >= isotropy_min`` -> ``'isotropic'``;
4. ``quiet_fraction > quiet_fraction_max`` or ``eta < eta_min`` -> ``'intermittent'``;
5. otherwise -> ``'stratified_turbulence'``.

Before these rules, :func:`flow_state` looks at the time series for a flow
that is not turbulent at all, whose label is then what it is:

* ``'growing'``: the amplitude of a perturbation family grows by more than
  ``growth_factor`` over the window (least-squares fit of its log against
  ``t``): a linear instability still growing, not a statistically steady
  state. The families are ``sqrt(K2d_pert)`` and ``sqrt(K3d)`` (the
  two- and three-dimensional perturbation energies); in older series
  without them, ``q = sqrt(v_rms^2 + w_rms^2)`` (zero in the laminar flow
  ``u = U_L sin(kf y)``);
* ``'laminar'``: otherwise, when the perturbation amplitude
  ``sqrt((K2d_pert + K3d) / K2d_laminar)`` (older series: ``q / u_rms``)
  stays below ``laminar_ratio`` over the whole window.

Older series (without ``isotropy_fluct``, ``Lz_jets``, ``Kmean``) fall back to
the numbers of the total velocity: ``isotropy = w_rms / sqrt((u_rms^2 +
v_rms^2)/2)`` (the mean shear is in ``u_rms``, so it is lower than the
fluctuations' isotropy) and ``viscous_ratio`` from ``Lz_turb`` and that
``u_h``; the result says so in ``basis`` and ``fallback``.

Every threshold is a field of :class:`RegimeThresholds`. The defaults are this
tool's own choice, placed by the Re = 50 campaign where its members
constrain them (docs/equations.md#regimes, docs/campaign.md; ``shearmix regimes evidence`` prints where each one
falls among a sweep's members). They are **not** a published criterion.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, fields

import numpy as np
import yaml

__all__ = ["RegimeThresholds", "RegimeResult", "regime_numbers", "classify", "REGIMES",
           "flow_state", "flow_numbers", "flow_reason", "flux_intermittency", "NUMBERS", "FLUCT_KEYS",
           "thresholds_yaml", "thresholds_markdown"]

#: Labels a summary can carry (classify gives the last five; flow_state the first two).
REGIMES = ("laminar", "growing", "isotropic", "stratified_turbulence", "intermittent",
           "viscous_layers", "undetermined")

#: The numbers the rules compare, in the order the summary shows them.
NUMBERS = ("isotropy", "viscous_ratio", "eta", "quiet_fraction")

#: Series keys of the fluctuation numbers; a summary without them uses the fallback.
FLUCT_KEYS = ("isotropy_fluct", "Lz_jets", "Kmean")


def _rule(number, op, label):
    return {"number": number, "op": op, "label": label}


@dataclass(frozen=True)
class RegimeThresholds:
    """Thresholds of :func:`flow_state` and :func:`classify`, all in one place.

    Defaults, a choice of this tool, placed where the Re = 50 campaign
    (docs/campaign.md) could place them and marked where it could not
    (docs/equations.md#regimes); ``configs/regime-thresholds.yaml`` holds the
    same values (``shearmix regimes thresholds --yaml`` writes it). Each
    field's ``metadata`` names the number it is compared with, the comparison
    that fires the rule and the label it gives.
    """

    viscous_ratio_min: float = field(default=1.0, metadata=_rule("viscous_ratio", "<", "viscous_layers"))
    """``viscous_layers`` when ``viscous_ratio = Lz_jets / l_nu`` is below this
    (1: the layer Reynolds number ``viscous_ratio^2`` below 1)."""

    isotropy_min: float = field(default=0.55, metadata=_rule("isotropy", ">=", "isotropic"))
    """``isotropic`` when the fluctuations' ``w'/u'_h`` is at or above this."""

    quiet_fraction_max: float = field(default=0.2, metadata=_rule("quiet_fraction", ">", "intermittent"))
    """``intermittent`` when the buoyancy flux spends more than this fraction of
    the window below half its mean (Gaussian steady mixing of relative spread
    0.5 spends 0.16 there)."""

    eta_min: float = field(default=0.2, metadata=_rule("eta", "<", "intermittent"))
    """``intermittent`` when the mixing efficiency is below this (stratified
    turbulence mixes at about 0.4, docs/equations.md#regimes)."""

    growth_factor: float = field(default=10.0, metadata=_rule("growth", ">", "growing"))
    """``growing`` when a perturbation amplitude grows by more than this factor
    over the window."""

    laminar_ratio: float = field(default=1e-3, metadata=_rule("perturbation", "<=", "laminar"))
    """``laminar`` when the perturbation amplitude relative to the laminar
    flow stays at or below this throughout the window."""

    def __post_init__(self):
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
                raise ValueError(f"regime threshold '{f.name}' must be a finite number >= 0, got {v!r}")
        if self.growth_factor <= 1:
            raise ValueError(f"regime threshold 'growth_factor' must be > 1, got {self.growth_factor!r}")

    @classmethod
    def from_dict(cls, data, source="thresholds"):
        """Build from a mapping; unknown keys are an error naming the key."""
        if data is None:
            return cls()
        if not isinstance(data, dict):
            raise ValueError(f"{source}: expected a mapping of threshold names to numbers")
        allowed = [f.name for f in fields(cls)]
        for key in data:
            if key == "eps_cv_max":
                raise ValueError(f"{source}: regime threshold 'eps_cv_max' was replaced by "
                                 "'quiet_fraction_max' (intermittency of the buoyancy flux, "
                                 "docs/analysis.md#regimes)")
            if key not in allowed:
                raise ValueError(f"{source}: unknown regime threshold '{key}'; allowed: {', '.join(allowed)}")
        try:
            return cls(**data)
        except ValueError as exc:
            raise ValueError(f"{source}: {exc}") from None

    @classmethod
    def from_yaml(cls, path):
        """Load from a YAML file holding a mapping (missing keys keep defaults)."""
        with open(path) as fh:
            try:
                data = yaml.safe_load(fh)
            except yaml.YAMLError as exc:
                raise ValueError(f"{path}: not valid YAML ({getattr(exc, 'problem', exc)})") from None
        return cls.from_dict(data, source=str(path))

    def as_dict(self):
        """Return the thresholds as a plain dict."""
        return asdict(self)

    @staticmethod
    def rules():
        """``(name, number, op, label, docstring)`` of every threshold, in field order."""
        import inspect
        src = inspect.getsource(RegimeThresholds)
        out = []
        for f in fields(RegimeThresholds):
            out.append((f.name, f.metadata["number"], f.metadata["op"], f.metadata["label"],
                        _field_doc(src, f.name)))
        return out


def _field_doc(src, name):
    """The string literal under ``name: float = ...`` in the class source (its docstring)."""
    import ast
    body = ast.parse(src).body[0].body
    for i, node in enumerate(body[:-1]):
        if isinstance(node, ast.AnnAssign) and getattr(node.target, "id", "") == name:
            nxt = body[i + 1]
            if isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant):
                return " ".join(str(nxt.value.value).split()).replace("``", "")
    return ""


def thresholds_yaml(th=None):
    """The thresholds as the commented YAML file ``--thresholds`` reads."""
    th = th or RegimeThresholds()
    lines = ["# Regime thresholds (shearmix summary / sweep summarize --thresholds FILE).",
             "# Defaults, a choice of this tool, placed by the Re = 50 campaign where it can:",
             "# docs/equations.md#regimes. Regenerate: shearmix regimes thresholds --yaml"]
    import textwrap
    for name, number, op, label, doc in th.rules():
        lines.append("")
        lines += textwrap.wrap(doc, 88, initial_indent="# ", subsequent_indent="# ")
        lines.append(f"{name}: {getattr(th, name)!r}")
    return "\n".join(lines) + "\n"


def thresholds_markdown(th=None):
    """The thresholds as the Markdown table of docs/equations.md#regimes."""
    th = th or RegimeThresholds()
    out = ["| threshold | value | label | when |", "|---|---|---|---|"]
    for name, number, op, label, _ in th.rules():
        out.append(f"| `{name}` | {getattr(th, name):g} | `{label}` | `{number} {op} {name}` |")
    return "\n".join(out)


def _growth(t, amp):
    """``exp(rate * span)`` of a least-squares fit of ``ln amp`` against ``t`` (NaN if undefined)."""
    pos = np.isfinite(amp) & (amp > 0)
    if np.count_nonzero(pos) < 2 or not t[pos][-1] > t[pos][0]:
        return float("nan")
    rate = np.polyfit(t[pos], np.log(amp[pos]), 1)[0]
    return float(math.exp(min(rate * (t[pos][-1] - t[pos][0]), 700.0)))


def flow_numbers(t, series):
    """``growth`` and ``perturbation`` of the series over times ``t`` (module docstring).

    ``growth`` is the larger fitted growth factor of the perturbation families
    over the window; ``perturbation`` the largest perturbation amplitude
    relative to the laminar flow. ``K2d_pert``, ``K3d``, ``K2d_laminar`` when
    present, else ``u_rms``, ``v_rms``, ``w_rms``; NaN when neither is there.
    """
    nan = float("nan")
    n = len(t)
    t = np.asarray(t, dtype=float)

    def get(k):
        return np.asarray(series[k], dtype=float)[-n:]

    if n >= 2 and all(k in series for k in ("K2d_pert", "K3d", "K2d_laminar")):
        p2, p3, lam = get("K2d_pert"), get("K3d"), get("K2d_laminar")
        grow = [g for g in (_growth(t, np.sqrt(np.abs(p2))), _growth(t, np.sqrt(np.abs(p3))))
                if math.isfinite(g)]
        ok = np.isfinite(p2) & np.isfinite(p3) & np.isfinite(lam) & (lam > 0)
        pert = float(np.max(np.sqrt(np.abs(p2[ok] + p3[ok]) / lam[ok]))) if ok.any() else nan
        return {"growth": max(grow) if grow else nan, "perturbation": pert}
    if n < 2 or not all(k in series for k in ("u_rms", "v_rms", "w_rms")):
        return {"growth": nan, "perturbation": nan}
    u, v, w = get("u_rms"), get("v_rms"), get("w_rms")
    q = np.sqrt(v * v + w * w)
    ok = np.isfinite(q) & np.isfinite(u) & (u > 0)
    if np.count_nonzero(ok) < 2:
        return {"growth": nan, "perturbation": nan}
    return {"growth": _growth(t[ok], q[ok]), "perturbation": float(np.max(q[ok] / u[ok]))}


def flow_state(t, series, thresholds=None):
    """``'growing'``, ``'laminar'`` or ``''`` (turbulent or unknown) from the series
    over times ``t``: :func:`flow_numbers` against ``growth_factor`` and
    ``laminar_ratio`` (module docstring)."""
    th = thresholds or RegimeThresholds()
    f = flow_numbers(t, series)
    if f["growth"] > th.growth_factor:
        return "growing"
    if f["perturbation"] <= th.laminar_ratio:
        return "laminar"
    return ""


def flow_reason(state, thresholds=None):
    """The sentence shown beside a ``'growing'`` or ``'laminar'`` label."""
    th = thresholds or RegimeThresholds()
    if state == "growing":
        return (f"a perturbation amplitude grows by more than growth_factor = {th.growth_factor:g} "
                "over the window")
    if state == "laminar":
        return (f"perturbation amplitude <= laminar_ratio = {th.laminar_ratio:g} of the laminar "
                "flow throughout")
    raise ValueError(f"no flow state {state!r}; expected 'growing' or 'laminar'")


def flux_intermittency(t, J):
    """``(quiet_fraction, flux_cv)`` of the buoyancy flux ``-J`` over a window.

    ``quiet_fraction`` is the time fraction with ``-J < mean(-J) / 2``;
    ``flux_cv = std(-J) / mean(-J)``; both on a uniform resampling (linear
    interpolation, median spacing) so that the adaptive step does not weight
    them. NaN when fewer than two finite records or ``mean(-J) <= 0``.
    """
    from shearmix.tools.analysis.averages import uniform_resample
    t = np.asarray(t, dtype=float)
    f = -np.asarray(J, dtype=float)
    ok = np.isfinite(f) & np.isfinite(t)
    if np.count_nonzero(ok) < 2:
        return float("nan"), float("nan")
    _, x = uniform_resample(t[ok], f[ok])
    m = float(x.mean())
    if not m > 0:
        return float("nan"), float("nan")
    return float(np.mean(x < 0.5 * m)), float(x.std() / m)


@dataclass(frozen=True)
class RegimeResult:
    """Label and the numbers that produced it.

    Attributes
    ----------
    label : str
        One of :data:`REGIMES`.
    numbers : dict
        ``isotropy``, ``viscous_ratio``, ``eta``, ``quiet_fraction`` and
        ``l_nu`` (the viscous scale behind ``viscous_ratio``).
    reason : str
        The rule that fired, with the values compared.
    thresholds : dict
    basis : str
        ``'fluctuations'``, or ``'total velocity'`` for the fallback.
    fallback : str
        Empty, or the warning that the older numbers were used.
    """

    label: str
    numbers: dict
    reason: str
    thresholds: dict
    basis: str = "fluctuations"
    fallback: str = ""


def _num(summary, key, needed):
    if key not in summary:
        raise ValueError(f"run summary lacks '{key}'; regime classification needs: {', '.join(needed)}")
    try:
        return float(summary[key])
    except (TypeError, ValueError):
        return float("nan")


def _kf(summary):
    try:
        kf = float(summary.get("kf", 1.0))
    except (TypeError, ValueError):
        return float("nan")
    return kf


def regime_numbers(summary):
    """The classification numbers of a summary mapping, and the basis used.

    Parameters
    ----------
    summary : mapping
        Needs ``eta``, ``quiet_fraction``, ``Re`` and either ``isotropy_fluct``,
        ``Lz_jets``, ``Kmean`` (fluctuation basis) or ``u_rms``, ``v_rms``,
        ``w_rms``, ``Lz_turb`` (fallback, when any of the former is absent);
        ``kf`` (default 1).

    Returns
    -------
    numbers : dict
        :data:`NUMBERS` and ``l_nu`` (NaN where undefined).
    basis : str
        ``'fluctuations'`` or ``'total velocity'``.
    """
    nan = float("nan")
    fluct = all(k in summary for k in FLUCT_KEYS)
    needed = ("eta", "quiet_fraction", "Re") + (FLUCT_KEYS if fluct else ("u_rms", "v_rms", "w_rms", "Lz_turb"))
    re, kf = _num(summary, "Re", needed), _kf(summary)
    if fluct:
        iso = _num(summary, "isotropy_fluct", needed)
        km = _num(summary, "Kmean", needed)
        speed = math.sqrt(2.0 * km) if km >= 0 else nan
        lz = _num(summary, "Lz_jets", needed)
    else:
        u, v, w = (_num(summary, k, needed) for k in ("u_rms", "v_rms", "w_rms"))
        speed = math.sqrt((u * u + v * v) / 2.0) if math.isfinite(u) and math.isfinite(v) else nan
        iso = w / speed if speed > 0 else nan
        lz = _num(summary, "Lz_turb", needed)
    # l_nu: horizontal advection U^2 kf = vertical diffusion U (2 pi / l)^2 / Re (docs/equations.md#regimes)
    l_nu = 2.0 * math.pi / math.sqrt(re * speed * kf) if (speed > 0 and re > 0 and kf > 0) else nan
    numbers = {"isotropy": iso, "viscous_ratio": lz / l_nu, "eta": _num(summary, "eta", needed),
               "quiet_fraction": _num(summary, "quiet_fraction", needed), "l_nu": l_nu}
    return numbers, ("fluctuations" if fluct else "total velocity")


def classify(summary, thresholds=None):
    """Regime label of a run summary (rules in the module docstring).

    Parameters
    ----------
    summary : mapping
        See :func:`regime_numbers`.
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
    n, basis = regime_numbers(summary)
    fallback = "" if basis == "fluctuations" else (
        "older series without " + ", ".join(k for k in FLUCT_KEYS if k not in summary)
        + ": regime from the total velocity (isotropy of u_rms, v_rms, w_rms, mean shear included; "
        "viscous_ratio from Lz_turb)")
    bad = [k for k in NUMBERS if not math.isfinite(n[k])]
    if bad:
        label, reason = "undetermined", f"not finite: {', '.join(bad)}"
    elif n["viscous_ratio"] < th.viscous_ratio_min:
        label, reason = "viscous_layers", f"viscous_ratio {n['viscous_ratio']:.3g} < {th.viscous_ratio_min:g}"
    elif n["isotropy"] >= th.isotropy_min:
        label, reason = "isotropic", f"isotropy {n['isotropy']:.3g} >= {th.isotropy_min:g}"
    elif n["quiet_fraction"] > th.quiet_fraction_max:
        label, reason = "intermittent", f"quiet_fraction {n['quiet_fraction']:.3g} > {th.quiet_fraction_max:g}"
    elif n["eta"] < th.eta_min:
        label, reason = "intermittent", f"eta {n['eta']:.3g} < {th.eta_min:g}"
    else:
        label, reason = "stratified_turbulence", (
            f"viscous_ratio {n['viscous_ratio']:.3g} >= {th.viscous_ratio_min:g}, isotropy "
            f"{n['isotropy']:.3g} < {th.isotropy_min:g}, quiet_fraction {n['quiet_fraction']:.3g} <= "
            f"{th.quiet_fraction_max:g}, eta {n['eta']:.3g} >= {th.eta_min:g}")
    return RegimeResult(label=label, numbers=n, reason=reason, thresholds=th.as_dict(),
                        basis=basis, fallback=fallback)
