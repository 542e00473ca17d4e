"""The Array instrument and the visibility-level pieces of an observation.

:class:`Array` (antennas, site, efficiencies, T_sys or an atmosphere model,
polarisations); :func:`assemble_tracks` (every array's uv tracks toward a pointing with the
radiometer noise of each row); antenna phase errors; prediction, dirty image and PSF of one
pointing; the observed cube. The channel and pointing loop, mosaics and feathering are in
:mod:`synth.instrument.array_observe` (``observe_interferometric`` here is its entry point).
"""

from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import astropy.units as u
import numpy as np

from ..errors import InstrumentError, refuse_renamed_fields
from ..sky import C_M_S
from .arrays import BUILTIN_LAYOUTS, builtin_layout, read_layout_csv
from .primary_beam import PB_SHAPES, pair_beam
from .beam import FWHM_FACTOR_RANGE
from .uv import SIDEREAL_RATE_RAD_S, elevation, uv_tracks
from .visibilities import (add_thermal_noise, cube_frequencies_hz, grid_dirty, predict, visibility_sigma_jy)
from .weighting import WEIGHTINGS, image_noise_jy

#: deconvolvers: Högbom CLEAN, or multi-scale CLEAN (Cornwell 2008)
DECONVOLVERS = ("none", "hogbom", "multiscale")

__all__ = ["DECONVOLVERS", "Array", "observe_interferometric", "OBSERVE_OPTIONS", "assemble_tracks",
           "new_observed_cube", "Tracks", "antenna_phase_gains"]

#: keyword options of observe_interferometric and their defaults; the config's [[setup]] keys
#: of the same names (with a unit suffix where the value has a unit) share these defaults
OBSERVE_OPTIONS = dict(hour_angles=(-2, 2) * u.hourangle, sample_interval=300 * u.s,
                       weighting="natural", robust=0.5, deconvolver="hogbom",
                       clean_stop_sigma=3.0, clean_max_components=5000, clean_loop_gain=0.1,
                       clean_scales=None, clean_mask_sigma=None,
                       correct_primary_beam=True, primary_beam_cutoff=0.2,
                       primary_beam=True, bandwidth=None, phase_rms=0 * u.deg,
                       phase_interval=None, dish_flux_scale=1.0, rms=None, unit="Jy/beam")

#: observe keywords that were renamed, with their new names (refused with a hint)
RENAMED_OPTIONS = {"threshold": "clean_stop_sigma", "niter": "clean_max_components",
                   "gain": "clean_loop_gain", "scales": "clean_scales",
                   "mask_sigma": "clean_mask_sigma", "pb_correct": "correct_primary_beam",
                   "pb_limit": "primary_beam_cutoff", "sd_scale": "dish_flux_scale",
                   "deconvolve": 'deconvolver ("none", "hogbom" or "multiscale")',
                   "map_center": "map_offset"}


def _quantity(name, value, unit, positive=True):
    try:
        q = u.Quantity(value)
        v = q.to_value(unit)
    except (u.UnitsError, TypeError, ValueError) as exc:
        raise InstrumentError(f"{name}={value!r} must be a Quantity convertible to {unit}") from exc
    if not np.all(np.isfinite(v)) or (positive and not np.all(v > 0)):
        raise InstrumentError(f"{name}={value!r} must be finite" + (" and > 0" if positive else ""))
    return q.to(unit)


def _resolve_antennas(antennas):
    """(names, enu_m (n, 3), diameter_m (n,) with NaN = default) from any accepted form."""
    if isinstance(antennas, (str, Path)):
        if str(antennas) in BUILTIN_LAYOUTS:
            lay = builtin_layout(str(antennas))
        else:
            lay = read_layout_csv(antennas)
        return lay.names, lay.enu_m, lay.diameter_m
    try:
        enu = (u.Quantity(antennas).to_value(u.m) if isinstance(antennas, u.Quantity)
               else np.asarray(antennas, dtype=np.float64))
    except (u.UnitsError, TypeError, ValueError) as exc:
        raise InstrumentError(f"antennas: cannot read {type(antennas).__name__} as (n, 3) ENU "
                              "metres") from exc
    if enu.ndim != 2 or enu.shape[1] != 3 or enu.shape[0] < 2 or not np.isfinite(enu).all():
        raise InstrumentError(f"antennas with shape {enu.shape} must be a finite (n, 3) array of "
                              f"ENU metres with n >= 2, a CSV path or one of {sorted(BUILTIN_LAYOUTS)}")
    names = tuple(f"a{i + 1:02d}" for i in range(enu.shape[0]))
    return names, enu.copy(), np.full(enu.shape[0], np.nan)


@dataclass(frozen=True, eq=False)
class Array:
    """An array of antennas at one site.

    Parameters
    ----------
    antennas : str, path or (n, 3) array / Quantity
        A built-in invented layout name (``BUILTIN_LAYOUTS``), a layout CSV file, or local
        east-north-up positions (metres when a bare array).
    diameter : Quantity [length], optional
        Diameter of antennas whose layout row leaves ``diameter_m`` empty; default the
        layout's own diameters (every built-in layout gives them).
    latitude : Quantity [angle]
        Geodetic latitude of the site (default +8 deg: an invented site).
    aperture_efficiency : float
        Aperture efficiency eta_a.
    tsys : Quantity [temperature], optional
        System temperature; needed for radiometer noise unless ``zenith_opacity`` is given.
    elevation_limit : Quantity [angle]
        Samples with the source lower than this are dropped.
    primary_beam_shape : {"gaussian", "airy"}
        Primary-beam shape; ``fwhm_factor`` sets the Gaussian FWHM = fwhm_factor lambda / D.
    fwhm_factor : float
        Primary-beam FWHM in units of lambda / D (1.13 for a typical illumination taper,
        Goldsmith 1998, ch. 6).
    system_efficiency : float
        The digital and correlator losses of the radiometer equation in one factor (eta_q
        eta_c in Thompson, Moran & Swenson 2017, ch. 6 and 8; e.g. 0.88 for 2-bit, 4-level
        sampling, their Table 8.1, from memory). Default 0.9, a plain round figure.
    n_pol : {1, 2}
        Polarisations correlated and averaged into Stokes I (default 2).
    zenith_opacity : float, optional
        With ``receiver_temperature``: T_sys follows the elevation of every sample through a
        plane-parallel atmosphere (:mod:`synth.instrument.atmosphere`) instead of ``tsys``.
    receiver_temperature, atmosphere_temperature : Quantity [temperature]
        T_rx, and the atmosphere's effective temperature (270 K, common practice).
    """

    antennas: object
    diameter: u.Quantity = None
    latitude: u.Quantity = 8 * u.deg
    aperture_efficiency: float = 0.7
    tsys: u.Quantity = None
    name: str = None
    elevation_limit: u.Quantity = 15 * u.deg
    primary_beam_shape: str = "gaussian"
    fwhm_factor: float = 1.13
    system_efficiency: float = 0.9
    n_pol: int = 2
    zenith_opacity: float = None
    receiver_temperature: u.Quantity = None
    atmosphere_temperature: u.Quantity = 270 * u.K
    antenna_names: tuple = field(init=False, repr=False)
    positions_m: np.ndarray = field(init=False, repr=False)
    diameters_m: np.ndarray = field(init=False, repr=False)

    def __post_init__(self):
        names, enu, diam = _resolve_antennas(self.antennas)
        _, first, counts = np.unique(enu, axis=0, return_index=True, return_counts=True)
        if (counts > 1).any():
            k = int(first[np.argmax(counts > 1)])
            raise InstrumentError(f"antennas {names[k]!r} and another share the position "
                                  f"{enu[k].tolist()} m; every antenna needs its own position")
        if self.diameter is None and np.isnan(diam).any():
            raise InstrumentError("diameter: the layout leaves antenna diameters empty; give "
                                  "diameter= (e.g. 10 * u.m)")
        d_m = (np.nan if self.diameter is None
               else _quantity("diameter", self.diameter, u.m).value)
        diam = np.where(np.isnan(diam), d_m, diam)
        lat = _quantity("latitude", self.latitude, u.deg, positive=False)
        if abs(lat.value) > 90:
            raise InstrumentError(f"latitude={self.latitude!r} must be within [-90, 90] deg")
        el = _quantity("elevation_limit", self.elevation_limit, u.deg, positive=False)
        if not 0 <= el.value < 90:
            raise InstrumentError(f"elevation_limit={self.elevation_limit!r} must be in [0, 90) deg")
        for key in ("aperture_efficiency", "system_efficiency"):
            v = getattr(self, key)
            if not (isinstance(v, (int, float)) and 0 < v <= 1):
                raise InstrumentError(f"{key}={v!r} must be a number in (0, 1]")
        if self.zenith_opacity is not None:
            tau = self.zenith_opacity
            if isinstance(tau, bool) or not (isinstance(tau, (int, float)) and np.isfinite(tau)
                                             and tau > 0):
                raise InstrumentError(f"zenith_opacity={tau!r} must be a number > 0")
            if self.receiver_temperature is None:
                raise InstrumentError("zenith_opacity needs receiver_temperature (T_rx, e.g. "
                                      "50 * u.K): T_sys then follows the elevation")
            _quantity("receiver_temperature", self.receiver_temperature, u.K)
            _quantity("atmosphere_temperature", self.atmosphere_temperature, u.K)
        if isinstance(self.n_pol, bool) or self.n_pol not in (1, 2):
            raise InstrumentError(f"n_pol={self.n_pol!r}; valid: 1 or 2 polarisations")
        if self.primary_beam_shape not in PB_SHAPES:
            raise InstrumentError(f"primary_beam_shape={self.primary_beam_shape!r} is not "
                                  f"known; choose one of {PB_SHAPES}")
        lo, hi = FWHM_FACTOR_RANGE
        if (isinstance(self.fwhm_factor, bool) or not isinstance(self.fwhm_factor, (int, float))
                or not lo <= self.fwhm_factor <= hi):
            raise InstrumentError(f"fwhm_factor={self.fwhm_factor!r}; valid: a number in "
                                  f"[{lo}, {hi}] (FWHM in units of lambda / D)")
        tsys = None if self.tsys is None else _quantity("tsys", self.tsys, u.K)
        enu.setflags(write=False)
        diam.setflags(write=False)
        for key, val in (("antenna_names", names), ("positions_m", enu), ("diameters_m", diam),
                         ("diameter", None if self.diameter is None else d_m * u.m),
                         ("latitude", lat),
                         ("elevation_limit", el), ("tsys", tsys),
                         ("name", self.name or (self.antennas if isinstance(self.antennas, str)
                                                else f"array-{enu.shape[0]}"))):
            object.__setattr__(self, key, val)

    @property
    def n_antennas(self):
        return self.positions_m.shape[0]

    def tsys_at(self, elevation_rad):
        """T_sys in K at each elevation: ``tsys`` without an atmosphere model, else
        [T_rx + T_atm (1 - e^-tau0 A)] e^(tau0 A) (:mod:`synth.instrument.atmosphere`)."""
        if self.zenith_opacity is None:
            if self.tsys is None:
                raise InstrumentError(f"array {self.name!r}: noise needs tsys (e.g. 90 * u.K) "
                                      "or zenith_opacity with receiver_temperature")
            return np.full(np.shape(elevation_rad), self.tsys.to_value(u.K))
        from .atmosphere import system_temperature
        return system_temperature(u.Quantity(self.receiver_temperature).to_value(u.K),
                                  self.zenith_opacity, elevation_rad,
                                  u.Quantity(self.atmosphere_temperature).to_value(u.K))

    def effective_tsys(self, declination, hour_angles, sample_interval):
        """The T_sys (K) whose constant value gives the same naturally weighted point-source
        noise as the track: [mean over samples of T_sys^-2]^(-1/2)."""
        from .uv import elevation
        t = uv_tracks(self, declination, hour_angles, sample_interval)
        h = np.unique(t.hour_angle_rad)
        el = elevation(h, u.Quantity(declination).to_value(u.rad),
                       self.latitude.to_value(u.rad))
        return float(np.mean(self.tsys_at(el) ** -2.0) ** -0.5)

    @property
    def total_efficiency(self):
        """system_efficiency x aperture_efficiency."""
        return self.system_efficiency * self.aperture_efficiency


refuse_renamed_fields(Array, {
    "efficiency": "aperture_efficiency", "dish_diameter": "diameter", "taper": "fwhm_factor",
    "pb_shape": "primary_beam_shape", "quantization_efficiency": "system_efficiency",
    "correlator_efficiency": "system_efficiency"})


@dataclass(frozen=True, eq=False)
class Tracks:
    """All arrays' visibility rows: uvw (m), noise per row (Jy) and primary-beam groups.

    ``groups`` is a tuple of (row indices, d1_m, d2_m, shape, fwhm_factor): rows sharing one
    pair beam. ``ant1``/``ant2`` are antenna numbers over all arrays, ``time_s`` the time
    of each row since the start of the track, ``gains`` an optional complex factor per row
    (antenna phase errors) applied to the predicted visibilities.
    """

    uvw_m: np.ndarray
    sigma_jy: np.ndarray
    groups: tuple
    names: tuple
    ant1: np.ndarray = None
    ant2: np.ndarray = None
    time_s: np.ndarray = None
    gains: np.ndarray = None


def assemble_tracks(arrays, dec_rad, opts, dnu_hz, integration_time=None, n_share=1):
    """uv tracks of every array toward ``dec_rad`` with the radiometer noise of each row.

    ``n_share``: the number of pointings that share the track in turn; each row then
    integrates 1/n_share of its sample interval (noise x sqrt(n_share)). An
    ``integration_time`` (on-source time of this pointing) overrides it.
    """
    uvw, sig, gid, table, a1, a2, times, offset = [], [], [], {}, [], [], [], 0
    h_start = u.Quantity(opts["hour_angles"]).to_value(u.rad)[0]
    for arr in arrays:
        t = uv_tracks(arr, dec_rad * u.rad, opts["hour_angles"], opts["sample_interval"])
        a1.append(t.ant1 + offset)
        a2.append(t.ant2 + offset)
        offset += arr.n_antennas
        times.append((t.hour_angle_rad - h_start) / SIDEREAL_RATE_RAD_S)
        d = arr.diameters_m
        area = np.pi * d**2 / 4
        el = elevation(t.hour_angle_rad, dec_rad, arr.latitude.to_value(u.rad))
        s = visibility_sigma_jy(arr.tsys_at(el), area[t.ant1], area[t.ant2],
                                arr.total_efficiency, dnu_hz, t.sample_time_s, arr.n_pol)
        if integration_time is not None:
            t_tot = np.unique(t.hour_angle_rad).size * t.sample_time_s
            s = s * np.sqrt(t_tot / _quantity("integration_time", integration_time, u.s).value)
        else:
            s = s * np.sqrt(n_share)
        uvw.append(t.uvw_m)
        sig.append(s)
        # rows sharing one pair beam: group by the antenna pair's diameters (per antenna
        # pair, not per row: far fewer values to sort)
        da, db = np.minimum(d[t.ant1], d[t.ant2]), np.maximum(d[t.ant1], d[t.ant2])
        dset = np.unique(d)
        code = np.searchsorted(dset, da) * dset.size + np.searchsorted(dset, db)
        codes, inv = np.unique(code, return_inverse=True)
        ids = [table.setdefault((float(dset[k // dset.size]), float(dset[k % dset.size]),
                                 arr.primary_beam_shape, arr.fwhm_factor), len(table)) for k in codes]
        gid.append(np.asarray(ids)[inv.ravel()])
    gid = np.concatenate(gid)
    groups = tuple((np.nonzero(gid == k)[0],) + key for key, k in table.items())
    return Tracks(np.concatenate(uvw), np.concatenate(sig), groups,
                  tuple(a.name for a in arrays), np.concatenate(a1), np.concatenate(a2),
                  np.concatenate(times))


def antenna_phase_gains(tracks, phase_rms_rad, interval_s, rng):
    """Complex gains exp(i (phi_a1 - phi_a2)) per row for antenna phase errors: phi drawn
    per antenna and per solution interval of ``interval_s`` from a Gaussian of rms
    ``phase_rms_rad``. A baseline's phase error then has rms sqrt(2) phi, and the
    visibilities average to exp(-phi^2) of their value (the coherence of Gaussian phase
    noise of rms sigma is exp(-sigma^2/2); common practice, e.g. Thompson, Moran & Swenson
    2017, sec. 13.1)."""
    slot = np.floor(tracks.time_s / interval_s + 1e-9).astype(np.int64)
    n_ant = int(max(tracks.ant1.max(), tracks.ant2.max())) + 1
    phi = rng.normal(0.0, phase_rms_rad, size=(n_ant, int(slot.max()) + 1))
    return np.exp(1j * (phi[tracks.ant1, slot] - phi[tracks.ant2, slot]))


@lru_cache(maxsize=64)
def _radius(geom):
    """Distance (rad) of every pixel from the phase centre: once per pointing's sub-image
    (read-only; shared by its channels)."""
    l, m = geom.lm()
    r = np.hypot(l, m)
    r.setflags(write=False)
    return r


def _pb_images(tracks, geom, nu_hz, weights, use_pb):
    """Per-group pair beams and their weight-averaged effective beam on the image grid (the
    pixel radii once per sub-image, the beams, which scale with the wavelength, per
    channel)."""
    if not use_pb:
        one = np.ones((geom.ny, geom.nx))
        return [one] * len(tracks.groups), one
    r = _radius(geom)
    pbs = [pair_beam(r, nu_hz, d1, d2, shape, fwhm_factor)
           for _, d1, d2, shape, fwhm_factor in tracks.groups]
    wg = np.array([weights[g[0]].sum() for g in tracks.groups])
    return pbs, sum(w * p for w, p in zip(wg, pbs)) / wg.sum()


def _psf(tracks, nu_hz, weights, geom):
    ones = np.ones(tracks.uvw_m.shape[0], dtype=np.complex128)
    return grid_dirty(ones, tracks.uvw_m, nu_hz, weights, geom, shape=(2 * geom.npy, 2 * geom.npx))


def _dirty(sky, tracks, nu_hz, weights, geom, pbs, rng):
    vis = _visibilities(sky, tracks, nu_hz, geom, pbs, rng)
    return grid_dirty(vis, tracks.uvw_m, nu_hz, weights, geom)


def _visibilities(sky, tracks, nu_hz, geom, pbs, rng):
    """Predicted visibilities (Jy) of one channel of one pointing: each primary-beam group
    sees the sky times its pair beam; antenna gains and thermal noise (if ``rng``) added."""
    if len(pbs) == 1:
        vis = predict(sky * pbs[0], tracks.uvw_m, nu_hz, geom)
    else:
        vis = np.empty(tracks.uvw_m.shape[0], dtype=np.complex128)
        for (idx, *_), pb in zip(tracks.groups, pbs):
            vis[idx] = predict(sky * pb, tracks.uvw_m[idx], nu_hz, geom)
    if tracks.gains is not None:
        vis = vis * tracks.gains
    if rng is not None:
        vis = add_thermal_noise(vis, tracks.sigma_jy, rng)
    return vis


def _check_options(opts):
    if opts["weighting"] not in WEIGHTINGS:
        raise InstrumentError(f"weighting={opts['weighting']!r} is not known; choose one of "
                              f"{WEIGHTINGS}")
    for key in ("clean_stop_sigma", "clean_loop_gain", "primary_beam_cutoff", "dish_flux_scale"):
        v = opts[key]
        if (isinstance(v, bool) or not (isinstance(v, (int, float)) and v >= 0)
                or (key == "clean_loop_gain" and not 0 < v <= 1)):
            raise InstrumentError(f"{key}={v!r}: valid is a number " +
                                  ("in (0, 1]" if key == "clean_loop_gain" else ">= 0"))
    n = opts["clean_max_components"]
    if isinstance(n, bool) or not (isinstance(n, (int, np.integer)) and n >= 0):
        raise InstrumentError(f"clean_max_components={n!r}: valid is an integer >= 0")
    if not isinstance(opts["correct_primary_beam"], bool):
        raise InstrumentError(f"correct_primary_beam={opts['correct_primary_beam']!r}: valid is "
                              "True or False")
    if opts["deconvolver"] not in DECONVOLVERS:
        raise InstrumentError(f"deconvolver={opts['deconvolver']!r} is not one of "
                              f"{', '.join(DECONVOLVERS)}")
    if opts["clean_scales"] is not None and opts["deconvolver"] != "multiscale":
        raise InstrumentError(f"clean_scales={opts['clean_scales']!r} is for "
                              f"deconvolver=\"multiscale\"; this one is "
                              f"{opts['deconvolver']!r}")
    if opts["clean_scales"] is not None:
        sc = u.Quantity(opts["clean_scales"])
        if sc.unit.physical_type != "angle" or sc.ndim != 1 or not np.all(sc.value >= 0):
            raise InstrumentError(f"clean_scales={opts['clean_scales']!r}: give component FWHMs as "
                                  "angles >= 0, e.g. [0, 2, 4] * u.arcsec")
    ms = opts["clean_mask_sigma"]
    if ms is not None and (isinstance(ms, bool) or not isinstance(ms, (int, float))
                           or not ms > 0):
        raise InstrumentError(f"clean_mask_sigma={ms!r} must be a number > 0 (the mask's level in "
                              "units of the image noise)")
    phase = _quantity("phase_rms", opts["phase_rms"], u.rad, positive=False)
    if phase.value < 0:
        raise InstrumentError(f"phase_rms={opts['phase_rms']!r} must be >= 0")
    if opts["phase_interval"] is not None:
        _quantity("phase_interval", opts["phase_interval"], u.s)


def _channel_width_hz(cube, freqs, opts):
    """Channel width: ``bandwidth`` if given, else the spectral WCS step in frequency."""
    if opts["bandwidth"] is not None:
        return _quantity("bandwidth", opts["bandwidth"], u.Hz).value
    if freqs.size >= 2:
        return float(np.abs(np.diff(freqs)).mean())
    step = cube.wcs.spectral.pixel_to_world_values(np.array([0.0, 1.0]))
    unit = u.Unit(cube.wcs.spectral.wcs.cunit[0])
    if unit.is_equivalent(u.Hz):
        return float(abs(np.diff(step)[0]) * unit.to(u.Hz))
    # radio velocity: nu = nu0 (1 - v / c)
    return float(abs(np.diff(step)[0]) * unit.to(u.m / u.s) / C_M_S * cube.wcs.wcs.restfrq)


def _scaled_to_rms(tracks, rms, weights):
    """Tracks whose noise is scaled so that the image noise is ``rms`` (Jy/beam)."""
    target = _quantity("rms", rms, u.Jy / u.beam).value
    scale = target / image_noise_jy(weights, tracks.sigma_jy)
    return Tracks(tracks.uvw_m, tracks.sigma_jy * scale, tracks.groups, tracks.names)


def new_observed_cube(template, data, meta, beam, unit="Jy/beam"):
    """A SpectralCube of ``data`` (Jy/beam, or K via the beam's Rayleigh-Jeans factor) on the
    template's WCS, with the beam and its own ``meta``. ``beam`` a list of one beam per
    channel gives a VaryingResolutionSpectralCube (each channel converted with its own)."""
    from spectral_cube import SpectralCube, VaryingResolutionSpectralCube
    meta = {k: v for k, v in meta.items() if k not in ("BUNIT", "beam")}
    q_unit = u.Unit("K" if unit == "K" else "Jy/beam")
    if isinstance(beam, list):
        from radio_beam import Beams
        beams = Beams(beams=beam)
        if unit == "K":
            freqs = cube_frequencies_hz(template)
            data = data * np.array([b.jtok(f * u.Hz).value for b, f in zip(beam, freqs)])[
                :, None, None]
            meta["NOISEUNI"] = "K"
            mid = len(beam) // 2
            meta["NOISERMS"] = meta["NOISERMS"] * float(beam[mid].jtok(freqs[mid] * u.Hz).value)
        return VaryingResolutionSpectralCube(data=u.Quantity(data, q_unit, copy=False),
                                             wcs=template.wcs.deepcopy(), meta=meta,
                                             beams=beams)
    if unit == "K":
        freqs = cube_frequencies_hz(template)
        data = data * beam.jtok(freqs * u.Hz).value[:, None, None]
        meta["NOISEUNI"] = "K"
        meta["NOISERMS"] = meta["NOISERMS"] * float(beam.jtok(np.median(freqs) * u.Hz).value)
    cube = SpectralCube(data=u.Quantity(data, q_unit, copy=False),
                        wcs=template.wcs.deepcopy(), meta=meta)
    return cube.with_beam(beam, raise_error_jybm=False)


def _seed(seed, noise):
    if not noise:
        return None
    if seed is None:
        return int(np.random.SeedSequence().generate_state(1)[0])
    if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InstrumentError(f"seed={seed!r} must be a non-negative integer or None")
    return int(seed)


def observe_interferometric(cube, instrument, **kwargs):
    """Observe ``cube`` with an Array, several (joint imaging) and a dish (feathered):
    see :func:`synth.instrument.array_observe.observe_interferometric`."""
    from .array_observe import observe_interferometric as _observe
    return _observe(cube, instrument, **kwargs)
