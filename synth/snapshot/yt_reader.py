"""Read a Snapshot from any dataset yt can load, through a uniform covering grid.

yt (Turk et al. 2011, ApJS 192, 9) reads many simulation codes, including adaptive-mesh ones.
:func:`read_yt` asks it for a *covering grid*: the data sampled on one uniform grid at a chosen
refinement level (finer cells where the mesh is refined, coarser cells injected into
``refine_by^level`` sub-cells elsewhere). Values come back in yt's unyt units, are converted
to CGS and handed over as astropy Quantities, then checked by :class:`Snapshot`.

yt is optional: without it, :func:`read_yt` raises :class:`~synth.errors.MissingDependencyError`
with the install hint (``pip install "synth[yt]"``).
"""

import numpy as np
import astropy.units as u

from .._optional import require
from ..errors import MemoryBudgetError, SnapshotError
from .core import Snapshot

__all__ = ["read_yt", "YT_DEFAULT_FIELDS", "YT_FIELD_NAMES"]

#: Default yt fields for each snapshot field (a mass density, converted with 2.8 m_H per H2).
YT_DEFAULT_FIELDS = {
    "density": ("gas", "density"),
    "t_kin": ("gas", "temperature"),
    "vx": ("gas", "velocity_x"),
    "vy": ("gas", "velocity_y"),
    "vz": ("gas", "velocity_z"),
}
#: Keys accepted in the ``fields`` mapping.
YT_FIELD_NAMES = ("n_h2", "density", "t_kin", "vx", "vy", "vz", "sigma_turb", "abundance")

_BYTES_PER_CELL = 8 * 8  # float64 covering-grid fields held at once, about 8


def read_yt(ds_or_path, level=0, fields=None, left_edge=None, dims=None, *, cell_size=None,
            sigma_turb=None, mean_mass=None, max_bytes=4e9):
    """Read a yt dataset (or a file yt can load) into a Snapshot through a covering grid.

    Parameters
    ----------
    ds_or_path : yt Dataset, str or Path
        An already loaded dataset, or a path handed to ``yt.load``.
    level : int
        Refinement level of the covering grid (0 = the root grid).
    fields : dict, optional
        ``{field: yt field}``, with yt fields as ``(type, name)`` pairs (or a list of two
        strings, as in a TOML config). Keys: ``n_h2`` (a number density) or ``density``
        (a mass density), ``t_kin``, ``vx``, ``vy``, ``vz``, ``sigma_turb`` and ``abundance``
        (``{species: yt field}``). Missing keys take :data:`YT_DEFAULT_FIELDS`.
    left_edge : Quantity ``[length]``, (3,), optional
        Lower corner of the grid (default: the domain's).
    dims : sequence of 3 int, optional
        Cells along x, y, z (default: up to the domain's right edge at ``level``).
    cell_size : Quantity ``[length]``, optional
        Overrides the covering grid's cell size (e.g. after rescaling a scale-free run).
    sigma_turb : Quantity ``[speed]``, optional
        Microturbulent dispersion, overriding a ``sigma_turb`` field.
    mean_mass : Quantity ``[mass]``, optional
        Mass per H2 for a mass density (default 2.8 m_H).
    max_bytes : float
        Refuse covering grids whose fields would need more memory than this.

    Returns
    -------
    Snapshot
    """
    yt = require("yt")
    ds = yt.load(str(ds_or_path)) if not hasattr(ds_or_path, "covering_grid") else ds_or_path
    mapping = _mapping(fields)
    grid = _covering_grid(ds, level, left_edge, dims, max_bytes)
    dens_key = "n_h2" if "n_h2" in mapping else "density"
    dens = _fetch(ds, grid, dens_key, mapping[dens_key])
    t_kin = _fetch(ds, grid, "t_kin", mapping["t_kin"])
    parts = [_speed(_fetch(ds, grid, k, mapping[k]), k) for k in ("vx", "vy", "vz")]
    kw = {"cell_size": _grid_cell_size(grid) if cell_size is None else cell_size}
    if sigma_turb is not None:
        kw["sigma_turb"] = sigma_turb
    elif "sigma_turb" in mapping:
        kw["sigma_turb"] = _fetch(ds, grid, "sigma_turb", mapping["sigma_turb"])
    if "abundance" in mapping:
        kw["abundance"] = {sp: _fetch(ds, grid, f"abundance['{sp}']", f).to_value(u.one)
                           for sp, f in mapping["abundance"].items()}
    velocity = np.stack([p.value for p in parts]) * (u.cm / u.s)
    label = f"yt dataset '{ds}'"
    try:
        if dens.unit.is_equivalent(u.g / u.cm**3):
            return Snapshot.from_mass_density(dens, t_kin, velocity, mean_mass=mean_mass, **kw)
        return Snapshot(n_h2=dens, t_kin=t_kin, velocity=velocity, **kw)
    except SnapshotError as exc:
        raise SnapshotError(f"{label}: {exc}") from None


def _field_tuple(key, value):
    if isinstance(value, str):
        return value
    if isinstance(value, (tuple, list)) and len(value) == 2 and all(isinstance(v, str)
                                                                    for v in value):
        return tuple(value)
    raise SnapshotError(f"yt field for '{key}' = {value!r} is not valid; use a (type, name) "
                        "pair such as ('gas', 'density') or a field name")


def _mapping(fields):
    """Defaults updated with ``fields``; a given ``n_h2`` replaces the default ``density``."""
    fields = {} if fields is None else dict(fields)
    for key in fields:
        if key not in YT_FIELD_NAMES:
            raise SnapshotError(f"yt snapshot field '{key}' is not known; use one of "
                                f"{YT_FIELD_NAMES}")
    if "n_h2" in fields and "density" in fields:
        raise SnapshotError("yt fields give both 'n_h2' and 'density'; map only one")
    mapping = dict(YT_DEFAULT_FIELDS)
    if "n_h2" in fields:
        del mapping["density"]
    for key, value in fields.items():
        if key == "abundance":
            if not isinstance(value, dict):
                raise SnapshotError(f"yt field for 'abundance' = {value!r} is not valid; use "
                                    "{species: (type, name)}")
            mapping[key] = {sp: _field_tuple(f"abundance['{sp}']", f) for sp, f in value.items()}
        else:
            mapping[key] = _field_tuple(key, value)
    return mapping


def _covering_grid(ds, level, left_edge, dims, max_bytes):
    """yt's covering grid at ``level`` from ``left_edge`` with ``dims`` cells (validated)."""
    max_level = int(ds.index.max_level)
    if not isinstance(level, (int, np.integer)) or not 0 <= level <= max_level:
        raise SnapshotError(f"yt level = {level!r} is not valid; this dataset has levels "
                            f"0 to {max_level}")
    domain_le = ds.domain_left_edge.in_cgs().d
    dds_cm = ds.domain_width.in_cgs().d / (ds.domain_dimensions * ds.refine_by**level)
    le_cm = domain_le if left_edge is None else _length3(left_edge, "left_edge")
    if dims is None:
        dims = np.rint((ds.domain_right_edge.in_cgs().d - le_cm) / dds_cm).astype(int)
    dims = np.asarray(dims)
    if dims.shape != (3,) or dims.dtype.kind not in "iu" or np.any(dims < 1):
        raise SnapshotError(f"yt dims = {dims.tolist()} is not valid; use 3 positive integers")
    need = _BYTES_PER_CELL * float(np.prod(dims))
    if need > max_bytes:
        raise MemoryBudgetError(f"yt covering grid {dims.tolist()} needs about {need / 1e9:.1f} "
                                f"GB, more than max_bytes = {max_bytes / 1e9:.1f} GB; choose a "
                                "lower level, smaller dims or raise max_bytes")
    return ds.covering_grid(int(level), left_edge=ds.arr(le_cm, "cm"), dims=dims.tolist())


def _length3(value, name):
    if not isinstance(value, u.Quantity) or not value.unit.is_equivalent(u.cm):
        raise SnapshotError(f"yt {name} = {value!r} must be a length Quantity of shape (3,)")
    arr = value.to_value(u.cm)
    if np.shape(arr) != (3,):
        raise SnapshotError(f"yt {name} has shape {np.shape(arr)}; expected (3,)")
    return np.asarray(arr, dtype=float)


def _grid_cell_size(grid):
    dds_cm = grid.dds.in_cgs().d
    if not np.allclose(dds_cm, dds_cm[0], rtol=1e-6):
        raise SnapshotError(f"yt covering grid cells are not cubic: {dds_cm.tolist()} cm; "
                            "pass cell_size= to override or resample the dataset")
    return float(dds_cm[0]) * u.cm


def _speed(q, key):
    if not q.unit.is_equivalent(u.cm / u.s):
        raise SnapshotError(f"yt field for '{key}' has unit '{q.unit}'; a velocity component "
                            "must be a speed")
    return q.to(u.cm / u.s)


def _fetch(ds, grid, key, yt_field):
    """One covering-grid field as an astropy Quantity in CGS, or an error listing fields."""
    from yt.utilities.exceptions import YTFieldNotFound
    try:
        values = grid[yt_field].in_cgs()
    except YTFieldNotFound:
        have = ", ".join(f"{t},{n}" for t, n in sorted(ds.field_list))
        raise SnapshotError(f"yt field {yt_field!r} for '{key}' is not in this dataset; its "
                            f"stored fields are {have} (plus the fields yt derives)") from None
    try:
        return values.to_astropy()
    except ValueError:
        raise SnapshotError(f"yt field {yt_field!r} for '{key}' has unit '{values.units}', "
                            "which astropy cannot read") from None
