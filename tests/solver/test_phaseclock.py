"""The phase clock: laps charge the time between them, cover the step without
double counting, and leave the results bit for bit as they were."""
import time

import numpy as np
import pytest

from solver.phaseclock import PHASES, PhaseClock
from solver.simulation import Simulation


def test_lap_charges_the_time_since_the_last_lap():
    clock = PhaseClock()
    clock.start()
    time.sleep(0.02)
    clock.lap("a")
    clock.lap("b")
    time.sleep(0.01)
    clock.start()          # what ran before start() is nobody's
    clock.lap("b")
    assert clock.totals["a"] >= 0.02
    assert clock.totals["b"] < 0.005
    clock.lap("a")
    assert clock.totals["a"] >= 0.02
    clock.reset()
    assert clock.totals == {}


BLOCK_PHASES = {"frame to Cartesian", "x inverse", "yz inverse", "products", "yz forward",
                "x forward", "advection assembly"}


@pytest.mark.parametrize("kind,expected", [
    ("blocks", BLOCK_PHASES),
    ("whole", {"transforms and products", "advection assembly"})])
def test_clock_covers_the_step_and_changes_nothing(make_case, monkeypatch, kind, expected):
    monkeypatch.setenv("SHEARMIX_PHYSICAL_PASS", kind)
    case = make_case(model="boussinesq", parameters={"Re": 80.0, "B": 1.0, "Pr": 1.0},
                     grid={"Nx": 16, "Ny": 16, "Nz": 8},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 4})
    plain, timed = Simulation(case), Simulation(case)
    clock = timed.fft.clock = PhaseClock()
    elapsed = 0.0
    for _ in range(3):
        plain.advance()
        t0 = time.perf_counter()
        timed.advance()
        elapsed += time.perf_counter() - t0
    assert np.array_equal(plain.state, timed.state)   # timing is not arithmetic
    assert expected <= set(clock.totals)
    assert set(clock.totals) <= set(PHASES)
    assert all(t > 0 for p, t in clock.totals.items() if p != "wait")
    # laps fall inside the steps and never overlap
    assert sum(clock.totals.values()) < elapsed
