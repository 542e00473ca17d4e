"""Combination: joint imaging of several arrays and feathering with a single dish.

Joint imaging concatenates the arrays' visibilities (each with its own uv tracks, noise and
primary beam) before weighting and gridding, pointing by pointing; see
:func:`synth.instrument.interferometer.assemble_tracks`.

Feathering (Stanimirović et al. 1999, MNRAS 302, 417; Cotton 2017, PASP 129, 094501) merges
the single-dish and interferometric images in the Fourier plane, both as surface brightness
(Jy/sr):

    F(k) = alpha F_SD(k) + [1 - B_SD(k)] F_int(k),

B_SD the single-dish beam's transform normalised to 1 at k = 0, alpha = ``dish_flux_scale`` (1 for
calibrated data). Both images are taken as the array sees the sky: the uncorrected
(flat-noise) map, and the single-dish image multiplied by the map's relative response R (the
primary beam for one pointing, sqrt(sum_p A_p^2) normalised for a mosaic). The
primary-beam-corrected product is the feathered image divided by R. (Feathering the corrected
map instead would amplify the residual sidelobes at the map edge by 1/R and spill them into
the map.) The total flux of the feathered uncorrected image is alpha times that of the
R-weighted dish image (F(0) = alpha F_SD(0)) over the map: the Fourier product is taken on
the map itself (circular), so the high-pass filtered interferometric image adds no net flux
(zero-padding would move part of its negative bowl off the map).
"""

import astropy.units as u
import numpy as np

from ..errors import InstrumentError
from ..sky import gaussian_transfer

__all__ = ["split_instruments", "feather_plane", "feather_mosaic", "dish_on_grid"]


def _is_dish(item):
    from spectral_cube import SpectralCube
    return isinstance(item, SpectralCube) or hasattr(item, "beam_at")


def split_instruments(instrument):
    """(list of Array, single dish or single-dish cube or None) from the argument."""
    from .interferometer import Array
    items = list(instrument) if isinstance(instrument, (list, tuple)) else [instrument]
    arrays = [i for i in items if isinstance(i, Array)]
    dishes = [i for i in items if not isinstance(i, Array) and _is_dish(i)]
    other = [type(i).__name__ for i in items if not isinstance(i, Array) and not _is_dish(i)]
    if other:
        raise InstrumentError(f"instrument: {other} are not instruments; give Array, "
                              "Dish or a single-dish SpectralCube items")
    if not arrays:
        raise InstrumentError("instrument: a combination needs at least one Array")
    if len(dishes) > 1:
        raise InstrumentError(f"instrument: at most one single dish (or single-dish cube) can be "
                              f"feathered, got {len(dishes)}")
    if len({id(a) for a in arrays}) != len(arrays):
        raise InstrumentError("instrument: the same Array is listed twice; its "
                              "visibilities would be counted twice")
    return arrays, (dishes[0] if dishes else None)


def feather_plane(int_jysr, sd_jysr, sd_beam, pixel_arcsec, sd_scale=1.0):
    """Feathered plane (Jy/sr) of one channel; see the module docstring. Images are (y, x)
    with RA decreasing with x (CDELT1 < 0)."""
    b = gaussian_transfer(int_jysr.shape, pixel_arcsec, sd_beam, sign=-1.0)
    f = sd_scale * np.fft.fft2(sd_jysr) + (1.0 - b) * np.fft.fft2(int_jysr)
    return np.fft.ifft2(f).real


def _k_to_jysr(nu_hz):
    return (1 * u.K).to_value(u.Jy / u.sr, u.brightness_temperature(nu_hz * u.Hz))


def feather_mosaic(corrected_jyb, response, sd_k, sd_beam, int_beam, freqs_hz, pixel_arcsec,
                   sd_scale=1.0):
    """Feather an interferometric map with a single-dish cube in K on the same grid, in the
    uncorrected (flat-noise) domain: the dish image is multiplied by the map's relative
    response R (the primary beam for one pointing), feathered with the uncorrected map
    I_corrected R, and the result divided by R again. Returns the corrected map in Jy per
    interferometric beam (0 where R = 0); its uncorrected version (times R) holds the total
    flux of the dish image times R."""
    omega_int = int_beam.sr.to_value(u.sr)
    out = np.zeros_like(corrected_jyb)
    for c, nu in enumerate(freqs_hz):
        r = response[c]
        int_plane = corrected_jyb[c] * r / omega_int
        sd_plane = sd_k[c] * _k_to_jysr(nu) * r
        flat = feather_plane(int_plane, sd_plane, sd_beam, pixel_arcsec, sd_scale) * omega_int
        with np.errstate(divide="ignore", invalid="ignore"):
            out[c] = np.where(r > 0, flat / r, 0.0)
    return out


def _reprojected(sd, target, name):
    """A single-dish cube on the target cube's celestial grid (reproject, bilinear), in K."""
    from reproject import reproject_interp
    from .beam import to_unit
    if sd.shape[0] != target.shape[0]:
        raise InstrumentError(f"{name}: {sd.shape[0]} channels, the interferometric cube has "
                              f"{target.shape[0]}; observe the same sky cube with both")
    if getattr(sd, "_beam", None) is None:
        raise InstrumentError(f"{name}: the single-dish cube has no beam; attach one with "
                              "with_beam")
    sd_k = to_unit(sd, "K") if not sd.unit.is_equivalent(u.K) else sd
    data = np.asarray(sd_k.filled_data[:].to_value(u.K), dtype=np.float64)
    out = np.empty(target.shape)
    for c in range(target.shape[0]):
        out[c], _ = reproject_interp((data[c], sd_k.wcs.celestial), target.wcs.celestial,
                                     shape_out=target.shape[1:])
    return np.nan_to_num(out), sd.beam


def dish_on_grid(dish, canvas_sky, out_sl, out_sky, dish_opts, noise, seed, hanning=False):
    """The single dish's image in K on the output grid, its beam and its name.

    A Dish is observed on the whole canvas (so flux spilled by its beam near the map
    edge is kept) with ``dish_opts`` (integration_time, rms, noise, seed; default noiseless);
    a single-dish SpectralCube is resampled onto the grid (reproject, bilinear).
    """
    from spectral_cube import SpectralCube
    if isinstance(dish, SpectralCube):
        data, beam = _reprojected(dish, out_sky, "single-dish cube")
        return data, beam, str(dish.meta.get("INSTRUME", "dish"))
    from .single_dish import observe_single_dish
    opts = {"noise": False, "seed": seed}
    opts.update(dish_opts)
    opts["noise"] = bool(opts["noise"]) and noise
    unknown = set(opts) - {"noise", "seed", "integration_time", "rms"}
    if unknown:
        raise InstrumentError(f"dish_options: unknown {sorted(unknown)}; valid: "
                              "integration_time, rms, noise, seed")
    sd = observe_single_dish(canvas_sky, dish, unit="K", hanning=hanning, **opts)
    data = np.asarray(sd.filled_data[:].to_value(u.K))[:, out_sl[0], out_sl[1]]
    return data, sd.beam, dish.name
