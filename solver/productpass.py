"""Which way the advection's products are made: block by block, or with whole arrays.

Both make the same products with the same transforms (results equal to
round-off, :mod:`solver.tendency`). Block by block
(:meth:`solver.transforms.SlabTransform.round_trip`) the physical fields live
only in cache-sized blocks; with whole arrays each transform is one FFTW plan
over the slab. The block-wise pass pays when the physical fields of all ranks
on a node overflow the last-level cache, and only then (measured on a 2-core
AMD EPYC with a 32 MiB L3, README "Performance": at 128^3 the block-wise pass
made steps 14-27% faster on 1 and 2 ranks; at 64^3, where everything stays
in cache, the whole-array pass was 5-15% faster).
"""
from __future__ import annotations

import os

PASS_CHOICES = ("blocks", "whole")

#: assumed when the machine does not say (a common server L3 size)
DEFAULT_CACHE_BYTES = 32 * 1024 ** 2


class PhysicalPassError(ValueError):
    """An unknown ``SHEARMIX_PHYSICAL_PASS``; the message is one line."""


def last_level_cache_bytes(base: str = "/sys/devices/system/cpu/cpu0/cache") -> int:
    """Size of this CPU's largest cache, from Linux sysfs (``DEFAULT_CACHE_BYTES`` if unknown)."""
    best = 0
    try:
        for entry in os.listdir(base):
            if not entry.startswith("index"):
                continue
            with open(os.path.join(base, entry, "size")) as fh:
                text = fh.read().strip()
            scale = {"K": 1024, "M": 1024 ** 2, "G": 1024 ** 3}.get(text[-1:], 1)
            best = max(best, int(text.rstrip("KMG")) * scale)
    except (OSError, ValueError):
        best = 0
    return best or DEFAULT_CACHE_BYTES


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
