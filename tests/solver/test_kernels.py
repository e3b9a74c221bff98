"""The compiled kernels agree with their NumPy definitions to round-off.

Both paths run the same nonlinear case for a few steps; the NumPy path is the
plain definition of the arithmetic (solver/compute/kernels.py)."""
import numpy as np
import pytest

from shearmix.solver.compute import kernels
from shearmix.solver.run.simulation import Simulation

# numba is a hard dependency: without it these tests fail instead of skipping
def test_numba_is_installed():
    assert kernels.HAVE_NUMBA, "numba is missing: it is a dependency (pyproject.toml)"


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


def test_pair_solve_matches_numpy_linalg_solve():
    """The NumPy 2x2 solve (Cramer's rule) against numpy.linalg.solve, mode by mode."""
    rng = np.random.default_rng(11)
    m = rng.standard_normal((2, 2, 7)) + 3 * np.eye(2)[:, :, None]
    y = rng.standard_normal((2, 7)) + 1j * rng.standard_normal((2, 7))
    got = y.copy()
    kernels.solve_pair(m[0, 0], m[0, 1], m[1, 0], m[1, 1], got[0], got[1])
    for e in range(7):
        ref = np.linalg.solve(m[:, :, e], y[:, e])
        assert np.allclose(got[:, e], ref, rtol=1e-14, atol=0)


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 80.0, "BPe": 2.0}),
                                          ("boussinesq", {"Re": 80.0, "B": 2.0, "Pr": 0.5})])
@pytest.mark.parametrize("last", [False, True])
def test_compiled_stage_update_matches_its_numpy_definition(make_case, model, params, last):
    """The fused stage (scalar and 2x2 blocks) against stage_update_numpy on random,
    band-limited registers."""
    case = make_case(model=model, parameters=params, grid={"Nx": 12, "Ny": 12, "Nz": 8},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    for g, r in _compiled_and_numpy_stage(sim, seed=3, last=last):
        assert np.abs(g - r).max() <= 1e-14 * np.abs(r).max()


def _compiled_and_numpy_stage(sim, seed, last):
    """One stage update of random band-limited registers ``x, y, z`` by the compiled
    kernels and by stage_update_numpy: the pairs ``(compiled, numpy)`` of the
    registers that hold results (after the last stage ``y`` is scratch: the NumPy
    path leaves ``L y`` there)."""
    rng = np.random.default_rng(seed)
    band = sim.grid.dealias.astype(bool)
    regs = []
    for _ in range(3):
        r = rng.standard_normal(sim.state.shape) + 1j * rng.standard_normal(sim.state.shape)
        regs.append(r * band)
    args = (0.013, -0.021, 0.007, 0.04, last)
    got = [r.copy() for r in regs]
    kernels.set_backend("numba")
    kernels.stage_update(sim.operator, *got, *args)
    ref = [r.copy() for r in regs]
    kernels.stage_update_numpy(sim.operator, *ref, *args)
    return list(zip(got[:1 if last else 2], ref[:1 if last else 2]))


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 80.0, "BPe": 2.0}),
                                          ("boussinesq", {"Re": 80.0, "B": 2.0, "Pr": 0.5})])
@pytest.mark.parametrize("last", [False, True])
def test_compiled_follower_stage_matches_its_numpy_definition(make_case, model, params, last):
    """Two passive tracers (the followers of the operator, solved after the flow) in the
    compiled stage update against stage_update_numpy: the NumPy rows of
    LinearOperator.apply_followers / solve_followers."""
    case = make_case(model=model, parameters=params, grid={"Nx": 12, "Ny": 12, "Nz": 8},
                     initial={"kind": "rest"},
                     tracers={"salt": {"Sc": 7.0, "gradient": -1.5}, "dye": {"Pe": 3.0}})
    sim = Simulation(case)
    op = sim.operator
    # the tables the compiled update reads give the operator's entries bit for bit
    # (-1/Pe_c |k|^2 and G alpha, docs/equations.md#tracers)
    tables = op.follower_tables()
    assert [(f, lead) for f, lead, *_ in tables] == op.followers and len(tables) == 2
    for f, lead, cf, tf, cl, tl in tables:
        shape = sim.grid.spectral_shape
        assert np.array_equal(cf * tf.reshape(shape), np.broadcast_to(op.entry(f, f), shape))
        assert np.array_equal(cl * tl.reshape(shape), np.broadcast_to(op.entry(f, lead), shape))
    # one |k|^2 table and one alpha table serve both tracers
    assert tables[0][3] is tables[1][3] and tables[0][5] is tables[1][5]
    _assert_followers_match(sim, last)


def _assert_followers_match(sim, last):
    for g, r in _compiled_and_numpy_stage(sim, seed=4, last=last):
        assert np.abs(g - r).max() <= 1e-14 * np.abs(r).max()
        # the followers' rows on their own scale (their values differ from the flow's)
        for f, _ in sim.operator.followers:
            assert np.abs(g[f] - r[f]).max() <= 1e-14 * np.abs(r[f]).max()


@pytest.mark.parametrize("last", [False, True])
def test_followers_without_tables_take_the_numpy_rows(make_case, monkeypatch, last):
    """A follower whose entries are not single monomials has no shared tables: the
    compiled update then runs the flow compiled and the followers' NumPy rows
    (apply_followers / solve_followers), with the same result."""
    case = make_case(grid={"Nx": 12, "Ny": 12, "Nz": 8}, initial={"kind": "rest"},
                     tracers={"salt": {"Sc": 7.0, "gradient": -1.5}})
    sim = Simulation(case)
    calls = []
    apply_rows = sim.operator.apply_followers
    monkeypatch.setattr(sim.operator, "follower_tables", lambda: None)
    monkeypatch.setattr(sim.operator, "apply_followers",
                        lambda y: (calls.append("apply"), apply_rows(y))[1])
    _assert_followers_match(sim, last)
    # the fallback rows ran: once in the compiled update, once in the NumPy reference's
    # operator.apply (with the tables, only the latter)
    assert calls.count("apply") == 2


def test_compiled_frame_twins_match_the_basis_definitions(make_case):
    """kernels._cartesian / _projection (what the compiled loops call per mode)
    against CrayaHerring.to_cartesian / project on every mode of a slab."""
    sim = Simulation(make_case(grid={"Nx": 8, "Ny": 6, "Nz": 8}, initial={"kind": "rest"}))
    b = sim.basis
    shape = sim.grid.spectral_shape
    rng = np.random.default_rng(5)
    a, p, n0, n1, n2 = (rng.standard_normal(shape) for _ in range(5))
    ref = [b.to_cartesian(a, p, i, np.empty(shape)) for i in range(3)]
    ref_a, ref_p = np.empty(shape), np.empty(shape)
    b.project(n0, n1, n2, ref_a, ref_p)
    for i, j, k in np.ndindex(shape):
        al, be = kernels._frame_nb(b.kh[i, j, 0], b.kz[k])
        s, c = b.s[i, j, 0], b.c[i, j, 0]
        got = kernels._cartesian_nb(s, c, al, be, a[i, j, k], p[i, j, k])
        assert got == pytest.approx([r[i, j, k] for r in ref], rel=1e-15, abs=1e-15)
        got = kernels._projection_nb(s, c, al, be, n0[i, j, k], n1[i, j, k], n2[i, j, k])
        assert got == pytest.approx((ref_a[i, j, k], ref_p[i, j, k]), rel=1e-15, abs=1e-15)
