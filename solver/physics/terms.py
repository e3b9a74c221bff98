"""The terms of the equations, each one idea; a model is a set of them.

State amplitudes per wavenumber (see :mod:`shearmix.solver.physics.basis`): ``a`` (vortical),
``p`` (poloidal, carries ``w = -alpha p``) and, in the full model, ``T``.
Linear terms are treated implicitly; each adds its coefficients to the
per-wavenumber linear operator ``L`` (``d(field)/dt = L[field, source] * source``).
Explicit terms (advection, forcing) add to the explicit tendency.

Linear coefficients follow docs/equations.md#spectral-formulation in the Craya-Herring frame,
with ``alpha = kh/|k|``. Each is a short sum of monomials ``c |k|^(2m) alpha^n``,
given by the term as rows ``(c, m, n)``: the compiled stepper evaluates them per
wavenumber and stores no coefficient array.

* viscosity:            ``L[a,a] = L[p,p] = -|k|^2/Re``
* thermal diffusion:    ``L[T,T] = -|k|^2/Pe``
* buoyancy B T e_z:     ``L[p,T] = -B alpha``          (``e2 . e_z = -alpha``)
* background gradient (``-w`` in the T equation): ``L[T,p] = +alpha``
* quasi-static buoyancy ``BPe lap^{-1}(w) e_z``: ``L[p,p] = -BPe alpha^2/|k|^2``
  (``= -BPe kh^2/|k|^4``, the low-Peclet damping)
* tracer diffusion:     ``L[c,c] = -|k|^2/Pe_c``
* tracer mean gradient (``-G w`` in the tracer equation): ``L[c,p] = +G alpha``
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Viscosity:
    """Momentum diffusion ``(1/Re) lap u``."""

    Re: float

    def linear(self):
        d = [(-1.0 / self.Re, 1, 0)]
        return {("a", "a"): d, ("p", "p"): d}


@dataclass(frozen=True)
class ThermalDiffusion:
    """Temperature diffusion ``(1/Pe) lap T``."""

    Pe: float

    def linear(self):
        return {("T", "T"): [(-1.0 / self.Pe, 1, 0)]}


@dataclass(frozen=True)
class Buoyancy:
    """Buoyancy force ``B T e_z`` in the momentum equation (projected)."""

    B: float

    def linear(self):
        return {("p", "T"): [(-self.B, 0, 1)]}


@dataclass(frozen=True)
class BackgroundStratification:
    """Advection of the unit background gradient: ``-w`` in the temperature equation."""

    def linear(self):
        return {("T", "p"): [(1.0, 0, 1)]}


@dataclass(frozen=True)
class TracerDiffusion:
    """Diffusion ``(1/Pe_c) lap c`` of the passive tracer in ``field`` (docs/equations.md#tracers)."""

    field: str
    Pe: float

    def linear(self):
        return {(self.field, self.field): [(-1.0 / self.Pe, 1, 0)]}


@dataclass(frozen=True)
class TracerMeanGradient:
    """Advection of the tracer's imposed mean gradient: ``-G w`` in its equation.

    The tracer never acts on the flow, so the coupling is one way (``L[p, c] = 0``)
    and the implicit solve takes the tracer after the flow.
    """

    field: str
    G: float

    def linear(self):
        return {(self.field, "p"): [(self.G, 0, 1)]}


@dataclass(frozen=True)
class QuasiStaticBuoyancy:
    """Low-Peclet buoyancy ``BPe lap^{-1}(w) e_z`` (zero on k = 0), projected."""

    BPe: float

    def linear(self):
        return {("p", "p"): [(-self.BPe, -1, 2)]}


def quasi_static(p: np.ndarray, factor: float, basis, grid) -> np.ndarray:
    """``factor lap^{-1} w`` per mode from the poloidal amplitude ``p``.

    ``w_k = -alpha p_k`` and ``lap^{-1} = -1/|k|^2``, so the result is
    ``factor alpha p_k / |k|^2``; ``lap^{-1}`` is taken as zero on ``k = 0``.
    The low-Peclet buoyancy is ``b = BPe lap^{-1} w`` and its temperature
    ``T = Pe lap^{-1} w``.
    """
    k2 = np.where(grid.k2 == 0, 1.0, grid.k2)
    return (factor * basis.alpha / k2) * p * basis.nonzero


@dataclass(frozen=True)
class Advection:
    """``-(u.grad)u`` and, when the model has T, ``-u.grad T`` (pseudo-spectral);
    ``-u.grad c`` of every tracer field in ``tracers``."""

    with_temperature: bool
    tracers: tuple = ()


@dataclass(frozen=True)
class ShearForcing:
    """``F = F0 sin(kf y) e_x``; on the modes ``(0, +-kf, 0)`` it is ``F0/(2i) e_x``."""

    F0: float
    kf: float
