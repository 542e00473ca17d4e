"""uv tracks, elevation and shadow flags, sensitivity and largest recoverable scale."""

import numpy as np
import pytest
import astropy.units as u
from astropy.coordinates import AltAz, EarthLocation, HADec, ITRS, SkyCoord
from astropy.time import Time

from synth.errors import InstrumentError
from synth.instrument.interferometer import Array
from synth.instrument.uv import (SIDEREAL_RATE_RAD_S, largest_scale,
                                 sample_hour_angles, synthesized_beam_estimate, uv_coverage,
                                 uv_tracks)
from synth.instrument.visibilities import interferometer_rms, interferometer_time


def _itrs_vectors(location, time, frame_coords):
    """Unit vectors (n, 3) in topocentric ITRS of coordinates given in an observed frame."""
    itrs = frame_coords.transform_to(ITRS(obstime=time, location=location))
    return itrs.cartesian.xyz.value.T


def test_uvw_against_astropy_frames():
    """uvw vs an independent computation with astropy (antennas as local AltAz directions
    turned into topocentric ITRS, source direction from HADec at the matching hour angle,
    u, v, w = projections onto east, north and the source): 1e-6 relative (TMS 3rd ed. ch. 4)."""
    lat = 8.0 * u.deg
    arr = Array("star-30", latitude=lat, elevation_limit=0 * u.deg, tsys=90 * u.K)
    dec = -25 * u.deg
    t = uv_tracks(arr, dec, (-3, 3) * u.hourangle, 1800 * u.s, flagged=False)
    loc = EarthLocation.from_geodetic(lon=0 * u.deg, lat=lat, height=0 * u.m)
    time = Time("2020-01-01T00:00:00")
    enu = arr.positions_m
    dist = np.linalg.norm(enu, axis=1)
    ants = SkyCoord(AltAz(az=np.arctan2(enu[:, 0], enu[:, 1]) * u.rad,
                          alt=np.arcsin(enu[:, 2] / dist) * u.rad, distance=dist * u.m,
                          obstime=time, location=loc, pressure=0 * u.hPa))
    ecef = ants.transform_to(ITRS(obstime=time, location=loc)).cartesian.xyz.to_value(u.m).T
    ha = np.unique(t.hour_angle_rad)
    src = _itrs_vectors(loc, time, SkyCoord(HADec(ha=ha * u.rad, dec=np.full(ha.size, dec.value) * u.deg,
                                                  obstime=time, location=loc, pressure=0 * u.hPa)))
    pole = _itrs_vectors(loc, time, SkyCoord(HADec(ha=[0] * u.deg, dec=[90] * u.deg, obstime=time,
                                                   location=loc, pressure=0 * u.hPa)))[0]
    north = (pole[None, :] - (src @ pole)[:, None] * src)
    north /= np.linalg.norm(north, axis=1)[:, None]
    east = np.cross(north, src)
    i, j = np.triu_indices(arr.n_antennas, 1)
    b = ecef[j] - ecef[i]
    ref = np.concatenate([np.column_stack([b @ e, b @ n, b @ s])
                          for e, n, s in zip(east, north, src)])
    scale = np.abs(ref).max()
    np.testing.assert_allclose(t.uvw_m, ref, rtol=0, atol=1e-6 * scale)


def test_row_order_sample_major_baselines_lexicographic():
    """Rows: sample-major, baselines (0,1), (0,2), ... (module docstring); |uvw| of a row equals
    the baseline length (a rotation preserves length)."""
    arr = Array(np.array([[0, 0, 0], [100.0, 0, 0], [0, 50.0, 0]]), elevation_limit=0 * u.deg, tsys=90 * u.K, diameter=10 * u.m)
    t = uv_tracks(arr, -30 * u.deg, (-1, 1) * u.hourangle, 1100 * u.s)
    assert t.uvw_m.shape == (3 * 6, 3)
    np.testing.assert_array_equal(t.ant1[:3], [0, 0, 1])
    np.testing.assert_array_equal(t.ant2[:3], [1, 2, 2])
    lengths = np.linalg.norm(t.uvw_m, axis=1).reshape(6, 3)
    np.testing.assert_allclose(lengths, np.broadcast_to([100.0, 50.0, np.hypot(100, 50)], (6, 3)),
                               rtol=1e-12)
    q = uv_coverage(arr, -30 * u.deg, (-1, 1) * u.hourangle, 1100 * u.s)
    assert q.unit == u.m and q.shape == (18, 3)


def test_sample_count_follows_sidereal_rate():
    """4 h of hour angle at 60 s samples: floor(4 h / (60 s x 7.2921150e-5 rad/s)) samples
    (IERS Conventions 2010 rotation rate)."""
    ha, dt = sample_hour_angles((-2, 2) * u.hourangle, 60 * u.s)
    n = int(np.floor((4 * u.hourangle).to_value(u.rad) / (60 * SIDEREAL_RATE_RAD_S)))
    assert ha.size == n == 239 and dt == 60.0
    assert np.isclose(ha.mean(), (-2 * u.hourangle).to_value(u.rad) + n * 60 * SIDEREAL_RATE_RAD_S / 2)


def test_elevation_limit_flags_match_astropy_altaz():
    """Samples kept are those with astropy AltAz elevation >= the limit (HADec -> AltAz)."""
    arr = Array("compact-16", latitude=8 * u.deg, elevation_limit=40 * u.deg, tsys=90 * u.K)
    ha_all, _ = sample_hour_angles((-6, 6) * u.hourangle, 900 * u.s)
    loc = EarthLocation.from_geodetic(0 * u.deg, 8 * u.deg, 0 * u.m)
    time = Time("2020-01-01T00:00:00")
    alt = SkyCoord(HADec(ha=ha_all * u.rad, dec=np.full(ha_all.size, 10.0) * u.deg, obstime=time,
                         location=loc, pressure=0 * u.hPa)).transform_to(
        AltAz(obstime=time, location=loc, pressure=0 * u.hPa)).alt.deg
    t = uv_tracks(arr, 10 * u.deg, (-6, 6) * u.hourangle, 900 * u.s)
    assert np.unique(t.hour_angle_rad).size == np.sum(alt >= 40.0)


def test_source_never_up_raises():
    arr = Array("ring-24", latitude=8 * u.deg, tsys=90 * u.K)
    with pytest.raises(InstrumentError, match="never above elevation_limit"):
        uv_tracks(arr, -80 * u.deg, (-2, 2) * u.hourangle, 60 * u.s)  # peaks at 2 deg


def test_shadowing_flags_close_pair_at_low_elevation():
    """Two 10 m dishes 15 m apart north-south, source low in the north: the projected
    separation 15 sin(el) m < 10 m, so the rows are flagged (common practice)."""
    arr = Array(np.array([[0, 0, 0], [0, 15.0, 0], [300.0, 0, 0]]), latitude=8 * u.deg,
                         elevation_limit=5 * u.deg, tsys=90 * u.K, diameter=10 * u.m)
    t = uv_tracks(arr, 86 * u.deg, (-0.5, 0.5) * u.hourangle, 550 * u.s)
    # elevation ~ 12 deg: pair (0, 1) projected ~3 m -> shadowed; antenna 1 (north, nearer the
    # source) blocks antenna 0, so all rows with antenna 0 go
    assert not np.any(t.ant1 == 0)
    free = uv_tracks(arr, 8 * u.deg, (-0.5, 0.5) * u.hourangle, 550 * u.s)
    assert free.uvw_m.shape[0] == 3 * 6


@pytest.mark.parametrize("kw, match", [
    (dict(hour_angles=(2, -2) * u.hourangle), "stop must be after start"),
    (dict(hour_angles=2 * u.hourangle), "must be a pair"),
    (dict(sample_interval=-1 * u.s), "positive time"),
])
def test_bad_track_options(kw, match):
    arr = Array("ring-24", tsys=90 * u.K)
    args = dict(hour_angles=(-2, 2) * u.hourangle, sample_interval=60 * u.s)
    args.update(kw)
    with pytest.raises(InstrumentError, match=match):
        uv_tracks(arr, -30 * u.deg, **args)


def test_interferometer_rms_worked_example():
    """Point-source rms of Thompson, Moran & Swenson 2017 (3rd ed.) eq. 6.62,
    sigma = 2 k T_sys / (eta A sqrt(N (N - 1) dnu t n_pol)), evaluated by hand here for an
    invented array: T_sys 100 K, D 10 m, eta_a 0.7, system efficiency 0.9, N 30, 1 MHz,
    60 s, 2 polarisations (17.27 mJy)."""
    n = 30
    enu = np.column_stack([np.arange(n) * 20.0, np.zeros(n), np.zeros(n)])
    arr = Array(enu, tsys=100 * u.K, aperture_efficiency=0.7, diameter=10 * u.m)
    k_b = 1.380649e-23
    area = np.pi * 5.0**2
    expected_jy = 2 * k_b * 100.0 / (0.9 * 0.7 * area * np.sqrt(n * (n - 1) * 1e6 * 60 * 2)) / 1e-26
    rms = interferometer_rms(arr, 1 * u.MHz, 60 * u.s)
    assert rms.unit == u.Jy
    assert rms.to_value(u.Jy) == pytest.approx(expected_jy, rel=1e-9)
    assert rms.to_value(u.mJy) == pytest.approx(17.27, abs=0.01)
    t = interferometer_time(arr, 1 * u.MHz, rms)
    assert t.to_value(u.s) == pytest.approx(60.0, rel=1e-12)


@pytest.mark.parametrize("args, match", [
    ((1e6, 60 * u.s), "channel_width"),
    ((1 * u.MHz, -5 * u.s), "time"),
])
def test_interferometer_rms_bad_input(args, match):
    with pytest.raises(InstrumentError, match=match):
        interferometer_rms(Array("ring-24", tsys=90 * u.K), *args)


def test_largest_scale_east_west_pair():
    """0.6 lambda / B_min (Wilner & Welch 1994): an east-west 30 m baseline has projected
    length 30 sqrt(cos^2 H + sin^2 dec sin^2 H) m (TMS eq. 4.1), shortest at the track end."""
    arr = Array(np.array([[0, 0, 0], [30.0, 0, 0]]), elevation_limit=0 * u.deg, tsys=90 * u.K, diameter=10 * u.m)
    dec = -30 * u.deg
    h_end = np.abs(sample_hour_angles((-2, 2) * u.hourangle, 300 * u.s)[0]).max()
    sd = np.sin(dec.to_value(u.rad))
    b_min = 30 * np.sqrt(np.cos(h_end) ** 2 + sd**2 * np.sin(h_end) ** 2)
    lam = (230 * u.GHz).to_value(u.m, u.spectral())
    las = largest_scale(arr, 230 * u.GHz, dec, (-2, 2) * u.hourangle)
    assert las.to_value(u.rad) == pytest.approx(0.6 * lam / b_min, rel=1e-9)


def test_synthesized_beam_estimate_near_fitted_psf():
    """The curvature estimate of the beam is within 15 % of the Gaussian fitted to the PSF
    main lobe (common practice: both describe the natural-weighted main lobe)."""
    from synth.instrument.imaging import fit_restoring_beam
    from synth.instrument.visibilities import ImageGeometry, grid_dirty
    arr = Array("ring-24", tsys=90 * u.K)
    est = synthesized_beam_estimate(arr, 230 * u.GHz, -30 * u.deg, (-2, 2) * u.hourangle)
    t = uv_tracks(arr, -30 * u.deg, (-2, 2) * u.hourangle, 300 * u.s)
    pix = (0.05 * u.arcsec).to_value(u.rad)
    g = ImageGeometry(128, 128, -pix, pix, 64, 64)
    w = np.ones(t.uvw_m.shape[0])
    psf = grid_dirty(np.ones(w.size, complex), t.uvw_m, 230e9, w, g, shape=(128, 128))
    fit = fit_restoring_beam(psf, -pix, pix)
    assert est.major.to_value(u.arcsec) == pytest.approx(fit.major.to_value(u.arcsec), rel=0.15)
    assert est.minor.to_value(u.arcsec) == pytest.approx(fit.minor.to_value(u.arcsec), rel=0.15)
