"""Checks of the linear stability solver against outside references.

Each test names its source.  Values quoted from memory say so.
"""
import math

import numpy as np
import pytest

from shearmix.tools.stability import FlowParams, build, solve, spectrum
from shearmix.tools.stability.maps import neutral_value


# ---------------------------------------------------------------- Kolmogorov flow, 2D
def test_kolmogorov_critical_reynolds_tends_to_sqrt2():
    """Meshalkin & Sinai 1961: 2D Kolmogorov flow sin(y), critical Re -> sqrt(2) as kx -> 0.

    The neutral Re at small kx approaches sqrt(2) from above and falls
    monotonically as kx decreases.
    """
    p = FlowParams("lowpe", Re=2.0, BPe=0.0)
    kxs = [0.2, 0.1, 0.05, 0.02]
    re_n = [neutral_value(p, "Re", kx, 0.0)[0] for kx in kxs]
    assert all(r > math.sqrt(2) for r in re_n)
    assert all(a > b for a, b in zip(re_n, re_n[1:]))
    assert re_n[-1] == pytest.approx(math.sqrt(2), rel=1e-3)
    # the excess shrinks like kx^2 (long-wave expansion): quartering kx^2 quarters it
    ex = [r - math.sqrt(2) for r in re_n]
    assert ex[2] / ex[1] == pytest.approx(0.25, rel=0.05)


def test_kolmogorov_long_wave_negative_viscosity():
    """Long-wave limit (Meshalkin & Sinai 1961; Sivashinsky 1985, Physica D 17):
    sigma = kx^2 (U^2 /(2 nu kf^2) - nu) + O(kx^4), i.e. Re/2 - 1/Re with unit
    amplitude and kf = 1 (formula from memory).  The O(kx^4) term is removed by
    Richardson extrapolation from kx and kx/2.
    """
    for Re in (1.0, 2.0, 5.0):
        p = FlowParams("lowpe", Re=Re, BPe=0.0)
        h = 0.004
        f1 = solve(p, h, 0.0).growth / h ** 2
        f2 = solve(p, h / 2, 0.0).growth / (h / 2) ** 2
        assert (4 * f2 - f1) / 3 == pytest.approx(Re / 2 - 1 / Re, abs=1e-6)


def test_kolmogorov_reynolds_scaling_with_amplitude_and_kf():
    """Dimensional analysis (common practice): the problem depends on U_L Re / kf only.

    With U_L = 2, kf = 3 the neutral Re at the same kx/kf is sqrt(2)*kf/U_L
    times the unit-case value; growth rates scale with U_L kf.
    """
    p1 = FlowParams("lowpe", Re=2.0, BPe=0.0)
    p2 = FlowParams("lowpe", Re=2.0 * 3 / 2, BPe=0.0, U_L=2.0, kf=3.0)
    s1 = solve(p1, 0.3, 0.0).sigma
    s2 = solve(p2, 0.9, 0.0).sigma
    assert s2 / (2.0 * 3.0) == pytest.approx(s1, rel=1e-9)


def test_kolmogorov_stable_for_kx_at_least_kf():
    """2D Kolmogorov flow is linearly stable for kx >= kf at any Re
    (classical result, Meshalkin & Sinai 1961; docs/equations.md#forcing; quoted from memory).
    """
    for Re in (10.0, 100.0, 1000.0):
        p = FlowParams("lowpe", Re=Re, BPe=0.0)
        for kx in (1.0, 1.3):
            assert solve(p, kx, 0.0).growth < 0


# ---------------------------------------------------------------- no shear: exact solutions
def _analytic_no_shear(p, kx, kz, ky0, M):
    q = ky0 + np.arange(-M, M + 1) * p.kf
    out = []
    for qn in q:
        k2 = kx ** 2 + qn ** 2 + kz ** 2
        if k2 == 0:
            continue
        kh2 = kx ** 2 + qn ** 2
        nu, ka = p.nu, p.kappa
        # vortical: pure viscous decay
        out.append(-nu * k2)
        if p.model == "lowpe":
            out.append(-p.BPe * kh2 / k2 ** 2 - nu * k2)
        else:
            # sigma^2 + (nu+ka) k2 sigma + nu ka k2^2 + B kh2/k2 = 0
            out.extend(np.roots([1.0, (nu + ka) * k2, nu * ka * k2 ** 2 + p.B * kh2 / k2]))
    return np.array(out, dtype=complex)


def _match(a, b, tol):
    a = np.sort_complex(np.asarray(a, complex))
    b = np.sort_complex(np.asarray(b, complex))
    assert a.shape == b.shape
    # sort_complex orders lexicographically; compare by nearest partner instead
    for z in a:
        assert np.min(np.abs(b - z)) < tol * (1 + abs(z))


def test_internal_gravity_waves_inviscid():
    """No shear, no diffusion: internal gravity waves omega^2 = B kh^2/|k|^2
    (textbook result; reference quoted from memory: Sutherland 2010, Internal Gravity
    Waves, ch. 3)."""
    p = FlowParams("boussinesq", Re=math.inf, B=3.0, Pe=math.inf, U_L=0.0)
    kx, kz, ky0, M = 0.7, 1.3, 0.2, 4
    ev = spectrum(build(p, kx, kz, ky0, M))
    assert np.max(np.abs(ev.real)) < 1e-12
    q = ky0 + np.arange(-M, M + 1)
    kh2 = kx ** 2 + q ** 2
    w = np.sqrt(p.B * kh2 / (kh2 + kz ** 2))
    expect = np.concatenate([w, -w, np.zeros(q.size)])
    assert np.allclose(np.sort(ev.imag), np.sort(expect), atol=1e-12)


@pytest.mark.parametrize("kx,kz,ky0", [(0.7, 1.3, 0.2), (0.0, 1.0, 0.0), (0.5, 0.0, 0.0)])
def test_damped_gravity_waves_exact(kx, kz, ky0):
    """No shear: exact roots of the damped 2x2 system
    sigma^2 + (1/Re + 1/Pe)|k|^2 sigma + |k|^4/(Re Pe) + B kh^2/|k|^2 = 0
    (derived from the equations, docs/equations.md#models) and viscous decay of the
    vortical part; includes kx = 0 and kz = 0."""
    p = FlowParams("boussinesq", Re=20.0, B=2.0, Pe=7.0, U_L=0.0)
    M = 5
    ev = spectrum(build(p, kx, kz, ky0, M))
    _match(ev, _analytic_no_shear(p, kx, kz, ky0, M), 1e-10)


@pytest.mark.parametrize("kx,kz,ky0", [(0.7, 1.3, 0.2), (0.0, 1.0, 0.0), (0.5, 0.0, 0.3)])
def test_low_peclet_damping_exact(kx, kz, ky0):
    """No shear, low-Pe model: poloidal part decays at BPe kh^2/|k|^4 + |k|^2/Re
    (docs/equations.md#models, from T = Pe lap^-1 w), vortical part at |k|^2/Re."""
    p = FlowParams("lowpe", Re=30.0, BPe=5.0, U_L=0.0)
    M = 5
    ev = spectrum(build(p, kx, kz, ky0, M))
    assert np.max(np.abs(ev.imag)) < 1e-12
    _match(ev, _analytic_no_shear(p, kx, kz, ky0, M), 1e-10)


# ---------------------------------------------------------------- limits and consistency
def test_full_model_tends_to_low_peclet():
    """docs/equations.md#models (the low-Peclet reduction): the Boussinesq equations at Pe -> 0 with B Pe fixed
    reduce to the low-Péclet model; the eigenvalue difference falls like Pe."""
    BPe, Re = 2.0, 40.0
    lo = FlowParams("lowpe", Re=Re, BPe=BPe)
    ref = solve(lo, 0.4, 0.8).sigma
    diffs = []
    for Pe in (1e-2, 1e-3, 1e-4):
        full = FlowParams("boussinesq", Re=Re, B=BPe / Pe, Pe=Pe)
        diffs.append(abs(solve(full, 0.4, 0.8).sigma - ref))
    assert diffs[-1] < 1e-4 * abs(ref.real)
    assert diffs[1] / diffs[0] == pytest.approx(0.1, rel=0.2)
    assert diffs[2] / diffs[1] == pytest.approx(0.1, rel=0.2)


def test_energy_bound():
    """Energy method (Serrin 1959; Joseph 1976, Stability of Fluid Motions):
    growth <= max|U'|/2 - min(1/Re, 1/Pe)(kx^2 + kz^2); buoyancy only exchanges
    (full model) or removes (low-Pe) energy."""
    rng = np.random.default_rng(4)
    for p in (FlowParams("boussinesq", Re=200.0, B=0.5, Pe=50.0),
              FlowParams("lowpe", Re=200.0, BPe=3.0)):
        diff = min(p.nu, p.kappa) if p.model == "boussinesq" else p.nu
        for kx, kz, ky0 in rng.uniform([0, 0, 0], [1.5, 3, 0.5], size=(6, 3)):
            s = solve(p, kx, kz, ky0).growth
            assert s <= 0.5 * p.U_L * p.kf - diff * (kx ** 2 + kz ** 2) + 1e-12


def test_stratification_does_not_touch_2d_modes():
    """For kz = 0 the vortical (in-plane) modes do not involve w, so buoyancy
    cannot change them (exact property of the equations, docs/equations.md#models):
    the 2D leading eigenvalue equals the unstratified one."""
    s0 = solve(FlowParams("lowpe", Re=30.0, BPe=0.0), 0.5, 0.0).sigma
    s1 = solve(FlowParams("lowpe", Re=30.0, BPe=50.0), 0.5, 0.0).sigma
    s2 = solve(FlowParams("boussinesq", Re=30.0, B=4.0, Pe=10.0), 0.5, 0.0).sigma
    assert s1 == pytest.approx(s0, abs=1e-12)
    assert s2 == pytest.approx(s0, abs=1e-12)
