"""Planning from the survival of statistics: the observing time for a statistic to be
measured to a given uncertainty (synth.analysis.stat_survival.time_for_uncertainty)."""

import numpy as np
import pytest
import astropy.units as u

from synth.analysis.realisations import assess_realisations
from synth.analysis.stat_survival import (planning_lines, statistics_survival,
                                          time_for_uncertainty)
from synth.analysis.statistics import measure_statistics
from synth.instrument.single_dish import Dish

from test_statistics_survival import _sky


def test_time_for_uncertainty_by_hand():
    """Spread 0.1 over the realisations at 1 h, fit uncertainty 0.03, target 0.05:
    t = 1 h x 0.1^2 / (0.05^2 - 0.03^2) = 6.25 h (the spread scales as 1/sqrt(t), the fit
    part does not); a target below the fit part cannot be reached; one realisation gives no
    spread to scale."""
    row = {"observed_spread": 0.1, "observed_fit_err": 0.03, "realisations": 20}
    assert time_for_uncertainty(row, 0.05, 3600.0) == pytest.approx(6.25 * 3600.0, rel=1e-12)
    assert time_for_uncertainty(row, 0.03, 3600.0) == np.inf
    assert np.isnan(time_for_uncertainty(dict(row, realisations=1), 0.05, 3600.0))
    assert np.isnan(time_for_uncertainty(row, 0.05, None))
    line = planning_lines([dict(row, tracer="CO", setup="d", statistic="power_slope",
                                target=0.05, time_s=3600.0,
                                time_for_target_s=6.25 * 3600.0)])[0]
    assert line.startswith("CO power_slope to ± 0.05 with d: 6.25 h")


def test_the_predicted_time_reaches_the_target():
    """N = 20 seeded dish realisations at t0 = 30 s give the moment-0 PDF width a spread s0
    and a fit part f0; asking for hypot(s0 / 2, f0) predicts about 4 t0, and 20 realisations
    observed for the predicted time (same seeds) reach the target within 20 % (the spread of
    20 samples is known to ~16 %; radiometer equation, Wilson, Rohlfs & Hüttemeister 2013,
    eq. 4.41)."""
    cube, dish = _sky(), Dish(diameter=40 * u.m, tsys=150 * u.K)
    kw = dict(seed=300, guard_band=0 * u.arcsec)
    names = ["pdf_sigma_ln"]

    def measure(omap):
        return measure_statistics(omap.corrected, noise=0.05 * u.K, statistics=names)

    def row_at(t_s):
        r = assess_realisations(cube, dish, 20, integration_time=t_s * u.s, measure=measure,
                                **kw)
        ideal = measure_statistics(cube, noise=0.05 * u.K, statistics=names)
        return statistics_survival(ideal, list(r.measured), tracer="t", setup="d")[0]

    r0 = row_at(30.0)
    s0, f0 = r0["observed_spread"], r0["observed_fit_err"]
    assert s0 > f0 / 10          # the noise part matters here
    target = float(np.hypot(s0 / 2, f0))
    t = time_for_uncertainty(r0, target, 30.0)
    assert t == pytest.approx(120.0, rel=1e-9)
    r1 = row_at(t)
    assert np.hypot(r1["observed_spread"], r1["observed_fit_err"]) == pytest.approx(target,
                                                                                   rel=0.2)


def test_run_plans_the_time_for_a_statistic(tmp_path):
    """[analysis] statistic_targets in a run: statistics.csv carries target, time_s and
    time_for_target_s, equal to the formula on the row's own spread and fit part, and
    statistics.txt says it in words."""
    import csv
    from synth.pipeline import run_config
    conf = {"cloud": {"source": "demo", "cells": 24, "box_pc": 1.0},
            "sky": {"distance_pc": 1000.0, "dec_deg": 10.0},
            "channels": {"width_kms": 0.5, "velocity_min_kms": -4.0, "velocity_max_kms": 4.0},
            "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4}],
            "analysis": {"noise_realisations": 3, "statistics": True,
                         "statistic_targets": {"pdf_sigma_ln": 0.01, "power_slope": 0.05}},
            "setup": [{"name": "d", "kind": "dish", "diameter_m": 100, "tsys_k": 100,
                       "integration_time_h": 0.001}]}
    run_config(conf, tmp_path / "run", progress=False, log=None)
    with open(tmp_path / "run" / "statistics.csv") as fh:
        rows = {r["statistic"]: r for r in csv.DictReader(fh)}
    for name, target in (("pdf_sigma_ln", 0.01), ("power_slope", 0.05)):
        r = rows[name]
        assert float(r["target"]) == target and float(r["time_s"]) == pytest.approx(3.6)
        s, f = float(r["observed_spread"]), float(r["observed_fit_err"])
        want = 3.6 * s * s / (target**2 - f * f) if target > f else np.inf
        got = float(r["time_for_target_s"]) if r["time_for_target_s"] else np.inf
        assert got == pytest.approx(want, rel=1e-9)
    text = (tmp_path / "run" / "statistics.txt").read_text()
    assert "Observing time for each statistic to reach its target" in text
    assert "CO_1-0 pdf_sigma_ln to ± 0.01 with d:" in text


def test_plan_prints_the_time_from_a_run(tmp_path, capsys):
    """`synth plan CONFIG --from-run DIR` prints the statistics' planning lines of a run; a
    folder without statistics.csv is refused in one line."""
    from synth import cli
    run = tmp_path / "run"
    run.mkdir()
    (run / "statistics.csv").write_text(
        "tracer,setup,statistic,unit,observed_spread,observed_fit_err,realisations,target,"
        "time_s,time_for_target_s\n"
        "CO_1-0,d,power_slope,,0.1,0.03,20,0.05,3600,22500\n"
        "CO_1-0,d,pdf_sigma_ln,,0.1,0.03,20,0.02,3600,\n")
    cfg = tmp_path / "c.toml"
    cfg.write_text('[sky]\ndistance_pc = 1000\n[channels]\nwidth_kms = 0.5\n'
                   '[[tracer]]\nspecies = "CO"\ntransition = "1-0"\nabundance = 1e-4\n'
                   '[[setup]]\nname = "d"\nkind = "dish"\ndiameter_m = 40\nrms_k = 0.1\n')
    assert cli.main(["plan", str(cfg), "--from-run", str(run)]) == 0
    out = capsys.readouterr().out
    assert "CO_1-0 power_slope to ± 0.05 with d: 6.25 h" in out
    assert "CO_1-0 pdf_sigma_ln to ± 0.02 with d: not reachable" in out
    assert cli.main(["plan", str(cfg), "--from-run", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no statistics.csv there" in err
