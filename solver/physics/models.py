"""Models as sets of terms (docs/equations.md#models).

``boussinesq``: viscosity, thermal diffusion, buoyancy, background
stratification (all implicit), advection of momentum and temperature and the
shear forcing (explicit). ``lowpe``: viscosity and the quasi-static buoyancy
(implicit), momentum advection and forcing (explicit).
"""
from __future__ import annotations

from dataclasses import dataclass

from shearmix.solver.case import Case
from shearmix.solver.grid import Grid
from shearmix.solver.physics.basis import CrayaHerring
from shearmix.solver.physics.linear import LinearOperator
from shearmix.solver.physics.terms import (
    Advection,
    BackgroundStratification,
    Buoyancy,
    QuasiStaticBuoyancy,
    ShearForcing,
    ThermalDiffusion,
    TracerDiffusion,
    TracerMeanGradient,
    Viscosity,
)


@dataclass
class Model:
    """A named set of terms and the fields they act on."""

    name: str
    fields: tuple
    terms: tuple

    @property
    def linear_terms(self):
        return [t for t in self.terms if hasattr(t, "linear")]

    @property
    def advection(self):
        return next((t for t in self.terms if isinstance(t, Advection)), None)

    @property
    def forcing(self):
        return next((t for t in self.terms if isinstance(t, ShearForcing)), None)

    def operator(self, grid: Grid, basis: CrayaHerring) -> LinearOperator:
        """Collect the linear terms' monomials into the implicit operator."""
        entries: dict = {}
        for term in self.linear_terms:
            for key, rows in term.linear().items():
                entries.setdefault(key, []).extend(rows)
        return LinearOperator(self.fields, entries, grid, basis)


def _tracer_terms(tracers) -> tuple:
    """Each passive tracer's implicit terms (diffusion, its mean gradient)."""
    out = []
    for tr in tracers:
        out += [TracerDiffusion(tr.field, tr.Pe), TracerMeanGradient(tr.field, tr.G)]
    return tuple(out)


def boussinesq(Re, B, Pe, F0, kf, tracers=()) -> Model:
    names = tuple(tr.field for tr in tracers)
    return Model("boussinesq", ("a", "p", "T") + names,
                 (Viscosity(Re), ThermalDiffusion(Pe), Buoyancy(B),
                  BackgroundStratification(), *_tracer_terms(tracers),
                  Advection(with_temperature=True, tracers=names),
                  ShearForcing(F0, kf)))


def lowpe(Re, BPe, F0, kf, tracers=()) -> Model:
    names = tuple(tr.field for tr in tracers)
    return Model("lowpe", ("a", "p") + names,
                 (Viscosity(Re), QuasiStaticBuoyancy(BPe), *_tracer_terms(tracers),
                  Advection(with_temperature=False, tracers=names),
                  ShearForcing(F0, kf)))


def model_for(case: Case) -> Model:
    """The model a case asks for, with its parameters and passive tracers."""
    if case.model == "boussinesq":
        return boussinesq(case.Re, case.B, case.Pe, case.F0, case.kf, case.tracers)
    return lowpe(case.Re, case.BPe, case.F0, case.kf, case.tracers)
