"""The analysis part of a run: survival metrics, figures, spectra and planning rows on disk.

:func:`run_analysis` is called by the pipeline after the observations, with the run's ideal
cubes (``{tracer: SpectralCube}``) and observed cubes (``{(tracer, setup): SpectralCube}``);
it writes into the run folder and returns a JSON-able summary that :func:`write_report`
turns into the run page. The metrics are those of :func:`synth.analysis.survival.assess`
(docs/analysis.md); the planning rows those of :func:`synth.planning.plan` (docs/planning.md).
"""

import csv
import io
import os
from datetime import datetime, timezone

import numpy as np
import astropy.units as u

from ..errors import ConfigError, InstrumentError
from ..fitsio import atomic_path, write_json, write_text
from ..rundir import csv_cell, run_path
from ..planning import duration_text
from .drawing import resolved

__all__ = ["run_analysis", "analyse_observation", "analysis_settings", "assess_observation", "plan_config",
           "spectra_positions", "rows_csv", "survival_text", "cell_text", "SURVIVAL_COLUMNS",
           "plan_text", "PLAN_COLUMNS"]

#: [analysis] defaults when a config dict has no such section
_DEFAULTS = {"target_snr": 5.0, "percentile": 50.0, "emission_floor": 0.01, "time_h": None,
             "spectra_positions": None, "noise_realisations": 1, "statistics": False}


def analysis_settings(conf):
    """The [analysis] settings of a config, with defaults for missing keys."""
    given = {k: v for k, v in (conf.get("analysis") or {}).items() if v is not None}
    return {**_DEFAULTS, **given}


def assess_observation(ideal, observed, setup_conf=None, emission_floor=0.01):
    """``assess`` of one observation as a run does it.

    ``observed`` is an :class:`~synth.instrument.mapping.ObservedMap` (or a plain observed
    cube on the ideal cube's grid). The observed product is compared with the model on the
    same grid: the primary-beam-corrected map of an array (blank where its response is below
    the cutoff) against the unattenuated sky there, a dish map against the sky on the map
    including its guard band. The noise is the recorded NOISERMS (estimated if absent or zero);
    the flux inside the map's half-power response is measured too.
    """
    from ..analysis.survival import assess, assess_map, recorded_noise
    if hasattr(observed, "layout"):
        return assess_map(observed, emission_floor)
    return assess(ideal, observed, noise=recorded_noise(observed),
                  emission_floor=emission_floor)


def spectra_positions(cube, given=None):
    """Pixel positions (x, y) for spectra: ``given``, or the map centre and the brightest pixel.

    The brightest pixel is the maximum of the integrated intensity (sum over channels).
    """
    ny, nx = cube.shape[1:]
    if given:
        for x, y in given:
            if not (0 <= x < nx and 0 <= y < ny):
                raise ConfigError(f"[analysis].spectra_positions has [{x}, {y}]; valid: "
                                  f"0 <= x < {nx}, 0 <= y < {ny}")
        return [(int(x), int(y)) for x, y in given]
    mom = np.nansum(np.asarray(cube.unmasked_data[:].value), axis=0)
    y, x = np.unravel_index(int(np.nanargmax(mom)), mom.shape)
    out = [(nx // 2, ny // 2)]
    return out if (int(x), int(y)) in out else out + [(int(x), int(y))]


def rows_csv(rows):
    """CSV text of a list of dicts; the header is the union of keys in first-seen order."""
    if not rows:
        return ""
    keys = list(dict.fromkeys(k for r in rows for k in r))
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    writer.writeheader()
    writer.writerows({k: csv_cell(v) for k, v in r.items()} for r in rows)
    return buf.getvalue()


def _save(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=90)
    return os.path.basename(path)


def _ideal_spectra_figure(cube, positions, title):
    """Spectra of one cube at pixel positions (the no-setup case)."""
    from matplotlib.figure import Figure
    height = 2.0 * len(positions) + 0.6
    fig = Figure(figsize=(6.5, height))
    axes = np.atleast_1d(fig.subplots(len(positions), 1, sharex=True, gridspec_kw=dict(
        left=0.1, right=0.97, bottom=0.55 / height, top=1 - 0.45 / height, hspace=0.3)))
    v = cube.with_spectral_unit(u.km / u.s, velocity_convention="radio").spectral_axis.value
    for ax, (x, y) in zip(axes, positions):
        ax.step(v, cube.unmasked_data[:, y, x].value, where="mid", label="ideal (K)")
        ax.set_title(f"pixel ({x}, {y})", fontsize=9)
        ax.set_ylabel("T_B (K)", fontsize=8)
        ax.legend(fontsize=7)
    axes[-1].set_xlabel("radio velocity (km/s)")
    fig.suptitle(title, fontsize=10)
    return fig


def _positions_on(cube, target, positions):
    """Pixel positions of the ideal cube on another cube's grid (through the sky), kept
    inside it."""
    ny, nx = target.shape[1:]
    out = []
    for x, y in positions:
        world = cube.wcs.celestial.pixel_to_world(x, y)
        tx, ty = target.wcs.celestial.world_to_pixel(world)
        out.append((int(np.clip(np.round(tx), 0, nx - 1)), int(np.clip(np.round(ty), 0, ny - 1))))
    return out


def _reference_as_cube(ideal, observed):
    """The ideal cube as the observation should see it, on the observed grid (a cube)."""
    from spectral_cube import SpectralCube
    from ..analysis.survival import reference_cube
    ref, _, _ = reference_cube(ideal, observed)
    return SpectralCube(ref * observed.unit, wcs=observed.wcs)


def _observation_figures(tname, sname, ideal, obs, m, positions, tmp, noise_map=None):
    from ..analysis.plots import moment_figure, spectra_figure
    base = run_path(tmp, f"{tname}_{sname}")
    from .html import typeset_line
    line = typeset_line(ideal.meta.get("LINE") or ideal.meta.get("line") or tname)
    out = {"moments": _save(moment_figure(m, title=f"{line} with {sname}", observed=obs,
                                          noise_map=noise_map),
                            f"{base}_moments.png")}
    ref = _reference_as_cube(ideal, obs).with_spectral_unit(u.km / u.s,
                                                            velocity_convention="radio")
    obs_v = obs.with_spectral_unit(u.km / u.s, velocity_convention="radio")
    out["spectra"] = _save(spectra_figure(ref, obs_v, positions,
                                          title=f"{line} with {sname}: spectra, "
                                                "reference and observed"),
                           f"{base}_spectra.png")
    if os.path.exists(f"{base}_mom0.png"):
        out["mom0"] = os.path.basename(f"{base}_mom0.png")
    return out


def _recovery_png(tname, survivals, spreads, tmp):
    """The recovered-power figure of a tracer's observations (its file name)."""
    from ..analysis.plots import recovery_figure
    return _save(recovery_figure(survivals, title=f"{tname}: recovered power per scale"
                                 + (" (error bars: spread over noise realisations)"
                                    if spreads else ""), spreads=spreads),
                 run_path(tmp, f"{tname}_recovery.png"))


def _tracer_figures(tname, cube, positions, tmp):
    out = {}
    if os.path.exists(run_path(tmp, f"{tname}_mom0.png")):
        out["mom0"] = f"{tname}_mom0.png"
    out["spectra"] = _save(_ideal_spectra_figure(cube, positions, f"{tname}: ideal spectra"),
                           run_path(tmp, f"{tname}_spectra.png"))
    return out


def plan_config(conf, ideal, settings=None):
    """Planning rows (``Plan.as_row``) for every tracer x setup of a config.

    Each setup is planned with its own instrument (a combination is planned for its own
    array), the ideal cube of each tracer giving the target brightness, the field and the
    declination, and the setup's channel width and track. A setup that cannot be planned
    (e.g. a dish given by ``rms_k`` without ``tsys_k``) is listed in ``skipped``.

    Returns (plans, rows, skipped).
    """
    from ..molecules.registry import Line
    from ..observing import make_instrument
    from ..planning import plan
    settings = settings or analysis_settings(conf)
    tracers = {tr["name"]: tr for tr in conf["tracer"]}
    plans, rows, skipped = [], [], []
    for st in conf["setup"]:
        inst = make_instrument(st)
        hours = settings["time_h"] or st["integration_time_h"]
        kw = {} if st["kind"] == "dish" else {
            "hour_angles": tuple(st["hour_angles_h"]) * u.hourangle,
            "sample_interval": st["sample_interval_s"] * u.s}
        kw.update(_plan_map_keywords(st))
        for tname, cube in ideal.items():
            tr = tracers[tname]
            line = Line(tr["species"], tr["transition"], datafile=tr["datafile"])
            try:
                p = plan(inst, line, target_snr=float(settings["target_snr"]), cube=cube,
                         percentile=float(settings["percentile"]),
                         channel_width=(None if st["channel_width_kms"] is None
                                        else st["channel_width_kms"] * u.km / u.s),
                         integration_time=None if hours is None else hours * u.hr,
                         emission_floor=float(settings["emission_floor"]), **kw)
            except InstrumentError as exc:
                from ..observing import _config_message   # config keys, not API names
                skipped.append({"setup": st["name"], "tracer": tname,
                                "reason": _config_message(str(exc), "")})
                continue
            plans.append(p)
            row = p.as_row()
            del row["line"]      # the tracer names the line (summary.json: tracers)
            rows.append({"tracer": tname, **row,
                         "integration_time_s": None if hours is None else hours * 3600.0})
    return plans, rows, skipped


def _plan_map_keywords(st):
    """The map options of a [[setup]] as plan() takes them (the same layout observe makes)."""
    from ..observing import map_keywords
    mk = map_keywords(st)
    kw = {"field_size": mk.get("map_size"), "map_offset": mk.get("map_offset"),
          "pointing_spacing": mk.get("pointing_spacing"), "guard_band": mk.get("guard_band"),
          "max_pointings": mk.get("max_pointings")}
    if st["kind"] == "array":
        kw["pointing_pattern"] = mk["pointing_pattern"]
    return kw


def _clean(v):
    if isinstance(v, (float, np.floating)):
        return float(v) if np.isfinite(v) else None
    return v


def _write_plan(rows, tmp):
    clean = [{k: _clean(v) for k, v in r.items()} for r in rows]
    write_text(rows_csv(clean), run_path(tmp, "plan.csv"))
    write_text(plan_text(clean) + "\n", run_path(tmp, "plan.txt"))
    return clean


def _spreads(conf, ideal, observed, settings):
    """{(tracer, setup): Realisations} when [analysis].noise_realisations > 1 (setups with
    noise only): each re-observed with seeds from the setup's seed + 1000 on."""
    n = int(settings.get("noise_realisations") or 1)
    if n < 2:
        return {}
    from ..analysis.realisations import assess_realisations
    from ..observing import _dish_options, make_instrument, observe_options
    setups = {st["name"]: st for st in conf["setup"]}
    out = {}
    for (tname, sname) in observed:
        st = setups[sname]
        if not st["noise"]:
            continue
        inst, kw = make_instrument(st), observe_options(st, conf["sky"]["beyond_box"])
        kw.pop("seed", None)
        kw.pop("noise", None)
        if st["combine_with"]:
            inst = [inst] + [make_instrument(setups[o]) for o in st["combine_with"]]
            dish = [o for o in st["combine_with"] if setups[o]["kind"] == "dish"]
            if dish:
                kw["dish_options"] = _dish_options(setups[dish[0]])
        if settings.get("statistics"):
            from ..analysis.stat_survival import measure_observed
            kw["measure"] = measure_observed
        out[(tname, sname)] = assess_realisations(
            ideal[tname], inst, n, seed=int(st["seed"]) + 1000,
            emission_floor=float(settings["emission_floor"]), **kw)
    return out


def _survival_files(results, tmp, spreads=None, columns=None):
    from ..analysis.survival import matrix_csv, matrix_json_rows, survival_matrix
    rows = survival_matrix(results)
    for row in rows:
        row.update((columns or {}).get((row["tracer"], row["setup"]), {}))
        r = (spreads or {}).get((row["tracer"], row["setup"]))
        if r is not None:
            row.update({f"{k}_mean": v for k, v in r.mean.items()})
            row.update({f"{k}_std": v for k, v in r.std.items()})
            row["noise_realisations"] = r.n
    write_text(matrix_csv(rows), run_path(tmp, "survival.csv"))
    clean = matrix_json_rows(rows)
    write_json(clean, run_path(tmp, "survival.json"))
    return clean


def analyse_observation(conf, tname, sname, cube, obs, tmp, settings=None, draw=None):
    """The survival metrics of one observation and its report entry (notes, noise, figures
    written into ``tmp``): (Survival, entry). Observations are analysed this way as they
    finish, on the observing threads (synth.observing), or by :func:`run_analysis`.
    ``draw``, a process pool (synth.report.drawing), draws the figures there: the entry's
    "figures" is then a Future of them (synth.report.drawing.resolved)."""
    settings = settings or analysis_settings(conf)
    setups = {st["name"]: st for st in conf["setup"]}
    positions = spectra_positions(cube, settings["spectra_positions"])
    m = assess_observation(cube, obs, setups.get(sname), settings["emission_floor"])
    sky, image = (obs.sky, obs.corrected) if hasattr(obs, "layout") else (cube, obs)
    figures = {}
    if conf["output"]["figures"]:
        args = (tname, sname, sky, image, m, _positions_on(cube, image, positions), tmp,
                _noise_map(obs, m))
        figures = (_observation_figures(*args) if draw is None
                   else draw.submit(_observation_figures, *args))
    return m, {"notes": list(m.notes), "noise": float(m.noise.value), "unit": m.unit,
               "figures": figures}


def _noise_map(obs, m):
    """The rms per channel at each pixel of an observed map (its sensitivity map) in the
    unit of the survival noise, or None (a plain cube, or units that do not convert)."""
    sens = getattr(obs, "sensitivity", None)
    if sens is None:
        return None
    try:
        out = u.Quantity(sens).to_value(m.noise.unit)
    except u.UnitsError:
        return None
    return out if np.shape(out) == tuple(obs.corrected.shape[1:]) else None


def run_analysis(conf, ideal, observed, tmp, *, log=None, done=None, draw=None):
    """Assess every observation, write figures, survival and planning files into ``tmp``.

    Parameters
    ----------
    conf : dict
        The validated run configuration.
    ideal : dict
        ``{tracer: SpectralCube}`` ideal cubes (K).
    observed : dict
        ``{(tracer, setup): SpectralCube}`` observed cubes (may be empty).
    tmp : str
        The run folder being written.
    done : dict, optional
        ``{(tracer, setup): (Survival, entry)}`` of observations already analysed by
        :func:`analyse_observation`.
    draw : concurrent.futures.Executor, optional
        Draws the per-tracer figures (synth.report.drawing) while the rest goes on.

    Returns
    -------
    dict
        JSON-able: settings, survival rows, planning rows, per tracer and observation the
        figure file names, spectra positions and what assess did to match the cubes.
    """
    settings = analysis_settings(conf)
    figures = conf["output"]["figures"]
    setups = {st["name"]: st for st in conf["setup"]}
    out = {"settings": settings, "date": datetime.now(timezone.utc).isoformat(timespec="seconds"),
           "tracers": {}, "files": []}
    results = {}
    spreads = _spreads(conf, ideal, observed, settings) if observed else {}
    for tname, cube in ideal.items():
        positions = spectra_positions(cube, settings["spectra_positions"])
        entry = {"spectra_positions": [list(p) for p in positions], "setups": {},
                 "figures": ((_tracer_figures(tname, cube, positions, tmp) if draw is None
                              else draw.submit(_tracer_figures, tname, cube, positions, tmp))
                             if figures else {})}
        for (t, sname), obs in observed.items():
            if t != tname:
                continue
            m, entry["setups"][sname] = (done or {}).get((tname, sname)) or \
                analyse_observation(conf, tname, sname, cube, obs, tmp, settings)
            figs = entry["setups"][sname]["figures"]
            entry["setups"][sname]["figures"] = resolved(figs)
            results[(tname, sname)] = m
        recovery = None
        if figures and entry["setups"]:
            mine = {s: results[(tname, s)] for s in entry["setups"]}
            spread = {s: spreads[(tname, s)] for s in entry["setups"] if (tname, s) in spreads}
            job = (_recovery_png, tname, mine, spread, tmp)
            recovery = job[0](*job[1:]) if draw is None else draw.submit(*job)
        out["tracers"][tname] = (entry, recovery)
    for tname, (entry, recovery) in list(out["tracers"].items()):   # drawn by now
        entry["figures"] = resolved(entry["figures"])
        if recovery is not None:
            entry["figures"]["recovery"] = resolved(recovery)
        out["tracers"][tname] = entry
    out["uv"] = {s: f"uv_{s}.png" for s, st in setups.items()
                 if st["kind"] == "array" and os.path.exists(run_path(tmp, f"uv_{s}.png"))}
    columns = None
    if results and settings.get("statistics"):
        from .run_statistics import run_statistics
        out["statistics"] = run_statistics(conf, ideal, observed, spreads, tmp, figures)
        columns = out["statistics"].pop("columns")
        out["files"] += out["statistics"]["files"]
    out["survival"] = _survival_files(results, tmp, spreads, columns) if results else []
    out["files"] += ["survival.csv", "survival.json"] if results else []
    from ..sweep import sweep_analysis   # [sweep]: metrics against the swept values
    out["sweep"] = sweep_analysis(conf, out["survival"], tmp, figures)
    out["files"] += (out["sweep"] or {}).get("files", [])
    _, rows, out["plan_skipped"] = plan_config(conf, ideal, settings)
    out["plan"] = _write_plan(rows, tmp) if setups else []
    out["files"] += ["plan.csv", "plan.txt"] if setups else []
    from ..planning import DISCLAIMER
    out["disclaimer"] = DISCLAIMER
    if log is not None:
        _log_tables(log, out["survival"], out["plan"])
    return out


#: the survival-matrix columns shown in the terminal and in the report (key, heading, format)
SURVIVAL_COLUMNS = (("tracer", "tracer", "{}"), ("setup", "setup", "{}"),
                    ("flux_fraction", "flux", "{:.3g}"),
                    ("flux_fraction_pb", "flux (PB)", "{:.3g}"),
                    ("half_recovery_scale_arcsec", "half-scale\"", "{:.3g}"),
                    ("fidelity_median", "fidelity", "{:.3g}"),
                    ("peak_snr", "peak S/N", "{:.3g}"),
                    ("fraction_above_3sigma", ">3 sigma", "{:.2f}"),
                    ("mom0_correlation", "r(mom0)", "{:.3f}"),
                    ("survives", "survives", "{}"))


def cell_text(row, key, fmt):
    """One table cell: "-" for a missing or non-finite value; a lower limit gets ">"."""
    v = row.get(key)
    if callable(fmt):
        return fmt(v)
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    text = fmt.format(v)
    if key == "half_recovery_scale_arcsec" and row.get("half_recovery_bounded") is False:
        text = ">" + text
    return text


def survival_text(rows):
    """The survival matrix as a plain-text table."""
    cells = [[cell_text(r, k, f) for k, _, f in SURVIVAL_COLUMNS] for r in rows]
    head = [h for _, h, _ in SURVIVAL_COLUMNS]
    widths = [max([len(h)] + [len(c[i]) for c in cells]) for i, h in enumerate(head)]
    fmt = "  ".join("{:<%d}" % w for w in widths)
    return "\n".join([fmt.format(*head), fmt.format(*("-" * w for w in widths))]
                     + [fmt.format(*c) for c in cells])


#: planning columns shown in the terminal, plan.txt and the report (key, heading, format);
#: "rms" and "target" are in ``brightness_unit`` (K for a dish, Jy/beam for an array); times
#: are seconds in the rows and shown in s, min or h by their size
PLAN_COLUMNS = (("tracer", "tracer", "{}"), ("setup", "setup", "{}"),
                ("frequency_ghz", "GHz", "{:.3f}"), ("beam_major_arcsec", "beam\"", "{:.3g}"),
                ("largest_scale_arcsec", "largest scale\"", "{:.3g}"),
                ("channel_width_kms", "dv km/s", "{:.3g}"),
                ("integration_time_s", "time", duration_text),
                ("rms", "rms(time)", "{:.3g}"), ("target", "target", "{:.3g}"),
                ("target_snr", "S/N", "{:g}"),
                ("time_per_pointing_s", "time/pointing", duration_text),
                ("n_pointings", "pointings", "{}"), ("total_time_s", "total time", duration_text))


def plan_cells(rows):
    """The planning rows as table cells (strings, noise and targets with their unit)."""
    cells = []
    for r in rows:
        unit = r.get("brightness_unit") or ("K" if r.get("kind") == "dish"
                                            else "Jy/beam")
        cells.append([cell_text(r, k, f) + (f" {unit}" if k in ("rms", "target")
                                            and r.get(k) is not None else "")
                      for k, _, f in PLAN_COLUMNS])
    return cells


def plan_text(rows):
    """The planning rows as a plain-text table, the disclaimer under it."""
    from ..planning import DISCLAIMER
    cells = plan_cells(rows)
    head = [h for _, h, _ in PLAN_COLUMNS]
    widths = [max([len(h)] + [len(c[i]) for c in cells]) for i, h in enumerate(head)]
    fmt = "  ".join("{:<%d}" % w for w in widths)
    return "\n".join([fmt.format(*head), fmt.format(*("-" * w for w in widths))]
                     + [fmt.format(*c) for c in cells] + ["", DISCLAIMER])


def _log_tables(log, rows, plan_rows):
    if rows:
        log("survival matrix (survival.csv; docs/analysis.md):")
        log(survival_text(rows))
    if plan_rows:
        log("planning estimates (plan.txt; docs/planning.md):")
        log(plan_text(plan_rows))
