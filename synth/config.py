"""Run configuration: a TOML file with sections of our own naming, validated against a schema.

Sections: ``[cloud]`` (the snapshot), ``[sky]`` (where the cloud is), ``[channels]`` (the ideal
cube's spectral grid), ``[[tracer]]`` (one per line, several per run), ``[output]``,
``[[setup]]`` (observing setups, one per instrument), ``[sweep]`` (setups expanded over
lists of values, synth/sweep.py) and ``[analysis]`` (survival metrics, spectra and planning
in the run report). Unknown or misspelled keys are errors that suggest
the nearest valid key; values are checked for type and range. The schema below is the config
reference (docs/config.md mirrors it; a test keeps them in step).
"""

import difflib
import math
import os
import tomllib
import warnings

from .errors import ConfigError, SynthWarning
from .rundir import check_name

__all__ = ["SCHEMA", "load_config", "validate_config", "SETUP_KINDS", "REMOVED_KEYS", "RENAMED_KEYS",
           "object_name"]

# key -> (types, default, description); default None = optional, REQUIRED = must be given
REQUIRED = object()
_NUM = (int, float)

CLOUD = {
    "source": (str, "demo", '"demo" (the invented demo cloud) or a path to a snapshot file'),
    "format": (str, None, 'file format: "npz", "hdf5", "fits" or "yt" (default: from the file name)'),
    "fields": (dict, None, "HDF5/FITS/yt field mapping, e.g. {n_h2 = \"/gas/nH2\", t_kin = ...}"),
    "cell_size_pc": (_NUM, None, "cell edge length in pc (required unless the file records it)"),
    "sigma_turb_kms": (_NUM, None, "microturbulent 1-D dispersion in km/s (default: the file's, or 0)"),
    "cells": (int, 64, "demo cloud: cells per axis"),
    "seed": (int, 1, "demo cloud: random seed"),
    "box_pc": (_NUM, 4.0, "demo cloud: box edge length, pc"),
    "mean_n_h2_cm3": (_NUM, 3e3, "demo cloud: volume-averaged n(H2), cm^-3"),
    "mach": (_NUM, 10.0, "demo cloud: 3-D turbulent Mach number"),
    "solenoidal_fraction": (_NUM, 0.7, "demo cloud: solenoidal share of the turbulent power"),
    "level": (int, 0, "yt: refinement level of the covering grid"),
    "edges": (str, "nearest", 'rotated views: "nearest" (edge cells continue to the box faces) or "periodic" (periodic box)'),
}
SKY = {
    "distance_pc": (_NUM, REQUIRED, "distance to the cloud in pc"),
    "ra_deg": (_NUM, 120.0, "right ascension of the map centre, deg (default: a neutral 120)"),
    "dec_deg": (_NUM, 10.0, "declination of the map centre, deg (default: a neutral +10)"),
    "systemic_velocity_kms": (_NUM, 0.0, "added to the model's line-of-sight velocities, km/s"),
    "line_of_sight": ((str, dict), "z", '"z", "-z", "x", "-x", "y", "-y" or {euler_deg = [a, b, c]}'),
    "background_k": (_NUM, 2.725, "background temperature, K (the CMB); also the field LVG populations see"),
    "beyond_box": (str, "empty", 'sky outside the model box: "empty" (an isolated cloud) or '
                   '"repeat" (a periodic simulation box tiles the sky)'),
    "object": (str, None, ('name in the OBJECT card of every FITS file (default: "demo cloud", '
                           "or the snapshot file's name without its extension)")),
}
CHANNELS = {
    "width_kms": (_NUM, REQUIRED, "channel width of the ideal cube, km/s"),
    "velocity_min_kms": (_NUM, None, "lower edge of the first channel (default: automatic)"),
    "velocity_max_kms": (_NUM, None, "upper edge of the last channel (default: automatic)"),
}
TRACER = {
    "species": (str, REQUIRED, "species name (see `synth lines`)"),
    "transition": (str, REQUIRED, 'transition label, e.g. "1-0"'),
    "abundance": (_NUM, REQUIRED, "abundance relative to H2"),
    "excitation": (str, "lte", '"lte" or "lvg"'),
    "t_ex_k": (_NUM, None, "LTE only: a fixed excitation temperature instead of T_kin"),
    "datafile": (str, None, "a Leiden-format molecular data file for this species"),
    "geometry": (str, None, 'LVG escape-probability geometry: "expanding" (Sobolev flow, '
                 'the default), "uniform-sphere" or "plane-slab"'),
    "ortho_para_ratio": (_NUM, None, "LVG: fixed H2 ortho/para ratio (default thermal)"),
    "accuracy": (_NUM, None, "LVG: table accuracy in T_R (default 0.01)"),
    "max_escape_length_pc": (_NUM, None, "LVG: cap on the Sobolev length, pc (default box size)"),
    "hyperfine": (bool, None, "split the line into its hyperfine components (default: where "
                              "data exist, HCN 1-0 and N2H+ 1-0); false keeps it averaged"),
    "name": (str, None, "label used in file names (default species_transition)"),
}
OUTPUT = {
    "products": (list, [], 'extra products: "tau" (optical-depth cube), "column" (column density map)'),
    "figures": (bool, True, "write PNG figures"),
}
SETUP_KINDS = ("dish", "array")
SETUP = {
    "name": (str, REQUIRED, "label used in file names"),
    "kind": (str, REQUIRED, '"dish" or "array"'),
    "diameter_m": (_NUM, None, "antenna diameter, m (dish: this or beam_arcsec; array: "
                   "default the layout's own)"),
    "main_beam_efficiency": (_NUM, 0.7, "dish: main-beam efficiency (divides the radiometer "
                             "noise; the output is main-beam temperature)"),
    "aperture_efficiency": (_NUM, 0.7, "array: aperture efficiency of the antennas"),
    "system_efficiency": (_NUM, 0.9, "array: digital and correlator losses of the radiometer "
                          "equation, one factor"),
    "tsys_k": (_NUM, None, "system temperature, K (needed for radiometer noise unless "
               "zenith_opacity is given)"),
    "fwhm_factor": (_NUM, 1.13, "beam (dish) or primary-beam (array) FWHM in units of "
                    "lambda/D: 1.02 uniform illumination, 1.13 typical taper"),
    "primary_beam_shape": (str, "gaussian", 'array: "gaussian" or "airy"'),
    "beam_arcsec": (_NUM, None, "dish: a fixed circular beam FWHM instead of the diameter"),
    "channel_width_kms": (_NUM, None, "output channel width, km/s (default: the ideal cube's)"),
    "hanning": (bool, False, "Hanning-smooth the spectra"),
    "integration_time_h": (_NUM, None, "integration time, hours (noise from the radiometer equation)"),
    "rms_k": (_NUM, None, "dish: noise rms per channel in K instead of the radiometer equation"),
    "noise": (bool, True, "add thermal noise"),
    "n_pol": (int, 2, "polarisations recorded and averaged (1 or 2; noise / sqrt(n_pol))"),
    "seed": (int, 1, "noise seed"),
    "antennas": (str, None, 'array: a built-in layout name or a CSV file'),
    "latitude_deg": (_NUM, 8.0, "site latitude, deg (default: an invented site at +8; a dish "
                     "uses it with zenith_opacity: T_sys follows the elevation)"),
    "elevation_limit_deg": (_NUM, 15.0, "samples (array) or parts of the track (dish) with the "
                            "source lower than this are dropped, deg"),
    "hour_angles_h": (list, [-2.0, 2.0], "[first, last] hour angle of the track, h (a dish: "
                      "its track for T_sys)"),
    "sample_interval_s": (_NUM, 300.0, "array: visibility sampling interval, s"),
    "weighting": (str, "natural", 'array: "natural", "uniform" or "robust"'),
    "robust": (_NUM, 0.5, "array: Briggs robust parameter (with weighting = \"robust\")"),
    "combine_with": (list, None, "array: other setup names to image jointly / feather with"),
    "map_size_arcsec": ((int, float, list), None, "width (or [width, height]) of the area to "
                        "map, arcsec (default: the whole model)"),
    "map_offset_arcsec": (list, None, "[east, north] offset of the area's centre from the "
                          "[sky] position, arcsec (default [0, 0])"),
    "pixel_arcsec": (_NUM, None, "output pixel, arcsec (default: the model's, or beam FWHM / 4 "
                     "when that is finer; the model is resampled, conserving flux)"),
    "pointing_pattern": (str, "hexagonal", 'array: "hexagonal" or "rectangular" mosaic, or '
                         '"single" (one pointing at the centre)'),
    "pointing_spacing_arcsec": (_NUM, None, "array: mosaic pointing spacing, dish: map position "
                                "spacing, arcsec (default: Nyquist for the primary beam / beam)"),
    "max_pointings": (int, 500, "array: refuse mosaics with more pointings"),
    "guard_band_arcsec": (_NUM, None, "dish: extra width mapped on every side of the area, "
                          "arcsec (default 1.5 beam FWHM)"),
    "primary_beam_cutoff": (_NUM, 0.2, "array: the corrected map is blank where the relative "
                            "response is below this"),
    "correct_primary_beam": (bool, True, "array: the main product is the primary-beam-"
                             "corrected map, with the flat-noise map beside it (false: the "
                             "flat-noise map alone)"),
    "dish_flux_scale": (_NUM, 1.0, "array feathered with a dish: factor on the dish image"),
    "phase_rms_deg": (_NUM, 0.0, "array: rms of antenna phase errors, deg, drawn per antenna "
                      "and interval (seeded by seed)"),
    "phase_interval_s": (_NUM, None, "array: interval of the phase errors, s (default: "
                         "sample_interval_s)"),
    "deconvolver": (str, "hogbom", 'array: "hogbom" (Högbom CLEAN), "multiscale" '
                    '(multi-scale CLEAN, for extended emission) or "none" (the dirty image)'),
    "clean_stop_sigma": (_NUM, 3.0, "array: CLEAN stops when the peak residual is below this "
                         "many image-noise sigma"),
    "clean_max_components": (int, 5000, "array: CLEAN stops after this many components per "
                             "image"),
    "clean_loop_gain": (_NUM, 0.1, "array: fraction of the peak residual taken per component"),
    "clean_scales_arcsec": (list, None, "array, multiscale: component FWHMs, arcsec (default: "
                            "0, then twice the beam doubled up to half the largest scale)"),
    "clean_mask_sigma": (_NUM, None, "array: CLEAN only inside a mask grown from the dirty "
                         "image at this many sigma (dilated by a beam); default no mask"),
    "write_visibilities": (bool, False, "array: also write the simulated visibilities, one "
                           "random-group UVFITS file per pointing"),
    "zenith_opacity": (_NUM, None, "zenith opacity; with receiver_temperature_k (and a "
                       "dish's latitude_deg), T_sys "
                       "follows each sample's elevation instead of tsys_k"),
    "receiver_temperature_k": (_NUM, None, "receiver temperature T_rx, K (with "
                               "zenith_opacity)"),
    "atmosphere_temperature_k": (_NUM, 270.0, "effective temperature of the "
                                 "atmosphere, K (with zenith_opacity)"),
}
#: config keys that no longer exist, with what replaced them
#: config keys that were renamed: old key -> what to write instead
RENAMED_KEYS = {"efficiency": "main_beam_efficiency (dish) or aperture_efficiency (array)",
                "taper": "fwhm_factor",
                "hour_angle_start_h": "hour_angles_h = [start, stop]",
                "hour_angle_stop_h": "hour_angles_h = [start, stop]",
                "deconvolve": 'deconvolver = "hogbom", "multiscale" or "none"',
                "scales_arcsec": "clean_scales_arcsec",
                "size": "cells",
                "mean_density_cm3": "mean_n_h2_cm3"}
REMOVED_KEYS = {                "fast": "removed: the approximate Fourier-plane path was dropped (it measured "
                        "a 24-28 % peak error on white-noise skies); every array setup predicts "
                        "visibilities"}
ANALYSIS = {
    "target_snr": (_NUM, 5.0, "planning: S/N wanted per channel on the chosen percentile"),
    "percentile": (_NUM, 50.0, "planning: percentile of the emitting voxels to reach (0-100)"),
    "emission_floor": (_NUM, 0.01, "voxels above this fraction of the peak count as emitting"),
    "time_h": (_NUM, None, "planning: hours for the noise column (default: each setup's)"),
    "spectra_positions": (list, None, "spectra pixels [[x, y], ...] (default: centre, brightest)"),
    "statistic_targets": (dict, None, "planning: {statistic = uncertainty}, e.g. {power_slope "
                          "= 0.05}: the observing time for each to be measured that well, "
                          "from the noise realisations (needs statistics = true and "
                          "noise_realisations >= 2)"),
    "noise_realisations": (int, 1, "survival metrics over this many seeded noise realisations "
                           "(mean and _std columns); 1 = the one observation"),
    "statistics": (bool, False, "survival of statistics: power and Delta-variance slopes, "
                   "PDFs, centroids, dendrograms, ideal vs observed (docs/analysis.md)"),
}
SCHEMA = {"cloud": CLOUD, "sky": SKY, "channels": CHANNELS, "tracer": TRACER,
          "output": OUTPUT, "setup": SETUP, "analysis": ANALYSIS}
_LISTS = ("tracer", "setup")  # array-of-tables sections


def _suggest(word, options):
    near = difflib.get_close_matches(word, list(options), n=1, cutoff=0.5)
    return f"; did you mean '{near[0]}'?" if near else f"; valid: {', '.join(sorted(options))}"


def _check_table(table, spec, where):
    out = {}
    for key, value in table.items():
        if key in REMOVED_KEYS and key not in spec:
            raise ConfigError(f"{where}.{key}: {REMOVED_KEYS[key]}; delete the key")
        if key in RENAMED_KEYS and key not in spec:
            raise ConfigError(f"{where}.{key} was renamed to {RENAMED_KEYS[key]}")
        if key not in spec:
            raise ConfigError(f"unknown key '{key}' in {where}{_suggest(key, spec)}")
        if value is None:  # only from an already-validated dict (TOML has no null)
            continue
        types = spec[key][0]
        types = types if isinstance(types, tuple) else (types,)
        if isinstance(value, bool) and bool not in types:
            raise ConfigError(f"{where}.{key} must be {_tname(types)}, got {value!r}")
        if not isinstance(value, types):
            raise ConfigError(f"{where}.{key} must be {_tname(types)}, got {value!r}")
        out[key] = value
    for key, (_, default, _) in spec.items():
        if key not in out:
            if default is REQUIRED:
                raise ConfigError(f"{where} needs '{key}' ({spec[key][2]})")
            out[key] = list(default) if isinstance(default, list) else default
    return out


def _tname(types):
    names = {int: "an integer", float: "a number", str: "a string", bool: "true or false",
             dict: "a table", list: "a list"}
    return " or ".join(dict.fromkeys(names[t] for t in types if t in names))


def validate_config(raw):
    """Check a parsed config dict; return a complete one with defaults filled in."""
    if not isinstance(raw, dict):
        raise ConfigError("a configuration must be a TOML table")
    from .sweep import expand_sweep   # [sweep] -> more [[setup]] tables (synth/sweep.py)
    raw, sweep = expand_sweep(raw)
    for section in raw:
        if section not in SCHEMA:
            raise ConfigError(f"unknown section [{section}]{_suggest(section, SCHEMA)}")
    conf = {}
    for section, spec in SCHEMA.items():
        if section in _LISTS:
            items = raw.get(section, [])
            if isinstance(items, dict):
                items = [items]
            if not isinstance(items, list) or not all(isinstance(t, dict) for t in items):
                raise ConfigError(f"[[{section}]] must be a list of tables")
            conf[section] = [_check_table(t, spec, f"[[{section}]] #{i + 1}")
                             for i, t in enumerate(items)]
        else:
            table = raw.get(section, {})
            if not isinstance(table, dict):
                raise ConfigError(f"[{section}] must be a table")
            conf[section] = _check_table(table, spec, f"[{section}]")
    _check_values(conf)
    if sweep is not None:
        conf["sweep"] = sweep
    return conf


def _check_values(conf):
    raw_names = [tr["name"] for tr in conf["tracer"]]
    _check_numbers(conf)
    if not conf["tracer"]:
        raise ConfigError("the config needs at least one [[tracer]] (species, transition, abundance)")
    if conf["sky"]["distance_pc"] <= 0:
        raise ConfigError(f"[sky].distance_pc must be > 0, got {conf['sky']['distance_pc']}")
    from .snapshot.views import EDGE_MODES
    if conf["cloud"]["edges"] not in EDGE_MODES:
        raise ConfigError(f"[cloud].edges is '{conf['cloud']['edges']}'; valid: {', '.join(EDGE_MODES)}")
    bg = conf["sky"]["background_k"]
    if not (math.isfinite(bg) and bg > 0):
        raise ConfigError(f"[sky].background_k must be a finite temperature > 0 K, got {bg}")
    if conf["channels"]["width_kms"] <= 0:
        raise ConfigError(f"[channels].width_kms must be > 0, got {conf['channels']['width_kms']}")
    from .excitation.product import EXCITATION_METHODS
    names = set()
    for i, tr in enumerate(conf["tracer"]):
        if tr["excitation"] not in EXCITATION_METHODS:
            raise ConfigError(f"[[tracer]] #{i + 1}.excitation is '{tr['excitation']}'; valid: "
                              f"{', '.join(EXCITATION_METHODS)}")
        if tr["name"] is None:
            tr["name"] = f"{tr['species']}_{tr['transition']}".replace("+", "p")
        check_name(tr["name"], f"[[tracer]] #{i + 1}.name" if raw_names[i] is not None
                   else f"[[tracer]] #{i + 1} (its default name species_transition)")
        if tr["name"] in names:
            raise ConfigError(f"two tracers are named '{tr['name']}'; give one a different name")
        names.add(tr["name"])
    setups = set()
    for i, st in enumerate(conf["setup"]):
        if st["kind"] not in SETUP_KINDS:
            raise ConfigError(f"[[setup]] #{i + 1}.kind is '{st['kind']}'; valid: {', '.join(SETUP_KINDS)}")
        check_name(st["name"], f"[[setup]] #{i + 1}.name")
        if st["name"] in setups:
            raise ConfigError(f"two setups are named '{st['name']}'")
        setups.add(st["name"])
    for st in conf["setup"]:
        for other in st["combine_with"] or []:
            if other == st["name"]:
                raise ConfigError(f"[[setup]] '{st['name']}'.combine_with names the setup "
                                  "itself; name other setups")
            if other not in setups:
                raise ConfigError(f"[[setup]] '{st['name']}'.combine_with names '{other}', which "
                                  f"is not a setup; valid: {', '.join(sorted(setups))}")
        _check_map_keys(st)
    _check_setup_values(conf["setup"])
    if conf["sky"]["beyond_box"] not in ("empty", "repeat"):
        raise ConfigError(f"[sky].beyond_box is '{conf['sky']['beyond_box']}'; valid: "
                          "empty, repeat")
    for p in conf["output"]["products"]:
        if p not in ("tau", "column"):
            raise ConfigError(f"[output].products has '{p}'; valid: 'tau', 'column'")
    _check_analysis(conf["analysis"])


def _check_map_keys(st):
    """Types and ranges of the map keys of one [[setup]] (the layout itself is checked against
    the beam before any work, by the pipeline)."""
    where = f"setup '{st['name']}'"
    size = st["map_size_arcsec"]
    if size is not None:
        vals = size if isinstance(size, list) else [size]
        if not (1 <= len(vals) <= 2 and all(isinstance(v, (int, float)) and not
                                            isinstance(v, bool) and v > 0 for v in vals)):
            raise ConfigError(f"{where}: map_size_arcsec = {size!r}; give a width > 0 or "
                              "[width, height] in arcsec")
    off = st["map_offset_arcsec"]
    if off is not None and not (len(off) == 2 and all(isinstance(v, (int, float)) and not
                                                      isinstance(v, bool) for v in off)):
        raise ConfigError(f"{where}: map_offset_arcsec = {off!r}; give [east, north] in arcsec")
    for key in ("pixel_arcsec", "pointing_spacing_arcsec"):
        if st[key] is not None and not st[key] > 0:
            raise ConfigError(f"{where}: {key} = {st[key]!r}; must be > 0")
    if st["guard_band_arcsec"] is not None and not st["guard_band_arcsec"] >= 0:
        raise ConfigError(f"{where}: guard_band_arcsec = {st['guard_band_arcsec']!r}; "
                          "must be >= 0")
    if st["pointing_pattern"] not in ("hexagonal", "rectangular", "single"):
        raise ConfigError(f"{where}: pointing_pattern = '{st['pointing_pattern']}'; valid: "
                          "hexagonal, rectangular, single")
    if not st["phase_rms_deg"] >= 0:
        raise ConfigError(f"{where}: phase_rms_deg = {st['phase_rms_deg']}; must be >= 0")
    if st["phase_interval_s"] is not None and not st["phase_interval_s"] > 0:
        raise ConfigError(f"{where}: phase_interval_s = {st['phase_interval_s']}; must be > 0")
    if st["deconvolver"] not in ("hogbom", "multiscale", "none"):
        raise ConfigError(f"{where}: deconvolver = '{st['deconvolver']}'; valid: hogbom, "
                          "multiscale, none")
    if st["primary_beam_shape"] not in ("gaussian", "airy"):
        raise ConfigError(f"{where}: primary_beam_shape = '{st['primary_beam_shape']}'; valid: "
                          "gaussian, airy")
    sc = st["clean_scales_arcsec"]
    if sc is not None and not (sc and all(isinstance(v, (int, float)) and not
                                          isinstance(v, bool) and v >= 0 for v in sc)):
        raise ConfigError(f"{where}: clean_scales_arcsec = {sc!r}; give component FWHMs >= 0 in "
                          "arcsec, e.g. [0, 4, 8]")
    if sc is not None and st["deconvolver"] != "multiscale":
        raise ConfigError(f"{where}: clean_scales_arcsec = {sc!r} is for deconvolver = "
                          f"\"multiscale\"; this setup's deconvolver is "
                          f"\"{st['deconvolver']}\"")
    if st["clean_mask_sigma"] is not None and not st["clean_mask_sigma"] > 0:
        raise ConfigError(f"{where}: clean_mask_sigma = {st['clean_mask_sigma']}; must be > 0")
    if st["write_visibilities"] and st["kind"] != "array":
        raise ConfigError(f"{where}: write_visibilities = true needs kind = \"array\" (a "
                          "single dish records no visibilities)")
    tau = st["zenith_opacity"]
    if tau is not None:
        if not tau > 0:
            raise ConfigError(f"{where}: zenith_opacity = {tau}; must be > 0")
        if st["receiver_temperature_k"] is None or not st["receiver_temperature_k"] > 0:
            raise ConfigError(f"{where}: zenith_opacity needs receiver_temperature_k > 0 "
                              f"(got {st['receiver_temperature_k']})")
    if not st["atmosphere_temperature_k"] > 0:
        raise ConfigError(f"{where}: atmosphere_temperature_k = "
                          f"{st['atmosphere_temperature_k']}; must be > 0")
    if st["n_pol"] not in (1, 2):
        raise ConfigError(f"{where}: n_pol = {st['n_pol']}; valid: 1 or 2")
    if st["max_pointings"] < 1:
        raise ConfigError(f"{where}: max_pointings = {st['max_pointings']}; must be >= 1")
    if not 0 < st["primary_beam_cutoff"] < 1:
        raise ConfigError(f"{where}: primary_beam_cutoff = {st['primary_beam_cutoff']}; "
                          "valid: 0 < cutoff < 1")


def _walk_numbers(value, where):
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _walk_numbers(v, f"{where}.{k}")
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _walk_numbers(v, f"{where}[{i}]")
    elif isinstance(value, float):
        yield where, value


def _check_numbers(conf):
    """Finite numbers everywhere (TOML allows nan and inf) and the ranges of sky positions,
    abundances and channels, before any work."""
    for section, value in conf.items():
        items = value if section in _LISTS else [value]
        for i, table in enumerate(items):
            where = f"[[{section}]] #{i + 1}" if section in _LISTS else f"[{section}]"
            for key, v in _walk_numbers(table, where):
                if not math.isfinite(v):
                    raise ConfigError(f"{key} is {v}; give a finite number")
    sky, chan = conf["sky"], conf["channels"]
    if not -90 <= sky["dec_deg"] <= 90:
        raise ConfigError(f"[sky].dec_deg is {sky['dec_deg']}; valid: -90 <= dec_deg <= 90")
    if not 0 <= sky["ra_deg"] < 360:
        raise ConfigError(f"[sky].ra_deg is {sky['ra_deg']}; valid: 0 <= ra_deg < 360")
    vmin, vmax = chan["velocity_min_kms"], chan["velocity_max_kms"]
    if (vmin is None) != (vmax is None):
        raise ConfigError("[channels] needs both velocity_min_kms and velocity_max_kms, or neither")
    if vmin is not None:
        if not vmin < vmax:
            raise ConfigError(f"[channels].velocity_max_kms ({vmax}) must be greater than "
                              f"velocity_min_kms ({vmin})")
        if chan["width_kms"] > vmax - vmin:
            raise ConfigError(f"[channels].width_kms is {chan['width_kms']}, wider than the band "
                              f"velocity_max_kms - velocity_min_kms = {vmax - vmin:g}; valid: "
                              f"0 < width_kms <= {vmax - vmin:g}")
    for i, tr in enumerate(conf["tracer"]):
        x = tr["abundance"]
        if isinstance(x, (int, float)) and not 0 < x < 1:
            raise ConfigError(f"[[tracer]] #{i + 1}.abundance is {x}; valid: 0 < abundance < 1 "
                              "(relative to H2)")
        if isinstance(x, (int, float)) and x > 1e-3:
            warnings.warn(f"[[tracer]] #{i + 1}.abundance is {x}, above 1e-3 (CO, the most "
                          "abundant tracer, has about 1e-4 relative to H2)", SynthWarning,
                          stacklevel=4)
    for i, st in enumerate(conf["setup"]):
        w = st["channel_width_kms"]
        if w is not None and not w > 0:
            raise ConfigError(f"[[setup]] #{i + 1}.channel_width_kms is {w}; valid: > 0")


_SETUP_RANGES = (  # key, test, what is valid
    ("diameter_m", lambda v: v > 0, "> 0"),
    ("main_beam_efficiency", lambda v: 0 < v <= 1, "0 < main_beam_efficiency <= 1"),
    ("aperture_efficiency", lambda v: 0 < v <= 1, "0 < aperture_efficiency <= 1"),
    ("system_efficiency", lambda v: 0 < v <= 1, "0 < system_efficiency <= 1"),
    ("tsys_k", lambda v: v > 0, "> 0"),
    ("fwhm_factor", lambda v: v > 0, "> 0"),
    ("beam_arcsec", lambda v: v > 0, "> 0"),
    ("integration_time_h", lambda v: v > 0, "> 0"),
    ("rms_k", lambda v: v > 0, "> 0"),
    ("seed", lambda v: v >= 0, ">= 0"),
    ("latitude_deg", lambda v: -90 <= v <= 90, "-90 <= latitude_deg <= 90"),
    ("elevation_limit_deg", lambda v: 0 <= v < 90, "0 <= elevation_limit_deg < 90"),
    ("sample_interval_s", lambda v: v > 0, "> 0"),
    ("clean_stop_sigma", lambda v: v >= 0, ">= 0"),
    ("clean_max_components", lambda v: v >= 0, ">= 0"),
    ("clean_loop_gain", lambda v: 0 < v <= 1, "0 < clean_loop_gain <= 1"),
    ("dish_flux_scale", lambda v: v > 0, "> 0"),
)
_WEIGHTINGS = ("natural", "uniform", "robust")


def _check_setup_values(setups):
    """Ranges of [[setup]] values, in config terms, before any instrument is built."""
    for i, st in enumerate(setups):
        where = f"[[setup]] #{i + 1} '{st['name']}'"
        for key, ok, valid in _SETUP_RANGES:
            if st[key] is not None and not ok(st[key]):
                raise ConfigError(f"{where}.{key} is {st[key]}; valid: {valid}")
        ha = st["hour_angles_h"]
        if not (len(ha) == 2 and all(isinstance(v, (int, float)) and not isinstance(v, bool)
                                     and -12 <= v <= 12 for v in ha) and ha[0] < ha[1]):
            raise ConfigError(f"{where}.hour_angles_h is {ha!r}; valid: [start, stop] in hours, "
                              "-12 <= start < stop <= 12")
        if st["weighting"] not in _WEIGHTINGS:
            raise ConfigError(f"{where}.weighting is '{st['weighting']}'; valid: "
                              f"{', '.join(_WEIGHTINGS)}")


def _check_analysis(an):
    checks = (("target_snr", an["target_snr"] > 0, "> 0"),
              ("percentile", 0 <= an["percentile"] <= 100, "in 0..100"),
              ("emission_floor", 0 < an["emission_floor"] < 1, "in (0, 1)"),
              ("time_h", an["time_h"] is None or an["time_h"] > 0, "> 0"))
    for key, ok, valid in checks:
        if not ok:
            raise ConfigError(f"[analysis].{key} must be {valid}, got {an[key]}")
    if an["noise_realisations"] < 1:
        raise ConfigError(f"[analysis].noise_realisations must be >= 1 (1 = none repeated), "
                          f"got {an['noise_realisations']}")
    targets = an["statistic_targets"]
    if targets is not None:
        from .analysis.statistics import STATISTICS
        for name, value in targets.items():
            if name not in STATISTICS:
                raise ConfigError(f"[analysis].statistic_targets has '{name}'; valid: "
                                  f"{', '.join(STATISTICS)}")
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0:
                raise ConfigError(f"[analysis].statistic_targets.{name} = {value!r}; valid: "
                                  "an uncertainty > 0 in the statistic's unit")
        if not an["statistics"] or an["noise_realisations"] < 2:
            raise ConfigError("[analysis].statistic_targets needs statistics = true and "
                              f"noise_realisations >= 2 (got statistics = "
                              f"{str(an['statistics']).lower()}, noise_realisations = "
                              f"{an['noise_realisations']})")
    for pos in an["spectra_positions"] or []:
        if not (isinstance(pos, list) and len(pos) == 2
                and all(isinstance(v, int) and not isinstance(v, bool) for v in pos)):
            raise ConfigError(f"[analysis].spectra_positions has {pos!r}; give pixel pairs "
                              "[x, y] of integers, e.g. [[10, 12], [30, 5]]")


def object_name(conf):
    """The OBJECT card of a run's FITS files: ``[sky] object``, else "demo cloud" for the demo,
    else the snapshot file's name without folder and extension."""
    name = conf["sky"].get("object")
    if name:
        return name
    src = conf["cloud"]["source"]
    if src == "demo":
        return "demo cloud"
    return os.path.splitext(os.path.basename(os.path.normpath(src)))[0] or "model cloud"


def load_config(path):
    """Read and validate a TOML config file; paths inside are made relative to its folder."""
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"config file {path} does not exist") from None
    except IsADirectoryError:
        raise ConfigError(f"config file {path} is a folder; give the path of a TOML file") from None
    except PermissionError:
        raise ConfigError(f"config file {path} cannot be read (permission denied)") from None
    except UnicodeDecodeError:
        raise ConfigError(f"config file {path} is not UTF-8 text; save it as UTF-8") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"config file {path} is not valid TOML: {exc}") from None
    conf = validate_config(raw)
    base = os.path.dirname(os.path.abspath(path))
    src = conf["cloud"]["source"]
    if src != "demo" and not os.path.isabs(src):
        conf["cloud"]["source"] = os.path.join(base, src)
    for tr in conf["tracer"]:
        if tr["datafile"] and not os.path.isabs(tr["datafile"]):
            tr["datafile"] = os.path.join(base, tr["datafile"])
    for st in conf["setup"]:
        ant = st["antennas"]
        if ant and (ant.endswith(".csv") or os.sep in ant) and not os.path.isabs(ant):
            st["antennas"] = os.path.join(base, ant)
    return conf


_TYPE_NAMES = {str: "string", bool: "boolean", int: "integer", float: "number", list: "list",
               dict: "table"}


def _type_name(types):
    types = types if isinstance(types, tuple) else (types,)
    if set(types) >= {int, float}:
        types = tuple(t for t in types if t is not int)
    return " or ".join(_TYPE_NAMES[t] for t in types)


def _default_text(default):
    if default is REQUIRED:
        return "**required**"
    if default is None:
        return "—"
    if isinstance(default, bool):
        return f"`{str(default).lower()}`"
    if isinstance(default, str):
        return f'`"{default}"`'
    return f"`{default}`"


def schema_table(section):
    """The docs/config.md table of one section, generated from the schema (a test keeps the
    document equal to it): key, type, default, meaning."""
    rows = ["| key | type | default | meaning |", "|---|---|---|---|"]
    for key, (types, default, text) in SCHEMA[section].items():
        rows.append(f"| `{key}` | {_type_name(types)} | {_default_text(default)} | {text} |")
    return "\n".join(rows)


def config_doc_tables(text):
    """``text`` (docs/config.md) with every section's key table regenerated from the schema:
    the table after each ``## `[section]``` heading. Run
    ``python -c "import synth.config as c, pathlib as p; f = p.Path('docs/config.md');
    f.write_text(c.config_doc_tables(f.read_text()))"`` after changing the schema."""
    lines, out, section, i = text.split("\n"), [], None, 0
    while i < len(lines):
        line = lines[i]
        if line.startswith("## `["):
            section = line.strip("#` []")
        if line.startswith("| key | type | default | meaning |") and section in SCHEMA:
            out.extend(schema_table(section).split("\n"))
            while i < len(lines) and lines[i].startswith("|"):
                i += 1
            continue
        out.append(line)
        i += 1
    return "\n".join(out)
