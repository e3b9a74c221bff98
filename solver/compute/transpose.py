"""How a slab transform moves data between x-slabs and ky-columns: one strategy per kind.

:class:`SingleRank`: no transpose (one rank holds everything; a single 3D plan).
:class:`SharedMemory`: all ranks on one node write their (y, z) transforms into a
global array in MPI-3 shared memory and, after a barrier, transform their own
ky-columns over x straight out of it (no message).
:class:`Alltoall`: an ``Alltoall`` whose outgoing blocks an MPI vector type
describes (:class:`shearmix.solver.compute.parallel.SlabExchange`).

Each strategy does the plain transforms' transpose and supplies the round trip
(:class:`shearmix.solver.compute.roundtrip.RoundTrip`) its rows: where the
block loop reads and writes each field's x-slab, how the x-inverse results get
there and how the forward results come back to the ky-columns.
:func:`transpose_for` picks one from ``compute.transpose``.
"""
from __future__ import annotations

import numpy as np
import pyfftw

from shearmix.solver.compute.options import ComputeOptionError


class _Transpose:
    """What the round trip asks of every kind; here, of ranks that each keep to
    their own x-planes and hold their inputs' rows themselves."""

    def start_targets(self, inputs, plan):
        return inputs

    def block_starts(self, plan, rows_in, rows_out):
        return rows_in, rows_out, range(0, self.fft.grid.nx_local, plan.planes)

    def end_trip(self, clock):
        pass


class SingleRank(_Transpose):
    """One rank: the slab is the whole grid and the x-FFT runs on it in place."""

    kind = "single"

    def __init__(self, fft, flags, threads):
        self.fft = fft
        self._fwd = pyfftw.FFTW(fft.physical, fft.spectral, axes=(0, 1, 2),
                                direction="FFTW_FORWARD", flags=flags, threads=threads)
        self._inv = pyfftw.FFTW(fft.spectral, fft.physical, axes=(0, 1, 2),
                                direction="FFTW_BACKWARD",
                                flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads)
        self._band_yz = None

    # ------------------------------------------------------------ plain transforms
    def band_source(self, flags, threads):
        """Plans the (y, z) part of the band-pruned forward; its x-FFT source."""
        fft = self.fft
        self._band_yz = pyfftw.FFTW(fft.physical, fft.spectral, axes=(1, 2),
                                    direction="FFTW_FORWARD", flags=flags, threads=threads)
        return fft.spectral

    def forward(self, physical, spectral):
        self._fwd.update_arrays(physical, spectral)
        self._fwd.execute()

    def band_columns(self, physical, spectral):
        self._band_yz.update_arrays(physical, spectral)
        self._band_yz.execute()
        return spectral

    def inverse(self, spectral, physical):
        self._inv.update_arrays(spectral, physical)
        self._inv.execute()

    # ------------------------------------------------------------ round trip
    def trip_rows(self, count):
        # the block loop reads the inputs' own rows: one array to plan with
        return [self.fft.spectral]

    def after_start(self, inputs, outputs, plan):
        return inputs, outputs

    def to_columns(self, outputs, plan, clock):
        return outputs


class _Slabs(_Transpose):
    """The (y, z) and x plans of several ranks, between x-slab rows and ky-columns."""

    def _plan(self, fft, flags, threads, mid_out, x_in):
        self._fwd_yz = pyfftw.FFTW(fft.physical, mid_out, axes=(1, 2),
                                   direction="FFTW_FORWARD", flags=flags, threads=threads)
        self._inv_yz = pyfftw.FFTW(mid_out, fft.physical, axes=(1, 2),
                                   direction="FFTW_BACKWARD",
                                   flags=flags + ("FFTW_DESTROY_INPUT",), threads=threads)
        self._fwd_x = pyfftw.FFTW(x_in, fft.spectral, axes=(0,),
                                  direction="FFTW_FORWARD", flags=flags, threads=threads)
        self._inv_x = pyfftw.FFTW(fft.spectral, x_in, axes=(0,),
                                  direction="FFTW_BACKWARD", flags=flags, threads=threads)

    def forward(self, physical, spectral):
        source = self.band_columns(physical, spectral)
        self._fwd_x.update_arrays(source, spectral)
        self._fwd_x.execute()


class SharedMemory(_Slabs):
    """All ranks on one node: the transposes are writes into node-shared arrays.

    Two shared arrays serve the plain transforms in turn: a rank may start
    transform t+1 while another still reads transform t's array; it cannot start
    t+2 before everyone has passed t+1's barrier, i.e. finished reading t's. A
    round trip that follows must wait for the readers first (``dirty``).
    """

    kind = "shared"

    def __init__(self, fft, flags, threads, arrays):
        self.fft, self.comm = fft, fft.comm
        g = fft.grid
        x0, y0 = g.x_start, g.y_start
        self.arrays = arrays
        self._rows = [a[x0:x0 + g.nx_local] for a in arrays]      # my x-slab
        self._cols = [a[:, y0:y0 + g.ny_local] for a in arrays]   # my ky-columns
        self._turn = 0
        self._dirty = False
        self._plan(fft, flags, threads, self._rows[0], self._cols[0])
        #: the round trip's arrays and columns, and the node counter its blocks
        #: are claimed from (set by :meth:`trip_rows`)
        self.trip_arrays = self.trip_cols = self.counter = None
        self._slot = 0

    # ------------------------------------------------------------ plain transforms
    def band_source(self, flags, threads):
        return self._cols[0]

    def _next_turn(self) -> int:
        turn = self._turn
        self._turn ^= 1
        self._dirty = True
        return turn

    def band_columns(self, physical, spectral):
        """(y, z) transforms into the shared array, then this rank's ky-columns of it."""
        turn = self._next_turn()
        self._fwd_yz.update_arrays(physical, self._rows[turn])
        self._fwd_yz.execute()
        self.comm.barrier()
        return self._cols[turn]

    def inverse(self, spectral, physical):
        turn = self._next_turn()
        self._inv_x.update_arrays(spectral, self._cols[turn])
        self._inv_x.execute()
        self.comm.barrier()
        self._inv_yz.update_arrays(self._rows[turn], physical)
        self._inv_yz.execute()

    # ------------------------------------------------------------ round trip
    def trip_rows(self, count):
        """The two arrays of the plain transforms, and more when needed; the node
        counter the ranks claim blocks from."""
        g = self.fft.grid
        extra = [self.comm.node_shared_array((g.shape[0], g.shape[1], g.nzc), np.complex128)
                 for _ in range(count - len(self.arrays))]
        if any(a is None for a in extra):
            raise RuntimeError("MPI could not make the round trip's shared arrays")
        arrays = self.arrays + extra
        x0, y0 = g.x_start, g.y_start
        self.trip_arrays = arrays
        self.trip_cols = [a[:, y0:y0 + g.ny_local] for a in arrays]
        self.counter = self.comm.node_counter(2)
        if self.counter is None:
            raise RuntimeError("MPI could not make the round trip's node counter")
        self._slot = 0
        self._dirty = True  # planning wrote into them: synchronise before first use
        return [a[x0:x0 + g.nx_local] for a in arrays]

    def settle(self, plan, clock):
        """Before a round trip writes the shared columns: if a plain transform
        used the turn arrays, restore their zeros outside the kept ky and wait
        until every rank is done reading them."""
        if not self._dirty:
            return
        nkz = self.fft.grid.nz_kept
        for mine in plan.rows[:len(self.arrays)]:
            for a, b in plan.y_gaps:
                mine[:, a:b, :nkz] = 0
        self.comm.barrier()
        if clock:
            clock.lap("wait")

    def start_targets(self, inputs, plan):
        self.settle(plan, self.fft.clock)
        return self.trip_cols[:len(inputs)]

    def after_start(self, inputs, outputs, plan):
        self.comm.barrier()
        return plan.rows[:len(inputs)], plan.rows[:len(outputs)]

    def block_starts(self, plan, rows_in, rows_out):
        """Any rank may take any rank's planes: all rows are in shared memory."""
        m, k = len(rows_in), len(rows_out)
        return self.trip_arrays[:m], self.trip_arrays[:k], self._claimed_blocks(plan)

    def _claimed_blocks(self, plan):
        """First planes of the blocks this rank takes, claimed one at a time from a
        node counter: a rank that runs faster takes more (dynamic self-scheduling),
        so the barrier after the blocks waits less for the slower one. Every
        block is claimed once: claim ``k`` maps to block ``(k % P) * share + k // P``,
        a permutation of the ``P * share`` blocks."""
        slot = self._slot
        self._slot ^= 1
        if self.comm.rank == 0:
            # the other counter was last used in the previous round trip, which every
            # rank left through a barrier; the next one starts after another barrier
            self.counter.reset(slot ^ 1)
        nb, ranks = plan.planes, self.comm.size
        blocks = self.fft.grid.shape[0] // nb
        share = blocks // ranks   # whole: nb divides every rank's plane count
        while True:
            j = self.counter.fetch_add(slot)
            if j >= blocks:
                return
            # claim k goes to rank k % P's part of the planes: ranks taking turns
            # stay in their own part, and the one ahead moves on into the next
            yield ((j % ranks) * share + j // ranks) * nb

    def to_columns(self, outputs, plan, clock):
        self.comm.barrier()
        if clock:
            clock.lap("wait")
        return self.trip_cols[:len(outputs)]

    def end_trip(self, clock):
        # nobody may write these shared arrays while another rank reads them
        self.comm.barrier()
        self._dirty = False
        if clock:
            clock.lap("wait")


class Alltoall(_Slabs):
    """Ranks on several nodes (or asked for): the transposes are ``Alltoall`` messages."""

    kind = "alltoall"

    def __init__(self, fft, flags, threads):
        self.fft = fft
        g = fft.grid
        self._mid = pyfftw.empty_aligned((g.nx_local, g.shape[1], g.nzc), dtype=np.complex128)
        self._exchange = fft.comm.slab_exchange(g.nx_local, g.shape[1], g.nzc)
        self._plan(fft, flags, threads, self._mid, fft.spectral)

    # ------------------------------------------------------------ plain transforms
    def band_source(self, flags, threads):
        return self.fft.spectral

    def band_columns(self, physical, spectral):
        self._fwd_yz.update_arrays(physical, self._mid)
        self._fwd_yz.execute()
        self._exchange.to_y_slabs(self._mid, spectral)
        return spectral

    def inverse(self, spectral, physical):
        self._inv_x.update_arrays(spectral, spectral)
        self._inv_x.execute()
        self._exchange.to_x_slabs(spectral, self._mid)
        self._inv_yz.update_arrays(self._mid, physical)
        self._inv_yz.execute()

    # ------------------------------------------------------------ round trip
    def trip_rows(self, count):
        g = self.fft.grid
        return [pyfftw.empty_aligned((g.nx_local, g.shape[1], g.nzc), dtype=np.complex128)
                for _ in range(count)]

    def after_start(self, inputs, outputs, plan):
        for spec, mid in zip(inputs, plan.rows):
            self._exchange.to_x_slabs(spec, mid)
        return plan.rows[:len(inputs)], plan.rows[:len(outputs)]

    def to_columns(self, outputs, plan, clock):
        for mid, spec in zip(plan.rows, outputs):
            self._exchange.to_y_slabs(mid, spec)
        return outputs


def transpose_for(fft, flags, threads, choice: str):
    """The strategy of ``compute.transpose`` (``choice``) for ``fft``'s communicator."""
    comm, g = fft.comm, fft.grid
    if comm.size == 1:
        return SingleRank(fft, flags, threads)
    if choice != "alltoall":
        # on one node: two global (kx, ky, kz) arrays in shared memory, used in turn
        arrays = [comm.node_shared_array((g.shape[0], g.shape[1], g.nzc), np.complex128)
                  for _ in range(2)]
        if all(a is not None for a in arrays):
            return SharedMemory(fft, flags, threads, arrays)
        if choice == "shared":
            raise ComputeOptionError("compute.transpose: shared needs all ranks on one node "
                                     "with MPI-3 shared memory; use auto or alltoall")
    return Alltoall(fft, flags, threads)
