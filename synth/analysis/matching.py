"""Bring two cubes onto common terms: grid, channels, resolution and unit.

Shared by :func:`synth.analysis.survival.assess` and :func:`synth.analysis.compare.compare`.
Inside, cubes are plain float arrays ordered (v, y, x); the unit lives in the variable name
(``_k`` brightness temperature in K, ``_jyb`` Jy/beam) or in a separate string.
"""

import numpy as np
import astropy.units as u

from ..errors import InstrumentError
from ..sky import (channel_frequencies_hz, channel_velocities_ms, gaussian_transfer,
                   jy_per_beam_per_k, pixel_scale_arcsec)

__all__ = ["cube_beam", "pixel_scale_arcsec", "channel_velocities_ms", "channel_frequencies_hz",
           "channel_width_ms", "cube_values", "unit_kind", "jy_per_beam_per_k",
           "gaussian_transfer", "convolve_gaussian", "kernel_between", "resample_channels",
           "UNIT_KINDS", "cube_from_array", "x_sign", "beam_text"]

#: the surface-brightness units the analysis understands
UNIT_KINDS = ("K", "Jy/beam")


def cube_beam(cube):
    """The cube's single ``radio_beam.Beam``, or None when it has none."""
    beam = getattr(cube, "_beam", None)
    if beam is None and hasattr(cube, "beams"):
        return cube.beams.common_beam()
    return beam




def x_sign(cube):
    """+1 when pixel x grows toward the east (CDELT1 > 0), -1 for the usual sky layout."""
    pc = cube.wcs.celestial.pixel_scale_matrix
    return 1.0 if pc[0, 0] > 0 else -1.0






def channel_width_ms(cube):
    """Absolute channel width in m/s (first pair of channels, or CDELT3 for one channel)."""
    v = channel_velocities_ms(cube)
    if v.size > 1:
        return float(abs(v[1] - v[0]))
    return float(abs(cube.wcs.wcs.cdelt[cube.wcs.wcs.spec]) *
                 u.Unit(cube.wcs.wcs.cunit[cube.wcs.wcs.spec]).to(u.m / u.s))


def unit_kind(cube, name="cube"):
    """'K' or 'Jy/beam' for a cube, or an InstrumentError naming the unit found."""
    if cube.unit.is_equivalent(u.K):
        return "K"
    if cube.unit.is_equivalent(u.Jy / u.beam):
        return "Jy/beam"
    raise InstrumentError(f"{name} unit: {cube.unit} is not a surface brightness; "
                          f"valid: {', '.join(UNIT_KINDS)} (or equivalent units)")


def cube_values(cube, name="cube"):
    """Data as float64 (v, y, x) in K or Jy/beam (blanks set to 0) and the unit kind."""
    kind = unit_kind(cube, name)
    target = u.K if kind == "K" else u.Jy / u.beam
    data = np.array(cube.filled_data[:].to_value(target), dtype=np.float64)
    data[~np.isfinite(data)] = 0.0
    return data, kind






def convolve_gaussian(data, pixscale_arcsec, beam, sign=-1.0):
    """Convolve each plane of (v, y, x) data with a unit-sum Gaussian beam.

    Linear (not circular) convolution: planes are zero-padded to twice their size before the
    FFT product with :func:`gaussian_transfer`; flux leaving the field is lost, as on the sky.
    Surface brightness in K stays K (the kernel integrates to one).
    """
    data = np.asarray(data, dtype=np.float64)
    ny, nx = data.shape[-2:]
    shape = (2 * ny, 2 * nx)
    tf = gaussian_transfer(shape, pixscale_arcsec, beam, sign)
    spec = np.fft.rfft2(data, s=shape) * tf[:, : shape[1] // 2 + 1]
    return np.fft.irfft2(spec, s=shape)[..., :ny, :nx]


def kernel_between(beam_from, beam_to):
    """The beam that takes ``beam_from`` to ``beam_to`` (None when they are equal).

    Uses radio-beam's ``Beam.deconvolve``; a ``beam_from`` of None means the data are at
    pixel resolution, so the kernel is ``beam_to`` itself.
    """
    if beam_from is None:
        return beam_to
    if _same_beam(beam_from, beam_to):
        return None
    from radio_beam.utils import BeamError
    try:
        return beam_to.deconvolve(beam_from, failure_returns_pointlike=False)
    except (ValueError, BeamError) as exc:
        raise InstrumentError(f"beam: cannot go from {beam_from} to {beam_to} "
                              "(the target must be at least as large in every direction)"
                              ) from exc


def _same_beam(a, b, rtol=1e-6):
    maj = abs(a.major - b.major) <= rtol * b.major
    mnr = abs(a.minor - b.minor) <= rtol * b.minor
    round_beam = abs(b.major - b.minor) <= rtol * b.major
    dpa = abs(((a.pa - b.pa).to_value(u.deg) + 90.0) % 180.0 - 90.0)
    return bool(maj and mnr and (round_beam or dpa < 1e-4))


def resample_channels(data, v_in_ms, v_out_ms):
    """Average (v, y, x) data over the extent of each output channel (boxcar channels).

    Output channel j is sum_i o_ji T_i / sum_i o_ji, with o_ji the velocity overlap of input
    channel i with output channel j, which conserves the integral of T dv inside the common
    range (the usual exact rebinning of a histogram). Output channels must lie inside the
    input range; edges are midway between channel centres.
    """
    e_in = _edges(np.asarray(v_in_ms, dtype=np.float64))
    e_out = _edges(np.asarray(v_out_ms, dtype=np.float64))
    lo_in, hi_in = np.minimum(e_in[:-1], e_in[1:]), np.maximum(e_in[:-1], e_in[1:])
    lo_out, hi_out = np.minimum(e_out[:-1], e_out[1:]), np.maximum(e_out[:-1], e_out[1:])
    tol = 1e-6 * abs(e_in[1] - e_in[0])
    if lo_out.min() < lo_in.min() - tol or hi_out.max() > hi_in.max() + tol:
        raise InstrumentError(
            f"spectral grid: output channels span {lo_out.min():.6g}..{hi_out.max():.6g} m/s, "
            f"outside the input {lo_in.min():.6g}..{hi_in.max():.6g} m/s; "
            "give cubes with overlapping velocity ranges")
    overlap = np.clip(np.minimum(hi_out[:, None], hi_in[None, :]) -
                      np.maximum(lo_out[:, None], lo_in[None, :]), 0.0, None)
    weights = overlap / overlap.sum(axis=1, keepdims=True)
    return np.tensordot(weights, data, axes=(1, 0))


def _edges(centres):
    if centres.size == 1:
        raise InstrumentError("spectral grid: cannot resample a single channel without its width")
    mid = 0.5 * (centres[1:] + centres[:-1])
    return np.concatenate([[2 * centres[0] - mid[0]], mid, [2 * centres[-1] - mid[-1]]])


def cube_from_array(data, *, pixscale, channel_width, restfreq, unit="K", beam=None,
                    v_start=None, center=(120.0 * u.deg, 10.0 * u.deg), like=None):
    """Wrap a (v, y, x) array as a SpectralCube with a RA---SIN/DEC--SIN + VRAD WCS.

    ``pixscale`` (angle), ``channel_width`` (velocity; negative for a descending axis),
    ``restfreq`` (frequency) are Quantities; the reference pixel is the map centre and the
    velocity axis starts at ``v_start`` (default: centred on 0). ``like``: take the celestial
    WCS of another cube instead. The default centre is an invented position.
    """
    from astropy.wcs import WCS
    from spectral_cube import SpectralCube
    data = np.asarray(data, dtype=np.float64)
    if data.ndim != 3:
        raise InstrumentError(f"data shape: {data.shape}; need (v, y, x)")
    nv, ny, nx = data.shape
    dv = u.Quantity(channel_width).to_value(u.m / u.s)
    v0 = (-0.5 * (nv - 1) * dv if v_start is None
          else u.Quantity(v_start).to_value(u.m / u.s))
    w = WCS(naxis=3)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN", "VRAD"]
    w.wcs.cunit = ["deg", "deg", "m/s"]
    pix_deg = u.Quantity(pixscale).to_value(u.deg)
    w.wcs.cdelt = [-pix_deg, pix_deg, dv]
    w.wcs.crpix = [(nx + 1) / 2.0, (ny + 1) / 2.0, 1.0]
    w.wcs.crval = [center[0].to_value(u.deg), center[1].to_value(u.deg), v0]
    if like is not None:
        cel = like.wcs.celestial.wcs
        w.wcs.cdelt[:2], w.wcs.crpix[:2], w.wcs.crval[:2] = cel.cdelt, cel.crpix, cel.crval
    w.wcs.restfrq = u.Quantity(restfreq).to_value(u.Hz)
    w.wcs.specsys = "LSRK"
    cube = SpectralCube(data=data * u.Unit(unit), wcs=w)
    return cube if beam is None else cube.with_beam(beam, raise_error_jybm=False)


def beam_text(beam):
    """A short description of a beam: '4.00" x 3.00" PA 30.0 deg' (or 'pixel resolution')."""
    if beam is None:
        return "pixel resolution"
    return (f'{beam.major.to_value(u.arcsec):.3g}" x {beam.minor.to_value(u.arcsec):.3g}" '
            f"PA {beam.pa.to_value(u.deg):.1f} deg")
