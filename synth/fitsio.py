"""FITS and file output: atomic writes with a provenance header.

Every file is written to a temporary name in the destination folder and renamed into place,
so an interrupted run leaves no half-written file. Every FITS header records the package
version (``SYNTHVER``) and the hash of the configuration that made it (``CONFHASH``).

Header conventions (every cube and map a run writes; docs/guide.md, "FITS headers"):

- the spectral axis is radio velocity (VRAD) in SI units, ``CUNIT3 = 'm s-1'`` (the FITS
  standard's unit; Greisen et al. 2006, A&A 446, 747), whatever unit the cube had in memory;
- ``BTYPE`` says what the values are: ``Intensity`` (K or Jy/beam), ``Optical depth``,
  ``Column density`` or ``Noise``; ``BUNIT`` their unit; ``NOISERMS`` is in ``BUNIT``;
- the beam is in ``BMAJ``/``BMIN``/``BPA`` (deg) only; FITS logicals are T/F, counts and
  seeds are integers;
- ``ORIGIN = 'synth'``; ``OBJECT``, ``TELESCOP``, ``LINE``, ``EXCIT``, ``ABUND`` come from the
  caller (``extra``).
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
    header["ORIGIN"] = ("synth", "program that wrote this file")
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
    _standard_cards(header)
    return header


#: BTYPE by the unit of the values, where the caller gave none
_BTYPE_BY_UNIT = (("K", "Intensity"), ("Jy/beam", "Intensity"), ("cm-2", "Column density"))

#: Cards whose value is a length of velocity in km/s (given in the comment)
_KMS_CARDS = {"CHANWID": "[km/s] channel width"}


def _standard_cards(header):
    """One convention for every file: SI spectral axis, BTYPE, the beam only as BMAJ/BMIN/BPA,
    no leftover comments of in-memory unit changes, NOISERMS in BUNIT."""
    from astropy import units as u
    for key in ("BEAM",):                       # the beam is BMAJ/BMIN/BPA only
        while key in header:
            del header[key]
    if "COMMENT" in header:                     # spectral-cube's "Original Unit=..." notes
        keep = [c for c in header["COMMENT"] if not str(c).startswith("Original ")]
        del header["COMMENT"]
        for c in keep:
            header["COMMENT"] = c
    naxis = header.get("NAXIS", 0)
    for i in range(1, naxis + 1):
        unit = header.get(f"CUNIT{i}")
        if not unit:
            continue
        try:
            parsed = u.Unit(unit)
        except ValueError:
            continue
        if parsed.is_equivalent(u.m / u.s):
            scale = parsed.to(u.m / u.s)
            for key in (f"CDELT{i}", f"CRVAL{i}", f"CD{i}_{i}"):
                if key in header and scale != 1.0:
                    header[key] = header[key] * scale
            header[f"CUNIT{i}"] = ("m s-1", "Units of coordinate increment and value")
            for key, what in ((f"CDELT{i}", "increment"), (f"CRVAL{i}", "value at CRPIX")):
                if key in header:
                    header.comments[key] = f"[m s-1] radio velocity {what}"
    bunit = str(header.get("BUNIT", "")).strip()
    if "BTYPE" not in header and bunit:
        try:
            parsed = u.Unit(bunit)
        except ValueError:
            parsed = None
        for name, btype in _BTYPE_BY_UNIT:
            if parsed is not None and parsed == u.Unit(name):
                header["BTYPE"] = btype
    for key, comment in _KMS_CARDS.items():
        if key in header:
            header.comments[key] = comment
    if "NOISERMS" in header and "NOISEUNI" in header and bunit:
        try:
            same = u.Unit(str(header["NOISEUNI"])) == u.Unit(bunit)
        except ValueError:
            same = False
        if not same:
            raise OutputError(f"NOISERMS is in {header['NOISEUNI']} but the data in {bunit}; "
                              "convert the cube with synth.instrument.beam.to_unit")
        header.comments["NOISERMS"] = "rms noise per channel, in BUNIT"


#: Header cards written by the instrument stages that hold numbers, integers, logicals.
_NUMERIC_CARDS = ("NOISERMS", "CHANWID", "NSEED", "ROBUST", "NVIS", "CLEANIT", "THEORMS",
                  "SDSCALE", "ABUND", "DISTPC", "TBG", "NPOINT", "PBLIMIT", "GUARD")
_INTEGER_CARDS = ("NSEED", "NVIS", "CLEANIT", "NPOINT")
_LOGICAL_CARDS = ("PBCORR", "DECONV", "FEATHER", "HANNING")


def write_cube(cube, path, conf_hash=None, extra=None):
    """Write a SpectralCube (or a Projection) to FITS atomically, with provenance cards.

    A cube with a beam per channel (VaryingResolutionSpectralCube) gets the FITS beams table:
    a BEAMS binary extension with BMAJ, BMIN (arcsec), BPA (deg), CHAN and POL per channel
    (as spectral-cube writes and reads it), and BMAJ/BMIN/BPA of the middle channel in the
    primary header."""
    beams = getattr(cube, "beams", None)
    if beams is not None:
        from astropy import units as u
        hdus = cube.hdulist
        hdu = hdus[0]
        mid = beams[len(beams) // 2]
        hdu.header["BMAJ"] = (mid.major.to_value(u.deg), "[deg] beam major axis, middle channel")
        hdu.header["BMIN"] = (mid.minor.to_value(u.deg), "[deg] beam minor axis, middle channel")
        hdu.header["BPA"] = (mid.pa.to_value(u.deg), "[deg] beam position angle, middle channel")
    else:
        hdu = cube.hdu
        hdus = fits.HDUList([hdu])
    hdu.data = np.asarray(hdu.data, dtype=np.float32)
    _provenance(hdu.header, conf_hash, extra)
    with atomic_path(path) as tmp:
        hdus.writeto(tmp, overwrite=True)
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
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
    return path


def _json_default(obj):
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)
