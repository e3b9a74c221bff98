"""The explicit tendency: advection (pseudo-spectral, 2/3-rule dealiased) and forcing.

Momentum advection in divergence form, ``-(u.grad)u = -div(u u)``, needs the
five products ``uu-ww, vv-ww, uv, uw, vw``: the isotropic part ``ww I`` of the
stress is a gradient, which the projection onto the Craya-Herring frame
removes (a standard saving, e.g. Canuto et al. 2007, Spectral Methods:
Evolution to Complex Geometries, section 3.3). The advection of a scalar
(temperature, each passive tracer) is ``-div(u s)``. Per evaluation: 3 inverse
and 5 forward transforms, plus 1 inverse and 3 forward per advected scalar.

The steps, in order: frame to Cartesian (:meth:`PseudoSpectralTendency.to_cartesian`),
the products on the grid (:meth:`~PseudoSpectralTendency.products`), the
advection from their transforms (:meth:`~PseudoSpectralTendency.assemble_advection`),
the forcing. The product pass (:mod:`shearmix.solver.compute.productpass`,
``compute.product_pass``) applies the first three with whole arrays or block
by block through the transforms; the equations are docs/equations.md.
"""
from __future__ import annotations

import numpy as np

from shearmix.solver.compute import kernels
from shearmix.solver.compute.options import PRODUCT_PASSES
from shearmix.solver.compute.productpass import (ByBlocks, WholeArrays, choose_product_pass,
                                                 product_fields)
from shearmix.solver.compute.transforms import SlabTransform
from shearmix.solver.grid import Grid
from shearmix.solver.physics.basis import CrayaHerring
from shearmix.solver.physics.forcing import ForcingModes
from shearmix.solver.physics.terms import Advection, ShearForcing


class PseudoSpectralTendency:
    """``N(y)`` for a stacked state ``y = [a, p(, T)]``; callable as ``(y, t, out)``.

    ``product_pass``: ``'blocks'``, ``'whole'`` or ``'auto'`` (choose by
    :func:`shearmix.solver.compute.productpass.choose_product_pass`). Without
    advection there are no products: the velocity is made with whole arrays
    (for the speed limits) whatever the pass.
    """

    def __init__(self, grid: Grid, basis: CrayaHerring, transform: SlabTransform,
                 fields, advection: Advection | None, forcing: ShearForcing | None,
                 product_pass: str = "auto"):
        if product_pass not in PRODUCT_PASSES:
            raise ValueError(f"compute.product_pass: must be one of "
                             f"{', '.join(PRODUCT_PASSES)}, got {product_pass!r}")
        self.grid, self.basis, self.fft = grid, basis, transform
        self.fields = tuple(fields)
        self.advection = advection
        self.has_T = "T" in self.fields
        self.with_T = self.has_T and advection is not None and advection.with_temperature
        #: state indices of the advected scalars: T (if advected), then each tracer
        self.scalars = ((self.fields.index("T"),) if self.with_T else ()) + (
            tuple(self.fields.index(f) for f in advection.tracers) if advection else ())
        n_products = product_fields(len(self.scalars))
        nx, ny, nz = grid.physical_shape
        self.blocks = advection is not None and choose_product_pass(
            product_pass, n_products * nx * ny * nz * 8 * transform.comm.ranks_on_node()) \
            == "blocks"
        inputs = 3 + len(self.scalars)
        outputs = n_products if advection is not None else 0
        if self.blocks:
            # the velocity made and the advection assembled by chunks of rows:
            # compiled kernels only (the NumPy definitions work on whole arrays)
            self.products_pass = ByBlocks(transform, self, inputs, outputs,
                                          chunked=kernels.use_numba())
        else:
            self.products_pass = WholeArrays(transform, self, inputs, outputs)
        #: spectral work arrays (at least three); P[0] doubles as the inverse transforms' input
        self.P = self.products_pass.spectral
        for buf in self.P:  # band-pruned transforms leave the rest as it was: finite
            buf[...] = 0
        self.scratch = self.P[0]
        #: the transform's physical planning buffer, free between evaluations
        self.product = transform.physical
        self._mask = None
        self.scale = 1.0 / float(grid.npoints)
        self.keep = (grid.keep_x, grid.keep_y,
                     np.ascontiguousarray(grid.nz_index.ravel() <= grid.cutoff[2]))
        self.band = (grid.keep_x, grid.keep_y, grid.nz_kept)
        self.kvec = (np.ascontiguousarray(grid.kx.ravel()), np.ascontiguousarray(grid.ky.ravel()),
                     np.ascontiguousarray(grid.kz.ravel()))
        self.forcing = ForcingModes(forcing, grid, self.basis)
        # forcing in a dropped row would pile up there if those rows were not rezeroed
        self._forcing_in_gaps = any(not grid.keep_y[idx[1]] for idx, _, _ in self.forcing)
        if self.blocks:
            self.products_pass.rezero_gaps = self._forcing_in_gaps
        self.want_speed = False
        self._rate = self._speed2 = 0.0
        #: max over the domain of |u|/dx + |v|/dy + |w|/dz from the last evaluation
        self.cfl_rate = 0.0
        #: max velocity magnitude from the last evaluation that asked for it
        self.max_speed = 0.0

    @property
    def chunked(self) -> bool:
        """Whether the pass makes the velocity and the advection by chunks of rows."""
        return self.products_pass.chunked

    @property
    def owned_output(self):
        """An output array that nothing but this tendency writes (the stepper's
        tendency register, set by the simulation): the chunked pass zeroes its
        rows outside the kept ky once instead of every evaluation."""
        return getattr(self.products_pass, "owned_output", None)

    @owned_output.setter
    def owned_output(self, array) -> None:
        if self.blocks:
            self.products_pass.owned_output = array

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

    def physical_fields(self, y: np.ndarray):
        """New arrays ``(u, v, w, T or None)``: state ``y`` on the grid."""
        return self.physical_of(y)

    def physical_of(self, y: np.ndarray, tracers=()):
        """New arrays ``(u, v, w, T or None, *tracers)``: the velocity of state ``y`` on
        the grid, ``T`` (None in the low-Peclet model), then the named tracer fields."""
        fft, P = self.fft, self.P
        kernels.velocity(y[0], y[1], self.basis, self.band, P[0], P[1], P[2])
        # the inverse FFT destroys its input: transform a copy, so that the work
        # arrays keep zeros outside the 2/3 band (the block pass relies on them)
        scratch = fft.empty_spectral()
        fields = []
        for comp in range(3):
            np.copyto(scratch, P[comp])
            fields.append(fft.inverse(scratch, fft.empty_physical()))
        T = None
        extra = []
        for name in (("T",) if self.has_T else ()) + tuple(tracers):
            np.copyto(scratch, y[self.fields.index(name)])
            field = fft.inverse(scratch, fft.empty_physical())
            if name == "T":
                T = field
            else:
                extra.append(field)
        return (*fields, T, *extra)

    # ------------------------------------------------------------ the physics
    def to_cartesian(self, y, u, v, w, *scalars) -> None:
        """Spectral ``u, v, w`` of the frame amplitudes of ``y``, and the advected scalars."""
        kernels.velocity(y[0], y[1], self.basis, self.band, u, v, w)
        for spec, i in zip(scalars, self.scalars):
            np.copyto(spec, y[i])

    def to_cartesian_rows(self, y, chunks, lo, hi) -> None:
        """:meth:`to_cartesian` of the local ky rows ``lo:hi`` into ``chunks``
        (``(nx, hi - lo, nz_kept)``; compiled kernels only)."""
        kernels.velocity_rows(y[0], y[1], self.basis, self.band, *chunks[:3], lo, hi)
        for chunk, i in zip(chunks[3:], self.scalars):
            np.copyto(chunk, y[i][:, lo:hi, :self.grid.nz_kept])

    def products(self, fields) -> None:
        """On the grid, in place: ``fields = [u, v, w, s_1..s_n, ...]`` in (the advected
        scalars), the products out in the order of :meth:`assemble_advection` (and the
        speed limits, if wanted)."""
        u, v, w = fields[0], fields[1], fields[2]
        if self.want_speed:
            # the field past the inputs is free until the products are made
            rate, speed2 = kernels.speed_limits(u, v, w, self.grid.dx, fields[-1])
            # a NaN must survive the running maximum
            if rate > self._rate or rate != rate:
                self._rate = rate
            if speed2 > self._speed2 or speed2 != speed2:
                self._speed2 = speed2
        if self.advection is None:
            return
        n = len(self.scalars)
        for i in range(n):
            # u s, v s into the fields past the scalars; w s over s
            kernels.scalar_fluxes(u, v, w, fields[3 + i], fields[3 + n + 2 * i],
                                  fields[4 + n + 2 * i])
        uv, uu_ww = fields[3 + 3 * n], fields[4 + 3 * n]
        # u <- uw, v <- vv - ww, w <- vw
        kernels.stresses(u, v, w, uv, uu_ww)

    def _in_order(self, P):
        """``(stresses, scalars)`` from the transforms of :meth:`products`' outputs:
        ``uu-ww, vv-ww, uv, uw, vw``, and per advected scalar ``((us, vs, ws), index)``.

        ``P = [uw, vv-ww, vw, ws_1..ws_n, us_1, vs_1, .., us_n, vs_n, uv, uu-ww]``.
        """
        n = len(self.scalars)
        stresses = (P[4 + 3 * n], P[1], P[3 + 3 * n], P[0], P[2])
        scalars = [((P[3 + n + 2 * i], P[4 + n + 2 * i], P[3 + i]), index)
                   for i, index in enumerate(self.scalars)]
        return stresses, scalars

    def assemble_advection(self, P, out) -> None:
        """``out`` (all of it) from the transformed products ``P`` of :meth:`products`."""
        stresses, scalars = self._in_order(P)
        for fluxes, index in scalars:
            kernels.scalar_advection(fluxes, self.mask, self.scale, self.band, self.kvec,
                                     out[index])
        kernels.momentum_advection(stresses, self.mask, self.scale, self.band, self.kvec,
                                   self.basis, out)

    def assemble_advection_rows(self, chunks, out, lo, hi) -> None:
        """:meth:`assemble_advection` of the local ky rows ``lo:hi`` from their transformed
        products (``(nx, hi - lo, nz_kept)`` chunks; compiled kernels only)."""
        stresses, scalars = self._in_order(chunks)
        kernels.advection_rows(stresses, scalars, self.scale, self.band, self.kvec, self.basis,
                               out, lo, hi)

    def __call__(self, y: np.ndarray, t: float, out: np.ndarray) -> np.ndarray:
        g, clock = self.grid, self.fft.clock
        if clock:
            clock.start()  # the stage update before this call is not a phase
        if self.advection is None:
            out[...] = 0
        if self.advection is not None or self.want_speed:
            self._rate = self._speed2 = 0.0
            self.products_pass(y, out)
            if self.want_speed:
                comm = self.fft.comm
                self.cfl_rate = float(comm.max(self._rate))
                self.max_speed = float(np.sqrt(comm.max(self._speed2)))
                if clock:
                    clock.lap("wait")
            if self.has_T and not self.with_T and self.advection is not None:
                out[2] = 0
        for idx, fa, fp in self.forcing:
            out[0][idx] += fa
            out[1][idx] += fp
        # the mean mode is not carried by the frame
        if g.rank == 0:
            out[:, 0, 0, 0] = 0
        return out
