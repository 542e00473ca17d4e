"""Survival metrics over seeded noise realisations."""

import numpy as np
import pytest
import astropy.units as u

from synth.analysis.realisations import assess_realisations
from synth.errors import InstrumentError
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
