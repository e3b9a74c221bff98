"""Short, laminar and growing runs: the summary reports what it can and labels them as what they are.

References: the laminar flow ``u = sin(kf y)`` (exact steady solution of the
forced equations, common practice, no source) for the laminar run; an exact
exponential ``exp(s t)`` for the growing series; numpy.trapezoid for the means
of a short series.
"""
import csv
import os
import subprocess
import sys

import h5py
import numpy as np
import pytest
import yaml

from shearmix.tools.analysis.summary import summarize_run

CASE = {"name": "honest", "model": "lowpe", "parameters": {"Re": 100.0, "BPe": 3.0, "Pe": 1.0}}


def _write(run, data, case=CASE):
    run.mkdir(parents=True, exist_ok=True)
    with h5py.File(run / "timeseries.h5", "w") as fh:
        for k, v in data.items():
            fh[k] = np.asarray(v, dtype=float)
        fh.attrs["case"] = yaml.safe_dump(case)
        fh.attrs["version"] = "test"
        fh.attrs["model"] = case["model"]
        fh.attrs["convention"] = "unit-laminar"
    return run


def _series(n, rng):
    t = np.cumsum(rng.uniform(0.05, 0.15, n)) - 0.05
    d = {"t": t, "step": np.arange(n), "K": 1 + 0.1 * rng.normal(size=n)}
    for q, m in {"eta": 0.3, "I": 0.5, "eps": 0.35, "J": -0.15, "u_rms": 0.7, "v_rms": 0.4,
                 "w_rms": 0.25, "Lz_turb": 1.2, "kmax_etaK": 1.6}.items():
        d[q] = m * (1 + 0.1 * rng.normal(size=n))
    return d


def test_short_series_is_summarised_with_the_shortness_flagged(tmp_path):
    rng = np.random.default_rng(5)
    d = _series(39, rng)
    row = summarize_run(_write(tmp_path / "run", d))
    assert row["short"] is True
    assert any("39 records; at least 40 are needed" in w for w in row["warnings"])
    span = d["t"][-1] - d["t"][0]
    assert row["eps"] == pytest.approx(np.trapezoid(d["eps"], d["t"]) / span, rel=1e-12)
    assert np.isnan(row["eps_err"])


def test_laminar_run_is_labelled_laminar(tmp_path, monkeypatch):
    """A real run of the laminar flow, below the instability threshold (Re = 1 < 2^(1/4)
    in the unit-forcing convention, from memory): one Fourier mode, resolved."""
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    case = {"name": "laminar", "model": "lowpe", "parameters": {"Re": 1, "BPe": 1, "Pe": 0.1},
            "forcing": {"kf": 1, "amplitude": "unit"},
            "grid": {"Nx": 16, "Ny": 16, "Nz": 8}, "time": {"max_steps": 80, "dt": 0.05},
            "initial": {"kind": "laminar"},
            "output": {"diagnostics_every": 1, "progress_every": 1000},
            "compute": {"fftw_effort": "estimate", "wisdom": ""}}
    path = tmp_path / "laminar.yaml"
    path.write_text(yaml.safe_dump(case))
    assert main(["run", str(path), "-o", str(tmp_path / "run")]) == 0
    row = summarize_run(tmp_path / "run")
    assert row["regime"] == "laminar", (row["regime"], row["regime_reason"])
    assert not [w for w in row["warnings"] if "under-resolved" in w]


def test_growing_series_is_labelled_growing(tmp_path):
    """Perturbation growing as exp(0.5 t) over t in [0, 20]: a factor e^10 >> 10."""
    t = np.linspace(0, 20, 400)
    d = {"t": t, "step": np.arange(t.size), "K": 0.5 + 1e-6 * np.exp(t),
         "eps": 0.01 + 0 * t, "I": 0.01 + 0 * t, "J": -1e-8 * np.exp(t), "eta": 1e-6 * np.exp(t),
         "u_rms": 1.0 + 0 * t, "v_rms": 1e-6 * np.exp(0.5 * t), "w_rms": 1e-7 * np.exp(0.5 * t),
         "Lz_turb": 6.0 + 0 * t, "kmax_etaK": 0.5 + 0 * t}
    row = summarize_run(_write(tmp_path / "run", d))
    assert row["regime"] == "growing"
    assert not [w for w in row["warnings"] if "under-resolved: kmax" in w]


ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def test_sweep_summary_keeps_a_short_member(tmp_path):
    base = {"model": "lowpe", "parameters": {"Re": 40, "BPe": 1, "Pe": 0.1},
            "grid": {"Nx": 16, "Ny": 16, "Nz": 8},
            "time": {"max_steps": 200, "dt": 0.02, "adaptive": False},
            "initial": {"kind": "laminar_noise", "amplitude": 0.1, "seed": 3},
            "output": {"diagnostics_every": 1, "progress_every": 1000},
            "compute": {"fftw_effort": "estimate", "wisdom": ""}}
    sweep = {"sweep": "short", "base_case": base, "vary": {"time.max_steps": [37, 200]},
             "launch": {"ranks": 1, "parallel": 1}}
    p = tmp_path / "sweep.yaml"
    p.write_text(yaml.safe_dump(sweep, sort_keys=False))
    code = "import sys; from shearmix.tools.cli import main; sys.exit(main(sys.argv[1:]))"
    env = dict(os.environ, OMP_NUM_THREADS="1", SHEARMIX_SERIAL="1")
    for cmd in (["sweep", "run", str(p)], ["sweep", "summarize", str(p), "--no-plots"]):
        r = subprocess.run([sys.executable, "-c", code, *cmd], cwd=tmp_path, env=env,
                           capture_output=True, text=True, timeout=600)
        assert r.returncode == 0, r.stdout + r.stderr
    rows = list(csv.DictReader(open(tmp_path / "short" / "summary.csv")))
    assert len(rows) == 2, r.stdout
    short = [row for row in rows if row["short"] == "True"]
    assert len(short) == 1 and "at least 40 are needed" in short[0]["warnings"]
    assert short[0]["eps"] != ""
