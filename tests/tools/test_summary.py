"""Tests of shearmix.tools.analysis.summary on invented time series and fields (test data only)."""
import csv
import json
import math

import h5py
import numpy as np
import pytest
import yaml

from shearmix.tools.analysis.fits import fit_table
from shearmix.tools.analysis.summary import (
    AVERAGED,
    horizontal_spectrum_kz,
    lz_turb,
    lz_turb_from_field,
    read_timeseries,
    summarize_run,
    summarize_runs,
    write_csv,
    write_json,
)

# Invented means of the averaged quantities (not physical results).
TRUE = {"eta": 0.3, "I": 0.5, "eps": 0.35, "J": -0.15, "u_rms": 0.7, "v_rms": 0.4, "w_rms": 0.25,
        "Lz_turb": 1.2, "D_flux": 0.02, "D_estimate": 0.3, "kmax_etaK": 1.6, "Pe_turb": 0.3,
        "isotropy_fluct": 0.45, "Lz_jets": 2.0, "Kmean": 0.2}
CASE = {"name": "synthetic", "model": "lowpe", "parameters": {"Re": 100.0, "BPe": 3.0, "Pe": 1.0}}


def ou_on_grid(rng, t, tau, sigma):
    """Stationary OU path at times t, exact update (Gillespie 1996, PRE 54, 2084)."""
    a = np.exp(-np.diff(t) / tau)
    b = sigma * np.sqrt(1 - a**2)
    x = np.empty(t.size)
    x[0] = rng.normal(0, sigma)
    xi = rng.normal(size=t.size - 1)
    for j in range(1, t.size):
        x[j] = a[j - 1] * x[j - 1] + b[j - 1] * xi[j - 1]
    return x


def write_series(path, data, case=CASE, model="lowpe"):
    with h5py.File(path, "w") as fh:
        for k, v in data.items():
            fh[k] = np.asarray(v, dtype=float)
        fh.attrs["case"] = yaml.safe_dump(case)
        fh.attrs["version"] = "test"
        fh.attrs["model"] = model
        fh.attrs["convention"] = "unit-laminar"


def synthetic(rng, t_total=1500.0, t_transient=100.0, tau=1.0, rel=0.1, truth=TRUE):
    dt = rng.uniform(0.05, 0.15, int(t_total / 0.1))
    t = np.concatenate([[0.0], np.cumsum(dt)])
    t = t[t <= t_total]
    ramp = np.exp(-t / (t_transient / 5))  # a transient gone by ~t_transient
    data = {"t": t, "step": np.arange(t.size), "dt": np.r_[dt[0], np.diff(t)]}
    data["K"] = 1.0 + 3.0 * ramp + 0.05 * ou_on_grid(rng, t, tau, 1.0)
    for q, m in truth.items():
        data[q] = m * (1 + 2.0 * ramp) + abs(m) * rel * ou_on_grid(rng, t, tau, 1.0)
    return data


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("runA")
    write_series(d / "timeseries.h5", synthetic(np.random.default_rng(123)))
    return d


def test_summary_recovers_known_means(run_dir):
    row = summarize_run(run_dir)
    assert row["run"] == run_dir.name and row["model"] == "lowpe"
    assert (row["Re"], row["BPe"], row["Pe"]) == (100.0, 3.0, 1.0)
    # The transient (2 e^{-t/20}) must be cut: its remaining bias is below
    # 2 e^{-t_start/20} which must be small compared with the noise.
    assert 40.0 < row["t_start"] < 400.0, row["t_start"]
    # Each mean within 3 of its own standard errors of the invented truth
    # (normal tail 0.3% per quantity; seeded).
    for q, m in TRUE.items():
        assert abs(row[q] - m) < 3 * row[f"{q}_err"], (q, row[q], row[f"{q}_err"])
    # tau of an OU series is its correlation time (1.0 here). One estimate has
    # relative sd sqrt(2(2M+1)/N) ~ 0.12 (Madras & Sokal 1988; M ~ 50, N ~ 14000
    # samples), so the mean of the 15 independent estimates is checked at
    # 3 sd / sqrt(12) = 0.10 (looser than 3 sd / sqrt(15)).
    taus = [row[f"{q}_tau"] for q in TRUE]
    assert abs(np.mean(taus) - 1.0) < 0.10, taus
    assert row["warnings"] == []  # the fluctuation keys are there: no fallback warning
    assert row["regime_basis"] == "fluctuations"
    assert row["regime"] in ("isotropic", "stratified_turbulence", "intermittent", "viscous_layers")


def test_user_start_and_exact_deterministic_means(tmp_path):
    # Constant + sine with a whole number of periods over [50, 1050]:
    # the exact time average is the constant (trapezoid error ~ (h/period)^2).
    t = np.linspace(0.0, 1050.0, 21001)
    data = {"t": t}
    data["K"] = 1.0 + 0.1 * np.sin(2 * np.pi * t / 5.0)
    for q, m in TRUE.items():
        data[q] = np.where(t < 50.0, 10.0 * m, m + 0.01 * abs(m) * np.sin(2 * np.pi * (t - 50.0) / 5.0))
    write_series(tmp_path / "timeseries.h5", data)
    row = summarize_run(tmp_path, start=50.0)
    assert row["steady_method"] == "user" and row["t_start"] == 50.0 and row["window"] == 1000.0
    for q, m in TRUE.items():
        assert row[q] == pytest.approx(m, rel=1e-6, abs=1e-9), q


def test_restart_overlap_keeps_later_records(tmp_path):
    rng = np.random.default_rng(5)
    d = synthetic(rng, t_total=800.0)
    # Simulate a run that went to t=600, stopped, and restarted from a
    # checkpoint at t=500: the records in (500, 600] appear twice, the first
    # copy being garbage here.
    cut = np.searchsorted(d["t"], 500.0, side="right")
    stop = np.searchsorted(d["t"], 600.0, side="right")
    bad = {k: np.r_[v[:stop], v[cut:]] for k, v in d.items()}
    for k in bad:
        if k not in ("t", "step", "dt"):
            bad[k][cut:stop] = 1e6
    write_series(tmp_path / "timeseries.h5", bad)
    data, _, dropped = read_timeseries(tmp_path)
    assert dropped == stop - cut
    assert np.array_equal(data["t"], d["t"]) and np.array_equal(data["eps"], d["eps"])
    row = summarize_run(tmp_path)
    assert any("overwritten by a restart" in w for w in row["warnings"])
    assert abs(row["eps"] - TRUE["eps"]) < 3 * row["eps_err"]


def test_warnings(tmp_path):
    rng = np.random.default_rng(8)
    truth = dict(TRUE, kmax_etaK=0.8, Pe_turb=3.0)
    d = synthetic(rng, t_total=300.0, tau=10.0, truth=truth)
    write_series(tmp_path / "timeseries.h5", d)
    row = summarize_run(tmp_path)
    w = " | ".join(row["warnings"])
    assert "under-resolved: kmax*eta_K" in w
    assert "outside low-Peclet validity: Pe_turb" in w
    assert "too short to average" in w  # window ~ 250, about 25 tau < 50
    row2 = summarize_run(tmp_path, kmax_etaK_min=0.5, pe_turb_max=5.0, min_correlation_times=5.0)
    w2 = " | ".join(row2["warnings"])
    for kind in ("under-resolved", "outside low-Peclet", "too short to average"):
        assert kind not in w2


def test_absent_quantity_and_boussinesq_parameters(tmp_path):
    rng = np.random.default_rng(9)
    d = synthetic(rng, t_total=400.0)
    d["Pe_turb"] = np.full(d["t"].size, np.nan)  # the engine writes NaN when Pe is unknown
    del d["D_flux"]
    case = {"model": "boussinesq", "parameters": {"Re": 50.0, "B": 2.0, "Pr": 0.1}}
    write_series(tmp_path / "timeseries.h5", d, case=case, model="boussinesq")
    row = summarize_run(tmp_path)
    assert math.isnan(row["Pe_turb"]) and math.isnan(row["D_flux"])
    assert row["Pe"] == pytest.approx(5.0) and row["BPe"] == pytest.approx(10.0)


def test_table_csv_json_and_fit(tmp_path, run_dir):
    # Three invented runs with Lz_turb = 2 BPe^(-1/3) exactly in their means.
    paths = []
    for i, bpe in enumerate([1.0, 10.0, 100.0]):
        d = tmp_path / f"r{i}"
        d.mkdir()
        truth = dict(TRUE, Lz_turb=2.0 * bpe ** (-1 / 3))
        write_series(d / "timeseries.h5", synthetic(np.random.default_rng(40 + i), truth=truth),
                     case=dict(CASE, parameters={"Re": 100.0, "BPe": bpe}))
        paths.append(d)
    rows = summarize_runs(paths)
    write_csv(rows, tmp_path / "table.csv")
    with open(tmp_path / "table.csv") as fh:
        table = list(csv.DictReader(fh))
    assert [r["run"] for r in table] == ["r0", "r1", "r2"]
    assert all(f"{q}_err" in table[0] for q in AVERAGED)
    assert table[0]["Pe"] == ""  # unknown Pe: empty cell
    fit, comp = fit_table(tmp_path / "table.csv", "BPe", "Lz_turb")
    assert fit.n == 3 and fit.p_ci[0] <= -1 / 3 <= fit.p_ci[1]
    write_json(rows[0], tmp_path / "row.json")
    back = json.loads((tmp_path / "row.json").read_text())  # strict JSON: NaN written as null
    assert back["Pe"] is None and back["Lz_turb"] == pytest.approx(rows[0]["Lz_turb"])


def test_missing_file_message(tmp_path):
    with pytest.raises(FileNotFoundError, match="timeseries.h5"):
        summarize_run(tmp_path)


# ------------------------------------------------------------- Lz_turb
def grid(n=(8, 12, 16), L=(4 * np.pi, 2 * np.pi, 2 * np.pi)):
    axes = [np.arange(k) * l / k for k, l in zip(n, L)]
    return np.meshgrid(*axes, indexing="ij")


def test_lz_turb_single_kz_is_exact():
    x, y, z = grid()
    for m in (1, 3, 5):
        u = np.cos(0.5 * x) * np.sin(m * z) + np.sin(y)  # sin(y): kz = 0 mean shear, ignored
        v = 0.3 * np.cos(y) * np.cos(m * z + 0.4)
        # Exact: only kz = m carries energy at kz > 0, so Lz_turb = 2 pi / kz.
        assert lz_turb_from_field(u, v, 2 * np.pi) == pytest.approx(2 * np.pi / m, rel=1e-13)
    # Box of height 3: kz = 2 pi * 2 / 3.
    x, y, z = grid(L=(1.0, 1.0, 3.0))
    u = np.sin(2 * np.pi * 2 * z / 3.0)
    assert lz_turb_from_field(u, 0 * u, 3.0) == pytest.approx(1.5, rel=1e-13)


def test_lz_turb_two_modes_and_parseval():
    x, y, z = grid()
    u = 1.0 * np.sin(2 * z) + 0.5 * np.cos(x / 2) * np.cos(8 * z)  # kz = 8 is the Nyquist index
    v = np.zeros_like(u)
    E, kz = horizontal_spectrum_kz(u, v, 2 * np.pi)
    # Exact energies: <sin^2> / 2 = 1/4 at kz = 2; at the Nyquist index
    # cos(8 z_j) = (-1)^j on the grid, so 0.25 <cos^2(x/2)> * 1 / 2 = 1/16.
    assert E[2] == pytest.approx(0.25, rel=1e-13) and E[8] == pytest.approx(1 / 16, rel=1e-13)
    assert np.sum(E) == pytest.approx(np.mean((u**2 + v**2) / 2), rel=1e-13)  # Parseval
    expect = 2 * np.pi * (0.25 + 1 / 16) / (2 * 0.25 + 8 / 16)
    assert lz_turb(E, kz) == pytest.approx(expect, rel=1e-13)
    # Vertical axis given explicitly.
    assert lz_turb_from_field(np.moveaxis(u, -1, 0), np.moveaxis(v, -1, 0), 2 * np.pi, axis=0) == pytest.approx(expect)


def test_lz_turb_errors():
    with pytest.raises(ValueError, match="no horizontal kinetic energy at kz > 0"):
        lz_turb([1.0, 0.0], [0.0, 1.0])
    with pytest.raises(ValueError, match="must match"):
        lz_turb([1.0, 0.0], [0.0])


# ------------------------------------------------------------- command line
def test_command_line(tmp_path, run_dir, capsys):
    from shearmix.tools.analysis.cli import main

    out_csv, out_json = tmp_path / "t.csv", tmp_path / "r.json"
    assert main(["summary", str(run_dir), "--csv", str(out_csv), "--json", str(out_json)]) == 0
    text = capsys.readouterr().out
    assert f"run {run_dir.name}" in text and "regime" in text
    js = json.loads(out_json.read_text())
    assert js["run"] == run_dir.name
    # the label is shown beside the numbers that produced it: text, JSON and CSV
    iso = js["isotropy"]
    assert iso == pytest.approx(0.45, abs=0.01)  # the time mean of isotropy_fluct (TRUE)
    line = next(ln for ln in text.splitlines() if ln.strip().startswith("from "))
    assert f"isotropy {iso:.3g}" in line and "viscous_ratio" in line and "quiet_fraction" in line
    assert "basis: fluctuations" in line
    import csv
    cols = next(csv.reader(open(out_csv)))
    for c in ("regime", "regime_reason", "regime_basis", "isotropy", "viscous_ratio", "l_nu",
              "eta", "quiet_fraction", "flux_cv", "growth", "perturbation"):
        assert c in cols and c in js, c
    assert main(["summary", str(run_dir), "--start", "200"]) == 0
    assert "[200" in capsys.readouterr().out
    # A table of one run cannot be fitted (3 points needed): bad input, exit 2.
    assert main(["fit", str(out_csv), "--x", "BPe", "--y", "Lz_turb"]) == 2
    assert "at least 3 points" in capsys.readouterr().err
    table = tmp_path / "three.csv"
    table.write_text("BPe,w_rms\n1,1\n8,0.7071067811865476\n64,0.5\n")  # w = BPe^(-1/6) exactly
    assert main(["fit", str(table), "--x", "BPe", "--y", "w_rms"]) == 0
    text = capsys.readouterr().out
    assert "p = -0.1667" in text and "expected p = -0.1667" in text
    assert main(["summary", str(tmp_path / "nowhere")]) == 2
    assert "timeseries.h5" in capsys.readouterr().err


def test_bad_start_names_file(run_dir):
    with pytest.raises(ValueError, match=r"timeseries\.h5: start time 1000000.0 is outside"):
        summarize_run(run_dir, start=1e6)
    with pytest.raises(ValueError, match="unknown summary option 'begin'"):
        summarize_run(run_dir, begin=3.0)
