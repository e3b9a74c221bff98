"""Which way the advection's products are made: block by block, or with whole arrays.

Both make the same products with the same transforms (results equal to
round-off, :mod:`shearmix.solver.physics.tendency`). Block by block
(:meth:`shearmix.solver.compute.transforms.SlabTransform.round_trip`) the physical fields live
only in cache-sized blocks; with whole arrays each transform is one FFTW plan
over the slab. The block-wise pass pays when the physical fields of all ranks
on a node overflow the last-level cache, and only then (measured on a 2-core
AMD EPYC with a 32 MiB L3, README "Performance": at 128^3 the block-wise pass
made steps 14-27% faster on 1 and 2 ranks; at 64^3, where everything stays
in cache, the whole-array pass was 5-15% faster).

Inside a virtual machine the last-level cache Linux reports is the host
socket's, shared with cores the guest does not see: a 2-core Intel Xeon guest
reports 480 MiB, and there at 128^3 the block-wise pass was 12-27% faster
although the fields "fit" (README "Performance"). So the budget is the
reported size capped at :data:`CACHE_CAP_PER_CPU` per CPU that shares it.
"""
from __future__ import annotations

import os

PASS_CHOICES = ("blocks", "whole")

#: assumed when the machine does not say (a common server L3 size)
DEFAULT_CACHE_BYTES = 32 * 1024 ** 2

#: the most last-level cache counted per CPU sharing it. Server parts carry
#: about 1.5-5 MiB of L3 per core (common practice, from vendors' data sheets,
#: from memory). Measured on the 2-core Xeon guest (one process, steps
#: alternating, 1 and 2 ranks, both models): block-wise steps took 0.72-1.00
#: of the whole-array ones at 64^3 (fields 10-17 MB) and 1.13-1.24 at 32^3
#: (1.3-2.1 MB), so the budget there, 2 x 4 MiB, lies between.
CACHE_CAP_PER_CPU = 4 * 1024 ** 2


class PhysicalPassError(ValueError):
    """An unknown ``SHEARMIX_PHYSICAL_PASS``; the message is one line."""


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


def physical_pass(node_bytes: float) -> str:
    """``'blocks'`` when the product fields of all ranks on a node (``node_bytes``)
    overflow the last-level cache, else ``'whole'``; ``SHEARMIX_PHYSICAL_PASS``
    (``blocks`` or ``whole``) overrides."""
    choice = os.environ.get("SHEARMIX_PHYSICAL_PASS", "")
    if choice:
        if choice not in PASS_CHOICES:
            raise PhysicalPassError(f"SHEARMIX_PHYSICAL_PASS={choice!r}: allowed are "
                                    f"{', '.join(PASS_CHOICES)}")
        return choice
    return "blocks" if node_bytes > last_level_cache_bytes() else "whole"
