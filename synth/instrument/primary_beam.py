"""Primary beam of the antennas: Gaussian (FWHM = fwhm_factor lambda / D) or Airy, per frequency.

A baseline between antennas of diameters D_i and D_j responds with the product of the two
voltage patterns, i.e. the geometric mean of the power patterns (Thompson, Moran & Swenson
2017, 3rd ed., sec. 3.3): A_ij = sqrt(A_i A_j). For identical dishes this is the usual power
pattern.
"""

import numpy as np
from scipy.special import j1

from ..errors import InstrumentError
from ..sky import C_M_S

__all__ = ["PB_SHAPES", "C_M_S", "gaussian_fwhm_rad", "voltage_pattern", "pair_beam",
           "half_power_radius_rad"]

PB_SHAPES = ("gaussian", "airy")


def gaussian_fwhm_rad(nu_hz, diameter_m, fwhm_factor=1.13):
    """FWHM = fwhm_factor lambda / D of a tapered dish (1.02 for a uniform aperture, ~1.13 for the
    usual edge taper; Wilson, Rohlfs & Huettemeister 2013, Tools of Radio Astronomy, ch. 6)."""
    return fwhm_factor * C_M_S / (np.asarray(nu_hz) * np.asarray(diameter_m))


def voltage_pattern(r_rad, nu_hz, diameter_m, shape="gaussian", fwhm_factor=1.13):
    """Voltage pattern (square root of the power pattern, 1 on axis) at radius ``r_rad``.

    Gaussian: sqrt(exp(-4 ln2 r^2 / FWHM^2)). Airy (uniform circular aperture):
    2 J1(x) / x with x = pi D r / lambda (Born & Wolf 1999, Principles of Optics, sec. 8.5.2).
    """
    r = np.asarray(r_rad, dtype=np.float64)
    if shape == "gaussian":
        fwhm = gaussian_fwhm_rad(nu_hz, diameter_m, fwhm_factor)
        return np.exp(-2.0 * np.log(2.0) * (r / fwhm) ** 2)
    if shape == "airy":
        x = np.pi * diameter_m * nu_hz / C_M_S * r
        safe = np.where(x == 0, 1.0, x)
        return np.where(x == 0, 1.0, 2.0 * j1(safe) / safe)
    raise InstrumentError(f"pb_shape={shape!r} is not known; choose one of {PB_SHAPES}")


def pair_beam(r_rad, nu_hz, d1_m, d2_m, shape="gaussian", fwhm_factor=1.13):
    """Power response of a baseline between dishes d1_m and d2_m: product of voltage patterns."""
    return (voltage_pattern(r_rad, nu_hz, d1_m, shape, fwhm_factor)
            * voltage_pattern(r_rad, nu_hz, d2_m, shape, fwhm_factor))


def half_power_radius_rad(nu_hz, diameter_m, shape="gaussian", fwhm_factor=1.13):
    """Radius where the power pattern of one dish falls to 1/2 (HWHM)."""
    if shape == "gaussian":
        return 0.5 * gaussian_fwhm_rad(nu_hz, diameter_m, fwhm_factor)
    # Airy: (2 J1(x)/x)^2 = 1/2 at x = 1.6163 (Born & Wolf 1999, sec. 8.5.2; HPBW 1.029 lambda/D)
    return 1.6163 * C_M_S / (np.pi * diameter_m * nu_hz)
