"""Distributed real-to-complex 3D FFTs on x-slabs, built on FFTW through pyfftw.

Forward: real-to-complex over (y, z) on each x-slab, a global transpose
that gives each rank all x for its ky-columns, then a complex FFT over x.
Inverse: the same steps backwards. When all ranks share one node the
transpose is no message at all: each rank writes its (y, z) transforms into a
global array in MPI-3 shared memory and, after a barrier, transforms its own
ky-columns over x straight out of it. Across nodes (or with
``SHEARMIX_TRANSPOSE=alltoall``) it is an ``Alltoall`` whose outgoing blocks
are described by an MPI vector type rather than packed. On one rank a single
3D plan does it all. Plans are made once; FFTW wisdom is
read from and saved to a cache file so later runs plan in milliseconds.

:meth:`SlabTransform.forward_band` is the forward transform inside the
2/3-rule band only (what the advection needs): its x-FFT skips the columns
outside the band.

Normalisation: :meth:`SlabTransform.forward` returns ``N * f_k`` (unnormalised
FFTW output); callers fold ``1/N`` into their dealiasing mask.
:meth:`SlabTransform.inverse` takes ``f_k`` and returns ``f(x)``.
"""
from __future__ import annotations

import os
import tempfile

import numpy as np
import pyfftw

from .grid import Grid

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
    comm : communicator from :mod:`solver.parallel`
    threads : FFTW threads per rank
    effort : 'estimate', 'measure' or 'patient'
    """

    def __init__(self, grid: Grid, comm, threads: int = 1, effort: str = "measure"):
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
            shared = [comm.node_shared_array((nx, ny, nzc), np.complex128) for _ in range(2)]
            self._shared = shared if all(a is not None for a in shared) else None
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
        #: transforms performed, for the benchmark's transform floor
        self.count_forward = 0
        self.count_forward_band = 0
        self.count_inverse = 0

    def _make_band_plans(self, flags, threads) -> None:
        """Plans of :meth:`forward_band`: the x-FFT over the kept (ky, kz) columns only."""
        g = self.grid
        nkz = g.nz_kept
        keep = np.concatenate([[False], g.keep_y, [False]]).astype(np.int8)
        edges = np.flatnonzero(np.diff(keep))
        self._band_runs = [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2])]
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
        # everyone has passed t+1's barrier, i.e. finished reading t's array
        turn = self._turn
        self._turn ^= 1
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
