"""Visibilities: prediction with a non-uniform FFT (ducc0 wgridder), thermal noise, sensitivity.

Convention (Thompson, Moran & Swenson 2017, 3rd ed., eq. 3.7, w-term neglected):

    V(u, v) = sum_pixels A(l, m) I(l, m) exp[-2 pi i (u l + v m)],

with I in Jy per pixel, (u, v) in wavelengths, l toward east (increasing RA) and m toward
north. ducc0's gridder (Arras et al. 2021, A&A 646, A58) evaluates this sum to the requested
accuracy (epsilon = 1e-7 here, float64); its image axis 0 is l, axis 1 is m, pixel k at
(k - npix/2) * pixsize + center. Our (y, x) images are transposed to (x, y) and the sign of u
(v) is flipped when CDELT1 (CDELT2) is negative. The w-term is neglected: its phase
pi w (l^2 + m^2) is < 0.01 rad inside the primary beam for the arrays here.
"""

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.constants import k_B

from ..errors import InstrumentError
from ..sky import C_M_S, channel_frequencies_hz as cube_frequencies_hz

__all__ = ["ImageGeometry", "EPSILON", "NTHREADS", "predict", "grid_dirty", "visibility_sigma_jy",
           "add_thermal_noise", "interferometer_rms", "interferometer_time", "check_sampling",
           "cube_geometry", "cube_frequencies_hz", "jy_per_pixel_factor"]

EPSILON = 1e-7
#: threads for prediction (each visibility is computed independently: deterministic) and for
#: gridding (one thread, so that a seeded run gives the same bytes every time)
NTHREADS = 2
NTHREADS_GRID = 1
K_B_SI = k_B.si.value
JY_SI = 1e-26


#: the last uvw array handed to the gridder, with its sign-flipped copy (identity-checked)
_UVW_CACHE = {}


@dataclass(frozen=True)
class ImageGeometry:
    """Pixel grid of a SIN-projected image relative to its phase centre.

    ``dx_rad``/``dy_rad`` are CDELT1/CDELT2 in radians (signed), ``x0``/``y0`` the 0-based
    pixel of the phase centre; ``nx``/``ny`` the image size, ``npx``/``npy`` the even size
    (>= 32) it is padded to at the high-index end for the gridder.
    """

    nx: int
    ny: int
    dx_rad: float
    dy_rad: float
    x0: float
    y0: float

    @property
    def npx(self):
        return max(32, self.nx + self.nx % 2)

    @property
    def npy(self):
        return max(32, self.ny + self.ny % 2)

    def lm(self):
        """(l, m) in radians of every pixel, arrays of shape (ny, nx)."""
        l = (np.arange(self.nx) - self.x0) * self.dx_rad
        m = (np.arange(self.ny) - self.y0) * self.dy_rad
        return np.meshgrid(l, m)

    def ducc_kwargs(self, npx=None, npy=None):
        npx, npy = npx or self.npx, npy or self.npy
        ax, ay = abs(self.dx_rad), abs(self.dy_rad)
        return dict(pixsize_x=ax, pixsize_y=ay, center_x=ax * (npx // 2 - self.x0),
                    center_y=ay * (npy // 2 - self.y0), epsilon=EPSILON, nthreads=NTHREADS)

    def ducc_uvw(self, uvw_m):
        """uvw with u, v signs flipped to match the gridder's pixel axes. The last result is
        kept for the same array (every channel of a pointing uses the same uvw)."""
        signs = (np.sign(self.dx_rad), np.sign(self.dy_rad))
        last = _UVW_CACHE.get("last")
        if last is not None and last[0] is uvw_m and last[1] == signs:
            return last[2]
        out = np.array(uvw_m, dtype=np.float64, order="C")
        out[:, 0] *= signs[0]
        out[:, 1] *= signs[1]
        out.setflags(write=False)
        _UVW_CACHE["last"] = (uvw_m, signs, out)
        return out

    def max_uv_wl(self):
        """Largest |u| and |v| (wavelengths) the grid samples without aliasing: 1/(2 |dx|)."""
        return 0.5 / abs(self.dx_rad), 0.5 / abs(self.dy_rad)


def check_sampling(geom, uvw_m, nu_hz):
    """Raise InstrumentError if the pixel is too coarse for the longest baseline (Nyquist:
    pixel <= 1 / (2 u_max); Bracewell 2000, The Fourier Transform and its Applications)."""
    umax = np.abs(uvw_m[:, :2]).max(axis=0) * nu_hz / C_M_S
    lim = geom.max_uv_wl()
    if umax[0] > lim[0] or umax[1] > lim[1]:
        need = 0.5 / umax.max() * u.rad
        have = max(abs(geom.dx_rad), abs(geom.dy_rad)) * u.rad
        raise InstrumentError(
            f"pixel size {have.to(u.arcsec):.4g} is too coarse for the longest baseline "
            f"({np.abs(uvw_m[:, :2]).max():.0f} m at {nu_hz / 1e9:.3f} GHz): the pixel must be "
            f"<= {need.to(u.arcsec):.4g}; regrid the cube or use a more compact array")


def _padded_xy(image_yx, geom):
    pad = np.zeros((geom.npx, geom.npy))
    pad[:geom.nx, :geom.ny] = np.asarray(image_yx, dtype=np.float64).T
    return pad


def predict(image_jy_pix, uvw_m, nu_hz, geom):
    """Visibilities (Jy, complex, shape (N,)) of an image in Jy/pixel, ordered (y, x)."""
    from ducc0.wgridder.experimental import dirty2vis
    vis = dirty2vis(uvw=geom.ducc_uvw(uvw_m), freq=np.array([float(nu_hz)]),
                    dirty=_padded_xy(image_jy_pix, geom), **geom.ducc_kwargs())
    return vis[:, 0]


def grid_dirty(vis, uvw_m, nu_hz, weights, geom, shape=None):
    """Weighted dirty image sum_k w_k Re[V_k exp(+2 pi i (u l + v m))] / sum_k w_k, (y, x).

    The normalisation makes a 1 Jy point source at the phase centre peak at 1 (Jy/beam).
    ``shape`` = (ny, nx) gives a larger image (even sizes), centred on the phase centre;
    used for the PSF, whose centre is then pixel (ny // 2, nx // 2).
    """
    from ducc0.wgridder.experimental import vis2dirty
    if shape is None:
        npx, npy, g = geom.npx, geom.npy, geom
    else:
        npy, npx = shape
        g = ImageGeometry(npx, npy, geom.dx_rad, geom.dy_rad, npx // 2, npy // 2)
    wsum = float(np.sum(weights))
    img = vis2dirty(uvw=g.ducc_uvw(uvw_m), freq=np.array([float(nu_hz)]),
                    vis=np.ascontiguousarray(vis, dtype=np.complex128)[:, None],
                    wgt=np.ascontiguousarray(weights, dtype=np.float64)[:, None],
                    npix_x=npx, npix_y=npy, **{**g.ducc_kwargs(npx, npy),
                                               "nthreads": NTHREADS_GRID})
    img = img.T / wsum
    return img if shape is not None else img[:geom.ny, :geom.nx]


def visibility_sigma_jy(tsys_k, area1_m2, area2_m2, efficiency, channel_width_hz, time_s,
                        n_pol=2):
    """Noise of a Stokes I visibility, per real and per imaginary part, in Jy:

    sigma = sqrt(2) k T_sys / (eta sqrt(A_i A_j) sqrt(n_pol dnu t))

    (Thompson, Moran & Swenson 2017, 3rd ed., eq. 6.50 per polarisation, averaged over
    n_pol polarisations); eta = system_efficiency x aperture_efficiency (eta_q eta_c eta_a in TMS).
    """
    a = np.sqrt(np.asarray(area1_m2) * np.asarray(area2_m2))
    return (np.sqrt(2.0) * K_B_SI * tsys_k / (efficiency * a
            * np.sqrt(n_pol * channel_width_hz * time_s)) / JY_SI)


def add_thermal_noise(vis, sigma_jy, rng):
    """Add complex Gaussian noise of rms ``sigma_jy`` in each of the real and imaginary parts."""
    z = rng.standard_normal(2 * vis.shape[0]).view(np.complex128)
    return vis + sigma_jy * z


def _positive(name, q, unit):
    try:
        v = u.Quantity(q).to_value(unit)
    except (u.UnitsError, TypeError) as exc:
        raise InstrumentError(f"{name}={q!r} must be a Quantity in {unit} units") from exc
    if not np.all(v > 0):
        raise InstrumentError(f"{name}={q!r} must be > 0")
    return v


def _array_factor(arr, n_pol, tsys_k=None):
    """Point-source noise (Jy) of all baselines combined, for 1 Hz and 1 s: the inverse-variance
    sum of the per-baseline noise (natural weighting), at ``tsys_k`` (default the array's)."""
    n_pol = getattr(arr, "n_pol", 2) if n_pol is None else n_pol
    tsys_k = arr.tsys.to_value(u.K) if tsys_k is None else float(tsys_k)
    i, j = np.triu_indices(arr.n_antennas, k=1)
    area = np.pi * arr.diameters_m**2 / 4
    sig = visibility_sigma_jy(tsys_k, area[i], area[j], arr.total_efficiency,
                              1.0, 1.0, n_pol)
    return 1.0 / np.sqrt(np.sum(1.0 / sig**2))


def interferometer_rms(arr, channel_width, time, n_pol=None, tsys_k=None):
    """Point-source sensitivity of the whole array per channel (natural weighting), in Jy:

    sigma_S = 2 k T_sys / (eta_s eta_a A sqrt(N (N - 1) n_pol dnu t)), eta_s = system_efficiency

    for identical dishes (Thompson, Moran & Swenson 2017, 3rd ed., eq. 6.62); dishes of
    mixed size combine per baseline with A_ij = sqrt(A_i A_j).
    """
    dnu = _positive("channel_width", channel_width, u.Hz)
    t = _positive("time", time, u.s)
    return _array_factor(arr, n_pol, tsys_k) / np.sqrt(dnu * t) * u.Jy


def interferometer_time(arr, channel_width, rms, n_pol=None, tsys_k=None):
    """On-source time for point-source rms ``rms`` per channel: the inverse of
    :func:`interferometer_rms` (t proportional to sigma^-2)."""
    dnu = _positive("channel_width", channel_width, u.Hz)
    s = _positive("rms", rms, u.Jy)
    return (_array_factor(arr, n_pol, tsys_k) / s) ** 2 / dnu * u.s


def cube_geometry(cube):
    """ImageGeometry and phase centre (ra, dec in rad) of a SpectralCube's celestial WCS.

    The phase centre is the WCS reference point (CRVAL); (l, m) are the linear pixel offsets
    times CDELT, exact for SIN and TAN to second order in the field size (Calabretta &
    Greisen 2002, A&A 395, 1077). Rotated or non-SIN/TAN grids are refused.
    """
    w = cube.wcs.celestial
    ctype = [c[-3:] for c in w.wcs.ctype]
    if not w.has_celestial or ctype[0] not in ("SIN", "TAN") or ctype[0] != ctype[1]:
        raise InstrumentError(f"cube celestial WCS ctype={list(w.wcs.ctype)}: the interferometer "
                              "needs RA---SIN/DEC--SIN (or TAN) axes")
    mat = w.pixel_scale_matrix
    if abs(mat[0, 1]) > 1e-12 * abs(mat[0, 0]) or abs(mat[1, 0]) > 1e-12 * abs(mat[1, 1]):
        raise InstrumentError(f"cube pixel grid is rotated (pixel scale matrix {mat.tolist()}); "
                              "regrid it to north-up first")
    if w.wcs.lng != 0:
        raise InstrumentError("cube celestial axes must be ordered (RA, Dec)")
    ny, nx = cube.shape[1:]
    geom = ImageGeometry(nx, ny, np.deg2rad(mat[0, 0]), np.deg2rad(mat[1, 1]),
                         w.wcs.crpix[0] - 1.0, w.wcs.crpix[1] - 1.0)
    return geom, np.deg2rad(w.wcs.crval[0]), np.deg2rad(w.wcs.crval[1])




def jy_per_pixel_factor(cube, nu_hz, geom):
    """Factor turning a channel's values into Jy/pixel, from its unit.

    K (Rayleigh-Jeans brightness temperature): S = 2 k nu^2 T Omega_pix / c^2
    (astropy ``brightness_temperature``; Wilson et al. 2013, eq. 8.19); Jy/beam: times
    Omega_pix / Omega_beam; surface brightness (Jy/sr, ...): times Omega_pix; Jy/pix: 1.
    """
    unit = cube.unit
    omega_pix = abs(geom.dx_rad * geom.dy_rad) * u.sr
    if unit.is_equivalent(u.K):
        return (1.0 * unit).to_value(u.Jy, u.brightness_temperature(nu_hz * u.Hz, omega_pix))
    if unit.is_equivalent(u.Jy / u.beam):
        beam = getattr(cube, "beam", None)
        if beam is None:
            raise InstrumentError("cube unit is Jy/beam but the cube has no beam")
        return (1.0 * unit).to_value(u.Jy / u.beam) * (omega_pix / beam.sr).decompose().value
    if unit.is_equivalent(u.Jy / u.sr):
        return (1.0 * unit * omega_pix).to_value(u.Jy)
    if unit.is_equivalent(u.Jy / u.pix):
        return (1.0 * unit).to_value(u.Jy / u.pix)
    raise InstrumentError(f"cube unit {unit} is not usable; give K, Jy/beam, Jy/sr or Jy/pix")
