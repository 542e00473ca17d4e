"""Spectral response of a spectrometer: rebinning onto a channel grid, Hanning smoothing,
and the radio-velocity <-> frequency axis.

Each output channel is the average of the input spectrum over the channel's extent: the
response of an ideal filter-bank channel, a boxcar as wide as the channel (Wilson, Rohlfs &
Hüttemeister 2013, Tools of Radio Astronomy, sect. 5.2, from memory). The input is treated as
piecewise constant over its own channels, so the average is an exact overlap integral and
sum(T) dv is conserved whenever the output grid covers the input's signal. Optional Hanning
smoothing applies the weights (1/4, 1/2, 1/4) on the output channels, the discrete Hann window
(Blackman & Tukey 1958; Harris 1978, Proc. IEEE 66, 51), as used by autocorrelation
spectrometers to suppress ringing.

Velocities here are radio velocities, v = c (nu0 - nu) / nu0 (astropy ``doppler_radio``),
so a grid uniform in velocity is uniform in frequency and a channel width
dnu = nu0 dv / c.
"""

import numpy as np
import astropy.units as u
import astropy.constants as const

from ..errors import InstrumentError
from .cube_utils import check_cube, cube_values, new_cube, reference_frequency

__all__ = ["HANNING_WEIGHTS", "SPECTRAL_AXES", "resample_spectral", "hanning_smooth",
           "velocity_axis", "channel_width_velocity", "channel_width_frequency",
           "to_spectral_axis", "overlap_matrix"]

#: Hanning weights on neighbouring channels: scipy.signal.windows.hann(5)[1:-1] / 2
HANNING_WEIGHTS = (0.25, 0.5, 0.25)
#: noise variance left after Hanning smoothing of white noise: sum of squared weights
HANNING_VARIANCE_FACTOR = sum(w * w for w in HANNING_WEIGHTS)
#: output spectral axes an observation can have
SPECTRAL_AXES = ("velocity", "frequency")

_C_KMS = const.c.to_value(u.km / u.s)
_KMS = u.km / u.s


def channel_width_velocity(width, rest_frequency):
    """A channel width (velocity or frequency Quantity) as a radio-velocity width in km/s.

    dv = c dnu / nu0 for the radio convention (astropy ``doppler_radio``)."""
    width = u.Quantity(width)
    if width.unit.is_equivalent(_KMS):
        return abs(width.to(_KMS))
    if width.unit.is_equivalent(u.Hz):
        nu0_hz = u.Quantity(rest_frequency).to_value(u.Hz)
        return abs(width.to_value(u.Hz)) / nu0_hz * _C_KMS * _KMS
    raise InstrumentError(f"channel_width: {width} is neither a velocity nor a frequency; "
                          "give e.g. 0.5 * u.km / u.s or 200 * u.kHz")


def channel_width_frequency(width, rest_frequency):
    """A channel width (velocity or frequency Quantity) in Hz: dnu = nu0 dv / c (radio)."""
    dv_kms = channel_width_velocity(width, rest_frequency).to_value(_KMS)
    return dv_kms / _C_KMS * u.Quantity(rest_frequency).to(u.Hz)


def velocity_axis(cube):
    """Channel centres of the cube as radio velocities (Quantity, km/s) and the same cube
    with a radio-velocity spectral axis."""
    rest = reference_frequency(cube)
    vcube = cube.with_spectral_unit(_KMS, velocity_convention="radio", rest_value=rest)
    return vcube.spectral_axis.to(_KMS), vcube


def _uniform_step(v_kms, field="cube"):
    """The signed channel step of a uniform grid, or InstrumentError."""
    if v_kms.size < 2:
        raise InstrumentError(f"{field}: needs at least 2 channels, got {v_kms.size}")
    steps = np.diff(v_kms)
    if not np.allclose(steps, steps[0], rtol=1e-6, atol=0):
        raise InstrumentError(f"{field}: channels are not uniform in radio velocity (steps "
                              f"{steps.min():.6g} to {steps.max():.6g} km/s); regrid first")
    return float(steps[0])


def overlap_matrix(edges_in, edges_out):
    """Weights W[j, i] = |out_j ∩ in_i| / |out_j| for ascending channel edges.

    With input channels piecewise constant, out = W @ in is the exact average of the input
    over each output channel (an overlap integral)."""
    lo = np.maximum(edges_out[:-1, None], edges_in[None, :-1])
    hi = np.minimum(edges_out[1:, None], edges_in[None, 1:])
    return np.clip(hi - lo, 0.0, None) / np.diff(edges_out)[:, None]


def _output_grid(v_kms, step_kms, width_kms, start):
    """Output channel centres (same direction as the input) fully inside the input range."""
    sign = 1.0 if step_kms > 0 else -1.0
    first_edge = v_kms[0] - 0.5 * step_kms
    last_edge = v_kms[-1] + 0.5 * step_kms
    if start is None:
        start_kms = first_edge + 0.5 * sign * width_kms
    else:
        start_kms = u.Quantity(start).to_value(_KMS, equivalencies=u.spectral())
    span = sign * (last_edge - start_kms) + 0.5 * width_kms
    tol = 1e-9 * width_kms
    lead = sign * (start_kms - first_edge) - 0.5 * width_kms
    n_out = int(np.floor((span + tol) / width_kms))
    if lead < -tol or n_out < 1:
        raise InstrumentError(
            f"channel_start: {start_kms:.6g} km/s puts the first channel outside the cube's "
            f"velocity range {min(first_edge, last_edge):.6g} to "
            f"{max(first_edge, last_edge):.6g} km/s; choose a start inside it")
    return start_kms + sign * width_kms * np.arange(n_out)


def hanning_smooth(data, axis=0):
    """Hanning-smooth along ``axis`` with weights (1/4, 1/2, 1/4); channels beyond the ends
    count as zero (as ``scipy.signal.convolve(..., mode="same")``). Returns a new array."""
    data = np.moveaxis(np.asarray(data, dtype=np.float64), axis, 0)
    out = HANNING_WEIGHTS[1] * data
    out[1:] += HANNING_WEIGHTS[0] * data[:-1]
    out[:-1] += HANNING_WEIGHTS[2] * data[1:]
    return np.moveaxis(out, 0, axis)


def resample_spectral(cube, channel_width=None, channel_start=None, hanning=False):
    """Resample a cube onto a channel grid, each output channel the input's average over it.

    Parameters
    ----------
    cube : SpectralCube
        Sky cube with a radio-velocity or frequency axis, uniform channels.
    channel_width : Quantity (speed or frequency), optional
        Output channel width; must be >= the native width (InstrumentError otherwise: a finer
        grid cannot be recovered from coarser channels). Default: the native width.
    channel_start : Quantity (speed), optional
        Radio velocity of the first output channel's centre. Default: the first output
        channel starts at the input's first channel edge. Only output channels lying wholly
        inside the input's range are kept.
    hanning : bool
        Apply Hanning smoothing (1/4, 1/2, 1/4) on the output channels.

    Returns
    -------
    SpectralCube
        New cube with a VRAD axis in m/s, same unit and beam; meta records ``CHANWID``
        (km/s) and ``HANNING``.

    Notes
    -----
    With input channel i piecewise constant over [e_i, e_{i+1}], output channel j is
    :math:`T_j = \\sum_i T_i |[E_j, E_{j+1}] \\cap [e_i, e_{i+1}]| / (E_{j+1} - E_j)`, so
    :math:`\\sum_j T_j \\Delta V = \\sum_i T_i \\Delta v` when the output covers the input.
    """
    check_cube(cube)
    v, vcube = velocity_axis(cube)
    v_kms = v.to_value(_KMS)
    step_kms = _uniform_step(v_kms)
    native_kms = abs(step_kms)
    rest = reference_frequency(cube)
    width_kms = (native_kms if channel_width is None
                 else channel_width_velocity(channel_width, rest).to_value(_KMS))
    if width_kms < native_kms * (1 - 1e-9):
        raise InstrumentError(
            f"channel_width: {width_kms:.6g} km/s is finer than the cube's native channels "
            f"({native_kms:.6g} km/s); use a width >= the native one or a finer sky cube")
    centres = _output_grid(v_kms, step_kms, width_kms, channel_start)
    data = _rebin(cube_values(vcube), v_kms, step_kms, centres, width_kms)
    if hanning:
        data = hanning_smooth(data, axis=0)
    wcs = _velocity_wcs(vcube, centres, np.sign(step_kms) * width_kms, rest)
    return new_cube(cube, data, cube.unit, wcs=wcs,
                    meta_update={"CHANWID": float(width_kms), "HANNING": bool(hanning)})


def _rebin(data, v_kms, step_kms, centres_kms, width_kms):
    """Apply the overlap matrix along axis 0 (works on ascending edges internally)."""
    edges_in = np.append(v_kms - 0.5 * step_kms, v_kms[-1] + 0.5 * step_kms)
    sign = np.sign(step_kms)
    edges_out = np.append(centres_kms - 0.5 * sign * width_kms,
                          centres_kms[-1] + 0.5 * sign * width_kms)
    if sign < 0:
        edges_in, edges_out = edges_in[::-1], edges_out[::-1]
    weights = overlap_matrix(edges_in, edges_out)
    if sign < 0:
        weights = weights[::-1, ::-1]
    nz, ny, nx = data.shape
    return (weights @ data.reshape(nz, ny * nx)).reshape(len(centres_kms), ny, nx)


def _velocity_wcs(vcube, centres_kms, step_kms, rest):
    """Celestial WCS of ``vcube`` with a linear VRAD axis (m/s) at the given centres."""
    wcs = vcube.wcs.deepcopy()
    spec = wcs.wcs.spec
    wcs.wcs.ctype[spec] = "VRAD"
    wcs.wcs.cunit[spec] = "m/s"
    wcs.wcs.crpix[spec] = 1.0
    wcs.wcs.crval[spec] = centres_kms[0] * 1e3
    wcs.wcs.cdelt[spec] = step_kms * 1e3
    wcs.wcs.restfrq = rest.to_value(u.Hz)
    wcs.wcs.set()
    return wcs


def to_spectral_axis(cube, spectral_axis="velocity"):
    """The cube with a radio-velocity (km/s) or a frequency (GHz) spectral axis, using
    astropy's radio Doppler equivalency about the rest frequency."""
    if spectral_axis not in SPECTRAL_AXES:
        raise InstrumentError(f"spectral_axis: {spectral_axis!r} is not one of "
                              f"{', '.join(SPECTRAL_AXES)}")
    unit = _KMS if spectral_axis == "velocity" else u.GHz
    return cube.with_spectral_unit(unit, velocity_convention="radio",
                                   rest_value=reference_frequency(cube))
