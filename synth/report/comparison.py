"""Files for ``synth compare``: read two cubes, describe the comparison, write its folder.

The statistics are those of :func:`synth.analysis.compare.compare` (docs/analysis.md); this
module only reads the inputs, prints the result and writes figures and a JSON of it.
"""

import os
import shutil

import numpy as np

from ..errors import ConfigError, OutputError, SynthError
from ..fitsio import atomic_path, write_json
from ..sky import unit_text
from ..rundir import (check_overwrite, finish_output, make_partial, run_path, sweep_debris,
                      unregister_cleanup)

__all__ = ["read_cube", "comparison_text", "comparison_json", "write_comparison",
           "check_out_dir"]


def read_cube(path, label):
    """A SpectralCube from a FITS file, or a ConfigError naming the file and the problem."""
    from spectral_cube import SpectralCube
    if not os.path.isfile(path):
        raise ConfigError(f"{label}: the file {path} does not exist")
    try:
        cube = SpectralCube.read(path)
    except SynthError:
        raise
    except Exception as exc:   # any reader failure at this file boundary: say which file
        why = " ".join(str(exc).split())[:160]
        raise ConfigError(f"{label}: {path} is not a spectral cube FITS file "
                          f"({type(exc).__name__}: {why})") from None
    if getattr(cube, "ndim", 0) != 3:
        raise ConfigError(f"{label}: {path} is not a 3-D cube (shape {cube.shape})")
    return cube


def _num(v):
    v = float(v)
    return v if np.isfinite(v) else None


def comparison_json(comparison):
    """JSON-able dict: names, matching steps, common beam, and each cube's statistics."""
    beam = comparison.beam
    return {"names": list(comparison.names), "steps": list(comparison.steps),
            "beam": None if beam is None else {
                "major_arcsec": float(beam.major.to_value("arcsec")),
                "minor_arcsec": float(beam.minor.to_value("arcsec")),
                "pa_deg": float(beam.pa.to_value("deg"))},
            "stats": {n: {k: _num(v) for k, v in comparison.stats[n].as_dict().items()}
                      for n in comparison.names},
            "statistics": {n: {k: {"value": _num(v.value), "error": _num(v.error),
                                   "unit": v.unit} for k, v in m.items()}
                           for n, m in (comparison.measured or {}).items()}}


def statistic_units(stats):
    """Unit of each statistic of :meth:`StructureStats.as_dict` as text: moment-map means
    and widths carry the map's unit; slopes, log-normal parameters, skewness and kurtosis are
    pure numbers ("none")."""
    mom = stats.moments
    units = {"mom0": mom.mom0.unit, "mom1": mom.mom1.unit, "mom2": mom.mom2.unit}
    out = {}
    for key in stats.as_dict():
        name, _, what = key.partition("_")
        if key == "flux":
            out[key] = f"{unit_text(mom.mom0.unit)} pixel"   # the moment-0 map summed
        elif name in units and what in ("mean", "std"):
            out[key] = unit_text(units[name])
        else:
            out[key] = "none"
    return out


#: why a value can be missing ("-" in the table), per statistic
_MISSING = {
    "slope": "slope not fitted: the matched map is too small for a scale range (scales from "
             "max(3 pixels, 2 beams) to a third of the map; docs/analysis.md)",
    "moment": "fewer than 4 finite pixels in that moment map",
    "ratio": "ratio undefined: the first cube's value is 0 or missing",
    "layer": "not measurable on this map (too few pixels above the threshold, structures or "
             "scales for the fit; docs/analysis.md)",
}


def comparison_text(comparison):
    """The matching steps and the side-by-side statistics table (with units), as terminal
    text; every "-" in it is explained under the table."""
    a, b = comparison.names
    t = comparison.table()
    units = statistic_units(comparison.stats[a])
    units.update({k: v.unit or "none" for k, v in (comparison.measured or {}).get(a, {}).items()})
    rows = [(str(r["statistic"]), _g(r[a]), _g(r[b]), _g(r["ratio"]),
             units.get(str(r["statistic"]), "")) for r in t]
    head = ("statistic", a, b, f"{b} / {a}", "unit")
    widths = [max(len(head[i]), *(len(r[i]) for r in rows)) for i in range(5)]
    fmt = "{:<%d}  {:>%d}  {:>%d}  {:>%d}  {:<%d}" % tuple(widths)
    lines = ["matching steps:"] + [f"  {i + 1}. {s}" for i, s in enumerate(comparison.steps)]
    lines += ["", fmt.format(*head).rstrip(), fmt.format(*("-" * w for w in widths))]
    lines += [fmt.format(*r).rstrip() for r in rows]
    notes = []
    for stat, va, vb, ratio, _ in rows:
        if "-" in (va, vb):
            why = _MISSING["slope" if stat.startswith("slope") else
                           "moment" if stat.startswith("mom") else "layer"]
        elif ratio == "-":
            why = _MISSING["ratio"]
        else:
            continue
        if why not in notes:
            notes.append(why)
    if notes:
        lines += [""] + [f"-: {n}" for n in notes]
    return "\n".join(lines)


def _g(v):
    v = float(v)
    return "-" if not np.isfinite(v) else f"{v:.6g}"


def _moment0_figure(comparison):
    """Moment-0 maps of the two matched cubes side by side, on one colour scale."""
    from matplotlib.figure import Figure
    fig = Figure(figsize=(9, 4), layout="constrained")
    axes = fig.subplots(1, 2)
    maps = {n: comparison.stats[n].moments.mom0 for n in comparison.names}
    top = max(float(np.nanmax(m.value)) for m in maps.values())
    from ..analysis.matching import pixel_scale_arcsec
    from ..analysis.plots import _beam_ellipse, _extent
    for ax, (name, m) in zip(axes, maps.items()):
        extent = _extent(m.shape, float(pixel_scale_arcsec(comparison.matched[name])))
        im = ax.imshow(m.value, origin="lower", cmap="viridis", vmin=0, vmax=top,
                       extent=extent, interpolation="nearest")
        ax.set_title(f"{name}: moment 0 (matched)", fontsize=9)
        ax.set_xlabel("RA offset (arcsec)", fontsize=8)
        ax.set_ylabel("Dec offset (arcsec)", fontsize=8)
        if comparison.beam is not None:
            _beam_ellipse(ax, comparison.beam, extent, "white")
        fig.colorbar(im, ax=ax, shrink=0.8, label=unit_text(m.unit))
    return fig


def _save(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=90)


def check_out_dir(out_dir, overwrite=False, inputs=()):
    """The absolute output folder, or an OutputError if it exists (without overwrite), is
    not a folder synth wrote, holds one of ``inputs`` or its parent is not writable
    (:func:`synth.rundir.check_overwrite`)."""
    out_dir = check_overwrite(out_dir, overwrite, inputs)
    parent = os.path.dirname(out_dir)
    if not os.path.isdir(parent) or not os.access(parent, os.W_OK):
        raise OutputError(f"cannot create {out_dir}: {parent} is not a writable folder")
    return out_dir


def write_comparison(comparison, out_dir, overwrite=False, inputs=()):
    """Write structure.png, moments.png and comparison.json into a new folder ``out_dir``.

    The folder is written under a temporary name beside it and renamed into place; an
    existing folder is replaced only with ``overwrite=True`` and only if synth wrote it.
    Returns the file names.
    """
    from ..analysis.plots import structure_figure
    out_dir = check_out_dir(out_dir, overwrite, inputs)
    sweep_debris(os.path.dirname(out_dir))
    tmp = make_partial(out_dir)
    try:
        _save(structure_figure(comparison), run_path(tmp, "structure.png"))
        _save(_moment0_figure(comparison), run_path(tmp, "moments.png"))
        write_json(comparison_json(comparison), run_path(tmp, "comparison.json"))
        finish_output(tmp, out_dir, kind="compare")
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        unregister_cleanup(tmp)
        raise
    return ["structure.png", "moments.png", "comparison.json"]
