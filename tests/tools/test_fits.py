"""Tests of shearmix.tools.analysis.fits (log-log weighted least squares, t intervals)."""
import numpy as np
import pytest
from scipy import optimize, stats

from shearmix.tools.analysis.fits import (
    EXPECTED_EXPONENTS,
    compare_exponent,
    fit_power_law,
    fit_table,
)


def test_exact_power_law_recovered_to_rounding():
    x = np.logspace(-1, 2, 7)
    f = fit_power_law(x, 0.7 * x ** (-1 / 3))
    assert f.p == pytest.approx(-1 / 3, abs=1e-12)
    assert f.A == pytest.approx(0.7, rel=1e-12)


def test_unweighted_matches_scipy_linregress():
    rng = np.random.default_rng(1)
    x = np.logspace(0, 2, 9)
    y = 2.0 * x**0.4 * np.exp(rng.normal(0, 0.1, x.size))
    f = fit_power_law(x, y)
    ref = stats.linregress(np.log(x), np.log(y))  # reference library
    assert f.p == pytest.approx(ref.slope, rel=1e-12)
    assert f.p_stderr == pytest.approx(ref.stderr, rel=1e-10)
    assert f.logA_stderr == pytest.approx(ref.intercept_stderr, rel=1e-10)
    q = stats.t.ppf(0.975, x.size - 2)
    assert f.p_ci == pytest.approx((ref.slope - q * ref.stderr, ref.slope + q * ref.stderr), rel=1e-10)


def test_weighted_matches_scipy_curve_fit():
    rng = np.random.default_rng(2)
    x = np.logspace(-1, 1, 8)
    s = 0.05 * (1 + np.arange(8))  # relative errors
    y = 3.0 * x ** (-0.5) * np.exp(rng.normal(0, s))
    for absolute in (False, True):
        f = fit_power_law(x, y, y_err=s * y, absolute_sigma=absolute)
        popt, pcov = optimize.curve_fit(
            lambda lx, a, p: a + p * lx, np.log(x), np.log(y), sigma=s, absolute_sigma=absolute
        )
        assert (np.log(f.A), f.p) == pytest.approx(tuple(popt), rel=1e-8)
        assert np.allclose(f.cov, pcov, rtol=1e-7)


def test_interval_coverage_over_seeded_trials():
    # Gaussian noise in log y: the t interval with n-2 dof has exact coverage
    # (standard regression theory). 400 trials: accept 0.95 +- 3 binomial sd
    # (3 sqrt(0.95*0.05/400) = 0.033). Exponent -1/6, 6 points over 2 decades.
    rng = np.random.default_rng(2024)
    trials, p_true = 400, -1 / 6
    x = np.logspace(0, 2, 6)
    cover_scaled = cover_abs = 0
    for _ in range(trials):
        s = rng.uniform(0.03, 0.15, x.size)
        y = 0.5 * x**p_true * np.exp(rng.normal(0, s))
        f = fit_power_law(x, y, y_err=s * y)
        cover_scaled += f.p_ci[0] <= p_true <= f.p_ci[1]
        g = fit_power_law(x, y, y_err=s * y, absolute_sigma=True)
        cover_abs += g.p_ci[0] <= p_true <= g.p_ci[1]
    tol = 3 * np.sqrt(0.95 * 0.05 / trials)
    assert abs(cover_scaled / trials - 0.95) <= tol
    assert abs(cover_abs / trials - 0.95) <= tol


def test_known_exponent_within_interval_and_comparison():
    rng = np.random.default_rng(9)
    x = np.logspace(-1, 1, 10)
    y = 4.0 * x ** (-1 / 2) * np.exp(rng.normal(0, 0.05, x.size))
    f = fit_power_law(x, y, y_err=0.05 * y)
    c = compare_exponent(f, EXPECTED_EXPONENTS[("BPe", "D_flux")])
    assert c["consistent"] and abs(c["z"]) < stats.t.ppf(0.975, f.dof)
    c2 = compare_exponent(f, -1 / 3)
    assert not c2["consistent"]
    assert c2["difference"] == pytest.approx(f.p + 1 / 3)


def test_range_selection_and_table(tmp_path):
    path = tmp_path / "table.csv"
    bpe = [0.1, 1.0, 10.0, 100.0, 1000.0]
    lz = [b ** (-1 / 3) for b in bpe]
    lz[-1] = 50.0  # outlier outside the chosen range
    rows = ["run,BPe,Lz_turb,Lz_turb_err"] + [f"r{i},{b},{v},{0.01 * v}" for i, (b, v) in enumerate(zip(bpe, lz))]
    rows.append("r9,5.0,,")  # a run without the quantity is skipped
    path.write_text("\n".join(rows) + "\n")
    f, comp = fit_table(path, "BPe", "Lz_turb", x_range=(0.1, 100.0))
    assert f.n == 4 and f.x_range == (0.1, 100.0)
    assert f.p == pytest.approx(-1 / 3, abs=1e-12)
    assert comp["expected"] == pytest.approx(-1 / 3)
    assert comp["difference"] == pytest.approx(0.0, abs=1e-12)
    with pytest.raises(ValueError, match="column 'Re' not in table"):
        fit_table(path, "Re", "Lz_turb")


def test_bad_input():
    with pytest.raises(ValueError, match="positive"):
        fit_power_law([1, 2, 3], [1, -2, 3])
    with pytest.raises(ValueError, match="at least 3 points"):
        fit_power_law([1, 2], [1, 2])
