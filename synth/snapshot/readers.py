"""Read snapshots from ``.npz``, HDF5 and FITS files; write ``.npz`` snapshots.

Every format is read through the same small interface (a *source*: the names it holds, one
array with its stored unit, a stored cell size) and assembled in one place, so that field
mapping, units, axis order and error messages are the same for all formats.

Field names (the keys of ``fields``): ``n_h2`` (number density) or ``density`` (mass
density, converted with 2.8 m_H per H2), ``t_kin``, ``velocity`` (shape (3, ...)) or
``vx``/``vy``/``vz``, and optionally ``sigma_turb`` and ``abundance`` (a name, or a dict
``{species: name}``). Each value is the stored name (npz key, HDF5 dataset path, FITS EXTNAME,
or for a dict of FITS files the field's file), or ``{"name": ..., "unit": ...}``.

Units, first found: the mapping's ``unit``; ``units={field: unit}``; the stored unit (npz key
``<name>_unit``, HDF5 attribute ``units`` or ``unit``, FITS ``BUNIT``). A density whose unit
is a mass density is converted with :meth:`Snapshot.from_mass_density`, whatever its name.

Axis order: arrays are ``[x, y, z]`` (``axis_order="xyz"``) except FITS, whose data astropy
returns as (NAXIS3, NAXIS2, NAXIS1), i.e. ``"zyx"`` when FITS axis 1 is x. Velocity components
stay (v_x, v_y, v_z) whatever the spatial order.

Cell size, first found: the ``cell_size`` argument; npz key ``cell_size`` (+ ``cell_size_unit``);
HDF5 root attribute ``cell_size`` (+ ``cell_size_unit``); FITS ``CDELT1`` with a length ``CUNIT1``.
"""

import os

import numpy as np
import astropy.units as u

from ..errors import ConfigError, SnapshotError
from ..fitsio import atomic_path
from ._sources import open_source
from .core import Snapshot

__all__ = ["read_snapshot", "snapshot_shape", "write_npz", "write_hdf5", "FORMATS", "FIELD_NAMES", "AXIS_ORDERS"]

#: File formats read_snapshot understands.
FORMATS = ("npz", "hdf5", "fits", "zarr")
#: Field names accepted as keys of the ``fields`` mapping.
FIELD_NAMES = ("n_h2", "density", "t_kin", "velocity", "vx", "vy", "vz", "sigma_turb",
               "abundance")
#: Spatial axis orders of stored arrays.
AXIS_ORDERS = ("xyz", "zyx")

_SUFFIXES = {".npz": "npz", ".h5": "hdf5", ".hdf5": "hdf5", ".hdf": "hdf5",
             ".fits": "fits", ".fit": "fits", ".fts": "fits", ".zarr": "zarr"}
_DEFAULT_ORDER = {"npz": "xyz", "hdf5": "xyz", "fits": "zyx", "zarr": "xyz"}


def read_snapshot(path, fields=None, cell_size=None, format=None, *, units=None,
                  axis_order=None, sigma_turb=None, mean_mass=None, region=None):
    """Read a Snapshot from a file (see the module docstring for names, units and axes).

    Parameters
    ----------
    path : str, Path or dict
        A ``.npz``, HDF5 or FITS file; or a dict ``{field: FITS file}``, one field per file.
    fields : dict, optional
        ``{field: stored name}`` or ``{field: {"name": ..., "unit": ...}}``; by default
        the stored names equal the field names (case-insensitive for FITS EXTNAMEs).
    cell_size : Quantity ``[length]``, optional
        Overrides the cell size stored in the file.
    format : str, optional
        One of :data:`FORMATS`; by default from the file name.
    units : dict, optional
        ``{field: unit string}`` for fields whose file stores no unit.
    axis_order : str, optional
        One of :data:`AXIS_ORDERS` for the stored spatial axes.
    sigma_turb : Quantity ``[speed]``, optional
        Microturbulent dispersion, overriding a stored ``sigma_turb`` field.
    mean_mass : Quantity ``[mass]``, optional
        Mass per H2 for a mass density (default 2.8 m_H; Kauffmann et al. 2008, appendix A).
    region : (axis, start, stop), optional
        Read only the slab ``start:stop`` along snapshot axis ``axis`` (0, 1, 2 = x, y, z).
        HDF5, zarr and FITS files are read lazily, so only that slab leaves the disk (used by
        :class:`synth.snapshot.lazy.SnapshotFile` for tiled runs).

    Returns
    -------
    Snapshot

    Examples
    --------
    >>> import tempfile, os
    >>> from synth.snapshot.demo import demo_cloud
    >>> path = os.path.join(tempfile.mkdtemp(), "cloud.npz")
    >>> write_npz(demo_cloud(cells=16), path)
    >>> read_snapshot(path).shape
    (16, 16, 16)
    """
    fmt = _resolve_format(path, format)
    order = _DEFAULT_ORDER[fmt] if axis_order is None else axis_order
    if order not in AXIS_ORDERS:
        raise ConfigError(f"axis_order '{order}' is not known; use one of {AXIS_ORDERS}")
    spec = _field_spec(fields, units)
    with open_source(path, fmt, FIELD_NAMES) as src:
        src.region = _check_region(region)
        return _assemble(src, spec, order, cell_size, sigma_turb, mean_mass)


def snapshot_shape(path, fields=None, format=None, *, axis_order=None):
    """The (nx, ny, nz) shape of a snapshot file, read from its metadata only."""
    fmt = _resolve_format(path, format)
    order = _DEFAULT_ORDER[fmt] if axis_order is None else axis_order
    spec = _field_spec(fields, None)
    with open_source(path, fmt, FIELD_NAMES) as src:
        name = spec[_density_key(src, spec)][0]
        shape = tuple(src.get(name).shape)
    if len(shape) != 3:
        raise SnapshotError(f"snapshot file '{path}': density '{name}' has shape {shape}; "
                            "expected 3 spatial axes")
    return shape if order == "xyz" else shape[::-1]


def _check_region(region):
    if region is None:
        return None
    try:
        axis, start, stop = (int(v) for v in region)
    except (TypeError, ValueError):
        raise ConfigError(f"region must be (axis, start, stop), got {region!r}") from None
    if axis not in (0, 1, 2) or start < 0 or stop <= start:
        raise ConfigError(f"region {region!r}: need axis 0, 1 or 2 and 0 <= start < stop")
    return axis, start, stop


def write_npz(snapshot, path):
    """Write ``snapshot`` to a ``.npz`` file that :func:`read_snapshot` reads back exactly.

    Keys: ``n_h2`` (cm-3), ``t_kin`` (K), ``velocity`` (cm/s), ``sigma_turb`` (cm/s),
    ``cell_size`` (cm), each with a ``<key>_unit`` string, and ``abundance`` or
    ``abundance_<species>``. Written to a temporary name in the same folder and renamed,
    so no half-written file is left behind.
    """
    c = snapshot._cgs
    out = {"n_h2": c["n_h2_cm3"], "n_h2_unit": "cm-3", "t_kin": c["t_kin_k"], "t_kin_unit": "K",
           "velocity": c["velocity_cms"], "velocity_unit": "cm / s",
           "sigma_turb": np.asarray(c["sigma_turb_cms"]), "sigma_turb_unit": "cm / s",
           "cell_size": np.float64(c["cell_size_cm"]), "cell_size_unit": "cm"}
    for species, arr in (c["abundance"] or {}).items():
        out["abundance" if species is None else f"abundance_{species}"] = arr
    with atomic_path(os.fspath(path)) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, **out)


def write_hdf5(snapshot, path):
    """Write ``snapshot`` to an HDF5 file that :func:`read_snapshot` (and
    :class:`~synth.snapshot.lazy.SnapshotFile`) read back exactly: datasets ``n_h2``,
    ``t_kin``, ``velocity``, ``sigma_turb`` (when per cell), ``abundance[_<species>]``, each with
    a ``units`` attribute, and the root attribute ``cell_size`` (cm); a scalar sigma_turb is not
    stored (pass it to the reader). Contiguous datasets (x slabs are contiguous runs); written
    to a temporary name and renamed."""
    import h5py
    c = snapshot._cgs
    with atomic_path(os.fspath(path)) as tmp:
        with h5py.File(tmp, "w") as f:
            f.attrs["cell_size"], f.attrs["cell_size_unit"] = c["cell_size_cm"], "cm"
            for name, arr, unit in (("n_h2", c["n_h2_cm3"], "cm-3"), ("t_kin", c["t_kin_k"], "K"),
                                    ("velocity", c["velocity_cms"], "cm / s")):
                # contiguous: an x slab [x0:x1] (or [:, x0:x1]) is one (or three) runs
                f.create_dataset(name, data=arr).attrs["units"] = unit
            if np.ndim(c["sigma_turb_cms"]) == 3:
                f.create_dataset("sigma_turb", data=c["sigma_turb_cms"]).attrs["units"] = "cm / s"
            for species, arr in (c["abundance"] or {}).items():
                if np.ndim(arr) == 3:
                    name = "abundance" if species is None else f"abundance_{species}"
                    f.create_dataset(name, data=arr).attrs["units"] = ""


# ---- options ---------------------------------------------------------------------------------
def _resolve_format(path, fmt):
    if fmt is not None:
        if fmt not in FORMATS:
            raise ConfigError(f"snapshot format '{fmt}' is not known; use one of {FORMATS}")
        if isinstance(path, dict) and fmt != "fits":
            raise ConfigError(f"a dict of files is read as FITS only, not as '{fmt}'")
        return fmt
    if isinstance(path, dict):
        return "fits"
    name = str(path).lower().rstrip("/")
    name = name[:-3] if name.endswith(".gz") else name
    suffix = os.path.splitext(name)[1]
    if suffix not in _SUFFIXES:
        raise ConfigError(
            f"cannot tell the format of '{path}' from its suffix '{suffix}'; use one of "
            f"{sorted(_SUFFIXES)} or pass format= one of {FORMATS}")
    return _SUFFIXES[suffix]


def _field_spec(fields, units):
    """{field: (stored name or dict of names, unit or None, given explicitly?)}."""
    fields = {} if fields is None else dict(fields)
    units = {} if units is None else dict(units)
    for key in list(fields) + list(units):
        if key not in FIELD_NAMES:
            raise ConfigError(f"snapshot field '{key}' is not known; use one of {FIELD_NAMES}")
    spec = {}
    for key in FIELD_NAMES:
        value = fields.get(key, key)
        unit = units.get(key)
        if isinstance(value, dict) and key != "abundance":
            if "name" not in value or set(value) - {"name", "unit"}:
                raise ConfigError(
                    f"snapshot field '{key}' = {value!r}: use a name or {{name = ..., unit = ...}}")
            unit = value.get("unit", unit)
            value = value["name"]
        spec[key] = (value, unit, key in fields)
    return spec


# ---- assembly ---------------------------------------------------------------------------------
def _assemble(src, spec, order, cell_size, sigma_turb, mean_mass):
    """Fetch the fields from ``src``, fix axes and units, and build the Snapshot."""
    dens_key = _density_key(src, spec)
    dens = _quantity(src, spec, dens_key, order)
    t_kin = _quantity(src, spec, "t_kin", order)
    velocity = _velocity(src, spec, order)
    kw = {"cell_size": _cell_size(src, cell_size)}
    if sigma_turb is not None:
        kw["sigma_turb"] = sigma_turb
    elif _available(src, spec, "sigma_turb"):
        kw["sigma_turb"] = _quantity(src, spec, "sigma_turb", order)
    abundance = _abundance(src, spec, order)
    if abundance is not None:
        kw["abundance"] = abundance
    try:
        if dens.unit.is_equivalent(u.g / u.cm**3):
            return Snapshot.from_mass_density(dens, t_kin, velocity, mean_mass=mean_mass, **kw)
        if not dens.unit.is_equivalent(u.cm**-3):
            raise SnapshotError(f"field '{dens_key}' has unit '{dens.unit}', which is neither "
                                "a number density (cm-3) nor a mass density (g/cm3)")
        return Snapshot(n_h2=dens, t_kin=t_kin, velocity=velocity, **kw)
    except SnapshotError as exc:
        raise SnapshotError(f"{src.label}: {exc}") from None


def _available(src, spec, key):
    name, _, _ = spec[key]
    return isinstance(name, str) and src.has(name)


def _density_key(src, spec):
    found = [k for k in ("n_h2", "density") if _available(src, spec, k)]
    explicit = [k for k in ("n_h2", "density") if spec[k][2]]
    if len(explicit) == 2 or (not explicit and len(found) == 2):
        raise SnapshotError(f"{src.label}: both 'n_h2' and 'density' are present; map only one")
    if explicit:
        return explicit[0]
    if not found:
        raise SnapshotError(f"{src.label}: no density: looked for "
                            f"'{spec['n_h2'][0]}' or '{spec['density'][0]}'; {src.listing()}")
    return found[0]


def _velocity(src, spec, order):
    explicit = any(spec[k][2] for k in ("vx", "vy", "vz"))
    if not explicit and _available(src, spec, "velocity"):
        v = _quantity(src, spec, "velocity", order, vector=True)
        if v.ndim != 4 or v.shape[0] != 3:
            raise SnapshotError(f"{src.label}: velocity '{spec['velocity'][0]}' has shape "
                                f"{v.shape}; expected (3, nx, ny, nz)")
        return v
    if not explicit and not any(_available(src, spec, k) for k in ("vx", "vy", "vz")):
        raise SnapshotError(f"{src.label}: no velocity: looked for '{spec['velocity'][0]}' or "
                            f"'{spec['vx'][0]}', '{spec['vy'][0]}', '{spec['vz'][0]}'; "
                            f"{src.listing()}")
    parts = [_quantity(src, spec, k, order) for k in ("vx", "vy", "vz")]
    shapes = {p.shape for p in parts}
    if len(shapes) != 1:
        raise SnapshotError(f"{src.label}: vx, vy, vz have different shapes {sorted(shapes)}")
    unit = parts[0].unit
    return np.stack([p.to_value(unit) for p in parts]) * unit


def _abundance(src, spec, order):
    names, unit, explicit = spec["abundance"]
    if isinstance(names, str) and not explicit:
        prefix = "abundance_"
        found = {n.lstrip("/")[len(prefix):]: n for n in src.names()  # HDF5 names start "/"
                 if n.lstrip("/").startswith(prefix) and not n.endswith("_unit")}
        if src.has(names):
            return _array(src, names, order, "abundance")
        names = found or None
    if names is None:
        return None
    if isinstance(names, str):
        return _array(src, names, order, "abundance")
    return {sp: _array(src, name, order, f"abundance['{sp}']") for sp, name in names.items()}


def _quantity(src, spec, key, order, vector=False):
    name, unit, _ = spec[key]
    arr = _array(src, name, order, key, vector=vector or key == "velocity")
    stored = src.unit(name)
    unit = unit if unit is not None else stored
    if unit is None:
        raise SnapshotError(
            f"{src.label}: field '{key}' ('{name}') has no unit; give one with "
            f"units={{'{key}': '...'}} or fields={{'{key}': {{'name': '{name}', 'unit': '...'}}}}")
    try:
        return arr * u.Unit(unit)
    except ValueError:
        raise SnapshotError(f"{src.label}: field '{key}' has unit '{unit}', which astropy "
                            "cannot parse") from None


def _array(src, name, order, key, vector=False):
    if not src.has(name):
        raise SnapshotError(f"{src.label}: field '{key}' not found (looked for '{name}'); "
                            f"{src.listing()}")
    arr = src.get(name)
    region = getattr(src, "region", None)
    if region is not None and arr.ndim >= 3:
        axis, start, stop = region
        vec4 = vector and arr.ndim == 4
        pos = axis + (1 if vec4 else 0) if order == "xyz" else arr.ndim - 1 - axis
        if stop > arr.shape[pos]:
            raise SnapshotError(f"{src.label}: region {region} exceeds field '{key}' of shape "
                                f"{tuple(arr.shape)}")
        index = [slice(None)] * arr.ndim
        index[pos] = slice(start, stop)
        arr = arr[tuple(index)]
    arr = np.asarray(arr)
    if arr.dtype.kind not in "fiu":
        raise SnapshotError(f"{src.label}: field '{key}' ('{name}') has dtype {arr.dtype}; "
                            "expected numbers")
    if arr.dtype.kind == "f" and arr.dtype.itemsize < 4:
        arr = arr.astype(np.float32)  # unit conversions would overflow half precision
    if order == "zyx" and arr.ndim >= 3:
        axes = (0, 3, 2, 1) if (vector and arr.ndim == 4) else tuple(range(arr.ndim))[::-1]
        arr = np.ascontiguousarray(np.transpose(arr, axes))
    return arr


def _cell_size(src, cell_size):
    if cell_size is not None:
        return cell_size
    value, unit = src.cell_size()
    if value is None:
        raise SnapshotError(f"{src.label}: no cell size stored ({src.cell_size_hint}); pass "
                            "cell_size=<length Quantity>")
    value = np.asarray(value)
    try:
        if value.dtype.kind not in "fiu" or value.size != 1:
            raise ValueError
        return float(value.reshape(())) * u.Unit(unit)
    except (TypeError, ValueError):
        raise SnapshotError(f"{src.label}: stored cell size {value!r} {unit!r} is not a "
                            "number with a length unit") from None
