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
        self.product = transform.empty_physical()
        self.scratch = transform.empty_spectral()
        self.acc = [transform.empty_spectral() for _ in range(3)]
        self.mask = grid.dealias / float(grid.npoints)  # dealias and normalise at once
        self.forcing = self._forcing_modes(forcing)
        self.want_speed = False
        #: max over the domain of |u|/dx + |v|/dy + |w|/dz from the last evaluation
        self.cfl_rate = 0.0
        #: max velocity magnitude from the last evaluation that asked for it
        self.max_speed = 0.0

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
        a, p = y[0], y[1]
        for comp in range(3):
            self.basis.to_cartesian(a, p, comp, self.scratch)
            self.fft.inverse(self.scratch, self.velocity[comp])
        if self.has_T:
            np.copyto(self.scratch, y[2])
            self.fft.inverse(self.scratch, self.temperature)

    def _speed_limits(self):
        u, v, w = self.velocity
        dx, dy, dz = self.grid.dx
        q = self.product
        np.abs(u, out=q)
        q *= 1.0 / dx
        q += np.abs(v) * (1.0 / dy)
        q += np.abs(w) * (1.0 / dz)
        self.cfl_rate = float(self.grid_comm_max(q.max()))
        np.multiply(u, u, out=q)
        q += v * v
        q += w * w
        self.max_speed = float(np.sqrt(self.grid_comm_max(q.max())))

    def grid_comm_max(self, value):
        return self.fft.comm.max(value)

    def _add_divergence(self, product, coeffs):
        """``acc[i] += -i k_j (product)^`` for each (i, k_j) in ``coeffs``."""
        self.fft.forward(product, self.scratch)
        self.scratch *= self.mask
        for i, k in coeffs:
            self.acc[i] -= 1j * k * self.scratch

    def __call__(self, y: np.ndarray, t: float, out: np.ndarray) -> np.ndarray:
        g = self.grid
        out[...] = 0
        if self.advection is not None or self.want_speed:
            self.to_physical(y)
        if self.want_speed:
            self._speed_limits()
        if self.advection is not None:
            u, v, w = self.velocity
            q = self.product
            for acc in self.acc:
                acc[...] = 0
            kx, ky, kz = g.kx, g.ky, g.kz
            np.multiply(u, u, out=q)
            q -= w * w
            self._add_divergence(q, [(0, kx)])
            np.multiply(v, v, out=q)
            q -= w * w
            self._add_divergence(q, [(1, ky)])
            np.multiply(u, v, out=q)
            self._add_divergence(q, [(0, ky), (1, kx)])
            np.multiply(u, w, out=q)
            self._add_divergence(q, [(0, kz), (2, kx)])
            np.multiply(v, w, out=q)
            self._add_divergence(q, [(1, kz), (2, ky)])
            self.basis.project(self.acc[0], self.acc[1], self.acc[2], out[0], out[1])
            if self.has_T and self.advection.with_temperature:
                T = self.temperature
                self.acc[0][...] = 0
                for comp, k in enumerate((kx, ky, kz)):
                    np.multiply(self.velocity[comp], T, out=q)
                    self._add_divergence(q, [(0, k)])
                out[2] += self.acc[0]
        for idx, fa, fp in self.forcing:
            out[0][idx] += fa
            out[1][idx] += fp
        # the mean mode is not carried by the frame
        if g.rank == 0:
            out[:, 0, 0, 0] = 0
        return out
