"""Tests of shearmix.tools.analysis.regimes: labels of hand-made summaries follow the documented
thresholds (a choice of this tool, not a published criterion)."""
import math

import pytest

from shearmix.tools.analysis.regimes import RegimeThresholds, classify, regime_numbers

# Hand-made summary: u_h = sqrt((0.6^2 + 0.8^2)/2) = sqrt(0.5); Re u_h = 200 sqrt(0.5).
BASE = {"u_rms": 0.6, "v_rms": 0.8, "w_rms": 0.2, "eta": 0.4, "eps_cv": 0.2, "Lz_turb": 1.0, "Re": 200.0}


def with_(**kw):
    d = dict(BASE)
    d.update(kw)
    return d


def test_numbers_by_hand():
    n = regime_numbers(BASE)
    uh = math.sqrt(0.5)
    assert n["isotropy"] == pytest.approx(0.2 / uh, rel=1e-14)
    assert n["viscous_ratio"] == pytest.approx(1.0 * math.sqrt(200.0 * uh) / (2 * math.pi), rel=1e-14)
    assert (n["eta"], n["eps_cv"]) == (0.4, 0.2)


def test_stratified_turbulence():
    r = classify(BASE)
    assert r.label == "stratified_turbulence"
    assert r.numbers == regime_numbers(BASE)


def test_isotropic_at_threshold():
    uh = math.sqrt(0.5)
    assert classify(with_(w_rms=0.6 * uh * (1 + 1e-9))).label == "isotropic"
    assert classify(with_(w_rms=0.6 * uh * (1 - 1e-9))).label == "stratified_turbulence"


def test_intermittent_by_cv_or_eta():
    assert classify(with_(eps_cv=0.5 + 1e-9)).label == "intermittent"
    assert classify(with_(eps_cv=0.5)).label == "stratified_turbulence"
    r = classify(with_(eta=0.19))
    assert r.label == "intermittent" and "eta" in r.reason


def test_viscous_layers_first():
    # viscous_ratio = Lz sqrt(Re u_h) / (2 pi) < 1 needs Lz < 2 pi / sqrt(Re u_h).
    lz = 2 * math.pi / math.sqrt(200.0 * math.sqrt(0.5))
    assert classify(with_(Lz_turb=0.999 * lz, w_rms=5.0)).label == "viscous_layers"
    assert classify(with_(Lz_turb=1.001 * lz)).label == "stratified_turbulence"


def test_custom_thresholds_and_yaml(tmp_path):
    p = tmp_path / "th.yaml"
    p.write_text("eta_min: 0.5\n")
    th = RegimeThresholds.from_yaml(p)
    assert th.eta_min == 0.5 and th.isotropy_min == RegimeThresholds().isotropy_min
    assert classify(BASE, th).label == "intermittent"
    bad = tmp_path / "bad.yaml"
    bad.write_text("eta_max: 0.5\n")
    with pytest.raises(ValueError, match="unknown regime threshold 'eta_max'"):
        RegimeThresholds.from_yaml(bad)
    with pytest.raises(ValueError, match="'eta_min' must be a finite number"):
        RegimeThresholds(eta_min=float("nan"))


def test_undetermined_and_missing_key():
    assert classify(with_(u_rms=0.0, v_rms=0.0)).label == "undetermined"
    assert classify(with_(Lz_turb=float("nan"))).label == "undetermined"
    d = dict(BASE)
    del d["eps_cv"]
    with pytest.raises(ValueError, match="lacks 'eps_cv'"):
        classify(d)
