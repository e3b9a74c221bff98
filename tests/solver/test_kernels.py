"""The compiled kernels agree with their NumPy definitions to round-off.

Both paths run the same nonlinear case for a few steps; the NumPy path is the
plain definition of the arithmetic (solver/compute/kernels.py)."""
import numpy as np
import pytest

from shearmix.solver.compute import kernels
from shearmix.solver.run.simulation import Simulation

pytestmark = pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 80.0, "BPe": 2.0}),
                                          ("boussinesq", {"Re": 80.0, "B": 2.0, "Pr": 0.5})])
def test_numba_and_numpy_steps_agree(make_case, model, params):
    states = {}
    for mode in ("numba", "numpy"):
        case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 12, "Nz": 8},
                         time={"dt": 0.02, "adaptive": False}, compute={"kernels": mode},
                         initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 2})
        sim = Simulation(case)
        assert kernels.use_numba() == (mode == "numba")
        sim.add_mode(1, 1, 1, "poloidal", 0.3)
        for _ in range(5):
            sim.advance()
        states[mode] = sim.state.copy()
    kernels.set_backend("numba")
    ref = states["numpy"]
    assert np.abs(ref).max() > 0.05
    assert np.abs(states["numba"] - ref).max() < 1e-13 * np.abs(ref).max()


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 80.0, "BPe": 2.0, "Pe": 0.1}),
                                          ("boussinesq", {"Re": 80.0, "B": 2.0, "Pr": 0.5})])
def test_numba_and_numpy_diagnostics_agree(make_case, model, params):
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 12, "Nz": 8},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 4})
    sim = Simulation(case)
    sim.add_mode(1, 1, 1, "poloidal", 0.3)
    got = {}
    for mode in ("numba", "numpy"):
        kernels.set_backend(mode)
        got[mode] = sim.diagnostics()
    kernels.set_backend("numba")
    for key, ref in got["numpy"].items():
        if isinstance(ref, float) and np.isfinite(ref):
            assert got["numba"][key] == pytest.approx(ref, rel=1e-12, abs=1e-300), key
    assert got["numpy"]["J"] != 0 and got["numpy"]["Kz"] > 0


@pytest.mark.parametrize("backend", ["numba", "numpy"])
def test_fused_stresses_and_scalar_fluxes_match_plain_arithmetic(backend):
    """The block-wise pass's fused products: five stresses from u, v, w (three of
    them over the velocity) and three fluxes of T (one over T)."""
    rng = np.random.default_rng(11)
    u0, v0, w0, T0 = rng.standard_normal((4, 3, 5, 4))
    u, v, w, T = u0.copy(), v0.copy(), w0.copy(), T0.copy()
    uv, uu_ww, uT, vT = (np.empty_like(u) for _ in range(4))
    kernels.set_backend(backend)
    try:
        kernels.scalar_fluxes(u, v, w, T, uT, vT)
        kernels.stresses(u, v, w, uv, uu_ww)
    finally:
        kernels.set_backend("numba")
    for got, want in ((uT, u0 * T0), (vT, v0 * T0), (T, w0 * T0), (uv, u0 * v0),
                      (uu_ww, u0 * u0 - w0 * w0), (u, u0 * w0), (v, v0 * v0 - w0 * w0),
                      (w, v0 * w0)):
        np.testing.assert_allclose(got, want, rtol=1e-15, atol=1e-15)


def test_kernel_backend_comes_from_the_case(make_case):
    """``compute.kernels`` picks the kernels (a mistyped value is refused in one
    line naming the key); no environment variable is read by the engine."""
    from shearmix.solver.case import CaseError
    try:
        Simulation(make_case(compute={"kernels": "numpy"}))
        assert kernels.use_numba() is False
        Simulation(make_case())
        assert kernels.use_numba() is True
        with pytest.raises(CaseError, match=r"compute.kernels: must be one of numba, numpy"):
            make_case(compute={"kernels": "fast"})
        with pytest.raises(ValueError, match=r"compute.kernels: must be one of numba, numpy"):
            kernels.set_backend("fast")
    finally:
        kernels.set_backend("numba")
