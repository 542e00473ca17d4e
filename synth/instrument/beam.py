"""Gaussian telescope beams: from a dish diameter, as convolution kernels, and the
K <-> Jy/beam conversion.

A single dish's main beam is modelled as an elliptical Gaussian (radio-beam's ``Beam``). From
a diameter D at wavelength lambda its FWHM is ``fwhm_factor * lambda / D``: 1.02 for a uniformly
illuminated circular aperture, about 1.13 for the edge taper of typical radio telescopes, up
to ~1.2 for strong tapers (Goldsmith 1998, Quasioptical Systems, ch. 6; Wilson, Rohlfs &
Hüttemeister 2013, sect. 6.1, from memory; see docs/references.md).

The beam solid angle of a Gaussian is Omega = pi theta_maj theta_min / (4 ln 2) (radio-beam's
``Beam.sr``). Brightness temperature and flux density per beam are related by the
Rayleigh-Jeans law, S = 2 k nu^2 T Omega / c^2, through
``astropy.units.brightness_temperature`` (Wilson et al. 2013, eqs. 8.16, 8.19, as cited there).
"""

import warnings

import numpy as np
import astropy.units as u
import astropy.constants as const
from radio_beam import Beam
from radio_beam.utils import BeamError
from scipy.signal import fftconvolve

from ..errors import BeamUndersampledWarning, InstrumentError
from ..sky import channel_frequencies_hz
from .limits import FWHM_FACTOR_RANGE
from .cube_utils import (BRIGHTNESS_UNITS, brightness_kind, check_cube, cube_values,
                         new_cube, pixel_scale)

__all__ = ["FWHM_FACTOR_RANGE", "dish_beam", "pixel_kernel", "convolve_beam", "sky_frequencies",
           "k_to_jy_per_beam", "jy_per_beam_to_k", "to_unit", "unit_name", "jy_per_k"]

#: channels convolved per FFT call (bounds the temporary memory)
_CHANNEL_BLOCK = 64


def dish_beam(diameter, frequency, fwhm_factor=1.13):
    """Circular Gaussian beam of FWHM ``fwhm_factor * lambda / D``.

    Parameters
    ----------
    diameter : Quantity (length)
    frequency : Quantity (frequency)
    fwhm_factor : float
        FWHM in units of lambda / D (1.02 uniform illumination, ~1.13 typical, 1.2 strong).
    """
    d_cm = u.Quantity(diameter).to_value(u.cm)
    nu_hz = u.Quantity(frequency).to_value(u.Hz, equivalencies=u.spectral())
    if not (d_cm > 0 and nu_hz > 0):
        raise InstrumentError(f"diameter / frequency: need positive values, got {diameter}, "
                              f"{frequency}")
    fwhm_rad = fwhm_factor * const.c.cgs.value / nu_hz / d_cm
    return Beam((fwhm_rad * u.rad).to(u.arcsec))


def pixel_kernel(beam, pixscale):
    """The beam as a 2-D convolution kernel on pixels of size ``pixscale``, summing to 1.

    Built by ``Beam.as_kernel`` (astropy ``EllipticalGaussian2DKernel``; PA counted from north
    through east, for RA increasing to the left, CDELT1 < 0). The Gaussian is sampled at pixel
    centres, which keeps its second moment exact for sigma >= 1 pixel; narrower beams are
    averaged over 10x10 sub-pixels instead, so they do not collapse to a single pixel.
    """
    sigma_px = (beam.minor / pixscale).decompose().value / np.sqrt(8 * np.log(2))
    mode = "center" if sigma_px >= 1 else "oversample"
    array = np.array(beam.as_kernel(pixscale, mode=mode, factor=10).array, dtype=np.float64)
    return array / array.sum()


def _kernel_beam(cube, beam):
    """The beam still to apply: the target itself, or target deconvolved by the cube's beam.

    Returns None when the cube already has the target beam."""
    old = getattr(cube, "_beam", None)
    if old is None:
        return beam
    if (np.isclose(old.major, beam.major, rtol=1e-6)
            and np.isclose(old.minor, beam.minor, rtol=1e-6)
            and (old.iscircular() or np.isclose(old.pa, beam.pa, atol=1e-6 * u.deg))):
        return None
    try:
        return beam.deconvolve(old)
    except (BeamError, ValueError) as exc:
        raise InstrumentError(
            f"beam: the target beam ({beam.major.to(u.arcsec):.4g} x "
            f"{beam.minor.to(u.arcsec):.4g}) is not larger than the cube's beam "
            f"({old.major.to(u.arcsec):.4g} x {old.minor.to(u.arcsec):.4g}) in every "
            "direction; choose a larger beam") from exc


def _warn_if_undersampled(beam, pixscale):
    if beam.minor < pixscale:
        warnings.warn(
            f"beam minor FWHM {beam.minor.to(u.arcsec):.4g} is smaller than a pixel "
            f"({pixscale.to(u.arcsec):.4g}): the beam is under-sampled, so the "
            "smoothing barely changes the map; use finer sky pixels (>= 3 per FWHM)",
            BeamUndersampledWarning, stacklevel=3)


def convolve_beam(cube, beam):
    """Convolve every channel with a Gaussian beam and attach the beam to the result.

    The kernel sums to 1, so the summed flux density over the map is conserved (up to flux
    spread beyond the map edges, where the sky is taken as zero). If the cube already carries
    a beam, the kernel is the target beam deconvolved by it (radio-beam ``Beam.deconvolve``).
    A Jy/beam input is converted to K first and back to Jy/beam of the new beam after.
    """
    check_cube(cube)
    if not isinstance(beam, Beam):
        raise InstrumentError(f"beam: expected a radio_beam.Beam, got {type(beam).__name__}")
    pixscale = pixel_scale(cube)
    _warn_if_undersampled(beam, pixscale)
    was_jy = brightness_kind(cube) == "Jy/beam"
    kcube = jy_per_beam_to_k(cube) if was_jy else cube
    kernel_beam = _kernel_beam(cube, beam)
    data = cube_values(kcube)
    if kernel_beam is not None:
        kernel = pixel_kernel(kernel_beam, pixscale)[None]
        for start in range(0, data.shape[0], _CHANNEL_BLOCK):
            block = slice(start, start + _CHANNEL_BLOCK)
            data[block] = fftconvolve(data[block], kernel, mode="same", axes=(1, 2))
    out = new_cube(kcube, data, kcube.unit, beam=beam)
    return k_to_jy_per_beam(out) if was_jy else out


def sky_frequencies(cube):
    """Sky frequency of every channel (Quantity, Hz), radio convention about RESTFRQ."""
    return channel_frequencies_hz(cube) * u.Hz


def jy_per_k(beam, freq):
    """Jy/beam per K at each frequency: astropy ``brightness_temperature`` with the beam."""
    freq = u.Quantity(freq, u.Hz)
    ones = np.ones(freq.shape) * u.K
    return ones.to_value(u.Jy, equivalencies=u.brightness_temperature(freq, beam_area=beam.sr))


def _cube_beam(cube, beam):
    beam = beam if beam is not None else getattr(cube, "_beam", None)
    if beam is None:
        raise InstrumentError("beam: the cube carries no beam and none was given; "
                              "pass beam=Beam(...) or attach one with cube.with_beam")
    return beam


def _noise_in(cube, beam, unit):
    """The cube's NOISERMS / NOISEUNI meta expressed in ``unit`` ("K" or "Jy/beam"), at the
    median channel frequency (the convention of the observing steps); {} without them."""
    meta = {k.upper(): v for k, v in cube.meta.items()}
    if "NOISERMS" not in meta or "NOISEUNI" not in meta:
        return {}
    have = unit_name(meta["NOISEUNI"])
    rms = float(meta["NOISERMS"])
    if have != unit:
        factor = float(jy_per_k(beam, np.median(sky_frequencies(cube).to_value(u.Hz))))
        rms = rms * factor if unit == "Jy/beam" else rms / factor
    return {"NOISERMS": rms, "NOISEUNI": unit}


def _factors(cube, beam):
    """(Jy/beam per K for each channel, the beam of the noise card, the beam to attach):
    with a beam per channel (a VaryingResolutionSpectralCube and no ``beam``), each channel
    with its own and the middle channel's for the noise; the cube keeps its beams."""
    beams = getattr(cube, "beams", None) if beam is None else None
    freqs = sky_frequencies(cube)
    if beams is None:
        beam = _cube_beam(cube, beam)
        return jy_per_k(beam, freqs), beam, beam
    factor = np.array([float(jy_per_k(b, f)) for b, f in zip(cube.unmasked_beams, freqs)])
    return factor, cube.unmasked_beams[len(factor) // 2], None


def k_to_jy_per_beam(cube, beam=None):
    """Convert a K cube to Jy/beam (per channel at its sky frequency, with its own beam if
    the cube has one per channel); attaches the beam. A NOISERMS card in the meta follows
    the unit (NOISEUNI)."""
    factor, noise_beam, beam = _factors(cube, beam)
    if brightness_kind(cube) == "Jy/beam":
        return cube
    data = cube_values(cube, allow_blank=True) * cube.unit.to(u.K) * factor[:, None, None]
    return new_cube(cube, data, u.Jy / u.beam, beam=beam,
                    meta_update=_noise_in(cube, noise_beam, "Jy/beam"))


def jy_per_beam_to_k(cube, beam=None):
    """Convert a Jy/beam cube to K (per channel at its sky frequency, with its own beam if
    the cube has one per channel). A NOISERMS card in the meta follows the unit
    (NOISEUNI)."""
    factor, noise_beam, beam = _factors(cube, beam)
    if brightness_kind(cube) == "K":
        return cube
    data = cube_values(cube, allow_blank=True) * cube.unit.to(u.Jy / u.beam) / factor[:, None, None]
    return new_cube(cube, data, u.K, beam=beam, meta_update=_noise_in(cube, noise_beam, "K"))


def unit_name(unit):
    """Normalise "K" / "Jy/beam" (strings or astropy units) to one of BRIGHTNESS_UNITS."""
    try:
        parsed = u.Unit(unit)
    except (ValueError, TypeError):
        parsed = None
    for name in BRIGHTNESS_UNITS:
        if parsed == u.Unit(name):
            return name
    raise InstrumentError(f"unit: {unit!r} is not one of {', '.join(BRIGHTNESS_UNITS)}")


def to_unit(cube, unit):
    """The cube in "K" or "Jy/beam" (the cube must carry a beam)."""
    if unit_name(unit) == "Jy/beam":
        return k_to_jy_per_beam(cube)
    return jy_per_beam_to_k(cube)
