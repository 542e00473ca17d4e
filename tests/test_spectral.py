"""Spectral response: exact rebinning, Hanning smoothing, velocity <-> frequency axes."""

import numpy as np
import pytest
import astropy.units as u
import astropy.constants as const
from astropy.wcs import WCS
from scipy.signal import convolve as sp_convolve
from scipy.signal.windows import hann
from spectral_cube import SpectralCube

from synth.errors import InstrumentError
from synth.instrument.spectral import (HANNING_WEIGHTS, channel_width_frequency,
                                       channel_width_velocity, hanning_smooth,
                                       resample_spectral, to_spectral_axis, velocity_axis)

NU0_HZ = 115.2712018e9  # CO 1-0 (Schöier et al. 2005, read)
KMS = u.km / u.s


def make_cube(spectrum, dv_ms=100.0, v0_ms=-5000.0, ny=4, nx=5):
    """A small K cube with a VRAD axis in m/s (CDELT3 = dv_ms, may be negative)."""
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-1 / 3600, 1 / 3600, dv_ms]
    w.wcs.crpix = [nx / 2, ny / 2, 1]
    w.wcs.crval = [120.0, 10.0, v0_ms]
    w.wcs.restfrq = NU0_HZ
    w.wcs.specsys = "LSRK"
    data = np.array(spectrum, dtype=float)[:, None, None] * np.ones((1, ny, nx))
    data.setflags(write=False)
    return SpectralCube(data * u.K, w)


def gaussian_line(n=120, dv_ms=100.0, v0_ms=-5000.0, vc_ms=300.0, sigma_ms=700.0):
    v = v0_ms + dv_ms * np.arange(n)
    return 3.0 * np.exp(-0.5 * ((v - vc_ms) / sigma_ms) ** 2)


def integral_k_kms(cube):
    v, _ = velocity_axis(cube)
    dv = abs(v[1] - v[0]).to_value(KMS)
    return cube.unmasked_data[:].value[:, 0, 0].sum() * dv


@pytest.mark.parametrize("width", [0.1, 0.25, 0.37, 1.0, 2.5])
@pytest.mark.parametrize("sign", [1, -1])
def test_rebin_conserves_integrated_intensity(width, sign):
    """sum(T) dv is conserved to 1e-6 by the overlap-integral rebinning (invariant, STYLE 7),
    for ascending and descending axes and non-integer width ratios."""
    spec = gaussian_line()
    cube = make_cube(spec if sign > 0 else spec[::-1], dv_ms=100.0 * sign,
                     v0_ms=-5000.0 if sign > 0 else 6900.0)
    out = resample_spectral(cube, width * KMS)
    assert integral_k_kms(out) == pytest.approx(integral_k_kms(cube), rel=1e-6)
    assert out.meta["CHANWID"] == pytest.approx(width, rel=1e-9)


def test_rebin_equals_independent_cumulative_oracle():
    """Each output channel is the input's average over its extent: compare with differences
    of the exact cumulative integral of the piecewise-constant input (np.interp oracle)."""
    rng = np.random.default_rng(3)
    spec = rng.uniform(0, 2, 60)
    cube = make_cube(spec, dv_ms=200.0, v0_ms=-6000.0)
    start = -5.3 * KMS
    out = resample_spectral(cube, 0.7 * KMS, channel_start=start)
    edges_in = -6.1 + 0.2 * np.arange(61)
    cumulative = np.concatenate([[0.0], np.cumsum(spec * 0.2)])
    centres = out.spectral_axis.to_value(KMS)
    lo, hi = centres - 0.35, centres + 0.35
    expected = (np.interp(hi, edges_in, cumulative) - np.interp(lo, edges_in, cumulative)) / 0.7
    np.testing.assert_allclose(out.unmasked_data[:].value[:, 1, 2], expected, rtol=1e-10)
    assert centres[0] == pytest.approx(-5.3, abs=1e-9)
    assert hi[-1] <= edges_in[-1] + 1e-9


def test_native_width_is_identity():
    """Rebinning at the native width and start returns the input values (exact overlap)."""
    spec = gaussian_line(n=30)
    out = resample_spectral(make_cube(spec), 0.1 * KMS)
    np.testing.assert_allclose(out.unmasked_data[:].value[:, 0, 0], spec, rtol=1e-12)


def test_hanning_matches_scipy_window_convolution():
    """Hanning weights (1/4, 1/2, 1/4) = scipy.signal.windows.hann(5)[1:-1] / 2, applied as
    scipy.signal.convolve(..., mode='same') (Harris 1978, Proc. IEEE 66, 51)."""
    window = hann(5)[1:-1]
    window = window / window.sum()
    np.testing.assert_allclose(window, HANNING_WEIGHTS, rtol=1e-15)
    spec = np.random.default_rng(0).normal(size=50)
    expected = sp_convolve(spec, window, mode="same")
    np.testing.assert_allclose(hanning_smooth(spec), expected, rtol=1e-12, atol=1e-15)
    out = resample_spectral(make_cube(spec), hanning=True)
    np.testing.assert_allclose(out.unmasked_data[:].value[:, 0, 0], expected, rtol=1e-9,
                               atol=1e-12)
    assert out.meta["HANNING"] is True


def test_hanning_conserves_line_integral():
    """Smoothing with weights summing to 1 keeps sum(T) dv for a line away from the edges."""
    cube = make_cube(gaussian_line())
    out = resample_spectral(cube, 0.3 * KMS, hanning=True)
    assert integral_k_kms(out) == pytest.approx(integral_k_kms(cube), rel=1e-6)


def test_width_in_frequency_equals_width_in_velocity():
    """Radio convention: dnu = nu0 dv / c (astropy doppler_radio)."""
    dv = 0.5 * KMS
    dnu = channel_width_frequency(dv, NU0_HZ * u.Hz)
    expected = (NU0_HZ * u.Hz * dv / const.c).to(u.Hz)
    assert dnu.to_value(u.Hz) == pytest.approx(expected.value, rel=1e-12)
    nu_lo = (0 * KMS).to(u.Hz, u.doppler_radio(NU0_HZ * u.Hz))
    nu_hi = (0.5 * KMS).to(u.Hz, u.doppler_radio(NU0_HZ * u.Hz))
    assert dnu.to_value(u.Hz) == pytest.approx((nu_lo - nu_hi).to_value(u.Hz), rel=1e-9)
    assert channel_width_velocity(dnu, NU0_HZ * u.Hz).to_value(KMS) == pytest.approx(0.5)
    cube = make_cube(gaussian_line())
    a = resample_spectral(cube, dv).unmasked_data[:].value
    b = resample_spectral(cube, dnu).unmasked_data[:].value
    np.testing.assert_allclose(a, b, rtol=1e-9)


def test_frequency_axis_matches_astropy_radio_equivalency():
    """The frequency axis is nu = nu0 (1 - v/c), as astropy's doppler_radio gives."""
    cube = resample_spectral(make_cube(gaussian_line()), 0.5 * KMS)
    fcube = to_spectral_axis(cube, "frequency")
    expected = cube.spectral_axis.to(u.GHz, u.doppler_radio(NU0_HZ * u.Hz))
    np.testing.assert_allclose(fcube.spectral_axis.to_value(u.GHz), expected.value, rtol=1e-12)


def test_frequency_input_cube_is_resampled_in_velocity():
    """A cube with a FREQ axis gives the same rebinned spectrum as its VRAD twin."""
    cube = make_cube(gaussian_line())
    fcube = cube.with_spectral_unit(u.Hz, velocity_convention="radio")
    a = resample_spectral(cube, 0.4 * KMS).unmasked_data[:].value
    b = resample_spectral(fcube, 0.4 * KMS)
    np.testing.assert_allclose(b.unmasked_data[:].value, a, rtol=1e-6, atol=1e-9)
    assert integral_k_kms(b) == pytest.approx(integral_k_kms(cube), rel=1e-6)


def test_input_cube_not_mutated():
    cube = make_cube(gaussian_line())
    before = cube.unmasked_data[:].value.copy()
    meta_before = dict(cube.meta)
    resample_spectral(cube, 0.5 * KMS, hanning=True)
    np.testing.assert_array_equal(cube.unmasked_data[:].value, before)
    assert cube.meta == meta_before


@pytest.mark.parametrize("kwargs, match", [
    ({"channel_width": 0.05 * KMS}, "finer than the cube's native"),
    ({"channel_width": 0.5 * u.dimensionless_unscaled}, "neither a velocity nor a frequency"),
    ({"channel_width": 0.5 * KMS, "channel_start": 40 * KMS}, "channel_start"),
    ({"channel_width": 0.5 * KMS, "channel_start": -5.2 * KMS}, "channel_start"),
])
def test_bad_spectral_options(kwargs, match):
    with pytest.raises(InstrumentError, match=match):
        resample_spectral(make_cube(gaussian_line()), **kwargs)


def test_bad_axis_and_cube():
    with pytest.raises(InstrumentError, match="spectral_axis"):
        to_spectral_axis(make_cube(gaussian_line()), "wavelength")
    with pytest.raises(InstrumentError, match="SpectralCube"):
        resample_spectral(np.zeros((3, 3, 3)), 1 * KMS)
    with pytest.raises(InstrumentError, match="at least 2 channels"):
        resample_spectral(make_cube([1.0]), 1 * KMS)
