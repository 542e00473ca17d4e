"""FITS and file output: atomic writes with a provenance header.

Every file is written to a temporary name in the destination folder and renamed into place,
so an interrupted run leaves no half-written file. Every FITS header records the package
version (``SYNTHVER``) and the hash of the configuration that made it (``CONFHASH``).
"""

import hashlib
import json
import os
import secrets
from contextlib import contextmanager

import numpy as np
from astropy.io import fits

from . import __version__
from .errors import OutputError

__all__ = ["config_hash", "atomic_path", "write_cube", "write_json", "write_text",
           "write_image"]


def config_hash(config):
    """A short stable hash (sha256, 16 hex digits) of a JSON-serialisable configuration."""
    blob = json.dumps(config, sort_keys=True, default=str).encode()
    return hashlib.sha256(blob).hexdigest()[:16]


@contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it to ``path`` if the block succeeds."""
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise OutputError(f"output folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OutputError(f"output folder {folder} is not writable; choose another with --out")
    tmp = os.path.join(folder, f".tmp-{secrets.token_hex(6)}{os.path.splitext(path)[1]}")
    try:  # mode 0666 less the user's umask (mkstemp would force 0600; no umask change)
        os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
    except OSError as exc:
        raise OutputError(f"cannot write in {folder}: {exc.strerror or exc}; choose a "
                          "writable folder") from None
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def _provenance(header, conf_hash, extra):
    header["SYNTHVER"] = (__version__, "synth version that wrote this file")
    if conf_hash:
        header["CONFHASH"] = (conf_hash, "sha256[:16] of the run configuration")
    for key, value in (extra or {}).items():
        if isinstance(value, (bool, int, float, str, np.floating, np.integer)):
            header[key[:8].upper()] = value
    for key in _NUMERIC_CARDS:  # spectral-cube keeps meta as strings: restore the numbers
        if key in header and isinstance(header[key], str):
            try:
                number = float(header[key])
                header[key] = int(number) if key in _INTEGER_CARDS else number
            except ValueError:
                pass
    for key in _LOGICAL_CARDS:   # ... and the FITS logicals
        if key in header and isinstance(header[key], str) and header[key] in ("True", "False"):
            header[key] = header[key] == "True"
    return header


#: Header cards written by the instrument stages that hold numbers, integers, logicals.
_NUMERIC_CARDS = ("NOISERMS", "CHANWID", "NSEED", "ROBUST", "NVIS", "CLEANIT", "THEORMS",
                  "SDSCALE", "ABUND", "DISTPC", "TBG", "NPOINT", "PBLIMIT", "GUARD")
_INTEGER_CARDS = ("NSEED", "NVIS", "CLEANIT", "NPOINT")
_LOGICAL_CARDS = ("PBCORR", "DECONV", "FEATHER", "HANNING")


def write_cube(cube, path, conf_hash=None, extra=None):
    """Write a SpectralCube (or a Projection) to FITS atomically, with provenance cards."""
    hdu = cube.hdu
    hdu.data = np.asarray(hdu.data, dtype=np.float32)
    _provenance(hdu.header, conf_hash, extra)
    with atomic_path(path) as tmp:
        hdu.writeto(tmp, overwrite=True)
    return path


def write_image(data, header, path, conf_hash=None, extra=None):
    """Write a 2-D array with a FITS header atomically."""
    hdu = fits.PrimaryHDU(np.asarray(data, dtype=np.float32), header=header)
    _provenance(hdu.header, conf_hash, extra)
    with atomic_path(path) as tmp:
        hdu.writeto(tmp, overwrite=True)
    return path


def write_json(obj, path):
    """Write JSON atomically (sorted keys, 2-space indent)."""
    with atomic_path(path) as tmp, open(tmp, "w") as fh:
        json.dump(obj, fh, indent=2, sort_keys=True, default=_json_default)
        fh.write("\n")
    return path


def write_text(text, path):
    with atomic_path(path) as tmp, open(tmp, "w") as fh:
        fh.write(text)
    return path


def _json_default(obj):
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)
