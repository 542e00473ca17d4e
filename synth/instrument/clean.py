"""Högbom CLEAN (Högbom 1974, A&AS 15, 417) on a dirty image with a PSF of twice its size.

Each iteration finds the pixel of largest |residual|, adds ``gain`` times it to the model and
subtracts the shifted, scaled PSF from the whole residual image. Stops when the peak residual
is below ``threshold`` or after ``niter`` iterations. Loop gain 0.1 (common practice).
"""

import numpy as np
from numba import njit

__all__ = ["hogbom"]


@njit(cache=True)
def _hogbom_kernel(res, psf, model, gain, threshold, niter, cy, cx):
    ny, nx = res.shape
    it = 0
    while it < niter:
        best = 0.0
        by = 0
        bx = 0
        for y in range(ny):
            for x in range(nx):
                a = abs(res[y, x])
                if a > best:
                    best = a
                    by = y
                    bx = x
        if best < threshold:
            break
        amp = gain * res[by, bx]
        model[by, bx] += amp
        oy = cy - by
        ox = cx - bx
        for y in range(ny):
            for x in range(nx):
                res[y, x] -= amp * psf[y + oy, x + ox]
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
