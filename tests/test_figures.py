"""Figures an astronomer reads at a glance, tested on the figure data (artists and arrays),
not on pixels: offset-arcsec axes and the beam ellipse on moment maps, observed moment 1
masked below MOM1_NSIGMA in moment 0, symmetric diverging limits where moment 0 dips below
zero, spectra with titles and y labels, log axes with more than one tick label."""

import numpy as np
import pytest
import astropy.units as u
from astropy.convolution import convolve_fft
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.patches import Ellipse
from radio_beam import Beam

from synth.analysis.matching import cube_from_array
from synth.analysis.plots import (MOM1_NSIGMA, line_moment0, moment_figure, recovery_figure,
                                  spectra_figure, structure_figure)
from synth.analysis.survival import assess

N, PIX, DV_MS, SIGMA = 64, 1.0, 200.0, 0.05
PROFILE = np.array([0.2, 0.5, 1.0, 0.5, 0.2])
BEAM = Beam(4 * u.arcsec, 3 * u.arcsec, 30 * u.deg)


def _gauss(theta):
    y, x = np.mgrid[:N, :N] - N / 2
    return np.exp(-4 * np.log(2) * (x**2 + y**2) / theta**2)


def _cube(data, beam=None):
    return cube_from_array(data, pixscale=PIX * u.arcsec, channel_width=DV_MS * u.m / u.s,
                           restfreq=230.538 * u.GHz, unit="K", beam=beam)


def _case(bowl):
    """An invented clump convolved with BEAM plus noise, optionally minus a broad component
    (the negative bowl an interferometer leaves around extended emission)."""
    ideal = PROFILE[:, None, None] * 4.0 * _gauss(14.0)
    kernel = BEAM.as_kernel(PIX * u.arcsec, x_size=41, y_size=41)
    obs = np.stack([convolve_fft(p, kernel, boundary="fill", normalize_kernel=True)
                    for p in ideal])
    obs = obs - bowl * PROFILE[:, None, None] * _gauss(60.0)
    obs = obs + SIGMA * np.random.default_rng(5).normal(size=obs.shape)
    observed = _cube(obs, BEAM)
    return assess(_cube(ideal), observed, noise=SIGMA * u.K), observed, obs


def _axes(fig):
    maps = [ax for ax in fig.axes if ax.images and ax.get_label() != "<colorbar>"]
    return {ax.get_title().split(" (")[0]: ax for ax in maps}


@pytest.fixture(scope="module")
def bowl_case():
    return _case(1.0)


def test_moment_maps_in_offset_arcsec_with_the_beam(bowl_case):
    """Every map panel spans +-N PIX / 2 arcsec (east to the left) and carries an Ellipse of
    the beam's FWHM (minor x major, PA 30 deg east of north drawn as -30 in data angle)."""
    m, observed, _ = bowl_case
    fig = moment_figure(m, observed=observed)
    axes = _axes(fig)
    assert set(axes) == {"ideal moment 0", "observed moment 0", "ideal moment 1",
                         "observed moment 1"}
    for ax in axes.values():
        assert list(ax.images[0].get_extent()) == pytest.approx([N / 2, -N / 2, -N / 2, N / 2])
        assert ax.get_xlabel() == "RA offset (arcsec)" and ax.get_ylabel() == "Dec offset (arcsec)"
        beams = [p for p in ax.patches if isinstance(p, Ellipse)]
        assert len(beams) == 1
        assert (beams[0].width, beams[0].height, beams[0].angle) == pytest.approx((3, 4, -30))


def test_observed_moment1_is_masked_below_n_sigma_of_moment0(bowl_case):
    """Observed moment 1 is NaN exactly where the line-channel moment 0 is below
    MOM1_NSIGMA (3) x sigma_0, sigma_0 = rms x dv x sqrt(line channels), and equals the
    survival's moment 1 elsewhere."""
    m, observed, obs = bowl_case
    assert MOM1_NSIGMA == 3.0
    fig = moment_figure(m, observed=observed)
    shown = np.ma.filled(_axes(fig)["observed moment 1"].images[0].get_array().astype(float),
                         np.nan)
    dv = DV_MS / 1e3
    line = PROFILE > 0      # the reference emits in every channel of this case
    mom0 = obs[line].sum(axis=0) * dv
    sigma0 = SIGMA * dv * np.sqrt(line.sum())
    low = mom0 < 3 * sigma0
    assert low.any() and (~low).any()
    assert np.isnan(shown[low]).all()
    mom1 = m.observed_moments.mom1.value
    keep = ~low & np.isfinite(mom1)
    assert keep.sum() > 100
    np.testing.assert_allclose(shown[keep], mom1[keep])
    got0, got_sigma = line_moment0(obs, line, dv, SIGMA)
    np.testing.assert_allclose(got0, mom0)
    assert got_sigma == pytest.approx(sigma0)


def test_negative_bowls_get_symmetric_diverging_limits(bowl_case):
    """With a negative bowl the observed moment 0 has pixels < 0, shown on a diverging map
    with vmin = -vmax (both moment-0 panels); without one, a sequential map from 0."""
    m, observed, _ = bowl_case
    axes = _axes(moment_figure(m, observed=observed))
    for name in ("ideal moment 0", "observed moment 0"):
        im = axes[name].images[0]
        lo, hi = im.get_clim()
        assert lo == -hi and hi > 0 and im.get_cmap().name == "RdBu_r"
    assert np.nanmin(axes["observed moment 0"].images[0].get_array()) < 0
    m2, observed2, _ = _case(0.0)
    im = _axes(moment_figure(m2, observed=observed2))["observed moment 0"].images[0]
    assert im.get_clim()[0] == 0 and im.get_cmap().name == "viridis"


def test_spectra_have_a_title_and_y_labels(bowl_case):
    _, observed, _ = bowl_case
    fig = spectra_figure(observed, observed, [(32, 32), (20, 40)], title="invented line")
    assert fig.get_suptitle() == "invented line"
    for ax in fig.axes:
        assert ax.get_ylabel() == "T_B (K)" and ax.get_title()


def _labels(ax, which):
    """Non-empty major tick labels inside the view limits after drawing."""
    FigureCanvasAgg(ax.figure).draw()
    axis = ax.xaxis if which == "x" else ax.yaxis
    lo, hi = sorted(ax.get_xlim() if which == "x" else ax.get_ylim())
    return [t.get_text() for t in axis.get_majorticklabels()
            if t.get_text() and lo <= t.get_position()[0 if which == "x" else 1] <= hi]


def test_log_axes_show_more_than_one_label(bowl_case):
    """The recovery figure's scale axis (here less than a decade) and the structure
    figure's log axes each label at least two ticks."""
    m, _, _ = bowl_case
    rec = recovery_figure({"a": m})
    assert len(_labels(rec.axes[0], "x")) >= 2, _labels(rec.axes[0], "x")
    from synth.analysis.compare import compare
    big = _cube(PROFILE[:, None, None] * np.exp(np.random.default_rng(2).normal(
        size=(N, N)) * 0.3)[None], Beam(2 * u.arcsec))
    st = structure_figure(compare(big, big, names=("p", "q")))
    a1, a2 = st.axes[:2]
    assert len(_labels(a1, "x")) >= 2 and len(_labels(a1, "y")) >= 2
    assert len(_labels(a2, "y")) >= 2


def test_compare_moment_maps_in_arcsec_with_the_common_beam():
    """synth compare's moment-0 figure: offset arcsec axes and the common beam's ellipse."""
    from synth.analysis.compare import compare
    from synth.report.comparison import _moment0_figure
    a = _cube(PROFILE[:, None, None] * _gauss(20.0), Beam(3 * u.arcsec))
    b = _cube(PROFILE[:, None, None] * _gauss(20.0), Beam(5 * u.arcsec))
    fig = _moment0_figure(compare(a, b, names=("a", "b")))
    for ax in [ax for ax in fig.axes if ax.images and ax.get_label() != "<colorbar>"]:
        assert ax.get_xlabel() == "RA offset (arcsec)"
        (beam,) = [p for p in ax.patches if isinstance(p, Ellipse)]
        assert (beam.width, beam.height) == pytest.approx((5, 5))


def test_moment0_noise_is_measured_per_pixel_from_line_free_channels():
    """A corrected mosaic is noisier at its edges: with 40 line-free channels the moment-0
    noise is the per-pixel rms over them x dv x sqrt(N_line) (independent channels), so a
    half of the map with twice the noise gets twice the sigma (within 10 %, the scatter of an
    rms over 40 Gaussian samples averaged over 32 rows)."""
    rng = np.random.default_rng(4)
    sig = np.ones((32, 64))
    sig[:, 32:] = 2.0
    data = rng.normal(size=(60, 32, 64)) * sig
    line = np.zeros(60, bool)
    line[25:35] = True
    _, sigma = line_moment0(data, line, 0.5, noise=1.0)
    expect = 0.5 * np.sqrt(10) * sig
    assert np.median(sigma[:, :32] / expect[:, :32]) == pytest.approx(1.0, rel=0.1)
    assert np.median(sigma[:, 32:] / expect[:, 32:]) == pytest.approx(1.0, rel=0.1)
    few = np.zeros(60, bool)
    few[3:] = True                      # 3 line-free channels: the cube's one rms
    assert line_moment0(data, few, 0.5, noise=1.0)[1] == pytest.approx(0.5 * np.sqrt(57))


def test_moment0_noise_follows_a_given_noise_map():
    """With too few line-free channels, a given map of the rms per channel (an observation's
    sensitivity map) sets the moment-0 noise pixel by pixel: sigma = rms x dv x sqrt(N)."""
    noise = np.ones((8, 10))
    noise[:, 5:] = 3.0
    data = np.zeros((12, 8, 10))
    line = np.ones(12, bool)
    line[:2] = False
    _, sigma = line_moment0(data, line, 0.25, noise=noise)
    np.testing.assert_allclose(sigma, noise * 0.25 * np.sqrt(10))
