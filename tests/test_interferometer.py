"""observe with an Array: the entry point, options, products and contracts."""

import numpy as np
import pytest
import astropy.units as u

from synth.errors import InstrumentError
from synth.instrument.imaging import plot_uv_and_beam
from synth.instrument.interferometer import Array, observe_interferometric
from synth.instrument.primary_beam import pair_beam

from test_imaging import gaussian_sky, make_cube

KW = dict(sample_interval=600 * u.s, pointing_pattern="single")   # one pointing (no mosaic)


def _point_cube(y=32, x=32, nch=2):
    d = np.zeros((nch, 64, 64))
    d[:, y, x] = 1.0
    return make_cube(d)


def test_through_synth_observe_entry_point():
    """synth.instrument.observe.observe hands interferometers to us: Jy/beam, beam attached,
    meta cards; a noiseless dirty point at the centre peaks at its flux (1e-4)."""
    from synth.instrument.observe import observe
    d = np.zeros((2, 64, 64))
    d[:, 32, 32] = 1.0                               # 1 Jy per pixel, given in K
    from synth.instrument.visibilities import cube_geometry, jy_per_pixel_factor
    kcube = make_cube(d, unit=u.K)
    fac = jy_per_pixel_factor(kcube, 230.538e9, cube_geometry(kcube)[0])  # Jy per K
    obs = observe(make_cube(d / fac, unit=u.K), Array("ring-24", tsys=90 * u.K), noise=False,
                  weighting="natural",
                  deconvolver="none", hour_angles=(-2, 2) * u.hourangle, correct_primary_beam=False, **KW)
    assert obs.unit == u.Jy / u.beam
    assert obs.beam.major > 0 * u.arcsec
    assert obs.meta["WEIGHTNG"] == "natural" and obs.meta["NSEED"] == -1
    assert obs.unmasked_data[0, 32, 32].value == pytest.approx(1.0, rel=1e-4)
    assert obs.unit == u.Jy / u.beam


def test_seeded_noise_reproducible_and_input_untouched():
    cube = _point_cube()
    before = cube.unmasked_data[:].value.copy()
    arr = Array("ring-24", tsys=90 * u.K)
    a = observe_interferometric(cube, arr, seed=5, deconvolver="none", correct_primary_beam=False, **KW).unmasked_data[:].value
    b = observe_interferometric(cube, arr, seed=5, deconvolver="none", correct_primary_beam=False, **KW).unmasked_data[:].value
    c = observe_interferometric(cube, arr, seed=6, deconvolver="none", correct_primary_beam=False, **KW).unmasked_data[:].value
    np.testing.assert_array_equal(a, b)
    assert np.abs(a - c).max() > 0
    np.testing.assert_array_equal(cube.unmasked_data[:].value, before)
    drawn = observe_interferometric(cube, arr, seed=None, deconvolver="none", correct_primary_beam=False, **KW).meta["NSEED"]
    assert isinstance(drawn, int) and drawn >= 0


def test_pb_correction_recovers_offset_point_flux():
    """Point 6" off axis is attenuated by the Gaussian primary beam exp(-4 ln2 r^2/FWHM^2),
    FWHM 1.13 lambda/D (30.4" at 230.5 GHz for 10 m); correct_primary_beam divides it back."""
    cube = _point_cube(32, 62)                      # 30 px x 0.2" = 6" east
    arr = Array("ring-24", tsys=90 * u.K)
    raw = observe_interferometric(cube, arr, noise=False, deconvolver="none", correct_primary_beam=False, **KW).unmasked_data[0, 32, 62].value
    fixed = observe_interferometric(cube, arr, noise=False, correct_primary_beam=True, deconvolver="none", **KW)
    pb = pair_beam(np.deg2rad(6.0 / 3600), 230.538e9, 10.0, 10.0)
    assert raw == pytest.approx(pb, rel=1e-3)
    assert fixed.unmasked_data[0, 32, 62].value == pytest.approx(1.0, rel=1e-3)


def test_kelvin_output_uses_beam_rj_factor():
    """unit='K' multiplies Jy/beam by the restoring beam's Rayleigh-Jeans factor (radio-beam
    jtok; 1.2221e6 / (nu_GHz^2 theta_maj theta_min) K per Jy/beam,
    computed from the Rayleigh-Jeans law, Wilson et al. 2013 eqs. 8.16, 8.19)."""
    cube = _point_cube()
    arr = Array("ring-24", tsys=90 * u.K)
    jy = observe_interferometric(cube, arr, noise=False, deconvolver="none", correct_primary_beam=False, **KW)
    k = observe_interferometric(cube, arr, noise=False, unit="K", deconvolver="none", correct_primary_beam=False, **KW)
    nu = 230.538
    fac = 1.2221e6 / (nu**2 * jy.beam.major.to_value(u.arcsec) * jy.beam.minor.to_value(u.arcsec))
    assert k.unit == u.K
    assert k.unmasked_data[0, 32, 32].value == pytest.approx(
        jy.unmasked_data[0, 32, 32].value * fac, rel=1e-3)


def test_rms_option_sets_image_noise():
    obs = observe_interferometric(make_cube(np.zeros((4, 96, 96))), Array("ring-24", tsys=90 * u.K),
                                  seed=2, rms=5 * u.mJy / u.beam, weighting="robust", deconvolver="none", correct_primary_beam=False, **KW)
    assert obs.meta["NOISERMS"] == pytest.approx(0.005, rel=1e-9)
    assert obs.unmasked_data[:].value.std() == pytest.approx(0.005, rel=0.05)


def test_integration_time_rescales_noise():
    """Noise scales as t^-1/2 (radiometer equation)."""
    cube = make_cube(np.zeros((1, 64, 64)))
    arr = Array("ring-24", tsys=90 * u.K)
    base = observe_interferometric(cube, arr, noise=False, deconvolver="none", correct_primary_beam=False, **KW).meta["THEORMS"]
    ha_time = observe_interferometric(cube, arr, noise=False, integration_time=16 * u.hr, deconvolver="none", correct_primary_beam=False, **KW)
    n = 23 * 600.0                                   # 23 samples of 600 s in 4 h of hour angle
    assert ha_time.meta["THEORMS"] == pytest.approx(base * np.sqrt(n / (16 * 3600)), rel=1e-9)


@pytest.mark.parametrize("kw, match", [
    (dict(weighting="briggs"), "weighting='briggs' is not known"),
    (dict(colour="red"), r"unknown interferometer option\(s\) \['colour'\]"),
    (dict(clean_loop_gain=2.0), r"clean_loop_gain=2.0: valid is a number in \(0, 1\]"),
    (dict(clean_max_components=-1), "clean_max_components=-1: valid is an integer >= 0"),
    (dict(gain=0.1), "gain= was renamed to clean_loop_gain"),
    (dict(niter=100), "niter= was renamed to clean_max_components"),
    (dict(pb_correct=True), "pb_correct= was renamed to correct_primary_beam"),
    (dict(pb_limit=0.3), "pb_limit= was renamed to primary_beam_cutoff"),
    (dict(sd_scale=1.0), "sd_scale= was renamed to dish_flux_scale"),
    (dict(deconvolve=True), "deconvolve= was renamed to deconvolver"),
    (dict(threshold=2.0), "threshold= was renamed to clean_stop_sigma"),
    (dict(map_center=[0, 0] * u.arcsec), "map_center= was renamed to map_offset"),
    (dict(unit="mK"), "unit='mK'"),
    (dict(weighting="robust", robust=9), "robust=9 must be between -5 and 5"),
    (dict(seed=-3), "seed=-3"),
    (dict(bandwidth=5), "bandwidth"),
])
def test_bad_observe_options(kw, match):
    with pytest.raises(InstrumentError, match=match):
        observe_interferometric(_point_cube(), Array("ring-24", tsys=90 * u.K), **{**KW, "deconvolver": "none", **kw})


def test_cube_wcs_checks():
    cube = _point_cube()
    w = cube.wcs.deepcopy()
    w.wcs.ctype = ["RA---CAR", "DEC--CAR", "VRAD"]
    w.wcs.crval[1] = 0.0          # a plate carree grid about the equator
    from spectral_cube import SpectralCube
    bad = SpectralCube(data=cube.unmasked_data[:], wcs=w)
    with pytest.raises(InstrumentError, match="needs RA---SIN/DEC--SIN"):
        observe_interferometric(bad, Array("ring-24", tsys=90 * u.K), deconvolver="none", correct_primary_beam=False, **KW)


def test_plot_uv_and_beam_writes_png(tmp_path):
    path = plot_uv_and_beam(Array("compact-16", tsys=90 * u.K), -30 * u.deg, (-2, 2) * u.hourangle,
                            600 * u.s, tmp_path / "uv.png", 230 * u.GHz)
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_deconvolved_extended_source_keeps_flux_scale():
    """CLEAN of a compact Gaussian (1.5" FWHM, well inside the LAS): the restored total flux
    is within 5 % of the input (Högbom 1974 restoration; the residual in dirty-beam units)."""
    sky = gaussian_sky(96, 7.5, flux=1.0, nch=1)
    obs = observe_interferometric(make_cube(sky), Array("ring-24", tsys=90 * u.K), noise=False,
                                  deconvolver="hogbom", primary_beam=False,
                                  clean_max_components=20000, clean_stop_sigma=0.0, bandwidth=1 * u.MHz, correct_primary_beam=False, **KW)
    omega_pix = np.deg2rad(0.2 / 3600) ** 2
    total = obs.unmasked_data[0].value.sum() * omega_pix / obs.beam.sr.value
    assert total == pytest.approx(1.0, rel=0.05)


def test_antenna_phase_errors_decorrelate_a_point_source():
    """Antenna phase errors of rms phi (radians) per 60 s interval: baseline phase errors of
    rms sqrt(2) phi (within 3 %), and a point source's dirty peak reduced by
    exp(-phi^2), the coherence exp(-sigma^2/2) of Gaussian phase noise of rms sigma =
    sqrt(2) phi (common practice) within 3 %."""
    from synth.instrument.interferometer import antenna_phase_gains, assemble_tracks
    phi = 0.5
    arr = Array("ring-24", tsys=90 * u.K)
    opts = dict(hour_angles=(-2, 2) * u.hourangle, sample_interval=60 * u.s)
    tracks = assemble_tracks([arr], np.deg2rad(-30.0), opts, 1e6)
    g = antenna_phase_gains(tracks, phi, 60.0, np.random.default_rng(5))
    assert np.angle(g).std() == pytest.approx(np.sqrt(2) * phi, rel=0.03)
    cube = _point_cube()
    kw = dict(noise=False, sample_interval=60 * u.s, weighting="natural",
              pointing_pattern="single")
    clean_peak = observe_interferometric(cube, arr, deconvolver="none", correct_primary_beam=False, **kw).unmasked_data[0, 32, 32].value
    hit = observe_interferometric(cube, arr, seed=3, phase_rms=phi * u.rad, deconvolver="none", correct_primary_beam=False, **kw)
    assert hit.unmasked_data[0, 32, 32].value / clean_peak == pytest.approx(np.exp(-phi**2),
                                                                             rel=0.03)
    assert hit.meta["PHASERMS"] == pytest.approx(np.degrees(phi))


def test_negative_phase_rms_refused():
    with pytest.raises(InstrumentError, match="phase_rms"):
        observe_interferometric(_point_cube(), Array("ring-24", tsys=90 * u.K), noise=False,
                                phase_rms=-1 * u.deg, deconvolver="none", correct_primary_beam=False)


def test_system_temperature_follows_the_airmass():
    """T_sys = [T_rx + T_atm (1 - exp(-tau0 A))] exp(tau0 A), A = 1/sin(el) (plane-parallel
    atmosphere; Thompson, Moran & Swenson 2017, sec. 13.1, from memory) at airmasses 1, 2
    and 3, computed here by hand: T_rx 50 K, tau0 0.1, T_atm 270 K."""
    arr = Array("ring-24", zenith_opacity=0.1, receiver_temperature=50 * u.K)
    el = np.arcsin(1.0 / np.array([1.0, 2.0, 3.0]))
    expect = [(50 + 270 * (1 - np.exp(-0.1 * a))) * np.exp(0.1 * a) for a in (1, 2, 3)]
    np.testing.assert_allclose(arr.tsys_at(el), expect, rtol=1e-12)
    assert expect[0] == pytest.approx(83.655, abs=1e-3)       # the hand value
    plain = Array("ring-24", tsys=80 * u.K)
    np.testing.assert_allclose(plain.tsys_at(el), 80.0)


def test_planned_noise_matches_observed_at_low_elevation():
    """A source at dec -60 seen from latitude +8 (elevation 20-22 deg over +-2 h) through a
    zenith opacity of 0.15: the planned point-source rms (the track's effective T_sys in the
    radiometer equation, TMS eq. 6.62) equals the naturally weighted image rms within 5 %,
    and is higher than for a source near the zenith (dec +10)."""
    from synth.planning import plan
    arr = Array("ring-24", latitude=8 * u.deg, zenith_opacity=0.15,
                         receiver_temperature=40 * u.K)
    kw = dict(hour_angles=(-2, 2) * u.hourangle, sample_interval=600 * u.s)
    cube = make_cube(np.zeros((40, 64, 64)), dec=-60.0)
    obs = observe_interferometric(cube, arr, seed=9, weighting="natural",
                                  pointing_pattern="single", integration_time=2 * u.hr, deconvolver="none", correct_primary_beam=False, **kw)
    p = plan(arr, 230.538 * u.GHz, channel_width=0.5 * u.km / u.s, declination=-60 * u.deg,
             integration_time=2 * u.hr, **kw)
    assert obs.unmasked_data[:].value.std() == pytest.approx(p.rms.to_value(u.Jy / u.beam),
                                                            rel=0.05)
    high = plan(arr, 230.538 * u.GHz, channel_width=0.5 * u.km / u.s,
                declination=10 * u.deg, integration_time=2 * u.hr, **kw)
    assert high.rms < 0.8 * p.rms


@pytest.mark.parametrize("kw, match", [
    (dict(zenith_opacity=0.0, receiver_temperature=50 * u.K), "zenith_opacity=0.0 must be"),
    (dict(zenith_opacity=-0.1, receiver_temperature=50 * u.K), "zenith_opacity"),
    (dict(zenith_opacity=0.1), "needs receiver_temperature"),
])
def test_bad_atmosphere(kw, match):
    with pytest.raises(InstrumentError, match=match):
        Array("ring-24", **kw, tsys=90 * u.K)
