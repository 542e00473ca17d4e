"""Probability density functions of intensity or column: width, log-normal and power-law tail.

All three work on eta = ln(x / <x>) of the positive values x (the usual variable of
column-density PDFs: Vázquez-Semadeni 1994, ApJ 423, 681; Kainulainen et al. 2009, A&A 508,
L35):

- width: the standard deviation of eta, sigma_ln;
- log-normal fit: a Gaussian in eta fitted to the histogram (least squares, Poisson errors
  per bin), giving its centre and width with their fit uncertainties;
- power-law tail: p(x) ~ x^-alpha above x_min, alpha from the maximum-likelihood
  (continuous Hill) estimator, x_min where the Kolmogorov-Smirnov distance between the data
  and the fitted law is smallest (Clauset, Shalizi & Newman 2009, SIAM Review 51, 661,
  eqs. 3.1, 3.5 and sect. 3.3). The tail slope reported is s = 1 - alpha, the slope of
  ln p(eta) against eta (p(eta) = x p(x)).

Pixels of a map are correlated over a beam: the uncertainties use N_eff = N / (pixels per
beam area), the number of independent samples.
"""

import numpy as np
from scipy.optimize import curve_fit

from ..errors import InstrumentError

__all__ = ["log_values", "pdf_width", "lognormal_histogram_fit", "powerlaw_tail_fit",
           "MIN_TAIL"]

#: fewest values (and independent samples) a tail fit uses
MIN_TAIL = 30


def log_values(values, threshold=0.0):
    """eta = ln(x / <x>) of the finite values above ``threshold`` (and above 0)."""
    x = np.asarray(values, dtype=np.float64).ravel()
    x = x[np.isfinite(x) & (x > max(float(threshold), 0.0))]
    if x.size < 3:
        raise InstrumentError(f"PDF: {x.size} values above the threshold {threshold:g}; "
                              "need at least 3")
    return np.log(x / x.mean())


def pdf_width(values, threshold=0.0, pixels_per_beam=1.0):
    """(sigma_ln, its standard error): the std of eta, error sigma / sqrt(2 (N_eff - 1))
    (the standard error of a Gaussian sample's standard deviation)."""
    eta = log_values(values, threshold)
    n_eff = max(eta.size / max(float(pixels_per_beam), 1.0), 2.0)
    s = float(eta.std())
    return s, s / np.sqrt(2.0 * (n_eff - 1.0))


def _gauss(x, a, mu, sigma):
    return a * np.exp(-0.5 * ((x - mu) / sigma) ** 2)


def lognormal_histogram_fit(values, threshold=0.0, pixels_per_beam=1.0, nbins=40):
    """Gaussian fit in eta to the histogram of eta: ((mu, mu_err), (sigma, sigma_err)).

    Counts have Poisson errors inflated by sqrt(pixels per beam) (correlated pixels); the
    fit uncertainties are the square roots of the covariance diagonal."""
    eta = log_values(values, threshold)
    counts, edges = np.histogram(eta, bins=nbins)
    mid = 0.5 * (edges[1:] + edges[:-1])
    err = np.sqrt(np.maximum(counts, 1.0) * max(float(pixels_per_beam), 1.0))
    p0 = (counts.max(), float(eta.mean()), max(float(eta.std()), 1e-3))
    try:
        popt, pcov = curve_fit(_gauss, mid, counts, p0=p0, sigma=err, absolute_sigma=True,
                               maxfev=4000)
    except RuntimeError:
        return (np.nan, np.nan), (np.nan, np.nan)
    perr = np.sqrt(np.abs(np.diag(pcov)))
    return (float(popt[1]), float(perr[1])), (float(abs(popt[2])), float(perr[2]))


def powerlaw_tail_fit(values, threshold=0.0, pixels_per_beam=1.0, candidates=24):
    """Power-law tail p(x) ~ x^-alpha of the values above x_min (see the module docstring).

    x_min is tried at ``candidates`` quantiles between the median and the value leaving
    MIN_TAIL * pixels_per_beam points above it. Returns (s, s_err, x_min / <x>, n_tail) with
    s = 1 - alpha; alpha_err = (alpha - 1) / sqrt(N_eff) (Clauset et al. 2009, eq. 3.2).
    NaNs when too few values.
    """
    eta = log_values(values, threshold)
    x = np.sort(np.exp(eta))
    ppb = max(float(pixels_per_beam), 1.0)
    n_min = int(np.ceil(MIN_TAIL * ppb))
    if x.size < 2 * n_min:
        return np.nan, np.nan, np.nan, 0
    qmax = 1.0 - n_min / x.size
    best = None
    for q in np.linspace(0.5, qmax, candidates):
        i0 = int(q * x.size)
        xmin, tail = x[i0], x[i0:]
        logs = np.log(tail / xmin)
        if logs.sum() <= 0:
            continue
        alpha = 1.0 + tail.size / logs.sum()
        emp = np.arange(tail.size) / tail.size
        model = 1.0 - (tail / xmin) ** (1.0 - alpha)
        ks = float(np.max(np.abs(emp - model)))
        if best is None or ks < best[0]:
            best = (ks, alpha, xmin, tail.size)
    if best is None:
        return np.nan, np.nan, np.nan, 0
    _, alpha, xmin, n = best
    n_eff = max(n / ppb, 1.0)
    return float(1.0 - alpha), float((alpha - 1.0) / np.sqrt(n_eff)), float(xmin), int(n)
