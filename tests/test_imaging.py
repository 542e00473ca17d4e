"""Visibility prediction conventions, dirty imaging, weighting, primary beam."""

import numpy as np
import pytest
import astropy.units as u
from astropy.coordinates import SkyCoord
from astropy.wcs import WCS
from scipy.optimize import brentq
from spectral_cube import SpectralCube

from synth.errors import FieldLargerThanPrimaryBeamWarning, InstrumentError
from synth.instrument.imaging import restoring_kernel, fit_restoring_beam
from synth.instrument.interferometer import Array, observe_interferometric
from synth.instrument.primary_beam import half_power_radius_rad, pair_beam, voltage_pattern
from synth.instrument.uv import largest_scale, synthesized_beam_estimate, uv_tracks
from synth.instrument.visibilities import (cube_geometry, interferometer_rms,
                                           jy_per_pixel_factor, predict)
from synth.instrument.weighting import cell_density, imaging_weights

C = 299792458.0
HA = (-2, 2) * u.hourangle


def make_cube(data, pix_arcsec=0.2, dec=10.0, nu0=230.538e9, dv_kms=0.5, unit=u.Jy / u.pix,
              crpix=None):
    nch, ny, nx = data.shape
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    w.wcs.cdelt = [-pix_arcsec / 3600, pix_arcsec / 3600, dv_kms * 1e3]
    w.wcs.crpix = crpix or [nx // 2 + 1, ny // 2 + 1, 1]
    w.wcs.crval = [120.0, dec, 0.0]
    w.wcs.restfrq = nu0
    w.wcs.specsys = "LSRK"
    return SpectralCube(data=data * unit, wcs=w)


def gaussian_sky(n, fwhm_pix, flux=1.0, nch=1):
    y, x = np.mgrid[:n, :n] - n // 2
    g = np.exp(-4 * np.log(2) * (x**2 + y**2) / fwhm_pix**2)
    return np.repeat((flux * g / g.sum())[None], nch, axis=0)


def test_predict_matches_direct_fourier_sum_with_astropy_lm():
    """Off-centre point source: ducc0 visibilities equal exp(-2 pi i (u l + v m)) (TMS 3rd ed.
    eq. 3.7) with (l, m) the SIN direction cosines from astropy's WCS: 1e-6."""
    cube = make_cube(np.zeros((1, 64, 64)), crpix=[30.5, 36.0, 1])
    geom, ra0, dec0 = cube_geometry(cube)
    arr = Array("ring-24", tsys=90 * u.K)
    t = uv_tracks(arr, dec0 * u.rad, HA, 1200 * u.s)
    img = np.zeros((64, 64))
    img[40, 17] = 1.0
    vis = predict(img, t.uvw_m, 230.538e9, geom)
    sky = cube.wcs.celestial.pixel_to_world(17, 40)
    da = sky.ra.rad - ra0
    l = np.cos(sky.dec.rad) * np.sin(da)
    m = np.sin(sky.dec.rad) * np.cos(dec0) - np.cos(sky.dec.rad) * np.sin(dec0) * np.cos(da)
    uw, vw = t.uvw_m[:, 0] * 230.538e9 / C, t.uvw_m[:, 1] * 230.538e9 / C
    ref = np.exp(-2j * np.pi * (uw * l + vw * m))
    # SIN (l, m) vs the linear pixel offsets differ at second order: (3")^3 ~ 1e-15 rad
    assert np.max(np.abs(vis - ref)) < 1e-6
    assert SkyCoord(ra0 * u.rad, dec0 * u.rad).separation(sky).arcsec > 2.5


def test_point_at_phase_centre_peak_equals_flux():
    """Noiseless dirty image of a 1 Jy point at the phase centre peaks at 1 Jy/beam (1e-4)."""
    d = np.zeros((2, 64, 64))
    d[:, 32, 32] = 1.0
    obs = observe_interferometric(make_cube(d), Array("ring-24", tsys=90 * u.K), noise=False,
                                  sample_interval=600 * u.s, weighting="uniform", deconvolver="none", correct_primary_beam=False)
    img = obs.unmasked_data[:].value
    assert obs.unit == u.Jy / u.beam
    assert np.unravel_index(np.argmax(img[0]), img[0].shape) == (32, 32)
    np.testing.assert_allclose(img[:, 32, 32], 1.0, rtol=1e-4)


@pytest.mark.parametrize("fwhm_pix", [3.0, 10.0])
def test_gaussian_dirty_peak_matches_analytic_visibilities(fwhm_pix):
    """Natural weighting, no noise: peak = sum_k w_k S exp(-pi^2 theta^2 |u_k|^2 / (4 ln 2))
    / sum_k w_k (analytic visibility of a Gaussian; docs/references.md) within 1 %."""
    arr = Array("ring-24", tsys=90 * u.K)
    obs = observe_interferometric(make_cube(gaussian_sky(128, fwhm_pix, 2.0)), arr, noise=False,
                                  primary_beam=False, sample_interval=300 * u.s, deconvolver="none", correct_primary_beam=False)
    t = uv_tracks(arr, 10 * u.deg, HA, 300 * u.s)
    q = np.hypot(t.uvw_m[:, 0], t.uvw_m[:, 1]) * 230.538e9 / C
    theta = np.deg2rad(fwhm_pix * 0.2 / 3600)
    expect = 2.0 * np.mean(np.exp(-np.pi**2 * theta**2 * q**2 / (4 * np.log(2))))
    assert obs.unmasked_data[0, 64, 64].value == pytest.approx(expect, rel=0.01)


def test_large_gaussian_filtered_and_half_flux_scale_near_las():
    """A Gaussian of 25" > lambda / B_min = 19.4" seen by compact-16: dirty peak = the analytic
    visibility sum within 2 % (it keeps 2e-5 of the flux); the scale where half of the beam-convolved peak survives is
    within 50 % of 0.6 lambda / B_min (Wilner & Welch 1994, an approximate rule)."""
    arr = Array("compact-16", tsys=90 * u.K)
    pix = 0.8
    obs = observe_interferometric(make_cube(gaussian_sky(128, 25.0 / pix), pix_arcsec=pix), arr,
                                  noise=False, primary_beam=False, sample_interval=300 * u.s,
                                  pixel=pix * u.arcsec, deconvolver="none", correct_primary_beam=False)
    t = uv_tracks(arr, 10 * u.deg, HA, 300 * u.s)
    q = np.hypot(t.uvw_m[:, 0], t.uvw_m[:, 1]) * 230.538e9 / C
    b_min_wl = q.min()
    assert np.deg2rad(25 / 3600) > 1.0 / b_min_wl

    def vis_frac(theta):
        return np.mean(np.exp(-np.pi**2 * theta**2 * q**2 / (4 * np.log(2))))
    peak = obs.unmasked_data[0, 64, 64].value
    assert peak == pytest.approx(vis_frac(np.deg2rad(25 / 3600)), rel=0.02)
    beam = synthesized_beam_estimate(arr, 230.538e9 * u.Hz, 10 * u.deg, HA)
    tb2 = (beam.major * beam.minor).to_value(u.rad**2)
    half = brentq(lambda th: vis_frac(th) * (th**2 + tb2) / tb2 - 0.5, 1e-8, 1e-2)
    las = largest_scale(arr, 230.538e9 * u.Hz, 10 * u.deg, HA).to_value(u.rad)
    assert 0.5 < half / las < 1.5


def test_natural_noise_matches_radiometer():
    """Natural-weighted image rms = the array's point-source sensitivity for the whole track
    (TMS 3rd ed. eq. 6.62, via interferometer_rms) within 5 %."""
    arr = Array("ring-24", tsys=90 * u.K)
    obs = observe_interferometric(make_cube(np.zeros((4, 128, 128))), arr, seed=7,
                                  sample_interval=300 * u.s, pointing_pattern="single", deconvolver="none", correct_primary_beam=False)
    ha = np.unique(uv_tracks(arr, 10 * u.deg, HA, 300 * u.s).hour_angle_rad)
    dnu = 0.5e3 / C * 230.538e9
    expect = interferometer_rms(arr, dnu * u.Hz, ha.size * 300 * u.s).to_value(u.Jy)
    img = obs.unmasked_data[:].value
    assert img.std() == pytest.approx(expect, rel=0.05)
    assert obs.meta["THEORMS"] == pytest.approx(expect, rel=1e-3)


def test_robust_limits_tend_to_natural_and_uniform():
    """Briggs (1995): R = +5 gives natural weights, R = -5 uniform (ratios constant to 1e-3)."""
    arr = Array("star-30", tsys=90 * u.K)
    t = uv_tracks(arr, 10 * u.deg, HA, 300 * u.s)
    geom, _, _ = cube_geometry(make_cube(np.zeros((1, 128, 128)), pix_arcsec=0.1))
    sig = np.full(t.uvw_m.shape[0], 0.3)
    nat = imaging_weights(t.uvw_m, 230e9, sig, geom, "natural")
    uni = imaging_weights(t.uvw_m, 230e9, sig, geom, "uniform")
    for r, ref in ((5.0, nat), (-5.0, uni)):
        ratio = imaging_weights(t.uvw_m, 230e9, sig, geom, "robust", robust=r) / ref
        assert np.ptp(ratio) / ratio.mean() < 1e-3
    # intermediate R: test_briggs_weights_against_the_formula_on_a_known_uv_density


def test_uniform_weights_fill_each_cell_equally():
    """Uniform weighting: every occupied uv cell (with its conjugate) sums to weight 1
    (Briggs 1995, sec. 3.2)."""
    arr = Array("ring-24", tsys=90 * u.K)
    t = uv_tracks(arr, 10 * u.deg, HA, 300 * u.s)
    geom, _, _ = cube_geometry(make_cube(np.zeros((1, 64, 64))))
    uni = imaging_weights(t.uvw_m, 230e9, np.ones(t.uvw_m.shape[0]), geom, "uniform")
    dens, _ = cell_density(t.uvw_m, 230e9, uni, geom)
    np.testing.assert_allclose(dens, 1.0, rtol=1e-12)


def test_primary_beam_widths():
    """Gaussian FWHM 1.13 lambda/D: 12 m at 230.54 GHz -> 25.3" (Wilson, Rohlfs &
    Hüttemeister 2013 sect. 6.1, memory); Airy half
    power at 2 J1(x)/x = 1/sqrt(2) (Born & Wolf 1999, HPBW 1.029 lambda/D, scipy root)."""
    from scipy.special import j1
    hp = np.rad2deg(half_power_radius_rad(230.54e9, 12.0)) * 3600 * 2
    assert hp == pytest.approx(25.3, abs=0.05)
    x = brentq(lambda x: 2 * j1(x) / x - np.sqrt(0.5), 0.5, 3.0)
    r = half_power_radius_rad(230.54e9, 12.0, "airy")
    assert r == pytest.approx(x * C / (np.pi * 12.0 * 230.54e9), rel=1e-4)
    assert voltage_pattern(r, 230.54e9, 12.0, "airy") ** 2 == pytest.approx(0.5, rel=1e-3)
    # mixed pair 12 m x 7 m: Gaussian with 1/theta^2 = (1/theta_1^2 + 1/theta_2^2) / 2
    th1, th2 = 1.13 * C / 230.54e9 / 12.0, 1.13 * C / 230.54e9 / 7.0
    th = np.sqrt(2.0 / (1 / th1**2 + 1 / th2**2))
    assert pair_beam(th / 2, 230.54e9, 12.0, 7.0) == pytest.approx(0.5, rel=1e-12)


def test_fit_restoring_beam_recovers_a_gaussian():
    """The main-lobe fit returns the FWHM and PA of an exact elliptical Gaussian (1e-6)."""
    from radio_beam import Beam
    truth = Beam(major=1.2 * u.arcsec, minor=0.7 * u.arcsec, pa=35 * u.deg)
    dx, dy = -np.deg2rad(0.1 / 3600), np.deg2rad(0.1 / 3600)
    psf = restoring_kernel(truth, dx, dy, shape=(129, 129))
    fit = fit_restoring_beam(psf, dx, dy)
    assert fit.major.to_value(u.arcsec) == pytest.approx(1.2, rel=1e-6)
    assert fit.minor.to_value(u.arcsec) == pytest.approx(0.7, rel=1e-6)
    assert fit.pa.to_value(u.deg) == pytest.approx(35.0, abs=1e-4)


def test_coarse_model_is_resampled_and_keeps_the_analytic_peak():
    """A 0.5" model is too coarse for ring-24 at 230 GHz (Nyquist <= 0.4"): it is resampled by
    a Fourier zoom onto >= 4 pixels per synthesized beam, and the dirty peak of a Gaussian is
    still the analytic visibility average (Gaussian transform pair) within 1 %."""
    arr = Array("ring-24", tsys=90 * u.K)
    fwhm = 3.0                                             # arcsec, 6 model pixels
    cube = make_cube(gaussian_sky(64, fwhm / 0.5, 2.0), pix_arcsec=0.5)
    obs = observe_interferometric(cube, arr, noise=False, primary_beam=False,
                                  sample_interval=300 * u.s, deconvolver="none", correct_primary_beam=False)
    pix = abs(obs.wcs.wcs.cdelt[0]) * 3600
    assert pix < 0.4 and obs.shape[1] * pix == pytest.approx(64 * 0.5, rel=1e-9)
    t = uv_tracks(arr, 10 * u.deg, HA, 300 * u.s)
    q = np.hypot(t.uvw_m[:, 0], t.uvw_m[:, 1]) * 230.538e9 / C
    theta = np.deg2rad(fwhm / 3600)
    expect = 2.0 * np.mean(np.exp(-np.pi**2 * theta**2 * q**2 / (4 * np.log(2))))
    x0, y0 = (int(round(c - 1)) for c in obs.wcs.wcs.crpix[:2])
    assert obs.unmasked_data[0, y0, x0].value == pytest.approx(expect, rel=0.01)


def test_explicit_pixel_too_coarse_names_needed_size():
    with pytest.raises(InstrumentError, match=r"too coarse .* must be <= 0\.\d+ arcsec"):
        observe_interferometric(make_cube(np.zeros((1, 64, 64)), pix_arcsec=0.5),
                                Array("ring-24", tsys=90 * u.K), noise=False, pixel=1.0 * u.arcsec, deconvolver="none", correct_primary_beam=False)


def test_field_larger_than_primary_beam_warns_with_fraction():
    """Flux far outside the half-power radius (12.6" at 230 GHz for 12 m) of a single pointing
    is reported."""
    d = np.zeros((1, 256, 256))
    d[0, 128, 128] = 1.0
    d[0, 128, 10] = 1.0              # 23.6" east of centre
    with pytest.warns(FieldLargerThanPrimaryBeamWarning, match=r"50\.0% of the sky cube's flux"):
        observe_interferometric(make_cube(d), Array("ring-24", tsys=90 * u.K), noise=False,
                                sample_interval=1200 * u.s, pointing_pattern="single", deconvolver="none", correct_primary_beam=False)


def test_kelvin_and_jansky_inputs_agree():
    """A K cube equals the Jy/pixel cube scaled by 2 k nu^2 Omega_pix / c^2 (Rayleigh-Jeans;
    astropy brightness_temperature, Wilson et al. 2013 eq. 8.19)."""
    d = gaussian_sky(64, 5.0, 1.0)
    cube_k = make_cube(d, unit=u.K)
    geom, _, _ = cube_geometry(cube_k)
    omega = np.deg2rad(0.2 / 3600) ** 2
    k_b = 1.380649e-23
    fac = jy_per_pixel_factor(cube_k, 230.538e9, geom)
    assert fac == pytest.approx(2 * k_b * 230.538e9**2 * omega / C**2 / 1e-26, rel=1e-6)
    kw = dict(noise=False, sample_interval=600 * u.s, primary_beam=False)
    a = observe_interferometric(cube_k, Array("ring-24", tsys=90 * u.K), deconvolver="none", correct_primary_beam=False, **kw).unmasked_data[0].value
    b = observe_interferometric(make_cube(d * fac), Array("ring-24", tsys=90 * u.K), deconvolver="none", correct_primary_beam=False, **kw)
    np.testing.assert_allclose(a, b.unmasked_data[0].value, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("robust", [-2.0, 0.0, 2.0])
def test_briggs_weights_against_the_formula_on_a_known_uv_density(robust):
    """Briggs robust weights w'_k = w_k / (1 + W_k f^2), f^2 = (5 10^-R)^2 / (sum_cells W_c^2 /
    sum_k w_k) (Briggs 1995, PhD thesis, New Mexico Tech, eq. 3.3), the sums running over the
    gridded visibilities, i.e. each measured one and its Hermitian mirror (-u, -v). Computed
    here by hand on a handful of visibilities placed in known uv cells (one pair of cells
    shared through the mirror), at R = -2, 0, +2: 1e-12."""
    from types import SimpleNamespace
    npx, dx = 64, 1e-5
    du = 1.0 / (npx * dx)                          # uv cell (wavelengths)
    cells = [(3, 2)] * 4 + [(-3, -2)] + [(-1, 4)] * 2 + [(7, -3)] + [(0, 5)] * 3
    sigma = np.array([0.5, 1.0, 2.0, 1.0, 0.7, 1.0, 3.0, 0.4, 1.0, 1.0, 2.0])
    rng = np.random.default_rng(3)
    jitter = rng.uniform(-0.3, 0.3, (len(cells), 2))          # stay inside the cell
    uv = (np.array(cells, dtype=float) + jitter) * du
    uvw = np.column_stack([uv, np.zeros(len(cells))])
    geom = SimpleNamespace(npx=npx, npy=npx, dx_rad=-dx, dy_rad=dx)
    w = 1.0 / sigma**2
    gridded = {}                                   # cell -> summed weight, both halves
    for (iu, iv), wk in zip(cells, w):
        for key in ((iu, iv), (-iu, -iv)):
            gridded[key] = gridded.get(key, 0.0) + wk
    assert gridded[(3, 2)] == pytest.approx(4 + 1 + 0.25 + 1 + 1 / 0.49)
    sum_w = 2.0 * w.sum()                          # every visibility gridded twice
    f2 = (5.0 * 10.0 ** (-robust)) ** 2 / (sum(v**2 for v in gridded.values()) / sum_w)
    ref = np.array([wk / (1.0 + gridded[c] * f2) for c, wk in zip(cells, w)])
    got = imaging_weights(uvw, C, sigma, geom, "robust", robust=robust)   # nu = c: uvw in lambda
    np.testing.assert_allclose(got, ref, rtol=1e-12)
