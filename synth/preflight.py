"""Every check of a run that needs no synthesis, in one pass before any work.

:func:`preflight` is called by ``synth run`` / ``synth demo`` (before the output folder is
made) and by ``synth plan``. It resolves each tracer's line, reads the snapshot's shape (not
its data), builds each ``[[setup]]``'s instrument with the same code the observing stage uses
(:func:`synth.observing.make_instrument`, so required keys per kind are checked in one place),
reads antenna files, checks that the source rises at each array's site, that the cube's pixel
samples each array's longest baseline, and that the cubes fit in memory. Errors are one line
naming the section, the tracer or setup, the key, the value and what is valid.
"""

import math
import os
import re
import warnings

import numpy as np

from .config import SETUP
from .errors import ConfigError, MemoryBudgetError, SynthError, SynthWarning
from .sky import ARCSEC_PER_RAD

__all__ = ["preflight", "check_cube_size", "snapshot_geometry"]

_PC_CM = 3.0856775814913673e18
#: Bytes per channel and sky pixel while one tracer is worked on (ideal + tau, float32, and
#: float64 copies made for figures and observing): a planning figure.
_BYTES_PER_VOXEL = 24


def preflight(conf, memory=None, workers=None, scheduler=None, observing=True):
    """Check a validated config and the execution options; return the tracers' Lines.

    Raises the first problem found as a one-line :class:`~synth.errors.SynthError`.
    ``observing=False`` (``synth plan``) leaves out what only observing needs: that the
    source rises at each array and that each setup's map layout fits its beams (the planner
    reports such setups as not planned, with the reason)."""
    from .parallel import check_execution
    check_execution(workers, scheduler)
    budget = None
    if memory is not None:
        from .transfer.tiles import parse_memory
        budget = parse_memory(memory)
    lines = [_line(tr, i) for i, tr in enumerate(conf["tracer"])]
    _check_view(conf["sky"]["line_of_sight"])
    _check_cloud(conf["cloud"], conf["sky"])
    shape, cell_pc = snapshot_geometry(conf["cloud"], conf["sky"]["line_of_sight"])
    chan = conf["channels"]
    n_chan = None
    if chan["velocity_min_kms"] is not None:
        n_chan = math.ceil((chan["velocity_max_kms"] - chan["velocity_min_kms"])
                           / chan["width_kms"] - 1e-9)
        check_cube_size(n_chan, shape, len(lines), budget,
                        n_cubes=1 + ("tau" in conf["output"]["products"]))
        _check_band(conf, lines)
    _check_lvg_memory(conf, shape, budget, n_chan)
    _check_setups(conf, lines, cell_pc, observing)
    if observing and shape is not None and cell_pc is not None:
        from .observing import check_setups
        pix = cell_pc / conf["sky"]["distance_pc"] * ARCSEC_PER_RAD
        check_setups(conf, lines, (shape[0] * pix, shape[1] * pix))
    _check_spectra_positions(conf, shape)
    return lines


def _check_spectra_positions(conf, shape):
    given = conf["analysis"]["spectra_positions"]
    if not given or shape is None or not isinstance(conf["sky"]["line_of_sight"], str):
        return
    nx, ny = shape[0], shape[1]
    for x, y in given:
        if not (0 <= x < nx and 0 <= y < ny):
            raise ConfigError(f"[analysis].spectra_positions has [{x}, {y}]; valid: "
                              f"0 <= x < {nx}, 0 <= y < {ny} (the cube's pixels)")


def _where_tracer(tr, i):
    return f"[[tracer]] #{i + 1} '{tr['name']}'"


def _line(tr, i):
    """The tracer's Line; the datafile's molecule must be the tracer's species."""
    from .pipeline import tracer_line
    where = _where_tracer(tr, i)
    if tr["datafile"] is not None and not os.path.isfile(tr["datafile"]):
        raise ConfigError(f"{where}.datafile = {tr['datafile']}: no such file; give the path "
                          "of a Leiden-format molecular data file (relative to the config)")
    try:
        line = tracer_line(tr)
    except SynthError as exc:
        raise type(exc)(f"{where}: {exc}") from None
    from .pipeline import _lvg_options
    _lvg_options(tr)
    _check_tracer_values(tr, where)
    from .molecules.hyperfine import with_hyperfine
    try:
        with_hyperfine(line, tr.get("hyperfine"))
    except SynthError as exc:
        raise type(exc)(f"{where}.{exc}") from None
    if tr["excitation"] == "lvg":
        try:
            line.collision_molecule()  # LVG needs collision rates: found now, not after work
        except SynthError as exc:
            raise type(exc)(f"{where} (excitation = \"lvg\"): {exc}") from None
    if tr["datafile"] is not None:
        name = str(line.molecule.name).strip()
        first = re.split(r"[\s@(,;]", name)[0]  # "HCN (hfs)", "CO@xpol" name HCN, CO
        if _norm(first) != _norm(tr["species"]):
            raise ConfigError(f"{where}.datafile = {os.path.basename(tr['datafile'])} holds "
                              f"molecule '{name}', not species = '{tr['species']}'; set "
                              f"species = \"{name}\" or give that species' file")
    return line


def _check_tracer_values(tr, where):
    from .excitation.escape import GEOMETRIES, RENAMED_GEOMETRIES
    checks = (("t_ex_k", lambda v: v > 0, "> 0 K"),
              ("ortho_para_ratio", lambda v: v >= 0, ">= 0"),
              ("accuracy", lambda v: 0 < v < 1, "0 < accuracy < 1"),
              ("max_escape_length_pc", lambda v: v > 0, "> 0"))
    for key, ok, valid in checks:
        if tr[key] is not None and not ok(tr[key]):
            raise ConfigError(f"{where}.{key} is {tr[key]}; valid: {valid}")
    if tr["geometry"] in RENAMED_GEOMETRIES:
        raise ConfigError(f'{where}.geometry "{tr["geometry"]}" was renamed to '
                          f'"{RENAMED_GEOMETRIES[tr["geometry"]]}"')
    if tr["geometry"] is not None and tr["geometry"] not in GEOMETRIES:
        raise ConfigError(f"{where}.geometry is '{tr['geometry']}'; valid: "
                          f"{', '.join(GEOMETRIES)}")


_CLOUD_CHECKS = (("box_pc", lambda v: v > 0, "> 0"),
                 ("mean_n_h2_cm3", lambda v: v > 0, "> 0"),
                 ("mach", lambda v: v >= 0, ">= 0"),
                 ("solenoidal_fraction", lambda v: 0 <= v <= 1, "0 <= solenoidal_fraction <= 1"),
                 ("cell_size_pc", lambda v: v > 0, "> 0"),
                 ("sigma_turb_kms", lambda v: v >= 0, ">= 0"))


def _check_cloud(cloud, sky):
    for key, ok, valid in _CLOUD_CHECKS:
        if cloud[key] is not None and not ok(cloud[key]):
            raise ConfigError(f"[cloud].{key} is {cloud[key]}; valid: {valid}")
    if not sky["background_k"] > 0:
        raise ConfigError(f"[sky].background_k is {sky['background_k']}; valid: > 0 K")


def _check_view(los):
    from .snapshot.views import AXIS_VIEWS, _parse_rotation
    if isinstance(los, str):
        if los not in AXIS_VIEWS:
            raise ConfigError(f"[sky].line_of_sight is '{los}'; valid: "
                              f"{', '.join(AXIS_VIEWS)} or {{euler_deg = [a, b, c]}}")
        return
    try:
        _parse_rotation(los)
    except SynthError as exc:
        raise ConfigError(f"[sky].line_of_sight: {exc}") from None


def _norm(name):
    return "".join(ch for ch in name.lower() if ch.isalnum() or ch == "+")


def snapshot_geometry(cloud, line_of_sight="z"):
    """((nx, ny, nz) of the view, cell size in pc or None) without reading the data."""
    if cloud["source"] == "demo":
        n = cloud["cells"]
        if n < 8:
            raise ConfigError(f"[cloud].cells is {n}; valid: >= 8 per axis")
        return (n, n, n), cloud["box_pc"] / n
    if cloud["format"] == "yt":
        return None, cloud["cell_size_pc"]
    from .snapshot.readers import snapshot_shape
    src = cloud["source"]
    if os.path.isdir(src) and not (src.rstrip("/").endswith(".zarr") or cloud["format"] == "zarr"):
        raise ConfigError(f"[cloud].source = {src} is a folder; give a snapshot file")
    if not os.path.exists(src):
        raise ConfigError(f"[cloud].source = {src}: no such file; give \"demo\" or the path of "
                          "a snapshot file (relative to the config)")
    shape = tuple(int(n) for n in snapshot_shape(src, cloud["fields"], cloud["format"]))
    first = _first_slab(cloud, shape)  # every field, unit and the cell size, on one slab
    cell_pc = cloud["cell_size_pc"] or first.cell_size_cm / _PC_CM
    if isinstance(line_of_sight, str):
        los = "xyz".index(line_of_sight[-1])
        sky = [shape[a] for a in range(3) if a != los]
        shape = (sky[0], sky[1], shape[los])
    return shape, cell_pc


def _first_slab(cloud, shape):
    """The first x slab of a snapshot file, read as the run will read it (fields, units,
    cell size, values), so a bad file is refused before any work."""
    from .pipeline import _reader_kwargs
    from .snapshot.readers import read_snapshot
    return read_snapshot(cloud["source"], fields=cloud["fields"], format=cloud["format"],
                         region=(0, 0, 1), **_reader_kwargs(cloud))


def check_cube_size(n_chan, shape, n_tracers=1, budget=None, n_cubes=2):
    """Refuse a channel count whose cubes cannot fit, with the size they need.

    With ``budget`` (--memory, bytes) the transfer stage's own rule applies (its output cubes
    plus one tile row, :func:`synth.transfer.tiles.plan_tiles`). Whatever the budget, the
    ideal cubes a run keeps (one per tracer, float64) plus the working copies of one tracer
    must fit in this machine's memory. ``shape`` is the view's (nx, ny, nz) (None: unknown).
    """
    if shape is None:
        return
    nx, ny = shape[0], shape[1]
    voxels = n_chan * nx * ny
    need = voxels * (_BYTES_PER_VOXEL + 8 * max(0, n_tracers - 1))
    ram = _ram()
    if ram and need > ram:
        raise ConfigError(f"[channels]: {n_chan:,} channels x {nx} x {ny} pixels x {n_tracers} "
                          f"tracer(s) need about {_size(need)}, more than this machine's memory "
                          f"({_size(ram)}); widen width_kms or narrow "
                          "velocity_min_kms..velocity_max_kms")
    if budget:
        from .transfer.tiles import plan_tiles
        try:
            plan_tiles(tuple(shape), n_chan, budget, n_cubes=n_cubes)
        except MemoryBudgetError as exc:
            raise MemoryBudgetError(f"[channels]: {n_chan:,} channels x {nx} x {ny} pixels: "
                                    f"{exc}") from None


def lvg_memory_need(shape, demo=False, n_chan=None, n_cubes=2):
    """Bytes an LVG tracer needs at least under --memory: the larger of building its table
    (before the cubes exist) and the output cubes plus one tile of one row with its one-row
    halo (synth.transfer.tiles.plan_tiles with the LVG block's own bytes). The snapshot is
    read block by block (a file) or was already in memory (``demo``): not counted."""
    from .excitation.blocks import LVG_BYTES_PER_CELL, LVG_TABLE_BYTES
    from .transfer.tiles import BYTES_PER_CELL
    nx, ny, nz = shape
    cubes = 0 if n_chan is None else n_cubes * n_chan * nx * ny * 4
    tile = 3 * ny * nz * (BYTES_PER_CELL + LVG_BYTES_PER_CELL) + ny * (n_chan or 0) * 4 * (
        n_cubes + 1)
    return max(LVG_TABLE_BYTES, cubes + tile)


def _check_lvg_memory(conf, shape, budget, n_chan):
    """With --memory, an LVG tracer must fit in it (its table, then its cubes and one tile
    read block by block); say up front by how much it does not."""
    lvg = [(i, tr) for i, tr in enumerate(conf["tracer"]) if tr["excitation"] != "lte"]
    if budget is None or not lvg or shape is None:
        return
    need = lvg_memory_need(shape, conf["cloud"]["source"] == "demo", n_chan)
    if need > budget:
        i, tr = lvg[0]
        nx, ny, nz = shape
        raise MemoryBudgetError(
            f"{_where_tracer(tr, i)} has excitation = \"{tr['excitation']}\", which needs about "
            f"{_size(need)} for {nx} x {ny} x {nz} cells (its LVG table, then the cubes and one "
            f"tile), {_size(need - budget)} more than --memory {_size(budget)}; raise --memory "
            f"to at least {_size(need)}")


def _ram():
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return None


def _size(nbytes):
    for unit, f in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if nbytes >= f:
            return f"{nbytes / f:.3g} {unit}"
    return f"{nbytes} B"


def _check_band(conf, lines):
    """Warn when the given velocity band misses the systemic velocity (where the line is)."""
    chan, v0 = conf["channels"], conf["sky"]["systemic_velocity_kms"]
    if not chan["velocity_min_kms"] <= v0 <= chan["velocity_max_kms"]:
        warnings.warn(f"[channels] velocity_min_kms..velocity_max_kms = "
                      f"{chan['velocity_min_kms']:g}..{chan['velocity_max_kms']:g} km/s does not "
                      f"cover [sky].systemic_velocity_kms = {v0:g}: the cubes will hold little "
                      "or no line emission", SynthWarning, stacklevel=3)


# -- setups ----------------------------------------------------------------------------------

def _check_setups(conf, lines, cell_pc, observing=True):
    from .observing import make_instrument, observe_options
    kinds = {st["name"]: st["kind"] for st in conf["setup"]}
    chan = conf["channels"]
    for st in conf["setup"]:
        where = f"[[setup]] '{st['name']}'"
        if st["combine_with"] and st["kind"] != "array":
            raise ConfigError(f"{where}.combine_with: only kind = \"array\" setups combine "
                              f"with others; this one is kind = \"{st['kind']}\"")
        dishes = [o for o in st["combine_with"] or [] if kinds.get(o) == "dish"]
        if len(dishes) > 1:
            raise ConfigError(f"{where}.combine_with names {len(dishes)} dish setups "
                              f"({', '.join(dishes)}); valid: at most one dish to feather with")
        w = st["channel_width_kms"]
        if w is not None and w < chan["width_kms"] * (1 - 1e-9):
            raise ConfigError(f"{where}.channel_width_kms is {w:g}, finer than the ideal cube's "
                              f"[channels].width_kms = {chan['width_kms']:g}; valid: >= "
                              f"{chan['width_kms']:g}")
        if w is not None and chan["velocity_min_kms"] is not None:
            band = chan["velocity_max_kms"] - chan["velocity_min_kms"]
            if w > band * (1 + 1e-9):
                raise ConfigError(f"{where}.channel_width_kms is {w:g}, wider than the band "
                                  f"[channels] velocity_max_kms - velocity_min_kms = {band:g}; "
                                  f"valid: {chan['width_kms']:g} <= channel_width_kms <= {band:g}")
        _check_setup_files(st, where)
        try:
            inst = make_instrument(st)
            observe_options(st)
        except SynthError as exc:
            msg = str(exc)
            own = f"setup '{st['name']}' "
            msg = msg[len(own):].lstrip(": ") if msg.startswith(own) else msg
            m = re.search(r"needs '(\w+)'$", msg)
            if m and m.group(1) in SETUP:
                msg += f" ({SETUP[m.group(1)][2]})"
            raise type(exc)(f"{where} {msg}" if msg.startswith("(") else f"{where}: {msg}"
                            ) from None
        if st["kind"] == "array" and observing:
            _check_array(conf, st, inst, lines, cell_pc, where)


def _check_setup_files(st, where):
    """antennas and fwhm_factor in config terms, before the instrument code sees them."""
    from .instrument.limits import FWHM_FACTOR_RANGE
    lo, hi = FWHM_FACTOR_RANGE
    if not lo <= st["fwhm_factor"] <= hi:
        raise ConfigError(f"{where}.fwhm_factor is {st['fwhm_factor']:g}; valid: {lo:g} <= "
                          f"fwhm_factor <= {hi:g} (beam FWHM in lambda/D)")
    ant = st["antennas"]
    if st["kind"] != "array" or ant is None:
        return
    from .instrument.arrays import BUILTIN_LAYOUTS
    if ant in BUILTIN_LAYOUTS:
        return
    if os.path.isdir(ant):
        raise ConfigError(f"{where}.antennas = {ant} is a folder; give a CSV file or a built-in "
                          f"layout ({', '.join(sorted(BUILTIN_LAYOUTS))})")
    if not os.path.isfile(ant):
        raise ConfigError(f"{where}.antennas = '{ant}' is neither a built-in layout "
                          f"({', '.join(sorted(BUILTIN_LAYOUTS))}) nor a CSV file (no such file; "
                          "paths are relative to the config)")
    if not os.access(ant, os.R_OK):
        raise ConfigError(f"{where}.antennas = {ant} cannot be read (permission denied)")


def _check_array(conf, st, inst, lines, cell_pc, where):
    """The source rises at the site during the hour angles. (The pixels need not sample the
    longest baseline: observe resamples the cube onto the pixels each setup needs; the map
    layouts are checked by :func:`synth.observing.check_setups`.)"""
    import astropy.units as u
    from .instrument.uv import elevation, sample_hour_angles
    dec = conf["sky"]["dec_deg"]
    lat = st["latitude_deg"]
    ha = tuple(st["hour_angles_h"]) * u.hourangle
    h, _ = sample_hour_angles(ha, st["sample_interval_s"] * u.s)
    el = np.degrees(elevation(h, np.radians(dec), np.radians(lat)))
    limit = inst.elevation_limit.to_value(u.deg)
    if not (el >= limit).any():
        raise ConfigError(f"{where}: the source at [sky].dec_deg = {dec:g} never rises above "
                          f"{limit:g} deg elevation at latitude_deg = {lat:g} during hour angles "
                          f"{st['hour_angles_h'][0]:g}..{st['hour_angles_h'][1]:g} h (highest "
                          f"{el.max():.1f} deg); valid: a declination within about "
                          f"{90 - limit:g} deg of the latitude")
