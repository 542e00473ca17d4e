"""Multi-scale CLEAN (Cornwell 2008, IEEE J. Sel. Topics Signal Process. 2, 793).

The sky model is a sum of components of several sizes: a point (scale 0) and circular
Gaussians of FWHM s_k pixels (Cornwell uses tapered paraboloids; Gaussians are the common
choice since). The residual is kept smoothed by every scale, R_k = G_k * R (unit-sum G_k). Each iteration
picks the scale and pixel where b_k |R_k| / sqrt(P_k) is largest, with P_k the peak of the
component's own smoothed response (the matched-filter figure: the drop in residual energy of
a component of the best amplitude) and the small-scale bias b_k = 1 - 0.6 s_k / s_max
(Cornwell 2008, sec. III), adds gain x R_k / (G_k*G_k*PSF)(0) of
that component to the model and subtracts its response, G_k * G_l * PSF shifted, from every
R_l. It stops when the point-scale residual |R_0| falls below the threshold (or after
``max_components`` components). The model image is sum_k A_k * G_k; restored = model * clean beam +
R_0, as for Högbom CLEAN.
"""

import numpy as np
from numba import njit
from scipy.signal import fftconvolve

from ..errors import InstrumentError
from .clean import _smaller, first_at, psf_convolve, row_peak, subtract_row

__all__ = ["multiscale_clean", "default_scales", "SCALE_BIAS"]

#: Cornwell (2008) small-scale bias strength: b_k = 1 - SCALE_BIAS s_k / s_max
SCALE_BIAS = 0.6
#: components between recomputations of the smoothed residuals from the point-scale one
REFRESH = 50
#: scales whose components' peak response is below this share of what a fully sampled
#: observation (the restoring beam alone) would give are left out
MIN_SAMPLED = 0.5


def default_scales(beam_fwhm_px, largest_px, map_px):
    """Scales (FWHM in pixels): 0, then twice the beam doubled up to half the largest
    recoverable scale or a quarter of the map, whichever is smaller."""
    top = min(0.5 * largest_px, map_px / 4.0)
    out, s = [0.0], 2.0 * beam_fwhm_px
    while s <= top:
        out.append(s)
        s *= 2.0
    return out


def _kernel(fwhm_px):
    """Unit-sum circular Gaussian of FWHM ``fwhm_px`` on an odd-sized grid (+-3 FWHM), so
    that 'same'-mode convolution keeps every image where it is."""
    h = max(1, int(np.ceil(3.0 * fwhm_px)))
    y, x = np.mgrid[-h:h + 1, -h:h + 1]
    g = np.exp(-4.0 * np.log(2.0) * (x**2 + y**2) / fwhm_px**2)
    return g / g.sum()


def _conv(a, b):
    return fftconvolve(a, b, mode="same")


@njit(cache=True, nogil=True)
def _ms_kernel(res, cross, peak, bias, amps, gain, threshold, niter, cy, cx, win):
    """In-place multi-scale loop: the component is the first (scale, row, column) of largest
    b_k |R_k| (inside the mask); each row's peak of every scale is kept up to date as
    responses are subtracted, so a search reads one number per row and scale."""
    ns, ny, nx = res.shape
    peaks = np.empty((ns, ny))
    for k in range(ns):
        for y in range(ny):
            peaks[k, y] = row_peak(res[k, y], win[y], bias[k])
    it = 0
    while it < niter:
        best, bk, by = -1.0, 0, 0
        for k in range(ns):
            for y in range(ny):
                if peaks[k, y] > best:
                    best, bk, by = peaks[k, y], k, y
        top0 = 0.0
        for y in range(ny):
            top0 = max(top0, peaks[0, y])
        if top0 / bias[0] < threshold:
            break
        bx = first_at(res[bk, by], win[by], bias[bk], best)
        amp = gain * res[bk, by, bx] / peak[bk]
        amps[bk, by, bx] += amp
        oy, ox = cy - by, cx - bx
        for l in range(ns):
            for y in range(ny):
                peaks[l, y] = subtract_row(res[l, y], cross[bk, l, y + oy, ox:ox + nx], amp,
                                           win[y], bias[l])
        it += 1
    return it


def multiscale_clean(dirty, psf, threshold, scales, loop_gain=0.1, max_components=10000, beam_px=None,
                     mask=None, box=None, psf_ft=None):
    """Multi-scale CLEAN of ``dirty`` (ny, nx) with ``psf`` (2ny, 2nx; peak 1 at its
    shape // 2 pixel) and ``scales`` (FWHM in pixels, the first 0). ``beam_px``, the
    restoring beam's FWHM in pixels, lets scales the array barely measures be left out.
    Components are placed only where ``mask`` (bool, optional) is True, with their centres
    inside ``box`` ((slice y, slice x), optional: the loop runs on the box alone; the model
    and the residual outside it are made on the whole image at the end, by FFT convolutions;
    ``psf_ft``, clean.psf_transform(psf), saves the PSF's FFT).
    Returns (model image, point-scale residual, components)."""
    scales = [float(s) for s in scales]
    ny, nx = dirty.shape
    if not scales or scales[0] != 0.0 or any(s < 0 for s in scales):
        raise InstrumentError(f"clean_scales: {scales}; give 0 (points) first, then FWHM > 0")
    if max(scales) > max(ny, nx):
        raise InstrumentError(f"clean_scales: {max(scales):.4g} pixels is larger than the map "
                              f"({nx} x {ny} pixels)")
    if box is not None and _smaller(box, dirty.shape):
        sub = None if mask is None else np.asarray(mask)[box]
        amps_b, res_b, n, kernels = _multiscale(np.asarray(dirty)[box], psf, threshold, scales,
                                                loop_gain, max_components, beam_px, sub)
        amps = np.zeros((len(kernels),) + dirty.shape)
        amps[(slice(None),) + tuple(box)] = amps_b
        model = _model(amps, kernels)
        res = np.asarray(dirty, dtype=np.float64) - psf_convolve(model, psf, psf_ft)
        res[box] = res_b
        return model, res, n
    amps, res0, n, kernels = _multiscale(dirty, psf, threshold, scales, loop_gain,
                                         max_components, beam_px, mask)
    return _model(amps, kernels), res0, n


def _model(amps, kernels):
    """The model image: sum over scales of the component amplitudes x their kernels."""
    model = amps[0].copy()
    for k in range(1, len(kernels)):
        model += _conv(amps[k], kernels[k])
    return model


def _multiscale(dirty, psf, threshold, scales, loop_gain, max_components, beam_px, mask):
    """The loop of multiscale_clean: (amplitudes per kept scale, point-scale residual,
    components, kernels per kept scale)."""
    ny, nx = dirty.shape
    py, px = psf.shape
    kernels = [None if s == 0 else _kernel(s) for s in scales]   # unit-flux components
    ns = len(scales)
    res = np.empty((ns, ny, nx))
    for k in range(ns):
        res[k] = dirty if kernels[k] is None else _conv(dirty, kernels[k])
    cross = np.empty((ns, ns, py, px))
    for k in range(ns):
        pk = psf if kernels[k] is None else _conv(psf, kernels[k])
        for l in range(ns):
            cross[k, l] = pk if kernels[l] is None else _conv(pk, kernels[l])
    peak = np.array([cross[k, k, py // 2, px // 2] for k in range(ns)])
    # the share of a component's own smoothed response the array measures: a scale the
    # array hardly samples (near or beyond the largest recoverable scale) would get huge
    # amplitudes from small residuals and diverge, so it is left out
    beam = None if not beam_px else _kernel(beam_px) / _kernel(beam_px).max()
    seen = [1.0 if kernels[k] is None or beam is None else
            peak[k] / _conv(_conv(kernels[k], kernels[k]), beam)[kernels[k].shape[0] // 2,
                                                                   kernels[k].shape[1] // 2]
            for k in range(ns)]
    keep = [k for k in range(ns) if k == 0 or seen[k] >= MIN_SAMPLED]
    if len(keep) < ns:
        res, cross, peak = res[keep], cross[np.ix_(keep, keep)], peak[keep]
        scales = [scales[k] for k in keep]
        kernels = [kernels[k] for k in keep]
        ns = len(keep)
    s_max = max(scales) if max(scales) > 0 else 1.0
    # select on the matched-filter figure |R_k| / sqrt(peak_k) (the drop in residual energy a
    # component of optimal amplitude R_k / peak_k would give), times the small-scale bias
    bias = np.array([(1.0 - SCALE_BIAS * s / s_max) / np.sqrt(peak[k] / peak[0])
                     for k, s in enumerate(scales)])
    amps = np.zeros((ns, ny, nx))
    win = np.ones((ny, nx)) if mask is None else np.asarray(mask, dtype=np.float64)
    n, start = 0, float(np.abs(res[0]).max())
    while n < max_components:
        step = min(REFRESH, max_components - n)
        done = _ms_kernel(res, cross, peak, bias, amps, float(loop_gain), float(threshold), step,
                          py // 2, px // 2, win)
        n += done
        if done < step or float(np.abs(res[0]).max()) > 3.0 * start:
            break          # converged, or diverging (a scale the data cannot constrain)
        # the smoothed residuals drift from K_l * R_0 where a component's response runs off
        # the map edge: recompute them from the point-scale residual
        for k in range(1, ns):
            res[k] = _conv(res[0], kernels[k])
    return amps, res[0].copy(), n, kernels
