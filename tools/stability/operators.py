r"""Fourier-Galerkin matrices of the flow linearised about ``U_L sin(kf y) e_x``.

Normal modes (docs/equations.md#models equations, linearised about ``T = 0``)::

    u'(x, t) = exp(i kx x + i kz z + sigma t) sum_n u_n exp(i q_n y),
    q_n = ky0 + n kf,   n = -M .. M,

with Bloch (Floquet) detuning ``ky0``.  With ``k_n = (kx, q_n, kz)`` the
linearised momentum equation is, per harmonic,

    sigma u_n = -P(k_n) N_n + b_n - |k_n|^2/Re u_n,
    N_n = (U_L kx / 2)(u_{n-1} - u_{n+1}) + (U_L kf / 2)(v_{n-1} + v_{n+1}) e_x,

where ``P(k) = I - k k^T/|k|^2`` removes the pressure and ``b_n`` is the
buoyancy: ``B T_n P e_z`` (full model, with
``sigma T_n = -(U_L kx/2)(T_{n-1} - T_{n+1}) - w_n - |k_n|^2/Pe T_n``) or
``-(BPe/|k_n|^2) w_n P e_z`` (low-Péclet model, ``T = Pe lap^{-1} w``).

The velocity of each harmonic is written in the Craya-Herring basis
(Craya 1958; Herring 1974): ``u_n = a1 e1 + a2 e2`` with
``e1 = k x e_z / |k x e_z|`` (vortical, horizontal) and ``e2 = k x e1 / |k|``
(poloidal, carries ``w``).  Both are orthogonal to ``k``, so every mode is
divergence free and projecting on ``(e1, e2)`` eliminates the pressure exactly.
When ``k_n`` is vertical (``kx = q_n = 0``) the basis is ``(e_x, sign(kz) e_y)``
(the solver's convention, :mod:`shearmix.solver.physics.basis`); the
harmonic ``k_n = 0`` (``kx = kz = 0``, ``q_n = 0``) holds only uniform
perturbations (a uniform flow, a uniform temperature shift balanced
hydrostatically), neutral and uncoupled, and is left out.

Unknowns per harmonic: ``(a1, a2)`` (lowpe) or ``(a1, a2, T)`` (boussinesq).
All coefficients are real, so the matrix is real (eigenvalues come in complex
conjugate pairs) and block tridiagonal: the laminar flow couples ``n`` only
to ``n +- 1``.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from shearmix.solver.physics.basis import vectors as frame_vectors

from .params import FlowParams


def craya_basis(kx: float, q: np.ndarray, kz: float):
    """Craya-Herring basis for the wavevectors ``(kx, q_i, kz)``: the solver's frame
    (:func:`shearmix.solver.physics.basis.vectors`, with its convention where
    ``kh = 0``), a horizontal part within rounding of zero counted as zero.

    Returns ``E`` of shape ``(len(q), 3, 2)`` (columns ``e1``, ``e2``) and the
    squared norms ``|k|^2``.  Rows with ``k = 0`` are all zero.
    """
    q = np.asarray(q, dtype=float)
    nq = q.size
    kxv = np.full(nq, float(kx))
    kzv = np.full(nq, float(kz))
    kh2 = kxv ** 2 + q ** 2
    k2 = kh2 + kzv ** 2
    kk = np.sqrt(k2)
    scale = max(1.0, float(np.max(kk))) if nq else 1.0
    # q = ky0 + n kf is computed: a rounding error from 0 is a vertical wavevector
    flat = np.sqrt(kh2) <= 1e-13 * scale
    e1, e2 = frame_vectors(np.where(flat, 0.0, kxv), np.where(flat, 0.0, q), kzv)
    E = np.stack([e1, e2], axis=-1) if nq else np.zeros((0, 3, 2))
    E[kk <= 1e-13 * scale] = 0.0
    return E, k2


@dataclasses.dataclass
class Operator:
    """Block-tridiagonal matrix of one normal-mode problem.

    ``diag[n]``, ``lower[n]`` (row ``n+1``, column ``n``) and ``upper[n]``
    (row ``n``, column ``n+1``) are ``nv x nv`` blocks; ``keep`` masks the
    unknowns that enter the matrix (the ``k = 0`` harmonic is dropped).
    """

    params: FlowParams
    kx: float
    kz: float
    ky0: float
    M: int
    q: np.ndarray
    basis: np.ndarray
    k2: np.ndarray
    diag: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    keep: np.ndarray

    @property
    def nv(self) -> int:
        return self.diag.shape[1]

    @property
    def size(self) -> int:
        return int(self.keep.sum())

    def dense(self) -> np.ndarray:
        """The matrix as a dense array (unknowns in ``keep`` only)."""
        N, nv = self.diag.shape[:2]
        A = np.zeros((N * nv, N * nv))
        for n in range(N):
            s = slice(n * nv, (n + 1) * nv)
            A[s, s] = self.diag[n]
            if n + 1 < N:
                t = slice((n + 1) * nv, (n + 2) * nv)
                A[t, s] = self.lower[n]
                A[s, t] = self.upper[n]
        if not self.keep.all():
            A = A[np.ix_(self.keep, self.keep)]
        return A

    def sparse(self) -> sp.csc_matrix:
        """The matrix in compressed sparse column form."""
        N, nv = self.diag.shape[:2]
        bi = np.arange(nv)
        r0, c0 = np.meshgrid(bi, bi, indexing="ij")
        rows, cols, vals = [], [], []
        n = np.arange(N)[:, None, None]
        rows.append((n * nv + r0).ravel()); cols.append((n * nv + c0).ravel())
        vals.append(self.diag.ravel())
        m = np.arange(N - 1)[:, None, None]
        rows.append(((m + 1) * nv + r0).ravel()); cols.append((m * nv + c0).ravel())
        vals.append(self.lower.ravel())
        rows.append((m * nv + r0).ravel()); cols.append(((m + 1) * nv + c0).ravel())
        vals.append(self.upper.ravel())
        A = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                          shape=(N * nv, N * nv)).tocsc()
        if not self.keep.all():
            idx = np.nonzero(self.keep)[0]
            A = A[idx][:, idx]
        A.eliminate_zeros()
        return A.tocsc()

    def expand(self, vec: np.ndarray) -> np.ndarray:
        """Eigenvector (unknowns in ``keep``) -> array ``(2M+1, nv)`` with zeros filled in."""
        full = np.zeros(self.keep.size, dtype=np.result_type(vec, float))
        full[self.keep] = vec
        return full.reshape(-1, self.nv)

    def velocity(self, vec: np.ndarray) -> np.ndarray:
        """Fourier coefficients ``(2M+1, 3)`` of the velocity ``(u, v, w)`` of an eigenvector."""
        c = self.expand(vec)
        return np.einsum("nij,nj->ni", self.basis, c[:, :2])

    def temperature(self, vec: np.ndarray):
        """Fourier coefficients ``(2M+1,)`` of ``T`` (full model) or ``None`` (lowpe)."""
        if self.nv < 3:
            return None
        return self.expand(vec)[:, 2]


def build(params: FlowParams, kx: float, kz: float, ky0: float = 0.0, M: int = 16) -> Operator:
    """Assemble the linear operator for wavenumbers ``(kx, kz)``, detuning ``ky0``, harmonics ``|n| <= M``.

    See the module docstring for the equations.  ``kx``, ``kz`` may be zero
    (2D modes ``kz = 0``; streamwise-invariant modes ``kx = 0``).
    """
    if M < 1:
        raise ValueError(f"M: number of harmonics must be >= 1, got {M!r}")
    p = params
    n = np.arange(-M, M + 1)
    q = ky0 + n * p.kf
    E, k2 = craya_basis(kx, q, kz)
    N = n.size
    nv = 3 if p.model == "boussinesq" else 2
    zc = E[:, 2, :]                                   # e_z . (e1, e2)
    diag = np.zeros((N, nv, nv))
    diag[:, 0, 0] = -p.nu * k2
    diag[:, 1, 1] = -p.nu * k2
    if p.model == "lowpe":
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = np.where(k2 > 0, 1.0 / np.where(k2 > 0, k2, 1.0), 0.0)
        diag[:, :2, :2] -= p.BPe * inv[:, None, None] * zc[:, :, None] * zc[:, None, :]
    else:
        diag[:, 2, 2] = -p.kappa * k2
        diag[:, :2, 2] = p.B * zc
        diag[:, 2, :2] = -zc
    a = 0.5 * p.U_L * kx
    b = 0.5 * p.U_L * p.kf
    # coupling through the laminar flow: advection U d/dx and lift-up v U' e_x
    Mlow = a * np.eye(3); Mlow[0, 1] += b          # acts on u_{n-1}
    Mup = -a * np.eye(3); Mup[0, 1] += b           # acts on u_{n+1}
    lower = np.zeros((N - 1, nv, nv))
    upper = np.zeros((N - 1, nv, nv))
    lower[:, :2, :2] = -np.einsum("nia,ij,njb->nab", E[1:], Mlow, E[:-1])
    upper[:, :2, :2] = -np.einsum("nia,ij,njb->nab", E[:-1], Mup, E[1:])
    if nv == 3:
        lower[:, 2, 2] = -a
        upper[:, 2, 2] = a
    keep = np.ones((N, nv), dtype=bool)
    keep[k2 == 0, :] = False
    return Operator(p, float(kx), float(kz), float(ky0), int(M), q, E, k2, diag, lower, upper,
                    keep.ravel())
