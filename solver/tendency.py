"""The explicit tendency: advection (pseudo-spectral, 2/3-rule dealiased) and forcing.

Momentum advection in divergence form, ``-(u.grad)u = -div(u u)``, needs the
five products ``uu-ww, vv-ww, uv, uw, vw``: the isotropic part ``ww I`` of the
stress is a gradient, which the projection onto the Craya-Herring frame
removes (a standard saving, e.g. Canuto et al. 2007, Spectral Methods:
Evolution to Complex Geometries, section 3.3). Temperature advection is
``-div(u T)``. Per evaluation: 3 (+1) inverse and 5 (+3) forward transforms.
"""
from __future__ import annotations

import numpy as np

from . import kernels
from .basis import CrayaHerring
from .grid import Grid
from .terms import Advection, ShearForcing
from .transforms import SlabTransform


class PseudoSpectralTendency:
    """``N(y)`` for a stacked state ``y = [a, p(, T)]``; callable as ``(y, t, out)``."""

    def __init__(self, grid: Grid, basis: CrayaHerring, transform: SlabTransform,
                 fields, advection: Advection | None, forcing: ShearForcing | None):
        self.grid, self.basis, self.fft = grid, basis, transform
        self.fields = tuple(fields)
        self.advection = advection
        self.has_T = "T" in self.fields
        self.velocity = [transform.empty_physical() for _ in range(3)]
        self.temperature = transform.empty_physical() if self.has_T else None
        # the transform's own planning buffers serve as work arrays
        self.product = transform.physical
        # transforms of the five products; P[0] doubles as the inverse transforms' input
        self.P = [transform.spectral] + [transform.empty_spectral() for _ in range(4)]
        for buf in self.P:  # band-pruned transforms leave the rest as it was: finite
            buf[...] = 0
        self.scratch = self.P[0]
        self._mask = None
        self.scale = 1.0 / float(grid.npoints)
        self.keep = (grid.keep_x, grid.keep_y,
                     np.ascontiguousarray(grid.nz_index.ravel() <= grid.cutoff[2]))
        self.band = (grid.keep_x, grid.keep_y, grid.nz_kept)
        self.kvec = (np.ascontiguousarray(grid.kx.ravel()), np.ascontiguousarray(grid.ky.ravel()),
                     np.ascontiguousarray(grid.kz.ravel()))
        self.forcing = self._forcing_modes(forcing)
        self.want_speed = False
        #: max over the domain of |u|/dx + |v|/dy + |w|/dz from the last evaluation
        self.cfl_rate = 0.0
        #: max velocity magnitude from the last evaluation that asked for it
        self.max_speed = 0.0

    @property
    def mask(self) -> np.ndarray:
        """Dealiasing mask times 1/N (made on first use: the compiled path needs none)."""
        if self._mask is None:
            self._mask = self.grid.dealias / float(self.grid.npoints)
        return self._mask

    def dealias_normalise(self, spec: np.ndarray) -> np.ndarray:
        """In place: apply the 2/3 rule and the forward transform's 1/N."""
        k = self.keep
        spec *= self.scale
        spec[~k[0]] = 0
        spec[:, ~k[1]] = 0
        spec[:, :, ~k[2]] = 0
        return spec

    def _forcing_modes(self, forcing):
        if forcing is None or forcing.F0 == 0:
            return []
        g = self.grid
        turns = int(round(forcing.kf * g.lengths[1] / (2 * np.pi)))
        modes = []
        for sign in (1, -1):
            idx = g.local_index_of(0, sign * turns, 0)
            if idx is None:
                continue
            fx = sign * forcing.F0 / 2j  # F0 sin(kf y): F0/(2i) at +kf, -F0/(2i) at -kf
            s = self.basis.s[idx[0], idx[1], 0]
            c = self.basis.c[idx[0], idx[1], 0]
            beta = self.basis.beta[idx]
            modes.append((idx, s * fx, beta * c * fx))
        return modes

    def to_physical(self, y: np.ndarray) -> None:
        """Velocity (and temperature) of state ``y`` on the grid, into the work arrays."""
        # one pass makes all three spectral components; each inverse then consumes one
        kernels.velocity(y[0], y[1], self.basis, self.band, self.P[0], self.P[1], self.P[2])
        for comp in range(3):
            self.fft.inverse(self.P[comp], self.velocity[comp])
        if self.has_T:
            np.copyto(self.scratch, y[2])
            self.fft.inverse(self.scratch, self.temperature)

    def _speed_limits(self):
        u, v, w = self.velocity
        rate, speed2 = kernels.speed_limits(u, v, w, self.grid.dx, self.product)
        comm = self.fft.comm
        self.cfl_rate = float(comm.max(rate))
        self.max_speed = float(np.sqrt(comm.max(speed2)))

    def __call__(self, y: np.ndarray, t: float, out: np.ndarray) -> np.ndarray:
        g = self.grid
        if self.advection is None:
            out[...] = 0
        if self.advection is not None or self.want_speed:
            self.to_physical(y)
        if self.want_speed:
            self._speed_limits()
        if self.advection is not None:
            u, v, w = self.velocity
            # the advection reads the band only: band-pruned forward transforms
            q, P, fwd = self.product, self.P, self.fft.forward_band
            if self.has_T and self.advection.with_temperature:
                T = self.temperature
                for comp in range(3):
                    fwd(kernels.product(self.velocity[comp], T, q), P[comp])
                kernels.scalar_advection(P, self.mask, self.scale, self.band, self.kvec, out[2])
            elif self.has_T:
                out[2] = 0
            # the velocity is not needed past this point: the last two passes
            # write the stresses over it (fewer memory passes, no extra array)
            fwd(kernels.product(u, v, q), P[2])
            kernels.stress_pair(u, w, q, u)   # q = uu - ww, u <- uw
            fwd(q, P[0])
            fwd(u, P[3])
            kernels.stress_pair(v, w, v, w)   # v <- vv - ww, w <- vw
            fwd(v, P[1])
            fwd(w, P[4])
            kernels.momentum_advection(P, self.mask, self.scale, self.band, self.kvec,
                                       self.basis, out)
        for idx, fa, fp in self.forcing:
            out[0][idx] += fa
            out[1][idx] += fp
        # the mean mode is not carried by the frame
        if g.rank == 0:
            out[:, 0, 0, 0] = 0
        return out
