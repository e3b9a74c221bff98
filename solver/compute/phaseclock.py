"""Wall time per phase of the time step: where a step's time goes, rank by rank.

Off unless asked for (``SlabTransform.clock`` is None): the engine then pays
one ``None`` test per phase. With a :class:`PhaseClock` attached, the
transform's round trip and the tendency call :meth:`PhaseClock.lap` at each
phase boundary; whatever runs between two tendency evaluations (the
Runge-Kutta stage updates and implicit solves, the forcing) is not lapped,
so a step's time minus the laps is that remainder. ``scripts/bench --phases``
reports the laps per step.
"""
from __future__ import annotations

import time

#: phases in the order a step meets them (the whole-array pass has its own middle)
PHASES = ("frame to Cartesian", "x inverse", "yz inverse", "products", "yz forward",
          "x forward", "transforms and products", "wait", "advection assembly")


class PhaseClock:
    """Accumulates wall time per named phase between consecutive laps, and the
    work each phase did (:meth:`count`): time a phase only next to what it
    did, since a phase that does more than it should looks merely slow."""

    def __init__(self):
        self.totals: dict[str, float] = {}
        #: work per phase in the phase's own unit (the round trip counts 1-D
        #: x-FFTs for the x phases and x-planes for the (y, z) phases)
        self.work: dict[str, int] = {}
        self._last = time.perf_counter()

    def start(self) -> None:
        """Set the reference point: the next lap counts from here."""
        self._last = time.perf_counter()

    def lap(self, phase: str) -> None:
        """Charge the time since the last lap (or start) to ``phase``."""
        now = time.perf_counter()
        self.totals[phase] = self.totals.get(phase, 0.0) + (now - self._last)
        self._last = now

    def count(self, phase: str, amount: int) -> None:
        """Add ``amount`` to the work done in ``phase``."""
        self.work[phase] = self.work.get(phase, 0) + amount

    def reset(self) -> None:
        self.totals.clear()
        self.work.clear()
        self.start()
