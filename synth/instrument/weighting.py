"""Visibility weighting for imaging: natural, uniform and Briggs robust.

Weights are gridded on the uv cells of the image's FFT grid, cell (du, dv) = (1 / (N_x |dx|),
1 / (N_y |dy|)), counting each visibility and its Hermitian conjugate (-u, -v).

- natural: w_k = 1 / sigma_k^2
- uniform: w_k / W_k, with W_k the summed natural weight in visibility k's cell
- robust (Briggs 1995, PhD thesis, New Mexico Tech, eq. 3.3):
  w_k / (1 + W_k f^2), f^2 = (5 10^-R)^2 / (sum_cells W_c^2 / sum_k w_k).
  R = +2 is close to natural, R = -2 close to uniform.
"""

import numpy as np

from ..errors import InstrumentError
from .primary_beam import C_M_S

__all__ = ["WEIGHTINGS", "cell_density", "imaging_weights", "image_noise_jy"]

WEIGHTINGS = ("natural", "uniform", "robust")


def cell_density(uvw_m, nu_hz, w_nat, geom):
    """Summed natural weight W_k of the uv cell holding each visibility (both Hermitian halves).

    Returns (W_k per visibility, sum over cells of W_c^2).
    """
    du = 1.0 / (geom.npx * abs(geom.dx_rad))
    dv = 1.0 / (geom.npy * abs(geom.dy_rad))
    iu = np.rint(uvw_m[:, 0] * nu_hz / C_M_S / du).astype(np.int64)
    iv = np.rint(uvw_m[:, 1] * nu_hz / C_M_S / dv).astype(np.int64)
    hu, hv = int(np.abs(iu).max()) + 1, int(np.abs(iv).max()) + 1
    key = (iv + hv) * (2 * hu + 1) + (iu + hu)
    conj = (hv - iv) * (2 * hu + 1) + (hu - iu)
    size = (2 * hu + 1) * (2 * hv + 1)
    dens = (np.bincount(key, weights=w_nat, minlength=size)
            + np.bincount(conj, weights=w_nat, minlength=size))
    # each visibility sits in its own cell and, mirrored, in the conjugate cell
    return dens[key], float(np.sum(dens**2))


def imaging_weights(uvw_m, nu_hz, sigma_jy, geom, weighting="natural", robust=0.5):
    """Imaging weight of every visibility for ``weighting`` in WEIGHTINGS (see module doc)."""
    w_nat = 1.0 / np.asarray(sigma_jy, dtype=np.float64) ** 2 * np.ones(uvw_m.shape[0])
    if weighting == "natural":
        return w_nat
    if weighting not in WEIGHTINGS:
        raise InstrumentError(f"weighting={weighting!r} is not known; choose one of {WEIGHTINGS}")
    dens, sum_w2 = cell_density(uvw_m, nu_hz, w_nat, geom)
    if weighting == "uniform":
        return w_nat / dens
    r = float(robust)
    if not -5.0 <= r <= 5.0:
        raise InstrumentError(f"robust={robust!r} must be between -5 and 5 (Briggs 1995)")
    f2 = (5.0 * 10.0 ** (-r)) ** 2 / (sum_w2 / (2.0 * w_nat.sum()))
    return w_nat / (1.0 + dens * f2)


def image_noise_jy(weights, sigma_jy):
    """Dirty-image noise (Jy/beam) for per-visibility noise sigma_k in each of the real and
    imaginary parts: sqrt(sum w_k^2 sigma_k^2) / sum w_k (e.g. Briggs 1995, ch. 3)."""
    w = np.asarray(weights, dtype=np.float64)
    s = np.asarray(sigma_jy, dtype=np.float64) * np.ones_like(w)
    return float(np.sqrt(np.sum(w**2 * s**2)) / np.sum(w))
