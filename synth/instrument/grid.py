"""The sky grid of an observation, and putting the model sky on it.

A simulation has the pixels it has; an observation needs its own: fine enough to sample its
beam, and large enough to hold the mapped area, a guard band (single dish) or the primary
beams of every pointing (mosaic). :func:`observation_grid` chooses that grid and
:func:`sky_on_grid` resamples the model onto it.

Resampling is a Fourier zoom (band-limited interpolation, e.g. Bracewell 2000, The Fourier
Transform and its Applications, ch. 10; Smith 2011, Spectral Audio Signal Processing,
"bandlimited interpolation"): each plane's discrete Fourier transform is zero-padded (finer
pixels) or truncated (coarser pixels) and transformed back, with a phase ramp that keeps the
map centre fixed. The k = 0 term is kept, so the **total flux is conserved exactly** (surface
brightness in K keeps its mean over the box). The zoom treats the model as periodic: for a
periodic simulation box this is exact; an isolated cloud that is cut sharply at the box edge
rings there (Gibbs), a ripple that any beam of a few pixels smooths away.

Outside the model box the sky is empty (``beyond_box="empty"``: an isolated cloud padded with
blank sky) or the box repeats (``"repeat"``: a periodic turbulence box tiles the sky).

Geometry: offsets on the sky are (east, north) in arcsec in the SIN plane of the model's
reference point; pixel x grows toward the west (CDELT1 < 0), pixel y toward the north.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
import scipy.fft

from ..errors import InstrumentError
from .cube_utils import cube_values, new_cube, pixel_scale

__all__ = ["BEYOND_BOX", "PIXELS_PER_BEAM", "SkyGrid", "model_grid", "observation_grid",
           "fourier_zoom", "place_model", "sky_on_grid", "onto_grid", "zoom_size",
           "zoom_shift"]

#: what lies outside the model box: blank sky, or the box repeated (periodic simulations)
BEYOND_BOX = ("empty", "repeat")
#: default sampling of the restoring beam: at least this many pixels per FWHM
PIXELS_PER_BEAM = 4.0
#: channels resampled per FFT call (bounds the temporary memory)
_BLOCK = 32


@dataclass(frozen=True)
class SkyGrid:
    """A square-pixel SIN grid: ``nx`` x ``ny`` pixels of ``pixel_arcsec``, the model's
    reference point at 0-based pixel (``x_ref``, ``y_ref``)."""

    nx: int
    ny: int
    pixel_arcsec: float
    x_ref: float
    y_ref: float

    def offsets_arcsec(self):
        """(east, north) offsets of every pixel centre, each of shape (ny, nx)."""
        east = -(np.arange(self.nx) - self.x_ref) * self.pixel_arcsec
        north = (np.arange(self.ny) - self.y_ref) * self.pixel_arcsec
        return np.meshgrid(east, north)

    def pixel_of(self, east_arcsec, north_arcsec):
        """0-based (x, y) pixel coordinates of sky offsets (east, north) in arcsec."""
        return (self.x_ref - np.asarray(east_arcsec) / self.pixel_arcsec,
                self.y_ref + np.asarray(north_arcsec) / self.pixel_arcsec)

    @property
    def extent_arcsec(self):
        return self.nx * self.pixel_arcsec, self.ny * self.pixel_arcsec

    def bounds_arcsec(self):
        """(east_min, east_max, north_min, north_max) of the grid's outer pixel edges."""
        e0, n0 = -(-0.5 - self.x_ref) * self.pixel_arcsec, (-0.5 - self.y_ref) * self.pixel_arcsec
        e1 = -(self.nx - 0.5 - self.x_ref) * self.pixel_arcsec
        n1 = (self.ny - 0.5 - self.y_ref) * self.pixel_arcsec
        return min(e0, e1), max(e0, e1), n0, n1

    def wcs_like(self, cube):
        """A copy of the cube's WCS with this grid's celestial pixels (same CRVAL)."""
        w = cube.wcs.deepcopy()
        pix_deg = self.pixel_arcsec / 3600.0
        w.wcs.cdelt[0] = -pix_deg
        w.wcs.cdelt[1] = pix_deg
        w.wcs.crpix[0] = self.x_ref + 1.0
        w.wcs.crpix[1] = self.y_ref + 1.0
        if w.wcs.has_pc():
            w.wcs.pc[0, 0] = w.wcs.pc[1, 1] = 1.0
        return w


def model_grid(cube):
    """The SkyGrid of a cube (north-up, square pixels, RA decreasing with x)."""
    if not cube.wcs.has_celestial:
        raise InstrumentError("cube: the WCS has no celestial axes; a sky cube needs "
                              "RA/Dec (e.g. RA---SIN / DEC--SIN)")
    if cube.wcs.celestial.pixel_scale_matrix[0, 0] > 0:
        raise InstrumentError("cube: RA must decrease with pixel x (CDELT1 < 0), as on the sky")
    crpix = cube.wcs.wcs.crpix
    return SkyGrid(cube.shape[2], cube.shape[1], float(pixel_scale(cube).to_value(u.arcsec)),
                   float(crpix[0] - 1.0), float(crpix[1] - 1.0))


def zoom_size(n, pixel_in, pixel_max):
    """Pixels after zooming ``n`` pixels of ``pixel_in`` to pixels no larger than
    ``pixel_max`` (the new pixel is n pixel_in / m, so it can be a little finer)."""
    return max(1, int(np.ceil(n * pixel_in / pixel_max - 1e-9)))


def _zoom_axis(spec, n, m, axis):
    """Zero-pad or truncate the FFT ``spec`` along ``axis`` from n to m frequencies."""
    if m == n:
        return spec
    shape = list(spec.shape)
    shape[axis] = m
    out = np.zeros(shape, dtype=spec.dtype)
    k = min(n, m)
    pos = (k + 1) // 2        # frequencies 0 .. pos-1
    neg = k // 2              # frequencies -neg .. -1
    take = [slice(None)] * spec.ndim

    def sl(s):
        t = list(take)
        t[axis] = s
        return tuple(t)
    out[sl(slice(0, pos))] = spec[sl(slice(0, pos))]
    if neg:
        out[sl(slice(m - neg, m))] = spec[sl(slice(n - neg, n))]
    if k % 2 == 0 and k > 0:
        # the Nyquist term of the smaller grid: split (pad) or fold (truncate) so the
        # result stays real
        nyq_in = spec[sl(slice(k // 2, k // 2 + 1))] if m > n else None
        if m > n:
            out[sl(slice(k // 2, k // 2 + 1))] = 0.5 * nyq_in
            out[sl(slice(m - k // 2, m - k // 2 + 1))] = 0.5 * nyq_in
        else:
            out[sl(slice(m - neg, m - neg + 1))] = (spec[sl(slice(k // 2, k // 2 + 1))]
                                                    + spec[sl(slice(n - neg, n - neg + 1))])
    return out


def _phase_ramp(n, shift):
    """exp(2 pi i k shift / n): samples moved by ``shift`` input pixels."""
    k = scipy.fft.fftfreq(n) * n
    ramp = np.exp(2j * np.pi * k * shift / n)
    if n % 2 == 0:
        ramp[n // 2] = np.cos(np.pi * shift)    # the Nyquist term stays real
    return ramp


def zoom_shift(n, m, ref):
    """(shift, new_ref) of a zoom from n to m pixels that puts the reference pixel ``ref``
    (0-based, input pixels) on a pixel centre of the new grid, with the new grid centred on
    the old one to within half a new pixel. New pixel j sits at input position
    shift + j n / m."""
    centred = 0.5 * (n / m - 1.0)                 # keeps the array centre fixed
    j_ref = int(np.round((ref - centred) * m / n))
    return ref - j_ref * n / m, j_ref


def fourier_zoom(planes, my, mx, shift=None):
    """Resample (v, ny, nx) planes onto (v, my, mx) pixels covering the same area.

    Band-limited (Fourier) interpolation; new pixel (j, i) sits at input position
    (shift_y + j ny / my, shift_x + i nx / mx); the default shift keeps the array centre
    fixed. The mean of each plane, hence the total flux, is conserved exactly. See the
    module docstring.
    """
    planes = np.asarray(planes, dtype=np.float64)
    nv, ny, nx = planes.shape
    if shift is None:
        shift = (0.5 * (ny / my - 1.0), 0.5 * (nx / mx - 1.0))
    if (my, mx) == (ny, nx) and shift == (0.0, 0.0):
        return planes
    out = np.empty((nv, my, mx))
    ry = _phase_ramp(ny, shift[0])[:, None]
    rx = _phase_ramp(nx, shift[1])[None, :]
    for start in range(0, nv, _BLOCK):
        block = slice(start, start + _BLOCK)
        spec = scipy.fft.fft2(planes[block], axes=(1, 2), workers=-1) * ry * rx
        spec = _zoom_axis(_zoom_axis(spec, ny, my, 1), nx, mx, 2)
        out[block] = scipy.fft.ifft2(spec, axes=(1, 2), workers=-1).real * (my * mx / (ny * nx))
    return out


def observation_grid(model, pixel_arcsec, center_arcsec, size_arcsec):
    """The SkyGrid of ``size_arcsec`` (width, height) around ``center_arcsec`` (east, north)
    with pixels no larger than ``pixel_arcsec``, aligned with the zoomed model pixels.

    The pixel is the model pixel times n / m, with m the smallest whole number of pixels
    across the model that makes it <= ``pixel_arcsec`` (pass the model pixel to keep it); the
    grid is offset from the zoomed model grid by whole
    pixels, so placing the model on it needs no further interpolation.
    """
    mx = zoom_size(model.nx, model.pixel_arcsec, pixel_arcsec)
    my = zoom_size(model.ny, model.pixel_arcsec, pixel_arcsec)
    pix = model.pixel_arcsec * model.nx / mx
    # the model's reference point on the zoomed grid (0-based), on a pixel centre
    sx, xr = zoom_shift(model.nx, mx, model.x_ref)
    sy, yr = zoom_shift(model.ny, my, model.y_ref)
    if (mx, my) == (model.nx, model.ny):
        sx, sy, xr, yr = 0.0, 0.0, model.x_ref, model.y_ref
    nx = max(2, int(np.ceil(size_arcsec[0] / pix - 1e-9)))
    ny = max(2, int(np.ceil(size_arcsec[1] / pix - 1e-9)))
    nx, ny = nx + nx % 2, ny + ny % 2
    cx, cy = xr - center_arcsec[0] / pix, yr + center_arcsec[1] / pix
    ox = int(np.round((nx - 1) / 2.0 - cx))
    oy = int(np.round((ny - 1) / 2.0 - cy))
    return SkyGrid(nx, ny, pix, xr + ox, yr + oy), (my, mx, sy, sx), (ox, oy)


def _place(zoomed, grid, offset, beyond_box):
    """The zoomed model (v, my, mx) on ``grid`` (v, ny, nx): zoomed index = grid index - offset."""
    nv, my, mx = zoomed.shape
    ox, oy = offset
    if (ox, oy) == (0, 0) and (grid.ny, grid.nx) == (my, mx):
        return zoomed
    jx = np.arange(grid.nx) - ox
    jy = np.arange(grid.ny) - oy
    if beyond_box == "repeat":
        return zoomed[:, (jy % my)[:, None], (jx % mx)[None, :]]
    out = np.zeros((nv, grid.ny, grid.nx))
    gx0, gx1 = max(0, ox), min(grid.nx, ox + mx)        # the overlap, as plain slices
    gy0, gy1 = max(0, oy), min(grid.ny, oy + my)
    if gx1 > gx0 and gy1 > gy0:
        out[:, gy0:gy1, gx0:gx1] = zoomed[:, gy0 - oy:gy1 - oy, gx0 - ox:gx1 - ox]
    return out


def place_model(cube, grid, zoom, offset, beyond_box="empty"):
    """The model cube zoomed as ``zoom`` (my, mx, shift_y, shift_x) says and placed on
    ``grid`` with the zoomed
    model's pixel (0, 0) at grid pixel ``offset`` (ox, oy); same unit as the cube (a per-pixel
    unit such as Jy/pix is rescaled by the pixel area, so the flux is kept)."""
    if beyond_box not in BEYOND_BOX:
        raise InstrumentError(f"beyond_box: {beyond_box!r} is not one of {', '.join(BEYOND_BOX)}")
    data = cube_values(cube)
    my, mx = zoom[:2]
    zoomed = fourier_zoom(data, my, mx, shift=tuple(zoom[2:4]))
    if cube.unit.is_equivalent(u.Jy / u.pix) or cube.unit.is_equivalent(u.Jy):
        zoomed *= (data.shape[1] * data.shape[2]) / float(my * mx)
    placed = _place(zoomed, grid, offset, beyond_box)
    return new_cube(cube, placed, cube.unit, wcs=grid.wcs_like(cube),
                    meta_update={"SKYEDGE": beyond_box})


def sky_on_grid(cube, pixel_arcsec, center_arcsec, size_arcsec, beyond_box="empty"):
    """The model cube resampled (Fourier zoom) and placed on an observation's grid.

    Parameters
    ----------
    cube : SpectralCube
        The model sky (K, Jy/beam with a beam, Jy/sr, or Jy/pix).
    pixel_arcsec : float
        Largest pixel wanted (the model's pixel keeps it; larger values coarsen it).
    center_arcsec, size_arcsec : (float, float)
        Centre offset (east, north) from the model's reference point and extent (width,
        height) of the grid, arcsec.
    beyond_box : {"empty", "repeat"}
        Sky outside the model box: blank, or the box repeated (periodic simulations).

    Returns
    -------
    (SpectralCube on the new grid, SkyGrid)
    """
    model = model_grid(cube)
    grid, zoom, offset = observation_grid(model, pixel_arcsec, center_arcsec, size_arcsec)
    return place_model(cube, grid, zoom, offset, beyond_box), grid


def onto_grid(cube, target, beyond_box=None):
    """The model ``cube`` on the celestial grid of ``target`` (another cube), as observe puts
    it there: a Fourier zoom and whole-pixel placement when the grids share the reference
    point and the target's pixel divides the model's extent into a whole number of pixels
    (every grid observe makes); otherwise bilinear interpolation (reproject), which keeps the
    flux only approximately. ``beyond_box`` defaults to the target's SKYEDGE card."""
    model, out = model_grid(cube), model_grid(target)
    edge = beyond_box or str(target.meta.get("SKYEDGE", "empty")).strip().lower()
    edge = edge if edge in BEYOND_BOX else "empty"
    same_ref = np.allclose(cube.wcs.celestial.wcs.crval, target.wcs.celestial.wcs.crval,
                           rtol=0, atol=1e-10)
    mx = int(round(model.nx * model.pixel_arcsec / out.pixel_arcsec))
    my = int(round(model.ny * model.pixel_arcsec / out.pixel_arcsec))
    exact = (same_ref and mx > 0 and my > 0
             and abs(model.nx * model.pixel_arcsec / mx - out.pixel_arcsec) < 1e-6 * out.pixel_arcsec
             and abs(model.ny * model.pixel_arcsec / my - out.pixel_arcsec) < 1e-6 * out.pixel_arcsec)
    if exact:
        if (mx, my) == (model.nx, model.ny):
            sx, sy, xr, yr = 0.0, 0.0, model.x_ref, model.y_ref
        else:
            sx, xr = zoom_shift(model.nx, mx, model.x_ref)
            sy, yr = zoom_shift(model.ny, my, model.y_ref)
        ox, oy = out.x_ref - xr, out.y_ref - yr
        if abs(ox - round(ox)) < 1e-6 and abs(oy - round(oy)) < 1e-6:
            return place_model(cube, out, (my, mx, sy, sx), (int(round(ox)), int(round(oy))),
                               edge)
    from reproject import reproject_interp
    data = cube_values(cube)
    planes = np.empty((data.shape[0],) + target.shape[1:])
    for c in range(data.shape[0]):
        planes[c], _ = reproject_interp((data[c], cube.wcs.celestial), target.wcs.celestial,
                                        shape_out=target.shape[1:])
    wcs = out.wcs_like(cube)
    return new_cube(cube, np.nan_to_num(planes), cube.unit, wcs=wcs)
