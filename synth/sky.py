"""Conventions every cube-handling stage shares: one copy for observing and analysis.

- Constants from astropy (CODATA 2018 / SI 2019): the speed of light, arcsec per radian.
- The spectral axis: radio-convention velocity and sky frequency of every channel,
  nu = nu0 (1 - v / c) (the radio definition; e.g. Wilson, Rohlfs & Hüttemeister 2013, Tools
  of Radio Astronomy, sec. 4.2, as in :func:`astropy.units.doppler_radio`).
- The pixel scale of a north-up square-pixel celestial WCS.
- K <-> Jy/beam: S = 2 k nu^2 Omega T / c^2 (Rayleigh-Jeans; Wilson et al. 2013, eq. 8.19,
  through :func:`astropy.units.brightness_temperature`), Omega the Gaussian beam solid angle
  pi theta_maj theta_min / (4 ln 2) (radio-beam's ``Beam.sr``).
- The Fourier transform of a Gaussian beam on an FFT grid (Bracewell 2000, ch. 6).

``synth.instrument`` and ``synth.analysis`` both import from here.
"""

import numpy as np
import astropy.units as u
import astropy.constants as const
from astropy.wcs.utils import proj_plane_pixel_scales

from .errors import InstrumentError

__all__ = ["C_M_S", "C_KMS", "ARCSEC_PER_RAD", "channel_velocities_ms",
           "channel_frequencies_hz", "pixel_scale_arcsec", "jy_per_beam_per_k",
           "gaussian_transfer"]

#: speed of light, m/s (exact, SI 2019; astropy.constants.c)
C_M_S = float(const.c.to_value(u.m / u.s))
C_KMS = C_M_S / 1e3
#: arcsec per radian
ARCSEC_PER_RAD = float((1 * u.rad).to_value(u.arcsec))


def channel_velocities_ms(cube):
    """Radio-convention velocity of each channel in m/s."""
    spec = cube.spectral_axis
    if spec.unit.physical_type == "speed":
        return spec.to_value(u.m / u.s)
    rest = cube.wcs.wcs.restfrq * u.Hz
    if not rest.value > 0:
        raise InstrumentError("cube spectral axis: frequency axis without RESTFRQ; "
                              "set the rest frequency to convert to velocity")
    return spec.to_value(u.m / u.s, equivalencies=u.doppler_radio(rest))


def channel_frequencies_hz(cube):
    """Sky frequency of each channel in Hz (radio convention about RESTFRQ)."""
    spec = cube.spectral_axis
    if spec.unit.physical_type == "frequency":
        return spec.to_value(u.Hz)
    rest_hz = cube.wcs.wcs.restfrq
    if not rest_hz > 0:
        raise InstrumentError("cube spectral axis: velocity axis without RESTFRQ; "
                              "set the rest frequency (e.g. cube.wcs.wcs.restfrq)")
    return rest_hz * (1.0 - spec.to_value(u.m / u.s) / C_M_S)


def pixel_scale_arcsec(cube):
    """Pixel size in arcsec; pixels must be square to 1e-6 (relative)."""
    dx, dy = proj_plane_pixel_scales(cube.wcs.celestial) * 3600.0
    if abs(dx - dy) > 1e-6 * dy:
        raise InstrumentError(f"cube pixels: {dx:.6g} x {dy:.6g} arcsec are not square; "
                              "regrid onto square pixels first")
    return float(dy)


def jy_per_beam_per_k(nu_hz, beam):
    """Jy/beam per K of Rayleigh-Jeans brightness temperature at each frequency (module doc)."""
    nu = np.atleast_1d(np.asarray(nu_hz, dtype=np.float64)) * u.Hz
    eq = u.brightness_temperature(nu, beam_area=beam.sr)
    return (1.0 * u.K).to_value(u.Jy, equivalencies=eq)


def gaussian_transfer(shape, pixscale_arcsec, beam, sign=-1.0):
    """Fourier transform (1 at k = 0) of a Gaussian beam on an FFT grid of ``shape``.

    For a Gaussian with covariance Sigma the transform is exp(-2 pi^2 k^T Sigma k)
    (Bracewell 2000, The Fourier Transform and its Applications, ch. 6). The major axis lies
    at position angle PA east of north; north is +y and east is ``sign`` * x (sign -1 for the
    usual CDELT1 < 0).
    """
    ny, nx = shape
    ky = np.fft.fftfreq(ny, d=pixscale_arcsec)[:, None]
    kx = np.fft.fftfreq(nx, d=pixscale_arcsec)[None, :]
    fwhm_to_sigma = 1.0 / np.sqrt(8.0 * np.log(2.0))
    s_maj = beam.major.to_value(u.arcsec) * fwhm_to_sigma
    s_min = beam.minor.to_value(u.arcsec) * fwhm_to_sigma
    pa = beam.pa.to_value(u.rad)
    dx, dy = sign * np.sin(pa), np.cos(pa)       # unit vector along the major axis
    k_maj = kx * dx + ky * dy
    k_min = -kx * dy + ky * dx
    return np.exp(-2.0 * np.pi**2 * (s_maj**2 * k_maj**2 + s_min**2 * k_min**2))


#: how units are written in text, tables and figures (one spelling each)
_UNIT_TEXT = {"K km / s": "K km/s", "km / s": "km/s", "km2 / s2": "(km/s)^2",
              "Jy / beam": "Jy/beam", "Jy km / (beam s)": "Jy/beam km/s", "beam / Jy": "beam/Jy"}


def unit_text(unit):
    """A unit as synth writes it in text: ``Jy/beam``, ``K km/s``, ``km/s`` (astropy writes
    "Jy / beam"); FITS cards keep the FITS spelling."""
    import astropy.units as u
    text = u.Unit(unit).to_string()
    return _UNIT_TEXT.get(text, text)
