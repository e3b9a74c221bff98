"""What a run writes, each on its own cadence: a run's outputs are a list of these.

The run loop calls, for every output, ``open`` once, then before each step
``due`` and, when due, ``write`` (collective calls, at the state of the start
of the step), and ``close`` once with the reason the run ended
('finished', 'stopped' or 'blowup'). Each call receives the
:class:`shearmix.solver.run.stepview.StepView` of that step boundary, never the
simulation. New kinds of output (checkpoints,
snapshots, spectra) subclass :class:`Output` and are added to the list.
"""
from __future__ import annotations

import math
import os

from shearmix.solver.files.series import SERIES_FILE, TimeSeriesWriter
from shearmix.solver.physics import diagnostics as diag
from shearmix.solver.run.stepview import step_view


class Output:
    """Base class: a file (or files) a run writes on a cadence."""

    def open(self, view, out_dir: str, append: bool) -> None:
        self.out_dir = out_dir

    def due(self, view) -> bool:
        return False

    def write(self, view) -> None:
        pass

    def close(self, view, reason: str) -> None:
        pass

    def flush(self) -> None:
        """Make what was written so far durable (called before a checkpoint)."""


class EveryNSteps:
    """Cadence in steps, counted from step 0 of the run's history."""

    def __init__(self, every: int):
        self.every = int(every)

    def __call__(self, sim) -> bool:
        return sim.step_count % self.every == 0


class EveryTime:
    """Cadence in simulated time: due at the first step boundary at or after each
    multiple of ``every`` (the adaptive step does not land on them exactly).

    ``start(t, now)`` arms it at the start of a run segment: due at once when
    ``now``, else at the first multiple after ``t`` (a restart continues the
    cadence of the run it continues). ``advance(t)`` moves it past ``t`` after
    a write.
    """

    def __init__(self, every: float):
        self.every = float(every)
        self.next_t = 0.0

    def _after(self, t: float) -> float:
        # a time a rounding error short of a multiple counts as that multiple
        return (math.floor(t / self.every + 1e-9) + 1) * self.every

    def start(self, t: float, now: bool) -> None:
        self.next_t = t if now else self._after(t)

    def advance(self, t: float) -> None:
        self.next_t = self._after(t)

    def __call__(self, sim) -> bool:
        return sim.t >= self.next_t - 1e-9 * max(1.0, abs(sim.t))


class TimeSeriesOutput(Output):
    """Diagnostics of docs/equations.md#reported-numbers appended to ``timeseries.h5``."""

    def __init__(self, every: int):
        self.cadence = EveryNSteps(every)
        self.writer = None
        self.last = None
        self.last_step = None

    def open(self, sim, out_dir, append):
        super().open(sim, out_dir, append)
        self.budget = diag.BudgetCheck()
        if sim.comm.rank == 0:
            self.writer = TimeSeriesWriter(os.path.join(out_dir, SERIES_FILE), sim.case,
                                           diag.SERIES_NAMES
                                           + diag.tracer_series_names(sim.case.tracers),
                                           append=append)

    def due(self, sim):
        return self.cadence(sim)

    def write(self, sim):
        view = step_view(sim)
        d = diag.compute(view)
        previous = self.budget.previous
        d["budget_residual"] = self.budget(d)
        self.budget.tracers(d, previous, view.case.tracers)
        if self.writer is not None:
            self.writer.append(d)
        self.last, self.last_step = d, view.step_count

    def flush(self):
        if self.writer is not None:
            self.writer.flush()

    def close(self, sim, reason):
        if reason != "blowup" and self.last_step != sim.step_count:
            self.write(sim)
        if self.writer is not None:
            self.writer.close()
            self.writer = None
