"""Spectra written during a run (solver/files/spectra.py).

Checks against things outside the engine's own bookkeeping:

* Parseval's identity: every spectrum's bins add up to half the mean square of
  its field, computed here in physical space with a plain numpy mean over the
  grid points;
* a single Fourier mode ``A cos(k.x)`` (energy ``A^2/4``: ``<cos^2> = 1/2``)
  puts all of its energy in the bins of its own wave indices;
* ``Lz_turb`` from the horizontal spectrum in ``kz`` equals the engine's
  diagnostic and, for one vertical wavenumber, ``2 pi / kz`` exactly.
"""
import math

import h5py
import numpy as np
import pytest

from shearmix.solver.files.spectra import SPECTRA_FILE, SpectraOutput, compute_spectra, read_spectra
from shearmix.solver.run.simulation import Simulation
from shearmix.tools.analysis.summary import lz_turb


def _physical_mean_squares(sim):
    u, v, w, T = sim.physical()
    out = {"u": np.mean(u ** 2), "v": np.mean(v ** 2), "w": np.mean(w ** 2)}
    if T is not None:
        out["theta"] = np.mean(T ** 2)
    return out


@pytest.mark.parametrize("model,params", [
    ("lowpe", {"Re": 40.0, "BPe": 3.0}),
    ("boussinesq", {"Re": 40.0, "B": 2.0, "Pr": 1.0}),
])
def test_parseval_every_direction(make_case, model, params):
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 12, "Nz": 8},
                     box={"Lx": "4*pi", "Ly": "2*pi", "Lz": "pi"},
                     initial={"kind": "laminar_noise", "amplitude": 0.4, "seed": 11})
    sim = Simulation(case)
    sim.add_mode(1, 1, 1, "poloidal", 0.3)  # the full model's noise is in T only
    sim.advance_to(0.2)  # let advection fill the spectrum a little
    s = compute_spectra(sim)
    ms = _physical_mean_squares(sim)
    for d in ("kx", "ky", "kz", "shell"):
        for i, c in enumerate("uvw"):
            assert s["kinetic"][d][i].sum() == pytest.approx(0.5 * ms[c], rel=1e-12)
    if model == "boussinesq":
        theta = ms["theta"]
    else:  # b = BPe lap^-1 w, computed here with numpy's FFT
        u, v, w, _ = sim.physical()
        g = sim.grid
        k = [2 * np.pi * np.fft.fftfreq(n, L / n) for n, L in zip(g.shape, g.lengths)]
        k2 = k[0][:, None, None] ** 2 + k[1][None, :, None] ** 2 + k[2][None, None, :] ** 2
        wk = np.fft.fftn(w)
        bk = np.where(k2 > 0, -params["BPe"] * wk / np.where(k2 > 0, k2, 1), 0)
        theta = np.mean(np.fft.ifftn(bk).real ** 2)
    assert theta > 0
    for d in ("kx", "ky", "kz", "shell"):
        assert s["thermal"][d].sum() == pytest.approx(0.5 * theta, rel=1e-10)


def test_single_mode_fills_only_its_bins(make_case):
    case = make_case(grid={"Nx": 16, "Ny": 16, "Nz": 16}, box={"Lx": "4*pi"},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    nx, ny, nz, amp = 3, 2, 1, 0.7
    sim.add_mode(nx, ny, nz, "vortical", amp)
    s = compute_spectra(sim)
    energy = amp ** 2 / 4
    kx, ky, kz = 2 * math.pi / (4 * math.pi) * nx, ny, nz
    shell_bin = round(math.sqrt(kx ** 2 + ky ** 2 + kz ** 2) / 0.5)  # dk = 2 pi / Lx = 0.5
    for d, hit in (("kx", nx), ("ky", ny), ("kz", nz), ("shell", shell_bin)):
        total = s["kinetic"][d].sum(axis=0)
        assert total[hit] == pytest.approx(energy, rel=1e-12)
        assert np.abs(np.delete(total, hit)).max() < 1e-14
    # a vortical mode has no vertical velocity and no buoyancy
    assert np.abs(s["kinetic"]["shell"][2]).max() < 1e-14
    assert np.abs(s["thermal"]["shell"]).max() < 1e-14


def test_lz_turb_from_written_spectra(make_case, tmp_path):
    case = make_case(grid={"Nx": 16, "Ny": 16, "Nz": 16}, time={"t_end": 0.3},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 3},
                     output={"spectra_every": 0.1, "diagnostics_every": 1})
    sim = Simulation(case)
    assert any(isinstance(o, SpectraOutput) for o in sim.default_outputs())
    assert sim.run(output=str(tmp_path), log=lambda m: None) == 0
    sp = read_spectra(str(tmp_path))
    with h5py.File(tmp_path / SPECTRA_FILE) as fh:
        assert "BPe" in fh.attrs["case"] and fh.attrs["version"] and fh.attrs["model"] == "lowpe"
    # records at the first step at or after 0, 0.1, 0.2, 0.3
    assert sp["t"].size == 4 and np.all(np.diff(np.floor(sp["t"] / 0.1 + 1e-9)) == 1)
    with h5py.File(tmp_path / "timeseries.h5") as fh:
        ts_t, ts_lz = fh["t"][()], fh["Lz_turb"][()]
    for t, spec in zip(sp["t"], sp["kinetic"]["kz"]):
        i = np.flatnonzero(np.isclose(ts_t, t, rtol=0, atol=1e-12))
        assert i.size == 1
        e_h = spec[0] + spec[1]
        assert lz_turb(e_h, sp["wavenumbers"]["kz"]) == pytest.approx(ts_lz[i[0]], rel=1e-12)


def test_lz_turb_single_vertical_wavenumber(make_case):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 16}, box={"Lz": "pi"},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    sim.add_mode(1, 0, 3, "vortical", 0.5)
    sim.add_mode(0, 1, 3, "vortical", 0.2)
    s = compute_spectra(sim)
    e_h = s["kinetic"]["kz"][0] + s["kinetic"]["kz"][1]
    kz = 2.0 * np.arange(e_h.size)  # Lz = pi: kz = 2 m
    assert e_h[3] > 0 and np.delete(e_h, 3).max() < 1e-14 * e_h[3]
    assert lz_turb(e_h, kz) == pytest.approx(2 * np.pi / 6, rel=1e-12)


@pytest.mark.mpi
def test_spectra_do_not_depend_on_rank_count(tmp_path):
    """The same seeded state (rank-independent noise, solver/physics/initial.py) on 1 and 2 ranks."""
    import os
    import subprocess
    import sys
    here = os.path.dirname(os.path.abspath(__file__))
    sys.path.insert(0, here)
    from test_mpi import _mpiexec
    mpiexec = _mpiexec()
    from spectra_probe import spectra
    serial = spectra()
    out = tmp_path / "two.npz"
    env = dict(os.environ, OMP_NUM_THREADS="1")
    env.pop("SHEARMIX_SERIAL", None)
    r = subprocess.run([mpiexec, "-n", "2", sys.executable, os.path.join(here, "spectra_probe.py"),
                        str(out)], capture_output=True, text=True, timeout=300, env=env)
    assert r.returncode == 0, r.stderr[-2000:]
    two = np.load(out)
    assert int(two["size"]) == 2
    for k, v in serial.items():
        assert np.allclose(two[k], v, rtol=1e-12, atol=1e-15 * np.abs(v).max()), k
