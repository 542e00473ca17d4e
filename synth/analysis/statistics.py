"""The statistics layer: the same structure and kinematic statistics of any cube.

:func:`measure_statistics` applies one set of measurements to an ideal cube, an observed
cube or a user's own cube, and returns ``{name: Stat(value, error, unit)}`` for the names in
:data:`STATISTICS` (the one list; docs/analysis.md defines each and names its source).
``error`` is the 1-sigma uncertainty of the fit or estimator on this one cube; the scatter
over noise realisations is added by :mod:`synth.analysis.stat_survival`.

Everything is measured in K (a Jy/beam cube is converted with its beam). Thresholds and
fitting ranges scale with the data: in units of the noise and of the beam, which are
arguments so that an ideal cube can be measured with exactly the settings of the
observation it is compared with.

:func:`snapshot_statistics` gives the true values from the 3-D snapshot (:data:`TRUE_STATISTICS`).
"""

import time
from collections import namedtuple

import numpy as np
import astropy.units as u

from ..errors import InstrumentError
from .deltavariance import delta_variance, fit_delta_slope
from .matching import (channel_frequencies_hz, channel_velocities_ms, channel_width_ms,
                       cube_beam, jy_per_beam_per_k, pixel_scale_arcsec, unit_kind)
from .moments import noise_rms, signal_mask, moments_from_arrays
from .pdfs import lognormal_histogram_fit, pdf_width, powerlaw_tail_fit
from .power import fit_power_slope, power_spectrum
from .stats import default_scale_range
from .structure import (DENDRO_DEFAULTS, block_sum, dendrogram_structures,
                        size_linewidth_slope, spectral_sums)

__all__ = ["Stat", "STATISTICS", "TRUE_STATISTICS", "GROUPS", "measure_statistics",
           "snapshot_statistics", "MEAN_MOLECULAR_WEIGHT"]

Stat = namedtuple("Stat", "value error unit")

#: name -> (unit, group, description); the one list of statistics of the layer
STATISTICS = {
    "power_slope": ("", "power", "slope of the moment-0 spatial power spectrum, d ln P / d ln k"),
    "deltavar_slope": ("", "deltavar", "slope of the moment-0 Delta-variance, "
                       "d ln sigma_Delta^2 / d ln l"),
    "pdf_sigma_ln": ("", "pdf", "width of the moment-0 PDF: std of ln(W / <W>)"),
    "pdf_lognormal_sigma": ("", "pdf", "width of a log-normal fitted to the moment-0 PDF"),
    "pdf_tail_slope": ("", "pdf", "power-law tail of the moment-0 PDF, d ln p / d ln W"),
    "centroid_std": ("km/s", "centroid", "standard deviation of the moment-1 map"),
    "centroid_hist_sigma": ("km/s", "centroid", "width of a Gaussian fitted to the moment-1 "
                            "histogram"),
    "centroid_power_slope": ("", "centroid", "slope of the moment-1 power spectrum"),
    "dendro_leaves": ("", "dendrogram", "number of dendrogram leaves"),
    "dendro_structures": ("", "dendrogram", "number of dendrogram structures"),
    "size_linewidth_slope": ("", "dendrogram", "slope of ln sigma_v against ln R over the "
                             "resolved structures"),
    "dendro_radius_median": ("arcsec", "dendrogram", "median structure radius R = 1.91 sigma_r"),
    "dendro_linewidth_median": ("km/s", "dendrogram", "median structure linewidth sigma_v"),
    "dendro_aspect_median": ("", "dendrogram", "median aspect ratio sigma_maj / sigma_min"),
    "dendro_luminosity_median": ("K km/s arcsec2", "dendrogram", "median structure luminosity"),
}
#: the groups of statistics, in the order they are measured (timed separately)
GROUPS = ("power", "deltavar", "pdf", "centroid", "dendrogram")

#: name -> (unit, description): true values from the snapshot
TRUE_STATISTICS = {
    "density_sigma_ln": ("", "std of ln(n / <n>) over the cells (volume-weighted)"),
    "column_sigma_ln": ("", "std of ln(N / <N>) of the column along the line of sight"),
    "sigma_v_3d": ("km/s", "mass-weighted 3-D velocity dispersion (resolved motions)"),
    "sigma_v_los": ("km/s", "mass-weighted line-of-sight velocity dispersion"),
    "sound_speed": ("km/s", "isothermal sound speed sqrt(k <T>_m / (mu m_H)), mu = 2.33"),
    "mach_sonic": ("", "sonic Mach number sigma_v_3d / c_s"),
    "driving_b": ("", "turbulence-driving parameter b = sqrt(exp(sigma_ln^2) - 1) / Mach"),
}

#: mean mass per free particle in units of m_H for molecular gas (common practice;
#: Kauffmann et al. 2008, A&A 487, 993, appendix A)
MEAN_MOLECULAR_WEIGHT = 2.33

_NAN = float("nan")
#: fewest pixels of a dendrogram structure whatever the beam (a second-moment size needs a few)
MIN_NPIX = 4


def _kelvin_data(cube):
    """(data in K (v, y, x), blank (y, x) bool, beam, unit kind)."""
    kind = unit_kind(cube, "cube")
    target = u.K if kind == "K" else u.Jy / u.beam
    raw = np.asarray(cube.filled_data[:].to_value(target), dtype=np.float64)
    blank = ~np.isfinite(raw).any(axis=0)
    data = np.nan_to_num(raw)
    beam = cube_beam(cube)
    factor = None
    if kind == "Jy/beam":
        if beam is None:
            raise InstrumentError("cube: unit Jy/beam but no beam; attach one with "
                                  "cube.with_beam(Beam(...))")
        factor = jy_per_beam_per_k(channel_frequencies_hz(cube), beam)
        data = data / factor[:, None, None]
    return data, blank, beam, kind, factor


def _noise_k(noise, kind, factor):
    """The per-channel rms in K from a Quantity in K or Jy/beam."""
    q = u.Quantity(noise)
    if q.unit.is_equivalent(u.K):
        value = q.to_value(u.K)
    elif q.unit.is_equivalent(u.Jy / u.beam):
        if factor is None:
            raise InstrumentError(f"noise: {noise} is in Jy/beam but the cube is in K and "
                                  "has no beam; give the noise in K")
        value = q.to_value(u.Jy / u.beam) / float(np.mean(factor))
    else:
        raise InstrumentError(f"noise: {noise}; give the rms per channel in K or Jy/beam")
    if not value >= 0:
        raise InstrumentError(f"noise: {noise} must be >= 0")
    return float(value)


def _beam_pixels(beam, pix):
    """(beam area in pixels (>= 1), FWHM major in arcsec (0 without a beam))."""
    if beam is None:
        return 1.0, 0.0
    area = beam.sr.to_value(u.arcsec**2) / pix**2
    return max(area, 1.0), beam.major.to_value(u.arcsec)


def _gauss_hist_sigma(values, nbins=40):
    from .pdfs import _gauss
    from scipy.optimize import curve_fit
    v = values[np.isfinite(values)]
    if v.size < 10 or np.ptp(v) == 0:
        return _NAN, _NAN
    counts, edges = np.histogram(v, bins=nbins)
    mid = 0.5 * (edges[1:] + edges[:-1])
    try:
        popt, pcov = curve_fit(_gauss, mid, counts, p0=(counts.max(), v.mean(), v.std()),
                               sigma=np.sqrt(np.maximum(counts, 1.0)), maxfev=4000)
    except RuntimeError:
        return _NAN, _NAN
    return float(abs(popt[2])), float(np.sqrt(abs(pcov[2, 2])))


def _slope(image, pix, rng):
    if rng is None:
        return _NAN, _NAN
    table = power_spectrum(image, pix, apodize="tukey")
    try:
        s, e, _ = fit_power_slope(table, rng)
    except InstrumentError:
        return _NAN, _NAN
    return s, e


def measure_statistics(cube, *, beam=None, noise=None, scale_range=None, dendrogram=None,
                       statistics=None, info=None, timings=None):
    """Measure the statistics of :data:`STATISTICS` on one cube.

    Parameters
    ----------
    cube : SpectralCube
        K, or Jy/beam with a beam; blank (NaN) pixels are left out (given weight 0).
    beam : radio_beam.Beam, optional
        The beam that sets the fitting ranges and ``min_npix`` (default: the cube's; none =
        pixel resolution). Give the observed beam when measuring the ideal cube of an
        observation so both use the same settings.
    noise : Quantity, optional
        Rms per channel (K, or Jy/beam for a Jy/beam cube); estimated robustly
        (:func:`synth.analysis.moments.noise_rms`) if None. Thresholds are in its units:
        moment-0 noise sigma_W = noise dv sqrt(N_channels).
    scale_range : (float, float), optional
        Smallest and largest angular scale (arcsec) of the power-spectrum and
        Delta-variance fits; default :func:`synth.analysis.stats.default_scale_range` (from
        max(3 pixels, 2 beam FWHM) to a third of the map).
    dendrogram : dict, optional
        ``min_value_sigma``, ``min_delta_sigma`` (moment-0 noise units) and
        ``min_npix_beams`` (beam areas), ``fwhm_pixels`` (the map is block-averaged to about
        that many pixels per beam FWHM first; 0 = not); defaults :data:`DENDRO_DEFAULTS`.
        Without noise, the noise unit is 1 % of the moment-0 peak.
    statistics : iterable of str, optional
        Groups (:data:`GROUPS`) or names to measure; default all.
    info : dict, optional
        Receives the settings used (noise, ranges, thresholds) and the power spectrum,
        Delta-variance curve and structure table.
    timings : dict, optional
        Accumulates seconds per group (for the benchmark).

    Returns
    -------
    dict
        ``{name: Stat(value, error, unit)}`` (NaN where a statistic cannot be measured).
    """
    wanted = set(GROUPS) if statistics is None else set(statistics)
    bad = wanted - set(GROUPS) - set(STATISTICS)
    if bad:
        raise InstrumentError(f"statistics: {sorted(bad)} unknown; valid groups: {GROUPS} "
                              f"or names: {tuple(STATISTICS)}")
    groups = {g for g in GROUPS if g in wanted
              or any(STATISTICS[n][1] == g for n in wanted if n in STATISTICS)}
    dendro = dict(DENDRO_DEFAULTS, **(dendrogram or {}))
    unknown = set(dendro) - set(DENDRO_DEFAULTS)
    if unknown:
        raise InstrumentError(f"dendrogram: keys {sorted(unknown)} unknown; valid: "
                              f"{tuple(DENDRO_DEFAULTS)}")
    if any(not (np.isfinite(v) and v >= 0) for v in dendro.values()):
        raise InstrumentError(f"dendrogram: {dendro}; every setting must be a number >= 0")
    if scale_range is not None and not (len(scale_range) == 2
                                        and 0 < scale_range[0] < scale_range[1]):
        raise InstrumentError(f"scale_range: {scale_range}; give (smallest, largest) in "
                              "arcsec with 0 < smallest < largest")
    timings = {} if timings is None else timings
    info = {} if info is None else info

    t0 = time.perf_counter()
    data, blank, cbeam, kind, factor = _kelvin_data(cube)
    beam = beam if beam is not None else cbeam
    pix = pixel_scale_arcsec(cube)
    v_kms = channel_velocities_ms(cube) / 1e3
    dv = channel_width_ms(cube) / 1e3
    sigma = noise_rms(data) if noise is None else _noise_k(noise, kind, factor)
    nchan = data.shape[0]
    sigma_w = sigma * dv * np.sqrt(nchan)
    ppb, fwhm = _beam_pixels(beam, pix)
    mom0 = data.sum(axis=0) * dv
    mom0_b = np.where(blank, np.nan, mom0)
    rng = scale_range or default_scale_range(mom0.shape, pix, beam)
    info.update(noise_k=sigma, mom0_noise_k_kms=sigma_w, pixel_arcsec=pix,
                beam_pixels=ppb, scale_range_arcsec=None if rng is None else tuple(rng))
    timings["moments"] = timings.get("moments", 0.0) + time.perf_counter() - t0
    out = {}

    def timed(group, fn):
        if group not in groups:
            return
        t = time.perf_counter()
        fn()
        timings[group] = timings.get(group, 0.0) + time.perf_counter() - t

    def power():
        s, e = _slope(np.nan_to_num(mom0_b), pix, rng)
        out["power_slope"] = Stat(s, e, "")

    def deltavar():
        s, e = _NAN, _NAN
        if rng is not None:
            lags = np.geomspace(rng[0], rng[1], 12) / pix
            lags, s2 = delta_variance(mom0_b, lags)
            s, e, _ = fit_delta_slope(lags, s2, (lags[0], lags[-1]))
            info["delta_variance"] = (lags * pix, s2)
        out["deltavar_slope"] = Stat(s, e, "")

    def pdf():
        thr = 3.0 * sigma_w
        try:
            w, we = pdf_width(mom0_b, thr, ppb)
            (_, _), (ls, lse) = lognormal_histogram_fit(mom0_b, thr, ppb)
            ts, tse, _, _ = powerlaw_tail_fit(mom0_b, thr, ppb)
        except InstrumentError:
            w = we = ls = lse = ts = tse = _NAN
        info["pdf_threshold_k_kms"] = thr
        out["pdf_sigma_ln"] = Stat(w, we, "")
        out["pdf_lognormal_sigma"] = Stat(ls, lse, "")
        out["pdf_tail_slope"] = Stat(ts, tse, "")

    masks = {}

    def signal():
        if "m" not in masks:
            masks["m"] = signal_mask(data, sigma) & ~blank[None]
        return masks["m"]

    def centroid():
        _, m1, _ = moments_from_arrays(data, v_kms, dv, signal())
        m1 = np.where(blank, np.nan, m1)
        fin = m1[np.isfinite(m1)]
        if fin.size > 3:
            n_eff = max(fin.size / ppb, 2.0)
            sd = float(fin.std())
            out["centroid_std"] = Stat(sd, sd / np.sqrt(2 * (n_eff - 1)), "km/s")
        else:
            out["centroid_std"] = Stat(_NAN, _NAN, "km/s")
        out["centroid_hist_sigma"] = Stat(*_gauss_hist_sigma(m1), "km/s")
        img = np.where(np.isfinite(m1), m1 - (fin.mean() if fin.size else 0.0), 0.0)
        out["centroid_power_slope"] = Stat(*_slope(img, pix, rng), "")

    def dendrogram_group():
        unit = sigma_w if sigma_w > 0 else 0.01 * float(np.nanmax(mom0_b))
        b = 1
        if dendro["fwhm_pixels"] > 0 and fwhm > 0:
            b = max(int(np.floor(fwhm / pix / dendro["fwhm_pixels"])), 1)
        # block sums: moment 0 per block is the mean, so thresholds keep their meaning;
        # a block with a blank pixel is blank
        img = block_sum(mom0_b, b) / (b * b)
        sums = [block_sum(x, b) for x in spectral_sums(data, signal(), v_kms)]
        # the noise of a block mean falls by the number of independent beams in it (<= 1
        # beam for b <= FWHM / 2): thresholds stay in units of the per-pixel moment-0 noise
        settings = dict(min_value=dendro["min_value_sigma"] * unit,
                        min_delta=dendro["min_delta_sigma"] * unit,
                        min_npix=max(int(np.ceil(dendro["min_npix_beams"] * ppb / (b * b))),
                                     MIN_NPIX))
        info["dendrogram"] = dict(settings, block=b)
        st = dendrogram_structures(img, sums=sums, pixel_area=(pix * b) ** 2, **settings)
        t = st.table
        info["structures"] = t
        r_arcsec = np.asarray(t["radius_pix"], dtype=float) * pix * b
        sv = np.asarray(t["sigma_v_kms"], dtype=float)
        beam_sigma_r = fwhm / np.sqrt(8 * np.log(2)) * 1.91  # R of a beam-sized structure
        s, e, _ = size_linewidth_slope(r_arcsec, sv, min_radius=beam_sigma_r)
        n = len(t)

        def med(col, scale=1.0):
            if n == 0:
                return _NAN, _NAN
            v = np.asarray(t[col], dtype=float) * scale
            v = v[np.isfinite(v)]
            if v.size == 0:
                return _NAN, _NAN
            # standard error of the median, 1.2533 sigma / sqrt(n) for a normal sample, with
            # sigma from the MAD (robust to the long tails of aspect ratios)
            mad = 1.4826 * np.median(np.abs(v - np.median(v)))
            return float(np.median(v)), float(1.2533 * mad / np.sqrt(v.size))
        out["dendro_leaves"] = Stat(float(st.n_leaves), np.sqrt(st.n_leaves), "")
        out["dendro_structures"] = Stat(float(n), np.sqrt(n), "")
        out["size_linewidth_slope"] = Stat(s, e, "")
        out["dendro_radius_median"] = Stat(*med("radius_pix", pix * b), "arcsec")
        out["dendro_linewidth_median"] = Stat(*med("sigma_v_kms"), "km/s")
        out["dendro_aspect_median"] = Stat(*med("aspect"), "")
        out["dendro_luminosity_median"] = Stat(*med("luminosity"), "K km/s arcsec2")

    timed("power", power)
    timed("deltavar", deltavar)
    timed("pdf", pdf)
    timed("centroid", centroid)
    timed("dendrogram", dendrogram_group)
    if statistics is not None:
        names = {n for n in wanted if n in STATISTICS} | {
            n for n, (_, g, _) in STATISTICS.items() if g in wanted}
        out = {k: v for k, v in out.items() if k in names}
    return {k: out[k] for k in STATISTICS if k in out}


def snapshot_statistics(snapshot, line_of_sight="z"):
    """True values from a Snapshot (:data:`TRUE_STATISTICS`), errors 0 (exact).

    Mass weights are n(H2) (equal cells). The 3-D dispersion is that of the resolved
    velocity field, sigma_3d^2 = sum n |v - <v>_n|^2 / sum n (the sub-grid
    ``sigma_turb`` is not included); the line-of-sight dispersion is that of the velocity
    component along ``line_of_sight`` ("x", "y" or "z", either sign). c_s = sqrt(k <T>_n /
    (mu m_H)) with mu = 2.33 (common practice); Mach = sigma_3d / c_s. The driving parameter
    b follows sigma_ln^2 = ln(1 + b^2 Mach^2) (Federrath, Klessen & Schmidt 2008, ApJ 688,
    L79, eq. 1 and their sect. 3).
    """
    import astropy.constants as const
    axes = {"x": 0, "y": 1, "z": 2}
    los = str(line_of_sight).lstrip("+-")
    if los not in axes:
        raise InstrumentError(f"line_of_sight: {line_of_sight!r}; valid: x, y, z (either sign)")
    n = np.asarray(snapshot.n_h2_cm3, dtype=np.float64)
    t = np.asarray(snapshot.t_kin_k, dtype=np.float64)
    vel = np.asarray(snapshot.velocity_cms, dtype=np.float64)
    w = n / n.sum()
    s_ln = float(np.log(n / n.mean()).std()) if (n > 0).all() else _NAN
    col = n.sum(axis=axes[los])
    c_ln = float(np.log(col / col.mean()).std()) if (col > 0).all() else _NAN
    vm = (vel * w[None]).reshape(3, -1).sum(axis=1)
    dev2 = (vel - vm[:, None, None, None]) ** 2
    s3 = float(np.sqrt((dev2 * w[None]).sum()))
    slos = float(np.sqrt((dev2[axes[los]] * w).sum()))
    tm = float((t * w).sum())
    cs = float(np.sqrt(const.k_B.cgs.value * tm / (MEAN_MOLECULAR_WEIGHT * const.m_p.cgs.value)))
    mach = s3 / cs
    b = float(np.sqrt(np.expm1(s_ln**2)) / mach) if mach > 0 else _NAN
    vals = {"density_sigma_ln": s_ln, "column_sigma_ln": c_ln, "sigma_v_3d": s3 / 1e5,
            "sigma_v_los": slos / 1e5, "sound_speed": cs / 1e5, "mach_sonic": mach,
            "driving_b": b}
    return {k: Stat(vals[k], 0.0, TRUE_STATISTICS[k][0]) for k in TRUE_STATISTICS}
