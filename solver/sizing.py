"""Derived quantities of a case before it runs: resolution, memory, rank counts."""
from __future__ import annotations

import math

from .case import Case
from .grid import allowed_rank_counts, dealias_cutoff


def bytes_per_point(nfields: int, ranks: int = 1) -> float:
    """Estimated resident bytes per grid point of the engine's arrays (all ranks together).

    Spectral arrays hold ``Nz/2+1`` complex values per ``Nz`` points: 8 bytes per
    point each, real spectral coefficient arrays 4 bytes, physical arrays 8.
    Counted: state, first-stage tendency and the two other stepper registers
    (4 x nfields spectral), the advection work arrays (3 velocity + T + product
    physical, 1 + 3 spectral), the transform buffers (1 physical + 1 spectral, and
    2 spectral-sized transpose buffers on several ranks), wavenumber and frame
    coefficient arrays (about 8 real spectral arrays).
    """
    spectral = 8.0
    physical = 8.0
    real_spectral = 4.0
    total = 4 * nfields * spectral
    total += (4 + (1 if nfields == 3 else 0)) * physical + 4 * spectral
    total += physical + spectral + (2 * spectral if ranks > 1 else 0)
    total += 8 * real_spectral
    return total


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
    per_point = bytes_per_point(nfields, ranks or 1)
    out["expected memory"] = per_point * nx * ny * nz
    out["bytes per point"] = per_point
    return out
