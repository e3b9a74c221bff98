"""Figures as a referee reads them (issue 14 item 10), checked on matplotlib's objects, not pixels.

What is checked: titles name the forcing convention (``Re`` means different
things in the ``laminar`` and ``unit`` conventions, docs/equations.md); the
series shades a steady window only where ``shearmix summary`` would report
one (MSER-5 reliability, White 1997, as in shearmix.tools.analysis.steady);
log-axis tick labels do not overlap (their rendered extents); every colour bar
is labelled; no title names a source file. Good figure practice: common
practice, no source.
"""
import itertools

import pytest

from shearmix.solver.run.simulation import Simulation
from shearmix.tools.plots import figures as plots


@pytest.fixture(scope="module")
def short_run(tmp_path_factory):
    """A short run of the engine: its spectra span less than a decade in ky and kz."""
    from shearmix.solver.case import case_from_dict
    out = tmp_path_factory.mktemp("run")
    case = case_from_dict({
        "name": "invented-drift", "model": "lowpe", "parameters": {"Re": 40.0, "BPe": 2.0},
        "grid": {"Nx": 16, "Ny": 16, "Nz": 8}, "time": {"t_end": 1.0, "dt": 0.02, "adaptive": False},
        "initial": {"kind": "laminar_noise", "amplitude": 0.2, "seed": 2},
        "output": {"diagnostics_every": 1, "progress_every": 10 ** 6, "spectra_every": 0.1},
        "compute": {"fftw_effort": "estimate", "wisdom": ""}})
    assert Simulation(case).run(output=str(out), log=lambda m: None) == 0
    return out


@pytest.fixture
def drifting_run(short_run, tmp_path):
    """The short run's case and files, its series replaced by a long transient.

    A decay by a factor 3 up to t = 6 of 10, then flat (noise 1e-3): the MSER
    truncation falls in the second half, which is no reliable steady state.
    """
    import shutil

    import h5py
    import numpy as np
    folder = tmp_path / "drift"
    shutil.copytree(short_run, folder)
    t = np.linspace(0.0, 10.0, 201)
    rise = 1.0 + 2.0 * np.clip((6.0 - t) / 6.0, 0.0, None)
    wiggle = 1e-3 * np.random.default_rng(5).standard_normal(t.size)
    with h5py.File(folder / "timeseries.h5", "r+") as fh:
        for name in [k for k in fh if isinstance(fh[k], h5py.Dataset)]:
            del fh[name]
        fh["t"] = t
        fh["K"], fh["eps"] = rise + wiggle, 0.5 * rise + wiggle
        fh["I"], fh["J"], fh["eta"] = 0.5 * rise, -0.01 * rise, 0.02 + 0 * t
    return folder


@pytest.fixture
def figures(monkeypatch):
    """The figures the plot functions make, kept open instead of only written."""
    made = []
    real = plots._save

    def keep(fig, path):
        fig.canvas.draw()
        made.append(fig)
        fig.savefig(path, dpi=90)
        return path
    monkeypatch.setattr(plots, "_save", keep)
    yield made
    monkeypatch.setattr(plots, "_save", real)
    import matplotlib.pyplot as plt
    for f in made:
        plt.close(f)


def _titles(fig):
    return " ".join([fig._suptitle.get_text() if fig._suptitle else ""]
                    + [a.get_title() for a in fig.axes])


def test_series_shades_nothing_without_reliable_steady_state(drifting_run, figures):
    from shearmix.tools.analysis.steady import detect_steady_state
    from shearmix.tools.analysis.summary import read_timeseries
    data, _, _ = read_timeseries(str(drifting_run))
    assert not detect_steady_state(data["t"], {q: data[q] for q in ("K", "eps")}).reliable
    plots.plot_series(str(drifting_run), str(drifting_run / "s.png"))
    (fig,) = figures
    assert not any(a.patches for a in fig.axes)
    assert "no reliable steady state" in _titles(fig)
    plots.plot_series(str(drifting_run), str(drifting_run / "s2.png"), start=0.5)
    assert all(a.patches for a in figures[1].axes)  # a window given: shaded from it
    assert "steady window from t = 0.5 (given)" in _titles(figures[1])


def test_titles_name_the_forcing_convention(drifting_run, figures):
    plots.plot_series(str(drifting_run), str(drifting_run / "s.png"))
    plots.plot_spectra(str(drifting_run), str(drifting_run / "sp.png"))
    for fig in figures:
        text = _titles(fig)
        assert "invented-drift (lowpe, Re=40, BPe=2)" in text
        assert "forcing convention laminar (F0 = kf^2/Re, laminar amplitude 1)" in text
    assert "no reliable steady state: last half of the records" in _titles(figures[1])


def test_spectra_log_tick_labels_do_not_overlap(short_run, tmp_path, figures):
    # ky, kz span less than a decade on this grid: matplotlib then labels its minor ticks
    plots.plot_spectra(str(short_run), str(tmp_path / "sp.png"))
    (fig,) = figures
    renderer = fig.canvas.get_renderer()
    for ax in fig.axes:
        for axis, lim, i in ((ax.xaxis, ax.get_xlim(), 0), (ax.yaxis, ax.get_ylim(), 1)):
            labels = [t for t in axis.get_ticklabels(which="both")
                      if t.get_visible() and t.get_text()
                      and min(lim) <= t.get_position()[i] <= max(lim)]
            boxes = [t.get_window_extent(renderer) for t in labels]
            for a, b in itertools.combinations(boxes, 2):
                assert not a.overlaps(b), [t.get_text() for t in labels]


def test_slices_colour_bars_are_labelled(figures, tmp_path):
    import numpy as np
    f = {"u": np.random.default_rng(1).normal(size=(8, 8, 8)),
         "w": np.random.default_rng(2).normal(size=(8, 8, 8))}
    plots.plot_slices(f, (6.0, 6.0, 6.0), str(tmp_path / "slices.png"), title="invented")
    (fig,) = figures
    bars = [a for a in fig.axes if a.get_label() == "<colorbar>"]
    assert len(bars) == 6
    assert sorted(b.get_ylabel() for b in bars) == ["$u$"] * 3 + ["$w$"] * 3


def test_sweep_figures_name_convention_not_source_files(figures, tmp_path):
    from shearmix.tools.sweeps.summary import fit_rows
    conv = "unit (F0 = 1, laminar amplitude Re/kf^2 = {})"
    rows = [{"BPe": b, "Re": 20, "eta": 0.1, "regime": "isotropic", "model": "lowpe",
             "convention": conv.format(20), "Lz_turb": b ** (-1 / 3), "Lz_turb_err": 0.01,
             "w_rms": b ** (-1 / 6), "w_rms_err": 0.01, "D_flux": b ** -0.5, "D_flux_err": 0.01,
             "D_estimate": b ** -0.5, "D_estimate_err": 0.01} for b in (0.1, 1, 10)]
    rows[0]["convention"] = conv.format(30)  # another Re: the same convention
    plots.plot_regime_map(rows, str(tmp_path / "map.png"))
    plots.plot_scaling(rows, fit_rows(rows), str(tmp_path / "scaling.png"))
    for fig in figures:
        text = _titles(fig)
        assert ".py" not in text and "model lowpe, forcing convention unit" in text
    assert all(a.get_ylabel() for a in figures[1].axes)


def test_stability_figures_name_the_convention(monkeypatch, tmp_path):
    from shearmix.tools.stability import maps
    from shearmix.tools.stability import plots as splots
    from shearmix.tools.stability.params import FlowParams
    kept = []
    monkeypatch.setattr(splots, "_save", lambda fig, path, description: kept.append(fig))
    p = FlowParams("lowpe", Re=50.0, BPe=1.0, U_L=50.0, hold="F0")  # F0 = 1: unit
    splots.growth_map_figure(maps.growth_map(p, [0.2, 0.5], [0.0, 1.0]), str(tmp_path / "m.png"),
                             "")
    curve = maps.neutral_curve(p, "Re", "kx", [0.5], other=0.0)
    splots.neutral_figure(curve, str(tmp_path / "n.png"), "")
    for fig in kept:
        assert "forcing convention unit (F0 held" in _titles(fig)
    assert "Re=(varied)" in _titles(kept[1])
    bars = [a for a in kept[0].axes if a.get_label() == "<colorbar>"]
    assert bars and bars[0].get_ylabel() == "growth rate Re(sigma)"
