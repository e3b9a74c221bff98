"""The Craya-Herring frame: divergence-free velocity as two amplitudes per wavenumber.

For a wavevector ``k`` with horizontal part ``kh > 0`` (Craya 1958; Herring 1974,
Phys. Fluids 17, 859) the unit vectors

    e1 = (k x e_z)/|k x e_z| = ( ky, -kx, 0)/kh                 (vortical)
    e2 = (k x e1)/|k x e1|   = (kx kz, ky kz, -kh^2)/(kh |k|)   (poloidal)

span the plane normal to ``k``, so ``u_k = a e1 + p e2`` is divergence free by
construction and the pressure never appears. The vertical velocity is
``w_k = -(kh/|k|) p``.

Convention where the formulas break down, used everywhere (this module, the
compiled kernels' ``_frame``, the initial states, the diagnostics):

* ``kh = 0``, ``k != 0``: ``s = 1``, ``c = 0``, so ``e1 = e_x`` and
  ``e2 = beta e_y`` with ``beta = kz/|k| = sign(kz)`` (``e_y`` on the stored
  half spectrum, ``kz > 0``);
* ``k = 0``: ``alpha = beta = 0`` (``e2 = 0``); the mean mode carries no
  velocity, and its amplitudes are held at zero (:attr:`CrayaHerring.nonzero`).

With ``s = ky/kh``, ``c = kx/kh`` (functions of kx, ky only), ``beta = kz/|k|``
and ``alpha = kh/|k|``:

    u = s a + c beta p,   v = -c a + s beta p,   w = -alpha p
    a = s u - c v,        p = beta (c u + s v) - alpha w
"""
from __future__ import annotations

import numpy as np

from shearmix.solver.grid import Grid


def frame(kx, ky, kz):
    """``(s, c, alpha, beta)`` of the wavevectors ``(kx, ky, kz)`` (NumPy broadcasting),
    with the convention of the module docstring at ``kh = 0`` and ``k = 0``."""
    kh = np.sqrt(kx ** 2 + ky ** 2)
    flat = kh == 0
    safe = np.where(flat, 1.0, kh)
    s = np.where(flat, 1.0, ky / safe)
    c = np.where(flat, 0.0, kx / safe)
    alpha, beta = _alpha_beta(kh, kz)
    return s, c, alpha, beta


def _alpha_beta(kh, kz):
    k = np.sqrt(kh ** 2 + kz ** 2)
    zero = k == 0
    safe = np.where(zero, 1.0, k)
    return np.where(zero, 0.0, kh / safe), np.where(zero, 0.0, kz / safe)


def vectors(kx, ky, kz):
    """``(e1, e2)``, each a length-3 array (last axis x, y, z), of the frame at ``k``."""
    s, c, alpha, beta = frame(kx, ky, kz)
    zero = np.zeros_like(np.asarray(alpha, dtype=float))
    return (np.stack(np.broadcast_arrays(s, -c, zero), axis=-1),
            np.stack(np.broadcast_arrays(c * beta, s * beta, -alpha), axis=-1))


class CrayaHerring:
    """Frame coefficients on one rank's spectral slab.

    Stored: ``s``, ``c`` and ``kh`` (shape ``(Nx, Ny/P, 1)``) and ``kz`` (1-D). The
    3-D ``alpha``, ``beta`` and ``nonzero`` are computed when asked for (the
    compiled kernels evaluate them per mode), so the frame costs no full-size memory.
    """

    def __init__(self, grid: Grid):
        kx, ky = grid.kx, grid.ky
        s, c, _, _ = frame(kx, ky, 0.0)  # shape (Nx, nyl, 1)
        self.s = np.ascontiguousarray(s)
        self.c = np.ascontiguousarray(c)
        self.kh = np.ascontiguousarray(np.sqrt(kx ** 2 + ky ** 2))
        self.kz = np.ascontiguousarray(grid.kz.ravel())

    @property
    def alpha(self) -> np.ndarray:
        """``kh/|k|`` (0 at k = 0)."""
        return _alpha_beta(self.kh, self.kz)[0]

    @property
    def beta(self) -> np.ndarray:
        """``kz/|k|`` (0 at k = 0)."""
        return _alpha_beta(self.kh, self.kz)[1]

    @property
    def nonzero(self) -> np.ndarray:
        """True everywhere but the mean mode, which the frame cannot carry."""
        return (self.kh ** 2 + self.kz ** 2) != 0

    def to_cartesian(self, a, p, component: int, out: np.ndarray) -> np.ndarray:
        """Cartesian velocity component (0, 1, 2) of ``a e1 + p e2`` into ``out``."""
        if component == 0:
            np.multiply(self.s, a, out=out)
            out += self.c * self.beta * p
        elif component == 1:
            np.multiply(-self.c, a, out=out)
            out += self.s * self.beta * p
        else:
            np.multiply(-self.alpha, p, out=out)
        return out

    def project(self, nx, ny, nz, out_a, out_p) -> None:
        """Amplitudes of the divergence-free part of the Cartesian vector (nx, ny, nz)."""
        np.multiply(self.s, nx, out=out_a)
        out_a -= self.c * ny
        np.multiply(self.c, nx, out=out_p)
        out_p += self.s * ny
        out_p *= self.beta
        out_p -= self.alpha * nz
