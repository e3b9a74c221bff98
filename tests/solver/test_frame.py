"""One Craya-Herring frame: its vectors against their definitions by cross products
(Craya 1958; Herring 1974, Phys. Fluids 17, 859: e1 = k x e_z/|k x e_z|,
e2 = k x e1/|k|), its convention where kh = 0 and k = 0, and every user of it
(the slab coefficients, the compiled kernels' alpha and beta, add_mode)."""
import numpy as np
import pytest

from shearmix.solver.compute import kernels
from shearmix.solver.physics.basis import frame, vectors
from shearmix.solver.run.simulation import Simulation

WAVEVECTORS = [(1.0, 2.0, 1.0), (-3.0, 0.5, -2.0), (0.0, 1.0, 0.0), (2.0, -1.0, 0.0),
               (0.0, 0.0, 2.0), (0.0, 0.0, -1.5)]


@pytest.mark.parametrize("k", WAVEVECTORS)
def test_vectors_are_the_cross_product_definitions(k):
    k = np.array(k)
    e1, e2 = vectors(*k)
    kk = np.linalg.norm(k)
    if np.hypot(k[0], k[1]) > 0:
        ref1 = np.cross(k, [0, 0, 1.0])
        ref1 /= np.linalg.norm(ref1)
    else:  # the convention: e1 = e_x where kh = 0
        ref1 = np.array([1.0, 0, 0])
    ref2 = np.cross(k, ref1) / kk
    assert np.allclose(e1, ref1, rtol=0, atol=1e-15)
    assert np.allclose(e2, ref2, rtol=0, atol=1e-15)
    assert abs(e1 @ k) < 1e-14 and abs(e2 @ k) < 1e-14 and abs(e1 @ e2) < 1e-15
    assert np.linalg.norm(e1) == pytest.approx(1, abs=1e-15)
    assert np.linalg.norm(e2) == pytest.approx(1, abs=1e-15)


def test_mean_mode_has_no_poloidal_vector():
    s, c, alpha, beta = frame(0.0, 0.0, 0.0)
    assert (s, c, alpha, beta) == (1.0, 0.0, 0.0, 0.0)
    assert np.array_equal(vectors(0.0, 0.0, 0.0)[1], np.zeros(3))


def test_slab_coefficients_and_compiled_frame_follow_the_one_convention(make_case):
    """basis.alpha/beta and kernels._frame agree on every mode, k = 0 included
    (before: beta was 1 at k = 0 in the basis and 0 in the kernels)."""
    sim = Simulation(make_case(grid={"Nx": 8, "Ny": 6, "Nz": 8}, initial={"kind": "rest"}))
    b = sim.basis
    al = np.empty(sim.grid.spectral_shape)
    be = np.empty(sim.grid.spectral_shape)
    for i, j, kz in np.ndindex(al.shape):
        al[i, j, kz], be[i, j, kz] = kernels._frame(b.kh[i, j, 0], b.kz[kz])
    assert np.allclose(b.alpha, al, rtol=1e-15, atol=0) and np.allclose(b.beta, be, rtol=1e-15,
                                                                          atol=0)
    assert b.beta[0, 0, 0] == 0.0 and b.alpha[0, 0, 0] == 0.0
    s, c, alpha, beta = frame(sim.grid.kx, sim.grid.ky, sim.grid.kz)
    assert np.array_equal(b.s, s[..., :1]) and np.array_equal(b.c, c[..., :1])
    assert np.array_equal(b.alpha, alpha) and np.array_equal(b.beta, beta)


@pytest.mark.parametrize("component,n", [("poloidal", (1, 2, 1)), ("vortical", (2, -1, 2)),
                                         ("poloidal", (0, 0, 2))])
def test_add_mode_is_the_frame_vector_times_the_cosine(make_case, component, n):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8}, box={"Lx": "2*pi"},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    sim.add_mode(*n, component, 0.5)
    k = np.array(n, dtype=float)  # a (2 pi)^3 box
    e = np.cross(k, [0, 0, 1.0]) if np.hypot(k[0], k[1]) else np.array([1.0, 0, 0])
    e /= np.linalg.norm(e)
    if component == "poloidal":
        e = np.cross(k, e) / np.linalg.norm(k)
    x, y, z = sim.grid.physical_coordinates()
    phase = np.cos(k[0] * x + k[1] * y + k[2] * z)
    for comp, field in zip(e, sim.physical()[:3]):
        assert np.abs(field - 0.5 * comp * phase).max() < 1e-14


def test_stability_basis_is_the_solver_frame():
    """The linear-stability harmonics use the same frame; a computed q_n a rounding
    error from 0 (here -0.3 + 3 x 0.1) counts as a vertical wavevector."""
    from shearmix.tools.stability.operators import craya_basis
    q = np.array([-1.0, -0.3 + 0.1 + 0.1 + 0.1, 0.0, 0.5, 2.0])
    assert q[1] != 0  # the premise: rounding left a tiny horizontal part
    for kx, kz in ((0.0, 0.8), (0.7, -1.1), (0.0, -0.6)):
        E, k2 = craya_basis(kx, q, kz)
        for i, qi in enumerate(q):
            kk = (kx, 0.0 if i == 1 and kx == 0 else qi, kz)
            e1, e2 = vectors(*kk)
            assert np.allclose(E[i, :, 0], e1, rtol=0, atol=1e-15)
            assert np.allclose(E[i, :, 1], e2, rtol=0, atol=1e-15)
    E, _ = craya_basis(0.0, np.array([0.0, 1.0]), 0.0)
    assert np.array_equal(E[0], np.zeros((3, 2)))  # the k = 0 harmonic is left out
