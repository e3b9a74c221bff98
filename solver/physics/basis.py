"""The Craya-Herring frame: divergence-free velocity as two amplitudes per wavenumber.

For a wavevector ``k`` with horizontal part ``kh > 0`` (Craya 1958; Herring 1974,
Phys. Fluids 17, 859) the unit vectors

    e1 = (k x e_z)/|k x e_z| = ( ky, -kx, 0)/kh                 (vortical)
    e2 = (k x e1)/|k x e1|   = (kx kz, ky kz, -kh^2)/(kh |k|)   (poloidal)

span the plane normal to ``k``, so ``u_k = a e1 + p e2`` is divergence free by
construction and the pressure never appears. The vertical velocity is
``w_k = -(kh/|k|) p``. Where ``kh = 0`` the frame is taken as ``e1 = e_x``,
``e2 = e_y`` (both normal to ``k = kz e_z``); the mean (``k = 0``) is held at 0.

With ``s = ky/kh``, ``c = kx/kh`` (functions of kx, ky only), ``beta = kz/|k|``
and ``alpha = kh/|k|``:

    u = s a + c beta p,   v = -c a + s beta p,   w = -alpha p
    a = s u - c v,        p = beta (c u + s v) - alpha w
"""
from __future__ import annotations

import numpy as np

from shearmix.solver.grid import Grid


class CrayaHerring:
    """Frame coefficients on one rank's spectral slab.

    Stored: ``s``, ``c`` and ``kh`` (shape ``(Nx, Ny/P, 1)``) and ``kz`` (1-D). The
    3-D ``alpha``, ``beta`` and ``nonzero`` are computed when asked for (the
    compiled kernels evaluate them per mode), so the frame costs no full-size memory.
    """

    def __init__(self, grid: Grid):
        kx, ky = grid.kx, grid.ky
        kh_2d = np.sqrt(kx ** 2 + ky ** 2)  # shape (Nx, nyl, 1)
        flat = kh_2d == 0
        safe = np.where(flat, 1.0, kh_2d)
        self.s = np.ascontiguousarray(np.where(flat, 1.0, ky / safe))
        self.c = np.ascontiguousarray(np.where(flat, 0.0, kx / safe))
        self.kh = np.ascontiguousarray(kh_2d)
        self.kz = np.ascontiguousarray(grid.kz.ravel())

    @property
    def alpha(self) -> np.ndarray:
        """``kh/|k|`` (0 at k = 0)."""
        k = np.sqrt(self.kh ** 2 + self.kz ** 2)
        return np.where(k == 0, 0.0, self.kh / np.where(k == 0, 1.0, k))

    @property
    def beta(self) -> np.ndarray:
        """``kz/|k|`` (1 at k = 0)."""
        k = np.sqrt(self.kh ** 2 + self.kz ** 2)
        return np.where(k == 0, 1.0, self.kz / np.where(k == 0, 1.0, k))

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
