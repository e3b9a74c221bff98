"""Leading eigenvalue of the normal-mode problem, with automatic truncation.

The leading eigenvalue is the one of largest real part (growth rate
``Re sigma``; the mode goes as ``exp(sigma t)``).  Small matrices (up to
``DENSE_MAX_POINT`` unknowns for one point, ``DENSE_MAX`` in maps) go to the
dense QR algorithm (LAPACK ``geev`` through ``scipy.linalg``); large ones to
shifted inverse iteration refined by Rayleigh-quotient iteration around
guesses taken from a smaller truncation, with a banded LU of the
block-tridiagonal matrix (ARPACK shift-invert, ``scipy.sparse.linalg.eigs``,
when that does not converge; the dense solver if both fail).

Truncation: the number of harmonics ``M`` grows by a factor 1.5 until the
leading eigenvalue changes by less than ``rtol * scale``, with ``scale`` the
laminar shear rate ``U_L kf / 2`` plus the viscous rate of the mode (so that
the criterion is meaningful when ``sigma`` is near zero).  The history of
``(M, sigma)`` is kept as the convergence report.
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np
import scipy.linalg as sla
import scipy.sparse.linalg as spla

from .operators import Operator, build
from .params import FlowParams

DENSE_MAX = 160      # size up to which maps use the dense solver (sparse is faster above)
DENSE_MAX_POINT = 400  # size up to which a single-point solve stays dense (more robust)
GUESSES = 6          # leading eigenvalues of the previous truncation used as shifts
M_START = 8
M_MAX = 512
RTOL = 1e-7


@dataclasses.dataclass
class Eigen:
    """Result of one eigenvalue computation.

    ``sigma``: leading eigenvalue (growth rate ``sigma.real``, the mode varies
    as ``exp(i kx x + i kz z + sigma t)``); its conjugate is an eigenvalue too.
    ``history``: list of ``(M, sigma)`` at the truncations tried;
    ``change``: ``|sigma(M) - sigma(M_prev)|`` at the last step (for a fixed
    truncation, ``M_prev = M`` and the step goes up to ``ceil(1.5 M)``); ``vector``: eigenvector when asked for.
    """

    params: FlowParams
    kx: float
    kz: float
    ky0: float
    sigma: complex
    M: int
    method: str
    converged: bool
    change: float
    history: list
    vector: np.ndarray | None = None
    operator: Operator | None = None

    @property
    def growth(self) -> float:
        return float(self.sigma.real)

    @property
    def frequency(self) -> float:
        """``|Im sigma|``: the eigenvalues come in conjugate pairs, so only the magnitude is defined."""
        return float(abs(self.sigma.imag))


def spectrum(op: Operator) -> np.ndarray:
    """All eigenvalues (dense), sorted by decreasing real part."""
    ev = sla.eigvals(op.dense(), check_finite=False, overwrite_a=True)
    return ev[np.argsort(-ev.real, kind="stable")]


def _candidates(ev, count=4):
    """Up to ``count`` eigenvalues of largest real part, one per conjugate pair (Im >= 0)."""
    ev = np.asarray(ev)
    ev = ev[ev.imag >= -1e-12 * (1 + np.abs(ev))]
    ev = ev[np.argsort(-ev.real, kind="stable")]
    return [complex(z.real, abs(z.imag)) for z in ev[:count]]


def _dense(op: Operator, vectors: bool):
    A = op.dense()
    if vectors:
        ev, V = sla.eig(A, check_finite=False, overwrite_a=True)
    else:
        ev, V = sla.eigvals(A, check_finite=False, overwrite_a=True), None
    return ev, V


def _shift_invert(A, shift: complex, vectors: bool, nev: int = 1):
    # a shift just right of the guess keeps the wanted eigenvalue the nearest one;
    # one eigenvalue per guess: asking for more makes ARPACK slow to converge on
    # the clustered, strongly damped part of the spectrum
    shift = complex(shift.real + 1e-3 * (1 + abs(shift)), shift.imag)
    ncv = min(A.shape[0] - 1, max(2 * nev + 6, 8))
    try:
        res = spla.eigs(A, k=nev, sigma=shift, which="LM", ncv=ncv, maxiter=400,
                        return_eigenvectors=vectors)
    except spla.ArpackNoConvergence as exc:
        if exc.eigenvalues is None or len(exc.eigenvalues) == 0:
            return None
        res = (exc.eigenvalues, exc.eigenvectors) if vectors else exc.eigenvalues
    except (RuntimeError, ValueError):
        return None
    return res if vectors else (res, None)


def _banded(op: Operator):
    """LAPACK band storage of the matrix (bandwidth ``2 nv - 1`` each side), and the CSR form."""
    A = op.sparse().tocoo()
    w = 2 * op.nv - 1
    ab = np.zeros((2 * w + 1, A.shape[0]), dtype=complex)
    ab[w + A.row - A.col, A.col] = A.data
    return ab, w, A.tocsr()


def _rayleigh_inverse(band, guess: complex, maxit: int = 40, rtol: float = 1e-12):
    """Eigenpair near ``guess`` by inverse iteration, then Rayleigh-quotient iteration
    (Ostrowski 1958; Parlett 1974, Math. Comp. 28), each step one banded LU solve
    (``scipy.linalg.solve_banded``).  ``None`` if the residual does not fall below
    ``rtol * ||A||_1`` within ``maxit`` steps."""
    ab, w, A = band
    n = ab.shape[1]
    scale = float(np.max(np.sum(np.abs(ab), axis=0))) or 1.0
    x = np.ones(n, dtype=complex) / math.sqrt(n)
    shift = complex(guess.real + 1e-6 * (1 + abs(guess)), guess.imag)
    mu = shift
    for it in range(maxit):
        m = ab.copy()
        m[w] -= shift
        try:
            y = sla.solve_banded((w, w), m, x, check_finite=False, overwrite_ab=True)
        except (sla.LinAlgError, ValueError):
            shift += 1e-9 * (1 + abs(shift))
            continue
        ny = np.linalg.norm(y)
        if not np.isfinite(ny) or ny == 0:
            return None
        x = y / ny
        Ax = A @ x
        mu = complex(np.vdot(x, Ax))
        if np.linalg.norm(Ax - mu * x) <= rtol * scale:
            return mu, x
        # a few steps at the fixed shift first, so the iteration settles on the
        # eigenvalue nearest the guess before the quotient takes over
        if it >= 2:
            shift = mu
    return None


def _best(ev, V):
    i = int(np.argmax(np.asarray(ev).real))
    s = complex(ev[i])
    v = None
    if V is not None:
        v = V[:, i]
        if s.imag < 0:
            v = v.conj()
    return complex(s.real, abs(s.imag)), v


def leading(op: Operator, guesses=None, vectors: bool = False, method: str = "auto",
            dense_max: int = DENSE_MAX):
    """Leading eigenvalue (and eigenvector) of ``op``.

    ``method``: ``"dense"``, ``"sparse"`` (needs ``guesses``) or ``"auto"``
    (dense up to ``DENSE_MAX`` unknowns or without guesses).  The sparse
    solver runs shift-invert around every guess and keeps the eigenvalue of
    largest real part among all it found, so that a mode that overtakes the
    guessed one as the truncation grows is not missed.  Returns
    ``(sigma, vector_or_None, method_used, candidates)``; ``candidates`` are
    the leading eigenvalues found, to be used as guesses at a larger
    truncation.
    """
    if method not in ("auto", "dense", "sparse"):
        raise ValueError(f"method: must be auto, dense or sparse, got {method!r}")
    if isinstance(guesses, (complex, float, int)):
        guesses = [complex(guesses)]
    use_sparse = method == "sparse" or (method == "auto" and op.size > dense_max and guesses)
    if use_sparse:
        if not guesses:
            raise ValueError("guesses: the sparse shift-invert solver needs guess eigenvalues")
        band = _banded(op)
        A = None
        evs, vecs = [], []
        for g in guesses:
            out = _rayleigh_inverse(band, complex(g))
            if out is not None:
                evs.append(np.array([out[0]]))
                if vectors:
                    vecs.append(out[1][:, None])
                continue
            if A is None:
                A = op.sparse().astype(complex)
            out = _shift_invert(A, complex(g), vectors)
            if out is None:
                continue
            evs.append(np.asarray(out[0]))
            if vectors:
                vecs.append(out[1])
        if evs:
            ev = np.concatenate(evs)
            V = np.concatenate(vecs, axis=1) if vectors else None
            s, v = _best(ev, V)
            return s, v, "sparse", _candidates(ev, max(len(guesses), 1))
    ev, V = _dense(op, vectors)
    s, v = _best(ev, V)
    return s, v, "dense", _candidates(ev, GUESSES)


def rate_scale(params: FlowParams, kx: float, kz: float) -> float:
    """Rate used to make truncation tolerances dimensionless: ``U_L kf/2 + |k_perp|^2/Re`` (or 1)."""
    s = 0.5 * params.U_L * params.kf + params.nu * (kx * kx + kz * kz)
    if params.model == "boussinesq" and params.B:
        s += math.sqrt(params.B)
    return s if s > 0 else 1.0


def solve(params: FlowParams, kx: float, kz: float, ky0: float = 0.0, M: int | None = None,
          rtol: float = RTOL, vectors: bool = False, method: str = "auto",
          M_start: int = M_START, M_max: int = M_MAX) -> Eigen:
    """Leading eigenvalue at ``(kx, kz, ky0)``.

    With ``M`` given, the answer is that truncation's, checked once against
    ``ceil(1.5 M)``: ``converged`` says whether the two differ by less than
    ``rtol * rate_scale``.  Otherwise ``M`` starts at ``M_start`` and grows by
    1.5 until two successive leading eigenvalues differ by that much;
    ``converged`` is False if ``M_max`` is reached first.
    """
    tol = rtol * rate_scale(params, kx, kz)
    if M is not None:
        fixed = method if method != "auto" else "dense"
        op = build(params, kx, kz, ky0, M)
        s, v, how, cands = leading(op, vectors=vectors, method=fixed)
        m2 = int(math.ceil(1.5 * M))
        s2 = leading(build(params, kx, kz, ky0, m2), guesses=cands, method=method,
                     dense_max=DENSE_MAX_POINT)[0]
        return Eigen(params, kx, kz, ky0, s, M, how, abs(s2 - s) <= tol, abs(s2 - s),
                     [(M, s), (m2, s2)], v, op if vectors else None)
    history = []
    m = max(2, int(M_start))
    prev = None
    cands = None
    while True:
        op = build(params, kx, kz, ky0, m)
        s, v, how, cands = leading(op, guesses=cands, vectors=vectors, method=method,
                                   dense_max=DENSE_MAX_POINT)
        history.append((m, s))
        if prev is not None and abs(s - prev) <= tol:
            return Eigen(params, kx, kz, ky0, s, m, how, True, abs(s - prev), history, v,
                         op if vectors else None)
        if m >= M_max:
            ch = abs(s - prev) if prev is not None else math.nan
            return Eigen(params, kx, kz, ky0, s, m, how, False, ch, history, v,
                         op if vectors else None)
        prev = s
        m = min(M_max, int(math.ceil(1.5 * m)))
