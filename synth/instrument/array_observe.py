"""The interferometric observation of a sky cube: one pointing or a mosaic, joint arrays,
feathering with a single dish.

``observe_interferometric`` lays out the map (:mod:`synth.instrument.mosaic`), puts the
model on the output grid (:mod:`synth.instrument.grid`), then streams over channels: for each
channel and pointing it multiplies the sky (Jy/pixel) by the primary beam of each dish pair,
predicts visibilities with ducc0's gridder, adds radiometer noise, weights, grids the dirty
image and, if asked, deconvolves with Högbom CLEAN and restores with a Gaussian fitted to the
PSF main lobe. The pointings are combined as a linear mosaic (:mod:`synth.instrument.mapping`).
Several arrays are imaged jointly (their visibilities concatenated per pointing); a single
dish in the list is feathered in afterwards (:mod:`synth.instrument.combine`).
"""

import warnings
from dataclasses import dataclass, replace

import astropy.units as u
import numpy as np

from ..errors import FieldLargerThanPrimaryBeamWarning, InstrumentError
from ..sky import ARCSEC_PER_RAD, C_M_S
from .clean import grown_mask, hogbom, pb_box, psf_transform
from .multiscale import default_scales, multiscale_clean
from .cube_utils import reference_frequency
from .combine import dish_on_grid, feather_mosaic, split_instruments
from .grid import place_model
from .imaging import fit_restoring_beam, restore
from .interferometer import (OBSERVE_OPTIONS, RENAMED_OPTIONS, _channel_width_hz, _check_options,
                             _pb_images, _psf, _quantity, _seed, _visibilities,
                             antenna_phase_gains, assemble_tracks, new_observed_cube)
from .uv import SIDEREAL_RATE_RAD_S
from .mapping import (ObservedMap, array_canvas, array_layout, map_options,
                      pointing_hour_angles, primary_beam_fwhm_arcsec, sub_boxes)
from .visibilities import (ImageGeometry, check_sampling, cube_frequencies_hz, cube_geometry,
                           grid_dirty, jy_per_pixel_factor)
from .weighting import image_noise_jy, imaging_weights

__all__ = ["observe_interferometric", "simulate_visibilities", "MAP_KEYS",
           "OUTSIDE_PB_WARN_FRACTION"]

#: keyword options that describe the mapped area (see synth.instrument.mapping.map_options)
MAP_KEYS = ("map_size", "map_offset", "pixel", "beyond_box", "pointing_pattern",
            "pointing_spacing", "guard_band", "max_pointings")
#: warn when more than this fraction of the sky flux lies where the map's response is < 1/2
OUTSIDE_PB_WARN_FRACTION = 0.05


def _pointings(cube, arrays, opts, layout, canvas, half, dec_rad, freqs, integration_time,
               phase_seed=0):
    """Per pointing: (Tracks, ImageGeometry of its sub-image, (slice y, slice x))."""
    geom0, _, _ = cube_geometry(cube)
    dx = -canvas.pixel_arcsec / ARCSEC_PER_RAD
    dy = canvas.pixel_arcsec / ARCSEC_PER_RAD
    dnu = _channel_width_hz(cube, freqs, opts)
    n = layout.n_pointings
    out = []
    phase = u.Quantity(opts["phase_rms"]).to_value(u.rad)
    interval = u.Quantity(opts["phase_interval"] if opts["phase_interval"] is not None
                          else opts["sample_interval"]).to_value(u.s)
    for p, (sy, sx, x0, y0) in enumerate(sub_boxes(canvas, layout, half)):
        east, north = layout.pointings[p]
        dec_p = dec_rad + north / ARCSEC_PER_RAD
        o = dict(opts, hour_angles=pointing_hour_angles(opts, p, n, east, dec_rad))
        tracks = assemble_tracks(arrays, dec_p, o, dnu, integration_time, n_share=n)
        if phase > 0:          # its own seeded draw, independent of the thermal noise
            rng = np.random.default_rng([phase_seed, p])
            tracks = replace(tracks, gains=antenna_phase_gains(tracks, phase, interval, rng))
        geom = ImageGeometry(sx.stop - sx.start, sy.stop - sy.start, dx, dy, x0, y0)
        out.append((tracks, geom, (sy, sx)))
    check_sampling(out[0][1], np.concatenate([t.uvw_m for t, _, _ in out]), freqs.max())
    return out


def _scale_to_rms(pointings, rms, nu, opts):
    """Tracks scaled so that each pointing's image noise is ``rms`` (Jy/beam)."""
    target = _quantity("rms", rms, u.Jy / u.beam).value
    out = []
    for tracks, geom, box in pointings:
        w = imaging_weights(tracks.uvw_m, nu, tracks.sigma_jy, geom, opts["weighting"],
                            opts["robust"])
        scale = target / image_noise_jy(w, tracks.sigma_jy)
        out.append((replace(tracks, sigma_jy=tracks.sigma_jy * scale), geom, box))
    return out


#: threads that image and CLEAN the channels and pointings side by side (ducc0, numba and
#: scipy's FFTs release the GIL; each (channel, pointing) is imaged independently and its
#: noise drawn in a fixed order, so the result does not depend on the threads)
CLEAN_THREADS = 2


#: components are placed only inside the bounding box of the part of each pointing where
#: its primary beam is at least this fraction of ``primary_beam_cutoff`` (0.1 for the
#: default cutoff 0.2): farther out the pointing adds little to the mosaic, and the
#: corrected map is blanked where the response falls under the cutoff. CLEAN then works on
#: the box alone (clean.hogbom), a third or less of the sub-image for a Gaussian beam.
CLEAN_REGION = 0.5


def _deconvolved(dirty, psf, threshold, noise, geom, beam, opts, box=None, psf_ft=None):
    """``dirty`` cleaned and restored (Högbom, or multi-scale with ``opts["scales_px"]``),
    or as it is with ``opts["deconvolver"]`` "none"; with ``opts["clean_mask_sigma"]`` the components
    are only inside a mask grown from the dirty image (at that many sigma, dilated by one
    beam). Returns (image, CLEAN iterations)."""
    if opts["deconvolver"] == "none":
        return dirty, 0
    mask = None
    if opts["clean_mask_sigma"] is not None:
        mask = grown_mask(dirty, noise, float(opts["clean_mask_sigma"]), opts["beam_px"])
    if opts["deconvolver"] == "multiscale":
        model, res, n_it = multiscale_clean(dirty, psf, threshold, opts["scales_px"],
                                            opts["clean_loop_gain"],
                                            opts["clean_max_components"], opts["beam_px"],
                                            mask, box, psf_ft)
    else:
        model, res, n_it = hogbom(dirty, psf, threshold, opts["clean_loop_gain"],
                                  opts["clean_max_components"], mask, box, psf_ft)
    return restore(model, res, beam, geom.dx_rad, geom.dy_rad), n_it


def _draws(tracks, rngs):
    """The unit complex noise of one (channel, pointing) per generator, drawn as
    add_thermal_noise draws it (None for a noiseless observation)."""
    n = 2 * tracks.uvw_m.shape[0]
    return [None if r is None else r.standard_normal(n).view(np.complex128) for r in rngs]


def _image_one(plane, pointing, nu, opts, beam, draws):
    """One channel of one pointing: weights, primary beams, dirty image(s), PSF, CLEAN.

    One draw: the noise is added to the visibilities before gridding (as
    add_thermal_noise adds it). Several (noise realisations): the noiseless dirty image is
    gridded once and each draw's noise-only dirty image added to it (gridding is linear).
    Returns ([(image, CLEAN iterations) per draw], image noise, effective primary beam)."""
    tracks, geom, box = pointing
    w = imaging_weights(tracks.uvw_m, nu, tracks.sigma_jy, geom, opts["weighting"],
                        opts["robust"])
    pbs, pb_eff = _pb_images(tracks, geom, nu, w, opts["primary_beam"])
    vis = _visibilities(plane[box], tracks, nu, geom, pbs, None)
    if len(draws) == 1:
        if draws[0] is not None:
            vis = vis + tracks.sigma_jy * draws[0]
        dirty = [grid_dirty(vis, tracks.uvw_m, nu, w, geom)]
    else:
        base = grid_dirty(vis, tracks.uvw_m, nu, w, geom)
        dirty = [base + grid_dirty(tracks.sigma_jy * z, tracks.uvw_m, nu, w, geom)
                 for z in draws]
    psf = _psf(tracks, nu, w, geom) if opts["deconvolver"] != "none" else None
    s_p = image_noise_jy(w, tracks.sigma_jy)
    box = pb_box(pb_eff, CLEAN_REGION * opts["primary_beam_cutoff"])
    psf_ft = (psf_transform(psf) if psf is not None and box is not None and len(dirty) > 1
              else None)
    out = [_deconvolved(d, psf, opts["clean_stop_sigma"] * s_p, s_p, geom, beam, opts, box,
                        psf_ft) for d in dirty]
    return out, s_p, pb_eff


def _in_order(fn, jobs, threads):
    """fn(*job) for every job, results in order; on ``threads`` threads with a bounded
    look-ahead (jobs are pulled from the iterator in order, in this thread)."""
    if threads <= 1:
        for job in jobs:
            yield fn(*job)
        return
    from collections import deque
    from concurrent.futures import ThreadPoolExecutor
    with ThreadPoolExecutor(threads) as pool:
        queue = deque()
        for job in jobs:
            queue.append(pool.submit(fn, *job))
            if len(queue) > 2 * threads:
                yield queue.popleft().result()
        while queue:
            yield queue.popleft().result()


def _images(planes, pointings, freqs, opts, beams, rngs):
    """Every (channel, pointing) imaged and cleaned, channels and pointings side by side on
    CLEAN_THREADS threads. The noise is drawn in this thread in channel-major order as each
    job is handed out, so the result does not depend on the threads. ``rngs``: one generator
    per noise realisation ([None]: noiseless); ``beams`` the restoring beam of each channel.
    Yields, per channel, (c, [corrected per realisation], sum A^2/s^2, median pointing
    noise, [CLEAN iterations])."""
    n_p, n_r = len(pointings), len(rngs)

    def jobs():
        for c in range(freqs.size):
            plane = planes(c)
            for p in range(n_p):
                yield (plane, pointings[p], freqs[c], opts, beams[c],
                       _draws(pointings[p][0], rngs))
    results = _in_order(_image_one, jobs(), CLEAN_THREADS)
    shape = planes(0).shape
    for c in range(freqs.size):
        nums, den, noise, iters = [np.zeros(shape) for _ in rngs], np.zeros(shape), [], [0] * n_r
        for p in range(n_p):
            out, s_p, pb_eff = next(results)
            sy, sx = pointings[p][2]
            for k, (img, n_it) in enumerate(out):
                iters[k] += n_it
                nums[k][sy, sx] += pb_eff * img / s_p**2
            den[sy, sx] += pb_eff**2 / s_p**2
            noise.append(s_p)
        with np.errstate(divide="ignore", invalid="ignore"):
            corrected = [np.where(den > 0, num / den, 0.0) for num in nums]
        yield c, corrected, den, float(np.median(noise)), iters


def _scales_px(opts, beam, tracks, geom, freqs):
    """Multi-scale CLEAN scales in pixels: given, or 0, then twice the restoring beam doubled
    up to the largest recoverable scale 0.6 lambda / B_min (Wilner & Welch 1994) or a quarter
    of the sub-image."""
    pix = abs(geom.dx_rad)
    if opts["clean_scales"] is not None:
        px = list(u.Quantity(opts["clean_scales"]).to_value(u.rad) / pix)
        if max(px) > max(geom.nx, geom.ny):
            raise InstrumentError(f"clean_scales: {max(px) * pix * ARCSEC_PER_RAD:.4g} arcsec is "
                                  f"larger than the map ({geom.nx} x {geom.ny} pixels of "
                                  f"{pix * ARCSEC_PER_RAD:.4g} arcsec)")
        return [0.0] + [p for p in px if p > 0]
    b_min = float(np.hypot(tracks.uvw_m[:, 0], tracks.uvw_m[:, 1]).min())
    las_px = 0.6 * C_M_S / float(freqs.max()) / b_min / pix
    return default_scales(beam.major.to_value(u.rad) / pix, las_px, min(geom.nx, geom.ny))


def _mosaic(sky, pointings, freqs, opts, noise, seeds, out_sl):
    """The channel loop: corrected and flat-noise mosaics (one per seed in ``seeds``),
    response and noise per channel, restoring beam, CLEAN iterations (per seed), the sky
    fraction where the response is < 1/2."""
    rngs = [np.random.default_rng(s) for s in seeds] if noise else [None]
    t0, g0, _ = pointings[0]
    beam, beams = restoring_beams(t0, g0, freqs, opts)
    opts = dict(opts, beam_px=beam.major.to_value(u.rad) / abs(g0.dx_rad))
    if opts["deconvolver"] == "multiscale":
        opts["scales_px"] = _scales_px(opts, beam, t0, g0, freqs)
    canvas_geom = ImageGeometry(sky.shape[2], sky.shape[1], g0.dx_rad, g0.dy_rad, 0.0, 0.0)
    ny, nx = out_sl[0].stop - out_sl[0].start, out_sl[1].stop - out_sl[1].start
    corrected = [np.empty((freqs.size, ny, nx)) for _ in rngs]
    response = np.empty((freqs.size, ny, nx))
    rms, iters, outside, total = np.empty(freqs.size), [0] * len(rngs), 0.0, 0.0
    data = np.asarray(sky.unmasked_data[:].value)          # finite: place_model made it
    to_jy = np.broadcast_to(jy_per_pixel_factor(sky, freqs, canvas_geom), freqs.shape)
    def planes(c):
        return data[c] * to_jy[c]
    per_channel = beams if beams is not None else [beam] * freqs.size
    for c, imgs, den, s_ref, ks in _images(planes, pointings, freqs, opts, per_channel, rngs):
        plane = planes(c)
        resp = s_ref * np.sqrt(den)
        outside += np.abs(plane[resp < 0.5]).sum()
        total += np.abs(plane).sum()
        response[c] = resp[out_sl]
        for k, img in enumerate(imgs):
            corrected[k][c] = img[out_sl]
            iters[k] += ks[k]
        rms[c] = s_ref
    frac = outside / total if total > 0 else 0.0
    return corrected, response, rms, beam if beams is None else beams, iters, frac


#: the restoring beam is stored per channel when its major or minor axis changes by more
#: than this fraction across the band (max / min - 1); below it one beam serves every channel
BEAM_VARIES = 0.01


def _fit_beam(tracks, geom, nu, opts):
    w = imaging_weights(tracks.uvw_m, nu, tracks.sigma_jy, geom, opts["weighting"],
                        opts["robust"])
    return fit_restoring_beam(_psf(tracks, nu, w, geom), geom.dx_rad, geom.dy_rad)


def restoring_beams(tracks, geom, freqs, opts):
    """(beam, beams): the restoring beam fitted to the PSF main lobe at the middle channel,
    and None when the beams fitted at the band's first and last channels differ from it by
    at most BEAM_VARIES in major and minor axis, else the list of the beams fitted to every
    channel's PSF (the synthesised beam scales about as 1 / frequency, so the band's ends
    bound the change)."""
    ref = freqs.size // 2
    beam = _fit_beam(tracks, geom, freqs[ref], opts)
    if freqs.size < 2:
        return beam, None
    ends = [_fit_beam(tracks, geom, freqs[c], opts) for c in (0, freqs.size - 1)]
    axes = np.array([[b.major.to_value(u.rad), b.minor.to_value(u.rad)]
                     for b in ends + [beam]])
    if np.all(axes.max(axis=0) / axes.min(axis=0) - 1.0 <= BEAM_VARIES):
        return beam, None
    beams = [ends[0] if c == 0 else ends[1] if c == freqs.size - 1 else beam if c == ref
             else _fit_beam(tracks, geom, freqs[c], opts) for c in range(freqs.size)]
    return beam, beams


@dataclass(frozen=True, eq=False)
class _Plan:
    """What both array entry points prepare: options, layout, the model on the canvas, the
    pointings (tracks and sub-images), the output slices."""

    opts: dict
    mopts: object
    seed: object
    ra_rad: float
    dec_rad: float
    freqs: np.ndarray
    layout: object
    sky: object
    pointings: list
    out_sl: tuple


def _prepare_plan(cube, arrays, opts, mopts, noise, seed, integration_time):
    """Layout, canvas, model on the canvas and pointings of an array observation of ``cube``
    (shared by :func:`observe_interferometric` and :func:`simulate_visibilities`)."""
    seed = _seed(seed, noise)
    _, ra_rad, dec_rad = cube_geometry(cube)
    if opts.get("declination") is not None:
        dec_rad = _quantity("declination", opts["declination"], u.rad, positive=False).value
    freqs = cube_frequencies_hz(cube)
    layout, pixel = array_layout(cube, arrays, opts, mopts, dec_rad, freqs,
                                 nu_layout=reference_frequency(cube).to_value(u.Hz))
    pb_max, _ = primary_beam_fwhm_arcsec(arrays, float(freqs.min()))
    if not opts["primary_beam"]:
        pb_max = np.inf          # no primary beam: every pointing images the whole map
    canvas, _, zshape, offset, out_sl, half = array_canvas(cube, layout, pixel, pb_max,
                                                           mopts.beyond_box)
    sky = place_model(cube, canvas, zshape, offset, mopts.beyond_box)
    pointings = _pointings(cube, arrays, opts, layout, canvas, half, dec_rad, freqs,
                           integration_time, phase_seed=seed if seed is not None else 0)
    if opts["rms"] is not None:
        pointings = _scale_to_rms(pointings, opts["rms"], freqs[freqs.size // 2], opts)
    return _Plan(opts, mopts, seed, ra_rad, dec_rad, freqs, layout, sky, pointings, out_sl)


def simulate_visibilities(cube, instrument, *, noise=True, seed=None, integration_time=None,
                          **kwargs):
    """The visibilities an array setup records, pointing by pointing (no imaging).

    Same options as :func:`observe_interferometric` (no single dish). Returns a list with one
    dict per pointing: ``tracks`` (uvw, noise, antenna numbers), ``vis`` (rows x channels,
    Jy), ``freqs_hz``, ``ra_deg``/``dec_deg`` (the pointing, the phase centre),
    ``hour_angle_rad`` (per row) and ``arrays``. The noise is drawn as observe draws it, but
    in channel-major order, so it is another realisation than observe's with the same seed.
    """
    arrays, dish = split_instruments(instrument)
    if dish is not None:
        raise InstrumentError("visibilities: a single dish has none; give arrays only")
    opts, mopts, _ = _split_options(dict(kwargs))
    plan = _prepare_plan(cube, arrays, opts, mopts, noise, seed, integration_time)
    sky, pointings, layout, freqs = plan.sky, plan.pointings, plan.layout, plan.freqs
    ra0, dec_rad = plan.ra_rad, plan.dec_rad
    rng = np.random.default_rng(plan.seed) if noise else None
    data = np.asarray(sky.unmasked_data[:].value)
    geom0 = ImageGeometry(sky.shape[2], sky.shape[1], pointings[0][1].dx_rad,
                          pointings[0][1].dy_rad, 0.0, 0.0)
    to_jy = np.broadcast_to(jy_per_pixel_factor(sky, freqs, geom0), freqs.shape)
    out = []
    for p, (tracks, geom, box) in enumerate(pointings):
        east, north = layout.pointings[p]
        vis = np.empty((tracks.uvw_m.shape[0], freqs.size), dtype=np.complex128)
        for c, nu in enumerate(freqs):
            w = imaging_weights(tracks.uvw_m, nu, tracks.sigma_jy, geom, "natural", 0.0)
            pbs, _ = _pb_images(tracks, geom, nu, w, opts["primary_beam"])
            vis[:, c] = _visibilities(data[c][box] * to_jy[c], tracks, nu, geom, pbs, rng)
        dec_p = np.degrees(dec_rad) + north / 3600.0
        ra_p = np.degrees(ra0) + east / 3600.0 / max(np.cos(dec_rad), 1e-6)
        h0 = pointing_hour_angles(opts, p, layout.n_pointings, east, dec_rad)[0]
        ha = h0.to_value(u.rad) + tracks.time_s * SIDEREAL_RATE_RAD_S
        out.append(dict(tracks=tracks, vis=vis, freqs_hz=freqs, ra_deg=float(ra_p),
                        dec_deg=float(dec_p), hour_angle_rad=ha, arrays=arrays,
                        sample_time_s=u.Quantity(opts["sample_interval"]).to_value(u.s)
                        / layout.n_pointings))
    return out


def _warn_outside(frac, layout):
    if frac > OUTSIDE_PB_WARN_FRACTION:
        hint = ("map a larger area (map_size) to mosaic it" if layout.n_pointings == 1
                else "map a larger area (map_size)")
        warnings.warn(f"{100 * frac:.1f}% of the sky cube's flux lies where the map's response "
                      f"is below one half ({layout.n_pointings} pointing(s)); that emission is "
                      f"attenuated or lost: {hint}", FieldLargerThanPrimaryBeamWarning,
                      stacklevel=6)


def _split_options(kwargs):
    opts = dict(OBSERVE_OPTIONS)
    for old in sorted(set(kwargs) & set(RENAMED_OPTIONS)):
        raise InstrumentError(f"{old}= was renamed to {RENAMED_OPTIONS[old]}")
    mkw = {k: kwargs.pop(k) for k in MAP_KEYS if k in kwargs}
    dish_opts = kwargs.pop("dish_options", None) or {}
    unknown = set(kwargs) - set(opts) - {"declination"}
    if unknown:
        raise InstrumentError(f"unknown interferometer option(s) {sorted(unknown)}; valid: "
                              f"{sorted(set(opts) | {'declination', 'dish_options'} | set(MAP_KEYS))}")
    opts.update(kwargs)
    if opts["unit"] not in ("Jy/beam", "K"):
        raise InstrumentError(f"unit={opts['unit']!r} must be 'Jy/beam' or 'K'")
    _check_options(opts)
    return opts, map_options(**mkw), dish_opts


def observe_interferometric(cube, instrument, *, noise=True, seed=None, integration_time=None,
                            with_maps=False, hanning=False, **kwargs):
    """Observe ``cube`` with an Array, or jointly with several (a list/tuple), and
    feather with a Dish or single-dish cube if one is in the list.

    Imaging options (defaults in ``OBSERVE_OPTIONS``): ``hour_angles`` (start, stop)
    Quantity; ``sample_interval`` time per sample; ``weighting`` natural / uniform / robust
    with ``robust`` (Briggs R); ``deconvolver`` ("hogbom", "multiscale" or "none") with
    ``clean_stop_sigma`` (in units of the image noise), ``clean_max_components``,
    ``clean_loop_gain``, ``clean_scales``, ``clean_mask_sigma``; ``correct_primary_beam``
    (default True) returns the primary-beam-corrected product (NaN where the response is <
    ``primary_beam_cutoff``), False the flat-noise one;
    ``primary_beam`` (False ignores it: an idealisation for tests); ``bandwidth`` channel
    width for single-channel cubes; ``declination`` overrides the WCS phase centre's;
    ``integration_time`` the on-source time of each pointing (default: the track, shared in
    turn by the pointings); ``dish_flux_scale`` multiplies the single-dish image when feathering;
    ``dish_options`` (integration_time, rms, noise, seed) for a Dish instrument in the
    list. ``phase_rms`` (angle) draws antenna phase errors of that rms per antenna and per
    ``phase_interval`` (default the sample interval), seeded by ``seed``
    (:func:`~synth.instrument.interferometer.antenna_phase_gains`). ``rms`` (Jy/beam) scales each pointing's noise to that image rms; ``unit``
    "Jy/beam" or "K". ``seed=None`` draws a seed and records it (NSEED).

    Map options (see :func:`synth.instrument.mapping.map_options`): ``map_size``,
    ``map_offset``, ``pixel``, ``beyond_box``, ``pointing_pattern``, ``pointing_spacing``,
    ``max_pointings``.

    Returns a SpectralCube in Jy/beam (or K) with the restoring beam, or with ``with_maps``
    an :class:`~synth.instrument.mapping.ObservedMap`. Header cards INSTRUME, NOISERMS,
    NOISEUNI, NSEED, WEIGHTNG, ROBUST, DECONV, PBCORR, PBLIMIT, NPOINT, MOSAIC, NVIS,
    CLEANIT, THEORMS.
    """
    arrays, dish = split_instruments(instrument)
    opts, mopts, dish_opts = _split_options(dict(kwargs))
    plan = _prepare_plan(cube, arrays, opts, mopts, noise, seed, integration_time)
    return _observations(cube, plan, dish, dish_opts, [plan.seed], noise, with_maps,
                         hanning)[0]


def observe_interferometric_seeds(cube, instrument, seeds, *, noise=True,
                                  integration_time=None, with_maps=False, hanning=False,
                                  **kwargs):
    """``observe_interferometric`` once per seed in ``seeds`` (a list of observations, each
    equal to the observation with that seed), reusing what the noise does not change: the
    layout, model, uv tracks, weights, primary beams, PSFs, restoring beam and the noiseless
    dirty image of every channel and pointing; each realisation adds its own noise-only
    dirty image (seeded as a full observation) and is deconvolved on its own. With antenna
    phase errors (seeded like the noise) or a single dish to feather, each seed is a full
    observation."""
    seeds = [_seed(s, True) for s in seeds]
    arrays, dish = split_instruments(instrument)
    opts, mopts, dish_opts = _split_options(dict(kwargs))
    full = (not noise or dish is not None
            or u.Quantity(opts["phase_rms"]).to_value(u.rad) > 0)
    if full:
        return [observe_interferometric(cube, instrument, noise=noise, seed=s,
                                        integration_time=integration_time,
                                        with_maps=with_maps, hanning=hanning, **kwargs)
                for s in seeds]
    plan = _prepare_plan(cube, arrays, opts, mopts, noise, seeds[0], integration_time)
    return _observations(cube, plan, dish, dish_opts, seeds, noise, with_maps, hanning)


def _observations(cube, plan, dish, dish_opts, seeds, noise, with_maps, hanning):
    """The products of ``plan`` observed with each seed (one list entry per seed)."""
    opts, mopts, freqs, layout, sky = plan.opts, plan.mopts, plan.freqs, plan.layout, plan.sky
    pointings, out_sl = plan.pointings, plan.out_sl
    corrected, response, rms, beam, iters, frac = _mosaic(sky, pointings, freqs, opts, noise,
                                                          seeds, out_sl)
    mid_beam = beam[freqs.size // 2] if isinstance(beam, list) else beam
    if mopts.map_size is None:      # the whole model was to be mapped: say what is lost
        _warn_outside(frac, layout)
    out_sky = sky[:, out_sl[0], out_sl[1]]
    out = []
    for seed, corr, its in zip(seeds, corrected, iters):
        meta = dict(INSTRUME="+".join(pointings[0][0].names),
                    NOISERMS=float(np.median(rms)) if noise else 0.0,
                    NOISEUNI="Jy/beam", NSEED=seed if noise else -1,
                    WEIGHTNG=opts["weighting"],
                    ROBUST=float(opts["robust"]), DECONV=opts["deconvolver"] != "none",
                    NPOINT=layout.n_pointings,
                    MOSAIC=layout.pattern if layout.n_pointings > 1 else "single",
                    PBLIMIT=float(opts["primary_beam_cutoff"]),
                    NVIS=int(sum(t.uvw_m.shape[0] for t, _, _ in pointings)),
                    CLEANIT=int(its), THEORMS=float(np.median(rms)),
                    DECONVER=str(opts["deconvolver"]),
                    MASKSIG=float(opts["clean_mask_sigma"]) if opts["clean_mask_sigma"] is not None
                    else 0.0,
                    PHASERMS=float(u.Quantity(opts["phase_rms"]).to_value(u.deg)))
        if dish is not None:
            sd_k, sd_beam, sd_name = dish_on_grid(dish, sky, out_sl, out_sky, dish_opts, noise,
                                                  seed, hanning)
            corr = feather_mosaic(corr, response, sd_k, sd_beam, mid_beam, freqs,
                                  abs(pointings[0][1].dx_rad) * ARCSEC_PER_RAD,
                                  opts["dish_flux_scale"])
            meta.update(INSTRUME=f"{meta['INSTRUME']}+{sd_name}", FEATHER=True,
                        SDSCALE=float(opts["dish_flux_scale"]))
        out.append(_products(out_sky, corr, response, rms, beam, meta, opts, layout,
                             with_maps))
    return out


def _products(out_sky, corrected, response, rms, beam, meta, opts, layout, with_maps):
    unit = opts["unit"]

    def corrected_cube():
        corr = np.where(response >= opts["primary_beam_cutoff"], corrected, np.nan)
        return new_observed_cube(out_sky, corr, dict(meta, PBCORR=True), beam, unit=unit)

    def flat_cube(inplace=False):
        flat = np.multiply(corrected, response, out=corrected if inplace else None)
        return new_observed_cube(out_sky, flat, dict(meta, PBCORR=False), beam, unit=unit)
    if not with_maps:
        return corrected_cube() if opts["correct_primary_beam"] else flat_cube(inplace=True)
    c_cube, f_cube = corrected_cube(), flat_cube()
    chosen = c_cube if opts["correct_primary_beam"] else f_cube
    mid = corrected.shape[0] // 2
    with np.errstate(divide="ignore"):
        sens = np.where(response[mid] > 0, rms[mid] / response[mid], np.inf)
    if unit == "K":
        nu = cube_frequencies_hz(out_sky)[mid]
        sens = sens * float((beam[mid] if isinstance(beam, list) else beam).jtok(nu * u.Hz).value)
    return ObservedMap(cube=chosen, corrected=c_cube, uncorrected=f_cube,
                       sensitivity=sens * u.Unit(unit), response=response[mid], sky=out_sky,
                       layout=layout)

