"""Taylor-Green vortices: exact viscous decay and exact initial dissipation.

2D vortex u = sin x cos y, v = -cos x sin y (G. I. Taylor 1923, Phil. Mag. 46,
671): its advection is a pure gradient, so it decays as exp(-2 t/Re).
3D vortex u = sin x cos y cos z, v = -cos x sin y cos z, w = 0 (Taylor & Green
1937, Proc. R. Soc. A 158, 499): |k|^2 = 3 on every mode, so the initial
dissipation rate is exactly (1/Re) * 3 * <u^2+v^2> = 3/(4 Re).
"""
import math

import numpy as np
import pytest

from shearmix.solver.physics.models import Model
from shearmix.solver.physics.terms import Advection, Viscosity
from shearmix.solver.run.simulation import Simulation


def _tg_sim(make_case, Re, dt, scheme="cb3c", three_d=False):
    case = make_case(parameters={"Re": Re, "BPe": 0.0}, forcing={"amplitude": 0.0},
                     box={"Lx": "2*pi", "Ly": "2*pi", "Lz": "2*pi"},
                     grid={"Nx": 16, "Ny": 16, "Nz": 16},
                     time={"dt": dt, "adaptive": False, "scheme": scheme},
                     initial={"kind": "rest"})
    model = Model("navier-stokes", ("a", "p"), (Viscosity(Re), Advection(False)))
    sim = Simulation(case, model=model)
    x, y, z = sim.grid.physical_coordinates()
    cz = np.cos(z) if three_d else 1.0
    u = np.sin(x) * np.cos(y) * cz * np.ones(sim.grid.physical_shape)
    v = -np.cos(x) * np.sin(y) * cz * np.ones(sim.grid.physical_shape)
    sim.set_physical(u, v, 0 * u)
    return sim, u


@pytest.mark.parametrize("scheme", ["cb3c", "ars343"])
def test_taylor_green_2d_decays_at_exact_rate_with_third_order_error(make_case, scheme):
    Re, t_end = 1.0, 1.0
    errors = []
    for dt in (0.2, 0.1, 0.05):
        sim, u0 = _tg_sim(make_case, Re, dt, scheme)
        sim.advance_to(t_end)
        u = sim.physical()[0]
        exact = u0 * math.exp(-2 * t_end / Re)
        errors.append(np.abs(u - exact).max() / np.abs(exact).max())
    orders = [math.log2(errors[i] / errors[i + 1]) for i in range(2)]
    # third-order scheme: each halving of dt divides the error by about 8
    assert all(2.8 < q < 3.3 for q in orders), (errors, orders)
    assert errors[-1] < 1e-4


def test_taylor_green_2d_long_decay_small_dt(make_case):
    Re = 10.0
    sim, u0 = _tg_sim(make_case, Re, 0.01)
    sim.advance_to(2.0)
    K = sim.diagnostics()["K"]
    # K(t) = K(0) exp(-4 t/Re), K(0) = 1/4
    assert K == pytest.approx(0.25 * math.exp(-4 * 2.0 / Re), rel=1e-9)


def test_taylor_green_3d_initial_dissipation_is_three_quarters_over_Re(make_case):
    Re = 400.0
    sim, _ = _tg_sim(make_case, Re, 0.01, three_d=True)
    d = sim.diagnostics()
    assert d["K"] == pytest.approx(1 / 8, rel=1e-13)
    assert d["eps"] == pytest.approx(3 / (4 * Re), rel=1e-13)
