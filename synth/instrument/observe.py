"""``observe``: the one entry point from a sky cube to an observed cube.

It validates the cube and the options, applies the spectrometer's response (shared by every
instrument: :mod:`synth.instrument.spectral`), then hands the cube to the instrument's own path:
a :class:`~synth.instrument.single_dish.Dish` to
:func:`~synth.instrument.single_dish.observe_single_dish`, an interferometer (or a list of
instruments to combine) to ``synth.instrument.interferometer.observe_interferometric``.
Finally the spectral axis is given as radio velocity (km/s) or frequency (GHz).
"""

import numpy as np
import astropy.units as u

from ..errors import InstrumentError
from .cube_utils import check_cube, new_cube, cube_values, reference_frequency
from .grid import SkyGrid, model_grid, observation_grid, place_model
from .mapping import ObservedMap, dish_layout, map_options
from .mosaic import MAX_POINTINGS
from .interferometer import RENAMED_OPTIONS
from .single_dish import Dish, observe_single_dish_seeds
from .spectral import SPECTRAL_AXES, resample_spectral, to_spectral_axis

__all__ = ["observe", "observe_seeds"]


def _is_interferometric(instrument):
    if isinstance(instrument, (list, tuple)):
        return len(instrument) > 0
    return type(instrument).__name__ == "Array"


def observe(cube, instrument, *, channel_width=None, channel_start=None, hanning=False,
            spectral_axis="velocity", integration_time=None, rms=None, noise=True,
            seed=None, unit=None, map_size=None, map_offset=None, pixel=None,
            beyond_box="empty", pointing_pattern="hexagonal", pointing_spacing=None,
            guard_band=None, max_pointings=MAX_POINTINGS, with_maps=False, **kwargs):
    """Observe a sky cube with a single dish, an interferometer or a combination.

    Parameters
    ----------
    cube : SpectralCube
        Any cube with a celestial WCS (square, north-up pixels), a radio-velocity or frequency
        axis with uniform channels, unit K or Jy/beam.
    instrument : Dish, Array, or list/tuple of instruments
    channel_width, channel_start : Quantity, optional
        Output channel grid (:func:`~synth.instrument.spectral.resample_spectral`); default the
        native channels. The width must be >= the native one.
    hanning : bool
        Hanning-smooth the output channels (noise is correlated between channels to match).
    spectral_axis : {"velocity", "frequency"}
        Axis of the result: radio velocity in km/s or frequency in GHz.
    integration_time : Quantity (time), optional
        On-source time for radiometer noise (needs the instrument's tsys).
    rms : Quantity (K or Jy/beam), optional
        Noise rms per channel, instead of the radiometer equation.
    noise : bool
        False gives the noiseless observation.
    seed : int, optional
        Seed of the noise; ``None`` draws one and records it (NSEED).
    unit : {"K", "Jy/beam"}, optional
        Output unit; default K for a single dish.
    map_size : Quantity (one or two angles), optional
        Width and height of the area to map; default the whole cube. An array maps an area
        larger than its primary beam as a mosaic; a dish maps it on the fly.
    map_offset : Quantity (two angles), optional
        Centre of the area as (east, north) offsets from the cube's reference point.
    pixel : Quantity (angle), optional
        Output pixel; default the cube's own when it samples the beam with >= 4 pixels per
        FWHM, else FWHM / 4 (the model is resampled, conserving flux:
        :mod:`synth.instrument.grid`).
    beyond_box : {"empty", "repeat"}
        The sky outside the cube: blank (an isolated cloud) or the cube repeated (a periodic
        simulation box).
    pointing_pattern : {"hexagonal", "rectangular"}
        Array mosaic pattern; the default spacing samples the primary beam
        (:mod:`synth.instrument.mosaic`).
    pointing_spacing : Quantity (angle), optional
        Mosaic pointing spacing (array) or map position spacing (dish).
    guard_band : Quantity (angle), optional
        Dish: extra width scanned around the area (default 1.5 beam FWHM).
    max_pointings : int
        Refuse maps that need more pointings (or dish positions).
    with_maps : bool
        Return a :class:`~synth.instrument.mapping.ObservedMap` (the corrected and
        uncorrected products, sensitivity and response maps, the model on the output grid,
        the layout) instead of the cube.
    **kwargs
        Passed on to the interferometric path (a single dish takes none).

    Returns
    -------
    SpectralCube
        With the beam attached and meta / header cards INSTRUME, NOISERMS, NOISEUNI, NSEED,
        CHANWID (km/s), HANNING.

    Examples
    --------
    >>> import astropy.units as u, synth
    >>> dish = synth.Dish(diameter=30 * u.m, efficiency=0.7, tsys=120 * u.K)
    >>> obs = synth.observe(cube, dish, channel_width=0.5 * u.km / u.s,
    ...                     integration_time=2 * u.hr, seed=1)  # doctest: +SKIP
    """
    maps = _observe_maps(cube, instrument, None, seed, channel_width, channel_start, hanning,
                         spectral_axis, integration_time, rms, noise, unit,
                         dict(map_size=map_size, map_offset=map_offset, pixel=pixel,
                              beyond_box=beyond_box, pointing_pattern=pointing_pattern,
                              pointing_spacing=pointing_spacing, guard_band=guard_band,
                              max_pointings=max_pointings), kwargs)
    return maps[0] if with_maps else maps[0].cube


def observe_seeds(cube, instrument, seeds, *, channel_width=None, channel_start=None,
                  hanning=False, spectral_axis="velocity", integration_time=None, rms=None,
                  unit=None, map_size=None, map_offset=None, pixel=None, beyond_box="empty",
                  pointing_pattern="hexagonal", pointing_spacing=None, guard_band=None,
                  max_pointings=MAX_POINTINGS, **kwargs):
    """:func:`observe` with the noise on, once per seed in ``seeds``: a list of
    :class:`~synth.instrument.mapping.ObservedMap`, each equal to ``observe(...,
    seed=s, with_maps=True)``. What the noise does not change is computed once: the spectral
    step, the layout, the model on the map; a dish's beam convolution; an array's uv tracks,
    weights, primary beams, PSFs and noiseless dirty images
    (:func:`~synth.instrument.array_observe.observe_interferometric_seeds`)."""
    if not isinstance(seeds, (list, tuple, np.ndarray)) or len(seeds) == 0:
        raise InstrumentError(f"seeds: {seeds!r}; give a non-empty list of integers >= 0")
    return _observe_maps(cube, instrument, list(seeds), None, channel_width, channel_start,
                         hanning, spectral_axis, integration_time, rms, True, unit,
                         dict(map_size=map_size, map_offset=map_offset, pixel=pixel,
                              beyond_box=beyond_box, pointing_pattern=pointing_pattern,
                              pointing_spacing=pointing_spacing, guard_band=guard_band,
                              max_pointings=max_pointings), kwargs)


def _observe_maps(cube, instrument, seeds, seed, channel_width, channel_start, hanning,
                  spectral_axis, integration_time, rms, noise, unit, mkw, kwargs):
    """ObservedMaps on the requested spectral axis: one (``seed``) if ``seeds`` is None,
    else one per seed in ``seeds``."""
    for old in sorted(set(kwargs) & set(RENAMED_OPTIONS)):
        raise InstrumentError(f"observe: {old}= was renamed to {RENAMED_OPTIONS[old]}")
    check_cube(cube)
    if spectral_axis not in SPECTRAL_AXES:
        raise InstrumentError(f"spectral_axis: {spectral_axis!r} is not one of "
                              f"{', '.join(SPECTRAL_AXES)}")
    if not isinstance(noise, bool):
        raise InstrumentError(f"noise: must be True or False, got {noise!r}")
    mopts = map_options(**mkw)
    if isinstance(instrument, Dish):
        if kwargs:
            raise InstrumentError(f"observe: unknown option(s) for a single dish: "
                                  f"{', '.join(sorted(kwargs))}")
        layout = dish_layout(cube, instrument, mopts, reference_frequency(cube).to_value(u.Hz))
        spectral = resample_spectral(cube, channel_width, channel_start, hanning=hanning)
        results = _observe_dish_maps(spectral, instrument, layout, mopts, integration_time,
                                     rms, noise, [seed] if seeds is None else seeds, unit,
                                     hanning)
    elif _is_interferometric(instrument):
        spectral = resample_spectral(cube, channel_width, channel_start, hanning=hanning)
        results = _observe_interferometric(spectral, instrument, integration_time, rms, noise,
                                           seed, unit, dict(kwargs, **mkw, hanning=hanning,
                                                            with_maps=True), seeds)
    else:
        raise InstrumentError(f"instrument: {type(instrument).__name__} is not an "
                              "instrument; use Dish(...), Array(...) or a list "
                              "of them")
    return [_final_map(r, spectral_axis, spectral.meta) for r in results]


def observe_spectral(cube, options):
    """The cube after observe's spectral step (channel_width, hanning from ``options``)."""
    return resample_spectral(cube, options.get("channel_width"), options.get("channel_start"),
                             hanning=options.get("hanning", False))


def _observe_dish_maps(spectral, dish, layout, mopts, integration_time, rms, noise, seeds,
                       unit, hanning):
    """On-the-fly dish maps, one per seed: the model on the map's grid (area + guard band),
    then the beam, noise and unit of :func:`observe_single_dish`. The beam is applied on the
    map grid grown by two beams on each side and the result cut back to the map, so sky
    beyond the map (a larger model, or a repeated box) spills into its edges as on the sky.
    The model and the beam convolution are shared by the seeds."""
    model = model_grid(spectral)
    pix = mopts.pixel if mopts.pixel is not None else min(model.pixel_arcsec, layout.pixel)
    grid, zoom, (ox, oy) = observation_grid(model, pix, layout.center, layout.grid_size)
    fwhm = dish.beam_at(reference_frequency(spectral)).major.to_value(u.arcsec)
    m = int(np.ceil(2.0 * fwhm / grid.pixel_arcsec))
    canvas = SkyGrid(grid.nx + 2 * m, grid.ny + 2 * m, grid.pixel_arcsec, grid.x_ref + m,
                     grid.y_ref + m)
    big = place_model(spectral, canvas, zoom, (ox + m, oy + m), mopts.beyond_box)
    cut = (slice(None), slice(m, m + grid.ny), slice(m, m + grid.nx))
    sky = big[cut]
    out = []
    for obs in observe_single_dish_seeds(big, dish, seeds, integration_time=integration_time,
                                         rms=rms, noise=noise, unit=unit, hanning=hanning):
        obs = obs[cut]
        obs = new_cube(obs, cube_values(obs), obs.unit,
                       meta_update={"NPOINT": layout.n_pointings, "MOSAIC": "on-the-fly",
                                    "GUARD": float(layout.guard), "PBCORR": False})
        sens = np.full(obs.shape[1:], float(obs.meta["NOISERMS"])) * obs.unit
        out.append(ObservedMap(cube=obs, corrected=obs, uncorrected=obs, sensitivity=sens,
                               response=np.ones(obs.shape[1:]), sky=sky, layout=layout))
    return out


def _final_map(result, spectral_axis, spectral_meta):
    """The ObservedMap with every cube on the requested spectral axis."""
    cubes = {}
    for key in ("cube", "corrected", "uncorrected", "sky"):
        cube = getattr(result, key)
        cubes[key] = cubes.get(id(cube)) or (
            _final_axis(cube, spectral_axis, spectral_meta) if key != "sky"
            else to_spectral_axis(cube, spectral_axis))
        cubes[id(cube)] = cubes[key]
    return ObservedMap(cube=cubes["cube"], corrected=cubes["corrected"],
                       uncorrected=cubes["uncorrected"], sensitivity=result.sensitivity,
                       response=result.response, sky=cubes["sky"], layout=result.layout)


def _observe_interferometric(spectral, instrument, integration_time, rms, noise, seed, unit,
                             kwargs, seeds=None):
    from .array_observe import observe_interferometric, observe_interferometric_seeds
    extra = dict(kwargs)
    if rms is not None:
        extra["rms"] = rms
    if unit is not None:
        extra["unit"] = unit
    if seeds is not None:
        return observe_interferometric_seeds(spectral, instrument, seeds,
                                             integration_time=integration_time, noise=noise,
                                             **extra)
    return [observe_interferometric(spectral, instrument, integration_time=integration_time,
                                    noise=noise, seed=seed, **extra)]


def _final_axis(result, spectral_axis, spectral_meta):
    """The result on the requested axis, keeping the spectral step's records in its meta."""
    records = {k: spectral_meta[k] for k in ("CHANWID", "HANNING") if k in spectral_meta}
    missing = {k: v for k, v in records.items() if k not in result.meta}
    if missing:
        data = np.array(result.unmasked_data[:].value, dtype=np.float64)   # NaN = no data
        result = new_cube(result, data, result.unit, meta_update=missing)
    return to_spectral_axis(result, spectral_axis)
