"""What area an observation maps and with which pointings: one layout for observe and plan.

An array maps an area larger than its primary beam as a **mosaic**: pointings on a hexagonal
or rectangular grid whose spacing samples the primary beam. The aperture autocorrelation of
a dish of diameter D is band-limited to baselines < D, so the pointing pattern is a sampling
of a function band-limited to spatial frequencies < D / lambda:

- rectangular grid: Nyquist spacing lambda / (2 D) (Cornwell 1988, A&A 202, 316; Thompson,
  Moran & Swenson 2017, 3rd ed., sec. 11.5);
- hexagonal grid: lambda / (sqrt(3) D), the optimal sampling of a disc-band-limited function
  (Petersen & Middleton 1962, Information and Control 5, 279).

A single dish maps the area **on the fly**: rows sampled at lambda / (2 D) (Nyquist for the
dish beam; Mangum, Emerson & Greisen 2007, A&A 474, 679) over the area plus a guard band on
every side, so that the map edges get full coverage and flux spilled by the beam stays on the
map. The "pointings" of a dish map are its Nyquist positions; the time per position is the
integration time of the setup.

:func:`map_layout` decides the area (the whole model by default), the pointings and the extent
of the output grid; :func:`synth.planning.plan` counts the same pointings that
:func:`synth.observe` makes.
"""

from dataclasses import dataclass

import numpy as np

from ..errors import InstrumentError
from ..sky import ARCSEC_PER_RAD, C_M_S

__all__ = ["POINTING_PATTERNS", "MAX_POINTINGS", "GUARD_BEAMS", "MARGIN_PB", "MapLayout",
           "nyquist_spacing_arcsec", "pointing_offsets", "map_layout"]

#: array pointing patterns: a mosaic grid, or one pointing at the centre of the area
POINTING_PATTERNS = ("hexagonal", "rectangular", "single")
#: default limit on the number of pointings of one array mosaic
MAX_POINTINGS = 500
#: default guard band of a dish map, in beam FWHM on each side (a Gaussian beam spills
#: < 2e-4 of an edge pixel's flux beyond 1.5 FWHM)
GUARD_BEAMS = 1.5
#: margin of a mosaic's output grid around the mapped area, in primary-beam FWHM
MARGIN_PB = 0.5


def nyquist_spacing_arcsec(nu_hz, diameter_m, pattern="hexagonal"):
    """Pointing spacing that samples the primary beam: lambda/(sqrt(3) D) on a hexagonal,
    lambda/(2 D) on a rectangular grid (module docstring), in arcsec."""
    lam_over_d = C_M_S / float(nu_hz) / float(diameter_m) * ARCSEC_PER_RAD
    if pattern in ("hexagonal", "single"):
        return lam_over_d / np.sqrt(3.0)
    if pattern == "rectangular":
        return lam_over_d / 2.0
    raise InstrumentError(f"pointing pattern: {pattern!r} is not one of "
                          f"{', '.join(POINTING_PATTERNS)}")


def pointing_offsets(width, height, spacing, pattern="hexagonal"):
    """Pointing offsets (east, north) in arcsec of a grid centred on a ``width`` x ``height``
    area: every grid point inside the area (at least the centre), row by row from the south.

    Hexagonal: rows ``spacing sqrt(3)/2`` apart, odd rows shifted by half a spacing.
    Rectangular: a square grid of ``spacing``.
    """
    if pattern not in POINTING_PATTERNS:
        raise InstrumentError(f"pointing pattern: {pattern!r} is not one of "
                              f"{', '.join(POINTING_PATTERNS)}")
    if pattern == "single":
        return np.zeros((1, 2))
    dy = spacing * np.sqrt(3.0) / 2.0 if pattern == "hexagonal" else spacing
    tol = 1e-9 * max(width, height, spacing)
    n_rows = int(np.floor(height / 2.0 / dy + 1e-9))
    n_cols = int(np.floor(width / spacing)) + 2
    out = []
    for r in range(-n_rows, n_rows + 1):
        shift = 0.5 * spacing if (pattern == "hexagonal" and r % 2) else 0.0
        x = np.arange(-n_cols, n_cols + 1) * spacing + shift
        for xi in x[np.abs(x) <= width / 2.0 + tol]:
            out.append((xi, r * dy))
    if not out:
        out = [(0.0, 0.0)]
    return np.array(out, dtype=np.float64)


@dataclass(frozen=True, eq=False)
class MapLayout:
    """The area a setup maps and how (all angles in arcsec, offsets (east, north) from the
    model's reference point).

    ``pointings`` are the array's pointing centres or the dish's Nyquist map positions;
    ``grid_size`` the extent of the output image (centred on ``center``); ``single_field`` is True
    for the default single pointing of a model that fits one field (the output grid is then
    the model's own extent).
    """

    kind: str
    center: tuple
    size: tuple
    pointings: np.ndarray
    spacing: float
    pattern: str
    grid_size: tuple
    guard: float
    pixel: float
    field_fwhm: float
    single_field: bool

    @property
    def n_pointings(self):
        return int(self.pointings.shape[0])

    def describe(self):
        """One line for logs and notes."""
        what = ("on-the-fly map" if self.kind == "dish" else
                "single pointing" if self.n_pointings == 1 else f"{self.pattern} mosaic")
        return (f"{what}: {self.size[0]:.4g}\" x {self.size[1]:.4g}\" around "
                f"({self.center[0]:+.4g}\", {self.center[1]:+.4g}\"), {self.n_pointings} "
                f"{'positions' if self.kind == 'dish' else 'pointings'} "
                f"{self.spacing:.4g}\" apart" + (f", guard band {self.guard:.4g}\""
                                                 if self.kind == "dish" else ""))


def _pair(value, name, where):
    if value is None:
        return None
    v = np.atleast_1d(np.asarray(value, dtype=np.float64))
    if v.size == 1:
        v = np.array([v[0], v[0]])
    if v.size != 2 or not np.all(np.isfinite(v)):
        raise InstrumentError(f"{where}{name}: {value!r}; give one number or two (arcsec)")
    return float(v[0]), float(v[1])


def map_layout(kind, *, model_center, model_size, field_fwhm, beam_fwhm, spacing_default,
               map_size=None, map_offset=None, pattern="hexagonal", spacing=None,
               guard_band=None, max_pointings=MAX_POINTINGS, pixel=None, where=""):
    """The MapLayout of a dish ("dish") or array ("array") setup. All angles in arcsec.

    Parameters
    ----------
    model_center, model_size : (float, float)
        Centre offset (east, north) and extent (width, height) of the model sky.
    field_fwhm : float
        Primary-beam FWHM (array) or beam FWHM (dish).
    beam_fwhm : float
        Resolution of the result (the dish beam, or the synthesized-beam estimate).
    spacing_default : float
        Pointing (array) or position (dish) spacing when ``spacing`` is None.
    map_size, map_offset : float or (float, float), optional
        The area to map; default the whole model.
    pattern : {"hexagonal", "rectangular", "single"}
        Array pointing pattern (a dish map is always rectangular); "single" is one pointing
        at the centre of the area whatever its size.
    guard_band : float, optional
        Dish: extra width scanned on every side (default ``GUARD_BEAMS`` x beam FWHM).
    max_pointings : int
        Refuse array mosaics with more pointings than this (a dish map's positions cost
        nothing extra to simulate and are not limited).
    pixel : float, optional
        Output pixel; default ``beam_fwhm / 4`` (finer model pixels are kept).
    where : str
        Prefix of error messages (e.g. "setup 'wide': ").
    """
    from .grid import PIXELS_PER_BEAM
    size = _pair(map_size, "map_size", where)
    center = _pair(map_offset, "map_offset", where) or tuple(model_center)
    explicit = size is not None
    size = size or tuple(model_size)
    if min(size) <= 0:
        raise InstrumentError(f"{where}map_size: {size}; must be > 0 arcsec")
    if explicit and min(size) < beam_fwhm:
        raise InstrumentError(f"{where}map_size: {min(size):.4g} arcsec is smaller than one beam "
                              f"({beam_fwhm:.4g} arcsec); map at least one beam")
    if kind == "array" and pattern not in POINTING_PATTERNS:
        raise InstrumentError(f"{where}pointing_pattern: {pattern!r} is not one of "
                              f"{', '.join(POINTING_PATTERNS)}")
    step = spacing_default if spacing is None else float(spacing)
    if not (np.isfinite(step) and step > 0):
        raise InstrumentError(f"{where}pointing_spacing: {spacing!r}; must be > 0 arcsec")
    if step > field_fwhm:
        raise InstrumentError(f"{where}pointing_spacing: {step:.4g} arcsec is larger than the "
                              f"{'beam' if kind == 'dish' else 'primary beam'} "
                              f"({field_fwhm:.4g} arcsec FWHM); the map would have gaps")
    if pixel is None:
        pixel = beam_fwhm / PIXELS_PER_BEAM
    elif not (np.isfinite(pixel) and pixel > 0):
        raise InstrumentError(f"{where}pixel: {pixel!r}; must be > 0 arcsec")
    elif pixel > beam_fwhm / 2.0:
        raise InstrumentError(f"{where}pixel: {pixel:.4g} arcsec does not sample the beam "
                              f"({beam_fwhm:.4g} arcsec FWHM); use <= {beam_fwhm / 2:.4g}")
    if kind == "dish":
        guard = GUARD_BEAMS * beam_fwhm if guard_band is None else float(guard_band)
        if not (np.isfinite(guard) and guard >= 0):
            raise InstrumentError(f"{where}guard_band: {guard_band!r}; must be >= 0 arcsec")
        grid = (size[0] + 2 * guard, size[1] + 2 * guard)
        offs = pointing_offsets(grid[0], grid[1], step, "rectangular")
        single, pat = False, "rectangular"
    else:
        guard, pat = 0.0, pattern
        half_diag = 0.5 * np.hypot(*size)
        fits = half_diag <= 0.5 * field_fwhm
        single = not explicit and (fits or pattern == "single")
        if single or pattern == "single":
            offs, grid = np.zeros((1, 2)), tuple(size)
        else:
            offs = pointing_offsets(size[0], size[1], step, pattern)
            grid = (size[0] + 2 * MARGIN_PB * field_fwhm, size[1] + 2 * MARGIN_PB * field_fwhm)
    if kind == "array" and offs.shape[0] > max_pointings:
        raise InstrumentError(
            f"{where}max_pointings: the mosaic needs {offs.shape[0]} pointings, more than the "
            f"limit of {max_pointings}; map a smaller area, or raise max_pointings")
    pointings = offs + np.asarray(center)[None, :]
    return MapLayout(kind=kind, center=center, size=size, pointings=pointings, spacing=step,
                     pattern=pat, grid_size=grid, guard=guard,
                     pixel=float(pixel), field_fwhm=float(field_fwhm), single_field=single)
