"""Delta-variance of a 2-D map with the edge-tolerant weighting of Ossenkopf et al. (2008).

The Delta-variance (Stutzki et al. 1998, A&A 336, 697) is the variance of a map filtered by
a "Mexican hat" of size l. Following Ossenkopf, Krips & Stutzki (2008, A&A 485, 917,
sect. 2.2, eqs. 7-13), the filter is split into a core and an annulus, both Gaussian-based
with diameter ratio v = 1.5:

    core(r)    = 4 / (pi l^2) exp(-r^2 / (l/2)^2)
    annulus(r) = 4 / (pi l^2 (v^2 - 1)) [exp(-r^2 / (v l/2)^2) - exp(-r^2 / (l/2)^2)]

each of unit sum. The map A with weights w (1 on the map, 0 off it and on blanks) is
filtered by normalised convolution, G_c = (w A) * core / (w * core) and G_a likewise, and

    sigma_Delta^2(l) = sum_x [F_l - <F_l>]^2 W_l / sum_x W_l,  F_l = G_c - G_a,
    W_l = (w * core)(w * annulus),

over the map pixels. Edges and blanks then add no artificial structure, so no periodic
continuation or apodisation is needed. For a 2-D field with power spectrum P(k) ~ k^-beta
(0 < beta < 6), sigma_Delta^2 ~ l^(beta - 2) (Stutzki et al. 1998, sect. 3).

Convolutions are FFT products on a map zero-padded to twice its size (linear, not circular),
with the analytic Fourier transforms of the Gaussians.
"""

import numpy as np

from ..errors import InstrumentError

__all__ = ["delta_variance", "fit_delta_slope", "DIAMETER_RATIO"]

#: annulus / core diameter ratio (Ossenkopf et al. 2008, sect. 2.2: 1.5 is their optimum)
DIAMETER_RATIO = 1.5


def _gauss_ft(k2, a):
    """Fourier transform of the unit-sum Gaussian exp(-r^2/a^2) / (pi a^2) (k in cycles per
    pixel): exp(-pi^2 a^2 k^2)."""
    return np.exp(-np.pi**2 * a * a * k2)


def delta_variance(image, lags_pix=None, weights=None, nlags=16, ratio=DIAMETER_RATIO):
    """Delta-variance of a 2-D map at filter sizes ``lags_pix`` (pixels; see the module
    docstring). NaN pixels get weight 0.

    Returns (lags_pix, sigma2): arrays of the lags and the Delta-variance at each.
    """
    img = np.asarray(image, dtype=np.float64)
    if img.ndim != 2 or min(img.shape) < 8:
        raise InstrumentError(f"image shape: {img.shape}; need a 2-D image of at least 8x8")
    w = np.isfinite(img).astype(np.float64)
    if weights is not None:
        w = w * np.where(np.isfinite(weights), np.asarray(weights, dtype=np.float64), 0.0)
    if not (w > 0).any():
        raise InstrumentError("image: no finite pixel with weight > 0")
    a = np.where(w > 0, np.nan_to_num(img), 0.0)
    ny, nx = img.shape
    if lags_pix is None:
        lags_pix = np.geomspace(2.0, min(ny, nx) / 2.0, nlags)
    lags = np.asarray(lags_pix, dtype=np.float64)
    if np.any(lags <= 0):
        raise InstrumentError(f"lags_pix: {lags}; give positive filter sizes in pixels")
    py, px = 2 * ny, 2 * nx
    fa = np.fft.rfft2(a * w, s=(py, px))
    fw = np.fft.rfft2(w, s=(py, px))
    ky = np.fft.fftfreq(py)[:, None]
    kx = np.fft.rfftfreq(px)[None, :]
    k2 = kx * kx + ky * ky
    inside = w > 0
    out = np.empty(lags.size)
    v2 = ratio * ratio
    for i, l in enumerate(lags):
        core = _gauss_ft(k2, 0.5 * l)
        ring = (v2 * _gauss_ft(k2, 0.5 * ratio * l) - core) / (v2 - 1.0)
        conv = [np.fft.irfft2(f, s=(py, px))[:ny, :nx]
                for f in (fa * core, fw * core, fa * ring, fw * ring)]
        wc, wa = conv[1][inside], conv[3][inside]
        ok = (wc > 1e-6) & (wa > 1e-6)
        f = conv[0][inside][ok] / wc[ok] - conv[2][inside][ok] / wa[ok]
        wt = wc[ok] * wa[ok]
        mean = np.sum(f * wt) / np.sum(wt)
        out[i] = np.sum((f - mean) ** 2 * wt) / np.sum(wt)
    return lags, out


def fit_delta_slope(lags_pix, sigma2, lag_range):
    """Least-squares slope of ln sigma_Delta^2 against ln l over ``lag_range`` (pixels),
    with its 1-sigma uncertainty from the scatter about the line. Returns (slope, err, n)."""
    lags = np.asarray(lags_pix, dtype=np.float64)
    s2 = np.asarray(sigma2, dtype=np.float64)
    lo, hi = lag_range
    sel = (lags >= lo * (1 - 1e-9)) & (lags <= hi * (1 + 1e-9)) & (s2 > 0)
    if sel.sum() < 3:
        return np.nan, np.nan, int(sel.sum())
    coef, cov = np.polyfit(np.log(lags[sel]), np.log(s2[sel]), 1, cov="unscaled")
    res = np.log(s2[sel]) - np.polyval(coef, np.log(lags[sel]))
    var = np.sum(res**2) / max(sel.sum() - 2, 1)
    return float(coef[0]), float(np.sqrt(cov[0, 0] * var)), int(sel.sum())
