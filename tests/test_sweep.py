"""Setup sweeps (synth/sweep.py, docs/guide.md "Sweeping setups").

The reference of a sweep is the separate runs it stands for: each expanded setup must give
exactly (bit for bit) the observed cubes of a run with that one setup and the same seed, while
every tracer is synthesised once (counted by wrapping synth.transfer.synthesize
.synthesize_products, the pipeline's one synthesis entry point).
"""

import copy
import json
import math

import numpy as np
import pytest
from astropy.io import fits

import synth
from synth.config import validate_config
from synth.errors import ConfigError
from synth.sweep import expand_sweep, map_jobs, member_name, sweep_figure, sweep_rows

TIMES = [0.5, 1, 2, 4]
ARRAYS = ["ring-16", "compact-10"]
BASE = {
    "cloud": {"source": "demo", "cells": 24, "seed": 3, "box_pc": 1.0,
              "mean_n_h2_cm3": 1e4, "mach": 6.0},
    "sky": {"distance_pc": 6000, "dec_deg": 10.0},
    "channels": {"width_kms": 1.0, "velocity_min_kms": -3.0, "velocity_max_kms": 3.0},
    "tracer": [{"species": "CO", "transition": "1-0", "abundance": 1e-4},
               {"species": "13CO", "transition": "1-0", "abundance": 2e-6}],
    "output": {"figures": False},
    "setup": [{"name": "arr", "kind": "array", "antennas": "compact-10", "diameter_m": 10.0,
               "latitude_deg": 8.0, "tsys_k": 90.0, "integration_time_h": 4.0,
               "deconvolver": "none", "seed": 7}],
}


def _sweep_conf():
    conf = copy.deepcopy(BASE)
    conf["sweep"] = {"setups": ["arr"], "integration_time_h": TIMES, "antennas": ARRAYS}
    return conf


def test_sweep_gives_the_cubes_of_separate_runs(tmp_path, count):
    """4 integration times x 2 arrays: 8 setups whose observed cubes equal, bit for bit,
    those of 8 separate runs with one setup each (same seed); 2 tracers synthesised once
    each in the sweep (reference: the separate runs, 2 syntheses each)."""
    summary = synth.run_config(_sweep_conf(), str(tmp_path / "sweep"), progress=False,
                               log=lambda *a: None)
    assert sorted(count) == ["13CO 1-0", "CO 1-0"]
    names = [member_name("arr", {"integration_time_h": t, "antennas": a})
             for t in TIMES for a in ARRAYS]
    assert sorted(summary["setups"]) == sorted(names)
    assert names[0] == "arr_t0.5h_ring-16" and names[-1] == "arr_t4h_compact-10"
    for t in TIMES:
        for a in ARRAYS:
            name = member_name("arr", {"integration_time_h": t, "antennas": a})
            one = copy.deepcopy(BASE)
            one["setup"][0].update(name=name, integration_time_h=t, antennas=a)
            one["tracer"] = one["tracer"][:1]
            synth.run_config(one, str(tmp_path / name), progress=False, log=lambda *a: None)
            for suffix in ("jyb", "k", "flat_jyb", "sensitivity"):
                f = f"CO_1-0_{name}_{suffix}.fits"
                a_data = fits.getdata(tmp_path / "sweep" / f)
                b_data = fits.getdata(tmp_path / name / f)
                assert np.array_equal(a_data, b_data, equal_nan=True), f
                assert fits.getheader(tmp_path / "sweep" / f).get("NOISERMS") == \
                    fits.getheader(tmp_path / name / f).get("NOISERMS")
    assert len(count) == 2 + 8
    rows = json.loads((tmp_path / "sweep" / "summary.json").read_text())["analysis"]["sweep"]
    assert len(rows["rows"]) == 16
    assert {(r["sweep_integration_time_h"], r["sweep_antennas"]) for r in rows["rows"]} == {
        (t, a) for t in TIMES for a in ARRAYS}
    # the radiometer equation: noise ~ 1/sqrt(time) (Wrobel & Walker 1999, eq. 9-23);
    # the recorded noise of 0.5 h is twice that of 2 h for the same array
    for a in ARRAYS:
        n05 = summary["setups"][member_name("arr", {"integration_time_h": 0.5, "antennas": a})]
        n2 = summary["setups"][member_name("arr", {"integration_time_h": 2, "antennas": a})]
        assert n05["CO_1-0"]["noise_rms"] / n2["CO_1-0"]["noise_rms"] == pytest.approx(
            2.0, rel=1e-6)


def test_expansion_names_order_and_record():
    raw = copy.deepcopy(BASE)
    raw["setup"].append({"name": "dish", "kind": "dish", "diameter_m": 30.0, "rms_k": 0.1})
    raw["sweep"] = {"setups": ["arr"], "robust": [-0.5, 2], "hanning": [True, False]}
    conf = validate_config(raw)
    assert [s["name"] for s in conf["setup"]] == [
        "arr_r-0.5_hanning", "arr_r-0.5_nohanning", "arr_r2_hanning",
        "arr_r2_nohanning", "dish"]
    assert conf["setup"][2]["robust"] == 2 and conf["setup"][2]["hanning"] is True
    assert conf["setup"][2]["tsys_k"] == 90.0          # the base's other keys
    assert conf["sweep"]["members"]["arr_r2_nohanning"] == {
        "base": "arr", "values": {"robust": 2, "hanning": False}}
    again = validate_config(copy.deepcopy(conf))       # a validated config validates as is
    assert again["setup"] == conf["setup"] and again["sweep"] == conf["sweep"]


@pytest.mark.parametrize("key, value, token", [
    ("integration_time_h", 0.5, "t0.5h"), ("antennas", "arrays/my site.csv", "my-site"),
    ("tsys_k", 90, "tsys90K"), ("map_size_arcsec", [60, 40.5], "map60x40.5as"),
    ("hanning", False, "nohanning"), ("weighting", "natural", "natural"),
    ("receiver_temperature_k", 1e-05, "trx1e-05K"), ("seed", 3, "seed3"),
])
def test_member_names(key, value, token):
    assert member_name("b", {key: value}) == f"b_{token}"


def test_map_jobs_yields_every_result_and_raises():
    """Threads give each job's own result (reference: the serial map)."""
    args = [(i,) for i in range(9)]
    got = dict(map_jobs(lambda i: i * i, args, threads=3))
    assert got == {i: i * i for i in range(9)}

    def boom(i):
        if i == 4:
            raise ValueError("job 4")
        return i
    with pytest.raises(ValueError, match="job 4"):
        dict(map_jobs(boom, args, threads=2))


def test_sweep_figure_draws_the_metrics():
    """One line per tracer and value of the other key; the points are the rows' numbers."""
    record = {"setups": ["arr"], "keys": {"integration_time_h": [1, 2, 4],
                                          "antennas": ["x", "y"]}, "members": {}}
    surv = []
    for t in [1, 2, 4]:
        for a in ["x", "y"]:
            name = member_name("arr", {"integration_time_h": t, "antennas": a})
            record["members"][name] = {"base": "arr", "values": {"integration_time_h": t,
                                                                 "antennas": a}}
            for tr in ("A", "B"):
                surv.append({"tracer": tr, "setup": name, "flux_fraction": t / 10 +
                             (a == "y") + (tr == "B") * 10, "peak_snr": math.sqrt(t)})
    rows = sweep_rows(record, surv)
    fig = sweep_figure(rows, "arr", "integration_time_h", record["keys"], "t")
    ax = fig.axes[0]
    assert len(ax.lines) == 4                         # 2 tracers x 2 arrays
    ys = sorted(tuple(line.get_ydata()) for line in ax.lines)
    assert ys[0] == pytest.approx((0.1, 0.2, 0.4))    # tracer A, array x
    assert ys[-1] == pytest.approx((11.1, 11.2, 11.4))
    assert tuple(ax.lines[0].get_xdata()) == (1.0, 2.0, 4.0)
    fig2 = sweep_figure(rows, "arr", "antennas", record["keys"], "a")
    assert len(fig2.axes[0].lines) == 6               # 2 tracers x 3 times


@pytest.mark.slow
def test_sweep_runs_on_a_dask_cluster_like_on_threads(tmp_path):
    """The observations as tasks of a dask cluster give the cubes of the threads."""
    distributed = pytest.importorskip("distributed")
    from synth.parallel import DaskExecutor
    from synth.observing import observe_setups
    conf = validate_config(dict(copy.deepcopy(BASE), tracer=BASE["tracer"][:1], sweep={
        "setups": ["arr"], "integration_time_h": [1, 4]}))
    from synth.pipeline import ideal_cubes
    ideal = ideal_cubes(conf)
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    _, on_threads = observe_setups(conf, ideal, str(tmp_path / "a"), "x", False, print)
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2,
                            dashboard_address=None, timeout="60s") as client:
        _, on_dask = observe_setups(conf, ideal, str(tmp_path / "b"), "x", False, print,
                                    DaskExecutor(client))
    assert on_threads.keys() == on_dask.keys()
    for k in on_threads:
        assert np.array_equal(on_threads[k].cube.unmasked_data[:].value,
                              on_dask[k].cube.unmasked_data[:].value, equal_nan=True)


def test_bad_sweep_is_refused_before_work():
    raw = dict(copy.deepcopy(BASE), sweep={"setups": ["arr"], "antennas": ["nowhere-7"]})
    conf = validate_config(raw)        # the schema accepts it; the preflight refuses it
    from synth.preflight import preflight
    with pytest.raises(ConfigError, match="arr_nowhere-7"):
        preflight(conf)
    with pytest.raises(ConfigError, match="lists 1 twice"):
        expand_sweep(dict(raw, sweep={"setups": ["arr"], "seed": [1, 1]}))


def test_example_config_expands_to_eight_setups():
    """configs/sweep.toml (the example of docs/sweeps.md) validates into 4 x 2 setups."""
    import os
    from synth.config import load_config
    conf = load_config(os.path.join(os.path.dirname(__file__), "..", "configs", "sweep.toml"))
    names = [s["name"] for s in conf["setup"]]
    assert len(names) == 8 and names[0] == "compact_t0.5h_ring-16"
    assert {s["integration_time_h"] for s in conf["setup"]} == {0.5, 1, 2, 4}
