"""Survival metrics over seeded noise realisations."""

import warnings

import numpy as np
import pytest
import astropy.units as u

from synth.analysis.realisations import assess_realisations
from synth.errors import FieldLargerThanPrimaryBeamWarning, InstrumentError
from synth.instrument.single_dish import Dish

from test_imaging import gaussian_sky, make_cube


def _faint():
    """A faint compact line (peak 0.05 K) on a 48 x 48 map of 2" pixels, 8 channels."""
    d = gaussian_sky(48, 6.0, 1.0, nch=8)
    d *= 0.05 / d.max()
    return make_cube(d, pix_arcsec=2.0, unit=u.K, nu0=230.538e9)


def test_flux_fraction_spread_shrinks_as_one_over_sqrt_time():
    """N = 20 realisations of a faint source seen by a dish for t and 4 t: the spread of the
    flux fraction halves (the radiometer equation, sigma proportional to t^-1/2) within
    20 %, and both means stay near 1 (the noise has zero mean)."""
    cube, dish = _faint(), Dish(diameter=40 * u.m, tsys=150 * u.K)
    kw = dict(seed=100, guard_band=0 * u.arcsec)
    short = assess_realisations(cube, dish, 20, integration_time=60 * u.s, **kw)
    long_ = assess_realisations(cube, dish, 20, integration_time=240 * u.s, **kw)
    ratio = short.std["flux_fraction"] / long_.std["flux_fraction"]
    assert ratio == pytest.approx(2.0, rel=0.2)
    for r in (short, long_):
        assert r.n == 20
        assert abs(r.mean["flux_fraction"] - 1.0) < 3 * r.std["flux_fraction"] / np.sqrt(20)
        assert r.recovered_power_std.shape == r.scale_arcsec.shape
    row = short.as_row()
    assert row["flux_fraction_std"] == short.std["flux_fraction"]


@pytest.mark.parametrize("n, kw, match", [
    (1, {}, "give an integer >= 2"),
    (5, {"noise": False}, "need the noise on"),
])
def test_bad_realisations(n, kw, match):
    with pytest.raises(InstrumentError, match=match):
        assess_realisations(_faint(), Dish(diameter=40 * u.m, tsys=150 * u.K), n,
                            integration_time=60 * u.s, **kw)


def test_run_adds_mean_and_spread_columns(tmp_path):
    """[analysis] noise_realisations = 3: survival.csv gets flux_fraction_mean and _std for
    the noisy setup, and the spread is positive."""
    import csv
    from synth.pipeline import run_config
    conf = {"cloud": {"source": "demo", "cells": 16, "box_pc": 1.0},
            "sky": {"distance_pc": 2000.0, "dec_deg": -20.0},
            "channels": {"width_kms": 1.0, "velocity_min_kms": -4.0, "velocity_max_kms": 4.0},
            "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}],
            "output": {"figures": False},
            "analysis": {"noise_realisations": 3},
            "setup": [{"name": "d", "kind": "dish", "diameter_m": 30, "tsys_k": 150,
                       "rms_k": 0.5}]}
    run_config(conf, tmp_path / "run", progress=False, log=None)
    with open(tmp_path / "run" / "survival.csv") as fh:
        row = next(csv.DictReader(fh))
    assert int(row["noise_realisations"]) == 3
    assert float(row["flux_fraction_std"]) > 0
    assert float(row["flux_fraction_mean"]) == pytest.approx(1.0, abs=0.2)


def test_recovery_figure_draws_the_spread():
    """The recovery figure of a setup with realisations carries error bars whose half-lengths
    are the recovered power's standard deviation over the realisations."""
    from synth.analysis.plots import recovery_figure
    from synth.analysis.survival import assess
    from synth.instrument.observe import observe
    cube, dish = _faint(), Dish(diameter=40 * u.m, tsys=150 * u.K)
    r = assess_realisations(cube, dish, 4, integration_time=60 * u.s, guard_band=0 * u.arcsec)
    omap = observe(cube, dish, integration_time=60 * u.s, seed=9, guard_band=0 * u.arcsec,
                   with_maps=True)
    m = assess(omap.sky, omap.corrected)
    fig = recovery_figure({"d": m}, spreads={"d": r})
    bars = [c for c in fig.axes[0].collections if c.__class__.__name__ == "LineCollection"]
    assert bars
    half = [abs(seg[1][1] - seg[0][1]) / 2 for seg in bars[0].get_segments()]
    shown = set(np.round(half, 9))
    assert shown <= set(np.round(r.recovered_power_std, 9)) and len(shown) > 1


# --- realisations reuse what the noise does not change ---------------------------------------

def _equal_maps(a, b, tol):
    """The corrected, uncorrected products and the recorded cards of two ObservedMaps agree:
    every pixel within ``tol`` of the larger product's peak."""
    for key in ("corrected", "uncorrected"):
        x = np.asarray(getattr(a, key).unmasked_data[:].value)
        y = np.asarray(getattr(b, key).unmasked_data[:].value)
        assert np.array_equal(np.isnan(x), np.isnan(y))
        scale = np.nanmax(np.abs(y))
        assert scale > 0
        np.testing.assert_allclose(np.nan_to_num(x), np.nan_to_num(y), rtol=0, atol=tol * scale)
    for card in ("NSEED", "NOISERMS", "CLEANIT"):
        assert a.cube.meta.get(card) == b.cube.meta.get(card)


@pytest.mark.parametrize("kw", [
    dict(deconvolver="multiscale", clean_mask_sigma=2.0, pointing_pattern="single"),
    dict(deconvolver="hogbom", map_size=36 * u.arcsec, weighting="robust"),   # a 7-pointing mosaic
    dict(deconvolver="none", map_size=36 * u.arcsec),         # no PSF, no CLEAN box
])
def test_a_realisation_equals_the_full_observation_with_its_seed(kw):
    """observe_seeds([s1, s2, s3]) reuses the noiseless dirty images, PSFs and weights and
    adds each seed's noise-only dirty image; gridding is linear (the dirty image of V + n is
    that of V plus that of n), so each realisation equals observe(..., seed=s) -- noise
    drawn identically, then CLEANed -- within 1e-6 of the peak (round-off only)."""
    from synth.instrument.interferometer import Array
    from synth.instrument.observe import observe, observe_seeds
    d = gaussian_sky(64, 10.0, 1.0, nch=3)
    cube = make_cube(d * 2.0 / d.max(), pix_arcsec=0.5, unit=u.K, nu0=230.538e9)
    arr = Array("compact-16", tsys=90 * u.K)
    common = dict(integration_time=600 * u.s, sample_interval=900 * u.s, pixel=0.5 * u.arcsec,
                  **kw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FieldLargerThanPrimaryBeamWarning)
        many = observe_seeds(cube, arr, [3, 4, 5], **common)
        ones = [observe(cube, arr, seed=s, with_maps=True, **common) for s in (3, 4, 5)]
    assert len(many) == 3
    for a, b in zip(many, ones):
        _equal_maps(a, b, 1e-6)
    assert many[0].layout.n_pointings == (7 if "map_size" in kw else 1)
    a0 = np.asarray(many[0].corrected.unmasked_data[:].value)
    a1 = np.asarray(many[1].corrected.unmasked_data[:].value)
    assert np.nanmax(np.abs(a0 - a1)) > 1e-3 * np.nanmax(np.abs(a0))    # different noise


def test_a_dish_realisation_equals_the_full_observation_with_its_seed():
    """Dish: the beam convolution is shared, the noise drawn per seed as observe draws it:
    the same maps to 1e-12 of the peak."""
    from synth.instrument.observe import observe, observe_seeds
    cube, dish = _faint(), Dish(diameter=40 * u.m, tsys=150 * u.K)
    kw = dict(integration_time=60 * u.s, guard_band=0 * u.arcsec, unit="Jy/beam")
    many = observe_seeds(cube, dish, [7, 8], **kw)
    for a, s in zip(many, (7, 8)):
        _equal_maps(a, observe(cube, dish, seed=s, with_maps=True, **kw), 1e-12)


def test_the_threads_do_not_change_the_result():
    """Channels and pointings are imaged and cleaned on CLEAN_THREADS threads with the noise
    drawn in a fixed order: a noisy 7-pointing mosaic with CLEAN is the same, bit for bit,
    on one thread and on two (a determinism check: no reference value)."""
    import synth.instrument.array_observe as ao
    from synth.instrument.interferometer import Array
    from synth.instrument.observe import observe
    d = gaussian_sky(64, 10.0, 1.0, nch=3)
    cube = make_cube(d * 2.0 / d.max(), pix_arcsec=0.5, unit=u.K, nu0=230.538e9)
    kw = dict(integration_time=600 * u.s, sample_interval=900 * u.s, pixel=0.5 * u.arcsec,
              deconvolver="hogbom", map_size=36 * u.arcsec, seed=4)
    out = {}
    saved = ao.CLEAN_THREADS
    try:
        for t in (1, 2):
            ao.CLEAN_THREADS = t
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", FieldLargerThanPrimaryBeamWarning)
                out[t] = observe(cube, Array("compact-16", tsys=90 * u.K), **kw)
    finally:
        ao.CLEAN_THREADS = saved
    np.testing.assert_array_equal(out[1].unmasked_data[:].value, out[2].unmasked_data[:].value)
    assert out[1].meta["CLEANIT"] == out[2].meta["CLEANIT"] > 0
