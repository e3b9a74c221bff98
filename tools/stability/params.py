"""Parameters of the laminar flow and of the model whose stability is computed.

The base state is the laminar flow ``U(y) = U_L sin(kf y) e_x``, ``T = 0``
(docs/equations.md#models), with ``U_L = F0 Re / kf^2``.  Two models:

* ``boussinesq``: ``Re``, ``B``, ``Pe`` (``BPe = B*Pe`` derived);
* ``lowpe``: ``Re``, ``BPe``.

``hold`` says what stays fixed when ``Re`` is varied (neutral curves in Re):
``"U_L"`` keeps the laminar amplitude (laminar-amplitude convention), ``"F0"``
keeps the forcing amplitude so that ``U_L`` grows with ``Re`` (forcing
convention, e.g. ``F0 = 1``).
"""
from __future__ import annotations

import dataclasses
import math

MODELS = ("boussinesq", "lowpe")
HOLDS = ("U_L", "F0")


def _positive(name, value, allow_inf=False):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: must be a number, got {value!r}") from None
    if math.isnan(v) or v <= 0 or (math.isinf(v) and not allow_inf):
        allowed = "a positive number (inf allowed)" if allow_inf else "a positive finite number"
        raise ValueError(f"{name}: must be {allowed}, got {value!r}")
    return v


@dataclasses.dataclass(frozen=True)
class FlowParams:
    """Model parameters of the linear problem.

    ``Re`` and ``Pe`` may be ``inf`` (no viscosity / no thermal diffusion), which
    the no-diffusion checks use; ``U_L`` may be 0 (no shear).
    """

    model: str
    Re: float
    kf: float = 1.0
    U_L: float = 1.0
    B: float | None = None
    Pe: float | None = None
    BPe: float | None = None
    hold: str = "U_L"

    def __post_init__(self):
        if self.model not in MODELS:
            raise ValueError(f"model: must be one of {', '.join(MODELS)}, got {self.model!r}")
        if self.hold not in HOLDS:
            raise ValueError(f"hold: must be one of {', '.join(HOLDS)}, got {self.hold!r}")
        set_ = lambda k, v: object.__setattr__(self, k, v)
        set_("Re", _positive("Re", self.Re, allow_inf=True))
        set_("kf", _positive("kf", self.kf))
        try:
            ul = float(self.U_L)
        except (TypeError, ValueError):
            raise ValueError(f"U_L: must be a number, got {self.U_L!r}") from None
        if not math.isfinite(ul) or ul < 0:
            raise ValueError(f"U_L: must be a finite number >= 0, got {self.U_L!r}")
        set_("U_L", ul)
        if self.model == "boussinesq":
            if self.B is None or self.Pe is None:
                raise ValueError("B, Pe: the boussinesq model needs both B (>= 0) and Pe (> 0)")
            b = float(self.B)
            if not math.isfinite(b) or b < 0:
                raise ValueError(f"B: must be a finite number >= 0, got {self.B!r}")
            set_("B", b)
            set_("Pe", _positive("Pe", self.Pe, allow_inf=True))
            set_("BPe", b * self.Pe if math.isfinite(self.Pe) else math.inf)
        else:
            if self.BPe is None:
                raise ValueError("BPe: the lowpe model needs BPe (>= 0)")
            bpe = float(self.BPe)
            if not math.isfinite(bpe) or bpe < 0:
                raise ValueError(f"BPe: must be a finite number >= 0, got {self.BPe!r}")
            set_("BPe", bpe)
            set_("B", None)
            set_("Pe", None)

    @property
    def nu(self) -> float:
        """Viscosity ``1/Re`` (0 when ``Re`` is infinite)."""
        return 0.0 if math.isinf(self.Re) else 1.0 / self.Re

    @property
    def kappa(self) -> float:
        """Thermal diffusivity ``1/Pe`` (0 when ``Pe`` is infinite; full model only)."""
        if self.Pe is None:
            return 0.0
        return 0.0 if math.isinf(self.Pe) else 1.0 / self.Pe

    @property
    def F0(self) -> float:
        """Forcing amplitude that sustains the laminar flow, ``F0 = U_L kf^2 / Re``."""
        return self.U_L * self.kf ** 2 * self.nu

    @property
    def shear_reynolds(self) -> float:
        """``U_L Re / kf``: the Reynolds number of the laminar flow on the scale ``1/kf``.

        The 2D Kolmogorov flow is unstable above ``sqrt(2)`` in this number
        (Meshalkin & Sinai 1961).
        """
        return self.U_L * self.Re / self.kf

    @property
    def convention(self) -> str:
        """The forcing convention by its case-file name (``forcing.amplitude``) and what it holds."""
        if self.hold == "U_L":
            return "laminar (F0 = kf^2/Re: laminar amplitude U_L held as Re varies)"
        name = "unit" if self.F0 == 1.0 else f"F0 = {self.F0:g}"
        return f"{name} (F0 held as Re varies: U_L = F0 Re/kf^2)"

    def with_value(self, name: str, value: float) -> "FlowParams":
        """Copy with one parameter changed.

        ``Re`` keeps ``U_L`` or ``F0`` per ``hold``; ``BPe`` in the full model
        changes ``B`` at fixed ``Pe``; ``Pe`` in the full model keeps ``B``.
        """
        if name == "Re":
            ul = self.U_L if self.hold == "U_L" else self.F0 * float(value) / self.kf ** 2
            return dataclasses.replace(self, Re=value, U_L=ul)
        if name == "BPe" and self.model == "boussinesq":
            return dataclasses.replace(self, B=float(value) / self.Pe)
        if name in ("B", "Pe") and self.model == "lowpe":
            raise ValueError(f"{name}: not a parameter of the lowpe model (use Re or BPe)")
        if name not in ("Re", "B", "Pe", "BPe", "U_L", "kf"):
            raise ValueError(f"{name}: can vary only Re, B, Pe, BPe, U_L or kf")
        return dataclasses.replace(self, **{name: value})

    def describe(self, varied: str | None = None) -> str:
        """One line of the parameters; ``varied`` names one shown as varied, not by value."""
        if self.model == "boussinesq":
            vals = [("Re", self.Re), ("B", self.B), ("Pe", self.Pe)]
        else:
            vals = [("Re", self.Re), ("BPe", self.BPe)]
        p = " ".join(f"{k}=(varied)" if k == varied else f"{k}={v:g}" for k, v in vals)
        if self.model == "boussinesq":
            p += " (BPe=(varied))" if varied in ("BPe", "B") else f" (BPe={self.BPe:g})"
        ul = "(varied)" if varied == "Re" and self.hold == "F0" else f"{self.U_L:g}"
        return f"model={self.model} {p} kf={self.kf:g} U_L={ul} [{self.convention}]"


def params_from_case(case) -> FlowParams:
    """Flow parameters of a loaded case (``shearmix.solver.case.load_case``).

    The case's forcing amplitude keyword decides ``hold``: ``laminar`` keeps
    ``U_L``; ``unit`` or a number keeps ``F0``.
    """
    amp = None
    raw = getattr(case, "raw", None) or {}
    forcing = raw.get("forcing", {}) if isinstance(raw, dict) else {}
    if isinstance(forcing, dict):
        amp = forcing.get("amplitude")
    hold = "U_L" if (amp is None or amp == "laminar") else "F0"
    if case.model == "boussinesq":
        return FlowParams("boussinesq", Re=case.Re, kf=case.kf, U_L=case.U_L, B=case.B,
                          Pe=case.Pe, hold=hold)
    return FlowParams("lowpe", Re=case.Re, kf=case.kf, U_L=case.U_L, BPe=case.BPe, hold=hold)
