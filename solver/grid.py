"""The periodic grid, its slab decomposition and its wavenumbers.

Physical space: rank r holds x-planes ``[r*Nx/P, (r+1)*Nx/P)`` of the
``Nx x Ny x Nz`` grid (shape ``(Nx/P, Ny, Nz)``). Spectral space (real-to-complex
in z): rank r holds ky-columns ``[r*Ny/P, (r+1)*Ny/P)`` of the
``Nx x Ny x (Nz/2+1)`` coefficient array (shape ``(Nx, Ny/P, Nz/2+1)``).
Coefficients are normalised Fourier amplitudes: ``f(x) = sum_k f_k exp(i k.x)``.

Dealiasing follows the 2/3 rule (Orszag 1971, J. Atmos. Sci. 28): a wave index
``|n| <= (N-1)//3`` is kept in each direction, which makes the products of two
kept fields exact on the grid.
"""
from __future__ import annotations

import math

import numpy as np


class GridError(ValueError):
    """A grid that cannot be laid out on the requested number of ranks."""


def allowed_rank_counts(shape) -> list[int]:
    """Rank counts P with P dividing Nx and Ny (one x-plane and one ky-column each at least)."""
    nx, ny, _ = shape
    g = math.gcd(nx, ny)
    return [p for p in range(1, g + 1) if g % p == 0]


def true_runs(mask) -> list[tuple[int, int]]:
    """The runs of True in a 1-D boolean array, as ``(start, stop)`` pairs."""
    edges = np.flatnonzero(np.diff(np.concatenate([[0], np.asarray(mask, dtype=np.int8), [0]])))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2])]


def dealias_cutoff(n: int) -> int:
    """Largest kept wave index under the 2/3 rule for ``n`` points."""
    return (n - 1) // 3


class Grid:
    """Grid geometry and the local wavenumber arrays of one rank.

    Wavenumber arrays are broadcastable: ``kx`` has shape ``(Nx, 1, 1)``,
    ``ky`` ``(1, Ny/P, 1)`` and ``kz`` ``(1, 1, Nz/2+1)``.
    """

    def __init__(self, shape, lengths, rank: int = 0, size: int = 1):
        self.shape = tuple(int(n) for n in shape)
        self.lengths = tuple(float(L) for L in lengths)
        nx, ny, nz = self.shape
        if size not in allowed_rank_counts(self.shape):
            raise GridError(
                f"a {nx} x {ny} x {nz} grid cannot run on {size} ranks: the rank count must "
                f"divide Nx and Ny; allowed: {', '.join(map(str, allowed_rank_counts(self.shape)))}")
        self.rank, self.size = rank, size
        self.nx_local = nx // size
        self.ny_local = ny // size
        self.nzc = nz // 2 + 1
        self.x_start = rank * self.nx_local
        self.y_start = rank * self.ny_local
        self.physical_shape = (self.nx_local, ny, nz)
        self.spectral_shape = (nx, self.ny_local, self.nzc)
        self.npoints = nx * ny * nz
        lx, ly, lz = self.lengths
        self.dx = (lx / nx, ly / ny, lz / nz)

        # integer wave indices
        self.nx_index = np.fft.fftfreq(nx, 1.0 / nx).astype(np.int64).reshape(nx, 1, 1)
        ny_all = np.fft.fftfreq(ny, 1.0 / ny).astype(np.int64)
        self.ny_index = ny_all[self.y_start:self.y_start + self.ny_local].reshape(1, -1, 1)
        self.nz_index = np.arange(self.nzc, dtype=np.int64).reshape(1, 1, -1)

        self.kx = (2 * np.pi / lx) * self.nx_index.astype(float)
        self.ky = (2 * np.pi / ly) * self.ny_index.astype(float)
        self.kz = (2 * np.pi / lz) * self.nz_index.astype(float)

        self.cutoff = tuple(dealias_cutoff(n) for n in self.shape)
        keep = ((np.abs(self.nx_index) <= self.cutoff[0])
                & (np.abs(self.ny_index) <= self.cutoff[1])
                & (self.nz_index <= self.cutoff[2]))
        self.dealias = np.ascontiguousarray(keep)
        #: the same band as compiled kernels walk it: kept kx rows, kept local ky rows,
        #: and the count of kept kz (0 .. cutoff, contiguous from 0)
        self.keep_x = np.ascontiguousarray(np.abs(self.nx_index.ravel()) <= self.cutoff[0])
        self.keep_y = np.ascontiguousarray(np.abs(self.ny_index.ravel()) <= self.cutoff[1])
        self.nz_kept = self.cutoff[2] + 1
        #: largest resolved wavenumber after dealiasing (smallest over directions)
        self.kmax = min(2 * np.pi / L * c for L, c in zip(self.lengths, self.cutoff))

        # half-space weights: modes with nz > 0 stand for themselves and their conjugates
        self.half_weight = np.where(self.nz_index > 0, 2.0, 1.0)

    @property
    def k2(self) -> np.ndarray:
        """``|k|^2`` over the slab (computed when asked for: the kernels need no copy)."""
        return self.kx ** 2 + self.ky ** 2 + self.kz ** 2

    # ------------------------------------------------------------ helpers
    def physical_coordinates(self):
        """Local x, y, z coordinates, broadcastable to the physical slab."""
        lx, ly, lz = self.lengths
        nx, ny, nz = self.shape
        x = (np.arange(self.x_start, self.x_start + self.nx_local) * (lx / nx)).reshape(-1, 1, 1)
        y = (np.arange(ny) * (ly / ny)).reshape(1, -1, 1)
        z = (np.arange(nz) * (lz / nz)).reshape(1, 1, -1)
        return x, y, z

    def local_index_of(self, nx: int, ny: int, nz: int):
        """Local array index of the mode with wave indices (nx, ny, nz >= 0), or None."""
        gx, gy, gz = self.shape
        if nz < 0 or nz >= self.nzc:
            return None
        iy = ny % gy - self.y_start
        if not (0 <= iy < self.ny_local):
            return None
        return (nx % gx, iy, nz)

    def volume_sum(self, product_spectral):
        """Local part of the volume average of f*g from the real part of f_k conj(g_k).

        Parseval: ``<f g> = sum_k Re(f_k conj(g_k))`` over the full spectrum; on the
        half spectrum the ``nz > 0`` modes count twice.
        """
        return float(np.sum(self.half_weight * product_spectral))
