"""What survives an observation: flux, per-scale recovery, fidelity, moments (``assess``).

All metrics compare the observed cube with the *reference*: the ideal cube resampled onto
the observed channels, convolved with the observed restoring beam and converted to the
observed unit. docs/analysis.md defines each metric and names its source.
"""

from dataclasses import dataclass
import csv
import io
import math

import numpy as np
import astropy.units as u
from astropy.table import Table

from ..errors import InstrumentError
from ..sky import ARCSEC_PER_RAD
from .matching import (kernel_between, beam_text, channel_frequencies_hz, channel_velocities_ms,
                       channel_width_ms, convolve_gaussian, cube_beam, cube_values,
                       jy_per_beam_per_k, pixel_scale_arcsec, resample_channels, x_sign)
from .moments import Moments, _noise_value, moments_from_arrays, noise_rms, signal_mask
from .recovery import excess_note, fidelity_summary, half_recovery_scale, recovery_table

__all__ = ["Survival", "assess", "assess_map", "recorded_noise", "reference_cube", "survival_matrix", "matrix_csv",
           "matrix_json_rows"]


@dataclass(frozen=True, eq=False)
class Survival:
    """Survival metrics of one observed cube against its ideal cube (see docs/analysis.md)."""

    flux_fraction: float            # total observed flux / ideal flux
    flux_fraction_pb: float         # the same inside the primary-beam half-power circle (or NaN)
    recovery: Table                 # per-scale recovered fraction (moment 0 and per channel)
    half_recovery_scale: u.Quantity  # largest scale still recovered at >= 0.5 (arcsec)
    half_recovery_bounded: bool     # False: the fraction never dropped (a lower limit)
    fidelity: float                 # median fidelity over the emitting voxels
    fidelity_percentiles: dict      # {5, 16, 50, 84, 95: value}
    fidelity_hist: tuple            # (edges of log10 F, counts)
    fidelity_mom0: float            # median fidelity of the moment-0 map
    peak_snr: float                 # peak observed / noise rms
    fraction_above_3sigma: float    # emitting voxels detected at >= 3 sigma
    moment_correlation: dict        # Pearson r of observed and ideal moment maps 0/1/2
    centroid_hist: tuple            # (edges km/s, counts ideal, counts observed)
    ideal_moments: Moments          # of the reference (ideal convolved with the beam)
    observed_moments: Moments
    noise: u.Quantity               # rms per channel used
    unit: str                       # "K" or "Jy/beam"
    beam: object                    # the observed restoring beam (or None)
    notes: tuple                    # what assess did to match the cubes

    def as_row(self):
        """Plain scalars for a survival matrix row."""
        return {"flux_fraction": self.flux_fraction, "flux_fraction_pb": self.flux_fraction_pb,
                "half_recovery_scale_arcsec": float(self.half_recovery_scale.value),
                "half_recovery_bounded": self.half_recovery_bounded,
                "fidelity_median": self.fidelity, "fidelity_mom0": self.fidelity_mom0,
                "peak_snr": self.peak_snr, "fraction_above_3sigma": self.fraction_above_3sigma,
                **{f"{k}_correlation": v for k, v in self.moment_correlation.items()}}


def _to_kelvin(data, kind, beam, nu_hz, name):
    if kind == "K":
        return data
    if beam is None:
        raise InstrumentError(f"{name}: unit Jy/beam but no beam; attach one with "
                              "cube.with_beam(Beam(...))")
    return data / jy_per_beam_per_k(nu_hz, beam)[:, None, None]


def _match_channels(ideal, observed, data_k, notes):
    v_in, v_out = channel_velocities_ms(ideal), channel_velocities_ms(observed)
    dv = channel_width_ms(observed)
    if v_in.shape == v_out.shape and np.allclose(v_in, v_out, rtol=0, atol=1e-3 * dv):
        return data_k
    notes.append(f"resampled the ideal cube from {v_in.size} to {v_out.size} channels "
                 f"({channel_width_ms(ideal):.6g} -> {dv:.6g} m/s, overlap average)")
    return resample_channels(data_k, v_in, v_out)


def _check_sky_grid(ideal, observed):
    wi, wo = ideal.wcs.celestial, observed.wcs.celestial
    same = (ideal.shape[1:] == observed.shape[1:]
            and np.allclose(wi.wcs.crval, wo.wcs.crval, rtol=0, atol=1e-9)
            and np.allclose(wi.wcs.crpix, wo.wcs.crpix, rtol=0, atol=1e-6)
            and np.allclose(wi.pixel_scale_matrix, wo.pixel_scale_matrix, rtol=1e-6, atol=0))
    if not same:
        raise InstrumentError(
            f"sky grid: ideal {ideal.shape[1:]} and observed {observed.shape[1:]} differ in "
            "shape, centre or pixels; assess needs the same sky grid (use synth.compare, "
            "which regrids)")


def reference_cube(ideal, observed):
    """The ideal cube as the observation should see it, as a (v, y, x) float array.

    Resampled onto the observed channels (overlap average), convolved with the kernel that
    takes the ideal resolution (its beam, or pixel resolution without one) to the observed
    beam, and converted to the observed unit channel by channel.

    Returns (reference, ideal_k_on_observed_channels, notes).
    """
    notes = []
    try:
        _check_sky_grid(ideal, observed)
    except InstrumentError:
        from ..instrument.grid import onto_grid
        ideal = onto_grid(ideal, observed)
        _check_sky_grid(ideal, observed)
        notes.append(f"put the ideal cube on the observed grid ({observed.shape[2]} x "
                     f"{observed.shape[1]} pixels of {pixel_scale_arcsec(observed):.4g} arcsec; "
                     "Fourier zoom, blank sky beyond the model)")
    data_i, kind_i = cube_values(ideal, "ideal cube")
    _, kind_o = cube_values(observed, "observed cube")
    beam_i, beam_o = cube_beam(ideal), cube_beam(observed)
    data_k = _to_kelvin(data_i, kind_i, beam_i, channel_frequencies_hz(ideal), "ideal cube")
    data_k = _match_channels(ideal, observed, data_k, notes)
    ref_k = data_k
    if beam_o is not None:
        kernel = kernel_between(beam_i, beam_o)
        if kernel is not None:
            ref_k = convolve_gaussian(data_k, pixel_scale_arcsec(observed), kernel,
                                      x_sign(observed))
            notes.append(f"convolved the ideal cube with {beam_text(kernel)} to reach "
                         f"{beam_text(beam_o)}")
    if kind_o == "Jy/beam":
        if beam_o is None:
            raise InstrumentError("observed cube: unit Jy/beam but no beam; attach one with "
                                  "cube.with_beam(Beam(...))")
        ref = ref_k * jy_per_beam_per_k(channel_frequencies_hz(observed), beam_o)[:, None, None]
        notes.append("converted the reference from K to Jy/beam per channel "
                     "(Rayleigh-Jeans, the observed beam)")
    else:
        ref = ref_k
    return ref, data_k, notes


def _flux_jy(data, kind, beam, nu_hz, pix_sr):
    """Flux density per pixel in Jy.

    K: S = 2 k nu^2 Omega_pix T / c^2 (Rayleigh-Jeans, astropy brightness_temperature);
    Jy/beam: S = I Omega_pix / Omega_beam.
    """
    if kind == "Jy/beam":
        return data * (pix_sr / beam.sr.value)
    nu = np.atleast_1d(np.asarray(nu_hz, dtype=np.float64))
    fac = (np.ones(nu.size) * u.K).to_value(u.Jy, u.brightness_temperature(nu * u.Hz,
                                                                            pix_sr * u.sr))
    return data * fac[:, None, None]


def _fwhm_arcsec(primary_beam):
    if primary_beam is None:
        raise InstrumentError("primary_beam: needed for attenuate=True (e.g. 25 * u.arcsec)")
    fwhm = getattr(primary_beam, "major", primary_beam)
    try:
        return float(u.Quantity(fwhm).to_value(u.arcsec))
    except (u.UnitConversionError, TypeError) as exc:
        raise InstrumentError(f"primary_beam: {primary_beam!r} is not an angle or a Beam"
                              ) from exc


def _radius_arcsec(shape, pix_arcsec):
    ny, nx = shape
    y, x = np.mgrid[:ny, :nx]
    return np.hypot(x - (nx - 1) / 2.0, y - (ny - 1) / 2.0) * pix_arcsec


def _pb_mask(shape, pix_arcsec, primary_beam):
    if primary_beam is None:
        return None
    return _radius_arcsec(shape, pix_arcsec) <= 0.5 * _fwhm_arcsec(primary_beam)


def _pb_response(shape, pix_arcsec, primary_beam):
    """Gaussian primary-beam power response exp(-4 ln 2 r^2 / FWHM^2) (common practice)."""
    r = _radius_arcsec(shape, pix_arcsec)
    return np.exp(-4 * np.log(2) * r**2 / _fwhm_arcsec(primary_beam) ** 2)


def _pearson(a, b):
    ok = np.isfinite(a) & np.isfinite(b)
    if ok.sum() < 3 or np.std(a[ok]) == 0 or np.std(b[ok]) == 0:
        return float("nan")
    return float(np.corrcoef(a[ok], b[ok])[0, 1])


def _moments(data, mask, v_kms, dv_kms, unit, sigma):
    m0, m1, m2 = moments_from_arrays(data, v_kms, dv_kms, mask)
    kms = u.km / u.s
    return Moments(mom0=m0 * unit * kms, mom1=m1 * kms, mom2=m2 * kms**2, mask=mask,
                   noise=sigma * unit)


def assess(ideal, observed, *, noise=None, primary_beam=None, emission_floor=0.01,
           nbins=None, attenuate=False, response=None, reference=None):
    """Measure what of the ideal cube survives in the observed cube.

    Parameters
    ----------
    ideal : SpectralCube
        The sky cube (K, beam optional, or Jy/beam with a beam), on the observed sky grid;
        its channels may differ (it is resampled onto the observed channels).
    observed : SpectralCube
        K or Jy/beam; a restoring beam is needed for Jy/beam.
    noise : Quantity, optional
        Observed rms per channel in the observed unit; estimated robustly if None.
    primary_beam : Quantity or Beam, optional
        Primary-beam FWHM for the flux inside the half-power circle around the map centre.
    emission_floor : float
        Voxels where the reference exceeds this fraction of its peak are "emitting".
    attenuate : bool
        Multiply the reference by a Gaussian primary-beam response of FWHM ``primary_beam``
        centred on the map, to compare with an image that is not primary-beam corrected.
    response : ndarray (y, x), optional
        The relative response of a (mosaic) map; ``flux_fraction_pb`` is then the flux where
        it is >= 1/2.
    reference : tuple, optional
        ``reference_cube(ideal, observed)`` computed before for a cube with the same sky
        grid, channels, unit and beam (noise realisations share it).

    Blank (NaN) voxels of the observed cube, e.g. where a primary-beam-corrected map is cut,
    are left out of every metric, from both cubes: the comparison covers the mapped area only.

    Returns
    -------
    Survival

    Examples
    --------
    >>> m = assess(ideal_cube, observed_cube)     # doctest: +SKIP
    >>> m.flux_fraction, m.half_recovery_scale    # doctest: +SKIP
    """
    if not 0 < emission_floor < 1:
        raise InstrumentError(f"emission_floor: {emission_floor}; valid: 0 < floor < 1")
    ref, ideal_k, notes = reference if reference is not None else reference_cube(ideal, observed)
    notes = list(notes)
    if attenuate:
        ref = ref * _pb_response(ref.shape[1:], pixel_scale_arcsec(observed), primary_beam)
        notes.append(f"attenuated the reference by a Gaussian primary beam of FWHM "
                     f"{_fwhm_arcsec(primary_beam):.3g} arcsec")
    obs, kind = cube_values(observed, "observed cube")
    blank = ~np.isfinite(np.asarray(observed.unmasked_data[:].value))
    if blank.any():
        ref, ideal_k = np.where(blank, 0.0, ref), np.where(blank, 0.0, ideal_k)
        notes.append(f"compared inside the mapped area only: {100 * blank.mean():.1f}% of the "
                     "voxels are blank in the observed map (below the primary-beam cutoff)")
    unit = u.K if kind == "K" else u.Jy / u.beam
    beam = cube_beam(observed)
    sigma = noise_rms(obs) if noise is None else _noise_value(noise, unit)
    pix = pixel_scale_arcsec(observed)
    nu_hz = channel_frequencies_hz(observed)
    emitting = ref >= emission_floor * ref.max()
    obs_mask = signal_mask(obs, sigma, floor=emission_floor)
    flux_o = _flux_jy(obs, kind, beam, nu_hz, (pix / ARCSEC_PER_RAD) ** 2)
    flux_i = _flux_jy(ideal_k, "K", None, nu_hz, (pix / ARCSEC_PER_RAD) ** 2)
    pbm = (_pb_mask(obs.shape[1:], pix, primary_beam) if response is None
           else np.asarray(response) >= 0.5)
    table = recovery_table(obs, ref, pix, nbins)
    half, bounded = half_recovery_scale(table)
    note = excess_note(table, None if beam is None else beam.major.to_value(u.arcsec))
    if note:
        notes.append(note)
    fid, pct, hist = fidelity_summary(obs, ref, emitting)
    fid0, _, _ = fidelity_summary(obs.sum(0), ref.sum(0), emitting.any(axis=0))
    v_kms, dv_kms = channel_velocities_ms(observed) / 1e3, channel_width_ms(observed) / 1e3
    mi = _moments(ref, emitting, v_kms, dv_kms, unit, 0.0)
    mo = _moments(obs, obs_mask, v_kms, dv_kms, unit, sigma)
    return Survival(
        flux_fraction=_ratio(flux_o.sum(), flux_i.sum()),
        flux_fraction_pb=(float("nan") if pbm is None else
                          _ratio(flux_o[:, pbm].sum(), flux_i[:, pbm].sum())),
        recovery=table, half_recovery_scale=half * u.arcsec, half_recovery_bounded=bounded,
        fidelity=fid, fidelity_percentiles=pct, fidelity_hist=hist, fidelity_mom0=fid0,
        peak_snr=_ratio(obs.max(), sigma),
        fraction_above_3sigma=(float((obs[emitting] >= 3 * sigma).mean())
                               if emitting.any() else float("nan")),
        moment_correlation=_correlations(mi, mo),
        centroid_hist=_centroid_hist(mi, mo, v_kms),
        ideal_moments=mi, observed_moments=mo, noise=sigma * unit, unit=kind, beam=beam,
        notes=tuple(notes))


def recorded_noise(cube):
    """An observed cube's recorded rms per channel (NOISERMS in NOISEUNI), or None when it
    has none or is noiseless (assess then estimates the rms itself)."""
    meta = {str(k).upper(): v for k, v in cube.meta.items()}
    try:
        rms = float(meta.get("NOISERMS"))
    except (TypeError, ValueError):
        return None
    if not rms > 0:
        return None
    return rms * u.Unit(str(meta.get("NOISEUNI") or cube.unit.to_string()))


def assess_map(observed_map, emission_floor=0.01, reference=None):
    """``assess`` of an :class:`~synth.instrument.mapping.ObservedMap` as a run does it: the
    primary-beam-corrected map of an array (blank below its cutoff) against the unattenuated
    model on the same grid, with the flux where the response is >= 1/2; a dish map against the
    model on the map including its guard band; the noise its recorded NOISERMS."""
    m = observed_map
    response = m.response if m.layout.kind == "array" else None
    return assess(m.sky, m.corrected, noise=recorded_noise(m.corrected), response=response,
                  emission_floor=emission_floor, reference=reference)


def _ratio(a, b):
    if b == 0:
        return float("inf") if a > 0 else float("nan")
    return float(a / b)


def _correlations(mi, mo):
    union = (mi.mom0.value != 0) | (mo.mom0.value != 0)
    return {"mom0": _pearson(np.where(union, mi.mom0.value, np.nan), mo.mom0.value),
            "mom1": _pearson(mi.mom1.value, mo.mom1.value),
            "mom2": _pearson(mi.mom2.value, mo.mom2.value)}


def _centroid_hist(mi, mo, v_kms, nbins=30):
    lo, hi = float(np.min(v_kms)), float(np.max(v_kms))
    edges = np.linspace(lo, hi, nbins + 1) if hi > lo else np.array([lo - 0.5, lo + 0.5])
    ci, _ = np.histogram(mi.mom1.value[np.isfinite(mi.mom1.value)], bins=edges)
    co, _ = np.histogram(mo.mom1.value[np.isfinite(mo.mom1.value)], bins=edges)
    return edges, ci, co


def survival_matrix(results, min_peak_snr=5.0, min_flux_fraction=0.5):
    """Rows of the tracer x setup matrix, one dict per (tracer, setup).

    ``results`` maps (tracer, setup) -> Survival, or is an iterable of (tracer, setup,
    Survival). Each row holds the scalar metrics and ``survives`` = peak S/N >=
    ``min_peak_snr`` and flux fraction >= ``min_flux_fraction`` (a plain rule of our own,
    stated in the docs).
    """
    items = results.items() if hasattr(results, "items") else (
        ((t, s), m) for t, s, m in results)
    rows = []
    for (tracer, setup), m in items:
        row = {"tracer": str(tracer), "setup": str(setup), **m.as_row()}
        row["survives"] = bool(m.peak_snr >= min_peak_snr
                               and m.flux_fraction >= min_flux_fraction)
        rows.append(row)
    return rows


def matrix_csv(rows):
    """The survival-matrix rows as CSV text (header from the first row); text cells that a
    spreadsheet would run as a formula are made inert (:func:`synth.rundir.csv_cell`)."""
    from ..rundir import csv_cell
    if not rows:
        return ""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows({k: csv_cell(v) for k, v in r.items()} for r in rows)
    return buf.getvalue()


def matrix_json_rows(rows):
    """The rows with NaN / infinity replaced by None, ready for ``json.dumps``."""
    def clean(v):
        return None if isinstance(v, float) and not math.isfinite(v) else v
    return [{k: clean(v) for k, v in r.items()} for r in rows]
