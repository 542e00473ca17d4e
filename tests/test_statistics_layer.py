"""The statistics layer (synth.analysis.statistics and its modules) on fields of known
statistics."""

import numpy as np
import pytest
import astropy.units as u
from radio_beam import Beam

from synth.analysis.deltavariance import delta_variance, fit_delta_slope
from synth.analysis.matching import cube_from_array
from synth.analysis.pdfs import powerlaw_tail_fit
from synth.analysis.power import gaussian_random_field
from synth.analysis.statistics import (GROUPS, STATISTICS, TRUE_STATISTICS, measure_statistics,
                                       snapshot_statistics)
from synth.errors import InstrumentError

NU0 = 230.538 * u.GHz
PROFILE = np.exp(-0.5 * ((np.arange(16) - 7.5) / 2.5) ** 2)   # a fixed line profile


def _cube(data, pix=1.0, dv=200.0, beam=None, unit="K"):
    return cube_from_array(data, pixscale=pix * u.arcsec, channel_width=dv * u.m / u.s,
                           restfreq=NU0, unit=unit, beam=beam)


def _map_cube(image, **kw):
    """A cube whose every spectrum has the same shape: moment 0 is ``image`` times a constant."""
    return _cube(PROFILE[:, None, None] * image[None], **kw)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_power_slope_of_a_power_law_field(seed):
    """A Gaussian random field with P(k) ~ k^-3 (spectral synthesis; Peitgen & Saupe 1988,
    ch. 2) as moment 0 of an ideal cube: the fitted slope is -3 within 0.05 (issue 15)."""
    f = gaussian_random_field((512, 512), -3.0, seed=seed)
    st = measure_statistics(_map_cube(f), noise=0 * u.K, statistics=["power"])
    assert set(st) == {"power_slope"}
    assert st["power_slope"].value == pytest.approx(-3.0, abs=0.05)
    assert 0 < st["power_slope"].error < 0.05


@pytest.mark.parametrize("beta", [2.5, 3.0, 3.5])
def test_delta_variance_slope_is_beta_minus_two(beta):
    """Delta-variance of a 2-D field with P(k) ~ k^-beta grows as l^(beta - 2) (Stutzki et al.
    1998, A&A 336, 697, sect. 3); recovered within 0.1 over lags 4-64 pixels of 512^2."""
    f = gaussian_random_field((512, 512), -beta, seed=7)
    lags, s2 = delta_variance(f, np.geomspace(4, 64, 12))
    slope, err, n = fit_delta_slope(lags, s2, (4, 64))
    assert n == 12
    assert slope == pytest.approx(beta - 2.0, abs=0.1)


def test_delta_variance_tolerates_blanks_and_edges():
    """The edge-tolerant weighting (Ossenkopf et al. 2008, A&A 485, 917, sect. 2.2): blanked
    (NaN) pixels act exactly like a map edge (a third of the map blanked gives the Delta-
    variance of the cropped map to 1e-9), and the slope stays within 0.1 of the full map's;
    a white-noise field (beta = 0) gives slope -2 (Stutzki et al. 1998, the same relation)."""
    f = gaussian_random_field((512, 512), -3.0, seed=3)
    blanked = f.copy()
    blanked[:, :170] = np.nan
    lags = np.geomspace(4, 48, 10)
    _, s_full = delta_variance(f, lags)
    _, s_blank = delta_variance(blanked, lags)
    _, s_crop = delta_variance(f[:, 170:], lags)
    assert s_blank == pytest.approx(s_crop, rel=1e-9)
    full = fit_delta_slope(lags, s_full, (4, 48))[0]
    assert fit_delta_slope(lags, s_blank, (4, 48))[0] == pytest.approx(full, abs=0.1)
    white = np.random.default_rng(1).normal(size=(256, 256))
    lags, s2 = delta_variance(white, np.geomspace(4, 32, 8))
    assert fit_delta_slope(lags, s2, (4, 32))[0] == pytest.approx(-2.0, abs=0.1)


def test_delta_variance_of_a_flat_map_with_holes_is_zero():
    """Edges and blanks add no structure (Ossenkopf et al. 2008, sect. 2.2): a constant map
    with a blanked hole and irregular edges has Delta-variance 0 at every lag (to round-off,
    1e-20 of the square of the level), where an unweighted filter sees the edges."""
    img = np.full((96, 128), 5.0)
    img[30:50, 40:70] = np.nan
    img[:10, :20] = np.nan
    _, s2 = delta_variance(img, np.geomspace(2, 40, 8))
    assert np.all(s2 < 25.0 * 1e-20)


def test_lognormal_field_pdf_width():
    """exp(0.6 g), g a unit-variance Gaussian random field: ln(W/<W>) has standard deviation
    0.6 (a log-normal of known sigma_ln); width and log-normal fit within 5 %."""
    g = gaussian_random_field((256, 256), -1.0, seed=4)
    st = measure_statistics(_map_cube(np.exp(0.6 * g)), noise=0 * u.K, statistics=["pdf"])
    assert st["pdf_sigma_ln"].value == pytest.approx(0.6, rel=0.05)
    assert st["pdf_lognormal_sigma"].value == pytest.approx(0.6, rel=0.05)


def test_powerlaw_tail_of_a_pareto_sample():
    """Values drawn from p(x) ~ x^-alpha (alpha = 3) above x = 1: the maximum-likelihood tail
    (Clauset et al. 2009, SIAM Rev. 51, 661, eq. 3.1) gives s = 1 - alpha = -2 within 3 sigma
    of its own error and 5 %."""
    rng = np.random.default_rng(2)
    x = (1.0 - rng.random(20000)) ** (-1.0 / 2.0)          # inverse CDF of the Pareto law
    s, err, xmin, n = powerlaw_tail_fit(x)
    assert s == pytest.approx(-2.0, rel=0.05)
    assert abs(s + 2.0) < 3 * err
    assert n >= 30


def _gauss2d(shape, x0, y0, sigma):
    y, x = np.mgrid[:shape[0], :shape[1]]
    return np.exp(-((x - x0) ** 2 + (y - y0) ** 2) / (2 * sigma**2))


def test_dendrogram_of_two_clumps():
    """Two separated Gaussian clumps (sigma 4 and 6 pixels, peaks 5 and 3): two leaves whose
    peaks equal the clumps' moment-0 peaks and whose second-moment sizes sqrt(sigma_maj
    sigma_min) (Rosolowsky et al. 2008, ApJ 679, 1338, sect. 2.4) equal the clump sigmas within
    5 %. The threshold (0.1 % of the peak) truncates the bijection-paradigm moments by < 1 %."""
    img = 5.0 * _gauss2d((128, 160), 40, 60, 4.0) + 3.0 * _gauss2d((128, 160), 110, 64, 6.0)
    cube = _map_cube(img)
    info = {}
    st = measure_statistics(cube, noise=0 * u.K, statistics=["dendrogram"], info=info,
                            dendrogram={"min_value_sigma": 0.1, "min_delta_sigma": 1.0})
    t = info["structures"]
    leaves = t[t["leaf"]]
    assert st["dendro_leaves"].value == 2 and len(leaves) == 2
    w0 = PROFILE.sum() * 0.2                      # moment 0 of a unit-peak spectrum, K km/s
    leaves.sort("peak")
    assert np.asarray(leaves["peak"]) == pytest.approx([3 * w0, 5 * w0], rel=1e-6)
    assert np.asarray(leaves["sigma_r_pix"]) == pytest.approx([6.0, 4.0], rel=0.05)
    assert np.asarray(leaves["aspect"]) == pytest.approx([1.0, 1.0], abs=0.02)


def test_size_linewidth_slope_half():
    """A synthetic cube of 16 separated clumps of sizes sigma_r = 2-12 pixels with Gaussian
    spectra of sigma_v = 0.3 km/s (sigma_r / 2 px)^0.5 (Larson-like, by construction) and
    noise: the size-linewidth slope is 0.5 +- 0.07 (issue 15)."""
    rng = np.random.default_rng(5)
    sizes = np.geomspace(2.0, 12.0, 16)
    rng.shuffle(sizes)
    nv, dv = 96, 0.05                                   # km/s
    v = (np.arange(nv) - (nv - 1) / 2) * dv
    ny, nx = 4 * 80, 4 * 80
    data = np.zeros((nv, ny, nx))
    for i, s in enumerate(sizes):
        y0, x0 = 40 + 80 * (i // 4), 40 + 80 * (i % 4)
        sv = 0.3 * (s / 2.0) ** 0.5
        spec = np.exp(-0.5 * (v / sv) ** 2)
        data += spec[:, None, None] * _gauss2d((ny, nx), x0, y0, s)[None]
    sigma = 0.02
    data += rng.normal(scale=sigma, size=data.shape)
    cube = _cube(data, dv=dv * 1e3)
    info = {}
    st = measure_statistics(cube, noise=sigma * u.K, statistics=["dendrogram"], info=info)
    slope = st["size_linewidth_slope"]
    assert slope.value == pytest.approx(0.5, abs=0.07)
    assert st["dendro_leaves"].value == 16
    assert 0 < slope.error < 0.07


def test_centroid_statistics_of_a_velocity_gradient():
    """Moment 1 of a cube whose line centre follows a known map v0(x, y) (a Gaussian random
    field of std 0.5 km/s): the centroid std is 0.5 km/s within 2 % (channels of 0.05 km/s
    resolve the line; moment 1 of a Gaussian line is its centre)."""
    f = gaussian_random_field((128, 128), -3.0, seed=9)
    v0 = 0.5 * f
    nv, dv = 120, 0.05
    v = (np.arange(nv) - (nv - 1) / 2) * dv
    data = np.exp(-0.5 * ((v[:, None, None] - v0[None]) / 0.3) ** 2)
    st = measure_statistics(_cube(data, dv=dv * 1e3), noise=0 * u.K, statistics=["centroid"])
    assert st["centroid_std"].value == pytest.approx(0.5, rel=0.02)
    assert st["centroid_hist_sigma"].value == pytest.approx(0.5, rel=0.15)
    assert st["centroid_power_slope"].value == pytest.approx(-3.0, abs=0.15)


def test_all_names_units_and_jy_per_beam():
    """Every statistic of STATISTICS is returned with its unit; a Jy/beam cube converted with
    radio-beam's own jtok (Rayleigh-Jeans) gives the same statistics as the K cube,
    in slopes and widths to 1e-4 (the layer measures in K; the two conversions agree to ~1e-6)."""
    f = np.exp(0.5 * gaussian_random_field((96, 96), -3.0, seed=1))
    v0 = 0.4 * gaussian_random_field((96, 96), -3.0, seed=2)
    v = (np.arange(40) - 19.5) * 0.1
    beam = Beam(4 * u.arcsec)
    k = _cube(f[None] * np.exp(-0.5 * ((v[:, None, None] - v0[None]) / 0.4) ** 2), dv=100.0,
              beam=beam)
    fac = np.array([beam.jtok(fr).to_value(u.K) for fr in k.spectral_axis.to(
        u.Hz, equivalencies=u.doppler_radio(NU0))])
    jyb = _cube(k.unmasked_data[:].value / fac[:, None, None], beam=beam, unit="Jy/beam",
              dv=100.0)
    a = measure_statistics(k, noise=0.01 * u.K)
    b = measure_statistics(jyb, noise=0.01 * u.K)
    assert list(a) == list(STATISTICS)
    for name, (unit, _, _) in STATISTICS.items():
        assert a[name].unit == unit
        if np.isfinite(a[name].value):
            assert b[name].value == pytest.approx(a[name].value, rel=1e-4, abs=1e-9), name


@pytest.mark.parametrize("kw, match", [
    ({"statistics": ["powr"]}, "statistics: .*unknown"),
    ({"dendrogram": {"min_delta": 2}}, "dendrogram: keys"),
    ({"dendrogram": {"min_delta_sigma": -1}}, "dendrogram: .* >= 0"),
    ({"noise": 3 * u.km}, "noise: .* K or Jy/beam"),
    ({"scale_range": (10.0, 5.0)}, "scale_range"),
])
def test_bad_inputs(kw, match):
    cube = _map_cube(np.ones((16, 16)))
    with pytest.raises(InstrumentError, match=match):
        measure_statistics(cube, **kw)


def test_groups_cover_the_names():
    assert {g for _, g, _ in STATISTICS.values()} == set(GROUPS)


def test_snapshot_truths():
    """True values of a snapshot with a log-normal density of known sigma_ln and a velocity
    field of known dispersion: sigma_ln exact, sigma_v_3d = sqrt(3) sigma_1d of equal
    components, c_s = sqrt(k T / (2.33 m_H)) = 0.188 km/s at 10 K (from memory: 0.19 km/s),
    Mach = sigma_3d / c_s, b from Federrath et al. 2008 eq. 1 inverted."""
    from synth.snapshot.core import Snapshot
    rng = np.random.default_rng(3)
    n = 24
    g = rng.normal(size=(n, n, n))
    g = (g - g.mean()) / g.std()
    dens = 1e3 * np.exp(1.2 * g)
    vel = rng.normal(size=(3, n, n, n)) * 1e5           # 1 km/s per component
    snap = Snapshot(n_h2=dens * u.cm**-3, t_kin=np.full((n, n, n), 10.0) * u.K,
                    velocity=vel * u.cm / u.s, cell_size=0.1 * u.pc)
    t = snapshot_statistics(snap)
    assert set(t) == set(TRUE_STATISTICS)
    assert t["density_sigma_ln"].value == pytest.approx(1.2, rel=1e-9)
    w = dens / dens.sum()
    vm = (vel * w).reshape(3, -1).sum(1)
    expect = np.sqrt(sum(((vel[i] - vm[i]) ** 2 * w).sum() for i in range(3))) / 1e5
    assert t["sigma_v_3d"].value == pytest.approx(expect, rel=1e-9)
    assert t["sigma_v_3d"].value == pytest.approx(np.sqrt(3.0), rel=0.05)
    assert t["sigma_v_los"].value == pytest.approx(1.0, rel=0.05)
    assert t["sound_speed"].value == pytest.approx(0.188, rel=0.01)
    mach = t["mach_sonic"].value
    assert mach == pytest.approx(t["sigma_v_3d"].value / t["sound_speed"].value, rel=1e-12)
    b = t["driving_b"].value
    assert np.log(1 + b**2 * mach**2) == pytest.approx(1.2**2, rel=1e-9)
