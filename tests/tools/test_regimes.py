"""Tests of shearmix.tools.analysis.regimes: labels of hand-made summaries follow the documented
rules (the thresholds are a choice of this tool, not a published criterion; the regime
descriptions are facts of the trade, no source).

References: the formulas of docs/equations.md#regimes evaluated by hand; scipy.stats.norm for
the time fraction a Gaussian signal spends below half its mean; exact exponentials and square
waves for the growth and quiet-fraction numbers."""
import math
import os

import numpy as np
import pytest
import yaml

from shearmix.tools.analysis.regimes import (REGIMES, RegimeThresholds, classify, flow_numbers,
                                             flow_state, flux_intermittency, regime_numbers,
                                             thresholds_markdown, thresholds_yaml)

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

# Hand-made summary on the fluctuation basis: U = sqrt(2 Kmean) = 1, Re U kf = 200,
# l_nu = 2 pi / sqrt(200), viscous_ratio = Lz_jets sqrt(200) / (2 pi) = 2.25.
BASE = {"isotropy_fluct": 0.4, "Kmean": 0.5, "Lz_jets": 2.25 * 2 * math.pi / math.sqrt(200.0),
        "eta": 0.4, "quiet_fraction": 0.05, "Re": 200.0, "kf": 1.0,
        # total-velocity numbers too, which the fluctuation basis must ignore
        "u_rms": 0.6, "v_rms": 0.8, "w_rms": 0.9, "Lz_turb": 1e-3}
OLD = {"u_rms": 0.6, "v_rms": 0.8, "w_rms": 0.2, "eta": 0.4, "quiet_fraction": 0.05,
       "Lz_turb": 1.0, "Re": 200.0}


def with_(base=BASE, **kw):
    d = dict(base)
    d.update(kw)
    return d


def test_numbers_by_hand():
    n, basis = regime_numbers(BASE)
    assert basis == "fluctuations"
    assert n["isotropy"] == 0.4
    assert n["l_nu"] == pytest.approx(2 * math.pi / math.sqrt(200.0), rel=1e-14)
    assert n["viscous_ratio"] == pytest.approx(2.25, rel=1e-14)
    assert (n["eta"], n["quiet_fraction"]) == (0.4, 0.05)
    # kf enters l_nu = 2 pi / sqrt(Re U kf): kf = 4 halves l_nu
    n4, _ = regime_numbers(with_(kf=4.0))
    assert n4["l_nu"] == pytest.approx(n["l_nu"] / 2, rel=1e-14)


def test_every_label_is_reached():
    assert classify(BASE).label == "stratified_turbulence"
    assert classify(with_(isotropy_fluct=0.9)).label == "isotropic"
    r = classify(with_(quiet_fraction=0.5))
    assert r.label == "intermittent" and "quiet_fraction" in r.reason
    r = classify(with_(eta=0.1))
    assert r.label == "intermittent" and "eta" in r.reason
    r = classify(with_(Lz_jets=BASE["Lz_jets"] / 3, isotropy_fluct=0.9, eta=0.05))
    assert r.label == "viscous_layers"  # first rule wins over isotropy and eta
    assert classify(with_(Lz_jets=float("nan"))).label == "undetermined"
    assert classify(with_(Kmean=0.0)).label == "undetermined"
    labels = {classify(s).label for s in (BASE, with_(isotropy_fluct=0.9), with_(eta=0.1),
                                          with_(Lz_jets=1e-3), with_(eta=float("nan")))}
    assert labels | {"laminar", "growing"} == set(REGIMES)


def test_ties_at_the_thresholds():
    th = RegimeThresholds()
    # isotropy >= isotropy_min is isotropic; exactly at the threshold counts
    assert classify(with_(isotropy_fluct=th.isotropy_min)).label == "isotropic"
    assert classify(with_(isotropy_fluct=math.nextafter(th.isotropy_min, 0))).label == "stratified_turbulence"
    # quiet_fraction > max fires; equal does not
    assert classify(with_(quiet_fraction=th.quiet_fraction_max)).label == "stratified_turbulence"
    assert classify(with_(quiet_fraction=math.nextafter(th.quiet_fraction_max, 1))).label == "intermittent"
    # eta < eta_min fires; equal does not
    assert classify(with_(eta=th.eta_min)).label == "stratified_turbulence"
    assert classify(with_(eta=math.nextafter(th.eta_min, 0))).label == "intermittent"
    # viscous_ratio < min fires; equal does not (threshold placed on the computed number)
    v = regime_numbers(BASE)[0]["viscous_ratio"]
    assert classify(BASE, RegimeThresholds(viscous_ratio_min=v)).label == "stratified_turbulence"
    assert classify(BASE, RegimeThresholds(viscous_ratio_min=math.nextafter(v, 10))).label == "viscous_layers"


def test_fallback_to_the_total_velocity_says_so():
    r = classify(OLD)
    assert r.basis == "total velocity"
    assert "older series without isotropy_fluct, Lz_jets, Kmean" in r.fallback
    uh = math.sqrt(0.5)  # sqrt((0.6^2 + 0.8^2) / 2)
    assert r.numbers["isotropy"] == pytest.approx(0.2 / uh, rel=1e-14)
    assert r.numbers["viscous_ratio"] == pytest.approx(math.sqrt(200.0 * uh) / (2 * math.pi), rel=1e-14)
    assert r.label == "stratified_turbulence"
    assert classify(BASE).fallback == ""
    # one fluctuation key missing is enough to fall back (the numbers need all three)
    d = dict(BASE)
    del d["Kmean"]
    assert classify(d).basis == "total velocity"


def test_missing_key_is_named():
    d = dict(BASE)
    del d["quiet_fraction"]
    with pytest.raises(ValueError, match="lacks 'quiet_fraction'"):
        classify(d)


def test_thresholds_file_docs_and_yaml(tmp_path):
    th = RegimeThresholds()
    shipped = os.path.join(ROOT, "configs", "regime-thresholds.yaml")
    # the shipped file is the defaults, written by `shearmix regimes thresholds --yaml`
    assert RegimeThresholds.from_yaml(shipped) == th
    assert open(shipped).read() == thresholds_yaml(th)
    # docs/equations.md#regimes shows the same table `shearmix regimes thresholds --markdown` prints
    eq = open(os.path.join(ROOT, "docs/equations.md"), encoding="utf-8").read()
    assert thresholds_markdown(th) in eq
    assert "placed by the Re = 50 campaign where it can" in eq
    p = tmp_path / "th.yaml"
    p.write_text("eta_min: 0.5\n")
    t2 = RegimeThresholds.from_yaml(p)
    assert t2.eta_min == 0.5 and t2.isotropy_min == th.isotropy_min
    assert classify(BASE, t2).label == "intermittent"
    p.write_text("eps_cv_max: 0.5\n")
    with pytest.raises(ValueError, match="'eps_cv_max' was replaced by 'quiet_fraction_max'"):
        RegimeThresholds.from_yaml(p)
    p.write_text("eta_max: 0.5\n")
    with pytest.raises(ValueError, match="unknown regime threshold 'eta_max'"):
        RegimeThresholds.from_yaml(p)
    with pytest.raises(ValueError, match="'growth_factor' must be > 1"):
        RegimeThresholds(growth_factor=1.0)
    assert all(doc for *_, doc in th.rules())  # every threshold has its docstring


def test_quiet_fraction_of_bursts_and_of_steady_mixing():
    # square wave: flux 1 for 70% of each period, 0 for 30%: mean 0.7, below 0.35 exactly 30%
    t = np.linspace(0.0, 100.0, 100001)
    on = (t % 10.0) < 7.0
    q, cv = flux_intermittency(t, -np.where(on, 1.0, 0.0))
    assert q == pytest.approx(0.3, abs=2e-4)
    assert cv == pytest.approx(math.sqrt(0.7 * 0.3) / 0.7, rel=1e-3)  # Bernoulli std / mean
    # Gaussian steady mixing, relative spread c: fraction Phi(-1/(2c)) (scipy.stats.norm)
    from scipy.stats import norm
    rng = np.random.default_rng(7)
    n = 20000
    for c in (0.3, 0.5):
        f = 1.0 + c * rng.normal(size=n)
        q, _ = flux_intermittency(np.arange(n, dtype=float), -f)
        p = norm.cdf(-1 / (2 * c))
        assert abs(q - p) < 4 * math.sqrt(p * (1 - p) / n), (c, q, p)
    assert math.isnan(flux_intermittency(t, np.zeros_like(t))[0])  # no mean flux: undefined


def test_flow_state_from_the_perturbation_energies():
    t = np.linspace(0.0, 20.0, 200)
    lam = np.full_like(t, 0.5)
    # 2D saturated, 3D growing as exp(0.4 t): amplitude grows e^(0.2 * 20) = e^4 = 54.6 > 10
    s = {"K2d_laminar": lam, "K2d_pert": np.full_like(t, 1e-2), "K3d": 1e-12 * np.exp(0.4 * t)}
    f = flow_numbers(t, s)
    assert f["growth"] == pytest.approx(math.exp(4.0), rel=1e-9)
    assert flow_state(t, s) == "growing"
    assert flow_state(t, s, RegimeThresholds(growth_factor=60.0)) == ""  # 54.6 < 60
    # laminar: perturbation amplitude sqrt((1e-8 + 1e-8)/0.5) = 2e-4 <= 1e-3
    s = {"K2d_laminar": lam, "K2d_pert": np.full_like(t, 1e-8), "K3d": np.full_like(t, 1e-8)}
    assert flow_numbers(t, s)["perturbation"] == pytest.approx(2e-4, rel=1e-12)
    assert flow_state(t, s) == "laminar"
    assert flow_state(t, s, RegimeThresholds(laminar_ratio=1e-4)) == ""
    # the new keys win over u_rms, v_rms, w_rms (whose growth would say 'growing')
    s.update(u_rms=np.ones_like(t), v_rms=1e-6 * np.exp(t), w_rms=1e-6 * np.exp(t))
    assert flow_state(t, s) == "laminar"
    # older series: q = sqrt(v^2 + w^2) against u_rms
    old = {k: s[k] for k in ("u_rms", "v_rms", "w_rms")}
    assert flow_state(t, old) == "growing"


def test_summary_of_an_older_series_warns_and_uses_the_old_numbers(tmp_path):
    """A series without the fluctuation keys (as written before they existed)."""
    import h5py
    from shearmix.tools.analysis.summary import summarize_run
    rng = np.random.default_rng(3)
    n = 400
    t = np.arange(n) * 0.1
    d = {"t": t, "step": np.arange(n), "K": 1 + 0.01 * rng.normal(size=n),
         "eps": 0.3 + 0.01 * rng.normal(size=n), "J": -0.2 + 0.01 * rng.normal(size=n),
         "eta": 0.4 + 0.01 * rng.normal(size=n), "u_rms": np.full(n, 0.6), "v_rms": np.full(n, 0.8),
         "w_rms": np.full(n, 0.2), "Lz_turb": np.full(n, 1.0), "kmax_etaK": np.full(n, 2.0)}
    (tmp_path / "run").mkdir()
    with h5py.File(tmp_path / "run" / "timeseries.h5", "w") as fh:
        for k, v in d.items():
            fh[k] = v
        fh.attrs["case"] = yaml.safe_dump({"name": "old", "model": "lowpe",
                                           "parameters": {"Re": 200.0, "BPe": 3.0}})
    row = summarize_run(tmp_path / "run", start=0.0)
    assert row["regime_basis"] == "total velocity"
    assert any(w.startswith("older series without isotropy_fluct") for w in row["warnings"])
    assert row["isotropy"] == pytest.approx(0.2 / math.sqrt(0.5), rel=1e-12)
    # -J = 0.2 +- 0.01 never falls below 0.1: quiet fraction 0 (steady mixing)
    assert row["quiet_fraction"] == 0.0
    assert row["regime"] == "stratified_turbulence"
