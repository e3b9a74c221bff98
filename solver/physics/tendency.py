"""The explicit tendency: advection (pseudo-spectral, 2/3-rule dealiased) and forcing.

Momentum advection in divergence form, ``-(u.grad)u = -div(u u)``, needs the
five products ``uu-ww, vv-ww, uv, uw, vw``: the isotropic part ``ww I`` of the
stress is a gradient, which the projection onto the Craya-Herring frame
removes (a standard saving, e.g. Canuto et al. 2007, Spectral Methods:
Evolution to Complex Geometries, section 3.3). Temperature advection is
``-div(u T)``. Per evaluation: 3 (+1) inverse and 5 (+3) forward transforms.

Two ways to make the products, with the same transforms and results equal to
round-off (:mod:`shearmix.solver.compute.productpass` chooses): on grids whose fields overflow
the cache, one :meth:`SlabTransform.round_trip` makes them block by block of
x-planes, so the velocity never exists as full arrays ("blocks"); on small
grids, full velocity arrays and one 3D transform each ("whole").
"""
from __future__ import annotations

import numpy as np

from shearmix.solver.compute import kernels
from shearmix.solver.compute.options import PRODUCT_PASSES
from shearmix.solver.compute.productpass import choose_product_pass, product_fields
from shearmix.solver.compute.transforms import SlabTransform
from shearmix.solver.grid import Grid, true_runs
from shearmix.solver.physics.basis import CrayaHerring
from shearmix.solver.physics.terms import Advection, ShearForcing


class PseudoSpectralTendency:
    """``N(y)`` for a stacked state ``y = [a, p(, T)]``; callable as ``(y, t, out)``.

    ``product_pass``: ``'blocks'``, ``'whole'`` or ``'auto'`` (choose by
    :func:`shearmix.solver.compute.productpass.choose_product_pass`).
    """

    def __init__(self, grid: Grid, basis: CrayaHerring, transform: SlabTransform,
                 fields, advection: Advection | None, forcing: ShearForcing | None,
                 product_pass: str = "auto"):
        self.grid, self.basis, self.fft = grid, basis, transform
        self.fields = tuple(fields)
        self.advection = advection
        self.has_T = "T" in self.fields
        self.with_T = self.has_T and advection is not None and advection.with_temperature
        n_products = product_fields(self.with_T)
        if product_pass not in PRODUCT_PASSES:
            raise ValueError(f"compute.product_pass: must be one of "
                             f"{', '.join(PRODUCT_PASSES)}, got {product_pass!r}")
        nx, ny, nz = grid.physical_shape
        self.blocks = choose_product_pass(
            product_pass, n_products * nx * ny * nz * 8 * transform.comm.ranks_on_node()) \
            == "blocks"
        # the transform's own planning buffers serve as work arrays
        self.product = transform.physical
        # transforms of the products; P[0] doubles as the inverse transforms' input
        n_spectral = n_products if self.blocks else 5
        self.P = [transform.spectral] + [transform.empty_spectral()
                                         for _ in range(n_spectral - 1)]
        if self.blocks:
            transform.prepare_round_trip(n_products)
            self.velocity = self.temperature = None
            self._speed_work = None
        else:
            self.velocity = [transform.empty_physical() for _ in range(3)]
            self.temperature = transform.empty_physical() if self.has_T else None
            # uu - ww beside the product buffer (uv): all five stresses in one pass
            self._uu_ww = transform.empty_physical() if advection is not None else None
        #: the advection is made in the round trip, a few ky rows at a time
        #: (compiled kernels; the NumPy path keeps the whole-array assembly)
        self.chunked = self.blocks and advection is not None and kernels.use_numba()
        #: local ky rows outside the 2/3-rule band, as (start, stop) runs
        self._gaps = true_runs(~grid.keep_y)
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
        #: an output array that nothing but this tendency writes (the stepper's
        #: tendency register, set by the simulation): the chunked pass zeroes its
        #: rows outside the kept ky once instead of every evaluation
        self.owned_output = None
        self._owned_clean = False
        # forcing in a dropped row would pile up there if those rows were not rezeroed
        self._forcing_in_gaps = any(not grid.keep_y[idx[1]] for idx, _, _ in self.forcing)
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

    def physical_fields(self, y: np.ndarray):
        """New arrays ``(u, v, w, T or None)``: state ``y`` on the grid."""
        fft, P = self.fft, self.P
        kernels.velocity(y[0], y[1], self.basis, self.band, P[0], P[1], P[2])
        fields = [fft.inverse(P[comp], fft.empty_physical()) for comp in range(3)]
        T = None
        if self.has_T:
            np.copyto(P[0], y[2])
            T = fft.inverse(P[0], fft.empty_physical())
        return (*fields, T)

    def to_physical(self, y: np.ndarray) -> None:
        """Velocity (and temperature) of state ``y`` on the grid, into the work arrays
        (the whole-array pass)."""
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

    # ------------------------------------------------------------ block-wise pass
    def _block_speed(self, u, v, w) -> None:
        if self._speed_work is None and not kernels.use_numba():
            self._speed_work = np.empty_like(u)
        rate, speed2 = kernels.speed_limits(u, v, w, self.grid.dx, self._speed_work)
        # a NaN must survive the running maximum
        if rate > self._rate or rate != rate:
            self._rate = rate
        if speed2 > self._speed2 or speed2 != speed2:
            self._speed2 = speed2

    def _block_products(self, blocks) -> None:
        """In one block: ``blocks = [u, v, w(, T), ...]`` in, the products out in
        the order of :meth:`_products_by_blocks`'s outputs."""
        u, v, w = blocks[0], blocks[1], blocks[2]
        if self.want_speed:
            self._block_speed(u, v, w)
        if self.advection is None:
            return
        if self.with_T:
            # uT, vT into blocks 4, 5; wT over T
            kernels.scalar_fluxes(u, v, w, blocks[3], blocks[4], blocks[5])
            uv, uu_ww = blocks[6], blocks[7]
        else:
            uv, uu_ww = blocks[3], blocks[4]
        # u <- uw, v <- vv - ww, w <- vw
        kernels.stresses(u, v, w, uv, uu_ww)

    def _products_by_blocks(self, y: np.ndarray, out: np.ndarray) -> None:
        P, clock = self.P, self.fft.clock
        inputs = P[:4] if self.with_T else P[:3]
        if not self.chunked:
            kernels.velocity(y[0], y[1], self.basis, self.band, P[0], P[1], P[2])
            if self.with_T:
                np.copyto(P[3], y[2])
            if clock:
                clock.lap("frame to Cartesian")
        self._rate = self._speed2 = 0.0
        if self.advection is None:
            self.fft.round_trip(inputs, [], self._block_products)
        elif self.chunked:
            # the velocity made and the advection made from the products a few
            # ky rows at a time, in cache (SlabTransform.round_trip's start and
            # finish); the other rows of the tendency are zero
            self._y, self._out = y, out
            self.fft.round_trip(inputs, P, self._block_products, self._advection_rows,
                                self._velocity_rows)
            owned = out is self.owned_output and not self._forcing_in_gaps
            if not (owned and self._owned_clean):
                for a, b in self._gaps:
                    out[:, :, a:b] = 0
            self._owned_clean = owned
            if clock:
                clock.lap("advection assembly")
        else:
            self.fft.round_trip(inputs, P, self._block_products)
        if self.want_speed:
            comm = self.fft.comm
            self.cfl_rate = float(comm.max(self._rate))
            self.max_speed = float(np.sqrt(comm.max(self._speed2)))
            if clock:
                clock.lap("wait")
        if self.advection is None:
            return
        if self.has_T and not self.with_T:
            out[2] = 0
        if self.chunked:
            return
        stresses, fluxes = self._products_in_order(P)
        if fluxes is not None:
            kernels.scalar_advection(fluxes, self.mask, self.scale, self.band, self.kvec,
                                     out[2])
        kernels.momentum_advection(stresses, self.mask, self.scale, self.band, self.kvec,
                                   self.basis, out)
        if clock:
            clock.lap("advection assembly")

    def _products_in_order(self, P):
        """``(stresses, fluxes)`` from the round trip's outputs in the order of
        :meth:`_block_products`: ``uu-ww, vv-ww, uv, uw, vw`` and ``uT, vT, wT``
        (None without temperature advection)."""
        if self.with_T:
            # P = [uw, vv-ww, vw, wT, uT, vT, uv, uu-ww]
            return (P[7], P[1], P[6], P[0], P[2]), (P[4], P[5], P[3])
        # P = [uw, vv-ww, vw, uv, uu-ww]
        return (P[4], P[1], P[3], P[0], P[2]), None

    def _velocity_rows(self, chunks, lo, hi) -> None:
        """``start`` of the round trip: u, v, w (and T) of ky rows ``lo:hi``."""
        y = self._y
        kernels.velocity_rows(y[0], y[1], self.basis, self.band, *chunks[:3], lo, hi)
        if self.with_T:
            np.copyto(chunks[3], y[2][:, lo:hi, :self.grid.nz_kept])
        clock = self.fft.clock
        if clock:
            clock.lap("frame to Cartesian")

    def _advection_rows(self, chunks, lo, hi) -> None:
        """``finish`` of the round trip: the advection of ky rows ``lo:hi`` from
        their transformed products (order of :meth:`_block_products`)."""
        stresses, fluxes = self._products_in_order(chunks)
        kernels.advection_rows(stresses, fluxes, self.scale, self.band, self.kvec, self.basis,
                               self._out, lo, hi)
        clock = self.fft.clock
        if clock:
            clock.lap("advection assembly")

    # ------------------------------------------------------------ whole-array pass
    def _products_whole(self, y: np.ndarray, out: np.ndarray) -> None:
        self.to_physical(y)
        if self.want_speed:
            self._speed_limits()
        if self.advection is None:
            return
        u, v, w = self.velocity
        # the advection reads the band only: band-pruned forward transforms
        q, P, fwd = self.product, self.P, self.fft.forward_band
        if self.with_T:
            # the three fluxes from one read: uT, vT into the product arrays, wT over T
            T = self.temperature
            kernels.scalar_fluxes(u, v, w, T, q, self._uu_ww)
            fwd(q, P[0])
            fwd(self._uu_ww, P[1])
            fwd(T, P[2])
            kernels.scalar_advection(P, self.mask, self.scale, self.band, self.kvec, out[2])
        elif self.has_T:
            out[2] = 0
        # the velocity is not needed past this point: one pass writes three of
        # the stresses over it and the other two into q and uu - ww
        uu_ww = self._uu_ww
        kernels.stresses(u, v, w, q, uu_ww)   # u <- uw, v <- vv - ww, w <- vw, q = uv
        fwd(uu_ww, P[0])
        fwd(v, P[1])
        fwd(q, P[2])
        fwd(u, P[3])
        fwd(w, P[4])
        clock = self.fft.clock
        if clock:
            clock.lap("transforms and products")
        kernels.momentum_advection(P, self.mask, self.scale, self.band, self.kvec,
                                   self.basis, out)
        if clock:
            clock.lap("advection assembly")

    def __call__(self, y: np.ndarray, t: float, out: np.ndarray) -> np.ndarray:
        g = self.grid
        if self.fft.clock:
            self.fft.clock.start()  # the stage update before this call is not a phase
        if self.advection is None:
            out[...] = 0
        if self.advection is not None or self.want_speed:
            if self.blocks:
                self._products_by_blocks(y, out)
            else:
                self._products_whole(y, out)
        for idx, fa, fp in self.forcing:
            out[0][idx] += fa
            out[1][idx] += fp
        # the mean mode is not carried by the frame
        if g.rank == 0:
            out[:, 0, 0, 0] = 0
        return out
