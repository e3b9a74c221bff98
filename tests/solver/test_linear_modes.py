"""Single Fourier modes whose evolution is linear and known exactly.

A single plane wave u = U cos(k.x) with U normal to k has (u.grad)u = 0 and
u.grad T = 0, so the engine must reproduce the linear 2x2 dynamics exactly:

* full model: the poloidal amplitude p and T obey
  d/dt [p, T] = [[-|k|^2/Re, -B kh/|k|], [kh/|k|, -|k|^2/Pe]] [p, T]
  (internal gravity waves of frequency sqrt(B) kh/|k| when undamped; e.g.
  B. R. Sutherland 2010, Internal Gravity Waves, Cambridge UP, ch. 3, where
  N^2 plays the role of B). The reference solution is the matrix exponential
  of scipy.linalg.expm (a general-purpose library).
* low-Peclet model: p decays at exactly BPe kh^2/|k|^4 + |k|^2/Re
  (docs/equations.md#spectral-formulation).
"""
import math

import numpy as np
import pytest
import scipy.linalg

from shearmix.solver.run.simulation import Simulation


def _mode_amplitudes(sim, n):
    idx = sim.grid.local_index_of(*n)
    return sim.state[:, idx[0], idx[1], idx[2]]


@pytest.mark.parametrize("Re,Pe", [(1e8, 1e8), (50.0, 5.0)])
def test_internal_gravity_wave_matches_exact_2x2_solution(make_case, Re, Pe):
    B = 4.0
    case = make_case(model="boussinesq", parameters={"Re": Re, "B": B, "Pe": Pe},
                     forcing={"amplitude": 0.0}, box={"Lx": "2*pi", "Ly": "2*pi", "Lz": "2*pi"},
                     grid={"Nx": 8, "Ny": 8, "Nz": 8}, time={"dt": 0.005, "adaptive": False},
                     initial={"kind": "mode", "amplitude": 1e-2,
                              "mode": {"nx": 1, "ny": 2, "nz": 1, "component": "poloidal"}})
    sim = Simulation(case)
    n = (1, 2, 1)
    kh, kk = math.sqrt(5.0), math.sqrt(6.0)
    y0 = _mode_amplitudes(sim, n).copy()
    L = np.array([[-kk ** 2 / Re, -B * kh / kk], [kh / kk, -kk ** 2 / Pe]])
    for t in (0.3, 1.0, 2.5):
        sim.advance_to(t)
        exact = scipy.linalg.expm(L * t) @ y0[1:]
        got = _mode_amplitudes(sim, n)
        assert abs(got[0]) < 1e-15
        # bound on the third-order time error, ~ (omega dt)^3 omega t with omega dt < 0.01
        assert np.abs(got[1:] - exact).max() < 1e-6 * abs(y0[1])
    if Re > 1e6:
        omega = math.sqrt(B) * kh / kk  # undamped frequency
        assert np.sqrt(-np.linalg.eigvals(L).real ** 2 + 0j).real.max() < 1e-6
        assert np.abs(np.linalg.eigvals(L).imag).max() == pytest.approx(omega, rel=1e-12)


@pytest.mark.parametrize("n", [(1, 0, 1), (2, 1, 2), (0, 1, 1)])
def test_low_peclet_poloidal_mode_decay_rate(make_case, n):
    Re, BPe = 20.0, 7.0
    case = make_case(parameters={"Re": Re, "BPe": BPe}, forcing={"amplitude": 0.0},
                     box={"Lx": "2*pi", "Ly": "2*pi", "Lz": "2*pi"},
                     grid={"Nx": 8, "Ny": 8, "Nz": 8}, time={"dt": 0.002, "adaptive": False},
                     initial={"kind": "mode", "amplitude": 1e-2,
                              "mode": {"nx": n[0], "ny": n[1], "nz": n[2],
                                       "component": "poloidal"}})
    sim = Simulation(case)
    kh2 = n[0] ** 2 + n[1] ** 2
    k2 = kh2 + n[2] ** 2
    rate = BPe * kh2 / k2 ** 2 + k2 / Re
    p0 = _mode_amplitudes(sim, n)[1]
    sim.advance_to(1.0)
    p1 = _mode_amplitudes(sim, n)[1]
    # third-order time error of the implicit solve: ~ (rate dt)^3 / 24 per unit time
    assert -math.log(abs(p1 / p0)) == pytest.approx(rate, rel=1e-8)
