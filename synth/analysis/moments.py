"""Noise estimate, noise-aware signal mask and moment maps 0/1/2 of a PPV cube.

Moments (the standard intensity-weighted definitions, common practice; the same as
spectral-cube's ``moment0/1/2``, against which the tests check them):
M0 = sum_i T_i dv,  M1 = sum_i T_i v_i / sum_i T_i,  M2 = sum_i T_i (v_i - M1)^2 / sum_i T_i
(M2 is the intensity-weighted velocity variance; its square root is the line-width sigma).
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from scipy import ndimage

from ..errors import InstrumentError
from .matching import channel_velocities_ms, channel_width_ms, cube_values

#: an rms below this fraction of the peak is round-off, not noise: the data are noiseless
NOISELESS = 1e-9

__all__ = ["NOISELESS", "Moments", "noise_rms", "signal_mask", "moment_maps", "moments_from_arrays"]


@dataclass(frozen=True, eq=False)
class Moments:
    """Moment maps of one cube, with the mask and noise used to make them."""

    mom0: u.Quantity        # (y, x), cube unit * km/s
    mom1: u.Quantity        # (y, x), km/s, NaN where sum T <= 0
    mom2: u.Quantity        # (y, x), (km/s)^2, NaN where sum T <= 0
    mask: np.ndarray        # (v, y, x) bool, the channels that entered the sums
    noise: u.Quantity       # rms per channel, cube unit

    @property
    def linewidth_sigma(self):
        """sqrt(M2): the intensity-weighted velocity dispersion, km/s."""
        return np.sqrt(self.mom2)


def noise_rms(data, nsigma=3.0):
    """Robust rms of the noise of a (v, y, x) array (plain float, the data's unit).

    The median absolute deviation scaled by 1.4826 (the Gaussian-consistent MAD; Hampel
    1974) of the values left after iterative 3-sigma clipping (astropy ``sigma_clip``,
    at most 10 iterations), so bright emission does not count as noise. An rms below NOISELESS times
    the peak is round-off and gives 0 (noiseless data).
    """
    from astropy.stats import mad_std, sigma_clip
    vals = np.asarray(data, dtype=np.float64)
    vals = vals[np.isfinite(vals)]
    clipped = sigma_clip(vals, sigma=nsigma, maxiters=10, stdfunc="mad_std")
    sigma = float(mad_std(clipped.compressed()))
    peak = float(np.abs(vals).max()) if vals.size else 0.0
    return 0.0 if sigma <= NOISELESS * peak else sigma


def signal_mask(data, sigma, core=4.0, edge=2.0, floor=0.01):
    """Two-threshold signal mask: regions above ``edge`` sigma that contain a ``core`` peak.

    Connected (v, y, x) regions (face connectivity) of T > edge*sigma are kept when they hold
    at least one T > core*sigma pixel: the dilated mask of Rosolowsky & Leroy 2006 (PASP 118,
    590, sect. 2.2). With sigma = 0 (noiseless data) the mask is T > 0.
    """
    if not (core >= edge >= 0):
        raise InstrumentError(f"mask thresholds: core={core}, edge={edge}; need core >= edge >= 0")
    data = np.asarray(data, dtype=np.float64)
    if sigma <= 0:
        return data >= floor * data.max()
    low = data > edge * sigma
    labels, n = ndimage.label(low)
    if n == 0:
        return low
    has_core = np.zeros(n + 1, dtype=bool)
    has_core[np.unique(labels[data > core * sigma])] = True
    has_core[0] = False
    return has_core[labels]


def moments_from_arrays(data, v_kms, dv_kms, mask):
    """M0, M1, M2 from plain arrays: data (v, y, x), channel velocities and width in km/s."""
    w = np.where(mask, data, 0.0)
    v = np.asarray(v_kms, dtype=np.float64)[:, None, None]
    s0 = w.sum(axis=0)
    mom0 = s0 * dv_kms
    with np.errstate(invalid="ignore", divide="ignore"):
        good = s0 > 0
        mom1 = np.where(good, (w * v).sum(axis=0) / s0, np.nan)
        mom2 = np.where(good, (w * (v - mom1) ** 2).sum(axis=0) / s0, np.nan)
    return mom0, mom1, mom2


def moment_maps(cube, noise=None, mask=None, core=4.0, edge=2.0):
    """Moment maps 0/1/2 of a SpectralCube with a noise-aware mask.

    Parameters
    ----------
    cube : SpectralCube
        Any cube in K or Jy/beam with a velocity or frequency axis (RESTFRQ set).
    noise : Quantity, optional
        Rms per channel in the cube's unit; estimated with :func:`noise_rms` if None.
    mask : ndarray of bool (v, y, x), optional
        A mask to use instead of :func:`signal_mask` (e.g. the ideal cube's, to compare like
        with like).
    core, edge : float
        Thresholds of :func:`signal_mask` in units of the noise.

    Examples
    --------
    >>> m = moment_maps(cube)              # doctest: +SKIP
    >>> m.mom1.unit                        # doctest: +SKIP
    Unit("km / s")
    """
    data, kind = cube_values(cube)
    unit = u.K if kind == "K" else u.Jy / u.beam
    sigma = noise_rms(data) if noise is None else _noise_value(noise, unit)
    if mask is None:
        mask = signal_mask(data, sigma, core, edge)
    elif np.shape(mask) != data.shape:
        raise InstrumentError(f"mask shape: {np.shape(mask)} differs from the cube {data.shape}")
    v_kms = channel_velocities_ms(cube) / 1e3
    m0, m1, m2 = moments_from_arrays(data, v_kms, channel_width_ms(cube) / 1e3, mask)
    kms = u.km / u.s
    return Moments(mom0=m0 * unit * kms, mom1=m1 * kms, mom2=m2 * kms**2,
                   mask=np.asarray(mask, dtype=bool), noise=sigma * unit)


def _noise_value(noise, unit):
    try:
        value = u.Quantity(noise).to_value(unit)
    except u.UnitConversionError as exc:
        raise InstrumentError(f"noise: {noise} is not in {unit}; give it in the cube's unit"
                              ) from exc
    if not value >= 0:
        raise InstrumentError(f"noise: {noise} must be >= 0")
    return float(value)
