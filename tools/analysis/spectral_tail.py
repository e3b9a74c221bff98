"""Resolution check from the spectra: how high the kinetic energy spectrum's tail stands.

``tail_ratio = E(k_max) / max_{k > 0} E(k)``, with ``E`` the kinetic shell
spectrum of ``spectra.h5`` (solver/files/spectra.py) averaged over the records at
or after ``t_start``, and ``E(k_max)`` its value in the shell of the largest
wavenumber resolved in every direction after dealiasing (``grid.kmax`` of
solver/grid.py: ``min_i 2 pi/L_i * (N_i - 1)//3``). A well-resolved run has a
spectrum that falls by several decades between its peak and ``k_max``; a
tail that stands high means energy piles up at the grid scale.

The warning threshold :data:`TAIL_RATIO_MAX` = 1e-3 (three decades) is a
choice of this tool, in line with common practice of asking for a few
decades of fall-off; it is not a published criterion.
"""
from __future__ import annotations

import math
import os

import numpy as np

__all__ = ["TAIL_RATIO_MAX", "tail_ratio", "tail_warning"]

TAIL_RATIO_MAX = 1e-3


def tail_ratio(run_dir, t_start=None):
    """``E(k_max) / max E`` of a run's averaged kinetic shell spectrum, or NaN without spectra."""
    from shearmix.solver.case import case_from_dict
    from shearmix.solver.files.spectra import SPECTRA_FILE, read_spectra
    if not os.path.exists(os.path.join(run_dir, SPECTRA_FILE)):
        return float("nan")
    sp = read_spectra(run_dir)
    sel = sp["t"] >= t_start if t_start is not None else np.ones(sp["t"].size, bool)
    if not sel.any():
        return float("nan")
    import yaml
    case = case_from_dict(yaml.safe_load(sp["attrs"]["case"]))
    kmax = min(2 * math.pi / L * ((n - 1) // 3) for L, n in zip(case.lengths, case.shape))
    E = sp["kinetic"]["shell"][sel].sum(axis=1).mean(axis=0)
    k = sp["wavenumbers"]["shell"]
    peak = E[k > 0].max()
    if not peak > 0:
        return float("nan")
    return float(E[int(np.argmin(np.abs(k - kmax)))] / peak)


def tail_warning(ratio, threshold=TAIL_RATIO_MAX):
    """The summary warning for a high tail, or None."""
    if math.isfinite(ratio) and ratio > threshold:
        return (f"under-resolved: kinetic spectrum at k_max is {ratio:.2g} of its peak "
                f"(> {threshold:g})")
    return None
