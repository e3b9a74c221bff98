"""Numerical checks: truncation independence, sparse vs dense reference, divergence."""
import numpy as np
import pytest
import scipy.linalg

from shearmix.tools.stability import FlowParams, build, eigen, solve


@pytest.mark.parametrize("p", [FlowParams("boussinesq", Re=300.0, B=1.0, Pe=30.0),
                               FlowParams("lowpe", Re=300.0, BPe=2.0)])
def test_truncation_independence(p):
    """Spectral convergence of Fourier-Galerkin truncations (common practice): once the
    automatic truncation has converged, larger truncations give the same leading eigenvalue."""
    e = solve(p, 0.45, 0.7, 0.1)
    assert e.converged
    for M in (e.M + 6, 2 * e.M):
        s = solve(p, 0.45, 0.7, 0.1, M=M).sigma
        assert abs(s - e.sigma) < 1e-8 * eigen.rate_scale(p, 0.45, 0.7)
    # an under-resolved truncation is detectably different, so the check can fail
    assert abs(solve(p, 0.45, 0.7, 0.1, M=2).sigma - e.sigma) > 1e-6


def test_sparse_shift_invert_matches_scipy_dense():
    """ARPACK shift-invert (scipy.sparse.linalg.eigs) against LAPACK's dense eigvals
    on the same matrix (reference library)."""
    p = FlowParams("boussinesq", Re=5000.0, B=1.0, Pe=5000.0)
    op = build(p, 0.9, 2.0, 0.0, 62)
    ref = scipy.linalg.eigvals(op.dense())
    lead = ref[np.argmax(ref.real)]
    coarse = build(p, 0.9, 2.0, 0.0, 18)
    _, _, _, cands = eigen.leading(coarse, method="dense")
    s, _, how, _ = eigen.leading(op, guesses=cands, method="sparse")
    assert how == "sparse"
    assert abs(s - complex(lead.real, abs(lead.imag))) < 1e-9


def test_auto_truncation_finds_overtaking_mode():
    """A mode that overtakes the coarse-truncation leader as M grows must be found
    (reference: scipy.linalg.eigvals at the final truncation)."""
    p = FlowParams("boussinesq", Re=20000.0, B=1.0, Pe=20000.0)
    e = solve(p, 0.9, 2.0)
    ref = scipy.linalg.eigvals(build(p, 0.9, 2.0, 0.0, e.M).dense())
    assert e.growth == pytest.approx(ref.real.max(), abs=1e-9)


def test_matrix_is_block_tridiagonal_and_real():
    """Structure of the Galerkin matrix: only n -> n, n +- 1 couplings (the laminar
    flow has harmonics +-kf only)."""
    p = FlowParams("boussinesq", Re=10.0, B=1.0, Pe=5.0)
    A = build(p, 0.3, 0.4, 0.0, 6).dense()
    assert A.dtype == float
    nv = 3
    for i in range(A.shape[0]):
        for j in range(A.shape[1]):
            if abs(i // nv - j // nv) > 1:
                assert A[i, j] == 0


def test_eigenvector_satisfies_eigenproblem_and_is_divergence_free():
    """Residual ||A v - sigma v|| and k . u_n = 0 for every harmonic (incompressibility)."""
    p = FlowParams("lowpe", Re=80.0, BPe=1.0)
    e = solve(p, 0.5, 0.6, 0.0, vectors=True)
    op = e.operator
    A = op.dense()
    v = e.vector
    assert np.linalg.norm(A @ v - e.sigma * v) < 1e-9 * np.linalg.norm(v)
    u = op.velocity(v)
    k = np.stack([np.full(op.q.size, op.kx), op.q, np.full(op.q.size, op.kz)], axis=1)
    assert np.max(np.abs(np.sum(k * u, axis=1))) < 1e-12 * np.max(np.abs(u))


@pytest.mark.parametrize("kx,kz", [(0.0, 0.8), (0.6, 0.0), (0.0, 0.0)])
def test_special_wavenumbers_give_finite_spectra(kx, kz):
    """kx = 0, kz = 0 and both: the k = 0 harmonic is dropped, no NaN appears, and
    the modes decay when kx = 0 (no inflectional instability without x-variation:
    the streamwise-invariant problem has only decaying modes; common practice)."""
    p = FlowParams("boussinesq", Re=50.0, B=1.0, Pe=10.0)
    e = solve(p, kx, kz, 0.0)
    assert np.isfinite(e.sigma)
    if kx == 0:
        assert e.growth < 0


def test_map_sparse_path_matches_scipy_dense():
    """A growth map on the sparse path (large truncation) against LAPACK dense eigvals
    (scipy.linalg, reference library) at the same truncation, point by point."""
    from shearmix.tools.stability import growth_map
    p = FlowParams("boussinesq", Re=1000.0, B=1.0, Pe=100.0)
    kx = np.array([0.3, 0.6, 0.95])
    kz = np.array([0.0, 0.9, 1.8])
    gm = growth_map(p, kx, kz, M=41)
    assert build(p, 0.3, 0.0, 0.0, 41).size > eigen.DENSE_MAX     # sparse path taken
    for i, a in enumerate(kx):
        for j, c in enumerate(kz):
            ref = scipy.linalg.eigvals(build(p, a, c, 0.0, 41).dense())
            assert gm.growth[i, j] == pytest.approx(ref.real.max(), abs=1e-9)
