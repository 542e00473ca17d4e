"""File sources for :mod:`synth.snapshot.readers`: one small interface per format.

A source lists the names it holds (``names``/``has``), returns one array (``get``) with its
stored unit (``unit``: npz key ``<name>_unit``, HDF5 attribute ``units``/``unit``, FITS
``BUNIT``), and the stored cell size (``cell_size``). It is a context manager.
"""

import os
import zipfile

import numpy as np
import astropy.units as u

from ..errors import ConfigError, SnapshotError

__all__ = ["open_source"]


def open_source(path, fmt, field_names):
    """The source for ``path`` (a file, or a dict {field: FITS file}) in format ``fmt``."""
    if isinstance(path, dict):
        return _FitsFiles(path, field_names)
    if not os.path.exists(path):
        raise SnapshotError(f"snapshot file '{path}' does not exist")
    return {"npz": _Npz, "hdf5": _Hdf5, "fits": _FitsExtensions, "zarr": _Zarr}[fmt](path)


class _Source:
    """names() / has / get / unit / cell_size over one opened file; a context manager."""

    cell_size_hint = ""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self):
        pass

    def has(self, name):
        return name in self.names()

    def listing(self):
        names = sorted(self.names())
        shown = ", ".join(names[:30]) + (", ..." if len(names) > 30 else "")
        return f"the file holds: {shown or 'nothing'}"


class _Npz(_Source):
    cell_size_hint = "key 'cell_size' with 'cell_size_unit'"

    def __init__(self, path):
        self.label = f"snapshot file '{path}'"
        if os.path.isfile(path) and not zipfile.is_zipfile(path):
            raise SnapshotError(f"{self.label} is not a .npz file (not a zip archive of "
                                "arrays); write it with numpy.savez or synth.write_npz")
        try:
            self._data = np.load(path, allow_pickle=False)
        except (OSError, ValueError) as exc:
            raise SnapshotError(f"{self.label} is not a readable .npz file: {exc}") from None

    def close(self):
        self._data.close()

    def names(self):
        return list(self._data.files)

    def get(self, name):
        try:
            return self._data[name]
        except ValueError:  # e.g. an object array, refused without pickle
            raise SnapshotError(f"{self.label}: array '{name}' holds Python objects, which "
                                "synth does not load (loading them could run code stored in "
                                "the file); store plain numeric arrays") from None
        except (OSError, EOFError, zipfile.BadZipFile) as exc:
            raise SnapshotError(f"{self.label}: array '{name}' is damaged: {exc}") from None

    def unit(self, name):
        key = f"{name}_unit"
        return str(self.get(key)) if key in self._data.files else None

    def cell_size(self):
        if "cell_size" not in self._data.files:
            return None, None
        return self._data["cell_size"], self.unit("cell_size")


def _text(value):
    return value.decode() if isinstance(value, bytes) else (None if value is None else str(value))


class _Hdf5(_Source):
    cell_size_hint = "root attribute 'cell_size' with 'cell_size_unit'"

    def __init__(self, path):
        import h5py
        self.label = f"snapshot file '{path}'"
        try:
            self._file = h5py.File(path, "r")
        except OSError as exc:
            raise SnapshotError(f"{self.label} is not a readable HDF5 file: {exc}") from None
        self._names = []
        self._file.visititems(
            lambda n, obj: self._names.append("/" + n) if isinstance(obj, h5py.Dataset) else None)

    def close(self):
        self._file.close()

    def names(self):
        return self._names

    def has(self, name):
        return "/" + name.lstrip("/") in self._names

    def get(self, name):
        return self._file[name]  # an h5py Dataset: sliced lazily by the reader

    def unit(self, name):
        attrs = self._file[name].attrs
        return _text(attrs.get("units", attrs.get("unit")))

    def cell_size(self):
        attrs = self._file.attrs
        if "cell_size" not in attrs:
            return None, None
        return attrs["cell_size"], _text(attrs.get("cell_size_unit", attrs.get("cell_size_units")))


def _bunit(header):
    unit = header.get("BUNIT")
    if unit is None or not str(unit).strip():
        return None
    try:
        return u.Unit(str(unit).strip(), format="fits")
    except ValueError:
        return str(unit).strip()


def _fits_cell_size(header):
    delt, unit = header.get("CDELT1"), header.get("CUNIT1")
    if delt is None or unit is None:
        return None, None
    try:
        if not u.Unit(unit).is_equivalent(u.cm):
            return None, None
    except ValueError:
        return None, None
    return abs(float(delt)), unit


class _FitsExtensions(_Source):
    """One FITS file, one field per image extension named by EXTNAME (case-insensitive)."""

    cell_size_hint = "CDELT1 with a length CUNIT1"

    def __init__(self, path):
        from astropy.io import fits
        self.label = f"snapshot file '{path}'"
        try:
            self._hdul = fits.open(path, memmap=True)
        except OSError as exc:
            raise SnapshotError(f"{self.label} is not a readable FITS file: {exc}") from None
        self._hdus = {h.name.upper(): h for h in self._hdul if h.data is not None}

    def close(self):
        self._hdul.close()

    def names(self):
        return list(self._hdus)

    def has(self, name):
        return name.upper() in self._hdus

    def get(self, name):
        return self._hdus[name.upper()].data

    def unit(self, name):
        return _bunit(self._hdus[name.upper()].header)

    def cell_size(self):
        for hdu in self._hdus.values():
            value, unit = _fits_cell_size(hdu.header)
            if value is not None:
                return value, unit
        return None, None


class _FitsFiles(_Source):
    """A dict {field: FITS file}; the first HDU with data of each file holds the field."""

    cell_size_hint = "CDELT1 with a length CUNIT1"

    def __init__(self, paths, field_names):
        for key in paths:
            if key not in field_names:
                raise ConfigError(f"snapshot field '{key}' is not known; use one of {field_names}")
        self.label = f"snapshot files {sorted(str(p) for p in paths.values())}"
        self._paths = {str(p): p for p in paths.values()}
        self._by_field = {k: str(p) for k, p in paths.items()}
        self._cache = {}

    def names(self):
        return list(self._by_field)

    def has(self, name):
        return name in self._by_field or name in self._paths

    def _hdu(self, name):
        path = self._by_field.get(name, name)
        if path not in self._cache:
            from astropy.io import fits
            if not os.path.exists(path):
                raise SnapshotError(f"snapshot file '{path}' (field '{name}') does not exist")
            hdul = fits.open(path, memmap=True)
            hdu = next((h for h in hdul if h.data is not None), None)
            if hdu is None:
                hdul.close()
                raise SnapshotError(f"snapshot file '{path}' holds no image data")
            self._cache[path] = (hdu.data, hdu.header.copy(), hdul)  # memory-mapped
        return self._cache[path]

    def close(self):
        for _, _, hdul in self._cache.values():
            hdul.close()
        self._cache.clear()

    def get(self, name):
        return self._hdu(name)[0]

    def unit(self, name):
        return _bunit(self._hdu(name)[1])

    def cell_size(self):
        for name in self._by_field:
            value, unit = _fits_cell_size(self._hdu(name)[1])
            if value is not None:
                return value, unit
        return None, None


class _Zarr(_Source):
    """A zarr store (directory); arrays by path, units in the array attribute ``units``."""

    cell_size_hint = "root attribute 'cell_size' with 'cell_size_unit'"

    def __init__(self, path):
        from .._optional import require
        zarr = require("zarr")
        self.label = f"snapshot store '{path}'"
        try:
            self._root = zarr.open_group(str(path), mode="r")
        except Exception as exc:  # zarr raises several types for a non-store
            raise SnapshotError(f"{self.label} is not a readable zarr group: {exc}") from None
        self._names = [name for name, _ in self._root.arrays()]

    def names(self):
        return list(self._names)

    def has(self, name):
        return name.strip("/") in self._names

    def get(self, name):
        return self._root[name.strip("/")]  # a zarr Array: sliced lazily by the reader

    def unit(self, name):
        attrs = self._root[name.strip("/")].attrs
        return _text(attrs.get("units", attrs.get("unit")))

    def cell_size(self):
        attrs = self._root.attrs
        if "cell_size" not in attrs:
            return None, None
        return attrs["cell_size"], _text(attrs.get("cell_size_unit"))
