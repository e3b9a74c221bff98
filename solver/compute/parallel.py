"""The communicator: MPI through mpi4py when available, a single rank otherwise.

mpi4py is imported lazily so that a machine without MPI still runs serially.
Set ``SHEARMIX_SERIAL=1`` to skip MPI even where it is installed.
"""
from __future__ import annotations

import atexit
import contextlib
import os
import sys
import traceback

import numpy as np


class SerialComm:
    """One rank; the same methods as :class:`MPIComm`."""

    rank = 0
    size = 1
    is_mpi = False

    def sum(self, value):
        return value

    def max(self, value):
        return value

    def min(self, value):
        return value

    def bcast(self, obj, root=0):
        return obj

    def gather(self, obj, root=0):
        return [obj]

    def ranks_on_node(self) -> int:
        return 1

    def barrier(self):
        pass

    def abort(self, code=1):
        raise SystemExit(code)


class MPIComm:
    """Thin wrapper over an mpi4py communicator with the calls the engine needs."""

    is_mpi = True

    def __init__(self, comm):
        from mpi4py import MPI
        self._MPI = MPI
        self.comm = comm
        self.rank = comm.Get_rank()
        self.size = comm.Get_size()

    def _reduce(self, value, op):
        if isinstance(value, np.ndarray):
            out = np.empty_like(value)
            self.comm.Allreduce(value, out, op=op)
            return out
        return self.comm.allreduce(value, op=op)

    def sum(self, value):
        return self._reduce(value, self._MPI.SUM)

    def max(self, value):
        return self._reduce(value, self._MPI.MAX)

    def min(self, value):
        return self._reduce(value, self._MPI.MIN)

    def bcast(self, obj, root=0):
        return self.comm.bcast(obj, root=root)

    def gather(self, obj, root=0):
        """Every rank's ``obj`` in rank order on ``root``, None elsewhere."""
        return self.comm.gather(obj, root=root)

    def ranks_on_node(self) -> int:
        """How many ranks of this communicator share this rank's node (shared memory)."""
        if not hasattr(self, "_on_node"):
            local = self.comm.Split_type(self._MPI.COMM_TYPE_SHARED)
            self._on_node = local.Get_size()
            local.Free()
        return self._on_node

    def node_shared_array(self, shape, dtype, align: int = 64) -> np.ndarray | None:
        """An array in memory shared by all ranks (one MPI-3 shared window), or None.

        None when the ranks do not all share one node.
        """
        if self.ranks_on_node() != self.size:
            return None
        MPI = self._MPI
        dtype = np.dtype(dtype)
        nbytes = int(np.prod(shape)) * dtype.itemsize + align
        node = self.comm.Split_type(MPI.COMM_TYPE_SHARED)
        try:
            win = MPI.Win.Allocate_shared(nbytes if self.rank == 0 else 0, 1, comm=node)
            buf, _ = win.Shared_query(0)
        except MPI.Exception:  # an MPI without usable shared windows: pass messages
            node.Free()
            return None
        raw = np.frombuffer(buf, dtype=np.uint8, count=nbytes)
        start = (-raw.ctypes.data) % align
        self._windows = getattr(self, "_windows", []) + [(win, node)]
        if self.max(start) != self.min(start):  # mapped at different offsets: no common layout
            return None
        return raw[start:start + nbytes - align].view(dtype).reshape(shape)

    def node_counter(self, slots: int) -> "SharedCounter | None":
        """Integer counters all ranks of the node update atomically (collective), or
        None where :meth:`node_shared_array` would give None."""
        if self.ranks_on_node() != self.size:
            return None
        MPI = self._MPI
        node = self.comm.Split_type(MPI.COMM_TYPE_SHARED)
        try:
            win = MPI.Win.Allocate_shared(8 * slots if self.rank == 0 else 0, 8, comm=node)
        except MPI.Exception:
            node.Free()
            return None
        self._windows = getattr(self, "_windows", []) + [(win, node)]
        counter = SharedCounter(win, MPI, slots)
        if self.rank == 0:
            for slot in range(slots):
                counter.reset(slot)
        self.barrier()
        return counter

    def slab_exchange(self, nx_local: int, ny: int, nz: int) -> "SlabExchange":
        """The transpose between x-slabs and y-slabs of complex ``(., ., nz)`` arrays."""
        return SlabExchange(self, nx_local, ny, nz)

    def barrier(self):
        self.comm.Barrier()

    def abort(self, code=1):
        self.comm.Abort(code)


class SlabExchange:
    """Global transpose of a complex array between x-slabs and y-slabs, without packing.

    ``x-slab`` ``(nx_local, ny, nz)`` on every rank <-> ``y-slab`` ``(nx, ny_local, nz)``.
    The part of an x-slab bound for rank j (its y-columns ``j*ny_local ...``) is
    ``nx_local`` strided runs of ``ny_local*nz`` values; an MPI vector type
    describes it, so MPI reads and writes it in place instead of the program
    copying it to a contiguous buffer first (one memory pass saved each way;
    the y-slab side is already contiguous per rank).
    """

    def __init__(self, comm: MPIComm, nx_local: int, ny: int, nz: int):
        MPI = comm._MPI
        self.comm = comm.comm
        ny_local = ny // comm.size
        self._value = MPI.C_DOUBLE_COMPLEX
        run = ny_local * nz
        self._columns = self._value.Create_vector(nx_local, run, ny * nz) \
            .Create_resized(0, run * 16)
        self._columns.Commit()
        self._count = nx_local * run

    def to_y_slabs(self, x_slab: np.ndarray, y_slab: np.ndarray) -> None:
        self.comm.Alltoall([x_slab, 1, self._columns], [y_slab, self._count, self._value])

    def to_x_slabs(self, y_slab: np.ndarray, x_slab: np.ndarray) -> None:
        self.comm.Alltoall([y_slab, self._count, self._value], [x_slab, 1, self._columns])


class SharedCounter:
    """Counters in an MPI-3 window on rank 0 of the node, updated with
    ``MPI_Fetch_and_op`` (atomic; about 3 us per update between two ranks here)."""

    def __init__(self, win, MPI, slots: int):
        self._win, self._MPI, self.slots = win, MPI, slots
        self._one = np.ones(1, dtype=np.int64)
        self._zero = np.zeros(1, dtype=np.int64)
        self._got = np.zeros(1, dtype=np.int64)
        win.Lock_all(MPI.MODE_NOCHECK)  # one passive epoch for the window's life
        self._open = True
        # MPI_Finalize (which mpi4py registers at exit, before this) must not meet
        # an open epoch: some MPI libraries hang or abort there
        atexit.register(self.close)

    def close(self) -> None:
        """End the access epoch (local; the window itself is freed with MPI)."""
        if self._open:
            self._open = False
            try:
                self._win.Unlock_all()
            except self._MPI.Exception:  # pragma: no cover - MPI already finalised
                pass

    def fetch_add(self, slot: int) -> int:
        """Add one to counter ``slot``; its value before the addition."""
        self._win.Fetch_and_op(self._one, self._got, 0, slot, self._MPI.SUM)
        self._win.Flush(0)
        return int(self._got[0])

    def reset(self, slot: int) -> None:
        """Set counter ``slot`` to zero (atomically)."""
        self._win.Fetch_and_op(self._zero, self._got, 0, slot, self._MPI.REPLACE)
        self._win.Flush(0)


def world():
    """The world communicator, or a serial one when MPI is absent or disabled."""
    if os.environ.get("SHEARMIX_SERIAL"):
        return SerialComm()
    try:
        from mpi4py import MPI
    except ImportError:
        return SerialComm()
    if MPI.COMM_WORLD.Get_size() == 1:
        return SerialComm()
    return MPIComm(MPI.COMM_WORLD)


@contextlib.contextmanager
def ending_every_rank(code: int = 1):
    """Run the body; an exception escaping it on one rank of several ends them all.

    Its traceback is printed and ``MPI_Abort(code)`` ends every rank, so no
    rank waits for ever in a collective call the failed one will never make.
    Serially (or before MPI was started) the exception propagates unchanged.
    """
    try:
        yield
    except Exception:
        MPI = sys.modules.get("mpi4py.MPI")
        if MPI is not None and MPI.Is_initialized() and not MPI.Is_finalized() \
                and MPI.COMM_WORLD.Get_size() > 1:
            traceback.print_exc()
            sys.stderr.flush()
            MPI.COMM_WORLD.Abort(code)
        raise
