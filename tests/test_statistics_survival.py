"""Survival of statistics (synth.analysis.stat_survival): ideal vs observed over noise
realisations."""

import numpy as np
import pytest
import astropy.units as u

from synth.analysis.matching import cube_from_array
from synth.analysis.power import gaussian_random_field
from synth.analysis.realisations import assess_realisations
from synth.analysis.stat_survival import (SHIFT_COLUMNS, observation_statistics,
                                          statistics_columns, statistics_figure,
                                          statistics_survival)
from synth.analysis.statistics import STATISTICS, Stat, measure_statistics
from synth.instrument.single_dish import Dish

NU0 = 230.538 * u.GHz


def _sky(n=64, pix=2.0, seed=3):
    """A log-normal field (sigma_ln 0.5, P(k) ~ k^-3) with Gaussian lines whose centres follow
    another field: an invented cloud, 1 K km/s scale."""
    f = np.exp(0.5 * gaussian_random_field((n, n), -3.0, seed=seed))
    v0 = 0.3 * gaussian_random_field((n, n), -3.0, seed=seed + 1)
    v = (np.arange(12) - 5.5) * 0.25
    data = 2.0 * f[None] * np.exp(-0.5 * ((v[:, None, None] - v0[None]) / 0.5) ** 2)
    return cube_from_array(data, pixscale=pix * u.arcsec, channel_width=250 * u.m / u.s,
                           restfreq=NU0, center=(120.0 * u.deg, 10.0 * u.deg))


def test_noise_spread_shrinks_as_one_over_sqrt_time():
    """N = 20 seeded realisations of a dish observation for t and 4 t (the same seeds, so the
    noise patterns differ only by the radiometer-equation factor sigma ~ t^-1/2): the spread
    of the moment-0 PDF width and of the power slope over the realisations halves, within 20 %
    (issue 15; the radiometer equation, e.g. Wilson, Rohlfs & Hüttemeister 2013, eq. 4.41)."""
    cube, dish = _sky(), Dish(diameter=40 * u.m, tsys=150 * u.K)
    kw = dict(seed=100, guard_band=0 * u.arcsec)

    def measure(omap):
        return measure_statistics(omap.corrected, noise=0.05 * u.K,
                                  statistics=["pdf_sigma_ln", "power_slope"])
    short = assess_realisations(cube, dish, 20, integration_time=30 * u.s, measure=measure, **kw)
    long_ = assess_realisations(cube, dish, 20, integration_time=120 * u.s, measure=measure,
                                **kw)
    for name in ("pdf_sigma_ln", "power_slope"):
        s = np.std([m[name].value for m in short.measured], ddof=1)
        lg = np.std([m[name].value for m in long_.measured], ddof=1)
        assert s > 0 and lg > 0
        assert s / lg == pytest.approx(2.0, rel=0.2), name
    ideal = measure_statistics(_one(cube, dish).sky, noise=0.05 * u.K,
                               statistics=["pdf_sigma_ln", "power_slope"])
    rows = statistics_survival(ideal, list(short.measured), tracer="t", setup="dish")
    assert [r["realisations"] for r in rows] == [20, 20]
    spread = np.std([m["power_slope"].value for m in short.measured], ddof=1)
    assert rows[0]["observed_spread"] == pytest.approx(spread, rel=1e-12)


def _one(cube, dish):
    from synth.instrument.observe import observe
    return observe(cube, dish, integration_time=30 * u.s, seed=1, guard_band=0 * u.arcsec,
                   with_maps=True)


def test_shift_and_uncertainty_by_hand():
    """The combination rules of the module docstring, computed by hand: observed uncertainty
    sqrt(std^2 + mean fit error^2), shift uncertainty in quadrature with the ideal's, shift in
    sigma = shift / that."""
    ideal = {"power_slope": Stat(-3.0, 0.03, "")}
    obs = [{"power_slope": Stat(v, e, "")} for v, e in ((-2.6, 0.04), (-2.8, 0.06),
                                                         (-2.7, 0.05))]
    (row,) = statistics_survival(ideal, obs, tracer="CO", setup="wide array")
    vals = np.array([-2.6, -2.8, -2.7])
    e_o = np.hypot(vals.std(ddof=1), 0.05)
    assert row["observed"] == pytest.approx(vals.mean(), rel=1e-12)
    assert row["observed_err"] == pytest.approx(e_o, rel=1e-12)
    assert row["shift"] == pytest.approx(vals.mean() + 3.0, rel=1e-12)
    assert row["shift_sigma"] == pytest.approx((vals.mean() + 3.0) / np.hypot(e_o, 0.03),
                                               rel=1e-12)
    assert row["line"].startswith("CO: power_slope: -3.000 ± 0.030 ideal, -2.70 ± 0.11 observed "
                                  "with wide array (N = 3): shifted by +2.6σ")
    cols = statistics_columns([row])[("CO", "wide array")]
    assert set(cols) == {f"power_slope_{c}" for c in SHIFT_COLUMNS}


def test_noiseless_identical_observation_does_not_shift():
    """The ideal cube as its own observation (noise 0): every statistic shifts by exactly 0
    (the two measurements use the same settings)."""
    cube = _sky(n=48)
    ide, obs = observation_statistics(cube, cube, noise=0 * u.K)
    rows = statistics_survival(ide, [obs])
    assert [r["statistic"] for r in rows] == list(STATISTICS)
    for r in rows:
        if np.isfinite(r["ideal"]):
            assert r["shift"] == 0.0 and r["shift_sigma"] == 0.0, r["statistic"]


def test_figure_has_a_panel_per_statistic(tmp_path):
    """One panel per statistic with the tracer x setup grid; the colour of a cell is |shift| /
    uncertainty (clipped at 5)."""
    rows = []
    for t in ("CO", "HCN"):
        for k, s in enumerate(("dish", "array")):
            ide = {n: Stat(1.0, 0.1, "") for n in STATISTICS}
            obs = {n: Stat(1.0 + 0.1 * k * (t == "HCN") * 3, 0.0, "") for n in STATISTICS}
            rows += statistics_survival(ide, [obs], tracer=t, setup=s)
    fig = statistics_figure(rows)
    shown = [ax for ax in fig.axes if ax.get_visible() and ax.images]
    assert len(shown) == len(STATISTICS)
    grid = shown[0].images[0].get_array()
    assert np.asarray(grid) == pytest.approx(np.array([[0.0, 0.0], [0.0, 3.0]]))
    fig.savefig(tmp_path / "s.png")
    assert (tmp_path / "s.png").stat().st_size > 1000


def test_run_writes_statistics(tmp_path):
    """[analysis] statistics = true with 3 noise realisations: statistics.csv has one row per
    statistic with N = 4 observed values (the run's own and 3 realisations), survival.csv the
    <statistic>_shift_sigma columns equal to statistics.csv's, the report its section and
    figure, summary.json the snapshot's true values (the demo's density PDF is log-normal:
    sigma_ln > 0)."""
    import csv
    import json
    from synth.pipeline import run_config
    conf = {"cloud": {"source": "demo", "cells": 32, "box_pc": 1.0},
            "sky": {"distance_pc": 1000.0, "dec_deg": -20.0},
            "channels": {"width_kms": 0.5, "velocity_min_kms": -4.0, "velocity_max_kms": 4.0},
            "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}],
            "analysis": {"noise_realisations": 3, "statistics": True},
            "setup": [{"name": "d", "kind": "dish", "diameter_m": 100, "tsys_k": 100,
                       "rms_k": 0.3}]}
    run_config(conf, tmp_path / "run", progress=False, log=None)
    run = tmp_path / "run"
    with open(run / "statistics.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["statistic"] for r in rows] == list(STATISTICS)
    assert {int(r["realisations"]) for r in rows if r["observed"]} == {4}
    with open(run / "survival.csv") as fh:
        surv = next(csv.DictReader(fh))
    for r in rows:
        if r["shift_sigma"]:
            assert float(surv[f"{r['statistic']}_shift_sigma"]) == pytest.approx(
                float(r["shift_sigma"]), rel=1e-9)
    assert (run / "statistics.png").stat().st_size > 1000
    page = (run / "report.html").read_text()
    assert "Survival of statistics" in page and "density_sigma_ln" in page
    summary = json.loads((run / "summary.json").read_text())
    assert summary["analysis"]["statistics"]["truth"]["density_sigma_ln"] > 0


def _clump_cube(pix, n, fwhm, dv_kms, seed=11):
    """An invented cloud of 60 Gaussian clumps (sizes 3-10", own line centres and widths),
    observed analytically with a Gaussian beam of ``fwhm`` (clump sigma^2 + beam sigma^2) on
    an n x n grid of ``pix`` arcsec, the spectra box-averaged over channels of ``dv_kms``
    from a 0.05 km/s sampling. The same sky for every grid, beam and channel width."""
    from radio_beam import Beam
    rng = np.random.default_rng(seed)
    k = 60
    x0, y0 = rng.uniform(-50, 50, (2, k))
    sc = rng.uniform(3.0, 10.0, k)
    amp = rng.uniform(0.5, 3.0, k)
    vc = rng.normal(0, 0.8, k)
    sv = rng.uniform(0.3, 0.9, k)
    sb = fwhm / np.sqrt(8 * np.log(2))
    st2 = sc**2 + sb**2
    c = (np.arange(n) - (n - 1) / 2) * pix
    xx, yy = np.meshgrid(-c, c)                 # x grows to the west, as cube_from_array
    step = int(round(dv_kms / 0.05))
    nch = int(round(6.4 / dv_kms))                # the same 6.4 km/s band for every width
    fine = (np.arange(nch * step) - (nch * step - 1) / 2) * 0.05
    data = np.zeros((nch, n, n))
    for i in range(k):
        img = amp[i] * sc[i] ** 2 / st2[i] * np.exp(-((xx - x0[i]) ** 2 + (yy - y0[i]) ** 2)
                                                    / (2 * st2[i]))
        spec = np.exp(-0.5 * ((fine - vc[i]) / sv[i]) ** 2).reshape(nch, step).mean(axis=1)
        data += spec[:, None, None] * img[None]
    return cube_from_array(data, pixscale=pix * u.arcsec, channel_width=dv_kms * u.km / u.s,
                           restfreq=NU0, beam=Beam(fwhm * u.arcsec),
                           center=(120.0 * u.deg, 10.0 * u.deg))


def test_compare_equals_cubes_matched_by_hand():
    """`synth compare` (synth.analysis.compare) of a cube at 4" beam, 1" pixels, 0.1 km/s
    channels and one of the same sky at 6", 2", 0.2 km/s gives, for the first, the statistics
    of the cube made directly at 6", 2", 0.2 km/s (matched by hand, analytically) within 2 %
    (issue 15), and for the second its own statistics unchanged."""
    a = _clump_cube(1.0, 128, 4.0, 0.1)
    b = _clump_cube(2.0, 64, 6.0, 0.2, seed=11)
    hand = _clump_cube(2.0, 64, 6.0, 0.2)
    from synth.analysis.compare import compare
    # noiseless cubes with a stated rms of 5 mK: the thresholds (PDF, dendrogram, centroid
    # mask) are those of a cube with that noise
    res = compare(a, b, names=("a", "b"), noise=(0.005 * u.K, 0.005 * u.K))
    rng = res.stats["a"].slope_range
    ref = measure_statistics(hand, noise=0.005 * u.K, scale_range=rng)
    assert res.beam.major.to_value(u.arcsec) == pytest.approx(6.0, rel=1e-6)
    checked = 0
    for name, stat in ref.items():
        if not np.isfinite(stat.value):
            continue
        assert res.measured["a"][name].value == pytest.approx(stat.value, rel=0.02), name
        assert res.measured["b"][name].value == pytest.approx(stat.value, rel=1e-6), name
        checked += 1
    assert checked >= 12
    names = list(res.table()["statistic"])
    assert "size_linewidth_slope" in names and "deltavar_slope" in names
