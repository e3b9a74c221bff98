"""Spectral tail ratio on a hand-made spectra file: E(k) known per shell."""
import math

import numpy as np
import pytest

from shearmix.solver.files.spectra import DIRECTIONS, SpectralBins, SpectraWriter
from shearmix.solver.grid import Grid
from shearmix.tools.analysis.spectral_tail import tail_ratio, tail_warning


def test_tail_ratio_of_a_known_spectrum(make_case, tmp_path):
    case = make_case(grid={"Nx": 16, "Ny": 16, "Nz": 16}, box={"Lx": "2*pi"})
    bins = SpectralBins(Grid(case.shape, case.lengths))
    k = bins.wavenumbers["shell"]  # dk = 1; kmax = (16-1)//3 = 5
    w = SpectraWriter(str(tmp_path / "spectra.h5"), case, bins, "b")
    for t, level in ((0.0, 1.0), (1.0, 1e-2), (2.0, 3e-2)):
        shell = np.zeros((3, k.size))
        shell[0, 1:] = k[1:] ** -3.0
        shell[2, 1:] = 0.5 * k[1:] ** -3.0
        shell[:, 5] = level  # the tail value at k = kmax, split over the components
        shell[2, 5] = 0.0
        spectra = {"kinetic": {d: np.zeros((3, bins.nbins[d])) for d in DIRECTIONS},
                   "thermal": {d: np.zeros(bins.nbins[d]) for d in DIRECTIONS}}
        spectra["kinetic"]["shell"] = shell
        w.append(t, int(t), spectra)
    w.close()
    peak = 1.5  # k = 1: 1 + 0.5
    # records at t >= 1: mean tail (2e-2 + 6e-2)/2 = 4e-2 (u and v carry it)
    assert tail_ratio(str(tmp_path), t_start=1.0) == pytest.approx(4e-2 / peak, rel=1e-12)
    assert "under-resolved" in tail_warning(4e-2 / peak)
    assert tail_warning(1e-4) is None
    assert math.isnan(tail_ratio(str(tmp_path / "none")))
