"""Högbom CLEAN (Högbom 1974, A&AS 15, 417) on a dirty image with a PSF of twice its size.

Each iteration finds the pixel of largest |residual|, adds ``gain`` times it to the model and
subtracts the shifted, scaled PSF from the whole residual image (finding the next peak in the
same pass). The kernel releases the GIL, so images can be cleaned on several threads. Stops when the peak residual
is below ``threshold`` or after ``niter`` iterations. Loop gain 0.1 (common practice).
"""

import numpy as np
from numba import njit

__all__ = ["hogbom"]


@njit(cache=True, nogil=True)
def _argmax_abs(res):
    ny, nx = res.shape
    best, by, bx = -1.0, 0, 0
    for y in range(ny):
        for x in range(nx):
            a = abs(res[y, x])
            if a > best:
                best, by, bx = a, y, x
    return best, by, bx


@njit(cache=True, nogil=True)
def _hogbom_kernel(res, psf, model, gain, threshold, niter, cy, cx):
    """In-place Högbom loop; the search for the next peak is fused with the subtraction
    (one pass over the image per iteration)."""
    ny, nx = res.shape
    best, by, bx = _argmax_abs(res)
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
                a = abs(v)
                if a > best:
                    best, nby, nbx = a, y, x
        by, bx = nby, nbx
        it += 1
    return it


def hogbom(dirty, psf, threshold, gain=0.1, niter=10000):
    """Högbom CLEAN of ``dirty`` (ny, nx) with ``psf`` (>= 2ny-1, 2nx-1; peak 1 at its
    (shape // 2) pixel). Returns (model, residual, iterations). Inputs are not modified."""
    res = np.array(dirty, dtype=np.float64, order="C")
    model = np.zeros_like(res)
    p = np.ascontiguousarray(psf, dtype=np.float64)
    n = _hogbom_kernel(res, p, model, float(gain), float(threshold), int(niter),
                       p.shape[0] // 2, p.shape[1] // 2)
    return model, res, n
