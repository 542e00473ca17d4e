"""Config -> stages -> files. The only module that knows about output folders.

A run writes into a hidden temporary folder beside the output folder and renames it into
place at the end, so an interrupted or failed run leaves nothing half written, and an
existing run is replaced only with ``overwrite=True``.
"""

import os
import shutil
import time

import numpy as np
import astropy.units as u

from . import __version__
from .config import load_config, validate_config
from .errors import ConfigError
from .fitsio import config_hash, write_cube, write_image, write_json
from .sky import ARCSEC_PER_RAD
from .rundir import (check_overwrite, finish_output, make_partial, run_path, sweep_debris,
                     unregister_cleanup)

__all__ = ["run_config", "synthesize_config", "ideal_cubes", "build_snapshot", "tracer_line",
           "prepare_output", "run_inputs", "DEMO_CONFIG"]

#: The packaged demo configuration (identical to configs/demo.toml).
DEMO_CONFIG = os.path.join(os.path.dirname(__file__), "configs", "demo.toml")


def build_snapshot(cloud):
    """The Snapshot a ``[cloud]`` section describes."""
    if cloud["source"] == "demo":
        from .snapshot.demo import demo_cloud
        snap = demo_cloud(cells=cloud["cells"], seed=cloud["seed"], box=cloud["box_pc"] * u.pc,
                          mean_n_h2=cloud["mean_n_h2_cm3"] * u.cm**-3, mach=cloud["mach"],
                          solenoidal_fraction=cloud["solenoidal_fraction"])
        if cloud["sigma_turb_kms"] is not None:
            snap = snap._replace(sigma_turb_cms=np.asarray(cloud["sigma_turb_kms"] * 1e5))
        return snap
    from .snapshot.readers import read_snapshot
    kw = _reader_kwargs(cloud)
    if cloud["format"] == "yt":
        from .snapshot.yt_reader import read_yt
        return read_yt(cloud["source"], level=cloud["level"], fields=cloud["fields"], **kw)
    return read_snapshot(cloud["source"], fields=cloud["fields"], format=cloud["format"], **kw)


def tracer_line(tracer):
    from .molecules.registry import Line
    return Line(tracer["species"], tracer["transition"], datafile=tracer["datafile"])


def _lvg_options(tracer):
    opts = {}
    for key in ("geometry", "ortho_para_ratio", "accuracy"):
        if tracer[key] is not None:
            opts[key] = tracer[key]
    if tracer["max_escape_length_pc"] is not None:
        opts["max_escape_length"] = tracer["max_escape_length_pc"] * u.pc
    if opts and tracer["excitation"] != "lvg":
        raise ConfigError(f"[[tracer]] '{tracer['name']}' sets LVG options "
                          f"{', '.join(sorted(opts))} but its excitation is 'lte'; set "
                          "excitation = \"lvg\" or remove them")
    return opts or None


def run_inputs(conf, config_path=None):
    """The files a run reads: its config, snapshot, molecular data files and antenna CSVs."""
    paths = [config_path] if isinstance(config_path, (str, os.PathLike)) else []
    if conf["cloud"]["source"] != "demo":
        paths.append(conf["cloud"]["source"])
    paths += [tr["datafile"] for tr in conf["tracer"] if tr["datafile"]]
    paths += [st["antennas"] for st in conf["setup"]
              if st["antennas"] and os.path.exists(st["antennas"])]
    return [os.path.abspath(os.fspath(p)) for p in paths]


def prepare_output(out_dir, overwrite, inputs=(), log=None):
    """Check the output folder may be made (or replaced); return a fresh hidden folder beside
    it to build the run in. Debris of killed runs in the same parent is removed first."""
    out_dir = check_overwrite(out_dir, overwrite, inputs)
    sweep_debris(os.path.dirname(out_dir), log)
    return make_partial(out_dir)


def run_config(config, out_dir, overwrite=False, progress=True, log=print, memory=None,
               workers=None, scheduler=None, dashboard=False, reuse=None):
    """Run a configuration (a path or a dict) and write its products into ``out_dir``.

    ``memory`` (bytes or "8GB") caps the transfer stage and makes snapshot files in HDF5,
    zarr or FITS be read tile by tile; ``workers`` runs the tiles on a local dask cluster,
    ``scheduler`` on an existing one (a cluster you trust), ``dashboard`` serves the local
    cluster's dask dashboard on 127.0.0.1. ``reuse`` (a folder or a list of folders of
    earlier runs) reuses their ideal cubes where the inputs are unchanged (synth.cache).
    Returns the run summary (also ``summary.json``).
    """
    conf = load_config(config) if isinstance(config, (str, os.PathLike)) else validate_config(config)
    chash = config_hash(conf)
    from .preflight import preflight
    lines = preflight(conf, memory, workers, scheduler)  # every check before any work
    from .cache import check_reuse_folders
    reuse = [reuse] if isinstance(reuse, (str, os.PathLike)) else list(reuse or [])
    check_reuse_folders(reuse)
    if memory is not None:
        from .transfer.tiles import parse_memory
        memory = parse_memory(memory)
    tmp = prepare_output(out_dir, overwrite, run_inputs(conf, config), log)
    try:
        from .parallel import executor_context
        with executor_context(workers, scheduler, dashboard) as executor:
            if getattr(executor, "dashboard_link", None):
                log(f"dask dashboard: {executor.dashboard_link}")
            summary = _run(conf, lines, chash, tmp, progress, log,
                           {"memory": memory, "executor": executor, "reuse": reuse})
        finish_output(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        unregister_cleanup(tmp)
        raise
    return summary


def _lazy_source(conf, memory):
    """A SnapshotFile when the run should read its snapshot block by block, else None: with
    --memory, a snapshot file in HDF5, zarr or FITS, for LTE and LVG tracers and for axis
    views and rotations alike (synth.snapshot.lazy, synth.snapshot.views.RotatedView)."""
    cloud = conf["cloud"]
    if memory is None or cloud["source"] == "demo" or cloud["format"] == "yt":
        return None
    from .snapshot.lazy import SnapshotFile
    from .snapshot.readers import _resolve_format
    if _resolve_format(cloud["source"], cloud["format"]) == "npz":
        return None
    return SnapshotFile(cloud["source"], fields=cloud["fields"], format=cloud["format"],
                        **_reader_kwargs(cloud))


def _reader_kwargs(cloud):
    """cell_size / sigma_turb overrides from a [cloud] table, as reader keyword arguments."""
    kw = {}
    if cloud["cell_size_pc"] is not None:
        kw["cell_size"] = cloud["cell_size_pc"] * u.pc
    if cloud["sigma_turb_kms"] is not None:
        kw["sigma_turb"] = cloud["sigma_turb_kms"] * u.km / u.s
    return kw


def synthesize_config(conf, progress=False, memory=None, executor=None, lines=None, info=None,
                      preflight=None, only=None):
    """Yield (tracer table, Line, SynthesisResult) for every [[tracer]] of a validated config:
    the snapshot, view, channel grid and source placement the config describes. ``info``, a
    dict, receives the snapshot's shape and whether it is read by tiles. ``preflight``, if
    given, is called with the ideal cubes' sky size (width, height) in arcsec before any
    synthesis. ``only``, a set of tracer names, synthesises those tracers alone (the band
    still covers every tracer)."""
    from .transfer.synthesize import auto_velocity_range, synthesize_products
    lines = lines or [tracer_line(tr) for tr in conf["tracer"]]
    lazy = _lazy_source(conf, memory)
    snap = lazy if lazy is not None else build_snapshot(conf["cloud"])
    if info is not None:
        info.update(shape=list(snap.shape), read_by_tiles=lazy is not None)
    sky, chan = conf["sky"], conf["channels"]
    vrange = None
    if chan["velocity_min_kms"] is not None or chan["velocity_max_kms"] is not None:
        if chan["velocity_min_kms"] is None or chan["velocity_max_kms"] is None:
            raise ConfigError("[channels] needs both velocity_min_kms and velocity_max_kms, or neither")
        vrange = (chan["velocity_min_kms"], chan["velocity_max_kms"]) * u.km / u.s
    los = sky["line_of_sight"]
    if lazy is not None:  # read block by block, whatever the view
        view = lazy.view(los, conf["cloud"]["edges"])
    else:
        view = snap if los == "z" else snap.view(los, conf["cloud"]["edges"])
    if vrange is None:
        ranges = [auto_velocity_range(view, ln, sky["systemic_velocity_kms"],
                                      hyperfine=tr.get("hyperfine")).value
                  for tr, ln in zip(conf["tracer"], lines)]
        vrange = (min(r[0] for r in ranges), max(r[1] for r in ranges)) * u.km / u.s
        from .preflight import check_cube_size  # the band is known only now
        n_chan = int(np.ceil((vrange[1] - vrange[0]).to_value(u.km / u.s) / chan["width_kms"]))
        check_cube_size(n_chan, tuple(view.shape), len(lines), memory)
    products = ("tau",) + tuple(p for p in conf["output"]["products"] if p == "column")
    if preflight is not None:
        preflight(_sky_size_arcsec(snap, lazy, los, sky["distance_pc"]))
    from tqdm.auto import tqdm
    from .parallel import spilled_snapshot
    bar = tqdm([(tr, ln) for tr, ln in zip(conf["tracer"], lines)
                if only is None or tr["name"] in only], desc="tracers", unit="tracer",
               disable=not progress)
    with spilled_snapshot(view, executor) as source:  # a local cluster reads a file itself
        for tr, line in bar:
            bar.set_postfix_str(str(line))
            yield tr, line, synthesize_products(
                source, line, tr["abundance"], tr["excitation"],
                distance=sky["distance_pc"] * u.pc, channel_width=chan["width_kms"] * u.km / u.s,
                velocity_range=vrange, systemic_velocity=sky["systemic_velocity_kms"] * u.km / u.s,
                position=(sky["ra_deg"] * u.deg, sky["dec_deg"] * u.deg),
                t_bg=sky["background_k"] * u.K,
                t_ex=None if tr["t_ex_k"] is None else tr["t_ex_k"] * u.K,
                excitation_options=_lvg_options(tr), products=products, progress=progress,
                memory=memory, executor=executor, hyperfine=tr.get("hyperfine"))


def _sky_size_arcsec(snap, lazy, los, distance_pc):
    """(width, height) in arcsec of the ideal cubes a view makes (before synthesis)."""
    cell_cm = (snap.block(0, 1, "z").cell_size_cm if lazy is not None else snap.cell_size_cm)
    nx, ny, nz = snap.shape
    axes = {"z": (nx, ny), "-z": (nx, ny), "x": (ny, nz), "-x": (ny, nz), "y": (nx, nz),
            "-y": (nx, nz)}
    n = axes.get(los, (max(nx, ny, nz),) * 2) if isinstance(los, str) else (max(nx, ny, nz),) * 2
    pix = float((cell_cm * u.cm / (distance_pc * u.pc)).decompose()) * ARCSEC_PER_RAD
    return n[0] * pix, n[1] * pix


def ideal_cubes(config):
    """{tracer name: ideal cube} of a config (a path or a dict); nothing is written."""
    conf = load_config(config) if isinstance(config, (str, os.PathLike)) else validate_config(config)
    return {tr["name"]: res.cube for tr, _, res in synthesize_config(conf)}


def _run(conf, lines, chash, tmp, progress, log, execution):
    draw = None
    if conf["output"]["figures"] and conf["setup"]:
        from .report.drawing import figure_process    # per-observation figures, drawn aside
        draw = figure_process()
    try:
        return _run_stages(conf, lines, chash, tmp, progress, log, execution, draw)
    finally:
        if draw is not None:
            draw.shutdown(wait=True, cancel_futures=True)


def _run_stages(conf, lines, chash, tmp, progress, log, execution, draw):
    t_start = time.perf_counter()
    summary = {"synth_version": __version__, "config_hash": chash, "config": conf,
               "snapshot": {}, "tracers": {}}
    ideal = {}
    from .cache import as_written, find_reusable, ideal_key
    from .observing import check_setups
    memo = {}
    keys = {tr["name"]: ideal_key(conf, tr, memo) for tr in conf["tracer"]}
    hits = find_reusable(conf, execution.get("reuse"), log, keys)
    todo = {tr["name"] for tr in conf["tracer"]} - set(hits)
    for name, hit in hits.items():
        tr, line = next((t, ln) for t, ln in zip(conf["tracer"], lines) if t["name"] == name)
        ideal[name] = hit.result.cube
        summary["tracers"][name] = _write_tracer(tmp, tr, line, hit.result, conf, chash,
                                                 keys[name], hit.source, draw)
        summary["snapshot"] = dict(hit.snapshot, ideal_cubes_reused=sorted(hits))
    if todo:
        for tr, line, res in synthesize_config(conf, progress, execution["memory"],
                                               execution["executor"], lines,
                                               summary["snapshot"],
                                               lambda size: check_setups(conf, lines, size),
                                               only=todo):
            ideal[tr["name"]] = as_written(res.cube)
            summary["tracers"][tr["name"]] = _write_tracer(tmp, tr, line, res, conf, chash,
                                                           keys[tr["name"]], None, draw)
    else:
        check_setups(conf, lines, _cube_sky_size(next(iter(ideal.values()))))
    order = [tr["name"] for tr in conf["tracer"]]
    ideal = {n: ideal[n] for n in order}
    summary["tracers"] = {n: summary["tracers"][n] for n in order}
    from .report.html import write_report
    from .report.run_analysis import analyse_observation, run_analysis
    analysed = {}   # each observation analysed on its thread as soon as it is done

    def after(tname, sname, cube, omap):
        analysed[(tname, sname)] = analyse_observation(conf, tname, sname, cube, omap, tmp,
                                                       draw=draw)
    summary["setups"], observed = _observe_all(conf, ideal, tmp, chash, progress, log,
                                               execution["executor"], after, draw)
    for entry in summary["tracers"].values():   # the moment-0 figures (the report looks
        job = entry.pop("_figure_job", None)      # for their files)
        if job is not None:
            job.result()
    summary["analysis"] = run_analysis(conf, ideal, observed, tmp, log=log, done=analysed,
                                       draw=draw)
    summary["elapsed_s"] = round(time.perf_counter() - t_start, 2)
    write_report(tmp, summary, log=log)
    write_json(summary, run_path(tmp, "summary.json"))
    return summary


def _cube_sky_size(cube):
    """(width, height) in arcsec of an ideal cube."""
    _, ny, nx = cube.shape
    return (nx * abs(cube.wcs.wcs.cdelt[0]) * 3600, ny * abs(cube.wcs.wcs.cdelt[1]) * 3600)


def _write_tracer(tmp, tr, line, res, conf, chash, key=None, reused_from=None, draw=None):
    """Write a tracer's ideal cube (and tau cube, column map, figure); return its summary
    entry. ``key`` = (key, parts) of synth.cache, recorded in every file; ``reused_from``:
    the earlier ideal cube ``res`` was read from."""
    from .cache import data_card, key_cards
    name = tr["name"]
    cube = res.cube
    from .config import object_name
    extra = {"OBJECT": object_name(conf), "LINE": str(line), "EXCIT": tr["excitation"],
             "ABUND": tr["abundance"], **(key_cards(*key) if key else {})}
    write_cube(cube, run_path(tmp, f"{name}_ideal.fits"), chash,
               dict(extra, BTYPE="Intensity", **data_card(cube.unmasked_data[:].value)))
    if "tau" in conf["output"]["products"]:
        write_cube(res.tau, run_path(tmp, f"{name}_tau.fits"), chash,
                   dict(extra, BTYPE="Optical depth", **data_card(res.tau.unmasked_data[:].value)))
    if res.column is not None:
        hdr = cube.wcs.celestial.to_header()
        hdr["BUNIT"] = "cm-2"
        write_image(res.column.value, hdr, run_path(tmp, f"{name}_column.fits"), chash,
                    dict(extra, BTYPE="Column density", **data_card(res.column.value)))
    data = cube.unmasked_data[:].value
    dv = abs(cube.spectral_axis[1] - cube.spectral_axis[0]).to_value(u.km / u.s)
    mom0 = data.sum(axis=0) * dv
    tau = res.tau.unmasked_data[:].value if res.tau is not None else None
    entry = {
        "line": str(line), "excitation": tr["excitation"], "abundance": tr["abundance"],
        "frequency_ghz": line.frequency.to_value(u.GHz),
        "peak_tb_k": float(data.max()),
        "peak_integrated_k_kms": float(mom0.max()),
        "mean_integrated_k_kms": float(mom0.mean()),
        "tau_max": float(tau.max()) if tau is not None else res.stats["tau_max"],
        "tau_median_peak": (float(np.median(tau.max(axis=0))) if tau is not None
                            else res.stats["tau_median_peak"]),
        "channels": int(cube.shape[0]), "pixel_arcsec": float(
            abs(cube.wcs.wcs.cdelt[1]) * 3600),
        "excitation_info": {k: v for k, v in res.excitation_info.items()
                            if isinstance(v, (int, float, str, bool))},
        "velocity_resolution": res.stats["velocity_resolution"],
    }
    if reused_from is not None:
        entry["reused_from"] = os.path.abspath(reused_from)
    from .transfer.synthesize import warn_if_underresolved
    warn_if_underresolved(name, entry["velocity_resolution"])
    if conf["output"]["figures"]:
        from .report.figures import moment0_figure
        job = (moment0_figure, mom0, cube, str(line), run_path(tmp, f"{name}_mom0.png"))
        if draw is None:
            job[0](*job[1:])
        else:                     # drawn aside (synth.report.drawing); awaited at the end
            entry["_figure_job"] = draw.submit(*job)
    return entry


def _observe_all(conf, ideal, tmp, chash, progress, log, executor=None, after=None, draw=None):
    """Observe every ideal cube with every [[setup]] (filled in by the instrument stage)."""
    if not conf["setup"]:
        return {}, {}
    from .observing import observe_setups
    return observe_setups(conf, ideal, tmp, chash, progress, log, executor, after, draw)
