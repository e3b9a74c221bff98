"""Figures: valid PNG files from a tiny run, from hand-made sweep rows, and slices
from a checkpoint whose fields are known in closed form.

PNG check: the 8-byte signature and the IHDR chunk (width, height) of the
PNG specification (ISO/IEC 15948, section 5.2 and 11.2.2).
Slices: a checkpoint holding single Craya-Herring modes must give back
``u`` and ``w`` from the frame's definition (Herring 1974, Phys. Fluids 17,
859; restated in solver/physics/basis.py): vortical ``e1 = (ky, -kx, 0)/kh``,
poloidal ``e2 = (kx kz, ky kz, -kh^2)/(kh |k|)``.
"""
import math
import os
import struct
import subprocess
import sys

import h5py
import numpy as np
import pytest

from shearmix.solver.files import snapshots
from shearmix.solver.run.simulation import Simulation
from shearmix.tools.plots import figures as plots
from shearmix.tools.plots.fields import FieldsNotFound, run_fields

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def assert_png(path, min_size=(200, 150)):
    data = open(path, "rb").read()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG signature"
    assert data[12:16] == b"IHDR"
    width, height = struct.unpack(">II", data[16:24])
    assert width >= min_size[0] and height >= min_size[1]
    assert 2_000 < len(data) < 1_000_000


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    from shearmix.solver.case import case_from_dict
    out = tmp_path_factory.mktemp("run")
    case = case_from_dict({
        "model": "lowpe", "parameters": {"Re": 40.0, "BPe": 2.0},
        "grid": {"Nx": 16, "Ny": 16, "Nz": 8}, "time": {"t_end": 1.0, "dt": 0.02, "adaptive": False},
        "initial": {"kind": "laminar_noise", "amplitude": 0.2, "seed": 2},
        "output": {"diagnostics_every": 1, "progress_every": 10 ** 6, "spectra_every": 0.1,
                   "snapshot_every": 0.5},
        "compute": {"fftw_effort": "estimate", "wisdom": ""}})
    assert Simulation(case).run(output=str(out), log=lambda m: None) == 0
    return out


def test_series_and_spectra_png(tiny_run, tmp_path):
    assert_png(plots.plot_series(str(tiny_run), str(tmp_path / "s.png")))
    assert_png(plots.plot_spectra(str(tiny_run), str(tmp_path / "sp.png"), start=0.5))


def _write_checkpoint(make_case, folder, shape, modes, t=3.5):
    """A checkpoint of a (2 pi)^3 box written by the engine's writer, its state set to
    the given amplitudes."""
    from shearmix.solver.files.checkpoint import write_checkpoint
    case = make_case(grid=dict(zip(("Nx", "Ny", "Nz"), shape)), box={"Lx": "2*pi"},
                     initial={"kind": "rest"})
    sim = Simulation(case)
    nx, ny, _ = shape
    sim.state[...] = 0
    for field, (ix, iy, iz), value in modes:
        sim.state[("a", "p").index(field), ix % nx, iy % ny, iz] = value
    sim.t, sim.step_count = t, 10
    os.makedirs(folder, exist_ok=True)
    return write_checkpoint(sim, folder)


def test_slices_from_checkpoint_match_closed_form(make_case, tmp_path):
    shape, lengths = (8, 8, 8), (2 * math.pi,) * 3
    A, B = 0.8, 0.6
    # nz > 0 modes stand for themselves and their conjugates: amplitude/2 gives amplitude*cos
    _write_checkpoint(make_case, str(tmp_path / "checkpoints"), shape,
                      [("a", (1, 1, 2), A / 2), ("p", (2, 0, 1), B / 2)])
    f = run_fields(str(tmp_path))
    x, y, z = np.meshgrid(*(np.arange(8) * 2 * math.pi / 8,) * 3, indexing="ij")
    # vortical (kx, ky, kz) = (1, 1, 2): e1 = (1, -1, 0)/sqrt(2)
    # poloidal (2, 0, 1): kh = 2, |k| = sqrt(5): e2 = (2/sqrt(5), 0, -2/sqrt(5))
    u = A / math.sqrt(2) * np.cos(x + y + 2 * z) + B * 2 / math.sqrt(5) / 2 * np.cos(2 * x + z)
    w = -B * 2 / math.sqrt(5) * np.cos(2 * x + z)
    assert f["t"] == 3.5 and f["lengths"] == lengths
    assert np.abs(f["u"] - u).max() < 1e-12 and np.abs(f["w"] - w).max() < 1e-12
    assert_png(plots.plot_slices(f, lengths, str(tmp_path / "slices.png"), title="modes"))


def test_damaged_checkpoint_is_refused_by_its_checksums(make_case, tmp_path):
    from shearmix.solver.files.checkpoint import CheckpointError
    path = _write_checkpoint(make_case, str(tmp_path / "checkpoints"), (8, 8, 8),
                             [("a", (1, 1, 2), 0.4)])
    with h5py.File(path, "r+") as fh:
        fh["state/a"][1, 1, 2, 0] = 0.5  # a flipped value, header and mark intact
    with pytest.raises(CheckpointError, match="checksum mismatch in state/a at ky column 1"):
        run_fields(str(tmp_path))


def test_no_fields_is_one_clear_error(tmp_path):
    with pytest.raises(FieldsNotFound, match="output.snapshot_every"):
        run_fields(str(tmp_path))


def test_sweep_figures_png(tmp_path):
    from shearmix.tools.sweeps.summary import fit_rows
    rows = []
    for i, (bpe, re_) in enumerate([(0.1, 20), (1, 20), (10, 20), (100, 20), (1, 40)]):
        rows.append({"BPe": bpe, "Re": re_, "eta": 0.1 * (i + 1),
                     "regime": ("isotropic", "stratified_turbulence", "intermittent",
                                "viscous_layers", "undetermined")[i],
                     "Lz_turb": 2 * bpe ** (-1 / 3), "Lz_turb_err": 0.1, "w_rms": bpe ** (-1 / 6),
                     "w_rms_err": 0.01, "D_flux": bpe ** -0.5, "D_flux_err": 0.01,
                     "D_estimate": 2 * bpe ** -0.5, "D_estimate_err": 0.02})
    assert_png(plots.plot_regime_map(rows, str(tmp_path / "map.png")))
    assert_png(plots.plot_scaling(rows, fit_rows(rows), str(tmp_path / "scaling.png")))


def test_regime_map_colours_every_label(tmp_path, monkeypatch):
    """Laminar and growing runs get their own colour and legend entry (not black)."""
    from matplotlib.colors import to_rgba

    from shearmix.tools.analysis.regimes import REGIMES
    from shearmix.tools.plots import figures
    assert set(REGIMES) <= set(figures.REGIME_COLOURS)
    assert len(set(figures.REGIME_COLOURS.values())) == len(figures.REGIME_COLOURS)
    figs = []
    monkeypatch.setattr(figures, "_save", lambda fig, path: figs.append(fig) or path)
    rows = [{"BPe": b, "Re": 50, "eta": 0.1, "regime": lab}
            for b, lab in ((0.1, "laminar"), (1.0, "growing"), (10.0, "isotropic"))]
    figures.plot_regime_map(rows, str(tmp_path / "map.png"))
    ax = figs[0].axes[0]
    colours = {c.get_label(): tuple(c.get_facecolor()[0]) for c in ax.collections}
    for lab in ("laminar", "growing", "isotropic"):
        assert colours[lab] == to_rgba(figures.REGIME_COLOURS[lab]), lab
    assert colours["laminar"] != to_rgba("k") and colours["growing"] != to_rgba("k")
    import matplotlib.pyplot as plt
    plt.close(figs[0])


def test_plot_command(tiny_run, tmp_path):
    env = dict(os.environ, SHEARMIX_SERIAL="1")
    code = "import sys; from shearmix.tools.cli import main; sys.exit(main(sys.argv[1:]))"
    r = subprocess.run([sys.executable, "-c", code, "plot", str(tiny_run), "-o", str(tmp_path)],
                       capture_output=True, text=True, env=env, timeout=120)
    assert r.returncode == 0, r.stderr
    assert_png(tmp_path / "series.png")
    assert_png(tmp_path / "spectra.png")
    assert_png(tmp_path / "slices.png")  # the run wrote snapshots
    r = subprocess.run([sys.executable, "-c", code, "plot", str(tmp_path / "absent")],
                       capture_output=True, text=True, env=env, timeout=120)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "not a run folder" in r.stderr


def test_slices_from_engine_snapshot_match_closed_form(make_case, tmp_path):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8}, box={"Lx": "2*pi"}, initial={"kind": "rest"})
    sim = Simulation(case)
    sim.add_mode(1, 2, 1, "poloidal", 0.5)  # kh = sqrt(5), |k| = sqrt(6)
    os.makedirs(tmp_path / "snapshots")
    snapshots.write_snapshot(sim, str(tmp_path / "snapshots"))
    f = run_fields(str(tmp_path))
    x, y, z = np.meshgrid(*(np.arange(8) * 2 * math.pi / 8,) * 3, indexing="ij")
    phase = np.cos(x + 2 * y + z)
    # e2 = (kx kz, ky kz, -kh^2) / (kh |k|)
    assert np.abs(f["u"] - 0.5 / math.sqrt(30) * phase).max() < 1e-12
    assert np.abs(f["w"] + 0.5 * 5 / math.sqrt(30) * phase).max() < 1e-12
    assert os.path.basename(f["source"]).startswith("snap_")
