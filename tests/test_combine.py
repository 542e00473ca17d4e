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
from synth.instrument.interferometer import Interferometer, observe_interferometric

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
    arr = Interferometer("compact-16")
    kw = dict(noise=False, primary_beam=False, deconvolve=True, sample_interval=600 * u.s)
    both = observe_interferometric(make_cube(sky, pix_arcsec=PIX), [arr, _sd_cube(sky)], **kw)
    alone = observe_interferometric(make_cube(sky, pix_arcsec=PIX), arr, **kw)
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
    """A SingleDish in the list is observed by synth.instrument.observe and feathered: the
    total flux equals that of the single-dish cube (2 %)."""
    from synth.instrument.single_dish import SingleDish
    from synth.instrument.observe import observe
    sky = gaussian_sky(96, 10.0 / PIX, flux=2.0, nch=2)
    dish = SingleDish(diameter=50 * u.m, efficiency=0.7, tsys=100 * u.K)
    cube_k = make_cube(sky * 1e3, pix_arcsec=PIX, unit=u.K)
    feathered = observe_interferometric(cube_k, [Interferometer("compact-16"), dish], noise=False,
                                        primary_beam=False, sample_interval=900 * u.s,
                                        pixel=PIX * u.arcsec)
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
    a, b = Interferometer("compact-16"), Interferometer("ring-24")
    kw = dict(noise=False, sample_interval=900 * u.s)
    ra = observe_interferometric(cube, a, **kw).meta
    rb = observe_interferometric(cube, b, **kw).meta
    rj = observe_interferometric(cube, (a, b), **kw).meta
    assert rj["NVIS"] == ra["NVIS"] + rb["NVIS"]
    expect = (ra["THEORMS"] ** -2 + rb["THEORMS"] ** -2) ** -0.5
    assert rj["THEORMS"] == pytest.approx(expect, rel=1e-9)
    assert rj["INSTRUME"] == "compact-16+ring-24"


@pytest.mark.parametrize("inst, match", [
    (["ring-24"], "are not instruments"),
    ([SpectralCube], "are not instruments"),
    ([], "at least one Interferometer"),
])
def test_bad_combinations(inst, match):
    with pytest.raises(InstrumentError, match=match):
        split_instruments(inst)


def test_two_dishes_refused():
    sd = _sd_cube(gaussian_sky(64, 5.0))
    with pytest.raises(InstrumentError, match="at most one single dish"):
        split_instruments([Interferometer("ring-24"), sd, sd])
