"""The phase clock: laps charge the time between them, cover the step without
double counting, and leave the results bit for bit as they were."""
import time
from types import SimpleNamespace

import numpy as np
import pytest

from shearmix.solver.compute import phaseclock
from shearmix.solver.compute.phaseclock import PHASES, PhaseClock
from shearmix.solver.run.simulation import Simulation


def test_lap_charges_the_time_since_the_last_lap(monkeypatch):
    # a clock the test drives, so the figures are exact and load cannot move them
    now = [10.0]
    monkeypatch.setattr(phaseclock, "time", SimpleNamespace(perf_counter=lambda: now[0]))
    clock = PhaseClock()
    clock.start()
    now[0] += 0.25
    clock.lap("a")
    clock.lap("b")
    now[0] += 0.5
    clock.start()          # what ran before start() is nobody's
    clock.lap("b")
    assert clock.totals == {"a": 0.25, "b": 0.0}
    now[0] += 0.125
    clock.lap("a")
    assert clock.totals == {"a": 0.375, "b": 0.0}
    clock.reset()
    assert clock.totals == {}


BLOCK_PHASES = {"frame to Cartesian", "x inverse", "yz inverse", "products", "yz forward",
                "x forward", "advection assembly"}


@pytest.mark.parametrize("kind,expected", [
    ("blocks", BLOCK_PHASES),
    ("whole", {"transforms and products", "advection assembly"})])
def test_clock_covers_the_step_and_changes_nothing(make_case, kind, expected):
    case = make_case(model="boussinesq", parameters={"Re": 80.0, "B": 1.0, "Pr": 1.0},
                     compute={"product_pass": kind},
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


@pytest.mark.parametrize("model,params,fields_in,fields_out", [
    ("lowpe", {"Re": 80.0, "BPe": 1.0}, 3, 5),
    ("boussinesq", {"Re": 80.0, "B": 1.0, "Pr": 1.0}, 4, 8)])
def test_clock_counts_the_round_trips_work(make_case, model, params, fields_in, fields_out):
    """Per evaluation the round trip transforms the velocity (and T) in and the
    products out (solver/physics/tendency.py: 5 stresses, 3 fluxes of T): (y, z)
    transforms of every x-plane of each field, x-FFTs of each kept (ky, kz)
    column (2/3 rule, solver/grid.py) of each field, and no more."""
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 12, "Nz": 8},
                     compute={"product_pass": "blocks"},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 4})
    sim = Simulation(case)
    sim.advance()
    clock = sim.fft.clock = PhaseClock()
    trips0 = sim.fft.count_round_trips
    sim.advance()
    trips = sim.fft.count_round_trips - trips0
    g = sim.grid
    columns = int(g.keep_y.sum()) * g.nz_kept
    assert trips == 4   # one per stage of the default scheme (cb3c, 4 stages)
    assert clock.work["yz inverse"] == trips * fields_in * g.shape[0]
    assert clock.work["yz forward"] == trips * fields_out * g.shape[0]
    assert clock.work["x inverse"] == trips * fields_in * columns
    assert clock.work["x forward"] == trips * fields_out * columns
