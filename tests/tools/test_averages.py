"""Tests of shearmix.tools.analysis.averages on synthetic series with known statistics.

Coverage tolerances: over M independent seeded series the number of 1-sigma
intervals that cover the true mean is binomial(M, p) with p = 0.6827 (normal
1-sigma probability); we accept the observed rate within 3 binomial standard
deviations, sqrt(p (1-p) / M), i.e. +-0.070 for M = 400. With that choice a
correct estimator fails about 3 times in 1000 seeds; these seeds are fixed.
"""
import numpy as np
import pytest
from scipy import stats
from scipy.signal import lfilter

from shearmix.tools.analysis.averages import (
    batch_means,
    integrated_autocorrelation_time,
    time_average,
    uniform_resample,
)

P1 = stats.norm.cdf(1) - stats.norm.cdf(-1)  # 0.6827, scipy.stats reference
M = 400
TOL = 3 * np.sqrt(P1 * (1 - P1) / M)


def ar1_series(rng, phi, n, sigma, mu, count):
    """`count` stationary AR(1) series x_k = phi x_{k-1} + e_k (marginal std sigma)."""
    e = rng.normal(0.0, sigma * np.sqrt(1 - phi**2), (count, n))
    x0 = rng.normal(0.0, sigma, count)
    # zi = phi * x_{-1} makes every series start in the stationary distribution.
    x, _ = lfilter([1.0], [1.0, -phi], e, axis=1, zi=(phi * x0)[:, None])
    return x + mu


def ar1_variance_of_mean(phi, n, sigma):
    """Exact variance of the sample mean of n stationary AR(1) samples.

    Textbook result for the variance of the mean of a stationary series with
    autocorrelation phi^k (e.g. Priestley, Spectral Analysis and Time Series,
    1981; chapter quoted from memory), exact for finite n:
    Var = sigma^2 / n * (1 + 2 sum_{k=1}^{n-1} (1 - k/n) phi^k).
    """
    k = np.arange(1, n)
    return sigma**2 / n * (1 + 2 * np.sum((1 - k / n) * phi**k))


@pytest.fixture(scope="module")
def ar1_results():
    rng = np.random.default_rng(20240501)
    phi, n, sigma, mu = 0.9, 20000, 1.5, 3.0
    xs = ar1_series(rng, phi, n, sigma, mu, M)
    t = np.arange(n, dtype=float)
    return phi, n, sigma, mu, [time_average(t, x) for x in xs]


def test_ar1_acf_sigma_covers_true_mean_at_68_percent(ar1_results):
    *_, mu, res = ar1_results
    rate = np.mean([abs(r.mean - mu) <= r.sigma_acf for r in res])
    assert abs(rate - P1) <= TOL, rate


def test_ar1_batch_means_t_interval_covers_at_68_percent(ar1_results):
    *_, mu, res = ar1_results
    # Batch means have B-1 degrees of freedom: Student t quantile (scipy.stats).
    q = stats.t.ppf(0.5 + P1 / 2, res[0].n_batches - 1)
    rate = np.mean([abs(r.mean - mu) <= q * r.sigma_batch for r in res])
    assert abs(rate - P1) <= TOL, rate


def test_reported_sigma_is_the_larger_estimate(ar1_results):
    *_, mu, res = ar1_results
    for r in res:
        assert r.sigma == max(r.sigma_acf, r.sigma_batch)
    rate = np.mean([abs(r.mean - mu) <= r.sigma for r in res])
    assert rate >= P1 - TOL


def test_ar1_variance_of_mean_matches_textbook(ar1_results):
    phi, n, sigma, mu, res = ar1_results
    exact = ar1_variance_of_mean(phi, n, sigma)
    est = np.mean([r.sigma_acf**2 for r in res])
    # Relative spread of one estimate is sqrt(2(2M+1)/N) ~ 0.1 (Madras & Sokal
    # 1988, eq. for var(tau_int)), so 0.5% for the mean of 400; Sokal's window
    # bias is of order exp(-c) = 0.7% for c = 5. 3% is several times both.
    assert abs(est / exact - 1) < 0.03, (est, exact)
    # The sample variance of the 400 means checks the generator against the
    # same formula: relative sd sqrt(2/(M-1)) = 7%, so 3 sd = 21%.
    emp = np.var([r.mean for r in res], ddof=1)
    assert abs(emp / exact - 1) < 3 * np.sqrt(2 / (M - 1))


def test_ar1_integrated_time_matches_textbook(ar1_results):
    phi, *_, res = ar1_results
    # tau_int = (1 + phi) / (2 (1 - phi)) for AR(1) in Sokal's convention
    # (1/2 + sum_k phi^k); 9.5 samples here. Tolerance as above.
    exact = (1 + phi) / (2 * (1 - phi))
    est = np.mean([r.tau for r in res])
    assert abs(est / exact - 1) < 0.03, (est, exact)
    assert all(r.tau_reliable for r in res)


def test_white_noise_tau_is_one_half():
    rng = np.random.default_rng(7)
    taus = [integrated_autocorrelation_time(rng.normal(size=4000))[0] for _ in range(50)]
    # Exact value 1/2 for uncorrelated samples; estimate spread ~ sqrt(2(2M+1)/N)/2 ~ 0.02.
    assert abs(np.mean(taus) - 0.5) < 0.02


def ou_nonuniform(rng, tau, sigma, mu, t_total, count):
    """Ornstein-Uhlenbeck paths on random non-uniform grids, sampled exactly.

    Exact update (Gillespie 1996, Phys. Rev. E 54, 2084):
    x(t + h) = x(t) exp(-h/tau) + sigma sqrt(1 - exp(-2h/tau)) xi.
    """
    n = int(t_total / 0.1)
    dt = rng.uniform(0.02, 0.18, (count, n))
    dt *= t_total / dt.sum(axis=1, keepdims=True)
    t = np.concatenate([np.zeros((count, 1)), np.cumsum(dt, axis=1)], axis=1)
    a = np.exp(-dt / tau)
    b = sigma * np.sqrt(1 - a**2)
    xi = rng.normal(size=(count, n))
    x = np.empty((count, n + 1))
    x[:, 0] = rng.normal(0.0, sigma, count)
    for j in range(n):
        x[:, j + 1] = a[:, j] * x[:, j] + b[:, j] * xi[:, j]
    return t, x + mu


def test_nonuniform_ou_coverage_and_textbook_variance():
    rng = np.random.default_rng(99)
    tau, sigma, mu, T = 2.0, 1.0, -1.0, 400.0
    t, x = ou_nonuniform(rng, tau, sigma, mu, T, M)
    res = [time_average(ti, xi) for ti, xi in zip(t, x)]
    rate = np.mean([abs(r.mean - mu) <= r.sigma_acf for r in res])
    assert abs(rate - P1) <= TOL, rate
    q = stats.t.ppf(0.5 + P1 / 2, res[0].n_batches - 1)
    rate_b = np.mean([abs(r.mean - mu) <= q * r.sigma_batch for r in res])
    assert abs(rate_b - P1) <= TOL, rate_b
    # Variance of the time average of an OU process over T, exact: the double
    # integral of its autocovariance sigma^2 exp(-|s|/tau) over [0, T]^2 / T^2
    # = 2 sigma^2 tau / T * (1 - tau/T (1 - exp(-T/tau))) (standard textbook
    # result, e.g. Gardiner, Handbook of Stochastic Methods; from memory).
    exact = 2 * sigma**2 * tau / T * (1 - tau / T * (1 - np.exp(-T / tau)))
    est = np.mean([r.sigma_acf**2 for r in res])
    assert abs(est / exact - 1) < 0.05, (est, exact)
    # Integral time scale of OU is tau exactly.
    assert abs(np.mean([r.tau for r in res]) / tau - 1) < 0.05


def test_time_weighted_mean_is_exact_for_linear_signal():
    # Dense samples in [0, 1], sparse in [1, 3]: an unweighted mean of x = t
    # would be pulled towards 0.5; the time average of t over [0, 3] is 1.5.
    t = np.concatenate([np.linspace(0, 1, 101), [1.5, 2, 2.5, 3.0]])
    r = time_average(t, 2 * t + 1, n_batches=2)
    assert r.mean == pytest.approx(4.0, rel=1e-13)
    assert (r.t_start, r.t_end) == (0.0, 3.0)


def test_window_selection():
    t = np.arange(100.0)
    x = np.where(t < 50, 100.0, t)
    r = time_average(t, x, t_start=50, t_end=99, n_batches=5)
    assert r.mean == pytest.approx(74.5, rel=1e-13)  # mean of 50..99
    assert r.n_samples == 50


def test_batch_means_exact_small_case():
    # Batches [1, 1] and [3, 3]: std(ddof=1) of (1, 3) is sqrt(2), / sqrt(2) = 1.
    s, nb = batch_means([1.0, 1.0, 3.0, 3.0], n_batches=2)
    assert (s, nb) == (pytest.approx(1.0, rel=1e-15), 2)


def test_uniform_resample_linear_is_exact():
    t = np.array([0.0, 0.1, 0.3, 0.4, 0.7, 1.0])
    tu, xu = uniform_resample(t, 3 * t - 2)
    assert np.allclose(np.diff(tu), np.median(np.diff(t)))
    assert np.allclose(xu, 3 * tu - 2, atol=1e-14)


def test_bad_input_messages():
    with pytest.raises(ValueError, match="strictly increasing"):
        time_average([0.0, 1.0, 1.0, 2.0], [1, 2, 3, 4], name="eps")
    with pytest.raises(ValueError, match="'eps'.*non-finite"):
        time_average(np.arange(50.0), np.r_[np.ones(49), np.nan], name="eps")
    with pytest.raises(ValueError, match="at least"):
        time_average(np.arange(10.0), np.ones(10), n_batches=20)
