"""Planck function, J(T) and constants against astropy (sources in each docstring)."""

import numpy as np
import pytest
import astropy.units as u
import astropy.constants as const
from astropy.modeling.models import BlackBody

from synth.radiation import (C_CGS, H_CGS, K_CGS, planck_nu, radiation_temperature,
                             rj_brightness_temperature)


@pytest.mark.parametrize("t_k", [2.725, 10.0, 37.5, 300.0])
@pytest.mark.parametrize("nu_ghz", [86.8, 115.2712018, 345.8])
def test_planck_against_astropy_blackbody(t_k, nu_ghz):
    """B_nu(T) equals astropy.modeling.models.BlackBody to 1e-12."""
    ref = BlackBody(temperature=t_k * u.K)(nu_ghz * u.GHz).to_value(
        u.erg / (u.s * u.cm**2 * u.Hz * u.sr))
    assert planck_nu(nu_ghz * 1e9, t_k) == pytest.approx(ref, rel=1e-12)


def test_constants_are_astropy_codata():
    """h, k, c in CGS equal astropy.constants (CODATA 2018)."""
    assert H_CGS == const.h.cgs.value and K_CGS == const.k_B.cgs.value
    assert C_CGS == const.c.cgs.value


def test_radiation_temperature_reference_values():
    """J(T) for CO 1-0: J(2.725 K) = 0.83628 K, J(10 K) = 7.48767 K, J(20 K) = 17.36128 K
    (computed from J = (h nu/k)/(e^{h nu/kT} - 1), Mangum & Shirley 2015 eq. 24)."""
    nu = 115.2712018e9
    got = radiation_temperature(nu, np.array([2.725, 10.0, 20.0]))
    np.testing.assert_allclose(got, [0.83628, 7.48767, 17.36128], rtol=2e-5)


def test_rj_temperature_of_planck_intensity_is_j():
    """The RJ brightness temperature of B_nu(T) is J_nu(T) by definition (Wilson et al. 2013,
    Tools of Radio Astronomy, eq. 1.29)."""
    nu, t = 230.538e9, 15.0
    assert rj_brightness_temperature(nu, planck_nu(nu, t)) == pytest.approx(
        radiation_temperature(nu, t), rel=1e-12)
