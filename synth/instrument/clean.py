"""Högbom CLEAN (Högbom 1974, A&AS 15, 417) on a dirty image with a PSF of twice its size.

Each iteration finds the pixel of largest |residual|, adds ``loop_gain`` times it to the model and
subtracts the shifted, scaled PSF from the whole residual image (finding the next peak in the
same pass). The kernel releases the GIL, so images can be cleaned on several threads. Stops when the peak residual
is below ``threshold`` or after ``max_components`` iterations. Loop gain 0.1 (common practice).
"""

import numpy as np
from numba import njit

__all__ = ["hogbom", "grown_mask"]


@njit(cache=True, nogil=True)
def _argmax_abs(res, win):
    ny, nx = res.shape
    best, by, bx = -1.0, 0, 0
    for y in range(ny):
        for x in range(nx):
            a = abs(res[y, x]) * win[y, x]
            if a > best:
                best, by, bx = a, y, x
    return best, by, bx


@njit(cache=True, nogil=True)
def _hogbom_kernel(res, psf, model, gain, threshold, niter, cy, cx, win):
    """In-place Högbom loop; the search for the next peak (inside the mask ``win``, 1 or 0)
    is fused with the subtraction (one pass over the image per iteration)."""
    ny, nx = res.shape
    best, by, bx = _argmax_abs(res, win)
    it = 0
    while it < niter and best >= threshold:
        amp = gain * res[by, bx]
        model[by, bx] += amp
        oy = cy - by
        ox = cx - bx
        best, nby, nbx = -1.0, 0, 0
        for y in range(ny):
            prow = psf[y + oy]
            for x in range(nx):
                v = res[y, x] - amp * prow[x + ox]
                res[y, x] = v
                a = abs(v) * win[y, x]
                if a > best:
                    best, nby, nbx = a, y, x
        by, bx = nby, nbx
        it += 1
    return it


def hogbom(dirty, psf, threshold, loop_gain=0.1, max_components=10000, mask=None):
    """Högbom CLEAN of ``dirty`` (ny, nx) with ``psf`` (>= 2ny-1, 2nx-1; peak 1 at its
    (shape // 2) pixel); components only where ``mask`` (bool, optional) is True. Returns
    (model, residual, iterations). Inputs are not modified."""
    res = np.array(dirty, dtype=np.float64, order="C")
    model = np.zeros_like(res)
    p = np.ascontiguousarray(psf, dtype=np.float64)
    win = _window(mask, res.shape)
    n = _hogbom_kernel(res, p, model, float(loop_gain), float(threshold), int(max_components),
                       p.shape[0] // 2, p.shape[1] // 2, win)
    return model, res, n


def _window(mask, shape):
    if mask is None:
        return np.ones(shape)
    mask = np.asarray(mask, dtype=bool)
    if mask.shape != shape:
        raise ValueError(f"mask shape {mask.shape} differs from the image {shape}")
    return mask.astype(np.float64)


def grown_mask(dirty, sigma, level, grow_px):
    """A CLEAN mask grown from the dirty image: pixels at or above ``level`` x ``sigma``,
    dilated by ``grow_px`` pixels (a disc; scipy.ndimage.binary_dilation) so the mask
    holds the emission's beam-wide wings."""
    from scipy.ndimage import binary_dilation
    seed = np.asarray(dirty) >= level * sigma
    r = max(0, int(np.ceil(grow_px)))
    if r == 0 or not seed.any():
        return seed
    y, x = np.mgrid[-r:r + 1, -r:r + 1]
    return binary_dilation(seed, structure=(x**2 + y**2) <= r * r)
