"""Single-dish beam, K <-> Jy/beam, and the observe entry point."""

import pickle

import numpy as np
import pytest
import astropy.units as u
import astropy.constants as const
from astropy.wcs import WCS
from radio_beam import Beam
from spectral_cube import SpectralCube

from synth.errors import BeamUndersampledWarning, InstrumentError
from synth.instrument.beam import (convolve_beam, dish_beam, jy_per_beam_to_k,
                                   k_to_jy_per_beam, to_unit)
from synth.instrument.observe import observe
from synth.instrument.single_dish import Dish

NU0_HZ = 115.2712018e9  # CO 1-0 (Schöier et al. 2005, read)
KMS = u.km / u.s
FWHM_TO_SIGMA = 1 / np.sqrt(8 * np.log(2))


def make_cube(data, pix_arcsec=1.0, dv_ms=250.0, v0_ms=0.0, unit=u.K, restfrq=NU0_HZ):
    """A K cube (v, y, x) with RA---SIN/DEC--SIN (CDELT1 < 0) and a VRAD axis in m/s."""
    nz, ny, nx = data.shape
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix_arcsec / 3600, pix_arcsec / 3600, dv_ms]
    w.wcs.crpix = [nx // 2 + 1, ny // 2 + 1, 1]
    w.wcs.crval = [120.0, 10.0, v0_ms]
    w.wcs.restfrq = restfrq
    w.wcs.specsys = "LSRK"
    data = np.array(data, dtype=float)
    data.setflags(write=False)
    return SpectralCube(data * unit, w)


def point_cube(nz=3, n=97, value=5.0):
    data = np.zeros((nz, n, n))
    data[:, n // 2, n // 2] = value
    return make_cube(data)


def jy_per_k_pixel(nu_hz, pix_arcsec):
    """Flux density (Jy) of one pixel at 1 K: S = 2 k nu^2 Omega_pix / c^2 (Rayleigh-Jeans)."""
    omega_sr = (pix_arcsec * u.arcsec).to_value(u.rad) ** 2
    return (2 * const.k_B * (nu_hz * u.Hz) ** 2 / const.c**2 * u.K * omega_sr).to_value(u.Jy)


def test_dish_beam_fwhm_from_diameter():
    """FWHM = fwhm_factor lambda / D: 10 m at 230.54 GHz is 27.4" (1.02) / 30.3" (1.13)
    (Born & Wolf 1999 / Wilson, Rohlfs & Hüttemeister 2013 sect. 6.1, memory; arcseconds
    computed by hand: lambda / D = 26.82")."""
    nu = 230.538 * u.GHz
    assert dish_beam(10 * u.m, nu, 1.02).major.to_value(u.arcsec) == pytest.approx(27.36, abs=0.05)
    assert dish_beam(10 * u.m, nu, 1.13).major.to_value(u.arcsec) == pytest.approx(30.31, abs=0.05)
    dish = Dish(diameter=10 * u.m)
    exact = (1.13 * const.c / nu / (10 * u.m)).decompose().value * u.rad
    assert dish.beam_at(nu).major.to_value(u.arcsec) == pytest.approx(
        exact.to_value(u.arcsec), rel=1e-12)


def test_fixed_beam_is_used_at_every_frequency():
    beam = Beam(major=10 * u.arcsec, minor=5 * u.arcsec, pa=20 * u.deg)
    dish = Dish(beam=beam)
    assert dish.beam_at(100 * u.GHz) == beam and dish.beam_at(300 * u.GHz) == beam


def test_beam_solid_angle():
    """Omega = pi theta_maj theta_min / (4 ln 2) (radio-beam FWHM_TO_AREA; the integral of a
    Gaussian)."""
    beam = Beam(major=12 * u.arcsec, minor=7 * u.arcsec, pa=10 * u.deg)
    expected = np.pi * (12 * u.arcsec) * (7 * u.arcsec) / (4 * np.log(2))
    assert beam.sr.to_value(u.sr) == pytest.approx(expected.to_value(u.sr), rel=1e-12)


def test_convolution_conserves_flux_density():
    """Sum over the map in Jy is conserved to 1e-6 (kernel normalised to 1): sum(Jy/beam) /
    (pixels per beam) after equals sum(T) x Jy-per-K-per-pixel before."""
    data = np.zeros((2, 80, 80))
    rng = np.random.default_rng(5)
    data[:, 30:50, 25:55] = rng.uniform(0, 4, (2, 20, 30))
    cube = make_cube(data)
    beam = Beam(major=6 * u.arcsec, minor=4 * u.arcsec, pa=35 * u.deg)
    out = k_to_jy_per_beam(convolve_beam(cube, beam))
    pix_per_beam = (beam.sr / (1 * u.arcsec) ** 2).decompose().value
    s_after_jy = out.unmasked_data[:].value.sum(axis=(1, 2)) / pix_per_beam
    nu_hz = NU0_HZ * (1 - np.array([0.0, 250.0]) / const.c.value)
    s_before_jy = data.sum(axis=(1, 2)) * jy_per_k_pixel(nu_hz, 1.0)
    np.testing.assert_allclose(s_after_jy, s_before_jy, rtol=1e-6)


def _moments(image, pix_arcsec):
    """FWHM major/minor (arcsec) and PA (deg, north through east) from second moments;
    east is -x because CDELT1 < 0."""
    ny, nx = image.shape
    y, x = np.mgrid[:ny, :nx]
    w = image / image.sum()
    east = -(x - (w * x).sum()) * pix_arcsec
    north = (y - (w * y).sum()) * pix_arcsec
    cov = np.array([[(w * east**2).sum(), (w * east * north).sum()],
                    [(w * east * north).sum(), (w * north**2).sum()]])
    vals, vecs = np.linalg.eigh(cov)
    major_vec = vecs[:, 1]
    pa = np.degrees(np.arctan2(major_vec[0], major_vec[1])) % 180
    return np.sqrt(vals[1]) / FWHM_TO_SIGMA, np.sqrt(vals[0]) / FWHM_TO_SIGMA, pa


@pytest.mark.parametrize("pa_deg", [0.0, 30.0, 120.0])
def test_point_source_gives_the_beam(pa_deg):
    """A point source becomes the beam: FWHM and PA (east of north) from second moments."""
    beam = Beam(major=12 * u.arcsec, minor=7 * u.arcsec, pa=pa_deg * u.deg)
    out = convolve_beam(point_cube(), beam)
    major, minor, pa = _moments(out.unmasked_data[:].value[1], 1.0)
    assert major == pytest.approx(12.0, rel=2e-3)
    assert minor == pytest.approx(7.0, rel=2e-3)
    assert pa == pytest.approx(pa_deg, abs=0.2)
    assert out.header["BMAJ"] == pytest.approx(12 / 3600) and out.header["BPA"] == pa_deg


def test_point_source_peak_in_jy_per_beam_equals_its_flux():
    """A point source of S Jy reads S Jy/beam at its peak (definition of Jy/beam)."""
    beam = Beam(major=9 * u.arcsec, minor=9 * u.arcsec)
    cube = point_cube(nz=1, n=81, value=1.0)
    s_jy = jy_per_k_pixel(NU0_HZ, 1.0)
    out = k_to_jy_per_beam(convolve_beam(cube, beam))
    assert out.unmasked_data[:].value.max() == pytest.approx(s_jy, rel=1e-3)


def test_k_to_jy_per_beam_matches_astropy_and_common_formula():
    """T[K] = 1.222e3 I[mJy/beam] / (nu[GHz]^2 theta_maj["] theta_min["]) (common practice)
    and astropy brightness_temperature; 1" at 115.2712018 GHz: 1 Jy/beam = 91.97554 K
    (computed from the Rayleigh-Jeans law, Wilson et al. 2013 eqs. 8.16, 8.19)."""
    beam = Beam(major=1 * u.arcsec, minor=1 * u.arcsec)
    one_jy = make_cube(np.ones((1, 3, 3)), unit=u.Jy / u.beam).with_beam(
        beam, raise_error_jybm=False)
    t_k = jy_per_beam_to_k(one_jy).unmasked_data[:].value[0, 0, 0]
    assert t_k == pytest.approx(91.97554, rel=1e-6)
    beam = Beam(major=14 * u.arcsec, minor=9 * u.arcsec, pa=5 * u.deg)
    cube = make_cube(np.full((1, 3, 3), 2.0))
    jy = k_to_jy_per_beam(cube, beam).unmasked_data[:].value[0, 0, 0]
    astropy_jy = (2.0 * u.K).to_value(u.Jy, u.brightness_temperature(NU0_HZ * u.Hz, beam.sr))
    assert jy == pytest.approx(astropy_jy, rel=1e-10)
    common_k = 1.222e3 * (jy * 1e3) / ((NU0_HZ / 1e9) ** 2 * 14 * 9)
    assert common_k == pytest.approx(2.0, rel=2e-4)
    back = to_unit(k_to_jy_per_beam(cube, beam), "K").unmasked_data[:].value
    np.testing.assert_allclose(back, 2.0, rtol=1e-12)


def test_existing_beam_is_deconvolved_from_the_kernel():
    """Smoothing a 6" cube to 10" equals smoothing the point source straight to 10"
    (Gaussians add in quadrature; radio-beam deconvolve)."""
    cube = point_cube(nz=1)
    direct = convolve_beam(cube, Beam(10 * u.arcsec)).unmasked_data[:].value
    staged = convolve_beam(convolve_beam(cube, Beam(6 * u.arcsec)), Beam(10 * u.arcsec))
    np.testing.assert_allclose(staged.unmasked_data[:].value, direct, atol=1e-4 * direct.max())
    same = convolve_beam(staged, Beam(10 * u.arcsec)).unmasked_data[:].value
    np.testing.assert_array_equal(same, staged.unmasked_data[:].value)


def test_beam_smaller_than_pixel_warns():
    with pytest.warns(BeamUndersampledWarning, match="smaller than a pixel"):
        out = convolve_beam(point_cube(nz=1, n=21), Beam(0.5 * u.arcsec))
    assert out.unmasked_data[:].value.sum() == pytest.approx(5.0, rel=1e-9)


def test_target_beam_smaller_than_cube_beam_errors():
    cube = convolve_beam(point_cube(nz=1), Beam(8 * u.arcsec))
    with pytest.raises(InstrumentError, match="not larger than the cube's beam"):
        convolve_beam(cube, Beam(5 * u.arcsec))


@pytest.mark.parametrize("kwargs, match", [
    ({}, "exactly one of diameter"),
    ({"diameter": 30 * u.m, "beam": Beam(10 * u.arcsec)}, "exactly one of diameter"),
    ({"diameter": 30.0}, "diameter: expected a scalar Quantity"),
    ({"diameter": -3 * u.m}, "diameter: must be positive"),
    ({"diameter": 30 * u.m, "main_beam_efficiency": 1.5}, "main_beam_efficiency"),
    ({"diameter": 30 * u.m, "main_beam_efficiency": 0}, "main_beam_efficiency"),
    ({"diameter": 30 * u.m, "tsys": -10 * u.K}, "tsys: must be positive"),
    ({"diameter": 30 * u.m, "tsys": 100 * u.s}, "tsys: expected"),
    ({"diameter": 30 * u.m, "fwhm_factor": 0.5}, "fwhm_factor"),
    ({"beam": "10arcsec"}, "radio_beam.Beam"),
    ({"diameter": 30 * u.m, "name": ""}, "name"),
])
def test_bad_single_dish(kwargs, match):
    with pytest.raises(InstrumentError, match=match):
        Dish(**kwargs)


def test_single_dish_is_frozen_and_pickles():
    dish = Dish(diameter=30 * u.m, tsys=120 * u.K)
    with pytest.raises(AttributeError):
        dish.fwhm_factor = 1.2
    assert pickle.loads(pickle.dumps(dish)) == dish


def line_cube(n=48):
    """Gaussian line at the map centre, 40 channels of 0.25 km/s."""
    v = np.arange(40) * 0.25 - 5
    y, x = np.mgrid[:n, :n] - n // 2
    data = (2.0 * np.exp(-0.5 * (v / 0.6) ** 2)[:, None, None]
            * np.exp(-0.5 * (x**2 + y**2) / 3.0**2)[None])
    return make_cube(data, pix_arcsec=3.0, v0_ms=-5000.0)


def test_observe_records_and_units():
    """observe returns the beam, the cards of our own naming, K or Jy/beam, either axis."""
    dish = Dish(diameter=30 * u.m, main_beam_efficiency=0.7, tsys=120 * u.K, name="thirty")
    cube = line_cube()
    obs = observe(cube, dish, channel_width=0.5 * KMS, integration_time=2 * u.hr, seed=1,
                  guard_band=0 * u.arcsec)
    assert obs.unit == u.K and obs.shape == (20, 48, 48)
    assert obs.beam.major.to_value(u.arcsec) == pytest.approx(
        (1.13 * const.c / (NU0_HZ * u.Hz) / (30 * u.m)).decompose().value * 206264.806, rel=1e-6)
    header = obs.header
    assert header["INSTRUME"] == "thirty" and int(header["NSEED"]) == 1
    assert float(header["CHANWID"]) == pytest.approx(0.5) and "BMAJ" in header
    # radiometer, two polarisations: 4.6077 mK / sqrt(2) (see test_noise)
    assert obs.meta["NOISERMS"] == pytest.approx(0.0046077 / np.sqrt(2), rel=1e-4)
    jy = observe(cube, dish, noise=False, unit="Jy/beam", spectral_axis="frequency",
                 guard_band=0 * u.arcsec)
    assert jy.unit == u.Jy / u.beam and jy.spectral_axis.unit == u.GHz
    assert jy.meta["NSEED"] == -1 and jy.meta["NOISERMS"] == 0.0
    k = observe(cube, dish, noise=False, guard_band=0 * u.arcsec)
    np.testing.assert_allclose(to_unit(jy, "K").unmasked_data[:].value,
                               k.unmasked_data[:].value[::-1][::-1], rtol=1e-9, atol=1e-12)


def test_observe_accepts_a_jy_per_beam_cube_and_does_not_mutate_input():
    """A foreign Jy/beam cube with a beam is observed like its K twin."""
    dish = Dish(diameter=30 * u.m)
    k_cube = line_cube()
    jy_cube = k_to_jy_per_beam(convolve_beam(k_cube, Beam(9 * u.arcsec)))
    meta_before, data_before = dict(jy_cube.meta), jy_cube.unmasked_data[:].value.copy()
    from_jy = observe(jy_cube, dish, noise=False)
    from_k = observe(k_cube, dish, noise=False)
    peak = from_k.unmasked_data[:].value.max()
    np.testing.assert_allclose(from_jy.unmasked_data[:].value, from_k.unmasked_data[:].value,
                               atol=1e-6 * peak)
    assert jy_cube.meta == meta_before
    np.testing.assert_array_equal(jy_cube.unmasked_data[:].value, data_before)


@pytest.mark.parametrize("kwargs, match", [
    ({"instrument": "dish"}, "not an instrument"),
    ({"spectral_axis": "wavelength"}, "spectral_axis"),
    ({"unit": "Jy"}, "unit"),
    ({"noise": "yes"}, "noise"),
    ({"seed": -1, "rms": 0.1 * u.K}, "seed"),
    ({"rms": 0.1}, "rms"),
    ({"rms": -0.1 * u.K}, "rms"),
    ({"foo": 1}, "unknown option"),
    ({}, "needs rms"),
    ({"map_size": 5 * u.arcsec, "noise": False}, r"^map_size: 5 arcsec is smaller than one beam"),
    ({"guard_band": -3 * u.arcsec, "noise": False}, r"^guard_band: -3.0; must be >= 0"),
    ({"pointing_spacing": 60 * u.arcsec, "noise": False}, "larger than the beam"),
    ({"beyond_box": "mirror", "noise": False}, "beyond_box"),
    ({"map_offset": 3 * u.arcsec, "noise": False}, "map_offset"),
])
def test_bad_observe_options(kwargs, match):
    kwargs = {"instrument": Dish(diameter=30 * u.m), **kwargs}
    instrument = kwargs.pop("instrument")
    with pytest.raises(InstrumentError, match=match):
        observe(line_cube(), instrument, **kwargs)


@pytest.mark.parametrize("change, match", [
    ("unit", "not a brightness unit"),
    ("no_beam", "carries no beam"),
    ("no_rest", "RESTFRQ"),
    ("nan", "NaN"),
])
def test_bad_cubes(change, match):
    data = np.ones((3, 8, 8))
    if change == "nan":
        data[0, 0, 0] = np.nan
    cube = make_cube(data, unit={"unit": u.m, "no_beam": u.Jy / u.beam}.get(change, u.K),
                     restfrq=0.0 if change == "no_rest" else NU0_HZ)
    with pytest.raises(InstrumentError, match=match):
        observe(cube, Dish(diameter=30 * u.m), noise=False)
