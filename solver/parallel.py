"""The communicator: MPI through mpi4py when available, a single rank otherwise.

mpi4py is imported lazily so that a machine without MPI still runs serially.
Set ``SHEARMIX_SERIAL=1`` to skip MPI even where it is installed.
"""
from __future__ import annotations

import os

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

    def alltoall(self, send, recv):  # pragma: no cover - never called with one rank
        np.copyto(recv, send)

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

    def alltoall(self, send, recv):
        """Exchange equal contiguous blocks: block j of ``send`` goes to rank j."""
        self.comm.Alltoall(send, recv)

    def barrier(self):
        self.comm.Barrier()

    def abort(self, code=1):
        self.comm.Abort(code)


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
