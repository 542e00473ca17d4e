"""Setup sweeps: a ``[sweep]`` table expands named ``[[setup]]`` tables over lists of values.

::

    [sweep]
    setups = ["compact"]                     # the setups to expand
    integration_time_h = [0.5, 1, 2, 4]      # any [[setup]] key, with a list of values
    antennas = ["ring-16", "compact-10"]

replaces setup ``compact`` by 4 x 2 setups, one per combination of values (the other keys as
in ``compact``), named by :func:`member_name`: ``compact_t0.5h_ring-16`` and so on. The
expanded setups are ordinary setups: checked, observed and assessed like any other. The
ideal cubes are made once for all of them, and the observations run side by side
(:func:`map_jobs`). :func:`sweep_analysis` writes ``sweep.csv`` (the survival matrix with a
column per swept key) and one figure per setup and swept key: each metric against the swept
value, one line per tracer and per value of the other swept keys.
"""

import itertools
import math
import os
import re

from .errors import ConfigError

__all__ = ["expand_sweep", "member_name", "map_jobs", "sweep_analysis", "SWEEP_METRICS",
           "FIXED_KEYS", "MAX_SETUPS", "OBSERVE_THREADS"]

#: [[setup]] keys a sweep cannot vary (they name setups or link them)
FIXED_KEYS = ("name", "kind", "combine_with")
#: most setups a sweep may make
MAX_SETUPS = 500
#: threads that run observations side by side (each also uses the observing stage's threads)
OBSERVE_THREADS = 2
#: survival metrics drawn against the swept values (key, axis label)
SWEEP_METRICS = (("flux_fraction", "flux fraction"), ("fidelity_median", "fidelity (median)"),
                 ("peak_snr", "peak S/N"), ("half_recovery_scale_arcsec", "half-recovery scale (\")"),
                 ("mom0_correlation", "r(mom0)"), ("fraction_above_3sigma", "fraction > 3 sigma"))

#: short labels of common keys in member names
_SHORT = {"integration_time_h": "t", "tsys_k": "tsys", "robust": "r", "channel_width_kms": "dv",
          "diameter_m": "d", "main_beam_efficiency": "etamb", "aperture_efficiency": "etaa",
          "system_efficiency": "etas", "sample_interval_s": "dt",
          "pixel_arcsec": "pix", "map_size_arcsec": "map", "pointing_spacing_arcsec": "sp",
          "beam_arcsec": "beam", "rms_k": "rms", "hour_angles_h": "ha",
          "latitude_deg": "lat", "phase_rms_deg": "ph",
          "phase_interval_s": "pi", "clean_mask_sigma": "mask", "n_pol": "npol",
          "primary_beam_cutoff": "pb", "max_pointings": "maxp", "clean_scales_arcsec": "sc",
          "clean_stop_sigma": "stop", "clean_max_components": "ncomp", "fwhm_factor": "fwhm",
          "zenith_opacity": "tau", "receiver_temperature_k": "trx",
          "atmosphere_temperature_k": "tatm", "guard_band_arcsec": "guard",
          "map_offset_arcsec": "off", "seed": "seed"}
#: unit suffixes of keys -> the unit written after a number in member names
_UNITS = (("_arcsec", "as"), ("_kms", "kms"), ("_deg", "deg"), ("_h", "h"), ("_s", "s"),
          ("_k", "K"), ("_m", "m"))
_UNSAFE = re.compile(r"[^A-Za-z0-9_.+-]")


def _short(key):
    if key in _SHORT:
        return _SHORT[key], _unit(key)
    base = key
    for suffix, _ in _UNITS:
        if key.endswith(suffix):
            base = key[:-len(suffix)]
            break
    return base.replace("_", ""), _unit(key)


def _unit(key):
    return next((unit for suffix, unit in _UNITS if key.endswith(suffix)), "")


def _number(v):
    return str(v) if isinstance(v, int) else format(float(v), ".12g")


def _token(key, value):
    """The part of a member name that says ``key = value``."""
    short, unit = _short(key)
    if isinstance(value, bool):
        return short if value else f"no{short}"
    if isinstance(value, (int, float)):
        return f"{short}{_number(value)}{unit}"
    if isinstance(value, list):
        return f"{short}{'x'.join(_number(v) for v in value)}{unit}"
    text = str(value)
    if "/" in text or "\\" in text or text.lower().endswith(".csv"):  # a file: its name
        text = os.path.splitext(os.path.basename(text.replace("\\", "/")))[0]
    return _UNSAFE.sub("-", text) or short


def member_name(base, values):
    """The name of the setup ``base`` with ``values`` ({key: value}, in the sweep's order):
    ``base`` then one part per key, joined by ``_``. A number is written after a short label
    of its key and before its unit (``t0.5h``, ``r-0.5``, ``tsys90K``), true / false as the
    label or ``no`` + label, a text value as itself (a file by its name without folder and
    extension), a list with ``x`` between its numbers (``map60x40as``); characters other
    than ASCII letters, digits and ``_ . + -`` become ``-``."""
    return "_".join([base] + [_token(k, v) for k, v in values.items()])


def _setup_tables(raw):
    items = raw.get("setup", [])
    if isinstance(items, dict):
        items = [items]
    if not isinstance(items, list) or not all(isinstance(t, dict) for t in items):
        raise ConfigError("[[setup]] must be a list of tables")
    return items


def _check_values(key, values, spec):
    from .config import _check_table
    if not isinstance(values, list) or not values:
        example = '"a", "b"' if spec[key][0] is str else "1, 2, 4"
        raise ConfigError(f"[sweep].{key} = {values!r}; give a list of values, e.g. "
                          f"{key} = [{example}]")
    seen = []
    for i, v in enumerate(values):
        _check_table({key: v}, {key: spec[key]}, "[sweep]")
        if isinstance(v, float) and not math.isfinite(v):
            raise ConfigError(f"[sweep].{key}[{i}] is {v}; give a finite number")
        if v in seen:
            raise ConfigError(f"[sweep].{key} lists {v!r} twice; give each value once")
        seen.append(v)


def _check_sweep(sweep, setups):
    """The swept setups and {key: values} of a [sweep] table, checked."""
    from .config import SETUP, _suggest
    names = [st.get("name") for st in setups]
    bases = sweep.get("setups")
    if bases is None:
        raise ConfigError("[sweep] needs 'setups', the names of the [[setup]] tables to expand, "
                          f"e.g. setups = [\"{names[0] if names else 'compact'}\"]")
    if not isinstance(bases, list) or not bases or not all(isinstance(b, str) for b in bases):
        raise ConfigError(f"[sweep].setups = {bases!r}; give a list of [[setup]] names")
    for b in bases:
        if b not in names:
            raise ConfigError(f"[sweep].setups names '{b}', which is not a [[setup]]; valid: "
                              f"{', '.join(str(n) for n in names) or 'none (add [[setup]] tables)'}")
        if bases.count(b) > 1:
            raise ConfigError(f"[sweep].setups names '{b}' twice")
    axes = {}
    for key, values in sweep.items():
        if key == "setups":
            continue
        if key in FIXED_KEYS:
            raise ConfigError(f"[sweep].{key} cannot be swept (it names or links setups); "
                              "sweep other [[setup]] keys")
        if key not in SETUP:
            raise ConfigError(f"unknown key '{key}' in [sweep] (give 'setups' and [[setup]] "
                              f"keys){_suggest(key, SETUP)}")
        _check_values(key, values, SETUP)
        axes[key] = values
    if not axes:
        raise ConfigError("[sweep] lists no [[setup]] key to sweep; add one with a list of "
                          "values, e.g. integration_time_h = [1, 2, 4]")
    for st in setups:
        for other in st.get("combine_with") or []:
            if other in bases and st.get("name") not in bases:
                raise ConfigError(f"[sweep] expands setup '{other}', which setup "
                                  f"'{st.get('name')}' combines with (combine_with); sweep "
                                  f"'{st.get('name')}' instead, or copy '{other}' under another "
                                  "name for the combination")
    return bases, axes


def expand_sweep(raw):
    """(raw config with the swept setups expanded and no [sweep], the sweep record or None).

    The record is what a validated config keeps under "sweep": {"setups": [base names],
    "keys": {key: [values]}, "members": {member name: {"base": name, "values": {key:
    value}}}}; given a config that already holds a record, the setups are left as they are.
    """
    if not isinstance(raw, dict) or "sweep" not in raw:
        return raw, None
    sweep = raw["sweep"]
    rest = {k: v for k, v in raw.items() if k != "sweep"}
    if not isinstance(sweep, dict):
        raise ConfigError("[sweep] must be a table")
    setups = _setup_tables(raw)
    if isinstance(sweep.get("members"), dict) and isinstance(sweep.get("keys"), dict):
        names = {st.get("name") for st in setups}
        missing = [m for m in sweep["members"] if m not in names]
        if missing:
            raise ConfigError(f"[sweep] records setup '{missing[0]}', which is not a [[setup]]")
        return rest, sweep
    bases, axes = _check_sweep(sweep, setups)
    total = len(bases) * math.prod(len(v) for v in axes.values())
    if total > MAX_SETUPS:
        raise ConfigError(f"[sweep] makes {total} setups; at most {MAX_SETUPS} (fewer values "
                          "or fewer setups)")
    taken = {st.get("name") for st in setups if st.get("name") not in bases}
    out, members = [], {}
    from .rundir import check_name
    for st in setups:
        if st.get("name") not in bases:
            out.append(st)
            continue
        for combo in itertools.product(*axes.values()):
            values = dict(zip(axes, combo))
            name = member_name(st["name"], values)
            check_name(name, f"[sweep]: the name of setup '{st['name']}' with "
                       + ", ".join(f"{k} = {v!r}" for k, v in values.items()))
            if name in taken:
                raise ConfigError(f"[sweep] makes a setup named '{name}', which is already a "
                                  "setup; rename that [[setup]]")
            taken.add(name)
            out.append(dict(st, **values, name=name))
            members[name] = {"base": st["name"], "values": values}
    rest["setup"] = out
    return rest, {"setups": bases, "keys": axes, "members": members}


def map_jobs(fn, args_list, executor=None, threads=None):
    """Yield (index, fn(*args)) for every args tuple, as the results arrive: as tasks of a
    dask cluster when ``executor`` is a synth.parallel.DaskExecutor, else on ``threads``
    threads (default :data:`OBSERVE_THREADS`; the numeric work releases the GIL)."""
    from .parallel import DaskExecutor
    if isinstance(executor, DaskExecutor):  # one object per job: a dict scattered alone
        yield from executor.map(_call, [(_Job(fn, args),) for args in args_list])
        return
    n = max(1, min(threads or OBSERVE_THREADS, len(args_list)))
    if n == 1:
        for i, args in enumerate(args_list):
            yield i, fn(*args)
        return
    from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
    with ThreadPoolExecutor(n) as pool:
        pending = {pool.submit(fn, *args): i for i, args in enumerate(args_list)}
        try:
            while pending:
                finished, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in sorted(finished, key=pending.get):
                    yield pending.pop(fut), fut.result()
        finally:
            for fut in pending:
                fut.cancel()


class _Job:
    """A function and its arguments, shipped to a dask worker as one object (dask scatters
    the values of a dict argument under the dict's keys, so two jobs' keyword dicts would
    share their keys)."""

    def __init__(self, fn, args):
        self.fn, self.args = fn, tuple(args)


def _call(job):
    return job.fn(*job.args)


def _label(v):
    return _number(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else str(v)


def sweep_rows(record, survival_rows):
    """Survival rows of the swept setups, each with the base setup and a column per swept
    key (``sweep_<key>``)."""
    out = []
    for row in survival_rows:
        m = record["members"].get(row["setup"])
        if m is None:
            continue
        out.append({"tracer": row["tracer"], "setup": row["setup"], "base": m["base"],
                    **{f"sweep_{k}": v for k, v in m["values"].items()},
                    **{k: v for k, v in row.items() if k not in ("tracer", "setup")}})
    return out


def _x_positions(values):
    """Axis positions of the swept values: the numbers, or 0, 1, ... for other values."""
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return [float(v) for v in values], None
    return list(range(len(values))), [_label(v) for v in values]


def sweep_figure(rows, base, key, keys, title):
    """Each metric of :data:`SWEEP_METRICS` against the values of ``key``: one line per
    tracer and per combination of the other swept keys (error bars: the spread over noise
    realisations, where the rows have it)."""
    from matplotlib.figure import Figure
    values = keys[key]
    xs, ticks = _x_positions(values)
    others = [k for k in keys if k != key]
    fig = Figure(figsize=(11, 6.8))
    axes = fig.subplots(2, 3, gridspec_kw=dict(left=0.07, right=0.98, bottom=0.19, top=0.9,
                                               hspace=0.38, wspace=0.3)).ravel()
    mine = [r for r in rows if r["base"] == base]
    groups = sorted({(r["tracer"],) + tuple(_label(r[f"sweep_{k}"]) for k in others)
                     for r in mine})
    for ax, (metric, label) in zip(axes, SWEEP_METRICS):
        for g in groups:
            pts = {}
            for r in mine:
                if (r["tracer"],) + tuple(_label(r[f"sweep_{k}"]) for k in others) == g:
                    pts[_label(r[f"sweep_{key}"])] = r
            ys = [_y(pts.get(_label(v)), metric) for v in values]
            err = [_y(pts.get(_label(v)), f"{metric}_std") for v in values]
            name = ", ".join(g)
            if any(math.isfinite(e) for e in err):
                ax.errorbar(xs, ys, yerr=[e if math.isfinite(e) else 0 for e in err],
                            marker="o", ms=3, capsize=2, label=name)
            else:
                ax.plot(xs, ys, marker="o", ms=3, label=name)
        ax.set_title(label, fontsize=9)
        ax.set_xlabel(key, fontsize=8)
        ax.tick_params(labelsize=7)
        if ticks is not None:
            ax.set_xticks(xs)
            ax.set_xticklabels(ticks, fontsize=7)
        elif min(xs) > 0 and max(xs) / min(xs) >= 8:
            ax.set_xscale("log")
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", fontsize=7, ncol=min(4, len(labels) or 1),
               title="tracer" + "".join(f", {k}" for k in others), title_fontsize=7)
    fig.suptitle(title, fontsize=10)
    return fig


def _y(row, key):
    v = None if row is None else row.get(key)
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and v is not None \
        else float("nan")


def sweep_analysis(conf, survival_rows, tmp, figures=True):
    """Write sweep.csv and the sweep figures of a run into ``tmp``; return what the report
    shows ({"rows", "files", "figures": {base: {key: file}}}), or None without a sweep."""
    record = conf.get("sweep")
    if not record or not survival_rows:
        return None
    from .fitsio import atomic_path, write_text
    from .report.run_analysis import rows_csv
    from .rundir import run_path
    rows = sweep_rows(record, survival_rows)
    write_text(rows_csv(rows), run_path(tmp, "sweep.csv"))
    out = {"rows": rows, "files": ["sweep.csv"], "figures": {}, "keys": record["keys"]}
    if not figures:
        return out
    for base in record["setups"]:
        for key in record["keys"]:
            fig = sweep_figure(rows, base, key, record["keys"],
                               f"setup '{base}': survival metrics against {key}")
            path = run_path(tmp, f"sweep_{base}_{key}.png")
            with atomic_path(path) as t:
                fig.savefig(t, format="png", dpi=90)
            out["figures"].setdefault(base, {})[key] = os.path.basename(path)
            out["files"].append(os.path.basename(path))
    return out
