"""Distributed real-to-complex 3D FFTs on x-slabs, built on FFTW through pyfftw.

Forward: real-to-complex over (y, z) on each x-slab, a global transpose
that gives each rank all x for its ky-columns, then a complex FFT over x.
Inverse: the same steps backwards. The transpose is a strategy
(:mod:`shearmix.solver.compute.transpose`): none on one rank (a single 3D
plan), writes into node-shared memory when all ranks share a node, or
``Alltoall`` messages (the case's ``compute.transpose``). Plans are made
once; FFTW wisdom is read from and saved to a cache file so later runs plan
in milliseconds.

:meth:`SlabTransform.forward_band` is the forward transform inside the
2/3-rule band only (what the advection needs): its x-FFT skips the columns
outside the band. The block-wise round trip of the advection's products is
:mod:`shearmix.solver.compute.roundtrip`.

Normalisation: :meth:`SlabTransform.forward` returns ``N * f_k`` (unnormalised
FFTW output); callers fold ``1/N`` into their dealiasing mask.
:meth:`SlabTransform.inverse` takes ``f_k`` and returns ``f(x)``.
"""
from __future__ import annotations

import os
import tempfile

import numpy as np
import pyfftw

from shearmix.solver.compute.transpose import transpose_for
from shearmix.solver.grid import Grid, true_runs

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
        self.flags, self.threads = (_EFFORT_FLAG[effort],), threads
        self.physical = pyfftw.empty_aligned(grid.physical_shape, dtype=np.float64)
        self.spectral = pyfftw.empty_aligned(grid.spectral_shape, dtype=np.complex128)
        #: the transpose strategy (:mod:`shearmix.solver.compute.transpose`)
        self.transpose = transpose_for(self, self.flags, threads, transpose)
        # the band-pruned forward: its x-FFT over the kept (ky, kz) columns only
        nkz = grid.nz_kept
        #: local ky rows inside the 2/3-rule band, as (start, stop) runs
        self.band_runs = true_runs(grid.keep_y)
        source = self.transpose.band_source(self.flags, threads)
        self._band_x = [pyfftw.FFTW(source[:, a:b, :nkz], self.spectral[:, a:b, :nkz],
                                    axes=(0,), direction="FFTW_FORWARD", flags=self.flags,
                                    threads=threads) for a, b in self.band_runs]
        #: a :class:`shearmix.solver.compute.phaseclock.PhaseClock` to time the round
        #: trip's phases, or None
        self.clock = None
        #: transforms performed, for the benchmark's transform floor
        self.count_forward = 0
        self.count_forward_band = 0
        self.count_inverse = 0
        self.count_round_trips = 0

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
        source = self.transpose.band_columns(physical, spectral)
        for (a, b), plan in zip(self.band_runs, self._band_x):
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
        self.transpose.forward(physical, spectral)
        return spectral

    def inverse(self, spectral: np.ndarray, physical: np.ndarray) -> np.ndarray:
        """``physical <- IFFT(spectral)`` (sum over modes). Destroys ``spectral``."""
        self.count_inverse += 1
        self.transpose.inverse(spectral, physical)
        return physical
