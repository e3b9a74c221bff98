"""Growth-rate maps over (kx, kz), the most unstable mode, neutral curves.

* :func:`growth_map` - leading growth rate on a grid of ``(kx, kz)`` at one
  truncation, chosen by the automatic truncation of :mod:`.eigen` at the
  corners and the centre of the grid (the largest of those ``M``), then
  re-checked at 1.5 times that ``M`` at the fastest grid point.
* :func:`most_unstable` - refines the fastest grid point with a bounded
  Nelder-Mead search (``scipy.optimize.minimize``; Nelder & Mead 1965) over
  ``(kx, kz)`` (or ``kx`` alone for 2D modes, ``scipy.optimize.minimize_scalar``,
  Brent's method), optionally over the detuning ``ky0`` as well.
* :func:`neutral_curve` - for each wavenumber on one axis, the value of one
  parameter (``Re``, ``BPe``, ``B``...) at which the leading growth rate
  crosses zero (Brent's root finder, ``scipy.optimize.brentq``, on the
  logarithm of the parameter), the other wavenumber fixed or maximised over.
"""
from __future__ import annotations

import dataclasses
import math
import time

import numpy as np
import scipy.optimize as opt

from . import eigen
from .operators import build
from .params import FlowParams

MAP_GUESSES = 4   # shifts per grid point for the sparse solver


@dataclasses.dataclass
class GrowthMap:
    """Leading eigenvalue on a ``(kx, kz)`` grid: ``sigma[i, j]`` at ``kx[i]``, ``kz[j]``."""

    params: FlowParams
    kx: np.ndarray
    kz: np.ndarray
    ky0: float
    sigma: np.ndarray
    M: int
    check: dict
    seconds: float

    @property
    def growth(self):
        return self.sigma.real

    @property
    def frequency(self):
        return np.abs(self.sigma.imag)

    def argmax(self):
        i, j = np.unravel_index(int(np.argmax(self.growth)), self.growth.shape)
        return int(i), int(j)


def _grid_values(name, values):
    v = np.atleast_1d(np.asarray(values, dtype=float))
    if v.ndim != 1 or v.size == 0 or not np.all(np.isfinite(v)) or np.any(v < 0):
        raise ValueError(f"{name}: must be a non-empty list of finite numbers >= 0")
    return v


def choose_truncation(params: FlowParams, points, ky0=0.0, rtol=eigen.RTOL):
    """Largest converged ``M`` over sample points ``[(kx, kz), ...]`` and the per-point report."""
    report = []
    M = eigen.M_START
    for kx, kz in points:
        e = eigen.solve(params, kx, kz, ky0, rtol=rtol)
        report.append(e)
        M = max(M, e.M)
    return M, report


def _coarse_M(params, M):
    nv = 3 if params.model == "boussinesq" else 2
    return max(4, min(M - 1, (eigen.DENSE_MAX // 2) // (2 * nv)))


def leading_at(params, kx, kz, ky0, M, vectors=False):
    """Leading eigenvalue at a fixed truncation, dense or (large ``M``) sparse.

    For the sparse solver the guesses are the leading eigenvalues of a dense
    solve at a small truncation at the same point, so no state is carried
    from one grid point to the next (no missed branch switching).
    """
    op = build(params, kx, kz, ky0, M)
    if op.size <= eigen.DENSE_MAX:
        s, v, _, _ = eigen.leading(op, vectors=vectors, method="dense")
        return s, v, op
    coarse = build(params, kx, kz, ky0, _coarse_M(params, M))
    _, _, _, cands = eigen.leading(coarse, method="dense")
    s, v, _, _ = eigen.leading(op, guesses=cands[:MAP_GUESSES], vectors=vectors, method="auto")
    return s, v, op


def growth_map(params: FlowParams, kx, kz, ky0: float = 0.0, M: int | None = None,
               rtol: float = eigen.RTOL, progress=None) -> GrowthMap:
    """Leading eigenvalue over the grid ``kx x kz`` at detuning ``ky0``.

    ``M`` fixed, or chosen automatically (see module docstring).  ``check``
    reports the truncation: the sample points' ``(kx, kz, M, change)`` and, at
    the fastest grid point, the change of ``sigma`` when ``M`` grows by 1.5.
    """
    kx = _grid_values("kx", kx)
    kz = _grid_values("kz", kz)
    t0 = time.perf_counter()
    check = {}
    if M is None:
        pts = {(kx[0], kz[0]), (kx[-1], kz[0]), (kx[0], kz[-1]), (kx[-1], kz[-1]),
               (kx[kx.size // 2], kz[kz.size // 2])}
        pts = [p for p in sorted(pts) if not (p[0] == 0 and p[1] == 0 and ky0 == 0)]
        M, report = choose_truncation(params, pts or [(kx[-1], kz[-1])], ky0, rtol)
        check["samples"] = [(e.kx, e.kz, e.M, e.change, e.converged) for e in report]
    sigma = np.empty((kx.size, kz.size), dtype=complex)
    for i, a in enumerate(kx):
        for j, c in enumerate(kz):
            sigma[i, j] = leading_at(params, a, c, ky0, M)[0]
        if progress:
            progress(i + 1, kx.size)
    i, j = np.unravel_index(int(np.argmax(sigma.real)), sigma.shape)
    M2 = int(math.ceil(1.5 * M))
    s2 = leading_at(params, kx[i], kz[j], ky0, M2)[0]
    check["fastest"] = dict(kx=float(kx[i]), kz=float(kz[j]), M=M, sigma=complex(sigma[i, j]),
                            M_check=M2, sigma_check=s2, change=abs(s2 - sigma[i, j]))
    return GrowthMap(params, kx, kz, float(ky0), sigma, int(M), check, time.perf_counter() - t0)


class Eigenvalue:
    """Growth rate and frequency of a mode's eigenvalue ``sigma`` (a ``sigma`` field)."""

    @property
    def growth(self):
        return float(self.sigma.real)

    @property
    def frequency(self):
        return float(abs(self.sigma.imag))


@dataclasses.dataclass
class Optimum(Eigenvalue):
    """Most unstable mode found by :func:`most_unstable`."""

    params: FlowParams
    kx: float
    kz: float
    ky0: float
    sigma: complex
    M: int
    change: float
    evaluations: int



def most_unstable(params: FlowParams, kx_bounds, kz_bounds=(0.0, 0.0), start=None,
                  ky0: float = 0.0, ky0_free: bool = False, M: int | None = None,
                  rtol: float = eigen.RTOL, xtol: float = 1e-6) -> Optimum:
    """Maximise the growth rate over ``kx`` in ``kx_bounds`` and ``kz`` in ``kz_bounds``.

    A degenerate interval (``lo == hi``) fixes that wavenumber.  ``start`` is
    the first point (default: the middle of the bounds); ``ky0_free`` also
    varies ``ky0`` in ``[0, kf/2]`` (by the symmetry ``y -> -y`` of the
    problem, ``ky0`` and ``-ky0`` give the same spectrum).  The result is
    re-solved with automatic truncation at the optimum and ``change`` is the
    difference to the value found at the search truncation.
    """
    lo = np.array([kx_bounds[0], kz_bounds[0]] + ([0.0] if ky0_free else []), dtype=float)
    hi = np.array([kx_bounds[1], kz_bounds[1]] + ([params.kf / 2] if ky0_free else []),
                  dtype=float)
    if np.any(lo > hi) or np.any(lo < 0):
        raise ValueError("bounds: each wavenumber interval must satisfy 0 <= low <= high")
    x0 = np.array(start if start is not None else 0.5 * (lo + hi)[:2], dtype=float)
    if ky0_free:
        x0 = np.append(x0[:2], ky0)
    x0 = np.clip(x0, lo, hi)
    if M is None:
        M = eigen.solve(params, x0[0], x0[1], x0[2] if ky0_free else ky0, rtol=rtol).M
    free = hi > lo
    count = [0]

    def point(y):
        x = x0.copy()
        x[free] = y
        return x

    def neg(y):
        x = point(np.atleast_1d(y))
        count[0] += 1
        return -leading_at(params, x[0], x[1], x[2] if ky0_free else ky0, M)[0].real

    if free.sum() == 1:
        k = int(np.nonzero(free)[0][0])
        span = hi[k] - lo[k]
        # bracket around the start keeps Brent in the start's basin
        res = opt.minimize_scalar(neg, bounds=(lo[k], hi[k]), method="bounded",
                                  options={"xatol": xtol * max(span, 1e-12)})
        xbest = point(np.array([res.x]))
        if -res.fun < -neg(x0[free]):
            xbest = x0
    elif free.sum() > 1:
        step = 0.1 * (hi - lo)[free]
        simplex = [x0[free]] + [x0[free] + np.eye(free.sum())[i] * step[i] *
                                (1 if x0[free][i] + step[i] <= hi[free][i] else -1)
                                for i in range(free.sum())]
        res = opt.minimize(neg, x0[free], method="Nelder-Mead", bounds=list(zip(lo[free], hi[free])),
                           options={"xatol": xtol, "fatol": 1e-12, "initial_simplex": simplex,
                                    "maxiter": 400})
        xbest = point(res.x)
    else:
        xbest = x0
    k0 = xbest[2] if ky0_free else ky0
    e = eigen.solve(params, xbest[0], xbest[1], k0, rtol=rtol, M_start=M)
    ref = leading_at(params, xbest[0], xbest[1], k0, M)[0]
    return Optimum(params, float(xbest[0]), float(xbest[1]), float(k0), e.sigma, e.M,
                   abs(e.sigma - ref), count[0])


@dataclasses.dataclass
class NeutralCurve:
    """``value[i]``: neutral value of ``name`` at wavenumber ``k[i]`` on ``axis`` (nan if none in range)."""

    params: FlowParams
    name: str
    axis: str
    k: np.ndarray
    value: np.ndarray
    other: np.ndarray
    other_mode: str


def _growth(params, kx, kz, ky0, other_mode, other_bounds, rtol):
    if other_mode == "max":
        o = most_unstable(params, kx_bounds=other_bounds if kx is None else (kx, kx),
                          kz_bounds=other_bounds if kz is None else (kz, kz), ky0=ky0, rtol=rtol)
        return o.growth, (o.kx if kx is None else o.kz)
    e = eigen.solve(params, kx, kz, ky0, rtol=rtol)
    return e.growth, math.nan


def neutral_value(params: FlowParams, name: str, kx, kz, ky0=0.0, start=None,
                  limits=(1e-4, 1e8), other_bounds=None, rtol=eigen.RTOL, xtol=1e-10):
    """Value of parameter ``name`` where the leading growth rate at ``(kx, kz)`` is zero.

    Pass ``kx=None`` or ``kz=None`` to maximise over that wavenumber within
    ``other_bounds``.  The root is bracketed by multiplying the start value by
    2 (or 1/2) and found with ``scipy.optimize.brentq`` in ``log(value)``.
    Returns ``(value, other)`` with ``value = nan`` when the growth rate does
    not change sign within ``limits``.
    """
    mode = "max" if (kx is None or kz is None) else "fixed"
    x0 = float(start if start is not None else getattr(params, name))
    if not (x0 > 0):
        x0 = 1.0
    cache = {}

    def g(logv):
        if logv not in cache:
            cache[logv] = _growth(params.with_value(name, math.exp(logv)), kx, kz, ky0, mode,
                                  other_bounds, rtol)
        return cache[logv][0]

    a = math.log(x0)
    ga = g(a) > 0
    step = math.log(2.0)
    lo_lim, hi_lim = math.log(limits[0]), math.log(limits[1])
    # walk outwards from the start in both directions (growth rises with Re but
    # falls with BPe) until the sign of the growth rate changes
    up = dn = a
    bracket = None
    while bracket is None:
        moved = False
        if up + step <= hi_lim:
            moved = True
            if (g(up + step) > 0) != ga:
                bracket = (up, up + step)
            up += step
        if bracket is None and dn - step >= lo_lim:
            moved = True
            if (g(dn - step) > 0) != ga:
                bracket = (dn - step, dn)
            dn -= step
        if not moved:
            return math.nan, math.nan
    root = opt.brentq(g, bracket[0], bracket[1], xtol=xtol)
    g(root)
    return math.exp(root), cache[root][1]


def neutral_curve(params: FlowParams, name: str, axis: str, k_values, other=None,
                  other_bounds=None, ky0=0.0, limits=(1e-4, 1e8), rtol=eigen.RTOL) -> NeutralCurve:
    """Neutral curve of ``name`` (``Re``, ``BPe``, ``B`` ...) against ``axis`` (``kx`` or ``kz``).

    ``other``: the other wavenumber fixed at this value, or ``None`` to take,
    at each point, the maximum growth rate over the other wavenumber in
    ``other_bounds``.  Each point starts its search from the previous root.
    """
    if axis not in ("kx", "kz"):
        raise ValueError(f"axis: must be kx or kz, got {axis!r}")
    if other is None and other_bounds is None:
        raise ValueError("other_bounds: needed when the other wavenumber is maximised over")
    k = _grid_values(axis, k_values)
    vals = np.full(k.size, math.nan)
    oth = np.full(k.size, math.nan)
    start = None
    for i, kk in enumerate(k):
        kx, kz = (kk, other) if axis == "kx" else (other, kk)
        v, o = neutral_value(params, name, kx, kz, ky0, start=start, limits=limits,
                             other_bounds=other_bounds, rtol=rtol)
        vals[i] = v
        oth[i] = o if other is None else other
        if math.isfinite(v):
            start = v
    return NeutralCurve(params, name, axis, k, vals, oth, "max" if other is None else "fixed")
