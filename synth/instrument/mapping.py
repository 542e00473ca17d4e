"""Observing an area: the output grid, the pointings, and the linear mosaic.

An array observation of an area (see :mod:`synth.instrument.mosaic` for the layout) is made
pointing by pointing. Pointing p sees the sky times its own primary beam A_p, has its own uv
tracks (its own declination and hour angles: the pointings are visited in turn, so each gets
every N-th slice of each sample interval, and its noise is that of 1/N of the track) and its
own thermal noise. Each pointing is imaged on a sub-image around its centre (out to where its
primary beam falls below 1e-3), deconvolved if asked, and restored with one restoring beam.
The images are combined as a primary-beam-weighted linear mosaic (Cornwell 1988, A&A 202,
316; Thompson, Moran & Swenson 2017, 3rd ed., sec. 11.5), with inverse-variance weights:

    I(x) = sum_p A_p(x) I_p(x) / s_p^2  /  sum_p A_p(x)^2 / s_p^2,
    sigma(x) = [sum_p A_p(x)^2 / s_p^2]^(-1/2)      (the sensitivity map),

where s_p is pointing p's image noise. I is the **primary-beam-corrected** mosaic (NaN where
the response below falls under ``primary_beam_cutoff``); the **uncorrected** (flat-noise) mosaic is
I(x) R(x) with the response R(x) = s_ref / sigma(x), s_ref the median s_p. For one pointing
R = A and the uncorrected image is the usual dirty/CLEAN image of the attenuated sky.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u

from ..errors import InstrumentError
from ..sky import ARCSEC_PER_RAD, C_M_S
from .grid import BEYOND_BOX, SkyGrid, model_grid, observation_grid
from .uv import SIDEREAL_RATE_RAD_S
from .mosaic import MAX_POINTINGS, POINTING_PATTERNS, map_layout, nyquist_spacing_arcsec

__all__ = ["MapOptions", "map_options", "ObservedMap", "array_layout", "dish_layout",
           "array_canvas", "output_grid", "sub_boxes", "pointing_hour_angles",
           "primary_beam_fwhm_arcsec", "longest_baseline_m", "SUBIMAGE_RADIUS_PB"]

#: each pointing is imaged out to this many primary-beam FWHM from its centre
#: (a Gaussian primary beam is 8e-4 there)
SUBIMAGE_RADIUS_PB = 1.6


@dataclass(frozen=True)
class MapOptions:
    """What area to map and on which pixels (angles in arcsec; None = the default)."""

    map_size: tuple = None
    map_offset: tuple = None
    pixel: float = None
    beyond_box: str = "empty"
    pointing_pattern: str = "hexagonal"
    pointing_spacing: float = None
    guard_band: float = None
    max_pointings: int = MAX_POINTINGS


def _arcsec(value, name, pair=False):
    if value is None:
        return None
    try:
        q = u.Quantity(value)
        v = q.to_value(u.arcsec)
    except (u.UnitsError, TypeError, ValueError) as exc:
        raise InstrumentError(f"{name}: {value!r}; give an angle Quantity (e.g. 60 * u.arcsec)"
                              ) from exc
    v = np.atleast_1d(v).astype(float)
    if not np.all(np.isfinite(v)) or v.size > (2 if pair else 1):
        raise InstrumentError(f"{name}: {value!r}; give {'one or two finite angles' if pair else 'one finite angle'}")
    if pair:
        return (float(v[0]), float(v[-1]))
    return float(v[0])


def map_options(map_size=None, map_offset=None, pixel=None, beyond_box="empty",
                pointing_pattern="hexagonal", pointing_spacing=None, guard_band=None,
                max_pointings=MAX_POINTINGS):
    """MapOptions from the keyword arguments of :func:`synth.observe` (Quantities)."""
    if beyond_box not in BEYOND_BOX:
        raise InstrumentError(f"beyond_box: {beyond_box!r} is not one of {', '.join(BEYOND_BOX)}")
    if pointing_pattern not in POINTING_PATTERNS:
        raise InstrumentError(f"pointing_pattern: {pointing_pattern!r} is not one of "
                              f"{', '.join(POINTING_PATTERNS)}")
    if isinstance(max_pointings, bool) or not isinstance(max_pointings, (int, np.integer)) \
            or max_pointings < 1:
        raise InstrumentError(f"max_pointings: {max_pointings!r}; must be an integer >= 1")
    center = _arcsec(map_offset, "map_offset", pair=True)
    if map_offset is not None and np.size(u.Quantity(map_offset)) != 2:
        raise InstrumentError(f"map_offset: {map_offset!r}; give (east, north) offsets, "
                              "e.g. (30, -10) * u.arcsec")
    return MapOptions(map_size=_arcsec(map_size, "map_size", pair=True), map_offset=center,
                      pixel=_arcsec(pixel, "pixel", pair=False), beyond_box=beyond_box,
                      pointing_pattern=pointing_pattern,
                      pointing_spacing=_arcsec(pointing_spacing, "pointing_spacing"),
                      guard_band=_arcsec(guard_band, "guard_band"),
                      max_pointings=int(max_pointings))


@dataclass(frozen=True, eq=False)
class ObservedMap:
    """Everything an observation of an area made.

    ``cube`` is the product ``observe`` returns (corrected or not, as asked); ``corrected``
    and ``uncorrected`` the primary-beam-corrected and flat-noise products (the same cube for
    a single dish); ``sensitivity`` the noise map (2-D, the cube's unit, at the middle
    channel) and ``response`` the relative response R (2-D); ``sky`` the model sky on the
    output grid (K, the reference every survival metric uses); ``layout`` the MapLayout.
    """

    cube: object
    corrected: object
    uncorrected: object
    sensitivity: u.Quantity
    response: np.ndarray
    sky: object
    layout: object


def _model_box(cube):
    """(centre (east, north), size (w, h)) of the model sky in arcsec. The default map centre
    is the cube's reference point (CRVAL, the phase centre), the size the cube's extent."""
    g = model_grid(cube)
    return (0.0, 0.0), (g.nx * g.pixel_arcsec, g.ny * g.pixel_arcsec)


def dish_layout(cube, dish, mopts, freq_hz, where="", model_size=None):
    """MapLayout of a single-dish on-the-fly map of ``cube`` (or of an area ``model_size``
    (width, height) in arcsec when no cube is given)."""
    beam = dish.beam_at(freq_hz * u.Hz)
    fwhm = float(beam.major.to_value(u.arcsec))
    if dish.diameter is not None:
        step = nyquist_spacing_arcsec(freq_hz, dish.diameter.to_value(u.m), "rectangular")
    else:
        step = 0.5 * fwhm / 1.13
    center, size = _model_box(cube) if cube is not None else ((0.0, 0.0), model_size)
    return map_layout("dish", model_center=center, model_size=size, field_fwhm=fwhm,
                      beam_fwhm=fwhm, spacing_default=step, map_size=mopts.map_size,
                      map_offset=mopts.map_offset, spacing=mopts.pointing_spacing,
                      guard_band=mopts.guard_band, max_pointings=mopts.max_pointings,
                      pixel=mopts.pixel, where=where)


def primary_beam_fwhm_arcsec(arrays, freq_hz):
    """Gaussian primary-beam FWHM (fwhm_factor lambda / D) of the largest dish of the arrays."""
    d = max(float(np.max(a.diameters_m)) for a in arrays)
    fwhm_factor = min(a.fwhm_factor for a in arrays)
    return fwhm_factor * C_M_S / freq_hz / d * ARCSEC_PER_RAD, d


def longest_baseline_m(arrays, dec_rad, opts):
    """Longest projected baseline (m) of the arrays over their tracks."""
    from .uv import uv_tracks
    return max(float(np.hypot(*uv_tracks(a, dec_rad * u.rad, opts["hour_angles"],
                                          opts["sample_interval"]).uvw_m[:, :2].T).max())
               for a in arrays)


def array_layout(cube, arrays, opts, mopts, dec_rad, freqs_hz, where="", model_size=None,
                 nu_layout=None):
    """(MapLayout, pixel in arcsec) of an array observation of ``cube`` (or of an area
    ``model_size`` (width, height) in arcsec when no cube is given; the pixel is then None).

    The default pixel samples the synthesized beam with >= 4 pixels per FWHM (estimated as
    lambda / B_max at the highest frequency) and keeps the model's pixel when it is finer.
    The primary beam and the pointing spacing are taken at ``nu_layout`` (the line's rest
    frequency; default the median channel), as the planner does.
    """
    freqs_hz = np.atleast_1d(freqs_hz)
    nu_ref = float(nu_layout) if nu_layout is not None else float(np.median(freqs_hz))
    pb_fwhm, d_m = primary_beam_fwhm_arcsec(arrays, nu_ref)
    b_max = longest_baseline_m(arrays, dec_rad, opts)
    beam_fwhm = C_M_S / float(np.max(freqs_hz)) / b_max * ARCSEC_PER_RAD
    pattern = mopts.pointing_pattern if opts.get("primary_beam", True) else "single"
    step = nyquist_spacing_arcsec(nu_ref, d_m, pattern)
    center, size = _model_box(cube) if cube is not None else ((0.0, 0.0), model_size)
    if mopts.pixel is not None and mopts.pixel > 0.5 * beam_fwhm:
        raise InstrumentError(
            f"{where}pixel: {mopts.pixel:.4g} arcsec is too coarse for the longest "
            f"baseline ({b_max:.0f} m at {np.max(freqs_hz) / 1e9:.3f} GHz): the pixel must be "
            f"<= {0.5 * beam_fwhm:.4g} arcsec (Nyquist)")
    # without a primary beam (an idealisation for tests) one pointing sees everything
    layout = map_layout("array", model_center=center, model_size=size, field_fwhm=pb_fwhm,
                        beam_fwhm=beam_fwhm, spacing_default=step, map_size=mopts.map_size,
                        map_offset=mopts.map_offset, pattern=pattern,
                        spacing=mopts.pointing_spacing, max_pointings=mopts.max_pointings,
                        pixel=mopts.pixel, where=where)
    if cube is None:
        return layout, None
    model_pix = model_grid(cube).pixel_arcsec
    pixel = mopts.pixel if mopts.pixel is not None else min(model_pix, layout.pixel)
    return layout, pixel


def output_grid(cube, layout, pixel):
    """(SkyGrid of the output, zoomed model shape (my, mx), model offset (ox, oy))."""
    model = model_grid(cube)
    if layout.single_field:
        grid, zshape, off = observation_grid(model, pixel, (0.0, 0.0), (0.0, 0.0))
        # the model's own extent, on the zoomed pixels
        return (SkyGrid(zshape[1], zshape[0], grid.pixel_arcsec, grid.x_ref - off[0],
                        grid.y_ref - off[1]), zshape, (0, 0))
    return observation_grid(model, pixel, layout.center, layout.grid_size)


def array_canvas(cube, layout, pixel, pb_fwhm_max, beyond_box):
    """The grid the pointings are imaged on: the output grid grown to hold every pointing's
    sub-image (only as far as the model reaches, for an empty sky beyond the box).

    Returns (canvas SkyGrid, zoom shape, model offset on the canvas, output slices (y, x) of
    the canvas, half-size of a sub-image in pixels).
    """
    grid, zshape, (ox, oy) = output_grid(cube, layout, pixel)
    big = 2 * (grid.nx + grid.ny + zshape[0] + zshape[1])
    half = (big if not np.isfinite(pb_fwhm_max)
            else min(big, int(np.ceil(SUBIMAGE_RADIUS_PB * pb_fwhm_max / grid.pixel_arcsec))))
    xp, yp = grid.pixel_of(layout.pointings[:, 0], layout.pointings[:, 1])
    lo_x, hi_x = min(0, int(np.floor(xp.min())) - half), max(grid.nx, int(np.ceil(xp.max())) + half + 1)
    lo_y, hi_y = min(0, int(np.floor(yp.min())) - half), max(grid.ny, int(np.ceil(yp.max())) + half + 1)
    if beyond_box == "empty":
        lo_x, hi_x = max(lo_x, min(0, ox)), min(hi_x, max(grid.nx, ox + zshape[1]))
        lo_y, hi_y = max(lo_y, min(0, oy)), min(hi_y, max(grid.ny, oy + zshape[0]))
    canvas = SkyGrid(hi_x - lo_x, hi_y - lo_y, grid.pixel_arcsec, grid.x_ref - lo_x,
                     grid.y_ref - lo_y)
    out = (slice(-lo_y, -lo_y + grid.ny), slice(-lo_x, -lo_x + grid.nx))
    return canvas, grid, zshape, (ox - lo_x, oy - lo_y), out, half


def sub_boxes(canvas, layout, half):
    """Per pointing: (slice y, slice x, x0, y0) of its sub-image on the canvas, x0/y0 the
    pointing centre in sub-image pixels. Sub-images have even sizes when the canvas allows."""
    xp, yp = canvas.pixel_of(layout.pointings[:, 0], layout.pointings[:, 1])
    boxes = []
    for x, y in zip(xp, yp):
        x0, x1 = _span(x, half, canvas.nx)
        y0, y1 = _span(y, half, canvas.ny)
        boxes.append((slice(y0, y1), slice(x0, x1), float(x - x0), float(y - y0)))
    return boxes


def _span(c, half, n):
    lo, hi = int(round(c)) - half, int(round(c)) + half
    lo, hi = max(lo, 0), min(hi, n)
    return lo, hi


def pointing_hour_angles(opts, p, n, east_arcsec, dec_rad):
    """Hour-angle range of pointing p of n: shifted by p/n of a sample interval (the
    pointings are visited in turn) and by the pointing's RA offset (H = LST - RA)."""
    ha = u.Quantity(opts["hour_angles"]).to_value(u.rad)
    dt = u.Quantity(opts["sample_interval"]).to_value(u.s)
    d_ra = east_arcsec / ARCSEC_PER_RAD / max(np.cos(dec_rad), 1e-6)
    shift = (p / n) * dt * SIDEREAL_RATE_RAD_S - d_ra
    return (ha + shift) * u.rad

