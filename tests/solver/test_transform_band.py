"""The band-pruned forward transform equals numpy.fft.rfftn inside the 2/3-rule band (one rank)."""
import numpy as np
import pytest

from shearmix.solver.compute.parallel import SerialComm
from shearmix.solver.compute.transforms import SlabTransform
from shearmix.solver.grid import Grid


@pytest.mark.parametrize("shape", [(12, 8, 10), (16, 18, 8)])
def test_forward_band_matches_numpy_inside_the_band(shape):
    grid = Grid(shape, (1.0, 2.0, 3.0))
    fft = SlabTransform(grid, SerialComm(), effort="estimate")
    field = np.random.default_rng(3).standard_normal(shape)
    phys = fft.empty_physical()
    phys[...] = field
    band = fft.forward_band(phys, fft.empty_spectral())
    ref = np.fft.rfftn(field)  # the reference: numpy's FFT of the whole field
    assert grid.dealias.sum() > 0
    err = np.abs(band - ref)[np.broadcast_to(grid.dealias, ref.shape)].max()
    assert err < 1e-12 * np.abs(ref).max()
    assert fft.count_forward_band == 1 and fft.count_forward == 1
