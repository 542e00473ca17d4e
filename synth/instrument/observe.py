"""``observe``: the one entry point from a sky cube to an observed cube.

It validates the cube and the options, applies the spectrometer's response (shared by every
instrument: :mod:`synth.instrument.spectral`), then hands the cube to the instrument's own path:
a :class:`~synth.instrument.single_dish.SingleDish` to
:func:`~synth.instrument.single_dish.observe_single_dish`, an interferometer (or a list of
instruments to combine) to ``synth.instrument.interferometer.observe_interferometric``.
Finally the spectral axis is given as radio velocity (km/s) or frequency (GHz).
"""

from ..errors import InstrumentError
from .cube_utils import check_cube, new_cube, cube_values
from .single_dish import SingleDish, observe_single_dish
from .spectral import SPECTRAL_AXES, resample_spectral, to_spectral_axis

__all__ = ["observe"]


def _is_interferometric(instrument):
    if isinstance(instrument, (list, tuple)):
        return len(instrument) > 0
    return type(instrument).__name__ == "Interferometer"


def observe(cube, instrument, *, channel_width=None, channel_start=None, hanning=False,
            spectral_axis="velocity", integration_time=None, rms=None, noise=True,
            seed=None, unit=None, **kwargs):
    """Observe a sky cube with a single dish, an interferometer or a combination.

    Parameters
    ----------
    cube : SpectralCube
        Any cube with a celestial WCS (square, north-up pixels), a radio-velocity or frequency
        axis with uniform channels, unit K or Jy/beam.
    instrument : SingleDish, Interferometer, or list/tuple of instruments
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
    >>> dish = synth.SingleDish(diameter=30 * u.m, efficiency=0.7, tsys=120 * u.K)
    >>> obs = synth.observe(cube, dish, channel_width=0.5 * u.km / u.s,
    ...                     integration_time=2 * u.hr, seed=1)  # doctest: +SKIP
    """
    check_cube(cube)
    if spectral_axis not in SPECTRAL_AXES:
        raise InstrumentError(f"spectral_axis: {spectral_axis!r} is not one of "
                              f"{', '.join(SPECTRAL_AXES)}")
    if not isinstance(noise, bool):
        raise InstrumentError(f"noise: must be True or False, got {noise!r}")
    spectral = resample_spectral(cube, channel_width, channel_start, hanning=hanning)
    if isinstance(instrument, SingleDish):
        if kwargs:
            raise InstrumentError(f"observe: unknown option(s) for a single dish: "
                                  f"{', '.join(sorted(kwargs))}")
        result = observe_single_dish(spectral, instrument, integration_time=integration_time,
                                     rms=rms, noise=noise, seed=seed, unit=unit,
                                     hanning=hanning)
    elif _is_interferometric(instrument):
        result = _observe_interferometric(spectral, instrument, integration_time, rms, noise,
                                          seed, unit, kwargs)
    else:
        raise InstrumentError(f"instrument: {type(instrument).__name__} is not an "
                              "instrument; use SingleDish(...), Interferometer(...) or a list "
                              "of them")
    return _final_axis(result, spectral_axis, spectral.meta)


def _observe_interferometric(spectral, instrument, integration_time, rms, noise, seed, unit,
                             kwargs):
    from .interferometer import observe_interferometric
    extra = dict(kwargs)
    if rms is not None:
        extra["rms"] = rms
    if unit is not None:
        extra["unit"] = unit
    return observe_interferometric(spectral, instrument, integration_time=integration_time,
                                   noise=noise, seed=seed, **extra)


def _final_axis(result, spectral_axis, spectral_meta):
    """The result on the requested axis, keeping the spectral step's records in its meta."""
    records = {k: spectral_meta[k] for k in ("CHANWID", "HANNING") if k in spectral_meta}
    missing = {k: v for k, v in records.items() if k not in result.meta}
    if missing:
        result = new_cube(result, cube_values(result), result.unit, meta_update=missing)
    return to_spectral_axis(result, spectral_axis)
