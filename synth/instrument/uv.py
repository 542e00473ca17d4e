"""uv tracks: (u, v, w) of every baseline over an hour-angle range, with flags.

Geometry from Thompson, Moran & Swenson (2017), *Interferometry and Synthesis in Radio
Astronomy*, 3rd ed., ch. 4 (eqs. 4.1-4.3): local east-north-up (E, N, U) baselines at
geodetic latitude phi are rotated into equatorial components

    X = -sin(phi) N + cos(phi) U,   Y = E,   Z = cos(phi) N + sin(phi) U,

and projected toward a source at hour angle H and declination delta

    u = sin H X + cos H Y
    v = -sin(delta) cos H X + sin(delta) sin H Y + cos(delta) Z
    w = cos(delta) cos H X - cos(delta) sin H Y + sin(delta) Z.

Row order of every (N, 3) array returned here: sample-major, then baseline. Sample k (hour
angle H_k) holds the baselines (i, j), i < j, in lexicographic order (0,1), (0,2), ...,
(1,2), ...; the baseline vector is position_j - position_i. Samples below the elevation limit
and shadowed rows are dropped (``flagged=False`` keeps them).
"""

from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..errors import InstrumentError
from ..sky import C_M_S

__all__ = ["UVTracks", "SIDEREAL_RATE_RAD_S", "sample_hour_angles", "enu_to_xyz", "xyz_to_uvw",
           "elevation", "uv_tracks", "uv_coverage", "largest_scale",
           "synthesized_beam_estimate", "baseline_pairs"]

#: Earth's rotation rate relative to the stars, 7.2921150e-5 rad/s (IERS Conventions 2010).
SIDEREAL_RATE_RAD_S = 7.2921150e-5


@dataclass(frozen=True, eq=False)
class UVTracks:
    """uv tracks in metres with per-row antenna indices and hour angle (rad).

    ``uvw_m`` is (N, 3); ``ant1``/``ant2`` are the antenna indices (ant1 < ant2);
    ``hour_angle_rad`` the sample hour angle; ``sample_time_s`` the integration per row.
    """

    uvw_m: np.ndarray
    ant1: np.ndarray
    ant2: np.ndarray
    hour_angle_rad: np.ndarray
    sample_time_s: float
    declination_rad: float


def baseline_pairs(n):
    """Antenna index pairs (i, j), i < j, in lexicographic order."""
    i, j = np.triu_indices(n, k=1)
    return i, j


def _hour_angle_range(hour_angles):
    ha = u.Quantity(hour_angles)
    if ha.unit.physical_type != "angle" or ha.shape != (2,):
        raise InstrumentError(f"hour_angles={hour_angles!r} must be a pair (start, stop) of angles, "
                              "e.g. (-2, 2) * u.hourangle")
    h0, h1 = ha.to_value(u.rad)
    if not h1 > h0:
        raise InstrumentError(f"hour_angles={hour_angles!r}: stop must be after start")
    return h0, h1


def sample_hour_angles(hour_angles, sample_interval):
    """Hour angles (rad) at the centres of consecutive samples of ``sample_interval``.

    The hour angle advances at the sidereal rate, dH/dt = 7.2921150e-5 rad/s. Returns the
    centres and the sample time in seconds; at least one sample.
    """
    h0, h1 = _hour_angle_range(hour_angles)
    dt_s = u.Quantity(sample_interval).to_value(u.s) if sample_interval is not None else np.nan
    if not dt_s > 0:
        raise InstrumentError(f"sample_interval={sample_interval!r} must be a positive time")
    dh = dt_s * SIDEREAL_RATE_RAD_S
    n = max(int(np.floor((h1 - h0) / dh + 1e-9)), 1)
    return h0 + (np.arange(n) + 0.5) * dh, dt_s


def enu_to_xyz(enu_m, latitude_rad):
    """Local (E, N, U) -> equatorial (X, Y, Z) (TMS 3rd ed., eq. 4.15)."""
    e, n, up = np.asarray(enu_m, dtype=np.float64).T
    sp, cp = np.sin(latitude_rad), np.cos(latitude_rad)
    return np.column_stack([-sp * n + cp * up, e, cp * n + sp * up])


def xyz_to_uvw(xyz_m, hour_angle_rad, declination_rad):
    """Project equatorial baselines (..., 3) onto (u, v, w) (TMS 3rd ed., eq. 4.1)."""
    X, Y, Z = np.moveaxis(np.asarray(xyz_m), -1, 0)
    sh, ch = np.sin(hour_angle_rad), np.cos(hour_angle_rad)
    sd, cd = np.sin(declination_rad), np.cos(declination_rad)
    return np.stack([sh * X + ch * Y,
                     -sd * ch * X + sd * sh * Y + cd * Z,
                     cd * ch * X - cd * sh * Y + sd * Z], axis=-1)


def elevation(hour_angle_rad, declination_rad, latitude_rad):
    """Source elevation (rad): sin el = sin phi sin delta + cos phi cos delta cos H
    (spherical astronomy, e.g. Smart 1977, Textbook on Spherical Astronomy, ch. 2)."""
    s = (np.sin(latitude_rad) * np.sin(declination_rad)
         + np.cos(latitude_rad) * np.cos(declination_rad) * np.cos(hour_angle_rad))
    return np.arcsin(np.clip(s, -1.0, 1.0))


def _shadowed(uvw_m, i, j, diam_m, n_ant):
    """Per-row shadow flags: antenna i (j) is shadowed when the projected separation
    sqrt(u^2 + v^2) < (D_i + D_j)/2 and it lies behind along w (common practice)."""
    uvw = uvw_m.reshape(-1, i.size, 3)
    close = np.hypot(uvw[..., 0], uvw[..., 1]) < 0.5 * (diam_m[i] + diam_m[j])
    behind_i = close & (uvw[..., 2] > 0)          # j is nearer the source: i is blocked
    behind_j = close & (uvw[..., 2] <= 0)
    shadow_ant = np.zeros((uvw.shape[0], n_ant), bool)
    for k in range(uvw.shape[0]):
        shadow_ant[k, i[behind_i[k]]] = True
        shadow_ant[k, j[behind_j[k]]] = True
    return (shadow_ant[:, i] | shadow_ant[:, j]).ravel()


def uv_tracks(arr, declination, hour_angles, sample_interval, flagged=True):
    """uv tracks of ``arr`` (an Array) toward ``declination``.

    Returns a :class:`UVTracks`; see the module docstring for the row order. Raises
    InstrumentError when the source never rises above the array's elevation limit.
    """
    dec_rad = u.Quantity(declination).to_value(u.rad)
    ha, dt_s = sample_hour_angles(hour_angles, sample_interval)
    lat = arr.latitude.to_value(u.rad)
    el = elevation(ha, dec_rad, lat)
    keep = el >= arr.elevation_limit.to_value(u.rad) if flagged else np.ones(ha.size, bool)
    if not keep.any():
        raise InstrumentError(
            f"declination={u.Quantity(declination).to(u.deg):.2f}: the source is never above "
            f"elevation_limit={arr.elevation_limit} at latitude {arr.latitude} during "
            f"hour_angles={u.Quantity(hour_angles)} (max elevation {np.rad2deg(el.max()):.1f} deg)")
    ha = ha[keep]
    i, j = baseline_pairs(arr.n_antennas)
    xyz = enu_to_xyz(arr.positions_m[j] - arr.positions_m[i], lat)
    uvw = xyz_to_uvw(xyz[None, :, :], ha[:, None], dec_rad).reshape(-1, 3)
    ant1, ant2 = np.tile(i, ha.size), np.tile(j, ha.size)
    hrow = np.repeat(ha, i.size)
    if flagged:
        ok = ~_shadowed(uvw, i, j, arr.diameters_m, arr.n_antennas)
        uvw, ant1, ant2, hrow = uvw[ok], ant1[ok], ant2[ok], hrow[ok]
    return UVTracks(uvw, ant1, ant2, hrow, dt_s, dec_rad)


def uv_coverage(arr, declination, hour_angles, sample_interval):
    """(u, v, w) of every unflagged baseline and sample, an (N, 3) Quantity in metres.

    Rows: sample-major, then baselines (i, j), i < j, lexicographic; baseline = pos_j - pos_i;
    samples below the elevation limit and shadowed rows removed (TMS 3rd ed., ch. 4).
    """
    return uv_tracks(arr, declination, hour_angles, sample_interval).uvw_m * u.m


def largest_scale(arr, freq, declination, hour_angles, sample_interval=300 * u.s):
    """Largest recoverable scale theta_LAS = 0.6 lambda / B_min (Wilner & Welch 1994, ApJ 427,
    898), B_min the shortest projected baseline over the track. Returns arcsec."""
    t = uv_tracks(arr, declination, hour_angles, sample_interval)
    b_min_m = np.hypot(t.uvw_m[:, 0], t.uvw_m[:, 1]).min()
    lam_m = (u.Quantity(freq).to(u.m, equivalencies=u.spectral())).value
    return (0.6 * lam_m / b_min_m * u.rad).to(u.arcsec)


def synthesized_beam_estimate(arr, freq, declination, hour_angles, sample_interval=300 * u.s):
    """Natural-weighting synthesized beam estimated from the uv second moments.

    A Gaussian with the PSF's curvature at its peak, PSF(l) ~ 1 - 2 pi^2 <(u.l)^2>, has
    sigma = 1 / (2 pi sqrt(lambda_i)) along each eigen-direction of the moment matrix
    <u u^T> (in wavelengths) (common practice; a curvature match, so an estimate only).
    Returns a radio_beam.Beam.
    """
    from radio_beam import Beam
    t = uv_tracks(arr, declination, hour_angles, sample_interval)
    uv_wl = t.uvw_m[:, :2] * u.Quantity(freq).to_value(u.Hz) / C_M_S
    evals, evecs = np.linalg.eigh(uv_wl.T @ uv_wl / uv_wl.shape[0])
    fwhm = 2 * np.sqrt(2 * np.log(2)) / (2 * np.pi * np.sqrt(evals))   # rad; [major, minor]
    # major axis of the beam lies along the eigenvector of the smallest uv spread
    e_l, e_m = evecs[:, 0]
    pa = np.degrees(np.arctan2(e_l, e_m)) % 180.0
    return Beam(major=fwhm[0] * u.rad, minor=fwhm[1] * u.rad, pa=pa * u.deg)
