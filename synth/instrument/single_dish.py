"""A single-dish telescope and its observing path: beam smoothing, thermal noise, units.

The dish is described by its diameter (beam FWHM = fwhm_factor * lambda / D) or by a fixed
``radio_beam.Beam``, a beam efficiency eta and a system temperature. Observing a sky cube
convolves every channel with the beam, adds noise correlated on the beam scale with the rms
of the radiometer equation (see :mod:`synth.instrument.noise`) or a given rms, and returns the
cube in K (main-beam temperature) or Jy/beam with the beam attached.
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u
from radio_beam import Beam

from ..errors import InstrumentError, refuse_renamed_fields
from .beam import (FWHM_FACTOR_RANGE, convolve_beam, dish_beam, jy_per_k, sky_frequencies,
                   to_unit, unit_name)
from .cube_utils import check_cube, cube_values, new_cube, pixel_scale, reference_frequency
from .noise import correlated_noise, hanning_noise_factor, radiometer_rms
from .spectral import channel_width_frequency, velocity_axis

__all__ = ["Dish", "observe_single_dish", "observe_single_dish_seeds", "noise_rms_for"]


@dataclass(frozen=True)
class Dish:
    """A single-dish telescope.

    Parameters
    ----------
    diameter : Quantity (length), optional
        Dish diameter; the beam FWHM is ``fwhm_factor * lambda / D``.
    main_beam_efficiency : float in (0, 1]
        Main-beam efficiency eta_mb (divides the radiometer noise: the output is in main-beam
        brightness temperature).
    tsys : Quantity (temperature), optional
        System temperature, needed for noise from the radiometer equation.
    beam : radio_beam.Beam, optional
        A fixed beam used at every frequency instead of the diameter.
    fwhm_factor : float
        Beam FWHM in units of lambda / D: 1.02 uniform illumination, ~1.13 typical taper,
        1.2 strong taper (Goldsmith 1998, ch. 6; docs/references.md). Allowed range FWHM_FACTOR_RANGE.
    name : str
        Recorded in the output's INSTRUME card.
    n_pol : {1, 2}
        Polarisations the receiver records and averages (default 2: the radiometer noise
        is 1/sqrt(2) of a single polarisation's).
    latitude : Quantity (angle)
        Site latitude (default +8 deg: an invented site). With ``zenith_opacity`` and ``receiver_temperature``, T_sys follows the
        source's elevation over ``hour_angles`` through the plane-parallel atmosphere arrays
        use (:mod:`synth.instrument.atmosphere`) instead of ``tsys``.
    zenith_opacity : float, optional
    receiver_temperature, atmosphere_temperature : Quantity (temperature)
        T_rx, and the atmosphere's effective temperature (270 K, common practice).
    hour_angles : Quantity (angle), (start, stop)
        The hour angles the map is observed over (default -2 h to +2 h).
    elevation_limit : Quantity (angle)
        Parts of the track with the source lower than this are not observed.
    """

    diameter: u.Quantity = None
    main_beam_efficiency: float = 0.7
    tsys: u.Quantity = None
    beam: Beam = None
    fwhm_factor: float = 1.13
    name: str = "dish"
    n_pol: int = 2
    latitude: u.Quantity = 8 * u.deg
    zenith_opacity: float = None
    receiver_temperature: u.Quantity = None
    atmosphere_temperature: u.Quantity = 270 * u.K
    hour_angles: u.Quantity = (-2, 2) * u.hourangle
    elevation_limit: u.Quantity = 15 * u.deg

    def __post_init__(self):
        if (self.diameter is None) == (self.beam is None):
            raise InstrumentError("Dish: give exactly one of diameter (e.g. 30 * u.m) "
                                  "or beam (a radio_beam.Beam)")
        if self.diameter is not None:
            _check_quantity(self.diameter, u.m, "diameter", "30 * u.m", allow_zero=False)
        if self.beam is not None and not isinstance(self.beam, Beam):
            raise InstrumentError(f"beam: expected a radio_beam.Beam, got "
                                  f"{type(self.beam).__name__}")
        eff = self.main_beam_efficiency
        if isinstance(eff, bool) or not (isinstance(eff, (int, float)) and 0 < eff <= 1):
            raise InstrumentError(f"main_beam_efficiency: must be a number in (0, 1], "
                                  f"got {eff!r}")
        if self.tsys is not None:
            _check_quantity(self.tsys, u.K, "tsys", "120 * u.K", allow_zero=False)
        lo, hi = FWHM_FACTOR_RANGE
        if not (isinstance(self.fwhm_factor, (int, float)) and lo <= self.fwhm_factor <= hi):
            raise InstrumentError(f"fwhm_factor: must be between {lo} and {hi} (FWHM in "
                                  f"lambda/D; 1.02 uniform, 1.13 typical), got "
                                  f"{self.fwhm_factor!r}")
        if not isinstance(self.name, str) or not self.name:
            raise InstrumentError(f"name: must be a non-empty string, got {self.name!r}")
        if isinstance(self.n_pol, bool) or self.n_pol not in (1, 2):
            raise InstrumentError(f"n_pol: {self.n_pol!r}; valid: 1 or 2 polarisations")
        self._check_site()

    def _check_site(self):
        if self.latitude is not None:
            _check_angle(self.latitude, "latitude", -90, 90)
        _check_angle(self.elevation_limit, "elevation_limit", 0, 89.999)
        try:
            ha = u.Quantity(self.hour_angles).to_value(u.hourangle)
        except (u.UnitsError, TypeError, ValueError):
            ha = None
        if ha is None or np.shape(ha) != (2,) or not np.all(np.isfinite(ha)) \
                or not ha[0] < ha[1] or ha[1] - ha[0] > 24:
            raise InstrumentError(f"hour_angles: {self.hour_angles!r}; give (start, stop) "
                                  "angles with start < stop, e.g. (-2, 2) * u.hourangle")
        object.__setattr__(self, "hour_angles", (ha[0] * u.hourangle, ha[1] * u.hourangle))
        if self.zenith_opacity is None:
            return
        tau = self.zenith_opacity
        if isinstance(tau, bool) or not (isinstance(tau, (int, float)) and np.isfinite(tau)
                                         and tau > 0):
            raise InstrumentError(f"zenith_opacity: {tau!r}; must be a number > 0")
        if self.latitude is None or self.receiver_temperature is None:
            raise InstrumentError("zenith_opacity: needs latitude and receiver_temperature "
                                  "(T_rx, e.g. 50 * u.K): T_sys then follows the elevation")
        _check_quantity(self.receiver_temperature, u.K, "receiver_temperature", "50 * u.K",
                        allow_zero=False)
        _check_quantity(self.atmosphere_temperature, u.K, "atmosphere_temperature",
                        "270 * u.K", allow_zero=False)

    @property
    def has_atmosphere(self):
        """True when T_sys follows the elevation (latitude and zenith_opacity given)."""
        return self.zenith_opacity is not None

    def tsys_at(self, elevation_rad):
        """T_sys in K at each elevation: [T_rx + T_atm (1 - e^-tau0 A)] e^(tau0 A)
        (:func:`synth.instrument.atmosphere.system_temperature`); ``tsys`` without one."""
        if not self.has_atmosphere:
            return np.full(np.shape(elevation_rad), self.tsys.to_value(u.K))
        from .atmosphere import system_temperature
        return system_temperature(self.receiver_temperature.to_value(u.K),
                                  self.zenith_opacity, elevation_rad,
                                  self.atmosphere_temperature.to_value(u.K))

    def effective_tsys(self, declination):
        """The constant T_sys (Quantity, K) giving the radiometer noise of the map observed
        toward ``declination`` over ``hour_angles``: ``tsys`` without an atmosphere model,
        else [mean of T_sys^-2 over the track above the elevation limit]^(-1/2)
        (:func:`synth.instrument.atmosphere.track_system_temperature`)."""
        if not self.has_atmosphere:
            return self.tsys
        from .atmosphere import track_system_temperature
        dec = u.Quantity(declination).to_value(u.rad)
        t, _ = track_system_temperature(
            self.tsys_at, self.latitude.to_value(u.rad), dec,
            [h.to_value(u.rad) for h in self.hour_angles], self.elevation_limit.to_value(u.rad))
        return t * u.K

    def beam_at(self, freq):
        """The beam at frequency ``freq`` (Quantity): the fixed beam, or fwhm_factor * lambda / D."""
        if self.beam is not None:
            return self.beam
        return dish_beam(self.diameter, freq, self.fwhm_factor)


def _check_angle(value, field, lo, hi):
    if not (isinstance(value, u.Quantity) and value.unit.is_equivalent(u.deg)
            and value.isscalar and np.isfinite(value.value)
            and lo <= value.to_value(u.deg) <= hi):
        raise InstrumentError(f"{field}: {value!r}; give an angle within [{lo}, {hi}] deg "
                              f"(e.g. 8 * u.deg)")


refuse_renamed_fields(Dish, {"efficiency": "main_beam_efficiency", "taper": "fwhm_factor"})


def _check_quantity(value, unit, field, hint, allow_zero=True):
    if not (isinstance(value, u.Quantity) and value.unit.is_equivalent(unit)
            and value.isscalar):
        raise InstrumentError(f"{field}: expected a scalar Quantity in {unit} (e.g. {hint}), "
                              f"got {value!r}")
    number = value.to_value(unit)
    if not np.isfinite(number) or number < 0 or (number == 0 and not allow_zero):
        raise InstrumentError(f"{field}: must be {'>= 0' if allow_zero else 'positive'}, "
                              f"got {value}")


def noise_rms_for(cube, dish, beam, *, integration_time=None, rms=None, hanning=False):
    """Noise rms per channel in K for observing ``cube`` with ``dish``.

    ``rms`` (K, or Jy/beam converted with the beam at the line frequency) wins; otherwise the
    radiometer equation with the dish's T_sys (or, with its atmosphere model, the effective
    T_sys over its track toward the cube's reference declination) and eta, the cube's
    channel width in Hz and ``integration_time``; Hanning smoothing lowers it by
    sqrt(3/8)."""
    if rms is not None:
        if not isinstance(rms, u.Quantity):
            raise InstrumentError(f"rms: expected a Quantity in K or Jy/beam, got {rms!r}")
        if rms.unit.is_equivalent(u.Jy / u.beam):
            k_per_jy = 1 / jy_per_k(beam, reference_frequency(cube))
            rms = rms.to_value(u.Jy / u.beam) * k_per_jy * u.K
        _check_quantity(rms, u.K, "rms", "0.05 * u.K")
        return rms.to(u.K)
    if (dish.tsys is None and not dish.has_atmosphere) or integration_time is None:
        raise InstrumentError("noise: needs rms=... or both the dish's tsys (or its "
                              "atmosphere model) and integration_time=...; or pass noise=False")
    v, _ = velocity_axis(cube)
    width = abs(v[1] - v[0])
    dnu = channel_width_frequency(width, reference_frequency(cube))
    tsys = dish.effective_tsys(cube.wcs.celestial.wcs.crval[1] * u.deg)
    sigma = radiometer_rms(tsys, dish.main_beam_efficiency, dnu, integration_time, dish.n_pol)
    return sigma * hanning_noise_factor() if hanning else sigma


def _seed_or_new(seed):
    if seed is None:
        return int(np.random.SeedSequence().generate_state(1)[0])
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)) \
            or seed < 0:
        raise InstrumentError(f"seed: must be a non-negative integer, got {seed!r}")
    return int(seed)


def observe_single_dish(cube, dish, *, integration_time=None, rms=None, noise=True,
                        seed=None, unit=None, hanning=False):
    """Observe a sky cube (after the spectral step) with a single dish.

    Beam convolution (:func:`synth.instrument.beam.convolve_beam`), then noise correlated on
    the beam (:func:`synth.instrument.noise.correlated_noise`) added in K, then conversion to
    ``unit`` ("K" default, or "Jy/beam"). ``seed=None`` draws a fresh seed, recorded in
    NSEED so the result can be reproduced. ``hanning`` says the channels were Hanning
    smoothed, so the noise is correlated between neighbours the same way.

    Meta / header cards: INSTRUME, NOISERMS (in the output unit), NOISEUNI, NSEED (-1 if
    noiseless), plus CHANWID/HANNING from the spectral step.
    """
    return observe_single_dish_seeds(cube, dish, [seed], integration_time=integration_time,
                                     rms=rms, noise=noise, unit=unit, hanning=hanning)[0]


def observe_single_dish_seeds(cube, dish, seeds, *, integration_time=None, rms=None,
                              noise=True, unit=None, hanning=False):
    """:func:`observe_single_dish` once per seed in ``seeds`` (a list of cubes, each equal to
    the observation with that seed): the beam convolution and the noise rms are computed
    once, the noise drawn per seed."""
    check_cube(cube)
    if not isinstance(dish, Dish):
        raise InstrumentError(f"instrument: expected Dish, got {type(dish).__name__}")
    out_unit = unit_name(unit if unit is not None else "K")
    beam = dish.beam_at(reference_frequency(cube))
    smoothed = to_unit(convolve_beam(cube, beam), "K")
    data0 = cube_values(smoothed)
    sigma_k = 0.0 * u.K
    if noise:
        sigma_k = noise_rms_for(cube, dish, beam, integration_time=integration_time,
                                rms=rms, hanning=hanning)
        seeds = [_seed_or_new(s) for s in seeds]
    else:
        seeds = seeds[:1]
    sigma_out = sigma_k.to_value(u.K)
    if out_unit == "Jy/beam":
        sigma_out *= float(jy_per_k(beam, reference_frequency(cube)))
    out = []
    for k, seed in enumerate(seeds):
        data_k = data0 if k == len(seeds) - 1 else data0.copy()   # the last one takes it
        used_seed = -1
        if noise:
            used_seed = seed
            rng = np.random.default_rng(used_seed)
            data_k += correlated_noise(data_k.shape, beam, pixel_scale(cube),
                                       sigma_k.to_value(u.K), rng, hanning=hanning)
        if out_unit == "Jy/beam":
            data_k *= jy_per_k(beam, sky_frequencies(smoothed))[:, None, None]
        meta = {"INSTRUME": dish.name, "NOISERMS": float(sigma_out), "NOISEUNI": out_unit,
                "NSEED": used_seed}
        out.append(new_cube(smoothed, data_k, u.Unit(out_unit), beam=beam, meta_update=meta))
    return out
