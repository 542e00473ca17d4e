"""Combination: joint imaging of several arrays and feathering with a single dish.

Joint imaging concatenates the arrays' visibilities (each with its own uv tracks, noise and
primary beam) before weighting and gridding; see
:func:`synth.instrument.interferometer.assemble_tracks`.

Feathering (Stanimirović et al. 1999, MNRAS 302, 417; Cotton 2017, PASP 129, 094501) merges
the single-dish and interferometric images in the Fourier plane, both as surface brightness
(Jy/sr):

    F(k) = alpha F_SD(k) + [1 - B_SD(k)] F_int(k),

B_SD the single-dish beam's transform normalised to 1 at k = 0 (for a Gaussian of FWHM
theta, exp(-pi^2 theta^2 k^2 / (4 ln 2))), alpha = ``sd_scale`` (1 for calibrated data). The
single-dish image is first multiplied by the interferometer's primary beam, so both images
see the same sky; primary-beam correction, if asked, comes after. The result is in Jy per
interferometer restoring beam; its total flux is the single-dish total flux (F(0) = F_SD(0)).
"""

import astropy.units as u
import numpy as np

from ..errors import InstrumentError

__all__ = ["split_instruments", "feather_plane", "feather_cube", "beam_transform"]


def _is_dish(item):
    from spectral_cube import SpectralCube
    return isinstance(item, SpectralCube) or hasattr(item, "beam_at")


def split_instruments(instrument):
    """(list of Interferometer, single dish or single-dish cube or None) from the argument."""
    from .interferometer import Interferometer
    items = list(instrument) if isinstance(instrument, (list, tuple)) else [instrument]
    arrays = [i for i in items if isinstance(i, Interferometer)]
    dishes = [i for i in items if not isinstance(i, Interferometer) and _is_dish(i)]
    other = [type(i).__name__ for i in items if not isinstance(i, Interferometer) and not _is_dish(i)]
    if other:
        raise InstrumentError(f"instrument: {other} are not instruments; give Interferometer, "
                              "SingleDish or a single-dish SpectralCube items")
    if not arrays:
        raise InstrumentError("instrument: a combination needs at least one Interferometer")
    if len(dishes) > 1:
        raise InstrumentError(f"instrument: at most one single dish (or single-dish cube) can be "
                              f"feathered, got {len(dishes)}")
    return arrays, (dishes[0] if dishes else None)


def beam_transform(beam, shape, dx_rad, dy_rad):
    """Fourier transform of a Gaussian beam (peak-normalised image) on the FFT grid of an
    image ``shape`` (ny, nx), normalised to 1 at k = 0 (Bracewell 2000, Gaussian pair)."""
    ky = np.sign(dy_rad) * np.fft.fftfreq(shape[0], abs(dy_rad))
    kx = np.sign(dx_rad) * np.fft.fftfreq(shape[1], abs(dx_rad))
    km, kl = np.meshgrid(ky, kx, indexing="ij")
    pa = beam.pa.to_value(u.rad)
    ka = kl * np.sin(pa) + km * np.cos(pa)
    kb = kl * np.cos(pa) - km * np.sin(pa)
    maj, mnr = beam.major.to_value(u.rad), beam.minor.to_value(u.rad)
    return np.exp(-np.pi**2 * (maj**2 * ka**2 + mnr**2 * kb**2) / (4 * np.log(2)))


def feather_plane(int_jysr, sd_jysr, sd_beam, dx_rad, dy_rad, sd_scale=1.0):
    """Feathered plane (Jy/sr) of one channel; see the module docstring."""
    b = beam_transform(sd_beam, int_jysr.shape, dx_rad, dy_rad)
    f = sd_scale * np.fft.fft2(sd_jysr) + (1.0 - b) * np.fft.fft2(int_jysr)
    return np.fft.ifft2(f).real


def _single_dish_cube(dish, sky_cube, noise, seed):
    from spectral_cube import SpectralCube
    if isinstance(dish, SpectralCube):
        return dish
    from .observe import observe
    return observe(sky_cube, dish, noise=noise, seed=seed)


def _sd_jysr(sd, c, nu_hz):
    """One single-dish channel as Jy/sr (K via Rayleigh-Jeans, Jy/beam via the beam area)."""
    plane = np.nan_to_num(np.asarray(sd.filled_data[c].value)) * sd.unit
    if sd.unit.is_equivalent(u.K):
        return plane.to_value(u.Jy / u.sr, u.brightness_temperature(nu_hz * u.Hz))
    if sd.unit.is_equivalent(u.Jy / u.beam):
        return (plane.to(u.Jy / u.beam) / sd.beam.sr).to_value(u.Jy / (u.beam * u.sr))
    raise InstrumentError(f"single-dish cube unit {sd.unit} must be K or Jy/beam")


def feather_cube(obs, dish, sky_cube, pb_at, *, noise=True, seed=None, pb_correct=False,
                 pb_limit=0.2, sd_scale=1.0):
    """Feather the interferometric cube ``obs`` (Jy/beam) with a single dish, channel by
    channel. ``pb_at(c)`` gives the effective primary beam of channel c."""
    from .interferometer import new_observed_cube
    from .visibilities import cube_frequencies_hz, cube_geometry
    sd = _single_dish_cube(dish, sky_cube, noise, seed)
    if sd.shape != obs.shape:
        raise InstrumentError(f"single-dish cube shape {sd.shape} differs from the "
                              f"interferometric cube {obs.shape}; observe the same sky cube")
    if getattr(sd, "_beam", None) is None:
        raise InstrumentError("single-dish cube has no beam; attach one with with_beam")
    geom, _, _ = cube_geometry(obs)
    freqs = cube_frequencies_hz(obs)
    omega_int = obs.beam.sr.to_value(u.sr)
    out = np.empty(obs.shape)
    for c, nu in enumerate(freqs):
        pb = pb_at(c)
        sd_plane = _sd_jysr(sd, c, nu) * pb
        int_plane = np.asarray(obs.filled_data[c].value) / omega_int
        img = feather_plane(int_plane, sd_plane, sd.beam, geom.dx_rad, geom.dy_rad,
                            sd_scale) * omega_int
        if pb_correct:
            img = np.where(pb >= pb_limit, img / np.maximum(pb, 1e-30), np.nan)
        out[c] = img
    meta = dict(obs.meta)
    meta.update(INSTRUME=f"{obs.meta.get('INSTRUME', '')}+{sd.meta.get('INSTRUME', 'dish')}",
                FEATHER=True, SDSCALE=float(sd_scale), PBCORR=bool(pb_correct))
    return new_observed_cube(obs, out, meta, obs.beam)
