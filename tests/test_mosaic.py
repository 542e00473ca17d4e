"""Mapping an area: output grids (Fourier zoom), dish maps with a guard band, array mosaics,
feathering that keeps the flux, and the planner counting the pointings observe makes."""

import numpy as np
import pytest
import astropy.units as u
from radio_beam import Beam

from synth.errors import FieldLargerThanPrimaryBeamWarning, InstrumentError
from synth.instrument.grid import fourier_zoom, onto_grid, sky_on_grid, zoom_shift
from synth.instrument.interferometer import Array, observe_interferometric
from synth.instrument.mosaic import nyquist_spacing_arcsec, pointing_offsets
from synth.instrument.observe import observe
from synth.instrument.primary_beam import gaussian_fwhm_rad
from synth.instrument.single_dish import Dish
from synth.instrument.uv import uv_tracks
from synth.instrument.visibilities import interferometer_rms
from synth.planning import plan

from test_imaging import gaussian_sky, make_cube

NU = 230.538e9
C = 299792458.0
ARCSEC = 206264.80624709636
#: 12 m primary beam at 230.5 GHz, taper 1.13 (Gaussian FWHM = 1.13 lambda / D)
PB_ARCSEC = 1.13 * C / NU / 10.0 * ARCSEC
#: hexagonal Nyquist spacing lambda / (sqrt(3) D) (Petersen & Middleton 1962)
HEX_ARCSEC = C / NU / 10.0 / np.sqrt(3.0) * ARCSEC
#: the pixel of the mosaic tests (compact-16 samples it at > 4 pixels per beam)
PIX = 0.5


def _total_flux_k(cube):
    """Sum of K x pixel solid angle (the flux up to the constant 2 k nu^2 / c^2)."""
    pix = abs(cube.wcs.wcs.cdelt[0]) * 3600
    return np.nansum(np.asarray(cube.unmasked_data[:].value), axis=(1, 2)) * pix**2


# --- the output grid -----------------------------------------------------------------------

@pytest.mark.parametrize("n, m", [(64, 100), (64, 97), (63, 128), (100, 64), (101, 40)])
def test_fourier_zoom_of_a_gaussian_matches_the_analytic_samples(n, m):
    """Band-limited interpolation of a well-sampled Gaussian equals the Gaussian sampled on
    the new pixels (analytic) to 1e-7 of the peak, the reference pixel stays on a pixel
    centre, and the flux (sum x pixel area) is kept to 1e-12 (the k = 0 term is kept)."""
    ref = n // 2
    shift, j = zoom_shift(n, m, ref)
    sigma = 4.0 if m > n else 8.0                       # input pixels, well sampled
    x = np.arange(n) - ref
    g = np.exp(-0.5 * (x[:, None] ** 2 + (x[None, :] - 3) ** 2) / sigma**2)
    z = fourier_zoom(g[None], m, m, shift=(shift, shift))[0]
    p = n / m
    xn = (np.arange(m) - j) * p
    expect = np.exp(-0.5 * (xn[:, None] ** 2 + (xn[None, :] - 3) ** 2) / sigma**2)
    np.testing.assert_allclose(z, expect, atol=1e-7)
    assert z.sum() * p * p == pytest.approx(g.sum(), rel=1e-12)


def test_repeat_tiles_a_periodic_box_and_empty_pads_with_blank_sky():
    """beyond_box="repeat" continues the model periodically (the grid pixel j holds model
    pixel j mod n, as np.tile lays it out); "empty" puts zeros outside the box."""
    rng = np.random.default_rng(3)
    data = rng.random((2, 16, 16))
    cube = make_cube(data, pix_arcsec=1.0, unit=u.K, crpix=[9, 9, 1])
    rep, _ = sky_on_grid(cube, 1.0, (0.0, 0.0), (48.0, 48.0), beyond_box="repeat")
    emp, _ = sky_on_grid(cube, 1.0, (0.0, 0.0), (48.0, 48.0), beyond_box="empty")
    big = np.tile(data, (1, 3, 3))
    np.testing.assert_allclose(rep.unmasked_data[:].value, big, atol=1e-12)
    e = emp.unmasked_data[:].value
    np.testing.assert_allclose(e[:, 16:32, 16:32], data, atol=1e-12)
    assert e.sum() == pytest.approx(data.sum(), rel=1e-12)


def test_onto_grid_reproduces_what_observe_put_on_its_grid():
    """assess() puts an ideal cube on an observed grid the way observe did (same pixels):
    the dish map's model sky and onto_grid agree to 1e-12."""
    cube = make_cube(gaussian_sky(48, 6.0, 1.0, nch=2) * 100, pix_arcsec=2.0, unit=u.K)
    dish = Dish(diameter=30 * u.m)
    omap = observe(cube, dish, noise=False, with_maps=True)
    again = onto_grid(cube, omap.cube)
    np.testing.assert_allclose(again.unmasked_data[:].value, omap.sky.unmasked_data[:].value,
                               atol=1e-12)


# --- single dish: on-the-fly map with a guard band --------------------------------------------

def test_noiseless_dish_keeps_the_flux_of_a_box_filling_cloud():
    """A cloud that fills its box to the edges, observed noiseless by a dish whose beam is 7
    pixels: the map with its guard band keeps the total flux within 0.5 % (a unit-integral
    beam conserves flux, Bracewell 2000, ch. 6), where the old map-sized grid lost the flux
    spilled past the edge (> 5 % here)."""
    rng = np.random.default_rng(1)
    data = 1.0 + rng.random((3, 64, 64))                 # K, nowhere zero, up to the edges
    cube = make_cube(data, pix_arcsec=1.0, unit=u.K, nu0=230.538e9)
    dish = Dish(diameter=40 * u.m)                 # 7.3" beam at 230 GHz
    obs = observe(cube, dish, noise=False)
    assert _total_flux_k(obs) == pytest.approx(_total_flux_k(cube), rel=5e-3)
    clipped = observe(cube, dish, noise=False, guard_band=0 * u.arcsec)
    assert np.all(_total_flux_k(clipped) < 0.95 * _total_flux_k(cube))


def test_dish_map_positions_match_the_planner():
    """The dish's Nyquist positions (lambda / 2D, Mangum, Emerson & Greisen 2007) over the
    area plus guard band are what plan() counts."""
    cube = make_cube(gaussian_sky(64, 6.0, 1.0, nch=3) * 50, pix_arcsec=2.0, unit=u.K)
    dish = Dish(diameter=30 * u.m, tsys=100 * u.K)
    omap = observe(cube, dish, noise=False, with_maps=True)
    p = plan(dish, cube=cube, channel_width=0.5 * u.km / u.s)
    assert p.n_pointings == omap.layout.n_pointings == omap.cube.meta["NPOINT"]
    step = C / NU / 30.0 / 2 * ARCSEC
    side = 128 + 2 * 1.5 * omap.cube.beam.major.to_value(u.arcsec)
    per_row = 2 * int(np.floor(side / 2 / step)) + 1
    assert omap.layout.n_pointings == per_row**2


# --- array mosaics ---------------------------------------------------------------------------

def _seven_point_area():
    """(width, height) in arcsec of the area that a hexagonal grid covers with 7 pointings."""
    return 2.1 * HEX_ARCSEC


def test_seven_pointing_layout_and_spacing():
    """A 2.1 x 2.1 spacing area holds a 7-pointing hexagon with neighbours one spacing apart
    (hexagonal sampling, Petersen & Middleton 1962)."""
    p = pointing_offsets(2.1, 2.1, 1.0, "hexagonal")
    assert p.shape == (7, 2)
    d = np.hypot(*(p[:, None, :] - p[None, :, :]).transpose(2, 0, 1))
    np.testing.assert_allclose(np.sort(d[3])[1:7], 1.0, rtol=1e-12)   # the centre pointing
    assert nyquist_spacing_arcsec(NU, 12.0, "rectangular") == pytest.approx(
        C / NU / 24.0 * ARCSEC, rel=1e-12)


def _point_cube(east, north, n=160, flux=1.0):
    d = np.zeros((1, n, n))
    x, y = n // 2 - int(round(east / PIX)), n // 2 + int(round(north / PIX))
    d[0, y, x] = flux
    return make_cube(d, pix_arcsec=PIX), (east, north)


def test_point_at_an_outer_pointing_is_recovered_by_the_corrected_mosaic():
    """A 1 Jy point source at the centre of an outer pointing of a 7-pointing mosaic has 1 Jy
    in the primary-beam-corrected linear mosaic (Cornwell 1988) within 2 %; a single pointing
    at the map centre sees it attenuated by the Gaussian primary beam
    exp(-4 ln 2 r^2 / FWHM^2), FWHM = 1.13 lambda / D, within 1 %."""
    arr = Array("compact-16", tsys=90 * u.K)
    side = _seven_point_area()
    pts = pointing_offsets(side, side, HEX_ARCSEC, "hexagonal")
    east, north = pts[np.argmax(np.hypot(*pts.T))]
    cube, _ = _point_cube(east, north)
    kw = dict(noise=False, sample_interval=900 * u.s, weighting="natural",
              map_size=side * u.arcsec, pixel=PIX * u.arcsec, with_maps=True)
    omap = observe_interferometric(cube, arr, deconvolver="none", correct_primary_beam=False, **kw)
    assert omap.layout.n_pointings == 7
    corr = omap.corrected.unmasked_data[0].value
    x, y = omap.corrected.wcs.celestial.world_to_pixel(
        cube.wcs.celestial.pixel_to_world(80 - round(east / PIX), 80 + round(north / PIX)))
    assert corr[int(round(float(y))), int(round(float(x)))] == pytest.approx(1.0, rel=0.02)
    with pytest.warns(FieldLargerThanPrimaryBeamWarning, match="response is below one half"):
        single = observe_interferometric(cube, arr, noise=False, sample_interval=900 * u.s,
                                         weighting="natural", pointing_pattern="single",
                                         pixel=PIX * u.arcsec, deconvolver="none", correct_primary_beam=False)
    r = np.hypot(round(east / PIX), round(north / PIX)) * PIX
    expect = np.exp(-4 * np.log(2) * r**2 / PB_ARCSEC**2)
    xs, ys = 80 - round(east / PIX), 80 + round(north / PIX)
    assert single.unmasked_data[0, ys, xs].value == pytest.approx(expect, rel=0.01)


def test_mosaic_noise_matches_the_radiometer_equation_over_overlapping_pointings():
    """Noise-only 7-pointing mosaic, natural weighting: the sensitivity map is
    s_p / sqrt(sum_p A_p^2) with s_p the point-source rms of one pointing for its share of the
    track (TMS 3rd ed. eq. 6.62, via interferometer_rms, with t / 7 per pointing) and A_p the
    Gaussian primary beams; the measured rms over 60 channels matches it within 5 % at the
    centre and in an outer region."""
    arr = Array("compact-16", tsys=90 * u.K)
    side = _seven_point_area()
    nch = 60
    cube = make_cube(np.zeros((nch, 160, 160)), pix_arcsec=PIX)
    omap = observe_interferometric(cube, arr, seed=11, sample_interval=900 * u.s,
                                   weighting="natural", map_size=side * u.arcsec,
                                   pixel=PIX * u.arcsec, with_maps=True, deconvolver="none", correct_primary_beam=False)
    ha = np.unique(uv_tracks(arr, 10 * u.deg, (-2, 2) * u.hourangle, 900 * u.s).hour_angle_rad)
    dnu = 0.5e3 / C * NU
    s_p = interferometer_rms(arr, dnu * u.Hz, ha.size * 900 * u.s / 7).to_value(u.Jy)
    east, north = [g for g in np.meshgrid(
        -(np.arange(omap.cube.shape[2]) - (omap.cube.wcs.wcs.crpix[0] - 1)) * PIX,
        (np.arange(omap.cube.shape[1]) - (omap.cube.wcs.wcs.crpix[1] - 1)) * PIX)]
    a2 = sum(np.exp(-4 * np.log(2) * ((east - e) ** 2 + (north - n) ** 2) / PB_ARCSEC**2) ** 2
             for e, n in omap.layout.pointings)
    expect = s_p / np.sqrt(a2)
    sens = omap.sensitivity.to_value(u.Jy / u.beam)
    inside = np.isfinite(sens) & (omap.response > 0.5)
    np.testing.assert_allclose(sens[inside], expect[inside], rtol=0.03)
    data = omap.corrected.unmasked_data[:].value
    cy, cx = (int(round(c - 1)) for c in omap.cube.wcs.wcs.crpix[1::-1])
    for y, x in ((cy, cx), (cy + 20, cx - 24)):
        box = data[:, y - 4:y + 5, x - 4:x + 5]
        # a 9 x 9 box (about 3 x 3 beams, ~500 independent samples: std known to ~3 %)
        # against the rms of the sensitivity map over the same box
        want = np.sqrt(np.mean(sens[y - 4:y + 5, x - 4:x + 5] ** 2))
        assert box.std() == pytest.approx(want, rel=0.05)


def test_planner_counts_the_pointings_the_mosaic_makes():
    """plan() and observe() share one layout: 7 and 19 pointings."""
    arr = Array("compact-16", tsys=90 * u.K)
    cube = make_cube(gaussian_sky(200, 8.0, 100.0, nch=2), pix_arcsec=PIX, unit=u.K)
    for size, n in (((_seven_point_area(),) * 2, 7), ((6.0 * HEX_ARCSEC, 1.74 * HEX_ARCSEC), 19)):
        p = plan(arr, cube=cube, field_size=size * u.arcsec, sample_interval=900 * u.s,
                 channel_width=0.5 * u.km / u.s)
        o = observe_interferometric(cube, arr, noise=False, sample_interval=900 * u.s,
                                    map_size=size * u.arcsec, pixel=PIX * u.arcsec,
                                    with_maps=True, deconvolver="none", correct_primary_beam=False)
        assert p.n_pointings == o.layout.n_pointings == o.cube.meta["NPOINT"] == n
        np.testing.assert_allclose(p.layout.pointings, o.layout.pointings, atol=1e-9)


# --- feathering ------------------------------------------------------------------------------

def test_feathering_keeps_the_dish_flux_of_a_compact_source():
    """A compact source well inside the primary beam, a compact array jointly with a 50 m
    dish, noiseless: the feathered, primary-beam-corrected map keeps the dish's total flux
    (F(0) = F_SD(0), Stanimirović et al. 1999) within 4 %; the array alone misses most.
    The sum runs over the corrected map down to the 0.2 cutoff, where CLEAN's extrapolation
    of the short spacings it lacks adds flux that depends on the uv coverage: +3.1 % for a
    source at the zenith (this test), -0.6 % at 38 deg zenith distance, measured."""
    cube = make_cube(gaussian_sky(128, 8.0 / PIX, flux=1.0, nch=2) * 1e3, pix_arcsec=PIX,
                     unit=u.K)
    arr = Array("compact-16", tsys=90 * u.K)
    dish = Dish(diameter=50 * u.m)
    kw = dict(noise=False, sample_interval=900 * u.s, deconvolver="hogbom", pixel=PIX * u.arcsec,
              pointing_pattern="single")
    both = observe_interferometric(cube, [arr, dish], correct_primary_beam=True, unit="K", **kw)
    alone = observe_interferometric(cube, arr, correct_primary_beam=True, unit="K", **kw)
    dish_map = observe(cube, dish, noise=False)
    f_dish, f_both = _total_flux_k(dish_map), _total_flux_k(both)
    assert f_dish == pytest.approx(_total_flux_k(cube), rel=1e-3)
    np.testing.assert_allclose(f_both, f_dish, rtol=0.04)
    assert np.all(_total_flux_k(alone) < 0.8 * f_dish)


def test_feathering_a_perfect_interferometer_image_gives_back_the_gaussian():
    """A perfect interferometer image (the sky convolved with its 2" beam) feathered with the
    dish image (the sky convolved with the 15" dish beam) gives back the 2"-beam image of the
    Gaussian within 1 % of its peak: F = B_SD F + (1 - B_SD) B_int F differs from B_int F by
    B_SD (1 - B_int) F, small where B_SD is not (Stanimirović et al. 1999; Gaussian transform
    pairs, Bracewell 2000)."""
    from synth.instrument.combine import feather_plane
    from synth.sky import gaussian_transfer
    pix, n = 0.5, 256
    sky = gaussian_sky(n, 20.0 / pix, 1.0)[0]
    b_int, b_sd = Beam(2 * u.arcsec), Beam(15 * u.arcsec)
    t_int = gaussian_transfer(sky.shape, pix, b_int)
    t_sd = gaussian_transfer(sky.shape, pix, b_sd)
    f = np.fft.fft2(sky)
    truth = np.fft.ifft2(f * t_int).real
    interf = truth
    dish = np.fft.ifft2(f * t_sd).real
    out = feather_plane(interf, dish, b_sd, pix)
    assert np.abs(out - truth).max() < 0.01 * truth.max()
    assert out.sum() == pytest.approx(truth.sum(), rel=1e-9)


def test_feathering_a_mosaic_keeps_the_dish_flux():
    """Feathering works on a 7-pointing mosaic: an extended source inside the mapped area,
    cleaned deep (0.1 of the noise: a noiseless image stopped at 3 sigma keeps residuals
    whose flux the restored image under-counts, 5 % here), keeps the dish's flux within 2 % in
    the corrected, feathered map (F(0) = F_SD(0), Stanimirović et al. 1999)."""
    side = _seven_point_area()
    cube = make_cube(gaussian_sky(160, 10.0 / PIX, flux=1.0, nch=2) * 1e3, pix_arcsec=PIX,
                     unit=u.K)
    arr, dish = Array("compact-16", tsys=90 * u.K), Dish(diameter=50 * u.m)
    both = observe_interferometric(cube, [arr, dish], noise=False, sample_interval=900 * u.s,
                                   map_size=side * u.arcsec, pixel=PIX * u.arcsec,
                                   correct_primary_beam=True, unit="K", deconvolver="hogbom", clean_stop_sigma=0.1,
                                   clean_max_components=20000)
    assert both.meta["NPOINT"] == 7 and both.meta["FEATHER"]
    dish_map = observe(cube, dish, noise=False)
    np.testing.assert_allclose(_total_flux_k(both), _total_flux_k(dish_map), rtol=0.02)


# --- bad input -------------------------------------------------------------------------------

@pytest.mark.parametrize("kw, match", [
    (dict(map_size=0.5 * u.arcsec), r"^map_size: 0\.5 arcsec is smaller than one beam"),
    (dict(pointing_spacing=40 * u.arcsec, map_size=60 * u.arcsec),
     r"^pointing_spacing: 40 arcsec is larger than the primary beam \(30\.\d+ arcsec FWHM\)"),
    (dict(map_size=300 * u.arcsec, max_pointings=50),
     r"^max_pointings: the mosaic needs \d+ pointings, more than the limit of 50"),
    (dict(pointing_pattern="spiral"), "pointing_pattern"),
    (dict(pixel=5 * u.arcsec), "too coarse"),
])
def test_bad_map_options(kw, match):
    cube = make_cube(np.zeros((1, 64, 64)), pix_arcsec=PIX)
    with pytest.raises(InstrumentError, match=match):
        observe_interferometric(cube, Array("compact-16", tsys=90 * u.K), noise=False, deconvolver="none", correct_primary_beam=False, **kw)


def test_pb_fwhm_constant_is_the_code_s():
    """The tests' 30.3" primary beam is the code's Gaussian FWHM (1.13 lambda / D)."""
    assert gaussian_fwhm_rad(NU, 10.0) * ARCSEC == pytest.approx(PB_ARCSEC, rel=1e-12)


# --- the same checks from a config, before any synthesis -------------------------------------

def _config(**setup):
    base = {"name": "wide", "kind": "array", "antennas": "compact-10", "diameter_m": 10,
            "latitude_deg": 8, "tsys_k": 90, "integration_time_h": 1.0}
    return {"cloud": {"source": "demo", "cells": 16, "box_pc": 1.0},
            "sky": {"distance_pc": 1000.0, "dec_deg": -20.0},
            "channels": {"width_kms": 0.5},
            "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}],
            "setup": [{**base, **setup}]}


@pytest.mark.parametrize("setup, match", [
    (dict(map_size_arcsec=1.0),
     r"^setup 'wide': map_size_arcsec: 1 arcsec is smaller than one beam \(\d+\.?\d* arcsec\)"),
    (dict(pointing_spacing_arcsec=90.0),
     r"^setup 'wide': pointing_spacing_arcsec: 90 arcsec is larger than the primary beam"),
    (dict(map_size_arcsec=[2000.0, 2000.0], max_pointings=40),
     r"^setup 'wide': max_pointings: the mosaic needs \d+ pointings, more than the limit of 40"),
    (dict(pixel_arcsec=30.0), r"^setup 'wide': pixel_arcsec: 30 arcsec is too coarse"),
    (dict(kind="dish", map_size_arcsec=3.0),
     r"^setup 'wide': map_size_arcsec: 3 arcsec is smaller than one beam"),
])
def test_config_layout_errors_come_before_any_synthesis(setup, match, tmp_path, monkeypatch):
    """Each bad map is refused in one line naming the setup and its key, before a single
    tracer is synthesised (the synthesis entry point is replaced by one that fails)."""
    import synth.transfer.synthesize as synthesize
    from synth.errors import ConfigError
    from synth.pipeline import run_config

    def never(*args, **kwargs):
        raise AssertionError("synthesis started before the setups were checked")
    monkeypatch.setattr(synthesize, "synthesize_products", never)
    conf = _config(**setup)
    if setup.get("kind") == "dish":
        conf["setup"][0].update(diameter_m=40)
    with pytest.raises(ConfigError, match=match) as err:
        run_config(conf, tmp_path / "out", progress=False, log=None)
    assert "\n" not in str(err.value)
    assert not (tmp_path / "out").exists() and list(tmp_path.iterdir()) == []


def test_removed_fast_key_is_refused_with_the_reason():
    """The dropped approximate path's config key is refused in one line that says why."""
    from synth.config import validate_config
    from synth.errors import ConfigError
    conf = _config(fast=True)
    with pytest.raises(ConfigError, match=r"\[\[setup\]\] #1\.fast: removed: .*24-28 % peak"):
        validate_config(conf)


def test_pointing_hour_angles_follow_the_sky():
    """H = LST - RA: a pointing 1 degree of arc east (RA larger by 1 deg / cos dec) is at an
    hour angle smaller by that much; pointing p of n starts p/n of a sample later (the
    pointings are visited in turn; sidereal rate 7.2921150e-5 rad/s, IERS 2010)."""
    from synth.instrument.mapping import pointing_hour_angles
    opts = {"hour_angles": (-2, 2) * u.hourangle, "sample_interval": 600 * u.s}
    dec = np.deg2rad(-40.0)
    base = pointing_hour_angles(opts, 0, 4, 0.0, dec).to_value(u.rad)
    east = pointing_hour_angles(opts, 0, 4, 3600.0, dec).to_value(u.rad)
    later = pointing_hour_angles(opts, 3, 4, 0.0, dec).to_value(u.rad)
    np.testing.assert_allclose(east - base, -np.deg2rad(1.0) / np.cos(dec), rtol=1e-12)
    np.testing.assert_allclose(later - base, 0.75 * 600 * 7.2921150e-5, rtol=1e-12)


def test_plan_cli_lists_and_draws_the_pointings(tmp_path, capsys):
    """`synth plan --figures DIR` prints each setup's pointings (the planner's count, which
    observe makes: tested above) and draws them over the model's moment-0 map."""
    from synth.cli import main
    cfg = tmp_path / "wide.toml"
    cfg.write_text('''
[cloud]
source = "demo"
cells = 16
box_pc = 2.0
[sky]
distance_pc = 1000.0
dec_deg = -20.0
[channels]
width_kms = 0.5
[[tracer]]
species = "CO"
transition = "1-0"
abundance = 1e-4
[[setup]]
name = "wide"
kind = "array"
antennas = "compact-10"
diameter_m = 10
latitude_deg = 8
tsys_k = 90
integration_time_h = 1.0
''')
    assert main(["plan", str(cfg), "--figures", str(tmp_path / "figs")]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.strip().startswith("wide: "))
    n = int(line.split("pointings")[0].split(",")[-1])
    row = next(ln for ln in out.splitlines() if ln.startswith("CO_1-0") and " wide " in ln)
    assert f"  {n}  " in row and n > 7                 # 2 pc at 1 kpc = 412": a mosaic
    assert (tmp_path / "figs" / "layout_wide.png").stat().st_size > 10_000


def test_dish_map_of_part_of_a_periodic_box_has_no_edge_loss():
    """A uniform 10 K periodic box ("repeat"), a dish map of a part of it: every pixel of the
    map, guard band included, reads 10 K (a unit-integral beam on a uniform sky; the sky beyond
    the map spills into its edges as on the sky)."""
    cube = make_cube(np.full((2, 32, 32), 10.0), pix_arcsec=2.0, unit=u.K)
    obs = observe(cube, Dish(diameter=30 * u.m), noise=False, beyond_box="repeat",
                  map_size=[40, 30] * u.arcsec, map_offset=[12, -8] * u.arcsec)
    # the beam beyond two FWHM (4.7 sigma) is left out: < 1e-6 of the value
    np.testing.assert_allclose(obs.unmasked_data[:].value, 10.0, rtol=1e-6)
