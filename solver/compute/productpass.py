"""The product pass: how the advection's products are made, by blocks or with whole arrays.

The tendency (:class:`shearmix.solver.physics.tendency.PseudoSpectralTendency`)
says what is computed: the velocity from the frame amplitudes, the products on
the grid, the advection from their transforms. A pass says how: with whole
arrays (:class:`WholeArrays`: every field on the grid at once, one plain
transform each) or block by block (:class:`ByBlocks`: the round trip of
:mod:`shearmix.solver.compute.roundtrip`, in which the physical fields live
only in cache-sized blocks of x-planes, and with the compiled kernels the
velocity is made and the advection assembled a chunk of ky rows at a time
while they are in cache). Both make the same products with the same
transforms (results equal to round-off). The block-wise pass pays when the
physical fields of all ranks on a node overflow the last-level cache, and
only then (docs/performance.md): ``compute.product_pass: auto`` chooses so.

Inside a virtual machine the last-level cache Linux reports is the host
socket's, shared with cores the guest does not see, so the budget is the
reported size capped at :data:`CACHE_CAP_PER_CPU` per CPU that shares it.
"""
from __future__ import annotations

import os

import numpy as np

from shearmix.solver.compute.roundtrip import RoundTrip
from shearmix.solver.grid import true_runs

#: assumed when the machine does not say (a common server L3 size)
DEFAULT_CACHE_BYTES = 32 * 1024 ** 2

#: the most last-level cache counted per CPU sharing it. Server parts carry
#: about 1.5-5 MiB of L3 per core (common practice, from vendors' data sheets,
#: from memory). The switch between the two passes then falls between 32^3
#: and 64^3 on a 2-core machine, as measured (docs/performance.md).
CACHE_CAP_PER_CPU = 4 * 1024 ** 2


def cpu_count_in_list(text: str) -> int:
    """CPUs in a Linux CPU list such as ``0-3,8,10-11`` (sysfs ``shared_cpu_list``)."""
    count = 0
    for part in text.strip().split(","):
        if not part:
            continue
        lo, _, hi = part.partition("-")
        count += int(hi or lo) - int(lo) + 1
    return count


def last_level_cache_bytes(base: str = "/sys/devices/system/cpu/cpu0/cache") -> int:
    """The cache budget of the product pass: this CPU's largest cache from Linux
    sysfs, capped at :data:`CACHE_CAP_PER_CPU` times the CPUs listed as sharing
    it (``DEFAULT_CACHE_BYTES`` if sysfs does not say)."""
    best, sharing = 0, 0
    try:
        for entry in os.listdir(base):
            if not entry.startswith("index"):
                continue
            with open(os.path.join(base, entry, "size")) as fh:
                text = fh.read().strip()
            scale = {"K": 1024, "M": 1024 ** 2, "G": 1024 ** 3}.get(text[-1:], 1)
            size = int(text.rstrip("KMG")) * scale
            if size > best:
                best, sharing = size, 0
                try:
                    with open(os.path.join(base, entry, "shared_cpu_list")) as fh:
                        sharing = cpu_count_in_list(fh.read())
                except (OSError, ValueError):
                    sharing = 0
    except (OSError, ValueError):
        best = 0
    if not best:
        return DEFAULT_CACHE_BYTES
    return min(best, CACHE_CAP_PER_CPU * sharing) if sharing else best


def product_fields(advected_scalars: int) -> int:
    """Physical fields on the grid at once: u, v, w and the scalars in; 5 products of
    the velocity and 3 per advected scalar out."""
    return 5 + 3 * int(advected_scalars)


class WholeArrays:
    """The products with whole arrays: ``inputs`` fields to the grid (one inverse
    transform each), the products over them, ``outputs`` band-pruned forward
    transforms, the advection from those. ``physics`` is the tendency."""

    blocks = chunked = False

    def __init__(self, fft, physics, inputs: int, outputs: int):
        self.fft, self.physics = fft, physics
        self.inputs, self.outputs = inputs, outputs
        count = max(inputs + 1, outputs)   # one past the inputs: the speed's work array
        #: the spectral work arrays (the transform's own first)
        self.spectral = [fft.spectral] + [fft.empty_spectral() for _ in range(max(count, 3) - 1)]
        #: the physical fields (the transform's planning buffer last)
        self.fields = [fft.empty_physical() for _ in range(count - 1)] + [fft.physical]

    def __call__(self, y, out) -> None:
        fft, physics, P, fields = self.fft, self.physics, self.spectral, self.fields
        physics.to_cartesian(y, *P[:self.inputs])
        for spec, field in zip(P[:self.inputs], fields):
            fft.inverse(spec, field)
        physics.products(fields)
        if not self.outputs:
            return
        for field, spec in zip(fields[:self.outputs], P):
            fft.forward_band(field, spec)
        clock = fft.clock
        if clock:
            clock.lap("transforms and products")
        physics.assemble_advection(P, out)
        if clock:
            clock.lap("advection assembly")


class ByBlocks:
    """The products block by block of x-planes (the round trip,
    :class:`shearmix.solver.compute.roundtrip.RoundTrip`).

    ``chunked`` (the compiled kernels): the velocity is made and the advection
    assembled a chunk of kept ky rows at a time inside the round trip (its
    ``start`` and ``finish``); only those rows of the tendency are written, the
    others zeroed (once only for :attr:`owned_output`, an array nothing else
    writes, unless :attr:`rezero_gaps`). Otherwise (the NumPy definitions,
    which work on whole arrays) the frame and the advection are whole-array
    steps before and after the round trip, whose chunks are copied from and
    back into the spectral arrays.
    """

    blocks = True

    def __init__(self, fft, physics, inputs: int, outputs: int, chunked: bool):
        self.fft, self.physics = fft, physics
        self.inputs, self.chunked = inputs, chunked
        self.trip = RoundTrip(fft, outputs)
        self.spectral = [fft.spectral] + [fft.empty_spectral() for _ in range(outputs - 1)]
        #: local ky rows outside the 2/3-rule band, as (start, stop) runs
        self._gaps = true_runs(~fft.grid.keep_y)
        self.owned_output = None
        #: rezero the rows outside the kept ky every time (something else lands there)
        self.rezero_gaps = False
        self._owned_clean = False
        self._y = self._out = None

    def __call__(self, y, out) -> None:
        P, physics, clock = self.spectral, self.physics, self.fft.clock
        inputs = P[:self.inputs]
        if self.chunked:
            self._y, self._out = y, out
            self.trip(inputs, P, physics.products, self._advection_rows, self._velocity_rows)
            owned = out is self.owned_output and not self.rezero_gaps
            if not (owned and self._owned_clean):
                for a, b in self._gaps:
                    out[:, :, a:b] = 0
            self._owned_clean = owned
            if clock:
                clock.lap("advection assembly")
            return
        physics.to_cartesian(y, *P[:self.inputs])
        if clock:
            clock.lap("frame to Cartesian")
        self.trip(inputs, P, physics.products, self._rows_back, self._rows_out)
        physics.assemble_advection(P, out)
        if clock:
            clock.lap("advection assembly")

    def _rows_out(self, chunks, lo, hi) -> None:
        """``start`` with whole-array inputs: their rows ``lo:hi``."""
        nkz = self.fft.grid.nz_kept
        for chunk, spec in zip(chunks, self.spectral):
            np.copyto(chunk, spec[:, lo:hi, :nkz])

    def _rows_back(self, chunks, lo, hi) -> None:
        """``finish`` for the whole-array advection: rows ``lo:hi`` of the transforms."""
        nkz = self.fft.grid.nz_kept
        for chunk, spec in zip(chunks, self.spectral):
            np.copyto(spec[:, lo:hi, :nkz], chunk)

    def _velocity_rows(self, chunks, lo, hi) -> None:
        self.physics.to_cartesian_rows(self._y, chunks, lo, hi)
        if self.fft.clock:
            self.fft.clock.lap("frame to Cartesian")

    def _advection_rows(self, chunks, lo, hi) -> None:
        self.physics.assemble_advection_rows(chunks, self._out, lo, hi)
        if self.fft.clock:
            self.fft.clock.lap("advection assembly")


def choose_product_pass(setting: str, node_bytes: float) -> str:
    """The pass ``compute.product_pass`` asks for: ``'blocks'`` or ``'whole'`` as
    set, or for ``'auto'``, ``'blocks'`` when the product fields of all ranks on
    a node (``node_bytes``) overflow the last-level cache, else ``'whole'``."""
    if setting != "auto":
        return setting
    return "blocks" if node_bytes > last_level_cache_bytes() else "whole"
