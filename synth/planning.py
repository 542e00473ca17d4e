"""Planning estimates per setup and tracer: resolution, largest scale, noise, time, pointings.

The noise and time come from the *same* radiometer models that ``observe`` uses
(:mod:`synth.instrument.noise` for a single dish, :mod:`synth.instrument.visibilities` for an
interferometer), so a planned time fed back into ``observe`` gives the planned S/N.

These are estimates for comparing setups and tracers. The observatory's own official tools
and policies decide a proposal (sensitivity, time, overheads, feasibility).
"""

from dataclasses import dataclass

import numpy as np
import astropy.units as u

from .errors import InstrumentError
from .sky import C_KMS

__all__ = ["Plan", "plan", "plan_rows", "plan_table", "hex_pointings", "duration_text",
           "DISCLAIMER"]

#: printed with every planning table
DISCLAIMER = ("Estimates only: the observatory's own official tools and policies decide a "
              "proposal (sensitivity, time, overheads and feasibility).")



@dataclass(frozen=True, eq=False)
class Plan:
    """Planning estimate for one setup and one line (see docs/planning.md)."""

    setup: str
    line: str
    kind: str                      # "dish" or "array"
    frequency: u.Quantity          # GHz
    resolution: object             # radio_beam.Beam (dish beam or synthesized-beam estimate)
    largest_scale: u.Quantity      # arcsec; NaN for a single dish (no interferometric limit)
    channel_width: u.Quantity      # km/s
    channel_width_hz: u.Quantity   # Hz
    integration_time: u.Quantity   # the time asked for (or None)
    rms: u.Quantity                # noise per channel for integration_time (K or Jy/beam) or None
    target_snr: float
    percentile: float
    target_brightness: u.Quantity  # the chosen percentile of the emission (or None)
    time_to_target: u.Quantity     # per pointing (or None)
    n_pointings: int
    total_time: u.Quantity         # n_pointings x time_to_target (or None)
    notes: tuple
    layout: object = None          # the MapLayout (pointings) observe makes, or None

    def as_row(self):
        """Plain values for tables, CSV and JSON: one unit per column, named in the key
        (``_ghz``, ``_arcsec``, ``_kms``, times ``_s`` in seconds), except ``rms`` and
        ``target``, whose unit (K for a dish, Jy/beam for an array) is in
        ``brightness_unit``."""
        def val(q, unit):
            return None if q is None else float(u.Quantity(q).to_value(unit))
        unit = "K" if self.kind == "dish" else "Jy/beam"
        return {"setup": self.setup, "line": self.line, "kind": self.kind,
                "frequency_ghz": val(self.frequency, u.GHz),
                "beam_major_arcsec": val(self.resolution.major, u.arcsec),
                "beam_minor_arcsec": val(self.resolution.minor, u.arcsec),
                "largest_scale_arcsec": val(self.largest_scale, u.arcsec),
                "channel_width_kms": val(self.channel_width, u.km / u.s),
                "rms": val(self.rms, u.Unit(unit)),
                "target": val(self.target_brightness, u.Unit(unit)),
                "brightness_unit": unit,
                "target_snr": self.target_snr, "percentile": self.percentile,
                "time_per_pointing_s": val(self.time_to_target, u.s),
                "n_pointings": self.n_pointings, "total_time_s": val(self.total_time, u.s)}


def duration_text(seconds):
    """A time for people: seconds below a minute, minutes below an hour, else hours (3
    significant digits); "-" for None or a non-finite value."""
    if seconds is None or not np.isfinite(seconds):
        return "-"
    seconds = float(seconds)
    if abs(seconds) < 60:
        return f"{seconds:.3g} s"
    if abs(seconds) < 3600:
        return f"{seconds / 60:.3g} min"
    return f"{seconds / 3600:.3g} h"


def _frequency(line, cube):
    if line is not None:
        freq = getattr(line, "frequency", line)
        try:
            return u.Quantity(freq).to(u.GHz, equivalencies=u.spectral()), str(line)
        except (u.UnitConversionError, TypeError) as exc:
            raise InstrumentError(f"line: {line!r} is neither a Line nor a frequency") from exc
    if cube is not None and cube.wcs.wcs.restfrq > 0:
        return (cube.wcs.wcs.restfrq * u.Hz).to(u.GHz), "cube line"
    raise InstrumentError("line: give a Line (e.g. synth.Line('HCN', '1-0')), a frequency, "
                          "or a cube with RESTFRQ")


def _channel(channel_width, cube, freq):
    from .analysis.matching import channel_width_ms
    if channel_width is None:
        if cube is None:
            raise InstrumentError("channel_width: needed when no cube is given "
                                  "(e.g. 0.2 * u.km / u.s)")
        dv_kms = channel_width_ms(cube) / 1e3
    else:
        q = u.Quantity(channel_width)
        if q.unit.physical_type == "frequency":
            dv_kms = abs(q.to_value(u.Hz)) / freq.to_value(u.Hz) * C_KMS
        elif q.unit.physical_type == "speed":
            dv_kms = abs(q.to_value(u.km / u.s))
        else:
            raise InstrumentError(f"channel_width: {channel_width!r}; give a velocity or a "
                                  "frequency")
    if not dv_kms > 0:
        raise InstrumentError(f"channel_width: {channel_width!r} must be > 0")
    # radio convention, as observe converts: dnu = nu0 dv / c
    return dv_kms * u.km / u.s, dv_kms / C_KMS * freq.to(u.Hz)


def _field(field_size, cube):
    from .analysis.matching import pixel_scale_arcsec
    if field_size is not None:
        q = np.atleast_1d(u.Quantity(field_size).to(u.arcsec))
        if q.size not in (1, 2):
            raise InstrumentError(f"field_size: {field_size!r}; give one or two angles")
        return (q[0], q[-1])
    if cube is None:
        return None
    pix = pixel_scale_arcsec(cube)
    return cube.shape[2] * pix * u.arcsec, cube.shape[1] * pix * u.arcsec


def hex_pointings(width, height, spacing):
    """Number of pointings of a hexagonal grid with ``spacing`` that covers a rectangle
    (:func:`synth.instrument.mosaic.pointing_offsets`, the grid observe uses)."""
    from .instrument.mosaic import pointing_offsets
    w, h, s = (u.Quantity(x).to_value(u.arcsec) for x in (width, height, spacing))
    return int(pointing_offsets(w, h, s, "hexagonal").shape[0])


def _target(cube, beam, kind, freq, percentile, floor, dv_kms):
    """The chosen percentile of the beam-convolved emission (K or Jy/beam)."""
    from .analysis.matching import (kernel_between, channel_velocities_ms, convolve_gaussian,
                                    cube_beam, cube_values, jy_per_beam_per_k,
                                    pixel_scale_arcsec, x_sign)
    if cube.unit.physical_type != "temperature":
        raise InstrumentError("cube unit: planning needs an ideal cube in K (brightness "
                              f"temperature), got {cube.unit}")
    v_ms = channel_velocities_ms(cube)
    if abs(abs(v_ms[1] - v_ms[0]) - dv_kms * 1e3) > 1e-6 * dv_kms * 1e3:
        from .instrument.spectral import resample_spectral   # the channels observe makes
        cube = resample_spectral(cube, dv_kms * u.km / u.s)
    data, _ = cube_values(cube, "cube")
    kernel = kernel_between(cube_beam(cube), beam)
    if kernel is not None:
        data = convolve_gaussian(data, pixel_scale_arcsec(cube), kernel, x_sign(cube))
    emitting = data[data >= floor * data.max()]
    value_k = float(np.percentile(emitting, percentile))
    if kind == "dish":
        return value_k * u.K
    return value_k * jy_per_beam_per_k(freq.to_value(u.Hz), beam)[0] * u.Jy / u.beam


def _check_numbers(target_snr, percentile, floor):
    if not (isinstance(target_snr, (int, float)) and target_snr > 0):
        raise InstrumentError(f"target_snr: {target_snr!r}; must be a number > 0")
    if not (isinstance(percentile, (int, float)) and 0 <= percentile <= 100):
        raise InstrumentError(f"percentile: {percentile!r}; valid: 0..100")
    if not 0 < floor < 1:
        raise InstrumentError(f"emission_floor: {floor!r}; valid: 0 < floor < 1")


def plan(setup, line=None, *, target_snr=5.0, cube=None, percentile=50.0, channel_width=None,
         integration_time=None, field_size=None, declination=None,
         hour_angles=(-2, 2) * u.hourangle, sample_interval=300 * u.s, emission_floor=0.01,
         n_pol=None, map_offset=None, pointing_pattern="hexagonal", pointing_spacing=None,
         guard_band=None, max_pointings=None, primary_beam=True):
    """Planning estimate for observing one line with one setup.

    Parameters
    ----------
    setup : Dish or Array
    line : Line or Quantity (frequency), optional
        Default: the cube's RESTFRQ.
    target_snr : float
        S/N wanted per channel on the ``percentile`` of the emission.
    cube : SpectralCube, optional
        Ideal sky cube in K; gives the target brightness (the ``percentile`` of the voxels above
        ``emission_floor`` x peak after convolution with the setup's beam), the channel width,
        the field size and the declination.
    channel_width : Quantity (velocity or frequency), optional
        Default the cube's.
    integration_time : Quantity, optional
        Time for which the noise per channel is reported.
    field_size : Quantity (one or two angles), optional
        Area to map (``map_size`` of observe); default the cube's extent.
    declination, hour_angles, sample_interval
        Array track (declination default: the cube's CRVAL2). A dish with an atmosphere
        model (``zenith_opacity``) uses the declination and its own ``hour_angles``.
    n_pol : {1, 2}, optional
        Polarisations; default the setup's own (``n_pol`` of the dish or array, 2).
    map_offset, pointing_pattern, pointing_spacing, guard_band, max_pointings, primary_beam
        As for :func:`synth.observe`: the pointings counted are the pointings (or dish map
        positions) that ``observe`` makes with the same options
        (:func:`synth.instrument.mosaic.map_layout`).

    Returns
    -------
    Plan

    Examples
    --------
    >>> p = plan(dish, synth.Line("HCN", "1-0"), target_snr=5, cube=ideal)   # doctest: +SKIP
    >>> print(plan_table([p]))                                             # doctest: +SKIP
    """
    _check_numbers(target_snr, percentile, emission_floor)
    freq, label = _frequency(line, cube)
    dv, dnu = _channel(channel_width, cube, freq)
    kind = _kind(setup)
    mkw = dict(map_size=field_size, map_offset=map_offset, pointing_pattern=pointing_pattern,
               pointing_spacing=pointing_spacing, guard_band=guard_band)
    if max_pointings is not None:
        mkw["max_pointings"] = max_pointings
    if kind == "dish":
        dec = _declination(declination, cube) if setup.has_atmosphere else None
        beam, largest, rms_of, time_of = _dish_model(setup, freq, n_pol, dec)
        layout = _layout(setup, cube, freq, mkw, None)
    else:
        dec = _declination(declination, cube)
        beam, largest, rms_of, time_of = _array_model(setup, freq, dec, hour_angles,
                                                  sample_interval, n_pol)
        layout = _layout(setup, cube, freq, mkw, dict(hour_angles=hour_angles,
                                                      sample_interval=sample_interval,
                                                      primary_beam=primary_beam),
                         dec.to_value(u.rad))
    rms = None if integration_time is None else rms_of(dnu, integration_time)
    target = None if cube is None else _target(cube, beam, kind, freq, percentile,
                                               emission_floor, dv.to_value(u.km / u.s))
    t_need = None if target is None else time_of(dnu, target / target_snr).to(u.s)
    n_point = 1 if layout is None else layout.n_pointings
    notes = [DISCLAIMER] + ([layout.describe()] if layout is not None else [])
    return Plan(setup=getattr(setup, "name", None) or kind, line=label, kind=kind,
                frequency=freq, resolution=beam, largest_scale=largest, channel_width=dv,
                channel_width_hz=dnu, integration_time=integration_time, rms=rms,
                target_snr=float(target_snr), percentile=float(percentile),
                target_brightness=target, time_to_target=t_need, n_pointings=n_point,
                total_time=None if t_need is None else n_point * t_need, notes=tuple(notes),
                layout=layout)


def _kind(setup):
    name = type(setup).__name__
    if name == "Dish":
        return "dish"
    if name == "Array":
        return "array"
    raise InstrumentError(f"setup: {name} cannot be planned; give a Dish or an "
                          "Array (plan each instrument of a combination separately)")


def _dish_model(dish, freq, n_pol=None, dec=None):
    """Single dish: beam, no largest-scale limit, radiometer rms(t) and t(rms) (K); with the
    dish's atmosphere model the effective T_sys of its track toward ``dec``, as observe
    uses it."""
    from .instrument.noise import radiometer_rms, time_for_rms
    if dish.tsys is None and not dish.has_atmosphere:
        raise InstrumentError("setup tsys: the dish has no tsys; give Dish(tsys=...)")
    tsys = dish.effective_tsys(dec) if dish.has_atmosphere else dish.tsys
    beam = dish.beam_at(freq)
    return (beam, np.nan * u.arcsec,
            lambda dnu, t: radiometer_rms(tsys, dish.main_beam_efficiency, dnu, t,
                                          n_pol or dish.n_pol),
            lambda dnu, rms: time_for_rms(tsys, dish.main_beam_efficiency, dnu, rms,
                                          n_pol or dish.n_pol))


def _array_model(arr, freq, dec, hour_angles, sample_interval, n_pol):
    """Array: synthesized-beam estimate, largest scale, point-source rms(t), t(rms)."""
    from .instrument.uv import largest_scale, synthesized_beam_estimate
    from .instrument.visibilities import interferometer_rms, interferometer_time
    beam = synthesized_beam_estimate(arr, freq, dec, hour_angles, sample_interval)
    largest = largest_scale(arr, freq, dec, hour_angles, sample_interval)
    tsys = arr.effective_tsys(dec, hour_angles, sample_interval)   # the atmosphere model
    return (beam, largest.to(u.arcsec),
            lambda dnu, t: interferometer_rms(arr, dnu, t, n_pol, tsys).value * u.Jy / u.beam,
            lambda dnu, rms: interferometer_time(arr, dnu, rms.to_value(u.Jy / u.beam) * u.Jy,
                                                 n_pol, tsys))


def _layout(setup, cube, freq, mkw, array_opts, dec_rad=None):
    """The MapLayout observe would make (None without a cube or a field size)."""
    from .instrument.mapping import array_layout, dish_layout, map_options
    field = _field(mkw.pop("map_size"), None)
    if cube is None and field is None:
        return None
    size = None if field is None else tuple(float(f.to_value(u.arcsec)) for f in field)
    mopts = map_options(map_size=None if size is None else size * u.arcsec, **mkw)
    nu = freq.to_value(u.Hz)
    if array_opts is None:
        return dish_layout(cube, setup, mopts, nu, model_size=size)
    return array_layout(cube, [setup], array_opts, mopts, dec_rad, np.array([nu]),
                        model_size=size)[0]


def _declination(declination, cube):
    if declination is not None:
        return u.Quantity(declination).to(u.deg)
    if cube is None:
        raise InstrumentError("declination: needed for an interferometer (or a dish with an "
                              "atmosphere model) when no cube is given")
    return cube.wcs.celestial.wcs.crval[1] * u.deg


def plan_rows(plans):
    """One dict per Plan (``Plan.as_row``)."""
    return [p.as_row() for p in plans]


def plan_table(plans):
    """A plain-text table of plans for the terminal, with the disclaimer under it."""
    cols = [("setup", "setup", "{}"), ("line", "line", "{}"), ("GHz", "frequency_ghz", "{:.3f}"),
            ("beam\"", "beam_major_arcsec", "{:.3g}"), ("largest scale\"", "largest_scale_arcsec", "{:.3g}"),
            ("dv km/s", "channel_width_kms", "{:.3g}"), ("target", "target", "{:.3g}"),
            ("S/N", "target_snr", "{:g}"), ("time/pointing", "time_per_pointing_s", duration_text),
            ("N point", "n_pointings", "{}"), ("total time", "total_time_s", duration_text)]
    lines = []
    for row in plan_rows(plans):
        unit = row["brightness_unit"]
        cells = []
        for _, key, fmt in cols:
            v = row.get(key)
            if callable(fmt):
                cells.append(fmt(v))
                continue
            cells.append("-" if v is None or (isinstance(v, float) and np.isnan(v))
                         else fmt.format(v) + (f" {unit}" if key == "target" else ""))
        lines.append(cells)
    head = [c[0] for c in cols]
    widths = [max(len(h), *(len(r[i]) for r in lines)) if lines else len(h)
              for i, h in enumerate(head)]
    fmt_row = "  ".join("{:<%d}" % w for w in widths)
    out = [fmt_row.format(*head), fmt_row.format(*("-" * w for w in widths))]
    out += [fmt_row.format(*r) for r in lines]
    return "\n".join(out + ["", DISCLAIMER])
