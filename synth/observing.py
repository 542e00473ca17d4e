"""[[setup]] sections -> instruments -> observed cubes on disk (used by the pipeline).

Each ideal cube is observed with each setup. A dish setup writes the observed cube in K and
in Jy/beam; an array setup writes Jy/beam (and K), jointly imaged with the arrays named in
``combine_with`` and feathered with a dish named there. Each array setup gets a uv-coverage /
synthesized-beam figure; the ideal-vs-observed figures come from the run analysis
(:mod:`synth.report.run_analysis`).
"""


import numpy as np
import astropy.units as u

from .errors import ConfigError
from .config import object_name
from .fitsio import write_cube
from .rundir import run_path

__all__ = ["make_instrument", "observe_setups", "observe_options", "map_keywords",
           "check_setups", "python_name", "python_value", "INSTRUMENT_KEYS", "OBSERVE_KEYS",
           "RUN_ONLY_KEYS"]


#: unit suffixes of config keys and the unit of the Python argument without the suffix
UNIT_SUFFIXES = {"_arcsec": u.arcsec, "_deg": u.deg, "_kms": u.km / u.s, "_m": u.m,
                 "_h": u.hr, "_s": u.s, "_k": u.K}
#: [[setup]] keys that build the instrument (synth.Dish / synth.Array), per kind
INSTRUMENT_KEYS = {
    "dish": ("name", "diameter_m", "beam_arcsec", "main_beam_efficiency", "tsys_k",
             "fwhm_factor", "n_pol", "latitude_deg", "elevation_limit_deg", "hour_angles_h",
             "zenith_opacity", "receiver_temperature_k", "atmosphere_temperature_k"),
    "array": ("name", "antennas", "diameter_m", "latitude_deg", "elevation_limit_deg",
              "aperture_efficiency", "system_efficiency", "tsys_k", "fwhm_factor",
              "primary_beam_shape", "n_pol", "zenith_opacity", "receiver_temperature_k",
              "atmosphere_temperature_k"),
}
#: [[setup]] keys passed to synth.observe, per kind
MAP_SETUP_KEYS = ("map_size_arcsec", "map_offset_arcsec", "pixel_arcsec",
                  "pointing_spacing_arcsec", "guard_band_arcsec", "max_pointings")
OBSERVE_KEYS = {
    "dish": ("channel_width_kms", "hanning", "integration_time_h", "rms_k", "noise", "seed")
    + MAP_SETUP_KEYS,
    "array": ("channel_width_kms", "hanning", "integration_time_h", "noise", "seed",
              "pointing_pattern", "hour_angles_h", "sample_interval_s", "weighting", "robust",
              "deconvolver", "clean_stop_sigma", "clean_max_components", "clean_loop_gain",
              "clean_scales_arcsec", "clean_mask_sigma", "primary_beam_cutoff",
              "correct_primary_beam", "dish_flux_scale", "phase_rms_deg", "phase_interval_s")
    + MAP_SETUP_KEYS,
}
#: [[setup]] keys with no Python argument: they organise the run
RUN_ONLY_KEYS = ("kind", "combine_with", "write_visibilities")


def python_name(key):
    """The Python argument of a config key, and its unit: the key without its unit suffix
    (``integration_time_h`` -> ``integration_time`` in hours); the beam's key builds a Beam."""
    if key == "beam_arcsec":
        return "beam", u.arcsec
    for suffix, unit in UNIT_SUFFIXES.items():
        if key.endswith(suffix):
            return key[: -len(suffix)], (u.hourangle if key == "hour_angles_h" else unit)
    return key, None


def python_value(key, value):
    """A config value as the Python argument takes it (a Quantity where the key has a unit)."""
    name, unit = python_name(key)
    if value is None or unit is None:
        return value
    if key == "map_size_arcsec" and not isinstance(value, list):
        value = [value]
    q = value * unit if not isinstance(value, list) else np.asarray(value, float) * unit
    if key == "beam_arcsec":
        from radio_beam import Beam
        return Beam(q)
    return q


def _python_kwargs(st, keys):
    out = {}
    for key in keys:
        if st.get(key) is not None:
            out[python_name(key)[0]] = python_value(key, st[key])
    return out


def _required_keys(st):
    """The keys a [[setup]] table cannot do without, checked before any instrument module is
    imported (those imports take a second or more)."""
    if st["kind"] == "dish":
        if st["beam_arcsec"] is None and (st["diameter_m"] is None):
            raise ConfigError(f"setup '{st['name']}' (dish) needs diameter_m or beam_arcsec")
        return
    if st["antennas"] is None:
        raise ConfigError(f"setup '{st['name']}' (array) needs 'antennas'")
    if st["tsys_k"] is None and st.get("zenith_opacity") is None:
        raise ConfigError(f"setup '{st['name']}' (array) needs 'tsys_k' (or zenith_opacity "
                          "with receiver_temperature_k)")


def make_instrument(st):
    """The instrument object a [[setup]] table describes."""
    _required_keys(st)
    if st["kind"] == "dish":
        from .instrument.single_dish import Dish
        return Dish(**_python_kwargs(st, INSTRUMENT_KEYS["dish"]))
    from .instrument.interferometer import Array  # after the cheap checks
    return Array(**_python_kwargs(st, INSTRUMENT_KEYS["array"]))


def map_keywords(st, beyond_box="empty"):
    """The map keyword arguments of synth.observe for a [[setup]] table."""
    kw = {"beyond_box": beyond_box,
          **_python_kwargs(st, MAP_SETUP_KEYS + (("pointing_pattern",)
                                                  if st["kind"] == "array" else ()))}
    return kw


def observe_options(st, beyond_box="empty"):
    """Keyword arguments of synth.observe for a [[setup]] table."""
    kw = {"beyond_box": beyond_box, **_python_kwargs(st, OBSERVE_KEYS[st["kind"]])}
    if st["kind"] == "dish" and st["rms_k"] is None and st["noise"] and (
            st["integration_time_h"] is None
            or (st["tsys_k"] is None and st["zenith_opacity"] is None)):
        raise ConfigError(f"setup '{st['name']}' adds noise: give rms_k, or tsys_k and "
                          "integration_time_h (or set noise = false; zenith_opacity replaces "
                          "tsys_k)")
    return kw


def _dish_options(st):
    """dish_options of a dish setup feathered into an array setup (its own time and seed)."""
    kw = {"noise": st["noise"], "seed": st["seed"]}
    if st["rms_k"] is not None:
        kw["rms"] = st["rms_k"] * u.K
    if st["integration_time_h"] is not None:
        kw["integration_time"] = st["integration_time_h"] * u.hr
    return kw


def check_setups(conf, lines, sky_size_arcsec):
    """Every setup's instrument and map layout for every tracer line, before any synthesis:
    a bad setup (missing key, map smaller than a beam, spacing wider than the primary beam,
    too many pointings, pixel too coarse) is refused here in one line naming the setup.
    ``sky_size_arcsec`` is the (width, height) of the ideal cubes. Returns the layouts
    ``{(tracer, setup): MapLayout}``."""
    for st in conf["setup"]:
        _required_keys(st)
    from .errors import InstrumentError
    from .instrument.mapping import array_layout, dish_layout, map_options
    layouts = {}
    setups = {st["name"]: st for st in conf["setup"]}
    for st in conf["setup"]:
        inst = make_instrument(st)
        mkw = map_keywords(st, conf["sky"]["beyond_box"])
        where = f"setup '{st['name']}': "
        try:
            mopts = map_options(**mkw)
            for tr, line in zip(conf["tracer"], lines):
                nu = line.frequency.to_value(u.Hz)
                if st["kind"] == "dish":
                    lay = dish_layout(None, inst, mopts, nu, where, model_size=sky_size_arcsec)
                else:
                    arrays = [inst] + [make_instrument(setups[o]) for o in st["combine_with"] or []
                                       if setups[o]["kind"] == "array"]
                    opts = {"hour_angles": tuple(st["hour_angles_h"]) * u.hourangle, "sample_interval": st["sample_interval_s"] * u.s}
                    dec = np.deg2rad(conf["sky"]["dec_deg"])
                    lay, _ = array_layout(None, arrays, opts, mopts, dec, np.array([nu]), where,
                                          model_size=sky_size_arcsec)
                layouts[(tr["name"], st["name"])] = lay
        except InstrumentError as exc:
            raise ConfigError(_config_message(str(exc), where)) from None
    return layouts


#: what a layout error names, and the [[setup]] key that sets it
_LAYOUT_KEYS = (("map_size", "map_size_arcsec"), ("map_offset", "map_offset_arcsec"),
                ("pointing_spacing", "pointing_spacing_arcsec"), ("pixel", "pixel_arcsec"),
                ("guard_band", "guard_band_arcsec"), ("pointing_pattern", "pointing_pattern"),
                ("max_pointings", "max_pointings"))


def _config_message(msg, where):
    """A layout error in config terms: "setup 'name': <config key>: ..."."""
    body = msg[len(where):] if msg.startswith(where) else msg
    for label, key in _LAYOUT_KEYS:
        if body.startswith(label + ":"):
            body = f"{key}:{body[len(label) + 1:]}"
            break
    return where + body


def observe_setups(conf, ideal, tmp, chash, progress, log, executor=None, after=None,
                   draw=None):
    """Observe every ideal cube with every setup; write cubes and figures.

    The observations are independent (each has its own seed) and run side by side: on
    threads, or as tasks of ``executor`` when it is a dask cluster (synth.sweep.map_jobs);
    files are written here as results arrive, the summary in the setups' order. ``after``,
    if given, is called as ``after(tracer, setup, ideal cube, observed map)`` once an
    observation is done (on its thread; here for a dask cluster), e.g. to analyse it while
    other observations run. ``draw``, a process pool (synth.report.drawing), draws the uv
    figures.
    Returns (summary, observed): the per-setup summary dict and ``{(tracer, setup): cube}``.
    """
    from .parallel import DaskExecutor
    setups = {st["name"]: st for st in conf["setup"]}
    instruments = {name: make_instrument(st) for name, st in setups.items()}
    figures = conf["output"]["figures"]
    # dishes first, then arrays, then combinations (they feather with the dish's own cube)
    order = sorted(setups, key=lambda n: (setups[n]["kind"] != "dish",
                                          bool(setups[n]["combine_with"])))
    jobs = [(t, s) for t in ideal for s in order]
    beyond = conf["sky"]["beyond_box"]
    args = [(ideal[t], *_observe_args(setups, instruments, s, beyond)) for t, s in jobs]
    remote = isinstance(executor, DaskExecutor)
    then = [() if (after is None or remote) else (after, t, s) for t, s in jobs]
    from concurrent.futures import ThreadPoolExecutor
    side = ThreadPoolExecutor(1)   # the uv figures need no observation: drawn meanwhile
    uv = None
    if figures:            # in the drawing process (synth.report.drawing) when there is one
        uv = (side if draw is None else draw).submit(_uv_figures, setups, instruments,
                                                     {k: v for k, v in list(ideal.items())[:1]},
                                                     tmp)
    layouts, first = [], jobs[0][0] if jobs else None

    def arrived(tname, sname, omap):     # a setup's layout, drawn aside as soon as it can be
        if figures and draw is not None and tname == first:
            layouts.append(draw.submit(_layout_one, sname, omap, tmp))
    try:
        done = _observe_jobs(conf, tmp, chash, progress, setups, jobs, args, then, after,
                             remote, executor, arrived)
        summary, observed = {}, {}
        for i, (tname, sname) in enumerate(jobs):
            summary.setdefault(sname, {})[tname] = done[i][0]
            observed[(tname, sname)] = done[i][1]
        if figures:
            uv.result()     # first: both draw with pyplot, which is not thread-safe
            if draw is None:
                _layout_figures(setups, observed, tmp)
            for job in layouts:
                job.result()
    finally:
        side.shutdown(wait=True, cancel_futures=True)
    return summary, observed


def _observe_jobs(conf, tmp, chash, progress, setups, jobs, args, then, after, remote,
                  executor, arrived=None):
    """Run the observation jobs; write each one's files as it arrives (then call
    ``arrived(tracer, setup, observed map)`` if given). {index: (summary entry, observed
    map)}."""
    from tqdm.auto import tqdm
    from .sweep import map_jobs
    done = {}
    bar = tqdm(total=len(jobs), desc="observations", unit="obs", disable=not progress)
    for i, omap in map_jobs(_observe_one, [a + b for a, b in zip(args, then)], executor):
        tname, sname = jobs[i]
        cube, inst, kw = args[i]
        if after is not None and remote:
            after(tname, sname, cube, omap)
        _write_observation(omap, run_path(tmp, f"{tname}_{sname}"), chash,
                           dict(_model_cards(cube), OBJECT=object_name(conf), TELESCOP=sname,
                                SETUP=sname, TRACER=tname))
        if setups[sname]["kind"] == "array" and setups[sname]["write_visibilities"]:
            _write_visibilities(cube, inst, kw, run_path(tmp, f"{tname}_{sname}"),
                                object_name(conf))
        if arrived is not None:
            arrived(tname, sname, omap)
        entry = _obs_summary(omap.cube)
        entry.update(n_pointings=omap.layout.n_pointings, layout=omap.layout.describe(),
                     pixel_arcsec=float(abs(omap.cube.wcs.wcs.cdelt[0]) * 3600),
                     map_shape=list(omap.cube.shape[1:]))
        done[i] = (entry, omap)
        bar.update(1)
    bar.close()
    return done


def _observe_args(setups, instruments, sname, beyond):
    """(instrument or list of instruments, observe keywords) of one setup."""
    st = setups[sname]
    inst, kw = instruments[sname], observe_options(st, beyond)
    if st["combine_with"]:
        inst = [inst] + [instruments[o] for o in st["combine_with"]]
        dish = [o for o in st["combine_with"] if setups[o]["kind"] == "dish"]
        if dish:
            kw["dish_options"] = _dish_options(setups[dish[0]])
    return inst, kw


def _observe_one(cube, inst, kw, after=None, tname=None, sname=None):
    """One observation (a job of observe_setups; runs on a thread or a dask worker), then
    ``after`` of it if given."""
    from .instrument.observe import observe
    omap = observe(cube, inst, with_maps=True, **kw)
    if after is not None:
        after(tname, sname, cube, omap)
    return omap


#: cards of the ideal cube that every observation of it repeats (the line, its excitation
#: and abundance, the geometry)
MODEL_CARDS = ("LINE", "EXCIT", "ABUND", "DISTPC", "LOS", "TBG")


def _model_cards(cube):
    meta = {str(k).upper(): v for k, v in cube.meta.items()}
    return {k: meta[k] for k in MODEL_CARDS if k in meta}


def _write_visibilities(cube, inst, kw, base, object_name):
    """One UVFITS file per pointing: ``<base>_p<k>.uvfits`` (synth.instrument.uvfits)."""
    from .instrument.array_observe import simulate_visibilities
    from .instrument.observe import observe_spectral
    from .instrument.uvfits import write_uvfits
    arrays = [i for i in (inst if isinstance(inst, list) else [inst])
              if type(i).__name__ == "Array"]
    opts = {k: v for k, v in kw.items() if k not in ("hanning", "channel_width",
                                                     "dish_options", "correct_primary_beam")}
    spectral = observe_spectral(cube, kw)
    for k, p in enumerate(simulate_visibilities(spectral, arrays, **opts)):
        write_uvfits(f"{base}_p{k + 1}.uvfits", p["tracks"], p["vis"], p["freqs_hz"],
                     p["arrays"], p["ra_deg"], p["dec_deg"], p["hour_angle_rad"],
                     object_name=object_name, sample_time_s=p["sample_time_s"])


def _write_observation(omap, base, chash, extra):
    """The observed cube in Jy/beam and K; for an array also the uncorrected (flat-noise)
    cube and the sensitivity map."""
    from .fitsio import write_image
    from .instrument.beam import to_unit
    obs = omap.cube
    unit = obs.unit.to_string()
    write_cube(obs, f"{base}_{'jyb' if 'Jy' in unit else 'k'}.fits", chash, extra)
    other = to_unit(obs, "K" if "Jy" in unit else "Jy/beam")
    write_cube(other, f"{base}_{'k' if 'Jy' in unit else 'jyb'}.fits", chash, extra)
    if omap.uncorrected is not omap.cube:
        flat = to_unit(omap.uncorrected, "Jy/beam")
        write_cube(flat, f"{base}_flat_jyb.fits", chash, extra)
        hdr = obs.wcs.celestial.to_header()
        hdr["BUNIT"] = omap.sensitivity.unit.to_string("fits")
        hdr["BTYPE"] = "Noise"
        hdr["COMMENT"] = "theoretical noise per channel of the corrected map (middle channel)"
        write_image(np.where(np.isfinite(omap.sensitivity.value), omap.sensitivity.value,
                             np.nan), hdr, f"{base}_sensitivity.fits", chash, extra)


def _obs_summary(obs):
    beams = getattr(obs, "beams", None)          # a beam per channel: the middle one
    beam = obs.beam if beams is None else obs.unmasked_beams[obs.shape[0] // 2]
    meta = {k.upper(): v for k, v in obs.meta.items()}
    from .instrument.beam import unit_name
    return {"unit": unit_name(obs.unit),
            "beam_major_arcsec": float(beam.major.to_value(u.arcsec)),
            "beam_minor_arcsec": float(beam.minor.to_value(u.arcsec)),
            "beam_pa_deg": float(beam.pa.to_value(u.deg)),
            "noise_rms": _num(meta.get("NOISERMS")), "noise_unit": str(meta.get("NOISEUNI", "")),
            "seed": _num(meta.get("NSEED")), "channels": int(obs.shape[0]),
            "peak": float(np.nanmax(obs.unmasked_data[:].value))}


def _num(v):
    try:
        return float(v)
    except (TypeError, ValueError):
        return None


def _layout_figures(setups, observed, tmp):
    """One figure per setup: its pointings (or dish map positions) over the first tracer's
    moment-0 map."""
    done = set()
    for (tname, sname), omap in observed.items():
        if sname in done:
            continue
        done.add(sname)
        _layout_one(sname, omap, tmp)


def _layout_one(sname, omap, tmp):
    from .report.figures import layout_figure
    layout_figure(omap, f"{sname}: {omap.layout.describe()}",
                  run_path(tmp, f"layout_{sname}.png"))


def _uv_figures(setups, instruments, ideal, tmp):
    from .instrument.imaging import plot_uv_and_beam
    cube = next(iter(ideal.values()))
    dec = cube.wcs.celestial.wcs.crval[1] * u.deg
    freq = cube.wcs.wcs.restfrq * u.Hz
    for name, st in setups.items():
        if st["kind"] != "array":
            continue
        plot_uv_and_beam(instruments[name], dec,
                         tuple(st["hour_angles_h"]) * u.hourangle,
                         st["sample_interval_s"] * u.s, run_path(tmp, f"uv_{name}.png"), freq)
