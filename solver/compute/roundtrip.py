"""The block-wise round trip: inverse transforms, a pointwise pass, band-pruned forward ones.

What one advection evaluation needs in one sweep, a block of x-planes at a
time, so that the physical fields live only in cache-sized blocks instead of
full arrays that stream through memory between the transforms and the
products. It skips what the 2/3 rule discards (x-inverse over the kept
(ky, kz) columns, y-transforms over the kept kz, forward y-transforms written
back over the kept ky only), so its inputs must be zero outside the band in
ky and kz. The transposes are the transform's strategy
(:mod:`shearmix.solver.compute.transpose`); :class:`RoundTripPlan` holds the
plans and work arrays, made once.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyfftw

#: bytes of one physical block of the round trip (a few fit in a core's L2 cache)
BLOCK_BYTES = 256 * 1024

#: bytes of the chunk buffers of a round trip with ``start`` and ``finish`` (all
#: its fields): a chunk is made, x-transformed and handed on while it is in cache
#: (the A/B against whole-array frame and advection passes: docs/performance.md)
CHUNK_BYTES = 4 * 1024 * 1024


def block_planes(grid) -> int:
    """x-planes per block: the largest divisor of the local plane count whose
    real block fits in :data:`BLOCK_BYTES`."""
    plane = grid.shape[1] * grid.shape[2] * 8
    fits = [b for b in range(1, grid.nx_local + 1)
            if grid.nx_local % b == 0 and b * plane <= BLOCK_BYTES]
    return max(fits) if fits else 1


@dataclass
class RoundTripPlan:
    """Plans and work arrays of round trips of up to ``fields`` fields (one rank's)."""

    fields: int
    #: x-planes per block, and the physical blocks ``(planes, Ny, Nz)``
    planes: int
    blocks: list
    #: per field, the x-slab rows ``(nx_local, Ny, Nz/2+1)`` the block loop reads and writes
    rows: list
    #: the complex block between the z and the y transforms
    cblock: np.ndarray
    y_inverse: pyfftw.FFTW
    z_inverse: pyfftw.FFTW
    z_forward: pyfftw.FFTW
    y_forward: pyfftw.FFTW
    #: kept ky over the whole y axis, and the gap between them
    y_runs: list
    y_gaps: list
    #: chunks ``(lo, hi)`` of kept local ky rows, their buffers and x-plans by width
    chunks: list
    chunk_buffers: list
    chunk_plans: dict
    chunk_plans_inverse: dict
    #: x-planes per field and turn of the chunk copies
    chunk_planes: int
    nz_kept: int


def make_plan(fft, count: int, flags, threads) -> RoundTripPlan:
    """Plans and work blocks for round trips of up to ``count`` fields.

    Collective on all ranks. Planning overwrites ``fft.spectral`` (and the
    shared arrays): make it before those hold data.
    """
    g = fft.grid
    nb = block_planes(g)
    ny, nzc, nkz = g.shape[1], g.nzc, g.nz_kept
    blocks = [pyfftw.empty_aligned((nb, ny, g.shape[2]), dtype=np.float64)
              for _ in range(count)]
    rows = fft.transpose.trip_rows(count)
    # a block's rows start at a multiple of the plane size: plan unaligned if
    # that is not a multiple of the SIMD alignment
    aligned = (nb * ny * nzc * 16) % pyfftw.simd_alignment == 0
    bflags = flags if aligned else flags + ("FFTW_UNALIGNED",)
    c = g.cutoff[1]
    per_row = count * g.shape[0] * nkz * 16
    most = max(1, CHUNK_BYTES // per_row)
    chunks = []
    for a, b in fft.band_runs:
        parts = -(-(b - a) // most)
        edges = [a + ((b - a) * q) // parts for q in range(parts + 1)]
        chunks += list(zip(edges[:-1], edges[1:]))
    widest = max((hi - lo for lo, hi in chunks), default=1)
    chunk_buffers = [pyfftw.empty_aligned((g.shape[0], widest, nkz), dtype=np.complex128)
                     for _ in range(count)]
    chunk_plans, chunk_plans_inverse = {}, {}
    for width in sorted({hi - lo for lo, hi in chunks}):
        view = chunk_buffers[0][:, :width]
        for table, direction in ((chunk_plans, "FFTW_FORWARD"),
                                 (chunk_plans_inverse, "FFTW_BACKWARD")):
            table[width] = pyfftw.FFTW(view, view, axes=(0,), direction=direction,
                                       flags=flags, threads=threads)
    cb = pyfftw.empty_aligned((nb, ny, nzc), dtype=np.complex128)
    plan = RoundTripPlan(
        fields=count, planes=nb, blocks=blocks, rows=rows, cblock=cb,
        y_inverse=pyfftw.FFTW(rows[0][:nb, :, :nkz], cb[:, :, :nkz], axes=(1,),
                              direction="FFTW_BACKWARD", flags=bflags, threads=threads),
        z_inverse=pyfftw.FFTW(cb, blocks[0], axes=(2,), direction="FFTW_BACKWARD",
                              flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads),
        z_forward=pyfftw.FFTW(blocks[0], cb, axes=(2,), direction="FFTW_FORWARD",
                              flags=flags, threads=threads),
        y_forward=pyfftw.FFTW(cb[:, :, :nkz], cb[:, :, :nkz], axes=(1,),
                              direction="FFTW_FORWARD", flags=flags, threads=threads),
        y_runs=[(0, c + 1), (ny - c, ny)], y_gaps=[(c + 1, ny - c)],
        chunks=chunks, chunk_buffers=chunk_buffers, chunk_plans=chunk_plans,
        chunk_plans_inverse=chunk_plans_inverse,
        # 16 at 128^3 (where it was probed: 2, 8 and 32 gave the same), as many
        # bytes elsewhere
        chunk_planes=max(1, 16 * 128 // g.shape[0]), nz_kept=nkz)
    # outside the kept ky the rows stay zero: the forward pass writes only
    # the kept ky and the x-inverse only the kept columns (planning wrote there)
    for mine in rows:
        mine[...] = 0
    return plan


class RoundTrip:
    """Round trips of up to ``count`` fields through ``fft``
    (:class:`shearmix.solver.compute.transforms.SlabTransform`); collective to make."""

    def __init__(self, fft, count: int):
        self.fft = fft
        self.plan = make_plan(fft, count, fft.flags, fft.threads)

    def __call__(self, inputs, outputs, pointwise, finish, start) -> None:
        """Inverse transforms, a pointwise pass on the grid, band-pruned forward transforms.

        The ``m`` arrays of ``inputs`` (spectral, destroyed; zero outside the
        2/3-rule ky band, and their modes past the kz cutoff, ``kz index >=
        Grid.nz_kept``, are taken as zero and never read) are brought to the
        grid a block of x-planes at a time into ``blocks[0..m-1]``;
        ``pointwise(blocks)`` (if given) then leaves in ``blocks[j]`` the field
        whose forward transform goes to ``outputs[j]`` (correct inside the
        2/3-rule band, undefined elsewhere, as ``SlabTransform.forward_band``).
        The same transforms as ``m`` inverse and ``k`` band-pruned forward
        ones, but the physical fields never exist as full arrays. An output
        may be one of the inputs.

        The inputs are made, and the outputs handed on, a chunk of kept ky rows
        at a time while it is in cache. ``start(chunks, lo, hi)`` fills the ``m``
        buffers of shape ``(nx, hi - lo, nz_kept)`` with the inputs' modes of
        local ky rows ``lo:hi`` (zero at the dropped kx), which are
        x-transformed in cache and copied on; ``inputs`` then only serve as work
        arrays (on one rank, and with ``Alltoall`` transposes, their rows
        outside the kept ky must still be zero: the block loop reads them
        there). The forward results never go to ``outputs`` (which serve as
        work arrays and hold nothing useful afterwards): the x-FFTs run a chunk
        of rows at a time and ``finish(chunks, lo, hi)`` gets the ``k``
        transformed buffers of shape ``(nx, hi - lo, nz_kept)`` for the local
        ky rows ``lo:hi`` (only kept rows; kx all, correct inside the 2/3-rule
        band).

        With shared-memory transposes the ranks claim blocks from a node
        counter instead of each taking its own x-planes, so ``pointwise`` may
        see any rank's planes: it must not depend on where a block lies.
        """
        plan, fft, transpose = self.plan, self.fft, self.fft.transpose
        m, k = len(inputs), len(outputs)
        if max(m, k) > plan.fields:
            raise ValueError(f"a round trip of {max(m, k)} fields, planned for {plan.fields}")
        fft.count_round_trips += 1
        fft.count_inverse += m
        fft.count_forward += k
        fft.count_forward_band += k
        clock = fft.clock
        self._start_by_chunks(inputs, start)
        rows_in, rows_out = transpose.after_start(inputs, outputs, plan)
        if clock:
            clock.lap("wait" if transpose.kind == "shared" else "x inverse")
        rows_in, rows_out, starts = transpose.block_starts(plan, rows_in, rows_out)
        self._blocks(rows_in, rows_out, starts, pointwise, clock)
        sources = transpose.to_columns(outputs, plan, clock)
        self._finish_by_chunks(sources, finish)
        transpose.end_trip(clock)

    def _blocks(self, rows_in, rows_out, starts, pointwise, clock) -> None:
        """Per block: y over the kept kz only, z between the block and the complex
        block; everything past the kept kz is never read nor written."""
        plan = self.plan
        nb, cb, nkz = plan.planes, plan.cblock, plan.nz_kept
        yi, zi, zf, yf = plan.y_inverse, plan.z_inverse, plan.z_forward, plan.y_forward
        blocks = plan.blocks
        for i0 in starts:
            done = 0
            for spec, block in zip(rows_in, blocks):
                yi.update_arrays(spec[i0:i0 + nb, :, :nkz], cb[:, :, :nkz])
                yi.execute()
                cb[:, :, nkz:] = 0   # the 2/3 rule; the c2r transform overwrote it
                zi.update_arrays(cb, block)
                zi.execute()
                done += nb
            if clock:  # work in x-planes
                clock.lap("yz inverse")
                clock.count("yz inverse", done)
            pointwise(blocks)
            if clock:
                clock.lap("products")
            done = 0
            for block, spec in zip(blocks, rows_out):
                zf.update_arrays(block, cb)
                zf.execute()
                yf.execute()   # in place in cb; only the kept ky go back
                for a, b in plan.y_runs:
                    spec[i0:i0 + nb, a:b, :nkz] = cb[:, a:b, :nkz]
                done += nb
            if clock:
                clock.lap("yz forward")
                clock.count("yz forward", done)

    def _start_by_chunks(self, inputs, start) -> None:
        """The inverse x-FFTs a chunk of kept ky rows at a time, the chunks made by
        ``start``, then copied where the block loop reads them."""
        plan, clock = self.plan, self.fft.clock
        nkz, m = plan.nz_kept, len(inputs)
        targets = self.fft.transpose.start_targets(inputs, plan)
        for lo, hi in plan.chunks:
            width = hi - lo
            bufs = [buf[:, :width] for buf in plan.chunk_buffers[:m]]
            start(bufs, lo, hi)
            x_plan = plan.chunk_plans_inverse[width]
            for buf in bufs:
                x_plan.update_arrays(buf, buf)
                x_plan.execute()
            self._copy_by_planes([t[:, lo:hi, :nkz] for t in targets], bufs)
            if clock:
                clock.count("x inverse", m * width * nkz)
                clock.lap("x inverse")

    def _copy_by_planes(self, targets, sources) -> None:
        """``targets[j][...] = sources[j]``, a few x-planes of every field in turn:
        the order the block loop wrote the rows in, several streams at once
        (field by field, the shared columns read at a third of the speed)."""
        step = self.plan.chunk_planes
        for i0 in range(0, targets[0].shape[0] if targets else 0, step):
            for target, source in zip(targets, sources):
                np.copyto(target[i0:i0 + step], source[i0:i0 + step])

    def _finish_by_chunks(self, sources, finish) -> None:
        """The x-FFTs a chunk of kept ky rows at a time, handed to ``finish``."""
        plan, clock = self.plan, self.fft.clock
        nkz, k = plan.nz_kept, len(sources)
        for lo, hi in plan.chunks:
            rows = hi - lo
            bufs = [buf[:, :rows] for buf in plan.chunk_buffers[:k]]
            self._copy_by_planes(bufs, [src[:, lo:hi, :nkz] for src in sources])
            x_plan = plan.chunk_plans[rows]
            for buf in bufs:
                x_plan.update_arrays(buf, buf)
                x_plan.execute()
            if clock:
                clock.count("x forward", k * rows * nkz)
                clock.lap("x forward")
            finish(bufs, lo, hi)
