"""[[setup]] sections -> instruments -> observed cubes on disk (used by the pipeline).

Each ideal cube is observed with each setup. A dish setup writes the observed cube in K and
in Jy/beam; an array setup writes Jy/beam (and K), jointly imaged with the arrays named in
``combine_with`` and feathered with a dish named there. Each array setup gets a uv-coverage /
synthesized-beam figure; the ideal-vs-observed figures come from the run analysis
(:mod:`synth.report.run_analysis`).
"""

import os

import numpy as np
import astropy.units as u

from .errors import ConfigError
from .fitsio import write_cube
from .rundir import run_path

__all__ = ["make_instrument", "observe_setups", "observe_options"]


def make_instrument(st):
    """The instrument object a [[setup]] table describes."""
    if st["kind"] == "dish":
        from .instrument.single_dish import SingleDish
        from radio_beam import Beam
        if st["beam_arcsec"] is None and (st["diameter_m"] is None):
            raise ConfigError(f"setup '{st['name']}' (dish) needs diameter_m or beam_arcsec")
        kw = {"efficiency": st["efficiency"], "name": st["name"]}
        if st["tsys_k"] is not None:
            kw["tsys"] = st["tsys_k"] * u.K
        if st["taper"] is not None:
            kw["taper"] = st["taper"]
        if st["beam_arcsec"] is not None:
            kw["beam"] = Beam(st["beam_arcsec"] * u.arcsec)
        else:
            kw["diameter"] = st["diameter_m"] * u.m
        return SingleDish(**kw)
    for key in ("antennas", "latitude_deg", "tsys_k"):
        if st[key] is None:
            raise ConfigError(f"setup '{st['name']}' (array) needs '{key}'")
    from .instrument.interferometer import Interferometer  # after the cheap checks
    kw = dict(antennas=st["antennas"], latitude=st["latitude_deg"] * u.deg,
              efficiency=st["efficiency"], tsys=st["tsys_k"] * u.K, name=st["name"])
    if st["diameter_m"] is not None:
        kw["dish_diameter"] = st["diameter_m"] * u.m
    return Interferometer(**kw)


def observe_options(st):
    """Keyword arguments of synth.observe for a [[setup]] table."""
    kw = {"noise": st["noise"], "seed": st["seed"], "hanning": st["hanning"]}
    if st["channel_width_kms"] is not None:
        kw["channel_width"] = st["channel_width_kms"] * u.km / u.s
    if st["integration_time_h"] is not None:
        kw["integration_time"] = st["integration_time_h"] * u.hr
    if st["kind"] == "dish":
        if st["rms_k"] is not None:
            kw["rms"] = st["rms_k"] * u.K
        elif st["noise"] and (st["integration_time_h"] is None or st["tsys_k"] is None):
            raise ConfigError(f"setup '{st['name']}' adds noise: give rms_k, or tsys_k and "
                              "integration_time_h (or set noise = false)")
        return kw
    kw.update(hour_angles=(st["hour_angle_start_h"], st["hour_angle_stop_h"]) * u.hourangle,
              sample_interval=st["sample_interval_s"] * u.s, weighting=st["weighting"],
              robust=st["robust"], deconvolve=st["deconvolve"], fast=st["fast"])
    return kw


def observe_setups(conf, ideal, tmp, chash, progress, log):
    """Observe every ideal cube with every setup; write cubes and figures.

    Returns (summary, observed): the per-setup summary dict and ``{(tracer, setup): cube}``.
    """
    from .instrument.observe import observe
    from .instrument.beam import to_unit
    setups = {st["name"]: st for st in conf["setup"]}
    instruments = {name: make_instrument(st) for name, st in setups.items()}
    figures = conf["output"]["figures"]
    summary, observed = {}, {}
    from tqdm.auto import tqdm
    # dishes first, then arrays, then combinations (they feather with the dish's own cube)
    order = sorted(setups, key=lambda n: (setups[n]["kind"] != "dish",
                                          bool(setups[n]["combine_with"])))
    jobs = [(t, s) for t in ideal for s in order]
    for tname, sname in tqdm(jobs, desc="observations", unit="obs", disable=not progress):
        st, cube = setups[sname], ideal[tname]
        inst = instruments[sname]
        if st["combine_with"]:
            inst = [inst] + [observed[(tname, o)] if setups[o]["kind"] == "dish"
                             else instruments[o] for o in st["combine_with"]]
        obs = observe(cube, inst, **observe_options(st))
        base = run_path(tmp, f"{tname}_{sname}")
        extra = {"SETUP": sname, "TRACER": tname}
        unit = obs.unit.to_string()
        write_cube(obs, f"{base}_{'jyb' if 'Jy' in unit else 'k'}.fits", chash, extra)
        other = to_unit(obs, "K" if "Jy" in unit else "Jy/beam")
        write_cube(other, f"{base}_{'k' if 'Jy' in unit else 'jyb'}.fits", chash, extra)
        entry = _obs_summary(obs)
        summary.setdefault(sname, {})[tname] = entry
        observed[(tname, sname)] = obs
    if figures:
        _uv_figures(setups, instruments, ideal, tmp)
    return summary, observed


def _obs_summary(obs):
    beam = obs.beam
    meta = {k.upper(): v for k, v in obs.meta.items()}
    return {"unit": obs.unit.to_string(),
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


def _uv_figures(setups, instruments, ideal, tmp):
    from .instrument.imaging import plot_uv_and_beam
    cube = next(iter(ideal.values()))
    dec = cube.wcs.celestial.wcs.crval[1] * u.deg
    freq = cube.wcs.wcs.restfrq * u.Hz
    for name, st in setups.items():
        if st["kind"] != "array":
            continue
        plot_uv_and_beam(instruments[name], dec,
                         (st["hour_angle_start_h"], st["hour_angle_stop_h"]) * u.hourangle,
                         st["sample_interval_s"] * u.s, run_path(tmp, f"uv_{name}.png"), freq)
