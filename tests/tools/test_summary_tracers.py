"""The summary's passive-tracer columns and warnings on invented time series (test data only).

Definitions: docs/equations.md#tracers (D_c from the flux, D_chi = chi_c/G^2, the
Batchelor scale) and docs/analysis.md (the warnings)."""
import math

import h5py
import numpy as np
import pytest
import yaml

from shearmix.tools.analysis.fits import fit_table
from shearmix.tools.analysis.summary import (TRACER_AVERAGED, averaged_names, batchelor_factor,
                                             summarize_run, write_csv)
from shearmix.tools.sweeps.summary import fit_quantities, fit_rows

RE = 20.0
CASE = {"name": "synthetic", "model": "lowpe", "parameters": {"Re": RE, "BPe": 3.0, "Pe": 1.0},
        "tracers": {"salt": {"Sc": 10.0, "gradient": 2.0}, "dye": {"Pe": 10.0, "gradient": 1.0}}}
# invented flow means (not physical results)
FLOW = {"eta": 0.3, "I": 0.5, "eps": 0.35, "J": -0.15, "u_rms": 0.7, "v_rms": 0.4,
        "w_rms": 0.25, "Lz_turb": 1.2, "D_flux": 0.02, "D_estimate": 0.3, "kmax_etaK": 2.0,
        "isotropy_fluct": 0.45, "Lz_jets": 2.0, "Kmean": 0.2}


def write_series(path, data, case=CASE):
    with h5py.File(path, "w") as fh:
        for k, v in data.items():
            fh[k] = np.asarray(v, dtype=float)
        fh.attrs["case"] = yaml.safe_dump(case, sort_keys=False)  # the case order
        fh.attrs["version"] = "test"
        fh.attrs["model"] = case["model"]
        fh.attrs["convention"] = "unit"


def ou_on_grid(rng, t, tau, sigma):
    """Stationary OU path at times t, exact update (Gillespie 1996, PRE 54, 2084)."""
    a = np.exp(-np.diff(t) / tau)
    b = sigma * np.sqrt(1 - a**2)
    x = np.empty(t.size)
    x[0] = rng.normal(0, sigma)
    for j in range(1, t.size):
        x[j] = a[j - 1] * x[j - 1] + b[j - 1] * rng.normal()
    return x


def periodic(t, tracers):
    """Flow and tracer series: constant + a sine of period 5 (a whole number of periods
    over [50, 1050]: the exact time mean is the constant), 10x the constant before 50."""
    data = {"t": t, "K": 1.0 + 0.1 * np.sin(2 * np.pi * t / 5.0)}
    wave = np.sin(2 * np.pi * (t - 50.0) / 5.0)
    for q, m in {**FLOW, **tracers}.items():
        data[q] = np.where(t < 50.0, 10.0 * m, m + 0.01 * abs(m) * wave)
    return data


TRACERS = {"c_rms.salt": 0.8, "D_c.salt": 0.04, "D_chi.salt": 0.04, "wc.salt": -0.08,
           "c_rms.dye": 0.3, "D_c.dye": 0.05, "D_chi.dye": 0.05, "wc.dye": -0.05}


def test_tracer_means_parameters_and_resolution(tmp_path):
    t = np.linspace(0.0, 1050.0, 21001)
    write_series(tmp_path / "timeseries.h5", periodic(t, TRACERS))
    row = summarize_run(tmp_path, start=50.0)
    for key, m in TRACERS.items():
        if key.split(".")[0] in TRACER_AVERAGED:
            assert row[key] == pytest.approx(m, rel=1e-6), key
            assert math.isfinite(row[f"{key}_err"]) and row[f"{key}_tau"] > 0, key
    # Sc given: Pe_c = Sc Re; Pe given: Sc = Pe_c/Re (docs/equations.md#tracers)
    assert (row["Sc.salt"], row["Pe_c.salt"], row["G.salt"]) == (10.0, 10.0 * RE, 2.0)
    assert (row["Sc.dye"], row["Pe_c.dye"], row["G.dye"]) == (10.0 / RE, 10.0, 1.0)
    # Batchelor 1959: kmax eta_B = kmax eta_K Sc^(-1/2) for Sc > 1; the flow's for Sc <= 1
    assert row["kmax_etaB.salt"] == pytest.approx(2.0 / math.sqrt(10.0), rel=1e-6)
    assert row["kmax_etaB.dye"] == pytest.approx(row["kmax_etaK"], rel=1e-12)
    assert batchelor_factor(4.0) == 0.5 and batchelor_factor(1.0) == batchelor_factor(0.2) == 1.0
    # salt is under-resolved (0.63 < 1), the flow (2.0) and dye are not
    under = [w for w in row["warnings"] if "under-resolved" in w]
    assert under == [f"under-resolved tracer salt: kmax*eta_B = {2 / math.sqrt(10):.3g} < 1 "
                     "(Sc = 10)"], row["warnings"]
    assert not [w for w in row["warnings"] if "equilibrium" in w], row["warnings"]
    # the tracers' columns follow the flow's, in the case's order, and the API names them
    names = averaged_names(row)
    assert names[-8:] == [f"{q}.{n}" for n in ("salt", "dye") for q in TRACER_AVERAGED]
    keys = list(row)
    assert keys.index("Ri_jets_tau") < keys.index("Sc.salt") < keys.index("c_rms.salt") \
        < keys.index("Sc.dye") < keys.index("eps_cv")


def _noisy(rng, t, means, rel=0.1, tau=1.0):
    data = {"t": t, "K": 1.0 + 0.05 * ou_on_grid(rng, t, tau, 1.0)}
    for q, m in {**FLOW, **means}.items():
        data[q] = m + abs(m) * rel * ou_on_grid(rng, t, tau, 1.0)
    return data


def test_equilibrium_warning_from_the_two_diffusivities(tmp_path):
    rng = np.random.default_rng(11)
    t = np.cumsum(rng.uniform(0.05, 0.15, 8000))
    # dye: D_c and D_chi agree (independent noise about one mean); salt: D_c 30% above D_chi
    means = {"c_rms.dye": 0.3, "D_c.dye": 0.05, "D_chi.dye": 0.05,
             "c_rms.salt": 0.8, "D_c.salt": 0.052, "D_chi.salt": 0.04}
    write_series(tmp_path / "timeseries.h5", _noisy(rng, t, means))
    row = summarize_run(tmp_path, start=float(t[0]))
    for n in ("dye", "salt"):
        z = (row[f"D_c.{n}"] - row[f"D_chi.{n}"]) / math.hypot(row[f"D_c.{n}_err"],
                                                                row[f"D_chi.{n}_err"])
        assert row[f"D_gap_z.{n}"] == pytest.approx(z, rel=1e-12)
    # 12 % of a mean over ~800 correlation times: many standard errors (about 0.35% each)
    assert row["D_gap_z.salt"] > 5
    # seeded: the dye's gap is a draw of a unit normal, inside 2 here
    assert abs(row["D_gap_z.dye"]) < 2
    eq = [w for w in row["warnings"] if "not at equilibrium" in w]
    assert len(eq) == 1 and eq[0].startswith("tracer salt not at equilibrium: D_c = 0.05")
    assert "combined standard errors (> 2)" in eq[0]
    # the threshold is an option
    row = summarize_run(tmp_path, start=float(t[0]), tracer_sigmas=1e3)
    assert not [w for w in row["warnings"] if "not at equilibrium" in w]


@pytest.mark.parametrize("rise, warned", [(0.3, True), (0.1, False)])
def test_equilibrium_warning_from_a_drifting_c_rms(tmp_path, rise, warned):
    # c_rms = a + b (t - t0) over a window of length L: the halves' exact means are
    # a + b L/4 and a + 3 b L/4, their difference over their mean (b L/2)/(a + b L/2)
    t = np.linspace(0.0, 400.0, 4001)
    a, b = 1.0, rise / 400.0
    data = periodic(t, {**TRACERS})
    data["c_rms.dye"] = a + b * t
    write_series(tmp_path / "timeseries.h5", data)
    row = summarize_run(tmp_path, start=0.0)
    exact = (b * 400.0 / 2) / (a + b * 400.0 / 2)
    assert row["c_rms_drift.dye"] == pytest.approx(exact, rel=1e-9)
    eq = [w for w in row["warnings"] if w.startswith("tracer dye not at equilibrium: c_rms")]
    assert bool(eq) == warned, row["warnings"]
    if warned:
        assert f"{100 * exact:+.3g}%, beyond 10%" in eq[0]


def test_short_series_carries_tracer_means(tmp_path):
    t = np.linspace(0.0, 10.0, 11)
    data = periodic(t, TRACERS)
    data["D_c.dye"] = 0.1 * t
    write_series(tmp_path / "timeseries.h5", data)
    row = summarize_run(tmp_path)
    assert row["short"]
    assert row["D_c.dye"] == pytest.approx(0.5)  # trapezoid mean of a line over [0, 10]
    assert math.isnan(row["D_c.dye_err"]) and row["Sc.salt"] == 10.0


def test_a_tracer_added_within_a_segment_takes_its_keys_from_case_yaml(tmp_path):
    t = np.linspace(0.0, 1050.0, 21001)
    data = periodic(t, TRACERS)
    for q in ("c_rms", "D_c", "D_chi", "wc"):
        data[f"{q}.dye"][t < 100.0] = np.nan  # recorded from its restart on
    case = {k: v for k, v in CASE.items() if k != "tracers"}
    case["tracers"] = {"salt": CASE["tracers"]["salt"]}
    write_series(tmp_path / "timeseries.h5", data, case)
    (tmp_path / "case.yaml").write_text(yaml.safe_dump(CASE))
    row = summarize_run(tmp_path, start=200.0)
    assert row["Pe_c.dye"] == 10.0 and row["D_c.dye"] == pytest.approx(0.05, rel=1e-6)


def _table(tmp_path):
    # invented rows: D_c.dye = 0.2 BPe^(-1/2) exactly, 5% error bars
    rows = []
    for bpe in (1.0, 3.0, 10.0, 30.0):
        rows.append({"run": f"m{bpe:g}", "segment": 0, "segments": 1, "BPe": bpe, "Sc.dye": 0.5, "D_c.dye": 0.2 * bpe ** -0.5,
                     "D_c.dye_err": 0.01 * bpe ** -0.5, "D_chi.dye": 0.21 * bpe ** -0.5,
                     "D_chi.dye_err": 0.01 * bpe ** -0.5, "short": False, "regime": "x"})
    path = tmp_path / "summary.csv"
    write_csv(rows, path)
    return rows, path


def test_fits_read_the_tracer_columns(tmp_path, cli_process):
    rows, path = _table(tmp_path)
    fit, _ = fit_table(path, "BPe", "D_c.dye")
    assert fit.p == pytest.approx(-0.5, abs=1e-12) and fit.A == pytest.approx(0.2, rel=1e-12)
    r = cli_process("fit", str(path), "--x", "BPe", "--y", "D_c.dye", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith("D_c.dye = A * BPe^p") and "p = -0.5 +- " in r.stdout
    names = fit_quantities(rows)
    assert names[-2:] == ("D_c.dye", "D_chi.dye")
    fits = {f["y"]: f for f in fit_rows(rows, quantities=names)}
    assert fits["D_chi.dye"]["p"] == pytest.approx(-0.5, abs=1e-12)
    assert fits["D_chi.dye"]["weighted"]


def test_scaling_figure_draws_the_tracer_columns(tmp_path):
    from shearmix.tools.plots.figures import plot_scaling, quantity_label
    rows, _ = _table(tmp_path)
    names = fit_quantities(rows)
    fits = fit_rows(rows, quantities=names)
    out = plot_scaling(rows, fits, str(tmp_path / "scaling.png"), quantities=names)
    assert (tmp_path / "scaling.png").stat().st_size > 0 and str(out).endswith("scaling.png")
    assert quantity_label("D_chi.dye") == r"tracer dye: $D_c$ (from $\chi_c$)"
