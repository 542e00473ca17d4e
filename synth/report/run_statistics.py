"""The survival-of-statistics part of a run ([analysis] statistics = true).

For every tracer x setup, :func:`synth.analysis.stat_survival.observation_statistics` measures
the ideal cube (the model sky on the observed grid) and the observed cube alike; the noise
realisations of ``[analysis] noise_realisations`` add their observed values. Writes
``statistics.csv`` (one row per tracer, setup and statistic, with the plain-language line),
``statistics.txt`` (the lines) and ``statistics.png`` (the |shift| / uncertainty grid), and
returns the rows, the per-row columns for survival.csv and the snapshot's true values.
"""

import numpy as np

from ..errors import SynthError
from ..fitsio import atomic_path, write_text
from ..rundir import run_path

__all__ = ["run_statistics", "true_values"]


def true_values(conf):
    """{name: value} of :func:`synth.analysis.statistics.snapshot_statistics` for the run's
    snapshot seen along its line of sight, or ({}, reason) when it cannot be had."""
    from ..analysis.statistics import snapshot_statistics
    from ..pipeline import build_snapshot
    try:
        snap = build_snapshot(conf["cloud"])
        los = conf["sky"]["line_of_sight"]
        if los != "z":
            snap = snap.view(los, conf["cloud"]["edges"])
        return {k: v.value for k, v in snapshot_statistics(snap, "z").items()}, None
    except (SynthError, MemoryError) as exc:
        return {}, f"true values not computed: {exc}"


def run_statistics(conf, ideal, observed, spreads, tmp, figures=True):
    """Survival of statistics for every observation (see the module docstring).

    ``ideal`` {tracer: cube}; ``observed`` {(tracer, setup): ObservedMap or cube};
    ``spreads`` {(tracer, setup): Realisations} whose ``measured`` hold the realisations'
    statistics. Returns a JSON-able dict: rows, columns {(tracer, setup): {...}}, truth,
    files."""
    from ..analysis.stat_survival import (observation_statistics, statistics_columns,
                                          statistics_figure, statistics_survival)
    from .run_analysis import rows_csv
    rows = []
    for (tname, sname), obs in observed.items():
        sky = None if hasattr(obs, "layout") else ideal[tname]
        ide, first = observation_statistics(sky, obs)
        more = list(getattr(spreads.get((tname, sname)), "measured", ()) or ())
        rows += statistics_survival(ide, [first] + more, tracer=tname, setup=sname)
    _add_time_for_targets(rows, conf)
    clean = [{k: (None if isinstance(v, float) and not np.isfinite(v) else v)
              for k, v in r.items()} for r in rows]
    write_text(rows_csv(clean), run_path(tmp, "statistics.csv"))
    from ..analysis.stat_survival import planning_lines
    text = "\n".join(r["line"] for r in rows) + "\n"
    plan = planning_lines(rows)
    if plan:
        text += ("\nObserving time for each statistic to reach its target uncertainty "
                 "([analysis] statistic_targets; estimates only: the observatory's own official "
                 "tools and policies decide a proposal):\n" + "\n".join(plan) + "\n")
    write_text(text, run_path(tmp, "statistics.txt"))
    files = ["statistics.csv", "statistics.txt"]
    if figures and rows:
        with atomic_path(run_path(tmp, "statistics.png")) as path:
            statistics_figure(rows).savefig(path, format="png", dpi=90)
        files.append("statistics.png")
    truth, note = true_values(conf)
    return {"rows": clean, "columns": statistics_columns(rows), "truth": truth,
            "truth_note": note, "files": files}


def setup_time_s(st):
    """The observing time a setup's noise is for, in s: its integration_time_h, else (array)
    the track's length; None for a dish with a fixed rms_k."""
    if st.get("integration_time_h") is not None:
        return float(st["integration_time_h"]) * 3600.0
    if st["kind"] == "array":
        start, stop = st["hour_angles_h"]
        return (float(stop) - float(start)) * 3600.0
    return None


def _add_time_for_targets(rows, conf):
    """``target``, ``time_s`` and ``time_for_target_s`` on every row whose statistic has a
    target in [analysis] statistic_targets (:func:`time_for_uncertainty`)."""
    from ..analysis.stat_survival import time_for_uncertainty
    targets = (conf.get("analysis") or {}).get("statistic_targets") or {}
    setups = {st["name"]: st for st in conf.get("setup", [])}
    for r in rows:
        if r["statistic"] not in targets:
            continue
        t0 = setup_time_s(setups[r["setup"]]) if r["setup"] in setups else None
        r["target"] = float(targets[r["statistic"]])
        r["time_s"] = t0
        r["time_for_target_s"] = time_for_uncertainty(r, r["target"], t0)
