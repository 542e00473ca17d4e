"""Hierarchical structure: dendrograms of the integrated-intensity map and per-structure
properties, with the size-linewidth relation.

The dendrogram is astrodendro's (Rosolowsky et al. 2008, ApJ 679, 1338, sect. 2) computed on
the moment-0 map, with thresholds that scale with the data:

- ``min_value`` and ``min_delta`` in units of the moment-0 noise (the per-channel rms times
  dv sqrt(N_channels));
- ``min_npix`` in beam areas (pi FWHM_maj FWHM_min / (4 ln 2) over the pixel area).

Why the map and not the PPV cube: astrodendro visits every voxel above ``min_value`` in
Python order (~20-70 microseconds each); on a 512^2 x 128 cube that is ~10^7 voxels and
minutes per realisation, while the map takes seconds. The velocity information enters
through the spectra of each structure's footprint. For the same reason the map is first
block-summed to about ``fwhm_pixels`` (default 2, Nyquist sampling of the beam) pixels per
beam FWHM: the cost then scales with the number of beams, not of pixels, and no structure
smaller than the beam is lost.

Per structure, with the "bijection" paradigm of Rosolowsky et al. (2008, sect. 2.4; the
emission of a structure is everything inside its isocontour, no extrapolation):

- luminosity L = sum W Omega_pix (K km/s arcsec^2);
- the intensity-weighted second-moment (moment-of-inertia) tensor of position; its
  eigenvalues give sigma_maj >= sigma_min, the radius sigma_r = sqrt(sigma_maj sigma_min),
  R = 1.91 sigma_r (their eq. 5 with eta = 1.91 from Solomon et al. 1987, ApJ 319, 730),
  the aspect ratio sigma_maj / sigma_min and the moment of inertia
  I = sum W r^2 Omega_pix = L (sigma_maj^2 + sigma_min^2);
- the linewidth sigma_v: the intensity-weighted velocity dispersion of the masked voxels of
  the footprint (their eq. 2 over the structure's voxels).

The size-linewidth slope is the least-squares slope of ln sigma_v against ln R over all
structures, with its 1-sigma error scaled by the scatter.
"""

from dataclasses import dataclass

import numpy as np
from astropy.table import Table

from .._optional import require

__all__ = ["StructureSet", "dendrogram_structures", "size_linewidth_slope", "spectral_sums",
           "block_sum", "ETA_RADIUS", "DENDRO_DEFAULTS"]

#: R = ETA_RADIUS * sigma_r (Solomon et al. 1987; Rosolowsky et al. 2008, eq. 5)
ETA_RADIUS = 1.91
#: default thresholds: min_value and min_delta in noise units, min_npix in beam areas
#: and fwhm_pixels: the map is block-summed to about this many pixels per beam FWHM first
#: (0: as it is)
DENDRO_DEFAULTS = {"min_value_sigma": 3.0, "min_delta_sigma": 2.0, "min_npix_beams": 1.0,
                   "fwhm_pixels": 2.0}


@dataclass(frozen=True, eq=False)
class StructureSet:
    """Dendrogram structures of one map with their properties (a Table, one row each)."""

    table: Table          # idx, leaf, peak, npix, luminosity, sigma_maj_pix, sigma_min_pix,
                          # sigma_r_pix, radius_pix, aspect, inertia, sigma_v_kms
    settings: dict        # min_value, min_delta (map unit), min_npix (pixels)
    n_leaves: int

    @property
    def n_structures(self):
        return len(self.table)


def spectral_sums(data, mask, v_kms):
    """Per-pixel sums over the masked channels: (sum T, sum T v, sum T v^2), each (y, x);
    what :func:`dendrogram_structures` needs for the linewidths."""
    w = np.where(mask, data, 0.0)
    v = np.asarray(v_kms, dtype=np.float64)[:, None, None]
    s0 = w.sum(axis=0)
    wv = w * v
    return s0, wv.sum(axis=0), (wv * v).sum(axis=0)


def block_sum(image, b):
    """Sum of ``b`` x ``b`` blocks of a 2-D array (edges that do not fill a block dropped)."""
    if b <= 1:
        return image
    ny, nx = (image.shape[0] // b) * b, (image.shape[1] // b) * b
    return image[:ny, :nx].reshape(ny // b, b, nx // b, b).sum(axis=(1, 3))


def dendrogram_structures(mom0, *, min_value, min_delta, min_npix, sums=None, pixel_area=1.0):
    """Dendrogram of ``mom0`` (2-D) and the properties of every structure.

    ``sums`` = :func:`spectral_sums` of the cube gives the linewidths; without it sigma_v is
    NaN. ``pixel_area`` multiplies luminosity and inertia (e.g. arcsec^2 per pixel); sizes
    are in pixels of ``mom0``.
    """
    astrodendro = require("astrodendro")
    img = np.asarray(mom0, dtype=np.float64)
    img = np.where(np.isfinite(img), img, min(float(np.nanmin(img)), 0.0) - 1.0)  # blanks
    d = astrodendro.Dendrogram.compute(img, min_value=float(min_value),
                                       min_delta=float(min_delta), min_npix=int(min_npix))
    names = ("idx", "leaf", "peak", "npix", "luminosity", "sigma_maj_pix", "sigma_min_pix",
             "sigma_r_pix", "radius_pix", "aspect", "inertia", "sigma_v_kms")
    structures = list(d.all_structures)
    settings = {"min_value": float(min_value), "min_delta": float(min_delta),
                "min_npix": int(min_npix)}
    if not structures:
        return StructureSet(table=Table(names=names), n_leaves=0, settings=settings)
    # sums over each structure's own pixels (index_map), then added up the tree: every
    # structure holds its own pixels and those of its descendants ("subtree")
    imap = np.asarray(d.index_map)
    sel = imap >= 0
    lab = imap[sel]
    nlab = int(max(s.idx for s in structures)) + 1
    yy, xx = np.nonzero(sel)
    w = img[sel]
    cols = [np.ones_like(w), w, w * xx, w * yy, w * xx * xx, w * yy * yy, w * xx * yy]
    if sums is not None:
        cols += [np.asarray(c, dtype=np.float64)[sel] for c in sums]
    own = np.array([np.bincount(lab, weights=c, minlength=nlab) for c in cols])
    peak = np.full(nlab, -np.inf)
    np.maximum.at(peak, lab, w)
    tot, top = {}, {}

    def subtree(s):
        if s.idx not in tot:
            acc, pk = own[:, s.idx].copy(), peak[s.idx]
            for c in s.children:
                a, p = subtree(c)
                acc += a
                pk = max(pk, p)
            tot[s.idx], top[s.idx] = acc, pk
        return tot[s.idx], top[s.idx]

    rows = []
    for s in structures:
        a, pk = subtree(s)
        n, sw, sx, sy, sxx, syy, sxy = a[:7]
        xm, ym = sx / sw, sy / sw
        cxx, cyy, cxy = sxx / sw - xm * xm, syy / sw - ym * ym, sxy / sw - xm * ym
        ev = np.linalg.eigvalsh(np.array([[cxx, cxy], [cxy, cyy]]))
        sig_maj, sig_min = np.sqrt(max(ev[1], 0.0)), np.sqrt(max(ev[0], 0.0))
        sig_r = np.sqrt(sig_maj * sig_min)
        lum = float(sw * pixel_area)
        sv = np.nan
        if sums is not None and a[7] > 0:
            vm = a[8] / a[7]
            sv = float(np.sqrt(max(a[9] / a[7] - vm * vm, 0.0)))
        rows.append((s.idx, s.is_leaf, float(pk), int(n), lum, sig_maj, sig_min, sig_r,
                     ETA_RADIUS * sig_r, sig_maj / sig_min if sig_min > 0 else np.inf,
                     lum * (sig_maj**2 + sig_min**2), sv))
    return StructureSet(table=Table(rows=rows, names=names), n_leaves=len(d.leaves),
                        settings=settings)


def size_linewidth_slope(radius, sigma_v, min_radius=0.0):
    """Slope of ln sigma_v against ln R (least squares) and its 1-sigma error (covariance
    scaled by the reduced chi-square of the residuals); structures with R > min_radius and
    finite positive sigma_v. Returns (slope, err, n); NaN with fewer than 3 structures."""
    r = np.asarray(radius, dtype=np.float64)
    s = np.asarray(sigma_v, dtype=np.float64)
    ok = np.isfinite(r) & np.isfinite(s) & (r > max(min_radius, 0.0)) & (s > 0)
    if ok.sum() < 3 or np.ptp(np.log(r[ok])) == 0:
        return np.nan, np.nan, int(ok.sum())
    x, y = np.log(r[ok]), np.log(s[ok])
    coef, cov = np.polyfit(x, y, 1, cov="unscaled")
    var = np.sum((y - np.polyval(coef, x)) ** 2) / max(ok.sum() - 2, 1)
    return float(coef[0]), float(np.sqrt(cov[0, 0] * var)), int(ok.sum())
