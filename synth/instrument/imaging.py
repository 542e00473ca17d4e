"""Imaging helpers: restoring-beam fit, Gaussian restoring kernel, uv-coverage figure.
"""

from functools import lru_cache

import numpy as np
from numba import njit
from scipy.signal import fftconvolve

from ..sky import ARCSEC_PER_RAD, C_M_S

__all__ = ["fit_restoring_beam", "restoring_kernel", "restore", "plot_uv_and_beam",
           "MAIN_LOBE_LEVEL"]

#: The PSF main lobe is the connected region around the peak above this level.
MAIN_LOBE_LEVEL = 0.35
FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))


def _main_lobe(psf):
    from scipy.ndimage import label
    cy, cx = psf.shape[0] // 2, psf.shape[1] // 2
    lab, _ = label(psf > MAIN_LOBE_LEVEL)
    return lab == lab[cy, cx], cy, cx


def fit_restoring_beam(psf, dx_rad, dy_rad):
    """Gaussian fitted to the PSF main lobe (peak 1 at the array centre) -> radio_beam.Beam.

    A least-squares fit of ln PSF = -(a l^2 + 2 b l m + c m^2) over the main-lobe pixels,
    weighted by PSF^2 (the log-linear Gaussian fit; e.g. Caruana 1986 / Guo 2011, IEEE SPM 28,
    134). Axes and position angle (east of north) from the eigenvectors of [[a, b], [b, c]].
    """
    import astropy.units as u
    from radio_beam import Beam
    lobe, cy, cx = _main_lobe(psf)
    if lobe.sum() < 5:
        # under-sampled PSF: fit the positive pixels of the central 3 x 3 instead, and say so
        import warnings
        from ..errors import BeamUndersampledWarning
        warnings.warn(f"the synthesized beam is under-sampled ({int(lobe.sum())} pixel(s) above "
                      f"{MAIN_LOBE_LEVEL} of the peak); the restoring beam is fitted to the "
                      "central 3x3 pixels: use sky pixels <= 1/3 of the beam",
                      BeamUndersampledWarning, stacklevel=3)
        lobe = np.zeros_like(lobe)
        lobe[cy - 1:cy + 2, cx - 1:cx + 2] = psf[cy - 1:cy + 2, cx - 1:cx + 2] > 1e-3
    yy, xx = np.nonzero(lobe)
    l, m = (xx - cx) * dx_rad, (yy - cy) * dy_rad
    val = psf[yy, xx]
    A = np.column_stack([l * l, 2 * l * m, m * m]) * val[:, None]
    a, b, c = np.linalg.lstsq(A, -np.log(val) * val, rcond=None)[0]
    evals, evecs = np.linalg.eigh(np.array([[a, b], [b, c]]))
    evals = np.maximum(evals, 1e-30)
    fwhm = FWHM_PER_SIGMA / np.sqrt(2.0 * evals)     # [major, minor]
    e_l, e_m = evecs[:, 0]
    pa = np.degrees(np.arctan2(e_l, e_m)) % 180.0
    return Beam(major=fwhm[0] * u.rad, minor=fwhm[1] * u.rad, pa=pa * u.deg)


def restoring_kernel(beam, dx_rad, dy_rad, shape=None):
    """Peak-1 Gaussian of ``beam`` on the pixel grid, odd-sized and centred (+-4 FWHM)."""
    import astropy.units as u
    maj = beam.major.to_value(u.rad)
    mnr = beam.minor.to_value(u.rad)
    pa = beam.pa.to_value(u.rad)
    hy = int(np.ceil(4 * maj / abs(dy_rad))) if shape is None else shape[0] // 2
    hx = int(np.ceil(4 * maj / abs(dx_rad))) if shape is None else shape[1] // 2
    m, l = np.meshgrid(np.arange(-hy, hy + 1) * dy_rad, np.arange(-hx, hx + 1) * dx_rad,
                       indexing="ij")
    a = l * np.sin(pa) + m * np.cos(pa)
    b = l * np.cos(pa) - m * np.sin(pa)
    return np.exp(-4.0 * np.log(2.0) * ((a / maj) ** 2 + (b / mnr) ** 2))


def restore(model, residual, beam, dx_rad, dy_rad):
    """Restored image: CLEAN components convolved with the restoring beam + residuals
    (Högbom 1974, A&AS 15, 417). Few components (the usual case) are added one kernel at a
    time; many by an FFT convolution (the same sum, to round-off)."""
    kernel = _kernel_cached(float(beam.major.to_value("rad")), float(beam.minor.to_value("rad")),
                            float(beam.pa.to_value("rad")), float(dx_rad), float(dy_rad))
    ys, xs = np.nonzero(model)
    if ys.size * kernel.size > 32 * model.size:      # an FFT costs some 30 ops per pixel
        return fftconvolve(model, kernel, mode="same") + residual
    out = np.array(residual, dtype=np.float64, order="C")
    _add_kernels(out, ys, xs, np.ascontiguousarray(model[ys, xs], dtype=np.float64), kernel)
    return out


@lru_cache(maxsize=32)
def _kernel_cached(major, minor, pa, dx_rad, dy_rad):
    import astropy.units as u
    from radio_beam import Beam
    k = restoring_kernel(Beam(major=major * u.rad, minor=minor * u.rad, pa=pa * u.rad),
                         dx_rad, dy_rad)
    k.setflags(write=False)
    return k


@njit(cache=True, nogil=True)
def _add_kernels(out, ys, xs, amps, kernel):
    """out[y + i - ky, x + j - kx] += a kernel[i, j] for every component (y, x, a), clipped
    at the edges: the "same"-size convolution of the components with the kernel."""
    ny, nx = out.shape
    hy, hx = kernel.shape[0] // 2, kernel.shape[1] // 2
    for n in range(ys.size):
        y, x, a = ys[n], xs[n], amps[n]
        for i in range(max(0, hy - y), min(kernel.shape[0], ny - y + hy)):
            for j in range(max(0, hx - x), min(kernel.shape[1], nx - x + hx)):
                out[y + i - hy, x + j - hx] += a * kernel[i, j]


def plot_uv_and_beam(arr, declination, hour_angles, sample_interval, path, freq, npix=128):
    """Write a PNG (matplotlib Agg) of the uv coverage (kilo-wavelengths, both Hermitian
    halves) and the natural-weighted synthesized beam (PSF) of ``arr`` at ``freq``.

    The PSF pixel is lambda / (6 B_max); the fitted restoring beam is drawn as an ellipse.
    Returns the path.
    """
    import astropy.units as u
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Ellipse
    from .uv import uv_tracks
    from .visibilities import ImageGeometry, grid_dirty
    nu_hz = u.Quantity(freq).to_value(u.Hz, equivalencies=u.spectral())
    t = uv_tracks(arr, declination, hour_angles, sample_interval)
    uv_kl = t.uvw_m[:, :2] * nu_hz / C_M_S / 1e3
    pix = 1.0 / (6.0 * np.abs(uv_kl).max() * 1e3)
    geom = ImageGeometry(npix, npix, -pix, pix, npix // 2, npix // 2)
    w = np.ones(uv_kl.shape[0])
    psf = grid_dirty(np.ones(w.size, complex), t.uvw_m, nu_hz, w, geom, shape=(npix, npix))
    beam = fit_restoring_beam(psf, -pix, pix)
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4.6))
    ax1.plot(uv_kl[:, 0], uv_kl[:, 1], ",", color="k")
    ax1.plot(-uv_kl[:, 0], -uv_kl[:, 1], ",", color="0.5")
    ax1.set(xlabel="u [kλ]", ylabel="v [kλ]", aspect="equal",
            title=f"{arr.name}: uv coverage at {nu_hz / 1e9:.2f} GHz")
    ax1.invert_xaxis()
    half = npix / 2 * pix * ARCSEC_PER_RAD
    im = ax2.imshow(psf, origin="lower", extent=[half, -half, -half, half], cmap="viridis")
    ax2.add_patch(Ellipse((0, 0), beam.minor.to_value(u.arcsec), beam.major.to_value(u.arcsec),
                          angle=-beam.pa.to_value(u.deg), fill=False, color="w"))
    ax2.set(xlabel="ΔRA [arcsec]", ylabel="ΔDec [arcsec]",
            title=f"synthesized beam {beam.major.to_value(u.arcsec):.2f}\" × "
                  f"{beam.minor.to_value(u.arcsec):.2f}\"")
    fig.colorbar(im, ax=ax2)
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path
