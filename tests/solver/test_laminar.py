"""The forced laminar flow: exact start-up from rest and exact steady state.

With F = F0 sin(kf y) e_x and u = U(t) sin(kf y) e_x the advection vanishes
and dU/dt = F0 - kf^2 U/Re, so from rest U(t) = U_L (1 - exp(-kf^2 t/Re))
with U_L = F0 Re/kf^2 (docs/equations.md#forcing; an exact solution).
"""
import math

import numpy as np
import pytest

from shearmix.solver.run.simulation import Simulation


@pytest.mark.parametrize("model,params,amplitude,kf", [
    ("lowpe", {"Re": 10.0, "BPe": 3.0}, "laminar", 1.0),
    ("boussinesq", {"Re": 10.0, "B": 2.0, "Pr": 0.5}, "unit", 1.0),
    ("lowpe", {"Re": 25.0, "BPe": 0.5}, 0.3, 2.0),
])
def test_start_up_from_rest_is_exact(make_case, model, params, amplitude, kf):
    case = make_case(model=model, parameters=params, forcing={"kf": kf, "amplitude": amplitude},
                     grid={"Nx": 8, "Ny": 16, "Nz": 8}, time={"dt": 0.05, "adaptive": False},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    _, y, _ = sim.grid.physical_coordinates()
    Re = params["Re"]
    for t in (0.5, 2.0, 5.0):
        sim.advance_to(t)
        u, v, w, _ = sim.physical()
        exact = case.U_L * (1 - math.exp(-kf ** 2 * t / Re)) * np.sin(kf * y)
        assert np.abs(u - exact).max() < 1e-8 * case.U_L
        assert np.abs(v).max() < 1e-14 * case.U_L and np.abs(w).max() < 1e-14 * case.U_L


def test_laminar_state_is_steady_to_round_off(make_case):
    case = make_case(parameters={"Re": 40.0, "BPe": 5.0}, grid={"Nx": 16, "Ny": 16, "Nz": 8},
                     time={"dt": 0.1, "adaptive": False}, initial={"kind": "laminar"})
    sim = Simulation(case)
    u0 = sim.physical()[0]
    for _ in range(200):
        sim.advance()
    u = sim.physical()[0]
    assert np.abs(u - u0).max() < 1e-13
    d = sim.diagnostics()
    # laminar budget: I = eps = U_L^2 kf^2/(2 Re) (exact)
    assert d["I"] == pytest.approx(1 / 80, rel=1e-12)
    assert d["eps"] == pytest.approx(1 / 80, rel=1e-12)
    assert d["K"] == pytest.approx(0.25, rel=1e-12)
