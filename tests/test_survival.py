"""Survival metrics (synth.analysis.survival.assess) and the survival matrix."""

import json
import pickle

import numpy as np
import pytest
import astropy.units as u
from astropy.convolution import convolve_fft
from radio_beam import Beam
from scipy.stats import norm

from synth.errors import InstrumentError
from synth.analysis.matching import cube_from_array
from synth.analysis.power import radial_bins
from synth.analysis.survival import assess, matrix_csv, matrix_json_rows, survival_matrix

N, PIX, NU0 = 128, 1.0, 230.538 * u.GHz
DV = 200.0                                            # m/s
PROFILE = np.array([0.5, 1.0, 0.3])


def _gauss(theta, x0=0.0, y0=0.0, n=N):
    y, x = np.mgrid[:n, :n] - n / 2
    return np.exp(-4 * np.log(2) * ((x - x0) ** 2 + (y - y0) ** 2) / theta**2)


def _cube(data, unit="K", beam=None, dv=DV):
    return cube_from_array(data, pixscale=PIX * u.arcsec, channel_width=dv * u.m / u.s,
                           restfreq=NU0, unit=unit, beam=beam)


def _chan_freq(nchan, dv=DV):
    v = (np.arange(nchan) - (nchan - 1) / 2) * dv
    return NU0.to_value(u.Hz) * (1 - v / 299792458.0) * u.Hz


def _to_jyb(data_k, beam, dv=DV):
    """K -> Jy/beam per channel with radio-beam's own jtok (an independent conversion)."""
    fac = np.array([beam.jtok(f).to_value(u.K) for f in _chan_freq(data_k.shape[0], dv)])
    return data_k / fac[:, None, None]


def _ideal(theta=12.0, amp=4.0):
    return PROFILE[:, None, None] * amp * _gauss(theta)


def test_identical_cubes():
    """Identical cubes (no beam): fidelity infinite, recovery 1 at all scales, flux fraction
    and moment correlations 1 (definitions: Pety et al. 2001 fidelity; docs/analysis.md)."""
    c = _cube(_ideal())
    m = assess(c, c)
    assert m.fidelity == np.inf and m.fidelity_mom0 == np.inf
    assert np.allclose(m.recovery["recovered_fraction"], 1.0, rtol=1e-12)
    assert np.allclose(m.recovery["amplitude_transfer"], 1.0, rtol=1e-12)
    assert m.flux_fraction == pytest.approx(1.0, rel=1e-12)
    assert m.moment_correlation["mom0"] == pytest.approx(1.0, abs=1e-12)
    assert m.moment_correlation["mom1"] == pytest.approx(1.0, abs=1e-9)
    assert m.half_recovery_bounded is False


@pytest.mark.parametrize("factor", [0.8, 0.3, 1.5])
def test_known_factor_in_jy_per_beam(factor):
    """Observed = factor x (ideal convolved with the beam), in Jy/beam via radio-beam's jtok,
    ideal in K without a beam: flux fraction = factor, power ratio = factor^2, amplitude
    transfer = factor, fidelity = 1 / |1 - factor| (Pety et al. 2001 definition)."""
    beam = Beam(4 * u.arcsec)
    kernel = beam.as_kernel(PIX * u.arcsec, x_size=63, y_size=63)
    ideal = _ideal()
    conv = np.stack([convolve_fft(p, kernel, boundary="fill", normalize_kernel=True)
                     for p in ideal])
    obs = _cube(_to_jyb(factor * conv, beam), unit="Jy/beam", beam=beam)
    m = assess(_cube(ideal), obs)
    rel = m.recovery[m.recovery["reliable"]]
    assert m.flux_fraction == pytest.approx(factor, rel=1e-4)
    assert np.allclose(rel["recovered_fraction"], factor**2, rtol=1e-3)
    assert np.allclose(rel["amplitude_transfer"], factor, rtol=1e-3)
    assert m.fidelity == pytest.approx(1 / abs(1 - factor), rel=1e-2)
    assert m.unit == "Jy/beam" and any("Jy/beam" in s for s in m.notes)


def test_elliptical_beam_orientation_matches_radio_beam_kernel():
    """An elliptical, rotated beam: the reference made by assess equals the convolution with
    radio-beam's own kernel (as_kernel, PA east of north), so recovery is 1 within 0.5 % and
    the median fidelity is high."""
    beam = Beam(6 * u.arcsec, 3 * u.arcsec, 35 * u.deg)
    kernel = beam.as_kernel(PIX * u.arcsec, x_size=63, y_size=63)
    ideal = PROFILE[:, None, None] * (_gauss(5.0, 10, 5) + 0.5 * _gauss(3.0, -12, 8))
    conv = np.stack([convolve_fft(p, kernel, boundary="fill", normalize_kernel=True)
                     for p in ideal])
    m = assess(_cube(ideal), _cube(conv, beam=beam))
    rel = m.recovery[m.recovery["reliable"] & (m.recovery["reference_power"] > 1e-2)]
    assert np.allclose(rel["recovered_fraction"], 1.0, atol=5e-3)
    assert m.fidelity > 100


def _uv_sampling(n, pix, seed=3):
    """Invented uv tracks (baselines rotating over 6 h, declination -30 deg), gridded onto the
    FFT cells with Hermitian symmetry: a known sampling function S(k) of 0/1."""
    rng = np.random.default_rng(seed)
    length = rng.uniform(2.0e3, 5.0e4, 40)           # wavelengths
    angle0 = rng.uniform(0, np.pi, 40)
    h = np.linspace(-np.pi / 4, np.pi / 4, 40)
    u_l = (length[:, None] * np.cos(angle0[:, None] + h)).ravel()
    v_l = (length[:, None] * np.sin(angle0[:, None] + h) * np.sin(np.radians(30))).ravel()
    cell = 1.0 / (n * pix)                            # cycles per arcsec per FFT cell
    iu = np.round(u_l / 206264.806 / cell).astype(int)
    iv = np.round(v_l / 206264.806 / cell).astype(int)
    s = np.zeros((n, n))
    s[iv % n, iu % n] = 1.0
    s[-iv % n, -iu % n] = 1.0
    return s


def test_recovery_through_known_uv_coverage_matches_visibility_formula():
    """A Gaussian source of FWHM theta through a known uv sampling S and a round restoring
    beam: per-scale recovery equals sum S |V|^2 |B|^2 / sum |V|^2 |B|^2 over each annulus,
    V(q) = exp(-(pi theta q)^2 / (4 ln 2)) (analytic visibility of a Gaussian;
    Thompson, Moran & Swenson 2017 ch. 4), within 2 %."""
    theta, fwhm_b = 12.0, 5.0
    beam = Beam(fwhm_b * u.arcsec)
    s = _uv_sampling(N, PIX)
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(N, PIX), np.fft.fftfreq(N, PIX)))
    b_tf = np.exp(-(np.pi * fwhm_b * kk) ** 2 / (4 * np.log(2)))
    ideal = _ideal(theta)
    obs_k = np.fft.ifft2(np.fft.fft2(ideal) * s * b_tf).real
    m = assess(_cube(ideal), _cube(_to_jyb(obs_k, beam), unit="Jy/beam", beam=beam))
    v2b2 = np.exp(-2 * (np.pi * kk) ** 2 * (theta**2 + fwhm_b**2) / (4 * np.log(2)))
    index, edges = radial_bins((N, N), PIX)
    expect = np.array([np.sum((s * v2b2)[index == b]) / np.sum(v2b2[index == b])
                       for b in range(edges.size - 1) if np.any(index == b)])
    t = m.recovery
    rel = np.asarray(t["reliable"])
    got = np.asarray(t["recovered_fraction"])
    big = rel & (expect >= 0.1)
    assert big.sum() >= 4
    assert np.allclose(got[big], expect[big], rtol=0.02)
    assert np.all(np.abs(got[rel & ~big] - expect[rel & ~big]) <= 0.002 + 0.02 * expect[rel & ~big])
    chan = np.asarray(t["channel_fraction"])          # same sky in every channel
    assert np.allclose(chan[rel], got[rel, None], rtol=1e-6)


def test_half_recovery_scale_of_a_high_pass_filter():
    """A high-pass filter W(k) = 1 - exp(-(k/k0)^2) has power ratio W^2 = 1/2 at
    k = k0 sqrt(-ln(1 - 2^-1/2)) (analytic), so the half-recovery scale is 1/k within 5 %."""
    k0 = 1 / 20.0
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(N, PIX), np.fft.fftfreq(N, PIX)))
    ideal = PROFILE[:, None, None] * (_gauss(30.0) + 0.3 * _gauss(4.0, 20, -10))
    obs = np.fft.ifft2(np.fft.fft2(ideal) * (1 - np.exp(-(kk / k0) ** 2))).real
    m = assess(_cube(ideal), _cube(obs))
    expect = 1 / (k0 * np.sqrt(-np.log(1 - 2**-0.5)))
    assert m.half_recovery_scale.to_value(u.arcsec) == pytest.approx(expect, rel=0.05)
    assert m.half_recovery_bounded
    assert m.flux_fraction == pytest.approx(0.0, abs=1e-6)


def test_noise_snr_and_detected_fraction():
    """White noise of sigma 0.05 K on the beam-convolved ideal: the robust noise estimate is
    within 5 % (faint extended emission biases it slightly high); with the noise given, the
    detected fraction of emitting voxels equals the expectation
    mean Phi((M - 3 sigma) / sigma) over them (Gaussian noise) within 0.02."""
    beam, sigma = Beam(4 * u.arcsec), 0.05
    ideal = _ideal(20.0)
    kernel = beam.as_kernel(PIX * u.arcsec, x_size=63, y_size=63)
    conv = np.stack([convolve_fft(p, kernel, boundary="fill", normalize_kernel=True)
                     for p in ideal])
    obs = conv + sigma * np.random.default_rng(11).normal(size=conv.shape)
    m = assess(_cube(ideal), _cube(obs, beam=beam))
    assert m.noise.to_value(u.K) == pytest.approx(sigma, rel=0.05)
    m = assess(_cube(ideal), _cube(obs, beam=beam), noise=sigma * u.K)
    assert m.peak_snr == pytest.approx(obs.max() / sigma, rel=1e-12)
    emitting = conv >= 0.01 * conv.max()
    expect = norm.cdf((conv[emitting] - 3 * sigma) / sigma).mean()
    assert m.fraction_above_3sigma == pytest.approx(expect, abs=0.02)


def test_finer_ideal_channels_are_resampled():
    """An ideal cube with channels half as wide is averaged onto the observed channels
    (overlap average conserves sum T dv): observed = mean of channel pairs gives recovery 1."""
    fine = np.exp(-0.5 * ((np.arange(12) - 5.5) / 2.0) ** 2)[:, None, None] * _gauss(10.0)
    coarse = 0.5 * (fine[0::2] + fine[1::2])
    m = assess(_cube(fine, dv=100.0), _cube(coarse, dv=200.0))
    assert np.allclose(m.recovery["recovered_fraction"], 1.0, rtol=1e-9)
    assert m.flux_fraction == pytest.approx(1.0, rel=1e-9)
    assert any("resampled" in s for s in m.notes)


def test_flux_inside_primary_beam():
    """Flux fraction inside the primary-beam half-power circle: a source 40" out, missing from
    the observation, lowers the total to S1 / (S1 + S2) (Gaussian flux ~ a theta^2) but not the
    fraction inside a 30" primary beam."""
    one = _gauss(6.0)
    two = 2.0 * _gauss(8.0, 40, 0)
    ideal = PROFILE[:, None, None] * (one + two)
    obs = PROFILE[:, None, None] * one
    m = assess(_cube(ideal), _cube(obs), primary_beam=30 * u.arcsec)
    assert m.flux_fraction == pytest.approx(36 / (36 + 2 * 64), rel=1e-4)
    assert m.flux_fraction_pb == pytest.approx(1.0, abs=1e-6)


def test_survival_matrix_rows_csv_json_and_pickle():
    """Contract: rows carry the scalar metrics and the survives rule; CSV and JSON are
    well-formed (non-finite values become null); Survival pickles."""
    c = _cube(_ideal())
    good = assess(c, c)
    weak = assess(c, _cube(0.2 * _ideal()))
    rows = survival_matrix({("CO 2-1", "dish"): good, ("CO 2-1", "ring"): weak})
    assert [r["survives"] for r in rows] == [True, False]
    assert rows[1]["flux_fraction"] == pytest.approx(0.2, rel=1e-9)
    text = matrix_csv(rows)
    assert text.count("\n") == 3 and text.startswith("tracer,setup,flux_fraction")
    decoded = json.loads(json.dumps(matrix_json_rows(rows), allow_nan=False))
    assert decoded[0]["fidelity_median"] is None
    back = pickle.loads(pickle.dumps(good))
    assert back.flux_fraction == good.flux_fraction


def test_ideal_on_a_smaller_grid_is_put_on_the_observed_one():
    """An ideal cube that covers only the centre of the observed map (same pixels, same
    reference point, as observe's guard band or mosaic margin makes) is padded with blank sky
    onto the observed grid: the same emission gives a flux fraction of 1 (to 1e-12), and the
    note says so."""
    big = np.zeros((PROFILE.size, 192, 192))
    big[:, 32:160, 32:160] = _ideal()
    ideal, observed = _cube(_ideal()), _cube(big)
    m = assess(ideal, observed)
    assert m.flux_fraction == pytest.approx(1.0, rel=1e-12)
    assert any("observed grid" in n for n in m.notes)


def test_inputs_not_mutated():
    """Contract: assess leaves both cubes' data unchanged."""
    a, b = _cube(_ideal()), _cube(0.5 * _ideal())
    before = b.unmasked_data[:].value.copy()
    assess(a, b)
    assert np.array_equal(b.unmasked_data[:].value, before)


@pytest.mark.parametrize("make, kwargs, match", [
    (lambda: (_cube(_ideal()), _cube(_ideal())), {"emission_floor": 0}, "emission_floor"),
    (lambda: (_cube(_ideal()), _cube(_ideal())), {"noise": 0.1}, "noise"),
    (lambda: (_cube(_ideal()), _cube(_ideal())), {"primary_beam": 3 * u.m}, "primary_beam"),
    (lambda: (_cube(_ideal()), _cube(_ideal(), unit="Jy/beam")), {}, "no beam"),
    (lambda: (_cube(_ideal()), _cube(_ideal(), unit="Jy")), {}, "unit"),
    (lambda: (_cube(_ideal(), beam=Beam(6 * u.arcsec)), _cube(_ideal(), beam=Beam(3 * u.arcsec))),
     {}, "cannot go from"),
])
def test_bad_input(make, kwargs, match):
    ideal, obs = make()
    with pytest.raises(InstrumentError, match=match):
        assess(ideal, obs, **kwargs)


def test_figures_write_pngs(tmp_path):
    """Figure helpers return Figures with the expected panels and write readable PNGs."""
    from matplotlib.image import imread
    from synth.analysis.plots import fidelity_figure, moment_figure, recovery_figure, \
        spectra_figure
    ideal = _cube(_ideal())
    obs = _cube(0.7 * _ideal())
    m = assess(ideal, obs)
    figs = {"mom.png": moment_figure(m, tmp_path / "mom.png"),
            "rec.png": recovery_figure({"a": m}, tmp_path / "rec.png"),
            "fid.png": fidelity_figure(m, tmp_path / "fid.png"),
            "spec.png": spectra_figure(ideal, obs, [(64, 64), (70, 60)], tmp_path / "spec.png")}
    assert len(figs["mom.png"].axes) == 8            # 4 maps + 4 colour bars
    for name in figs:
        img = imread(tmp_path / name)
        assert img.shape[0] > 100 and img.std() > 0


def test_attenuated_reference_for_uncorrected_images():
    """An image not corrected for the primary beam equals the sky times the Gaussian
    response exp(-4 ln 2 r^2 / FWHM^2) (common practice); with attenuate=True the reference
    carries the same response, so recovery is 1 and fidelity infinite-like (> 1e6)."""
    ideal = PROFILE[:, None, None] * (_gauss(20.0) + _gauss(6.0, 25, -10))
    y, x = np.mgrid[:N, :N] - (N - 1) / 2
    pb = np.exp(-4 * np.log(2) * (x**2 + y**2) / 40.0**2)
    m = assess(_cube(ideal), _cube(ideal * pb), primary_beam=40 * u.arcsec, attenuate=True)
    assert np.allclose(m.recovery["recovered_fraction"], 1.0, rtol=1e-9)
    assert m.fidelity > 1e6
    with pytest.raises(InstrumentError, match="primary_beam"):
        assess(_cube(ideal), _cube(ideal), attenuate=True)


def test_excess_recovery_is_explained_in_the_notes():
    """An observation with 1.3 x the reference amplitude at intermediate scales (a band
    filter, analytic) has recovered power 1.69 there; assess explains it in a note naming
    the scales, and an exact copy gets no such note."""
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(N, PIX), np.fft.fftfreq(N, PIX)))
    band = 1.0 + 0.3 * ((kk > 1 / 30.0) & (kk < 1 / 10.0))
    ideal = _ideal()
    obs = np.fft.ifft2(np.fft.fft2(ideal) * band).real
    m = assess(_cube(ideal), _cube(obs))
    rel = m.recovery[m.recovery["reliable"]]
    mid = (rel["scale_arcsec"] > 12) & (rel["scale_arcsec"] < 25)
    assert np.allclose(rel["recovered_power"][mid], 1.69, rtol=0.02)
    notes = [n for n in m.notes if n.startswith("recovered power above 1")]
    assert len(notes) == 1 and "1.69 at" in notes[0]
    assert not any(n.startswith("recovered power") for n in assess(_cube(ideal),
                                                                   _cube(ideal)).notes)


@pytest.mark.parametrize("use_response", [False, True])
def test_flux_inside_half_power_circle_ring_geometry(use_response):
    """The half-power circle of a Gaussian primary beam has radius FWHM / 2 (exp(-4 ln 2 r^2 /
    FWHM^2) = 1/2 at r = FWHM/2; common practice): a thin ring of flux 1" inside it (r = 19")
    counts, one 1" outside (r = 21") does not, for a 40" beam around the map centre (the
    WCS reference pixel, (n - 1)/2). Observed: half the inner ring, no outer ring -> the
    fraction inside is exactly 1/2 while the total is (A / 2) / (A + B), A, B the ring fluxes
    counted here; given as the response map (>= 1/2) or as the beam FWHM: 1e-12."""
    y, x = np.mgrid[:N, :N]
    r = np.hypot(x - (N - 1) / 2, y - (N - 1) / 2) * PIX
    inner = ((r > 18.5) & (r <= 19.5)).astype(float)
    outer = ((r > 20.5) & (r <= 21.5)).astype(float)
    ideal = PROFILE[:, None, None] * (inner + 2 * outer)
    obs = PROFILE[:, None, None] * 0.5 * inner
    kw = (dict(response=np.exp(-4 * np.log(2) * r**2 / 40.0**2)) if use_response
          else dict(primary_beam=40 * u.arcsec))
    m = assess(_cube(ideal), _cube(obs), noise=0.01 * u.K, **kw)
    a, b = inner.sum(), 2 * outer.sum()
    assert m.flux_fraction == pytest.approx(0.5 * a / (a + b), rel=1e-12)
    assert m.flux_fraction_pb == pytest.approx(0.5, rel=1e-12)
