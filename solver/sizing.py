"""Derived quantities of a case before it runs: resolution, memory, rank counts."""
from __future__ import annotations

import math
import os

from shearmix.solver.case import Case
from shearmix.solver.compute.productpass import choose_product_pass, product_fields
from shearmix.solver.grid import allowed_rank_counts, dealias_cutoff

#: resident memory of Python and the libraries per rank (a 16^3 run, measured: ~250 MB)
LIBRARY_BYTES = 250 * 2 ** 20


def bytes_per_point(nfields: int, ranks: int = 1, blocks: bool = False, tracers: int = 0) -> float:
    """Estimated resident bytes per grid point of the engine's arrays (all ranks together).

    A complex half-spectrum array costs 8 bytes per grid point, a real physical
    array 8, a real spectral array 4. Counted: the three stepper registers
    (solution, stage, tendency) of the ``nfields`` flow fields and of each of the
    ``tracers`` passive tracers; the implicit coefficient arrays (2 for the
    low-Peclet model, 4 for the full one, and with tracers the ``|k|^2`` and
    ``alpha`` tables all of them share, ``alpha`` being the full model's own
    ``L[T, p]``); the transform's physical planning
    buffer; one spectral array per product field (5, plus 3 per advected scalar:
    temperature in the full model, each tracer). With whole arrays (``blocks``
    False): as many physical arrays (one of them the planning buffer) and, on
    several ranks, the two shared transpose arrays. Block-wise: on several ranks,
    one shared array per product field (docs/performance.md compares this count
    with measured figures).
    """
    spectral, physical, real_spectral = 8.0, 8.0, 4.0
    full = nfields == 3
    total = 3 * (nfields + tracers) * spectral + (4 if full else 2) * real_spectral + physical
    if tracers:
        # the tables the compiled follower update shares: |k|^2, and alpha, which the
        # full model holds already (its temperature coupling L[T, p] = alpha)
        total += (1 if full else 2) * real_spectral
    products = product_fields(int(full) + tracers)
    total += products * spectral
    if blocks:
        total += products * spectral if ranks > 1 else 0
    else:
        total += (products - 1) * physical
        total += 2 * spectral if ranks > 1 else 0
    return total


def tracer_lines(case: Case) -> list:
    """One line per passive tracer of the case: its name, ``Pe_c``, ``Sc``, ``G`` and
    initial state (docs/equations.md#tracers)."""
    out = []
    for tr in case.tracers:
        ini = dict(tr.initial)
        kind = ini.get("kind", "zero")
        if kind == "mode":
            start = (f"mode ({ini.get('nx', 0)}, {ini.get('ny', 0)}, {ini.get('nz', 1)}), "
                     f"amplitude {ini.get('amplitude', 0.1):g}")
        elif kind == "file":
            start = f"file {ini.get('path')} x {ini.get('amplitude', 0.1):g}"
        else:
            start = kind
        out.append(f"{tr.name}: Pe_c {tr.Pe:.6g}, Sc {tr.Pe / case.Re:.6g}, G {tr.G:.6g}, "
                   f"initial {start}")
    return out


def derived(case: Case, ranks: int | None = None) -> dict:
    """Numbers ``shearmix check`` prints (and the README documents)."""
    nx, ny, nz = case.shape
    lx, ly, lz = case.lengths
    cut = tuple(dealias_cutoff(n) for n in case.shape)
    kmax = min(2 * math.pi / L * c for L, c in zip(case.lengths, cut))
    nfields = 3 if case.model == "boussinesq" else 2
    out = {
        "model": case.model,
        "convention": case.convention,
        "Re": case.Re,
        "B": case.B,
        "Pe": case.Pe,
        "Pr": case.Pr,
        "BPe": case.BPe,
        "kf": case.kf,
        "F0": case.F0,
        "laminar amplitude U_L": case.U_L,
        "box": (lx, ly, lz),
        "grid": (nx, ny, nz),
        "spacing": (lx / nx, ly / ny, lz / nz),
        "dealias cutoff (wave index)": cut,
        "kmax": kmax,
        "kmax*eta_K of the laminar flow": kmax * (case.Re ** 3 * case.F0 * case.U_L / 2) ** -0.25
        if case.F0 > 0 else float("nan"),
        "allowed rank counts": allowed_rank_counts(case.shape),
    }
    # the product pass the run will choose, all ranks on one node
    full = nfields == 3
    tracers = len(case.tracers)
    blocks = choose_product_pass(case.get("compute.product_pass"),
                                 product_fields(int(full) + tracers) * nx * ny * nz * 8) == "blocks"
    per_point = bytes_per_point(nfields, ranks or 1, blocks, tracers)
    out["tracers"] = tracer_lines(case)
    out["product pass"] = "block-wise" if blocks else "whole arrays"
    out["expected memory"] = per_point * nx * ny * nz + LIBRARY_BYTES * (ranks or 1)
    out["bytes per point"] = per_point
    return out


def node_memory(meminfo: str = "/proc/meminfo") -> dict | None:
    """``{'available': bytes, 'total': bytes}`` of this node, or None if unknown.

    From ``MemAvailable`` and ``MemTotal`` of ``/proc/meminfo`` (Linux), else
    from ``os.sysconf`` (available then counts free pages only).
    """
    found = {}
    try:
        with open(meminfo, encoding="ascii") as fh:
            for line in fh:
                key, _, rest = line.partition(":")
                if key in ("MemAvailable", "MemTotal"):
                    found[key] = int(rest.split()[0]) * 1024  # the file's unit is kB
    except (OSError, ValueError, IndexError):
        found = {}
    if "MemTotal" in found:
        return {"available": found.get("MemAvailable", found["MemTotal"]),
                "total": found["MemTotal"]}
    try:
        page = os.sysconf("SC_PAGE_SIZE")
        return {"available": os.sysconf("SC_AVPHYS_PAGES") * page,
                "total": os.sysconf("SC_PHYS_PAGES") * page}
    except (ValueError, OSError, AttributeError):
        return None


def memory_per_node(case: Case, ranks: int, ranks_on_node: int) -> float:
    """Expected bytes on one node holding ``ranks_on_node`` of the run's ``ranks`` ranks
    (each rank holds an equal slab)."""
    total = derived(case, ranks)["expected memory"] - LIBRARY_BYTES * ranks
    return total * ranks_on_node / ranks + LIBRARY_BYTES * ranks_on_node


def memory_shortfall(case: Case, ranks: int, ranks_on_node: int,
                     node: dict | None = None) -> str | None:
    """A one-line message when the expected memory per node exceeds what the node has
    available now, else None (also when the node's memory is unknown)."""
    node = node if node is not None else node_memory()
    if node is None:
        return None
    need = memory_per_node(case, ranks, ranks_on_node)
    if need <= node["available"]:
        return None
    mib = 2 ** 20
    return (f"grid {' x '.join(map(str, case.shape))}: expected memory "
            f"{need / mib:.0f} MiB per node ({ranks_on_node} of {ranks} rank(s) on it) exceeds "
            f"the {node['available'] / mib:.0f} MiB available on this node "
            f"({node['total'] / mib:.0f} MiB total)")
