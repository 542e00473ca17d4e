"""Joint imaging of several arrays and feathering with a single dish."""

import numpy as np
import pytest
import astropy.units as u
from radio_beam import Beam
from scipy.signal import fftconvolve
from spectral_cube import SpectralCube

from synth.errors import InstrumentError
from synth.instrument.combine import feather_plane, split_instruments
from synth.instrument.imaging import restoring_kernel
from synth.instrument.interferometer import Array, observe_interferometric

from test_imaging import gaussian_sky, make_cube

PIX = 0.4
SD_BEAM = Beam(major=8 * u.arcsec, minor=8 * u.arcsec, pa=0 * u.deg)


def _sd_cube(sky):
    """Single-dish cube in Jy/beam: the Jy/pixel sky convolved with the peak-1 beam."""
    k = restoring_kernel(SD_BEAM, -np.deg2rad(PIX / 3600), np.deg2rad(PIX / 3600))
    data = np.array([fftconvolve(p, k, mode="same") for p in sky])
    cube = make_cube(data, pix_arcsec=PIX, unit=u.Jy / u.beam)
    return cube.with_beam(SD_BEAM, raise_error_jybm=False)


def test_feather_of_perfect_images_returns_the_sky():
    """F_SD = B F_sky and F_int = F_sky give F = F_sky exactly (Stanimirović et al. 1999);
    B the Gaussian transform pair (Bracewell 2000), checked here against scipy's Gaussian
    filter with the beam's sigma in pixels."""
    from scipy.ndimage import gaussian_filter
    sky = gaussian_sky(128, 12.0)[0] + gaussian_sky(128, 2.0)[0]
    sigma_pix = 8.0 / PIX / np.sqrt(8 * np.log(2))
    sd = gaussian_filter(sky, sigma_pix, mode="wrap")
    np.testing.assert_allclose(feather_plane(sky, sd, SD_BEAM, PIX), sky,
                               atol=1e-5 * sky.max())


def test_feathered_total_flux_equals_single_dish():
    """Total flux of the feathered cube equals the single-dish total within 2 % (F(0) =
    F_SD(0); Stanimirović et al. 1999), while the interferometer alone misses most of it."""
    sky = gaussian_sky(128, 15.0 / PIX, flux=3.0, nch=2)
    arr = Array("compact-16", tsys=90 * u.K)
    kw = dict(noise=False, primary_beam=False, deconvolver="hogbom", sample_interval=600 * u.s)
    both = observe_interferometric(make_cube(sky, pix_arcsec=PIX), [arr, _sd_cube(sky)], correct_primary_beam=False, **kw)
    alone = observe_interferometric(make_cube(sky, pix_arcsec=PIX), arr, correct_primary_beam=False, **kw)
    omega_pix = np.deg2rad(PIX / 3600) ** 2
    flux = both.unmasked_data[:].value.sum(axis=(1, 2)) * omega_pix / both.beam.sr.value
    flux_int = alone.unmasked_data[:].value.sum(axis=(1, 2)) * omega_pix / alone.beam.sr.value
    sd = _sd_cube(sky)
    flux_sd = sd.unmasked_data[:].value.sum(axis=(1, 2)) * omega_pix / SD_BEAM.sr.value
    np.testing.assert_allclose(flux_sd, 3.0, rtol=1e-3)
    np.testing.assert_allclose(flux, flux_sd, rtol=0.02)
    assert np.all(flux_int < 0.5 * flux_sd)
    assert both.meta["FEATHER"] and "+" in both.meta["INSTRUME"]


def test_feather_with_single_dish_instance():
    """A Dish in the list is observed by synth.instrument.observe and feathered: the
    total flux equals that of the single-dish cube (2 %)."""
    from synth.instrument.single_dish import Dish
    from synth.instrument.observe import observe
    sky = gaussian_sky(96, 10.0 / PIX, flux=2.0, nch=2)
    dish = Dish(diameter=50 * u.m, main_beam_efficiency=0.7, tsys=100 * u.K)
    cube_k = make_cube(sky * 1e3, pix_arcsec=PIX, unit=u.K)
    feathered = observe_interferometric(cube_k, [Array("compact-16", tsys=90 * u.K), dish], noise=False,
                                        primary_beam=False, sample_interval=900 * u.s,
                                        pixel=PIX * u.arcsec, deconvolver="none", correct_primary_beam=False)
    sd = observe(cube_k, dish, noise=False, guard_band=0 * u.arcsec)
    omega_pix = np.deg2rad(PIX / 3600) ** 2
    sd_jy = sd.to(u.Jy / u.beam) if sd.unit.is_equivalent(u.K) else sd
    f_sd = sd_jy.unmasked_data[:].value.sum(axis=(1, 2)) * omega_pix / sd.beam.sr.value
    f = feathered.unmasked_data[:].value.sum(axis=(1, 2)) * omega_pix / feathered.beam.sr.value
    np.testing.assert_allclose(f, f_sd, rtol=0.02)


def test_joint_imaging_combines_noise_by_inverse_variance():
    """Joint natural-weighted imaging: 1/sigma^2 = 1/sigma_1^2 + 1/sigma_2^2 (TMS ch. 6) and
    the visibility count is the sum."""
    cube = make_cube(np.zeros((2, 64, 64)), pix_arcsec=0.2)
    a, b = Array("compact-16", tsys=90 * u.K), Array("ring-24", tsys=90 * u.K)
    kw = dict(noise=False, sample_interval=900 * u.s)
    ra = observe_interferometric(cube, a, deconvolver="none", correct_primary_beam=False, **kw).meta
    rb = observe_interferometric(cube, b, deconvolver="none", correct_primary_beam=False, **kw).meta
    rj = observe_interferometric(cube, (a, b), deconvolver="none", correct_primary_beam=False, **kw).meta
    assert rj["NVIS"] == ra["NVIS"] + rb["NVIS"]
    expect = (ra["THEORMS"] ** -2 + rb["THEORMS"] ** -2) ** -0.5
    assert rj["THEORMS"] == pytest.approx(expect, rel=1e-9)
    assert rj["INSTRUME"] == "compact-16+ring-24"


@pytest.mark.parametrize("inst, match", [
    (["ring-24"], "are not instruments"),
    ([SpectralCube], "are not instruments"),
    ([], "at least one Array"),
])
def test_bad_combinations(inst, match):
    with pytest.raises(InstrumentError, match=match):
        split_instruments(inst)


def test_two_dishes_refused():
    sd = _sd_cube(gaussian_sky(64, 5.0))
    with pytest.raises(InstrumentError, match="at most one single dish"):
        split_instruments([Array("ring-24", tsys=90 * u.K), sd, sd])


def test_feather_elliptical_dish_beam_orientation_matches_radio_beam_kernel():
    """An elliptical dish beam 8" x 3" at PA 30 deg east of north: the dish image made by an
    independent convolution with radio-beam's kernel (Beam.as_kernel, astropy's elliptical
    Gaussian, for images with east to the left) feathered with the perfect interferometric
    image returns the sky (F = B F_sky + (1 - B) F_sky; Stanimirović et al. 1999) within 1e-3
    of its peak; the mirrored beam (PA -30 deg) leaves a residual a hundred times larger."""
    from astropy.convolution import convolve_fft
    n = 128
    y, x = np.mgrid[:n, :n] - n // 2
    sky = np.exp(-4 * np.log(2) * ((x - 5) ** 2 + (y + 3) ** 2) / 2.0**2)
    beam = Beam(major=8 * u.arcsec, minor=3 * u.arcsec, pa=30 * u.deg)
    kernel = beam.as_kernel(PIX * u.arcsec, x_size=101, y_size=101)
    sd = convolve_fft(sky, kernel, boundary="wrap", normalize_kernel=True)
    err = np.abs(feather_plane(sky, sd, beam, PIX) - sky).max() / sky.max()
    mirrored = Beam(major=8 * u.arcsec, minor=3 * u.arcsec, pa=-30 * u.deg)
    err_mirror = np.abs(feather_plane(sky, sd, mirrored, PIX) - sky).max() / sky.max()
    assert err < 1e-3
    assert err_mirror > 100 * err


def _pb_and_source(n=128, pix=1.0, fwhm_pb=40.0, offset=(18, -12), fwhm_src=6.0):
    y, x = np.mgrid[:n, :n] - n // 2
    r_pb = np.exp(-4 * np.log(2) * (x**2 + y**2) * pix**2 / fwhm_pb**2)
    src = np.exp(-4 * np.log(2) * ((x - offset[0]) ** 2 + (y - offset[1]) ** 2) * pix**2
                 / fwhm_src**2)
    return r_pb, src, (n // 2 + offset[1], n // 2 + offset[0])


def test_feather_mosaic_multiplies_the_dish_image_by_the_response():
    """Feathering in the uncorrected domain (Cotton 2017, PASP 129, 094501; module docstring
    of combine): with no interferometric signal the feathered uncorrected map is the dish
    image times the response R, so the corrected map equals the dish image (K -> Jy per
    interferometric beam with radio-beam's jtok, an independent conversion) and its total
    equals the dish total (1e-9), for an off-centre compact source where R = 0.45 (Gaussian
    primary beam, FWHM 40", source 21.6" out: exp(-4 ln 2 (21.6/40)^2))."""
    from synth.instrument.combine import feather_mosaic
    r_pb, src, (iy, ix) = _pb_and_source()
    assert r_pb[iy, ix] == pytest.approx(np.exp(-4 * np.log(2) * (18**2 + 12**2) / 40**2))
    assert 0.4 < r_pb[iy, ix] < 0.5
    nu = np.array([230.538e9])
    sd_beam = Beam(major=10 * u.arcsec, minor=10 * u.arcsec, pa=0 * u.deg)
    int_beam = Beam(major=2 * u.arcsec, minor=1.5 * u.arcsec, pa=20 * u.deg)
    sd_k = 3.0 * src[None]
    out = feather_mosaic(np.zeros_like(sd_k), r_pb[None], sd_k, sd_beam, int_beam, nu, 1.0)
    expect = sd_k / int_beam.jtok(nu[0] * u.Hz).to_value(u.K)      # Jy per interferometric beam
    np.testing.assert_allclose(out[0, iy, ix], expect[0, iy, ix], rtol=1e-9)
    assert out.sum() == pytest.approx(expect.sum(), rel=1e-9)
