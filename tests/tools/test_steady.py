"""Tests of shearmix.tools.analysis.steady (MSER truncation rule, White 1997)."""
import numpy as np
import pytest
from scipy.signal import lfilter

from shearmix.tools.analysis.averages import time_average
from shearmix.tools.analysis.steady import detect_steady_state, mser


def test_mser_statistic_hand_computed():
    # x = [4, 0, 0, 0], batch 1: d=0 keeps all, mean 1, sum of squares
    # 9+1+1+1 = 12, MSER = 12/4^2 = 0.75; d=1 and d=2 keep only zeros -> 0.
    assert np.allclose(mser([4.0, 0.0, 0.0, 0.0], batch=1), [0.75, 0.0, 0.0])


def test_mser_statistic_against_definition_with_batches():
    # Definition of MSER-m evaluated by hand for a small series of 3 batches
    # of 2: z = (1, 3, 8); d=0: mean 4, ss = 9+1+16 = 26, /9; d=1: z=(3,8),
    # mean 5.5, ss = 12.5, /4.
    stat = mser([0.0, 2.0, 3.0, 3.0, 7.0, 9.0, 5.0, 100.0], batch=2)
    # 8 points -> 4 batches z = (1, 3, 8, 52.5); recompute with all four.
    z = np.array([1.0, 3.0, 8.0, 52.5])
    expect = [np.sum((z[d:] - z[d:].mean()) ** 2) / (4 - d) ** 2 for d in range(3)]
    assert np.allclose(stat, expect, rtol=1e-13)
    stat3 = mser([0.0, 2.0, 3.0, 3.0, 7.0, 9.0, 1.0, 1.0], batch=2)
    assert stat3[0] == pytest.approx(np.var([1.0, 3.0, 8.0, 1.0]) * 4 / 16)


def ar1(rng, phi, n):
    x0 = rng.normal()
    return lfilter([1.0], [1.0, -phi], rng.normal(0, np.sqrt(1 - phi**2), n), zi=[phi * x0])[0]


def test_step_is_found_on_nonuniform_grid():
    rng = np.random.default_rng(11)
    dt = rng.uniform(0.05, 0.15, 6000)
    t = np.concatenate([[0.0], np.cumsum(dt)])
    x = ar1(rng, 0.8, t.size) + np.where(t < 100.0, 6.0, 0.0)
    st = detect_steady_state(t, {"K": x})
    # The offset (6 noise standard deviations) must be cut entirely, and the
    # rule should not throw away more than a few correlation times after it.
    assert 100.0 <= st.t_start <= 110.0, st
    assert st.reliable and st.method == "MSER-5" and st.quantity == "K"


def test_exponential_transient_bias_removed():
    rng = np.random.default_rng(5)
    t = np.arange(20000) * 0.05
    transient = 10.0 * np.exp(-t / 20.0)
    x = 2.0 + transient + 0.5 * ar1(rng, 0.95, t.size)
    st = detect_steady_state(t, x)
    after = time_average(t, x, t_start=st.t_start)
    # MSER's purpose (White 1997) is a truncated mean whose remaining bias is
    # below its standard error. The bias is known exactly here: the time
    # average of the transient over the kept window.
    kept = t >= st.t_start
    bias = np.trapezoid(transient[kept], t[kept]) / (t[-1] - t[kept][0])
    assert bias < after.sigma, (st.t_start, bias, after.sigma)
    # Without truncation the bias would be several standard errors.
    assert np.trapezoid(transient, t) / t[-1] > 5 * after.sigma
    assert st.reliable


def test_latest_start_wins_for_several_quantities():
    rng = np.random.default_rng(3)
    t = np.arange(10000) * 0.1
    a = ar1(rng, 0.5, t.size) + np.where(t < 200, 8.0, 0.0)
    b = ar1(rng, 0.5, t.size) + np.where(t < 400, 8.0, 0.0)
    st = detect_steady_state(t, {"I": a, "eps": b})
    assert st.quantity == "eps"
    assert 400 <= st.t_start <= 410
    assert 200 <= st.per_quantity["I"] <= 210


def test_drift_is_flagged_unreliable():
    rng = np.random.default_rng(8)
    t = np.arange(5000) * 0.1
    x = 0.01 * t + 0.1 * rng.normal(size=t.size)  # never steady
    assert not detect_steady_state(t, x).reliable


def test_user_override_and_errors():
    t = np.arange(100.0)
    st = detect_steady_state(t, np.ones(100), start=42.0)
    assert (st.t_start, st.method) == (42.0, "user")
    with pytest.raises(ValueError, match="outside the time series range"):
        detect_steady_state(t, np.ones(100), start=150.0)
    with pytest.raises(ValueError, match="at least 4 batches"):
        detect_steady_state(np.arange(10.0), np.ones(10))
