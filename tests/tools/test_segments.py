"""Segments of a time series: a restart that changes the case begins one, and the
analysis (summary, sweep summary, figures) stays within one.

The reference here is the run's own case files: each segment must carry the
parameters that were in force (the case.yaml written at each start), and an
average over a segment must equal the trapezoidal time mean of that segment's
records alone (numpy.trapezoid as the reference).
"""
import subprocess

import h5py
import numpy as np
import pytest
import yaml

CASE = """
name: tiny-segments
model: boussinesq
parameters: {Re: 20, B: 1, Pe: 30}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 60, dt: 0.02}
initial: {amplitude: 0.1}
output: {diagnostics_every: 1, progress_every: 1000, checkpoint_every: 0.4}
compute: {fftw_effort: estimate, wisdom: ''}
"""


@pytest.fixture
def cli(monkeypatch, capsys, tmp_path):
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    monkeypatch.chdir(tmp_path)

    def run(*args):
        capsys.readouterr()
        code = main(list(args))
        out, err = capsys.readouterr()
        return subprocess.CompletedProcess(args, code, out, err)
    return run


RESTART = {}  # time and step where the second segment begins (set by the fixture)


@pytest.fixture(scope="module")
def two_segments(tmp_path_factory):
    """A run at Re = 20 for 60 steps, continued with Re = 25 for 200 more."""
    import os
    from shearmix.tools.cli import main
    tmp = tmp_path_factory.mktemp("seg")
    case = tmp / "tiny.yaml"
    case.write_text(CASE)
    old = os.environ.get("SHEARMIX_SERIAL")
    os.environ["SHEARMIX_SERIAL"] = "1"
    try:
        run = tmp / "run"
        assert main(["run", str(case), "-o", str(run)]) == 0
        with h5py.File(run / "timeseries.h5", "r") as fh:  # it ends on its last checkpoint
            RESTART.update(t=float(fh["t"][-1]), step=int(fh["step"][-1]))
        assert main(["run", str(case), "-o", str(run), "--restart", "latest",
                     "--set", "parameters.Re=25", "--set", "time.max_steps=260"]) == 0
    finally:
        if old is None:
            os.environ.pop("SHEARMIX_SERIAL")
        else:
            os.environ["SHEARMIX_SERIAL"] = old
    return run


def test_series_records_each_segment_case(two_segments):
    from shearmix.solver.files.series import segments_of
    with h5py.File(two_segments / "timeseries.h5", "r") as fh:
        segs = segments_of(fh.attrs)
        step = fh["step"][()]
    assert [yaml.safe_load(s["case"])["parameters"]["Re"] for s in segs] == [20, 25]
    assert segs[0]["step"] == 0
    # the second begins at the checkpoint the restart continued from
    assert segs[1]["step"] == RESTART["step"] and segs[1]["t"] == RESTART["t"]
    assert segs[1]["step"] in step
    # case.yaml, the file the run folder keeps, says the same as the last segment
    assert yaml.safe_load((two_segments / "case.yaml").read_text())["parameters"]["Re"] == 25


def test_summary_averages_the_last_segment_and_says_so(two_segments, cli):
    from shearmix.tools.analysis.summary import read_timeseries, summarize_run
    row = summarize_run(two_segments)
    assert row["Re"] == 25 and row["segment"] == 1 and row["segments"] == 2
    assert row["t_first"] == RESTART["t"]
    assert any("segment 1 of 2" in w and "parameters.Re 20 -> 25" in w for w in row["warnings"])
    # the mean is over segment 1's records only (trapezoidal time mean, numpy reference)
    data, _, _ = read_timeseries(two_segments)
    sel = (data["t"] >= row["t_start"])
    assert data["t"][sel][0] >= RESTART["t"]
    ref = np.trapezoid(data["u_rms"][sel], data["t"][sel]) / (data["t"][sel][-1] - data["t"][sel][0])
    assert row["u_rms"] == pytest.approx(ref, rel=1e-12)

    first = summarize_run(two_segments, segment=0)
    assert first["Re"] == 20 and first["t_last"] < RESTART["t"]

    res = cli("summary", str(two_segments))
    assert res.returncode == 0, res.stderr
    assert "Re=25" in res.stdout and "segment 1 of 2" in res.stdout


def test_start_before_the_change_is_clipped_with_a_warning(two_segments):
    from shearmix.tools.analysis.summary import summarize_run
    row = summarize_run(two_segments, start=0.1)
    assert row["t_start"] >= RESTART["t"]
    assert any("lies before segment 1" in w for w in row["warnings"])
    across = summarize_run(two_segments, segment="all", start=0.1)
    assert across["t_start"] < RESTART["t"]
    assert any("across all 2 segments" in w for w in across["warnings"])


def test_unknown_segment_is_one_line_error(two_segments, cli):
    res = cli("summary", str(two_segments), "--segment", "5")
    assert res.returncode == 2
    assert "no segment 5; the series has 2" in res.stderr


def test_cut_back_forgets_segments_after_the_checkpoint(two_segments, tmp_path):
    """Restarting the two-segment run from its first checkpoint (before the change) with
    the original case leaves one segment."""
    import shutil
    from shearmix.solver.files.series import segments_of
    from shearmix.solver.run.restart import truncate_series
    series = tmp_path / "timeseries.h5"
    shutil.copy(two_segments / "timeseries.h5", series)
    truncate_series(str(series), RESTART["step"])
    with h5py.File(series, "r") as fh:
        assert [s["step"] for s in segments_of(fh.attrs)] == [0]


def test_old_file_without_segments_is_one_segment(two_segments, tmp_path):
    import shutil
    from shearmix.tools.analysis.summary import summarize_run
    run = tmp_path / "old"
    run.mkdir()
    shutil.copy(two_segments / "timeseries.h5", run / "timeseries.h5")
    with h5py.File(run / "timeseries.h5", "r+") as fh:
        for a in ("segment_steps", "segment_times", "segment_cases", "segment_versions"):
            del fh.attrs[a]
    row = summarize_run(run)
    assert row["segments"] == 1 and row["segment"] == 0 and row["Re"] == 20


def test_series_figure_marks_the_change(two_segments, tmp_path, monkeypatch):
    from shearmix.tools.plots import figures
    figs = []
    monkeypatch.setattr(figures, "_save", lambda fig, path: figs.append(fig) or path)
    figures.plot_series(two_segments, tmp_path / "series.png")
    for ax in figs[0].axes:
        xs = [line.get_xdata()[0] for line in ax.get_lines() if line.get_linestyle() == "--"]
        assert xs == [RESTART["t"]]
    assert "segment 1: parameters.Re 20 -> 25" in [t.get_text() for t in figs[0].axes[0].texts]
    # the title names the last segment's case (Re = 25), not the first one's
    title = figs[0].axes[0].get_title()
    assert "Re=25" in title and "Re=20" not in title, title


def test_fit_says_which_segments_and_warns_across(tmp_path, cli):
    """Rows on the exact power law y = x^-0.5: the fit itself is unchanged; the notes
    say which segment each row averaged and warn for a row averaged across changes."""
    from shearmix.tools.analysis.summary import write_csv
    rows = [{"run": f"r{i}", "segment": seg, "segments": n, "BPe": x, "D_flux": x ** -0.5}
            for i, (x, seg, n) in enumerate([(1.0, 0, 1), (4.0, 1, 2), (16.0, "all", 3)])]
    write_csv(rows, tmp_path / "table.csv")
    res = cli("fit", str(tmp_path / "table.csv"), "--x", "BPe", "--y", "D_flux")
    assert res.returncode == 0, res.stderr
    assert "p = -0.5" in res.stdout
    assert "r1: segment 1 of 2" in res.stdout
    assert "warning: r2 averaged across all its 3 segments (crosses a change)" in res.stdout
    write_csv([{k: v for k, v in r.items() if k not in ("segment", "segments")} for r in rows],
              tmp_path / "old.csv")
    res = cli("fit", str(tmp_path / "old.csv"), "--x", "BPe", "--y", "D_flux")
    assert "records no segments" in res.stdout


def test_adding_a_tracer_at_a_restart_begins_a_segment(tmp_path, cli):
    """The tracer's statistics start at its restart: the summary's default (last)
    segment holds only records with the tracer, so its averages have no records
    from before it existed and no warning about skipped ones."""
    case = tmp_path / "tiny.yaml"
    case.write_text(CASE)
    run = tmp_path / "run"
    assert cli("run", str(case), "-o", str(run)).returncode == 0
    with h5py.File(run / "timeseries.h5", "r") as fh:
        t_restart = float(fh["t"][-1])
    assert cli("run", str(case), "-o", str(run), "--restart", "latest", "--set", "time.max_steps=160",
               "--set", "tracers.dye.Sc=1", "--set", "tracers.dye.initial.kind=mode").returncode == 0
    from shearmix.solver.files.series import read_series, segments_of
    s = read_series(str(run / "timeseries.h5"))
    segs = segments_of(s["attrs"])
    assert len(segs) == 2 and segs[1]["t"] == pytest.approx(t_restart)
    assert "dye" in yaml.safe_load(segs[1]["case"])["tracers"]
    after = s["t"] >= segs[1]["t"]
    assert np.all(np.isnan(s["c_rms.dye"][~after])) and np.all(np.isfinite(s["c_rms.dye"][after]))
    res = cli("summary", str(run), "--start", str(t_restart), "--json", str(tmp_path / "row.json"))
    assert res.returncode == 0, res.stderr
    import json
    row = json.load(open(tmp_path / "row.json"))
    row = row[0] if isinstance(row, list) else row
    assert row["segment"] == 1 and row["segments"] == 2
    assert not any("non-finite" in w for w in row["warnings"])
    assert row["c_rms.dye"] > 0
