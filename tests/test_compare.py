"""Comparison of two cubes on different grids, beams, channels and units (compare)."""

import numpy as np
import pytest
import astropy.units as u
from radio_beam import Beam

from synth.errors import InstrumentError
from synth.analysis.compare import compare
from synth.analysis.matching import cube_from_array
from synth.analysis.stats import structure_statistics

NU0 = 110.2013543 * u.GHz
# invented clumps: (east offset ", north offset ", sigma ", amplitude K, v km/s, dv km/s)
CLUMPS = [(0, 0, 12, 3.0, 0.0, 0.6), (-25, 15, 6, 2.0, 0.8, 0.4), (20, -18, 8, 1.5, -0.7, 0.5),
          (10, 25, 4, 2.5, 0.3, 0.3), (-15, -25, 10, 1.0, -0.2, 0.7)]


def _beam_cov(beam):
    """Covariance (arcsec^2) in (east, north) of a beam with PA east of north."""
    s = 1 / np.sqrt(8 * np.log(2))
    a, b = beam.major.to_value(u.arcsec) * s, beam.minor.to_value(u.arcsec) * s
    pa = beam.pa.to_value(u.rad)
    d, p = np.array([np.sin(pa), np.cos(pa)]), np.array([np.cos(pa), -np.sin(pa)])
    return a**2 * np.outer(d, d) + b**2 * np.outer(p, p)


def _sky(n, pix, v_kms, beam, fine=1):
    """The clumps convolved analytically with ``beam`` (Gaussian covariances add; the unit-sum
    kernel keeps K), sampled on an n x n grid (east = -x) and, with fine > 1, averaged over
    ``fine`` sub-channels per channel."""
    y, x = (np.mgrid[:n, :n] - (n - 1) / 2) * pix
    east, north = -x, y
    out = np.zeros((v_kms.size, n, n))
    for e0, n0, sc, amp, vc, sv in CLUMPS:
        cov = sc**2 * np.eye(2) + _beam_cov(beam)
        inv = np.linalg.inv(cov)
        de, dn = east - e0, north - n0
        img = amp * sc**2 / np.sqrt(np.linalg.det(cov)) * np.exp(
            -0.5 * (inv[0, 0] * de**2 + 2 * inv[0, 1] * de * dn + inv[1, 1] * dn**2))
        out += np.exp(-0.5 * ((v_kms - vc) / sv) ** 2)[:, None, None] * img
    return out


def _freqs(v_kms):
    return NU0.to_value(u.Hz) * (1 - v_kms / 299792.458) * u.Hz


def _make(n, pix, dv_kms, nchan, beam, unit="K"):
    v = (np.arange(nchan) - (nchan - 1) / 2) * dv_kms
    data = _sky(n, pix, v, beam)
    if unit == "Jy/beam":
        fac = np.array([beam.jtok(f).to_value(u.K) for f in _freqs(v)])
        data = data / fac[:, None, None]
    return cube_from_array(data, pixscale=pix * u.arcsec, channel_width=dv_kms * u.km / u.s,
                           v_start=v[0] * u.km / u.s, restfreq=NU0, unit=unit, beam=beam)


def test_compare_matches_prematched_inputs():
    """Cube a: 56^2 pixels of 2.5", 6" beam, K, 0.25 km/s channels; cube b: 96^2 pixels of
    1.5", 8"x5" PA 30 beam, Jy/beam, 0.125 km/s channels. compare reports the unit
    conversion, both convolutions, the regridding and the channel averaging, and its
    statistics equal those of analytically pre-matched cubes (same sky convolved with the
    common beam in closed form, Gaussian covariances adding) within 1 %."""
    a = _make(56, 2.5, 0.25, 12, Beam(6 * u.arcsec))
    b = _make(96, 1.5, 0.125, 24, Beam(8 * u.arcsec, 5 * u.arcsec, 30 * u.deg), "Jy/beam")
    c = compare(a, b, names=("model", "observed"))
    text = " | ".join(c.steps)
    for word in ("converted observed from Jy/beam", "convolved model", "convolved observed",
                 "regridded observed", "averaged observed"):
        assert word in text
    beam = c.beam
    assert beam.major >= 8 * u.arcsec * (1 - 1e-6) and beam.minor >= 6 * u.arcsec * (1 - 1e-6)
    v = (np.arange(12) - 5.5) * 0.25
    vf = (np.arange(24) - 11.5) * 0.125
    pre_a = _sky(56, 2.5, v, beam)
    fine = _sky(56, 2.5, vf, beam)
    pre_b = 0.5 * (fine[0::2] + fine[1::2])
    rng = c.stats["model"].slope_range
    for name, pre in (("model", pre_a), ("observed", pre_b)):
        cube = cube_from_array(pre, pixscale=2.5 * u.arcsec, channel_width=0.25 * u.km / u.s,
                               v_start=v[0] * u.km / u.s, restfreq=NU0, beam=beam)
        ref = structure_statistics(cube, scale_range=rng).as_dict()
        got = c.stats[name].as_dict()
        for key in ("slope", "lognormal_sigma", "flux", "mom0_mean", "mom0_std", "mom2_mean"):
            assert got[key] == pytest.approx(ref[key], rel=0.01), (name, key)
        assert got["mom1_mean"] == pytest.approx(ref["mom1_mean"], abs=0.01)


def test_identical_cubes_need_no_matching():
    """The same cube twice: nothing to match, every statistic's ratio is 1."""
    a = _make(48, 2.0, 0.25, 10, Beam(6 * u.arcsec))
    c = compare(a, a, names=("x", "y"))
    assert c.steps == ("nothing to match: same unit, beam, grid and channels",)
    t = c.table()
    finite = np.isfinite(t["ratio"])
    assert finite.sum() > 8
    assert np.allclose(t["ratio"][finite], 1.0, rtol=1e-12)


def test_beamless_model_is_convolved_to_the_observed_beam():
    """A model without a beam counts as pixel resolution: it is convolved to the observed beam
    and its statistics equal the observed ones (same sky) within 1 %."""
    obs = _make(64, 2.0, 0.25, 10, Beam(6 * u.arcsec))
    v = (np.arange(10) - 4.5) * 0.25
    fine_model = _sky(64, 2.0, v, Beam(1e-3 * u.arcsec))
    model = cube_from_array(fine_model, pixscale=2 * u.arcsec, channel_width=0.25 * u.km / u.s,
                            v_start=v[0] * u.km / u.s, restfreq=NU0)
    c = compare(model, obs, names=("model", "obs"))
    assert any(s.startswith("convolved model from pixel resolution") for s in c.steps)
    sm, so = c.stats["model"].as_dict(), c.stats["obs"].as_dict()
    for key in ("slope", "flux", "mom0_std"):
        assert sm[key] == pytest.approx(so[key], rel=0.01)


@pytest.mark.parametrize("kwargs, match", [
    ({"names": ("a", "a")}, "names"),
    ({"names": ("a",)}, "names"),
])
def test_bad_input(kwargs, match):
    a = _make(32, 2.0, 0.25, 6, Beam(6 * u.arcsec))
    with pytest.raises(InstrumentError, match=match):
        compare(a, a, **kwargs)


def test_no_common_velocity_range():
    a = _make(32, 2.0, 0.25, 6, Beam(6 * u.arcsec))
    v = np.arange(6) * 0.1 + 50.0
    b = cube_from_array(np.ones((6, 32, 32)), pixscale=2 * u.arcsec,
                        channel_width=0.1 * u.km / u.s, v_start=v[0] * u.km / u.s,
                        restfreq=NU0, beam=Beam(6 * u.arcsec))
    with pytest.raises(InstrumentError, match="velocity range"):
        compare(a, b)


def test_structure_figure(tmp_path):
    """The comparison figure is written as a PNG with two panels."""
    from matplotlib.image import imread
    from synth.analysis.plots import structure_figure
    a = _make(48, 2.0, 0.25, 10, Beam(6 * u.arcsec))
    fig = structure_figure(compare(a, a), tmp_path / "s.png")
    assert len(fig.axes) == 2 and imread(tmp_path / "s.png").std() > 0


def test_map_few_beams_across_gives_nan_slope_not_error():
    """A map only ~4 beams across has no scale range for a slope fit: compare still runs and
    reports the slope as NaN (the other statistics are defined); a range the user gives that
    leaves too few bins is still an error."""
    beam = Beam(14 * u.arcsec)
    a = _make(64, 0.8, 0.25, 6, beam)
    c = compare(a, a, names=("x", "y"))
    assert np.isnan(c.stats["x"].slope)
    assert c.stats["x"].lognormal_sigma == pytest.approx(c.stats["y"].lognormal_sigma, rel=1e-12)
    with pytest.raises(InstrumentError, match="leaves .* bins"):
        compare(a, a, scale_range=(20.0, 22.0))


def test_comparison_text_gives_units_and_explains_missing_values():
    """The printed table names each statistic's unit (moment 0 in K km/s, moment 1 in km/s,
    moment 2 in (km/s)^2, shape statistics "none") and explains a slope shown as "-"."""
    from synth.report.comparison import comparison_text
    small = _make(64, 0.8, 0.25, 6, Beam(14 * u.arcsec))
    text = comparison_text(compare(small, small, names=("x", "y")))
    rows = {line.split()[0]: line.split() for line in text.splitlines() if line.strip()}
    assert rows["slope"][1:3] == ["-", "-"]
    assert "-: slope not fitted: the matched map is too small" in text
    assert " ".join(rows["mom0_mean"][4:]) == "K km/s"
    assert rows["mom1_std"][4:] == ["km/s"] and rows["mom2_mean"][4:] == ["(km/s)^2"]
    assert rows["mom0_skew"][4:] == ["none"]
    big = _make(48, 2.0, 0.25, 10, Beam(6 * u.arcsec))
    assert "not fitted" not in comparison_text(compare(big, big, names=("x", "y")))
