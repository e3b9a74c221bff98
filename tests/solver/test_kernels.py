"""The compiled kernels agree with their NumPy definitions to round-off.

Both paths run the same nonlinear case for a few steps; the NumPy path is the
plain definition of the arithmetic (solver/kernels.py)."""
import numpy as np
import pytest

from solver import kernels
from solver.simulation import Simulation

pytestmark = pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 80.0, "BPe": 2.0}),
                                          ("boussinesq", {"Re": 80.0, "B": 2.0, "Pr": 0.5})])
def test_numba_and_numpy_steps_agree(make_case, model, params):
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 12, "Nz": 8},
                     time={"dt": 0.02, "adaptive": False},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 2})
    states = {}
    for mode in ("numba", "numpy"):
        kernels.set_backend(mode)
        assert kernels.use_numba() == (mode == "numba")
        sim = Simulation(case)
        sim.add_mode(1, 1, 1, "poloidal", 0.3)
        for _ in range(5):
            sim.advance()
        states[mode] = sim.state.copy()
    kernels.set_backend(None)
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
    kernels.set_backend(None)
    for key, ref in got["numpy"].items():
        if isinstance(ref, float) and np.isfinite(ref):
            assert got["numba"][key] == pytest.approx(ref, rel=1e-12, abs=1e-300), key
    assert got["numpy"]["J"] != 0 and got["numpy"]["Kz"] > 0


@pytest.mark.parametrize("backend", ["numba", "numpy"])
@pytest.mark.parametrize("layout", ["separate", "second_over_f", "both_over_inputs"])
def test_stress_pair_matches_plain_arithmetic(backend, layout):
    """``f^2 - g^2`` and ``f g`` in one pass, also written over its own inputs."""
    rng = np.random.default_rng(7)
    f0, g0 = rng.standard_normal((2, 6, 5, 4))
    f, g = f0.copy(), g0.copy()
    if layout == "separate":
        first, second = np.empty_like(f), np.empty_like(f)
    elif layout == "second_over_f":
        first, second = np.empty_like(f), f
    else:
        first, second = f, g
    kernels.set_backend(backend)
    try:
        kernels.stress_pair(f, g, first, second)
    finally:
        kernels.set_backend(None)
    np.testing.assert_allclose(first, f0 * f0 - g0 * g0, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(second, f0 * g0, rtol=1e-15, atol=1e-15)
