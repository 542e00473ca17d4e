"""Spatial power spectra: azimuthal averages, slope fits and Gaussian random fields.

Spatial frequency k is in cycles per arcsec; the angular scale of a bin is 1/k (arcsec),
the period of the Fourier mode (the same convention as a baseline of q wavelengths
sampling structure of size 1/q radian).
"""

import numpy as np
from astropy.table import Table

from ..errors import InstrumentError

__all__ = ["radial_bins", "fourier_power", "power_spectrum", "binned_ratio", "fit_power_slope",
           "gaussian_random_field", "APODIZE"]

#: allowed apodisation windows before the FFT
APODIZE = (None, "tukey")


def radial_bins(shape, pixscale_arcsec, nbins=None):
    """Bin index of every FFT cell by |k| (log-spaced annuli) and the bin edges in 1/arcsec.

    Edges run from the fundamental 1/(N Delta) to the Nyquist frequency 1/(2 Delta) of the
    shorter axis; the k = 0 cell and cells beyond Nyquist get index -1.
    """
    ny, nx = shape
    ky = np.fft.fftfreq(ny, d=pixscale_arcsec)[:, None]
    kx = np.fft.fftfreq(nx, d=pixscale_arcsec)[None, :]
    kk = np.hypot(kx, ky)
    n = min(ny, nx)
    k_lo, k_hi = 1.0 / (n * pixscale_arcsec), 0.5 / pixscale_arcsec
    nbins = nbins or max(4, int(round(2.5 * np.log2(n / 2.0))))
    edges = np.geomspace(k_lo * (1 - 1e-9), k_hi * (1 + 1e-9), nbins + 1)
    index = np.digitize(kk, edges) - 1
    index[(kk < edges[0]) | (kk >= edges[-1])] = -1
    return index, edges


def _window(shape, kind):
    if kind is None:
        return None
    if kind not in APODIZE:
        raise InstrumentError(f"apodize: {kind!r} is not known; valid: {APODIZE}")
    from scipy.signal.windows import tukey
    return tukey(shape[0], 0.25)[:, None] * tukey(shape[1], 0.25)[None, :]


def fourier_power(image, apodize=None):
    """|FFT|^2 of a 2-D (or stacked (n, y, x)) image, optionally apodised (Tukey, alpha 0.25)."""
    image = np.asarray(image, dtype=np.float64)
    win = _window(image.shape[-2:], apodize)
    if win is not None:
        image = image * win
    return np.abs(np.fft.fft2(image)) ** 2


def _bin_sum(values, index, nbins):
    flat = index.ravel()
    ok = flat >= 0
    if values.ndim == 2:
        return np.bincount(flat[ok], weights=values.ravel()[ok], minlength=nbins)
    rows = values.reshape(values.shape[0], -1)[:, ok]
    return np.stack([np.bincount(flat[ok], weights=r, minlength=nbins) for r in rows], axis=-1)


def power_spectrum(image, pixscale_arcsec, nbins=None, apodize=None):
    """Azimuthally averaged power spectrum of an image.

    P(k) = <|F(k)|^2> over the FFT cells of each annulus, normalised by the number of pixels
    (Parseval: sum_k |F|^2 / N = sum_x I^2). Returns a Table with k (1/arcsec, mean of the
    cells), scale_arcsec = 1/k, power and n_modes; empty annuli are dropped.
    """
    image = np.asarray(image, dtype=np.float64)
    if image.ndim != 2 or min(image.shape) < 8:
        raise InstrumentError(f"image shape: {image.shape}; need a 2-D image of at least 8x8")
    index, edges = radial_bins(image.shape, pixscale_arcsec, nbins)
    nb = edges.size - 1
    pw = fourier_power(image, apodize) / image.size
    kk = _k_grid(image.shape, pixscale_arcsec)
    count = np.bincount(index[index >= 0], minlength=nb)
    keep = count > 0
    k_mean = _bin_sum(kk, index, nb)[keep] / count[keep]
    power = _bin_sum(pw, index, nb)[keep] / count[keep]
    return Table({"k": k_mean, "scale_arcsec": 1.0 / k_mean, "power": power,
                  "n_modes": count[keep]})


def _k_grid(shape, pixscale_arcsec):
    ky = np.fft.fftfreq(shape[0], d=pixscale_arcsec)[:, None]
    kx = np.fft.fftfreq(shape[1], d=pixscale_arcsec)[None, :]
    return np.hypot(kx, ky)


def binned_ratio(numerator_power, denominator_power, index, nbins):
    """Sum of one |F|^2 over each annulus divided by the sum of the other (per plane)."""
    num = _bin_sum(numerator_power, index, nbins)
    den = _bin_sum(denominator_power, index, nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        return num / den, den


def fit_power_slope(table, scale_range=None):
    """Least-squares slope of log P against log k, with its 1-sigma uncertainty.

    Each bin's mean power has a relative error 1/sqrt(N_modes) (|F|^2 of a Gaussian field is
    exponentially distributed; e.g. Bracewell 2000, ch. 13 on power-spectrum estimates), so the
    fit is weighted by N_modes; the uncertainty is the square root of the slope's variance in
    the weighted linear fit, scaled by the reduced chi-square when that exceeds one.
    ``scale_range`` = (smallest, largest) angular scale in arcsec to use.

    Returns (slope, uncertainty, number of bins used).
    """
    scale = np.asarray(table["scale_arcsec"], dtype=np.float64)
    power = np.asarray(table["power"], dtype=np.float64)
    sel = power > 0
    if scale_range is not None:
        lo, hi = scale_range
        sel &= (scale >= lo) & (scale <= hi)
    if sel.sum() < 3:
        raise InstrumentError(f"scale_range: {scale_range} leaves {int(sel.sum())} bins with "
                              "power; need at least 3 (widen the range)")
    x = np.log(np.asarray(table["k"])[sel])
    y = np.log(power[sel])
    w = np.asarray(table["n_modes"], dtype=np.float64)[sel]
    coef, cov = np.polyfit(x, y, 1, w=np.sqrt(w), cov="unscaled")
    chi2 = np.sum(w * (y - np.polyval(coef, x)) ** 2) / max(sel.sum() - 2, 1)
    err = np.sqrt(cov[0, 0] * max(chi2, 1.0))
    return float(coef[0]), float(err), int(sel.sum())


def gaussian_random_field(shape, slope, seed, pixscale_arcsec=1.0):
    """A periodic Gaussian random field with power spectrum P(k) proportional to k**slope.

    White complex noise in Fourier space scaled by sqrt(P(k)), k = 0 removed, transformed back
    and the real part kept (the standard spectral synthesis; e.g. Peitgen & Saupe 1988, The
    Science of Fractal Images, ch. 2). Zero mean, unit variance. ``seed`` is required.
    """
    rng = np.random.default_rng(seed)
    kk = _k_grid(shape, pixscale_arcsec)
    amp = np.zeros(shape)
    amp[kk > 0] = kk[kk > 0] ** (slope / 2.0)
    noise = rng.normal(size=shape) + 1j * rng.normal(size=shape)
    field = np.fft.ifft2(noise * amp).real
    return (field - field.mean()) / field.std()
