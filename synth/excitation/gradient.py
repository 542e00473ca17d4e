"""Sobolev column per velocity of every snapshot cell, from the local velocity gradient.

In the Sobolev (LVG) approximation a line photon escapes once the bulk velocity has shifted
it out of the local line profile, so the optical depth of a cell is

    tau = (c^3 A_ul / (8 pi nu^3)) (n_l g_u/g_l - n_u) / |dv/ds|

(Castor 1970, MNRAS 149, 111; Sobolev 1960), i.e. K = n_mol / |dv/ds| in cm^-3 s multiplies
the fractional population difference. Here:

- |dv/ds| is the root-mean-square over all directions n of the projected gradient
  n_i n_j d v_i / d x_j of the velocity-gradient tensor G_ij = d v_i / d x_j,

      <(n.G.n)^2> = [(tr G)^2 + G_ij G_ij + G_ij G_ji] / 15,

  from the isotropic average <n_i n_j n_k n_l> = (d_ij d_kl + d_ik d_jl + d_il d_jk)/15
  (e.g. Weinberg 1972, "Gravitation and Cosmology", tensor identity; exact for any G).
  For a uniform expansion v = g r it equals g. Derivatives are central differences, one-sided
  (first order) at the box faces; an axis of one cell contributes zero.
- The gradient is floored by dv_FWHM / L_max, with dv_FWHM = sqrt(8 ln 2) sigma_v the local
  FWHM, sigma_v^2 = k T_kin / m + sigma_turb^2 (one-dimensional), and L_max the maximum escape
  length (default: the longest box edge). This caps the Sobolev length at L_max where the gas
  is static (common practice).
"""

import numpy as np
from numba import njit, prange

from ..errors import ExcitationError
from ..radiation import AMU_CGS, K_CGS

__all__ = ["velocity_gradient_norm", "sobolev_column", "FWHM_PER_SIGMA", "GRADIENT_HALO"]

#: Rows of halo a block needs on each side for its velocity gradients (central differences).
GRADIENT_HALO = 1

#: FWHM / sigma of a Gaussian, sqrt(8 ln 2).
FWHM_PER_SIGMA = float(np.sqrt(8.0 * np.log(2.0)))


@njit(inline="always")
def _span(c, n):
    """Neighbour indices for a central difference at c, one-sided at the faces."""
    return max(c - 1, 0), min(c + 1, n - 1)


@njit(parallel=True, cache=True)
def _gradient_norm(vx, vy, vz, dx, i_start, out):
    nx, ny, nz = vx.shape
    for ii in prange(out.shape[0]):
        i = i_start + ii
        i0, i1 = _span(i, nx)
        di = max(i1 - i0, 1)
        for j in range(ny):
            j0, j1 = _span(j, ny)
            dj = max(j1 - j0, 1)
            for k in range(nz):
                k0, k1 = _span(k, nz)
                dk = max(k1 - k0, 1)
                # g_ab = dv_a / dx_b
                g00 = (vx[i1, j, k] - vx[i0, j, k]) / di
                g01 = (vx[i, j1, k] - vx[i, j0, k]) / dj
                g02 = (vx[i, j, k1] - vx[i, j, k0]) / dk
                g10 = (vy[i1, j, k] - vy[i0, j, k]) / di
                g11 = (vy[i, j1, k] - vy[i, j0, k]) / dj
                g12 = (vy[i, j, k1] - vy[i, j, k0]) / dk
                g20 = (vz[i1, j, k] - vz[i0, j, k]) / di
                g21 = (vz[i, j1, k] - vz[i, j0, k]) / dj
                g22 = (vz[i, j, k1] - vz[i, j, k0]) / dk
                tr = g00 + g11 + g22
                s = tr * tr
                # sum over a, b of g_ab^2 + g_ab g_ba, in the order a, then b
                s += g00 * g00 + g00 * g00
                s += g01 * g01 + g01 * g10
                s += g02 * g02 + g02 * g20
                s += g10 * g10 + g10 * g01
                s += g11 * g11 + g11 * g11
                s += g12 * g12 + g12 * g21
                s += g20 * g20 + g20 * g02
                s += g21 * g21 + g21 * g12
                s += g22 * g22 + g22 * g22
                out[ii, j, k] = np.sqrt(s / 15.0) / dx


@njit(parallel=True, cache=True)
def _sobolev(grad, n_h2, abund, t_k, sig2, inv_mass, floor_per_fwhm, out):
    nx, ny, nz = grad.shape
    for i in prange(nx):
        for j in range(ny):
            for k in range(nz):
                fwhm = 2.3548200450309493 * np.sqrt(t_k[i, j, k] * inv_mass + sig2[i, j, k])
                g = max(grad[i, j, k], fwhm * floor_per_fwhm)
                out[i, j, k] = n_h2[i, j, k] * abund[i, j, k] / g


def velocity_gradient_norm(velocity_cms, cell_size_cm, rows=None):
    """Direction-averaged (rms) |dv/ds| per cell, s^-1, float32 (module docstring).

    Parameters
    ----------
    velocity_cms : ndarray (3, nx, ny, nz)
        Velocity components, cm/s.
    cell_size_cm : float
    rows : slice, optional
        Only the x rows ``rows`` (a block read with :data:`GRADIENT_HALO` rows of halo on
        each side that is not a box face: the rows inside get exactly the whole-grid values,
        the central differences reaching into the halo).
    """
    v = np.asarray(velocity_cms)
    if v.ndim != 4 or v.shape[0] != 3:
        raise ExcitationError(f"velocity must have shape (3, nx, ny, nz), got {v.shape}")
    start, stop, _ = (rows or slice(None)).indices(v.shape[1])
    out = np.empty((max(0, stop - start),) + v.shape[2:], dtype=np.float32)
    _gradient_norm(v[0], v[1], v[2], float(cell_size_cm), start, out)
    return out


def _field(value, shape):
    arr = np.asarray(value)
    return np.broadcast_to(arr, shape) if arr.ndim == 0 else arr


def sobolev_column(snapshot, abundance, mass_amu, max_escape_length_cm=None, grad=None,
                   rows=None):
    """K = n_mol / max(|dv/ds|, dv_FWHM / L_max) per cell, cm^-3 s, float32.

    Parameters
    ----------
    snapshot : Snapshot
    abundance : float or ndarray (snapshot shape)
        Species abundance relative to H2.
    mass_amu : float
        Molecular mass for the thermal width.
    max_escape_length_cm : float, optional
        L_max; default the longest box edge.
    grad : ndarray, optional
        Precomputed :func:`velocity_gradient_norm` (of the rows ``rows``).
    rows : slice, optional
        Only these x rows (a block with a one-cell halo, see :func:`velocity_gradient_norm`;
        give ``max_escape_length_cm`` then, the default being this snapshot's longest edge).
    """
    if max_escape_length_cm is None:
        max_escape_length_cm = max(snapshot.shape) * snapshot.cell_size_cm
    rows = rows or slice(None)
    start, stop, _ = rows.indices(snapshot.shape[0])
    shape = (max(0, stop - start),) + tuple(snapshot.shape[1:])
    if not (np.isfinite(max_escape_length_cm) and max_escape_length_cm > 0):
        raise ExcitationError(f"max_escape_length must be a positive length, got "
                              f"{max_escape_length_cm!r} cm")
    if grad is None:
        grad = velocity_gradient_norm(snapshot.velocity_cms, snapshot.cell_size_cm, rows)
    sig = np.asarray(snapshot.sigma_turb_cms, dtype=np.float64)
    sig = sig if sig.ndim == 0 else sig[rows]
    ab = np.asarray(abundance, dtype=np.float64)
    ab = ab if ab.ndim == 0 else ab[rows]
    out = np.empty(shape, dtype=np.float32)
    _sobolev(grad, snapshot.n_h2_cm3[rows], _field(ab, shape), snapshot.t_kin_k[rows],
             _field(sig**2, shape), K_CGS / (mass_amu * AMU_CGS),
             1.0 / float(max_escape_length_cm), out)
    return out
