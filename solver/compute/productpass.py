"""Which way the advection's products are made: block by block, or with whole arrays.

Both make the same products with the same transforms (results equal to
round-off, :mod:`shearmix.solver.physics.tendency`). Block by block
(:meth:`shearmix.solver.compute.transforms.SlabTransform.round_trip`) the physical fields live
only in cache-sized blocks; with whole arrays each transform is one FFTW plan
over the slab. The block-wise pass pays when the physical fields of all ranks
on a node overflow the last-level cache, and only then (docs/performance.md).

Inside a virtual machine the last-level cache Linux reports is the host
socket's, shared with cores the guest does not see, so the budget is the
reported size capped at :data:`CACHE_CAP_PER_CPU` per CPU that shares it.
"""
from __future__ import annotations

import os

#: assumed when the machine does not say (a common server L3 size)
DEFAULT_CACHE_BYTES = 32 * 1024 ** 2

#: the most last-level cache counted per CPU sharing it. Server parts carry
#: about 1.5-5 MiB of L3 per core (common practice, from vendors' data sheets,
#: from memory). Measured on the 2-core Xeon guest (one process, steps
#: alternating, 1 and 2 ranks, both models): block-wise steps took 0.72-1.00
#: of the whole-array ones at 64^3 (fields 10-17 MB) and 1.13-1.24 at 32^3
#: (1.3-2.1 MB), so the budget there, 2 x 4 MiB, lies between.
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


def product_fields(model_has_T_advection: bool) -> int:
    """Physical fields on the grid at once: u, v, w (, T) in, 5 (+3) products out."""
    return 8 if model_has_T_advection else 5


def choose_product_pass(setting: str, node_bytes: float) -> str:
    """The pass ``compute.product_pass`` asks for: ``'blocks'`` or ``'whole'`` as
    set, or for ``'auto'``, ``'blocks'`` when the product fields of all ranks on
    a node (``node_bytes``) overflow the last-level cache, else ``'whole'``."""
    if setting != "auto":
        return setting
    return "blocks" if node_bytes > last_level_cache_bytes() else "whole"
