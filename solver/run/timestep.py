"""The time-step controller: every step of a run is chosen here.

Adaptive (``time.adaptive``): ``dt = min(dt_max, C / r, 2 dt_prev)`` with ``C``
the advective CFL number (``time.cfl``) and
``r = max(|u|/dx + |v|/dy + |w|/dz)`` over the grid (the advective CFL
condition, common practice, no source; the factor 2 keeps the step from
jumping after a quiet start). A step the CFL condition shrinks below
``time.dt_min`` is a collapse. Fixed: the previous full step (``time.dt``,
or the ``dt`` a restart continues with).

A step that would pass a stop time ``t_stop``, or end within :data:`TOL`
(relative) short of it, is shortened to land on ``t_stop`` exactly; that
shortened step is not taken as the previous step of the adaptive rule.
"""
from __future__ import annotations

from dataclasses import dataclass

#: relative tolerance on reaching a stop time (one for every comparison with it)
TOL = 1e-12


@dataclass(frozen=True)
class TimeStepControl:
    """The step rule of a case, read once (``from_case``)."""

    adaptive: bool
    cfl: float
    dt_max: float
    dt_min: float
    growth: float = 2.0

    @classmethod
    def from_case(cls, case) -> "TimeStepControl":
        return cls(adaptive=bool(case.get("time.adaptive")), cfl=float(case.get("time.cfl")),
                   dt_max=float(case.get("time.dt_max")), dt_min=float(case.get("time.dt_min")))

    def cfl_step(self, rate: float) -> float:
        """Largest step the CFL number and the ceiling allow for the rate ``r``."""
        return self.dt_max if rate <= 0 else min(self.dt_max, self.cfl / rate)

    def choose(self, rate: float, previous: float) -> float:
        """The step before landing: adaptive from ``rate`` and the previous full step."""
        if self.adaptive:
            return min(self.cfl_step(rate), self.growth * previous)
        return previous

    def collapsed(self, dt: float) -> bool:
        """Whether a chosen (adaptive) step is below ``dt_min``."""
        return self.adaptive and dt < self.dt_min

    @staticmethod
    def reached(t: float, t_stop: float | None) -> bool:
        """Whether ``t`` is at ``t_stop`` (within :data:`TOL`)."""
        return t_stop is not None and t >= t_stop - TOL * max(1.0, abs(t_stop))

    def land(self, t: float, dt: float, t_stop: float | None) -> tuple[float, bool]:
        """``(step, landed)``: ``dt``, or the step that ends exactly on ``t_stop``."""
        if t_stop is not None and self.reached(t + dt, t_stop):
            return t_stop - t, True
        return dt, False
