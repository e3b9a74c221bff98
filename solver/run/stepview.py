"""What outputs and diagnostics see of a run at a step boundary: a read-only view.

The run loop makes one :class:`StepView` per step boundary and hands it to
every output; the diagnostics, spectra, snapshots and checkpoints read only
what it holds (time, step, last full step, the state, the grid and the fixed
parameters, read from the case once when the simulation was built), never the
simulation itself. The state is a read-only view of the solver's array.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from shearmix.solver.files.fileheader import history_of


@dataclass(frozen=True)
class Parameters:
    """The physical parameters the reported numbers need (docs/equations.md)."""

    Re: float
    Pe: float | None
    B: float | None
    BPe: float | None

    @classmethod
    def from_case(cls, case) -> "Parameters":
        return cls(case.Re, case.Pe, case.B, case.BPe)


@dataclass(frozen=True)
class StepView:
    """One step boundary of a run (see the module docstring)."""

    t: float
    step_count: int
    dt: float
    state: np.ndarray
    #: max |u| from the last tendency evaluation that measured it
    max_speed: float
    #: the run's history (None outside a run until a file is written)
    history: list | None
    grid: Any
    comm: Any
    basis: Any
    fields: tuple
    params: Parameters
    #: :class:`shearmix.solver.physics.forcing.ForcingModes` of the tendency
    forcing: Any
    #: the case, for the provenance every file records
    case: Any
    #: ``(state, tracer fields=()) -> (u, v, w, T or None, *tracers)`` new physical
    #: slabs (collective)
    to_physical: Callable
    #: ``spectral slab -> new physical slab`` (collective; the input is kept)
    inverse: Callable

    def physical(self):
        """Local physical slabs ``(u, v, w, T or None)`` of the state (collective)."""
        return self.to_physical(self.state)


def step_view(source) -> StepView:
    """``source`` if it is a view, else ``source.view()`` of a simulation, whose history
    starts here if nothing started it (a file written outside a run)."""
    if isinstance(source, StepView):
        return source
    history_of(source)
    return source.view()
