"""The eigenmode perturbation file: layout, normalisation, incompressibility."""
import math

import numpy as np
import h5py
import pytest

from shearmix.tools.stability import FlowParams
from shearmix.tools.stability.boxfit import Box
from shearmix.tools.stability.modefile import mode_fields, write_mode_file

BOX = Box(4 * math.pi, 2 * math.pi, 2 * math.pi, 16, 32, 12)


def _spectral_divergence(f, box):
    """Divergence by numpy's FFT (reference library), relative to max |k||u|."""
    kx = 2 * np.pi * np.fft.fftfreq(box.Nx, box.Lx / box.Nx)[:, None, None]
    ky = 2 * np.pi * np.fft.fftfreq(box.Ny, box.Ly / box.Ny)[None, :, None]
    kz = 2 * np.pi * np.fft.fftfreq(box.Nz, box.Lz / box.Nz)[None, None, :]
    U, V, W = (np.fft.fftn(f[c]) for c in "uvw")
    div = kx * U + ky * V + kz * W
    scale = np.max(np.sqrt(kx ** 2 + ky ** 2 + kz ** 2) * np.sqrt(abs(U) ** 2 + abs(V) ** 2 + abs(W) ** 2))
    return np.max(np.abs(div)) / scale


@pytest.mark.parametrize("p", [FlowParams("boussinesq", Re=40.0, B=1.0, Pe=8.0),
                               FlowParams("lowpe", Re=40.0, BPe=3.0)])
def test_mode_fields_are_normalised_and_divergence_free(p):
    f, meta = mode_fields(p, BOX, 0.5, 1.0, 0.0)
    assert set(f) == ({"u", "v", "w", "T"} if p.model == "boussinesq" else {"u", "v", "w"})
    for a in f.values():
        assert a.shape == (16, 32, 12) and a.dtype == np.float64
    speed = np.sqrt(f["u"] ** 2 + f["v"] ** 2 + f["w"] ** 2)
    assert speed.max() == pytest.approx(1.0, rel=1e-14)
    assert _spectral_divergence(f, BOX) < 1e-13
    # the x-dependence is the single wavenumber kx: all FFT energy sits at index +-1
    Ux = np.abs(np.fft.fft(f["u"], axis=0)) ** 2
    e_by_ix = Ux.sum(axis=(1, 2))
    others = e_by_ix.sum() - e_by_ix[[1, -1]].sum()
    assert others < 1e-24 * e_by_ix.sum()


def test_mode_must_fit_the_box():
    p = FlowParams("lowpe", Re=40.0, BPe=3.0)
    with pytest.raises(ValueError, match="kx"):
        mode_fields(p, BOX, 0.3, 1.0, 0.0)
    with pytest.raises(ValueError, match="dealiased"):
        mode_fields(p, BOX, 0.5 * 6, 1.0, 0.0)


def test_file_layout_and_no_overwrite(tmp_path):
    p = FlowParams("lowpe", Re=40.0, BPe=3.0)
    f, meta = mode_fields(p, BOX, 0.5, 0.0, 0.0)
    path = tmp_path / "m.h5"
    write_mode_file(str(path), f, meta, "model: lowpe\n")
    with h5py.File(path, "r") as fh:
        assert fh.attrs["kind"] == "perturbation"
        assert fh.attrs["case"] == "model: lowpe\n"
        assert "version" in fh.attrs
        assert fh.attrs["growth_rate"] == pytest.approx(meta["growth_rate"])
        assert np.array_equal(fh["u"][...], f["u"])
    before = path.read_bytes()
    with pytest.raises(FileExistsError):
        write_mode_file(str(path), f, meta, "x")
    assert path.read_bytes() == before
