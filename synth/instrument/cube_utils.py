"""Checks and small helpers shared by every observing step: what a sky cube must look like.

Any :class:`spectral_cube.SpectralCube` with a celestial WCS (square, unrotated pixels), a
spectral axis (radio velocity or frequency) and a brightness unit of K or Jy/beam can be
observed. These helpers validate such a cube once, read its pixel scale and line frequency,
and build new cubes without touching the input (spectral-cube shares ``meta`` dictionaries
between cubes, so every new cube gets its own copy).
"""

import numpy as np
import astropy.units as u
from spectral_cube import SpectralCube

from ..errors import InstrumentError

__all__ = ["BRIGHTNESS_UNITS", "check_cube", "pixel_scale", "reference_frequency",
           "cube_values", "new_cube", "brightness_kind"]

#: meta entries spectral-cube manages itself (not copied to a new cube)
_NOT_COPIED = ("beam", "BUNIT", "Original Unit", "Original Type")
#: brightness units an observing step accepts (and can produce)
BRIGHTNESS_UNITS = ("K", "Jy/beam")


def check_cube(cube):
    """Raise InstrumentError unless ``cube`` is a SpectralCube we can observe."""
    if not isinstance(cube, SpectralCube):
        raise InstrumentError(f"cube: expected a spectral_cube.SpectralCube, got "
                              f"{type(cube).__name__}; build one with SpectralCube(data, wcs)")
    if not cube.wcs.has_celestial:
        raise InstrumentError("cube: the WCS has no celestial axes; a sky cube needs "
                              "RA/Dec (e.g. RA---SIN / DEC--SIN)")
    brightness_kind(cube)
    pixel_scale(cube)
    return cube


def brightness_kind(cube):
    """Return "K" or "Jy/beam" for the cube's unit, or raise InstrumentError."""
    unit = cube.unit
    if unit.is_equivalent(u.K):
        return "K"
    if unit.is_equivalent(u.Jy / u.beam):
        if getattr(cube, "_beam", None) is None and getattr(cube, "beams", None) is None:
            raise InstrumentError("cube: unit is Jy/beam but the cube carries no beam; "
                                  "attach one with cube.with_beam(Beam(...))")
        return "Jy/beam"
    raise InstrumentError(f"cube: unit {unit!s} is not a brightness unit; allowed: "
                          f"{', '.join(BRIGHTNESS_UNITS)}")


def pixel_scale(cube):
    """Angular size of one (square) sky pixel as a Quantity in arcsec.

    Raises InstrumentError for non-square or rotated pixels, which the beam kernels
    (built on one scale, aligned with the pixel axes) cannot describe.
    """
    cel = cube.wcs.celestial
    matrix_deg = cel.pixel_scale_matrix
    if abs(matrix_deg[0, 1]) + abs(matrix_deg[1, 0]) > 1e-9 * np.abs(matrix_deg).max():
        raise InstrumentError("cube: the celestial WCS is rotated (off-diagonal PC/CD terms); "
                              "regrid to north-up pixels first")
    dx_deg, dy_deg = abs(matrix_deg[0, 0]), abs(matrix_deg[1, 1])
    if not np.isclose(dx_deg, dy_deg, rtol=1e-6, atol=0):
        raise InstrumentError(f"cube: pixels are not square ({dx_deg * 3600:.6g} x "
                              f"{dy_deg * 3600:.6g} arcsec); regrid to square pixels first")
    return (dx_deg * u.deg).to(u.arcsec)


def reference_frequency(cube):
    """Line rest frequency (RESTFRQ) of the cube, or its mean frequency for a frequency
    axis without one, as a Quantity in Hz."""
    rest_hz = float(cube.wcs.wcs.restfrq or 0.0)
    if rest_hz > 0:
        return rest_hz * u.Hz
    axis = cube.spectral_axis
    if axis.unit.is_equivalent(u.Hz):
        return axis.to(u.Hz).mean()
    raise InstrumentError("cube: the spectral axis is a velocity but the WCS has no rest "
                          "frequency (RESTFRQ); set cube.wcs.wcs.restfrq or use a frequency axis")


def cube_values(cube, allow_blank=False):
    """The cube's data as a new float64 array (masked voxels take the cube's fill value).
    NaN or infinite voxels are refused unless ``allow_blank`` (blank = outside a map)."""
    data = np.array(cube.filled_data[:].value, dtype=np.float64)
    bad = ~np.isfinite(data)
    if bad.any() and not allow_blank:
        raise InstrumentError(f"cube: {int(bad.sum())} voxels are NaN or infinite (masked "
                              "voxels with a NaN fill value count); use cube.with_fill_value(0)")
    return data


def new_cube(template, data, unit, *, wcs=None, beam=None, meta_update=None):
    """A new SpectralCube from ``data`` with the template's WCS (or ``wcs``), its own copy of
    the template's meta (plus ``meta_update``) and the given beam (default: the template's,
    or its beam per channel)."""
    meta = {k: v for k, v in template.meta.items() if k not in _NOT_COPIED}
    meta.update(meta_update or {})
    wcs = (template.wcs if wcs is None else wcs).deepcopy()
    # the data become the cube's own (no copy): callers hand over fresh arrays
    if beam is None and getattr(template, "beams", None) is not None:   # a beam per channel
        from spectral_cube import VaryingResolutionSpectralCube
        return VaryingResolutionSpectralCube(u.Quantity(np.asarray(data), u.Unit(unit),
                                                        copy=False), wcs, meta=meta,
                                             beams=template.unmasked_beams)
    cube = SpectralCube(u.Quantity(np.asarray(data), u.Unit(unit), copy=False), wcs, meta=meta)
    if beam is None:
        beam = getattr(template, "_beam", None)
    return cube if beam is None else cube.with_beam(beam, raise_error_jybm=False)
