"""The Python API (shearmix.tools.rundata) and the docs' examples.

Every ```python block of docs/*.md runs (in order, one namespace per page) in a
folder holding a small run ``run`` continued once with a changed Re (two
segments), with spectra, snapshots and checkpoints. A block fenced
```python norun is shown, not run.

The API's arrays are checked against the files read directly with h5py, the
spectra against Parseval's identity (the shell bins of the three velocity
components add up to K, textbook), and fit_runs against fit_power_law on the
same rows.
"""
import glob
import os
import re

import pytest

from dataclasses import replace

import h5py
import numpy as np
import yaml

CASE = """
name: api-example
model: lowpe
parameters: {Re: 20, BPe: 1, Pe: 0.05}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 40, dt: 0.02}
initial: {amplitude: 0.1}
output: {diagnostics_every: 1, progress_every: 1000, checkpoint_every: 0.2,
         snapshot_every: 0.2, spectra_every: 0.1}
compute: {fftw_effort: estimate, wisdom: ''}
"""


@pytest.fixture(scope="module")
def make_run(tmp_path_factory):
    """``<tmp>/run``: 40 steps at Re = 20, then continued to step 100 at Re = 25."""
    from shearmix.tools.cli import main
    tmp = tmp_path_factory.mktemp("api")
    (tmp / "case.yaml").write_text(CASE)
    old = os.environ.get("SHEARMIX_SERIAL")
    os.environ["SHEARMIX_SERIAL"] = "1"
    try:
        assert main(["run", str(tmp / "case.yaml"), "-o", str(tmp / "run")]) == 0
        assert main(["run", str(tmp / "case.yaml"), "-o", str(tmp / "run"), "--restart",
                     "latest", "--set", "parameters.Re=25", "--set", "time.max_steps=100"]) == 0
    finally:
        if old is None:
            os.environ.pop("SHEARMIX_SERIAL")
        else:
            os.environ["SHEARMIX_SERIAL"] = old
    return tmp / "run"


def test_series_by_segment_match_the_file(make_run):
    from shearmix.tools.rundata import MEANINGS, open_run
    run = open_run(make_run)
    segs = run.segments
    assert [s.case["parameters"]["Re"] for s in segs] == [20, 25]
    assert run.case["parameters"]["Re"] == 25
    assert segs[1].changes == {"parameters.Re": [20, 25]}
    with h5py.File(make_run / "timeseries.h5", "r") as fh:
        t, eps = fh["t"][()], fh["eps"][()]
    both = np.concatenate([s["t"] for s in segs])
    np.testing.assert_array_equal(both, t)  # no record lost or repeated
    np.testing.assert_array_equal(np.concatenate([s["eps"] for s in segs]), eps)
    assert segs[1]["t"][0] == segs[1].t_start
    assert set(segs[0].names) <= set(MEANINGS)
    with pytest.raises(KeyError, match="no series 'nope'"):
        segs[0]["nope"]
    with pytest.raises(ValueError, match="no segment 2; the series has 2"):
        run.series(2)


def test_spectra_add_up_to_the_kinetic_energy(make_run):
    from shearmix.tools.rundata import open_run
    run = open_run(make_run)
    sp = run.spectra()
    with h5py.File(make_run / "timeseries.h5", "r") as fh:
        steps, K = fh["step"][()], fh["K"][()]
    for i, step in enumerate(sp.step):
        k = int(np.flatnonzero(steps == step)[0])
        assert sp.kinetic["shell"][i].sum() == pytest.approx(K[k], rel=1e-10)
    assert sp.case["name"] == "api-example"


def test_checkpoints_and_snapshots(make_run):
    from shearmix.tools.rundata import open_run
    run = open_run(make_run)
    chks = run.checkpoints()
    assert chks and [c.step for c in chks] == sorted(c.step for c in chks)
    assert chks[-1].grid == (16, 16, 8) and chks[-1].case["parameters"]["Re"] == 25
    assert chks[-1].history[-1]["event"] == "restart"
    snaps = run.snapshots()
    fields = run.snapshot()
    with h5py.File(snaps[-1].path, "r") as fh:
        np.testing.assert_array_equal(fields["u"][:, :, 0], fh["u"][0].T)
    assert fields["u"].shape == (16, 16, 8)


def test_summary_and_fit_objects(make_run):
    from shearmix.tools.analysis.fits import fit_power_law
    from shearmix.tools.analysis.summary import summarize_run
    from shearmix.tools.rundata import fit_runs, open_run
    s = open_run(make_run).summary()
    row = summarize_run(make_run)
    assert s.values["eps"] == row["eps"] and s.regime == row["regime"]
    assert s.row["Re"] == 25
    first = open_run(make_run).summary(segment=0)
    assert first.row["Re"] == 20
    # summaries on an exact power law y = 2 x^(-1/3) stand in for a sweep's runs
    xs = np.array([1.0, 3.0, 10.0, 30.0])
    fake = [replace(s, row={**s.row, "BPe": x, "Lz_turb": 2 * x ** (-1 / 3), "Lz_turb_err": 0.01})
            for x in xs]
    fit = fit_runs(fake, x="BPe", y="Lz_turb")
    assert fit.p == pytest.approx(-1 / 3, rel=1e-12) and fit.A == pytest.approx(2, rel=1e-12)
    # the same y values as the rows (numpy's scalar and array powers may differ in the last bit)
    ref = fit_power_law(xs, np.array([r.row["Lz_turb"] for r in fake]), np.full(4, 0.01))
    assert fit.p_ci == ref.p_ci



ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
PAGES = sorted(glob.glob(os.path.join(ROOT, "docs", "*.md")))
FENCE = re.compile(r"^```python([^\n]*)\n(.*?)^```", re.S | re.M)


def blocks(page):
    """The runnable blocks of a page and how many it marks norun."""
    run, skipped = [], 0
    for info, body in FENCE.findall(open(page, encoding="utf-8").read()):
        if info.strip() == "norun":
            skipped += 1
        elif info.strip():
            raise ValueError(f"{page}: unknown python fence marker {info.strip()!r} (only 'norun')")
        else:
            run.append(body)
    return run, skipped


def test_api_page_has_runnable_examples():
    run, _ = blocks(os.path.join(ROOT, *"docs/api.md".split("/")))
    assert len(run) >= 2


@pytest.mark.parametrize("page", PAGES, ids=os.path.basename)
def test_python_blocks_of_the_page_run(page, make_run, monkeypatch):
    run, _ = blocks(page)
    monkeypatch.chdir(make_run.parent)
    namespace = {"__name__": "__docs__"}
    for i, body in enumerate(run):
        exec(compile(body, f"{os.path.basename(page)} block {i + 1}", "exec"), namespace)
