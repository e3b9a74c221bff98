"""Time averages of a correlated time series, with their uncertainty.

A run's diagnostics are strongly correlated in time, so the naive standard
error ``std/sqrt(N)`` of a time average is far too small. Two estimators of
the variance of the mean are computed here and both are reported:

* **Batch means** (e.g. Law & Kelton, *Simulation Modeling and Analysis*;
  Flyvbjerg & Petersen 1989, J. Chem. Phys. 91, 461): the averaging window is
  cut into ``B`` equal batches; if each batch is much longer than the
  correlation time the batch means are nearly independent and

      sigma_batch^2 = var(batch means, ddof=1) / B,

  with ``B - 1`` degrees of freedom (use the Student t distribution for
  intervals).

* **Integrated autocorrelation time** with Sokal's automatic windowing
  (Madras & Sokal 1988, J. Stat. Phys. 50, 109; Sokal 1997, "Monte Carlo
  methods in statistical mechanics: foundations and new algorithms"):

      tau_int(M) = 1/2 + sum_{k=1}^{M} rho(k)     (in samples)

  where ``rho`` is the normalised autocovariance (biased estimator, computed
  by FFT) and ``M`` is the smallest window with ``M >= c * tau_int(M)``
  (``c = 5`` by default). Then

      sigma_acf^2 = 2 tau_int C(0) / N.

The reported ``sigma`` is the larger of the two (a conservative choice,
common practice); both are kept.

Non-uniform sampling (runs use an adaptive time step): the mean is the
time-weighted (trapezoidal) average over the window, i.e. samples are weighted
by the time they represent. For the uncertainty the series is first resampled
by linear interpolation onto a uniform grid whose spacing is the median
sample spacing; both estimators above work on that grid. The integrated
autocorrelation time is reported in time units, ``tau = h * tau_int``, which
tends to the integral time scale ``int_0^inf rho(t) dt`` as ``h -> 0``; the
number of independent samples in the window is ``T / (2 tau)``.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

__all__ = [
    "TimeAverage",
    "time_average",
    "batch_means",
    "integrated_autocorrelation_time",
    "autocorrelation",
    "uniform_resample",
    "check_time_axis",
]


@dataclass(frozen=True)
class TimeAverage:
    """Time average of one quantity over a window, with its uncertainty.

    Attributes
    ----------
    mean : float
        Time-weighted (trapezoidal) average over ``[t_start, t_end]``.
    sigma : float
        Reported one-standard-deviation uncertainty of ``mean``:
        ``max(sigma_batch, sigma_acf)``.
    sigma_batch : float
        Batch-means estimate (``n_batches - 1`` degrees of freedom).
    sigma_acf : float
        Estimate from the integrated autocorrelation time.
    tau : float
        Integrated autocorrelation time in time units (Sokal windowing).
    n_independent : float
        ``(t_end - t_start) / (2 tau)``: effective number of independent
        samples in the window.
    t_start, t_end : float
        Averaging window.
    n_samples : int
        Number of original samples in the window.
    n_batches : int
        Number of batches used for ``sigma_batch``.
    tau_reliable : bool
        False when Sokal's window condition was never met (series too short
        compared with its correlation time).
    """

    mean: float
    sigma: float
    sigma_batch: float
    sigma_acf: float
    tau: float
    n_independent: float
    t_start: float
    t_end: float
    n_samples: int
    n_batches: int
    tau_reliable: bool

    def as_dict(self):
        """Return the fields as a plain dict."""
        return asdict(self)


def check_time_axis(t, x=None, name="x"):
    """Validate a time axis (and optionally a series on it).

    Parameters
    ----------
    t : array_like
        Sample times; must be 1-D, finite and strictly increasing.
    x : array_like, optional
        Series sampled at ``t``; must have the same length and be finite.
    name : str
        Name used in error messages.

    Returns
    -------
    t, x : ndarray
        float64 copies (``x`` is None if not given).
    """
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise ValueError(f"time axis for '{name}' must be 1-D with at least 2 samples, got shape {t.shape}")
    if not np.all(np.isfinite(t)):
        raise ValueError(f"time axis for '{name}' contains non-finite values")
    if np.any(np.diff(t) <= 0):
        raise ValueError(f"time axis for '{name}' must be strictly increasing")
    if x is None:
        return t, None
    x = np.asarray(x, dtype=float)
    if x.shape != t.shape:
        raise ValueError(f"series '{name}' has shape {x.shape}, time axis has shape {t.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError(f"series '{name}' contains non-finite values (NaN or inf)")
    return t, x


def uniform_resample(t, x, h=None):
    """Linear interpolation of ``x(t)`` onto a uniform grid.

    Parameters
    ----------
    t, x : array_like
        Strictly increasing times and the series.
    h : float, optional
        Grid spacing; default the median of ``diff(t)``.

    Returns
    -------
    tu, xu : ndarray
        Uniform grid ``t[0] + h * arange(n)`` with ``n = floor((t[-1]-t[0])/h) + 1``
        and the interpolated series. If ``t`` is already uniform (relative
        spread of spacings below 1e-9) the input is returned unchanged.
    """
    t, x = check_time_axis(t, x)
    dt = np.diff(t)
    if h is None:
        if np.ptp(dt) <= 1e-9 * dt.mean():
            return t, x
        h = float(np.median(dt))
    if not h > 0:
        raise ValueError(f"resampling step must be positive, got {h}")
    n = int(np.floor((t[-1] - t[0]) / h * (1 + 1e-12))) + 1
    tu = t[0] + h * np.arange(n)
    return tu, np.interp(tu, t, x)


def autocorrelation(x):
    """Normalised autocovariance ``rho(k) = C(k)/C(0)`` of a uniform series.

    Uses the biased estimator ``C(k) = (1/N) sum_{i<N-k} (x_i - m)(x_{i+k} - m)``,
    computed by zero-padded FFT (Wiener-Khinchin). Returns ``rho`` for
    ``k = 0 .. N-1`` and ``C(0)``.
    """
    x = np.asarray(x, dtype=float)
    n = x.size
    y = x - x.mean()
    nfft = 1 << int(2 * n - 1).bit_length()
    f = np.fft.rfft(y, nfft)
    c = np.fft.irfft(f * np.conj(f), nfft)[:n] / n
    if c[0] <= 0:
        return np.zeros(n), 0.0
    return c / c[0], float(c[0])


def integrated_autocorrelation_time(x, c=5.0):
    """Integrated autocorrelation time of a uniform series, in samples.

    Sokal's automatic windowing (Madras & Sokal 1988; Sokal 1997):
    ``tau_int(M) = 1/2 + sum_{k=1}^{M} rho(k)``, with ``M`` the smallest
    window such that ``M >= c * tau_int(M)``.

    Parameters
    ----------
    x : array_like
        Uniformly sampled series.
    c : float
        Window constant (Sokal recommends 4 to 10; 5 is common).

    Returns
    -------
    tau_int : float
        In units of the sampling interval (1/2 for white noise).
    window : int
        The chosen window ``M``.
    reliable : bool
        False if no window satisfied the condition (then ``M = N - 1``).
    """
    rho, c0 = autocorrelation(x)
    n = rho.size
    if c0 == 0.0:
        return 0.5, 0, True
    tau = 0.5 + np.cumsum(rho[1:])
    m = np.arange(1, n)
    ok = m >= c * tau
    if np.any(ok):
        i = int(np.argmax(ok))
        return float(max(tau[i], 0.5)), int(m[i]), True
    return float(max(tau[-1], 0.5)), n - 1, False


def batch_means(x, n_batches=20):
    """Batch-means standard error of the mean of a uniform series.

    The series is cut into ``n_batches`` equal consecutive batches (the
    ``N mod n_batches`` leftover samples are dropped from the start, the part
    furthest from equilibrium); ``sigma = std(batch means, ddof=1)/sqrt(B)``.

    Returns
    -------
    sigma : float
    n_batches : int
    """
    x = np.asarray(x, dtype=float)
    if n_batches < 2:
        raise ValueError(f"n_batches must be at least 2, got {n_batches}")
    if x.size < n_batches:
        raise ValueError(f"series of {x.size} samples is shorter than n_batches={n_batches}")
    size = x.size // n_batches
    means = x[x.size - size * n_batches:].reshape(n_batches, size).mean(axis=1)
    return float(means.std(ddof=1) / np.sqrt(n_batches)), n_batches


def time_average(t, x, t_start=None, t_end=None, n_batches=20, c=5.0, name="x"):
    """Time average of ``x(t)`` over a window with honest uncertainties.

    Parameters
    ----------
    t, x : array_like
        Strictly increasing sample times (may be non-uniform) and the series.
    t_start, t_end : float, optional
        Averaging window; defaults to the whole series. The window is cut at
        sample times (first sample ``>= t_start``, last ``<= t_end``).
    n_batches : int
        Number of batches for the batch-means estimate.
    c : float
        Sokal window constant.
    name : str
        Name used in error messages.

    Returns
    -------
    TimeAverage
    """
    t, x = check_time_axis(t, x, name)
    lo = t[0] if t_start is None else float(t_start)
    hi = t[-1] if t_end is None else float(t_end)
    sel = (t >= lo) & (t <= hi)
    if np.count_nonzero(sel) < max(2 * n_batches, 4):
        raise ValueError(
            f"window [{lo}, {hi}] of '{name}' holds {np.count_nonzero(sel)} samples; "
            f"at least {max(2 * n_batches, 4)} are needed"
        )
    tw, xw = t[sel], x[sel]
    span = tw[-1] - tw[0]
    mean = float(np.trapezoid(xw, tw) / span)
    tu, xu = uniform_resample(tw, xw)
    h = tu[1] - tu[0]
    tau_s, _, reliable = integrated_autocorrelation_time(xu, c)
    var0 = float(np.var(xu))
    sigma_acf = float(np.sqrt(2.0 * tau_s * var0 / xu.size))
    sigma_b, nb = batch_means(xu, n_batches)
    tau = tau_s * h
    n_ind = span / (2.0 * tau) if tau > 0 else float("inf")
    return TimeAverage(
        mean=mean,
        sigma=max(sigma_b, sigma_acf),
        sigma_batch=sigma_b,
        sigma_acf=sigma_acf,
        tau=float(tau),
        n_independent=float(n_ind),
        t_start=float(tw[0]),
        t_end=float(tw[-1]),
        n_samples=int(tw.size),
        n_batches=nb,
        tau_reliable=bool(reliable),
    )
