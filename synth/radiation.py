"""Radiation basics shared by every stage: Planck function and radiation temperature J(T).

All functions take and return plain floats / arrays in CGS (frequency in Hz, temperature in K).
Constants come from :mod:`astropy.constants` (CODATA 2018).
"""

import numpy as np
import astropy.constants as const

__all__ = ["H_CGS", "K_CGS", "C_CGS", "T_CMB_K", "planck_nu", "radiation_temperature",
           "rj_brightness_temperature"]

H_CGS = const.h.cgs.value
K_CGS = const.k_B.cgs.value
C_CGS = const.c.cgs.value
AMU_CGS = const.u.cgs.value

#: Cosmic microwave background temperature, 2.725 K (Mather et al. 1999, ApJ 512, 511;
#: Fixsen 2009, ApJ 707, 916 gives 2.72548 K).
T_CMB_K = 2.725


def planck_nu(nu_hz, t_k):
    """Planck specific intensity B_nu(T) in erg s^-1 cm^-2 Hz^-1 sr^-1.

    B_nu = (2 h nu^3 / c^2) / (exp(h nu / k T) - 1)  (Rybicki & Lightman 1979, eq. 1.51).
    """
    nu = np.asarray(nu_hz, dtype=np.float64)
    x = H_CGS * nu / (K_CGS * np.asarray(t_k, dtype=np.float64))
    return 2.0 * H_CGS * nu**3 / C_CGS**2 / np.expm1(x)


def radiation_temperature(nu_hz, t_k):
    """Radiation temperature J_nu(T) = (h nu / k) / (exp(h nu / k T) - 1), in K.

    The Rayleigh-Jeans-equivalent temperature of a blackbody at T (Mangum & Shirley 2015,
    PASP 127, 266, eq. 24). Works for negative T (population inversion) as the formula does.
    """
    t0 = H_CGS * np.asarray(nu_hz, dtype=np.float64) / K_CGS
    return t0 / np.expm1(t0 / np.asarray(t_k, dtype=np.float64))


def rj_brightness_temperature(nu_hz, intensity_cgs):
    """Rayleigh-Jeans brightness temperature T = c^2 I / (2 k nu^2) in K (Wilson et al. 2013,
    Tools of Radio Astronomy, eq. 1.29)."""
    nu = np.asarray(nu_hz, dtype=np.float64)
    return C_CGS**2 * np.asarray(intensity_cgs) / (2.0 * K_CGS * nu**2)
