"""Radiometer equation, beam-correlated noise, seeds, and bad noise inputs."""

import numpy as np
import pytest
import astropy.units as u
import astropy.constants as const
from astropy.wcs import WCS
from radio_beam import Beam
from spectral_cube import SpectralCube

from synth.errors import InstrumentError
from synth.instrument.beam import jy_per_k
from synth.instrument.noise import (correlated_noise, hanning_noise_factor, radiometer_rms,
                                    time_for_rms)
from synth.instrument.observe import observe
from synth.instrument.single_dish import Dish

NU0_HZ = 115.2712018e9  # CO 1-0 (Schöier et al. 2005, read)
KMS = u.km / u.s
PIX_ARCSEC = 3.0


def make_cube(nz=40, n=128, line=True):
    """K cube, 0.25 km/s VRAD channels from -5 km/s; a bright line only in channels 15-24."""
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-PIX_ARCSEC / 3600, PIX_ARCSEC / 3600, 250.0]
    w.wcs.crpix = [n // 2 + 1, n // 2 + 1, 1]
    w.wcs.crval = [120.0, 10.0, -5000.0]
    w.wcs.restfrq = NU0_HZ
    w.wcs.specsys = "LSRK"
    data = np.zeros((nz, n, n))
    if line:
        data[15:25, 40:90, 40:90] = 3.0
    return SpectralCube(data * u.K, w)


DISH = Dish(diameter=30 * u.m, main_beam_efficiency=0.7, tsys=120 * u.K)


def signal_free(obs):
    """Channels 0-9 and 30-39 (at 0.25 km/s) are far from the line even after smoothing."""
    values = obs.unmasked_data[:].value
    return np.concatenate([values[:10], values[-10:]])


def test_radiometer_equation_values():
    """sigma_T = T_sys / (eta sqrt(dnu t)) (Wilson, Rohlfs & Hüttemeister 2013, eq. 4.41, number
    from memory): 100 K, eta 1, 1 MHz, 1 s -> 0.1 K; 120 K, eta 0.7, 0.5 km/s at 115.2712018 GHz
    (192.27 kHz), 2 h -> 4.6077 mK (hand computed)."""
    assert radiometer_rms(100 * u.K, 1.0, 1 * u.MHz, 1 * u.s).to_value(u.K) == pytest.approx(0.1)
    dnu_hz = NU0_HZ * 0.5e3 / const.c.value
    assert dnu_hz == pytest.approx(192.27e3, rel=1e-4)
    sigma = radiometer_rms(120 * u.K, 0.7, dnu_hz, 2 * u.hr)
    assert sigma.to_value(u.mK) == pytest.approx(4.6077, rel=1e-4)


def test_time_for_rms_inverts_radiometer():
    """t(sigma(t)) = t; halving the rms costs 4x the time (radiometer equation)."""
    t = time_for_rms(80 * u.K, 0.8, 250 * u.kHz, 0.02 * u.K)
    assert radiometer_rms(80 * u.K, 0.8, 250 * u.kHz, t).to_value(u.K) == pytest.approx(0.02)
    t2 = time_for_rms(80 * u.K, 0.8, 250 * u.kHz, 0.01 * u.K)
    assert (t2 / t).decompose().value == pytest.approx(4.0)
    assert t.unit == u.s


def test_measured_rms_matches_requested_rms():
    """rms in signal-free channels within 3 % of the requested 0.05 K (K) and of 0.05 K
    converted to Jy/beam with astropy brightness_temperature."""
    obs = observe(make_cube(), DISH, rms=0.05 * u.K, seed=11)
    assert np.std(signal_free(obs)) == pytest.approx(0.05, rel=0.03)
    jy = observe(make_cube(), DISH, rms=0.05 * u.K, seed=11, unit="Jy/beam")
    k_to_jy = float(jy_per_k(jy.beam, NU0_HZ * u.Hz))
    assert np.std(signal_free(jy)) == pytest.approx(0.05 * k_to_jy, rel=0.03)
    assert jy.meta["NOISERMS"] == pytest.approx(0.05 * k_to_jy, rel=1e-12)
    given_jy = observe(make_cube(), DISH, rms=0.05 * k_to_jy * u.Jy / u.beam, seed=11)
    assert given_jy.meta["NOISERMS"] == pytest.approx(0.05, rel=1e-9)


def test_measured_rms_matches_radiometer():
    """rms within 3 % of the radiometer value 4.6077 mK for one polarisation (0.5 km/s
    channels, 2 h; see above), and 1/sqrt(2) of it for the default two (the variance of the
    mean of two independent polarisations is halved; radiometer equation)."""
    one = DISH.__class__(**{**DISH.__dict__, "n_pol": 1})
    obs = observe(make_cube(), one, channel_width=0.5 * KMS, integration_time=2 * u.hr, seed=2)
    values = obs.unmasked_data[:].value
    free = np.concatenate([values[:5], values[-5:]])
    assert obs.meta["NOISERMS"] == pytest.approx(4.6077e-3, rel=1e-4)
    assert np.std(free) == pytest.approx(4.6077e-3, rel=0.03)
    two = observe(make_cube(), DISH, channel_width=0.5 * KMS, integration_time=2 * u.hr, seed=2)
    assert DISH.n_pol == 2
    assert two.meta["NOISERMS"] == pytest.approx(4.6077e-3 / np.sqrt(2), rel=1e-4)
    free2 = np.concatenate([two.unmasked_data[:5].value, two.unmasked_data[-5:].value])
    assert np.std(free2) == pytest.approx(4.6077e-3 / np.sqrt(2), rel=0.03)


def _acf_fwhm_px(field):
    """FWHM (pixels) of the channel-averaged periodic autocorrelation along x and y."""
    power = np.abs(np.fft.fft2(field, axes=(1, 2))) ** 2
    acf = np.fft.fftshift(np.fft.ifft2(power, axes=(1, 2)).real.mean(axis=0))
    acf /= acf.max()
    c = acf.shape[0] // 2
    widths = []
    for cut in (acf[c, c:], acf[c:, c]):
        k = np.argmax(cut < 0.5)
        widths.append(2 * (k - 1 + (cut[k - 1] - 0.5) / (cut[k - 1] - cut[k])))
    return widths


def test_noise_autocorrelation_width_is_sqrt2_beam():
    """White noise convolved with a Gaussian of FWHM theta has a Gaussian autocorrelation of
    FWHM sqrt(2) theta (convolution of two Gaussians: variances add). Tested within 5 %."""
    obs = observe(make_cube(line=False), DISH, rms=0.1 * u.K, seed=5)
    beam_px = obs.beam.major.to_value(u.arcsec) / PIX_ARCSEC
    for width in _acf_fwhm_px(obs.unmasked_data[:].value):
        assert width == pytest.approx(np.sqrt(2) * beam_px, rel=0.05)


def test_elliptical_beam_noise_autocorrelation():
    """The same sqrt(2) relation along both axes of an elliptical beam with PA 0 (major N-S)."""
    beam = Beam(major=24 * u.arcsec, minor=12 * u.arcsec, pa=0 * u.deg)
    field = correlated_noise((8, 128, 128), beam, PIX_ARCSEC * u.arcsec, 1.0,
                             np.random.default_rng(0))
    along_x, along_y = _acf_fwhm_px(field)
    assert along_x == pytest.approx(np.sqrt(2) * 12 / PIX_ARCSEC, rel=0.05)
    assert along_y == pytest.approx(np.sqrt(2) * 24 / PIX_ARCSEC, rel=0.05)


def test_hanning_noise_is_correlated_between_channels():
    """Hanning-weighted white noise (1/4, 1/2, 1/4): lag-1 correlation (w0 w1 + w1 w2) / sum w^2
    = 2/3, lag-2 w0 w2 / sum w^2 = 1/6; rms kept; radiometer rms x sqrt(3/8) (computed)."""
    field = correlated_noise((400, 32, 32), Beam(9 * u.arcsec), PIX_ARCSEC * u.arcsec, 0.2,
                             np.random.default_rng(1), hanning=True)
    flat = field.reshape(400, -1)
    assert np.std(flat) == pytest.approx(0.2, rel=0.03)
    lag1 = np.mean(flat[1:] * flat[:-1]) / np.var(flat)
    lag2 = np.mean(flat[2:] * flat[:-2]) / np.var(flat)
    assert lag1 == pytest.approx(2 / 3, abs=0.03) and lag2 == pytest.approx(1 / 6, abs=0.03)
    assert hanning_noise_factor() == pytest.approx(np.sqrt(0.375))
    obs = observe(make_cube(), DISH, integration_time=1 * u.hr, hanning=True, noise=True, seed=3)
    plain = observe(make_cube(), DISH, integration_time=1 * u.hr, seed=3)
    assert obs.meta["NOISERMS"] / plain.meta["NOISERMS"] == pytest.approx(np.sqrt(0.375))


def test_same_seed_same_bytes_different_seed_different_noise():
    a = observe(make_cube(nz=12, n=32), DISH, rms=0.1 * u.K, seed=7)
    b = observe(make_cube(nz=12, n=32), DISH, rms=0.1 * u.K, seed=7)
    c = observe(make_cube(nz=12, n=32), DISH, rms=0.1 * u.K, seed=8)
    assert a.unmasked_data[:].value.tobytes() == b.unmasked_data[:].value.tobytes()
    difference = a.unmasked_data[:].value - c.unmasked_data[:].value
    assert np.std(difference) == pytest.approx(np.sqrt(2) * 0.1, rel=0.2)


def test_no_seed_draws_one_and_records_it():
    """seed=None records the drawn seed, which reproduces the same noise."""
    a = observe(make_cube(nz=4, n=32), DISH, rms=0.1 * u.K)
    b = observe(make_cube(nz=4, n=32), DISH, rms=0.1 * u.K, seed=a.meta["NSEED"])
    np.testing.assert_array_equal(a.unmasked_data[:].value, b.unmasked_data[:].value)


@pytest.mark.parametrize("args, match", [
    ((-120 * u.K, 0.7, 1 * u.MHz, 1 * u.hr), "tsys: must be positive"),
    ((120 * u.K, 0.7, 1 * u.MHz, -1 * u.hr), "integration_time: must be positive"),
    ((120 * u.K, 0.7, 1 * u.MHz, 0 * u.hr), "integration_time: must be positive"),
    ((120, 0.7, 1 * u.MHz, 1 * u.hr), "tsys: expected a Quantity"),
    ((120 * u.K, 0.7, 1 * u.MHz, 3600), "integration_time: expected a Quantity"),
    ((120 * u.K, 1.7, 1 * u.MHz, 1 * u.hr), "efficiency"),
    ((120 * u.K, 0.7, -1 * u.MHz, 1 * u.hr), "channel_width_hz: must be positive"),
    ((120 * u.K, 0.7, 1 * u.m, 1 * u.hr), "channel_width_hz: expected"),
])
def test_bad_radiometer_inputs(args, match):
    with pytest.raises(InstrumentError, match=match):
        radiometer_rms(*args)


@pytest.mark.parametrize("kwargs, match", [
    ({"rng": 3}, "rng"),
    ({"rms": -1.0}, "rms"),
])
def test_bad_correlated_noise_inputs(kwargs, match):
    args = {"shape": (2, 8, 8), "beam": Beam(6 * u.arcsec), "pixscale": 1 * u.arcsec,
            "rms": 1.0, "rng": np.random.default_rng(0), **kwargs}
    with pytest.raises(InstrumentError, match=match):
        correlated_noise(**args)


def test_negative_time_in_observe():
    with pytest.raises(InstrumentError, match="integration_time: must be positive"):
        observe(make_cube(nz=4, n=16), DISH, integration_time=-2 * u.hr, seed=1)


@pytest.mark.parametrize("n_pol", [0, 3, True, 1.5])
def test_n_pol_must_be_one_or_two(n_pol):
    from synth.instrument.single_dish import Dish
    with pytest.raises(InstrumentError, match="n_pol"):
        Dish(diameter=30 * u.m, n_pol=n_pol)
    with pytest.raises(InstrumentError, match="n_pol"):
        radiometer_rms(100 * u.K, 1.0, 1 * u.MHz, 1 * u.s, n_pol=n_pol)
