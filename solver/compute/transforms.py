"""Distributed real-to-complex 3D FFTs on x-slabs, built on FFTW through pyfftw.

Forward: real-to-complex over (y, z) on each x-slab, a global transpose
that gives each rank all x for its ky-columns, then a complex FFT over x.
Inverse: the same steps backwards. When all ranks share one node the
transpose is no message at all: each rank writes its (y, z) transforms into a
global array in MPI-3 shared memory and, after a barrier, transforms its own
ky-columns over x straight out of it. Across nodes (or with
``transpose='alltoall'``, the case's ``compute.transpose``) it is an ``Alltoall`` whose outgoing blocks
are described by an MPI vector type rather than packed. On one rank a single
3D plan does it all. Plans are made once; FFTW wisdom is
read from and saved to a cache file so later runs plan in milliseconds.

:meth:`SlabTransform.forward_band` is the forward transform inside the
2/3-rule band only (what the advection needs): its x-FFT skips the columns
outside the band.

:meth:`SlabTransform.round_trip` is what one advection evaluation needs in
one sweep: inverse transforms, a pointwise pass on the grid and band-pruned
forward transforms, a block of x-planes at a time, so that the physical
fields live only in cache-sized blocks instead of full arrays that stream
through memory between the transforms and the products. It skips what the
2/3 rule discards (x-inverse over the kept (ky, kz) columns, y-transforms
over the kept kz), so its inputs must be zero outside the band in ky and kz.

Normalisation: :meth:`SlabTransform.forward` returns ``N * f_k`` (unnormalised
FFTW output); callers fold ``1/N`` into their dealiasing mask.
:meth:`SlabTransform.inverse` takes ``f_k`` and returns ``f(x)``.
"""
from __future__ import annotations

import os
import tempfile

import numpy as np
import pyfftw

from shearmix.solver.compute.options import ComputeOptionError
from shearmix.solver.grid import Grid, true_runs

#: bytes of one physical block of the round trip (a few fit in a core's L2 cache)
BLOCK_BYTES = 256 * 1024

#: bytes of the chunk buffers of a round trip with ``start`` and ``finish`` (all
#: its fields): a chunk is made, x-transformed and handed on while it is in
#: cache. Against whole-array frame and advection passes, in one process with
#: steps alternating at 128^3: 2-rank steps 0.780 (low-Peclet) and 0.804
#: (full), 1-rank 0.970 and 0.988 (2-core Xeon guest)
CHUNK_BYTES = 4 * 1024 * 1024

_EFFORT_FLAG = {"estimate": "FFTW_ESTIMATE", "measure": "FFTW_MEASURE",
                "patient": "FFTW_PATIENT"}


def load_wisdom(path: str, comm) -> None:
    """Import FFTW wisdom from ``path`` (read on rank 0, shared with all ranks)."""
    if not path:
        return
    wisdom = None
    if comm.rank == 0:
        try:
            with open(os.path.expanduser(path), "rb") as fh:
                parts = fh.read().split(b"\n--8<--\n")
            if len(parts) == 3:
                wisdom = tuple(parts)
        except OSError:
            wisdom = None
    wisdom = comm.bcast(wisdom)
    if wisdom:
        pyfftw.import_wisdom(wisdom)


def save_wisdom(path: str, comm) -> None:
    """Write the accumulated FFTW wisdom atomically (rank 0); failures are not fatal."""
    if not path or comm.rank != 0:
        return
    target = os.path.expanduser(path)
    try:
        os.makedirs(os.path.dirname(target) or ".", exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=os.path.dirname(target) or ".", prefix=".wisdom")
        with os.fdopen(fd, "wb") as fh:
            fh.write(b"\n--8<--\n".join(pyfftw.export_wisdom()))
        os.replace(tmp, target)
    except OSError:
        pass  # a cache is a convenience; a read-only home must not stop a run


class SlabTransform:
    """Forward and inverse 3D real FFTs of one rank's slab.

    Parameters
    ----------
    grid : Grid
    comm : communicator from :mod:`shearmix.solver.compute.parallel`
    threads : FFTW threads per rank
    effort : 'estimate', 'measure' or 'patient'
    transpose : 'auto' (shared memory when all ranks share a node), 'shared'
        (an error if they cannot) or 'alltoall' (:data:`shearmix.solver.compute.options.TRANSPOSES`)
    """

    def __init__(self, grid: Grid, comm, threads: int = 1, effort: str = "measure",
                 transpose: str = "auto"):
        self.grid = grid
        self.comm = comm
        flags = (_EFFORT_FLAG[effort],)
        nx, ny, nz = grid.shape
        self.P = comm.size
        self.physical = pyfftw.empty_aligned(grid.physical_shape, dtype=np.float64)
        self.spectral = pyfftw.empty_aligned(grid.spectral_shape, dtype=np.complex128)
        if self.P == 1:
            self._fwd = pyfftw.FFTW(self.physical, self.spectral, axes=(0, 1, 2),
                                    direction="FFTW_FORWARD", flags=flags, threads=threads)
            self._inv = pyfftw.FFTW(self.spectral, self.physical, axes=(0, 1, 2),
                                    direction="FFTW_BACKWARD",
                                    flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads)
        else:
            nxl, nyl, nzc = grid.nx_local, grid.ny_local, grid.nzc
            x0, y0 = grid.x_start, grid.y_start
            # on one node: two global (kx, ky, kz) arrays in shared memory, used in turn
            shared = [comm.node_shared_array((nx, ny, nzc), np.complex128)
                      for _ in range(2)] if transpose != "alltoall" else [None]
            self._shared = shared if all(a is not None for a in shared) else None
            if transpose == "shared" and self._shared is None:
                raise ComputeOptionError("compute.transpose: shared needs all ranks on one node "
                                 "with MPI-3 shared memory; use auto or alltoall")
            if self._shared is not None:
                self._rows = [a[x0:x0 + nxl] for a in self._shared]        # my x-slab
                self._cols = [a[:, y0:y0 + nyl] for a in self._shared]     # my ky-columns
                self._turn = 0
                mid_out, x_in = self._rows[0], self._cols[0]
            else:
                self._mid = pyfftw.empty_aligned((nxl, ny, nzc), dtype=np.complex128)
                self._exchange = comm.slab_exchange(nxl, ny, nzc)
                mid_out, x_in = self._mid, self.spectral
            self._fwd_yz = pyfftw.FFTW(self.physical, mid_out, axes=(1, 2),
                                       direction="FFTW_FORWARD", flags=flags, threads=threads)
            self._inv_yz = pyfftw.FFTW(mid_out, self.physical, axes=(1, 2),
                                       direction="FFTW_BACKWARD",
                                       flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads)
            self._fwd_x = pyfftw.FFTW(x_in, self.spectral, axes=(0,),
                                      direction="FFTW_FORWARD", flags=flags, threads=threads)
            self._inv_x = pyfftw.FFTW(self.spectral, x_in, axes=(0,),
                                      direction="FFTW_BACKWARD", flags=flags, threads=threads)
        self._make_band_plans(flags, threads)
        self._flags, self._threads = flags, threads
        self._trip = None          # round-trip plans and blocks, made on first use
        self._dirty = False        # a plain transform used the shared arrays since the last round trip
        #: a :class:`shearmix.solver.compute.phaseclock.PhaseClock` to time the round trip's phases, or None
        self.clock = None
        #: on one node, ranks claim the round trip's blocks from a shared counter
        #: (False: each rank does its own x-planes)
        self.dynamic_blocks = True
        #: transforms performed, for the benchmark's transform floor
        self.count_forward = 0
        self.count_forward_band = 0
        self.count_inverse = 0
        self.count_round_trips = 0

    def _make_band_plans(self, flags, threads) -> None:
        """Plans of :meth:`forward_band`: the x-FFT over the kept (ky, kz) columns only."""
        g = self.grid
        nkz = g.nz_kept
        self._band_runs = true_runs(g.keep_y)
        if self.P == 1:
            self._band_yz = pyfftw.FFTW(self.physical, self.spectral, axes=(1, 2),
                                        direction="FFTW_FORWARD", flags=flags, threads=threads)
        source = self._cols[0] if self.P > 1 and self._shared is not None else self.spectral
        self._band_x = [pyfftw.FFTW(source[:, a:b, :nkz], self.spectral[:, a:b, :nkz],
                                    axes=(0,), direction="FFTW_FORWARD", flags=flags,
                                    threads=threads) for a, b in self._band_runs]

    def forward_band(self, physical: np.ndarray, spectral: np.ndarray) -> np.ndarray:
        """The forward transform inside the 2/3-rule band only (what the advection needs).

        ``spectral`` is correct where ``Grid.dealias`` holds and undefined
        elsewhere: the x-FFT runs over the kept (ky, kz) columns alone, which
        skips more than half of it (the (y, z) part cannot be pruned: every ky
        needs every y).
        """
        self.count_forward += 1
        self.count_forward_band += 1
        nkz = self.grid.nz_kept
        if self.P == 1:
            self._band_yz.update_arrays(physical, spectral)
            self._band_yz.execute()
            source = spectral
        else:
            source = self._columns(physical, spectral)
        for (a, b), plan in zip(self._band_runs, self._band_x):
            plan.update_arrays(source[:, a:b, :nkz], spectral[:, a:b, :nkz])
            plan.execute()
        return spectral

    def empty_physical(self) -> np.ndarray:
        return pyfftw.empty_aligned(self.grid.physical_shape, dtype=np.float64)

    def empty_spectral(self) -> np.ndarray:
        return pyfftw.empty_aligned(self.grid.spectral_shape, dtype=np.complex128)

    def forward(self, physical: np.ndarray, spectral: np.ndarray) -> np.ndarray:
        """``spectral <- FFT(physical)`` (unnormalised); ``physical`` is preserved."""
        self.count_forward += 1
        if self.P == 1:
            self._fwd.update_arrays(physical, spectral)
            self._fwd.execute()
            return spectral
        source = self._columns(physical, spectral)
        self._fwd_x.update_arrays(source, spectral)
        self._fwd_x.execute()
        return spectral

    def _columns(self, physical: np.ndarray, spectral: np.ndarray) -> np.ndarray:
        """(y, z) transforms and the transpose; returns the array holding this
        rank's ky-columns over all x (the shared array, or ``spectral``)."""
        if self._shared is not None:
            # all ranks write their x-slab into the shared array, then each
            # reads its ky-columns straight out of it: no message
            turn = self._next_turn()
            self._fwd_yz.update_arrays(physical, self._rows[turn])
            self._fwd_yz.execute()
            self.comm.barrier()
            return self._cols[turn]
        self._fwd_yz.update_arrays(physical, self._mid)
        self._fwd_yz.execute()
        self._exchange.to_y_slabs(self._mid, spectral)
        return spectral

    def _next_turn(self) -> int:
        # two shared arrays in turn: a rank may start transform t+1 while
        # another still reads transform t's array; it cannot start t+2 before
        # everyone has passed t+1's barrier, i.e. finished reading t's array.
        # A round trip that follows must wait for the readers first (dirty).
        turn = self._turn
        self._turn ^= 1
        self._dirty = True
        return turn

    def inverse(self, spectral: np.ndarray, physical: np.ndarray) -> np.ndarray:
        """``physical <- IFFT(spectral)`` (sum over modes). Destroys ``spectral``."""
        self.count_inverse += 1
        if self.P == 1:
            self._inv.update_arrays(spectral, physical)
            self._inv.execute()
            return physical
        if self._shared is not None:
            turn = self._next_turn()
            self._inv_x.update_arrays(spectral, self._cols[turn])
            self._inv_x.execute()
            self.comm.barrier()
            self._inv_yz.update_arrays(self._rows[turn], physical)
            self._inv_yz.execute()
            return physical
        self._inv_x.update_arrays(spectral, spectral)
        self._inv_x.execute()
        self._exchange.to_x_slabs(spectral, self._mid)
        self._inv_yz.update_arrays(self._mid, physical)
        self._inv_yz.execute()
        return physical

    # ------------------------------------------------------------ round trip
    def round_trip(self, inputs, outputs, pointwise=None, finish=None, start=None) -> None:
        """Inverse transforms, a pointwise pass on the grid, band-pruned forward transforms.

        The ``m`` arrays of ``inputs`` (spectral, destroyed; zero outside the
        2/3-rule ky band, and their modes past the kz cutoff, ``kz index >=
        Grid.nz_kept``, are taken as zero and never read) are brought to the
        grid a block of x-planes at a time into ``blocks[0..m-1]``;
        ``pointwise(blocks)`` (if given) then leaves in ``blocks[j]`` the field
        whose forward transform goes to ``outputs[j]`` (correct inside the
        2/3-rule band, undefined elsewhere, as :meth:`forward_band`). The same
        transforms as ``m`` :meth:`inverse` and ``k`` :meth:`forward_band`
        calls, but the physical fields never exist as full arrays: the
        products read them from cache. An output may be one of the inputs.
        The band also prunes the work: the x-inverse runs over the kept (ky, kz)
        columns only, the y-transforms over the kept kz, and the forward
        y-transforms write back the kept ky only (the shared rows stay zero
        outside them). Measured in one process, steps alternating, the kz part
        made steps 14-21% faster at 192^3 on one and two ranks, 4-7% for the
        low-Péclet model at 128^3 on two, within 2.5% either way at 128^3 on
        one; the ky part then 4-10% at 128^3 (medians of 3 launches each way).

        With ``start``, the inputs are made the same way, a chunk of kept ky rows
        at a time: ``start(chunks, lo, hi)`` fills the ``m`` buffers of shape
        ``(nx, hi - lo, nz_kept)`` with the inputs' modes of local ky rows
        ``lo:hi`` (zero at the dropped kx), which are x-transformed in cache and
        copied on; ``inputs`` then only serve as work arrays (on one rank, and
        with ``Alltoall`` transposes, their rows outside the kept ky must still
        be zero: the block loop reads them there).

        With ``finish``, the forward results never go to ``outputs`` (which then
        only serve as work arrays and hold nothing useful afterwards): the
        x-FFTs run a few kept ky rows at a time, each chunk's rows of all ``k``
        fields copied together into small buffers that stay in cache, and
        ``finish(chunks, lo, hi)`` gets the ``k`` transformed buffers of shape
        ``(nx, hi - lo, nz_kept)`` for the local ky rows ``lo:hi`` (only kept
        rows; kx all, correct inside the 2/3-rule band). What reads the
        products (the advection) thus reads them from cache instead of from
        full arrays (measured: :data:`CHUNK_BYTES`).

        On one node (shared rows, :attr:`dynamic_blocks`) the ranks claim
        blocks from a node counter instead of each taking its own x-planes,
        so ``pointwise`` may see any rank's planes: it must not depend on
        where a block lies. The faster rank takes more blocks and the
        barrier after them waits less (dynamic self-scheduling): in one
        process with steps alternating, 128^3 on two ranks, over 7 launches
        per model: steps -0.8% to 6.3% (low-Péclet, median 3.1%) and 1.8-8.9%
        (full, median 5.5%) faster than each rank on its own planes, barrier
        waits halved or better.
        """
        m, k = len(inputs), len(outputs)
        trip = self._trip
        if trip is None or len(trip["blocks"]) < max(m, k):
            raise RuntimeError(f"round_trip of {max(m, k)} fields needs "
                               f"prepare_round_trip({max(m, k)}) first")
        self.count_round_trips += 1
        self.count_inverse += m
        self.count_forward += k
        self.count_forward_band += k
        blocks, rows = trip["blocks"], trip["rows"]
        nkz = self.grid.nz_kept
        runs = list(zip(self._band_runs, trip["x_inverse"]))
        clock = self.clock
        if start is not None:
            self._start_by_chunks(inputs, start, trip)
            rows_in, rows_out = ((inputs, outputs) if self.P == 1 else
                                 (rows[:m], rows[:k]))
        elif self.P == 1:
            # x first, in place: the (y, z) transforms of each block then read the
            # inputs' own rows, and the outputs' rows take the forward results
            for spec in inputs:
                for (a, b), plan in runs:
                    plan.update_arrays(spec[:, a:b, :nkz], spec[:, a:b, :nkz])
                    plan.execute()
                    if clock:  # work in 1-D x-FFTs
                        clock.count("x inverse", (b - a) * nkz)
            rows_in, rows_out = inputs, outputs
        elif self._shared is not None:
            self._settle_shared(trip)
            # in place, then a copy into the shared columns: faster than an FFT
            # straight into them (see prepare_round_trip)
            for spec, cols in zip(inputs, trip["cols"]):
                for (a, b), plan in runs:
                    plan.update_arrays(spec[:, a:b, :nkz], spec[:, a:b, :nkz])
                    plan.execute()
                    np.copyto(cols[:, a:b, :nkz], spec[:, a:b, :nkz])
                    if clock:
                        clock.count("x inverse", (b - a) * nkz)
            if clock:
                clock.lap("x inverse")
            self.comm.barrier()
            rows_in, rows_out = rows[:m], rows[:k]
        else:
            for spec, mid in zip(inputs, rows):
                for (a, b), plan in runs:
                    plan.update_arrays(spec[:, a:b, :nkz], spec[:, a:b, :nkz])
                    plan.execute()
                    if clock:
                        clock.count("x inverse", (b - a) * nkz)
                self._exchange.to_x_slabs(spec, mid)
            rows_in, rows_out = rows[:m], rows[:k]
        if clock:
            clock.lap("x inverse" if self.P == 1 or self._shared is None else "wait")
        # per block: y over the kept kz only, z between the block and the complex
        # block ``cb``; everything past the kept kz is never read nor written
        nb, cb = trip["planes"], trip["cblock"]
        yi, zi, zf, yf = (trip[key] for key in ("y_inverse", "z_inverse", "z_forward",
                                                "y_forward"))
        counter = trip.get("counter") if self.dynamic_blocks else None
        if counter is not None:
            # any rank may take any rank's planes: all rows are in shared memory
            rows_in, rows_out = trip["arrays"][:m], trip["arrays"][:k]
            starts = self._claimed_blocks(counter, trip)
        else:
            starts = range(0, self.grid.nx_local, nb)
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
            if pointwise is not None:
                pointwise(blocks)
                if clock:
                    clock.lap("products")
            done = 0
            for block, spec in zip(blocks, rows_out):
                zf.update_arrays(block, cb)
                zf.execute()
                yf.execute()   # in place in cb; only the kept ky go back
                for a, b in trip["y_runs"]:
                    spec[i0:i0 + nb, a:b, :nkz] = cb[:, a:b, :nkz]
                done += nb
            if clock:
                clock.lap("yz forward")
                clock.count("yz forward", done)
        if self.P > 1 and self._shared is not None:
            self.comm.barrier()
            if clock:
                clock.lap("wait")
            sources = trip["cols"][:k]
        elif self.P > 1:
            for mid, spec in zip(rows, outputs):
                self._exchange.to_y_slabs(mid, spec)
            sources = outputs
        else:
            sources = outputs
        if finish is not None:
            self._finish_by_chunks(sources, finish, trip)
        else:
            self._x_forward(sources, outputs, trip)
        if self.P > 1 and self._shared is not None:
            # nobody may write these shared arrays while another rank reads them
            self.comm.barrier()
            self._dirty = False
            if clock:
                clock.lap("wait")

    def _start_by_chunks(self, inputs, start, trip) -> None:
        """The round trip's inverse x-FFTs a chunk of kept ky rows at a time, the
        chunks made by ``start`` (see :meth:`round_trip`), then where the block
        loop reads them: the inputs' own rows (one rank), the shared columns, or
        the inputs and an exchange."""
        nkz, clock = self.grid.nz_kept, self.clock
        m = len(inputs)
        shared = self.P > 1 and self._shared is not None
        if shared:
            self._settle_shared(trip)
        targets = trip["cols"][:m] if shared else inputs
        for lo, hi in trip["chunks"]:
            width = hi - lo
            bufs = [buf[:, :width] for buf in trip["chunk_buffers"][:m]]
            start(bufs, lo, hi)
            plan = trip["chunk_plans_inverse"][width]
            for buf in bufs:
                plan.update_arrays(buf, buf)
                plan.execute()
            self._copy_by_planes([t[:, lo:hi, :nkz] for t in targets], bufs, trip)
            if clock:
                clock.count("x inverse", m * width * nkz)
                clock.lap("x inverse")
        if shared:
            self.comm.barrier()
        elif self.P > 1:
            for spec, mid in zip(inputs, trip["rows"]):
                self._exchange.to_x_slabs(spec, mid)
        if clock:
            clock.lap("wait" if shared else "x inverse")

    def _settle_shared(self, trip) -> None:
        """Before a round trip writes the shared columns: if a plain transform
        used the turn arrays, restore their zeros outside the kept ky and wait
        until every rank is done reading them."""
        if not self._dirty:
            return
        nkz = self.grid.nz_kept
        for mine in trip["rows"][:len(self._shared)]:
            for a, b in trip["y_gaps"]:
                mine[:, a:b, :nkz] = 0
        self.comm.barrier()
        if self.clock:
            self.clock.lap("wait")

    @staticmethod
    def _copy_by_planes(targets, sources, trip) -> None:
        """``targets[j][...] = sources[j]``, a few x-planes of every field in turn:
        the order the block loop wrote the rows in, several streams at once
        (field by field, the shared columns read at a third of the speed)."""
        step = trip["chunk_planes"]
        for i0 in range(0, targets[0].shape[0] if targets else 0, step):
            for target, source in zip(targets, sources):
                np.copyto(target[i0:i0 + step], source[i0:i0 + step])

    def _x_forward(self, sources, outputs, trip) -> None:
        """The round trip's x-FFTs into ``outputs`` (from shared columns: a copy,
        then in place, as the inverse)."""
        nkz, clock = self.grid.nz_kept, self.clock
        for source, spec in zip(sources, outputs):
            if source is not spec:
                for a, b in self._band_runs:
                    np.copyto(spec[:, a:b, :nkz], source[:, a:b, :nkz])
        for spec in outputs:
            for (a, b), plan in zip(self._band_runs, trip["x_forward"]):
                plan.update_arrays(spec[:, a:b, :nkz], spec[:, a:b, :nkz])
                plan.execute()
                if clock:
                    clock.count("x forward", (b - a) * nkz)
        if clock:
            clock.lap("x forward")

    def _finish_by_chunks(self, sources, finish, trip) -> None:
        """The round trip's x-FFTs a chunk of kept ky rows at a time, handed to
        ``finish`` (see :meth:`round_trip`)."""
        nkz, clock = self.grid.nz_kept, self.clock
        k = len(sources)
        for lo, hi in trip["chunks"]:
            rows = hi - lo
            bufs = [buf[:, :rows] for buf in trip["chunk_buffers"][:k]]
            self._copy_by_planes(bufs, [src[:, lo:hi, :nkz] for src in sources], trip)
            plan = trip["chunk_plans"][rows]
            for buf in bufs:
                plan.update_arrays(buf, buf)
                plan.execute()
            if clock:
                clock.count("x forward", k * rows * nkz)
                clock.lap("x forward")
            finish(bufs, lo, hi)

    def _claimed_blocks(self, counter, trip):
        """First planes of the blocks this rank takes, claimed one at a time from a
        node counter: a rank that runs faster takes more (dynamic self-scheduling),
        so the barrier after the blocks waits less for the slower one. Every
        block is claimed once: claim ``k`` maps to block ``(k % P) * share + k // P``,
        a permutation of the ``P * share`` blocks."""
        slot = trip["slot"]
        trip["slot"] ^= 1
        if self.comm.rank == 0:
            # the other counter was last used in the previous round trip, which every
            # rank left through a barrier; the next one starts after another barrier
            counter.reset(slot ^ 1)
        nb = trip["planes"]
        blocks = self.grid.shape[0] // nb
        share = blocks // self.P   # whole: nb divides every rank's plane count
        while True:
            j = counter.fetch_add(slot)
            if j >= blocks:
                return
            # claim k goes to rank k % P's part of the planes: ranks taking turns
            # stay in their own part, and the one ahead moves on into the next
            # (in one process, steps alternating, 128^3 on 2 ranks: 1.9-5.0%
            # faster steps than claiming the planes in order, 3 launches per model)
            yield ((j % self.P) * share + j // self.P) * nb

    @property
    def block_planes(self) -> int:
        """x-planes per block of :meth:`round_trip`: the largest divisor of the
        local plane count whose real block fits in :data:`BLOCK_BYTES`."""
        g = self.grid
        plane = g.shape[1] * g.shape[2] * 8
        fits = [b for b in range(1, g.nx_local + 1)
                if g.nx_local % b == 0 and b * plane <= BLOCK_BYTES]
        return max(fits) if fits else 1

    def prepare_round_trip(self, count: int) -> None:
        """Plans and work blocks for round trips of up to ``count`` fields.

        Collective on all ranks. Planning overwrites ``self.spectral`` (and the
        shared arrays): call it before those hold data.
        """
        trip = self._trip
        if trip is not None and len(trip["blocks"]) >= count:
            return
        g, flags, threads = self.grid, self._flags, self._threads
        nb = self.block_planes
        nxl, ny, nzc = g.nx_local, g.shape[1], g.nzc
        blocks = [pyfftw.empty_aligned((nb, ny, g.shape[2]), dtype=np.float64)
                  for _ in range(count)]
        trip = {"planes": nb, "blocks": blocks}
        if self.P == 1:
            rows = [self.spectral]
        elif self._shared is not None:
            # the two arrays of the plain transforms, and more when needed
            extra = [self.comm.node_shared_array((g.shape[0], ny, nzc), np.complex128)
                     for _ in range(count - len(self._shared))]
            if any(a is None for a in extra):
                raise RuntimeError("MPI could not make the round trip's shared arrays")
            arrays = self._shared + extra
            x0, y0 = g.x_start, g.y_start
            rows = [a[x0:x0 + nxl] for a in arrays]
            trip["cols"] = [a[:, y0:y0 + g.ny_local] for a in arrays]
            trip["arrays"] = arrays
            trip["counter"] = self.comm.node_counter(2)
            trip["slot"] = 0
            self._dirty = True  # planning wrote into them: synchronise before first use
        else:
            rows = [pyfftw.empty_aligned((nxl, ny, nzc), dtype=np.complex128)
                    for _ in range(count)]
        trip["rows"] = rows
        # a block's rows start at a multiple of the plane size: plan unaligned if
        # that is not a multiple of the SIMD alignment
        aligned = (nb * ny * nzc * 16) % pyfftw.simd_alignment == 0
        bflags = flags if aligned else flags + ("FFTW_UNALIGNED",)
        # the x-transforms over the kept (ky, kz) columns only, in place. With
        # shared rows the round trip copies into and out of the shared columns:
        # in one process with steps alternating (128^3, 2 ranks, 2 launches per
        # model) 2.8-4.1% faster steps than FFTs straight between them, as the
        # first read of the shared columns after the blocks is slow (DEVELOPERS.md)
        nkz = g.nz_kept
        trip["x_inverse"], trip["x_forward"] = (
            [pyfftw.FFTW(self.spectral[:, a:b, :nkz], self.spectral[:, a:b, :nkz], axes=(0,),
                         direction=direction, flags=flags, threads=threads)
             for a, b in self._band_runs]
            for direction in ("FFTW_BACKWARD", "FFTW_FORWARD"))
        # kept ky over the whole y axis, and the gaps between them
        c = g.cutoff[1]
        trip["y_runs"] = [(0, c + 1), (ny - c, ny)]
        trip["y_gaps"] = [(c + 1, ny - c)]
        # chunks of kept ky rows for round trips with ``start`` and ``finish``
        per_row = count * g.shape[0] * nkz * 16
        most = max(1, CHUNK_BYTES // per_row)
        chunks = []
        for a, b in self._band_runs:
            parts = -(-(b - a) // most)
            edges = [a + ((b - a) * q) // parts for q in range(parts + 1)]
            chunks += list(zip(edges[:-1], edges[1:]))
        trip["chunks"] = chunks
        widest = max((hi - lo for lo, hi in chunks), default=1)
        trip["chunk_buffers"] = [pyfftw.empty_aligned((g.shape[0], widest, nkz),
                                                      dtype=np.complex128) for _ in range(count)]
        trip["chunk_plans"], trip["chunk_plans_inverse"] = {}, {}
        for width in sorted({hi - lo for lo, hi in chunks}):
            view = trip["chunk_buffers"][0][:, :width]
            for key, direction in (("chunk_plans", "FFTW_FORWARD"),
                                   ("chunk_plans_inverse", "FFTW_BACKWARD")):
                trip[key][width] = pyfftw.FFTW(view, view, axes=(0,), direction=direction,
                                               flags=flags, threads=threads)
        # x-planes per field and turn of the chunk copies: 16 at 128^3 (where it
        # was probed: 2, 8 and 32 gave the same), as many bytes elsewhere
        trip["chunk_planes"] = max(1, 16 * 128 // g.shape[0])
        cb = pyfftw.empty_aligned((nb, ny, nzc), dtype=np.complex128)
        trip["cblock"] = cb
        trip["y_inverse"] = pyfftw.FFTW(rows[0][:nb, :, :nkz], cb[:, :, :nkz], axes=(1,),
                                        direction="FFTW_BACKWARD", flags=bflags, threads=threads)
        trip["z_inverse"] = pyfftw.FFTW(cb, blocks[0], axes=(2,), direction="FFTW_BACKWARD",
                                        flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads)
        trip["z_forward"] = pyfftw.FFTW(blocks[0], cb, axes=(2,), direction="FFTW_FORWARD",
                                        flags=flags, threads=threads)
        trip["y_forward"] = pyfftw.FFTW(cb[:, :, :nkz], cb[:, :, :nkz], axes=(1,),
                                        direction="FFTW_FORWARD", flags=flags, threads=threads)
        # outside the kept ky the rows stay zero: the forward pass writes only
        # the kept ky and the x-inverse only the kept columns (planning wrote there)
        for mine in rows:
            mine[...] = 0
        self._trip = trip
