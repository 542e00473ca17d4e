"""Moment maps, noise estimate and signal mask (synth.analysis.moments)."""

import pickle

import numpy as np
import pytest
import astropy.units as u

from spectral_cube.utils import VarianceWarning

from synth.errors import InstrumentError
from synth.analysis.matching import cube_from_array
from synth.analysis.moments import moment_maps, noise_rms, signal_mask


def _line_cube(dv_ms=150.0, noise=0.0, seed=0, unit="K", nv=40):
    """Invented cube: Gaussian lines whose centre and width vary across the map."""
    n = 24
    v = (np.arange(nv) - nv / 2) * dv_ms / 1e3                   # km/s
    y, x = np.mgrid[:n, :n]
    centre = 0.08 * (x - n / 2)
    sigma = 0.3 + 0.01 * y
    amp = 3.0 * np.exp(-((x - 12) ** 2 + (y - 11) ** 2) / 60.0)
    data = amp * np.exp(-0.5 * ((v[:, None, None] - centre) / sigma) ** 2)
    data += noise * np.random.default_rng(seed).normal(size=data.shape)
    return cube_from_array(data, pixscale=2 * u.arcsec, channel_width=dv_ms * u.m / u.s,
                           v_start=v[0] * u.km / u.s, restfreq=115.2712018 * u.GHz,
                           unit=unit), v, centre, sigma, amp


@pytest.mark.parametrize("dv_ms", [150.0, -150.0])
def test_moments_match_spectral_cube(dv_ms):
    """Moments 0/1/2 equal spectral-cube's moment0/moment1/moment2 on the same masked cube
    within 1e-6 (spectral-cube as reference library), ascending and descending axes."""
    cube, *_ = _line_cube(dv_ms, noise=0.05, seed=1)
    m = moment_maps(cube)
    masked = cube.with_mask(m.mask)
    with np.errstate(invalid="ignore", divide="ignore"):   # empty spectra inside spectral-cube
        ref0 = masked.moment0().to(u.K * u.km / u.s).value
        ref1 = masked.moment1().to(u.km / u.s).value
        with pytest.warns(VarianceWarning):           # spectral-cube: M2 is a variance
            ref2 = masked.moment2().to(u.km**2 / u.s**2).value
    good = np.isfinite(ref1) & np.isfinite(m.mom1.value) & (m.mom0.value > 0)
    assert good.sum() > 100
    assert np.allclose(m.mom0.value[good], ref0[good], rtol=1e-6)
    assert np.allclose(m.mom1.value[good], ref1[good], rtol=1e-6, atol=1e-9)
    assert np.allclose(m.mom2.value[good], ref2[good], rtol=1e-6)


def test_moments_of_gaussian_lines_are_analytic():
    """Noiseless Gaussian lines: M0 = sqrt(2 pi) sigma T_pk, M1 = line centre, M2 = sigma^2
    (line area of a Gaussian, analytic), within 1e-3 where the line is bright."""
    cube, v, centre, sigma, amp = _line_cube(60.0, nv=120)
    m = moment_maps(cube, noise=0 * u.K, mask=np.ones(cube.shape, bool))
    bright = amp > 0.5
    area = np.sqrt(2 * np.pi) * sigma * amp
    assert bright.sum() > 50
    assert np.allclose(m.mom0.value[bright], area[bright], rtol=1e-3)
    assert np.allclose(m.mom1.value[bright], centre[bright], atol=1e-3)
    assert np.allclose(m.linewidth_sigma.value[bright], sigma[bright], rtol=1e-3)
    assert m.mom0.unit == u.K * u.km / u.s and m.mom1.unit == u.km / u.s


def test_noise_rms_of_gaussian_noise():
    """The MAD-based rms (1.4826 MAD, Hampel 1974) of pure Gaussian noise of sigma 0.3 is
    0.3 within 2 %; bright emission on top does not change it by more than 3 %."""
    rng = np.random.default_rng(5)
    noise = 0.3 * rng.normal(size=(30, 40, 40))
    assert noise_rms(noise) == pytest.approx(0.3, rel=0.02)
    with_line = noise.copy()
    with_line[10:15, 10:20, 10:20] += 5.0
    assert noise_rms(with_line) == pytest.approx(0.3, rel=0.03)


def test_noise_rms_zero_for_noiseless_data():
    """Round-off-level spread below NOISELESS x peak counts as noiseless (rms 0)."""
    data = np.zeros((5, 16, 16))
    data[2, 8, 8] = 1.0
    data += 1e-14 * np.random.default_rng(0).normal(size=data.shape)
    assert noise_rms(data) == 0.0


def test_signal_mask_keeps_regions_with_a_core():
    """Two-threshold mask (Rosolowsky & Leroy 2006): a 2.5-sigma blob without a 4-sigma
    pixel is dropped; a blob with one is kept down to its 2-sigma edge."""
    data = np.zeros((6, 20, 20))
    data[2, 3:6, 3:6] = 2.5                # no core
    data[3, 12:16, 12:16] = 2.5
    data[3, 13, 13] = 6.0                  # core
    mask = signal_mask(data, 1.0, core=4.0, edge=2.0)
    assert not mask[2, 3:6, 3:6].any()
    assert mask[3, 12:16, 12:16].all()
    assert mask.sum() == 16


def test_moments_pickle_and_inputs_unchanged():
    """Contract: the product pickles; the input cube's data are not modified."""
    cube, *_ = _line_cube(noise=0.05)
    before = cube.unmasked_data[:].value.copy()
    m = moment_maps(cube)
    assert np.array_equal(cube.unmasked_data[:].value, before)
    back = pickle.loads(pickle.dumps(m))
    assert np.array_equal(back.mom0.value, m.mom0.value)


@pytest.mark.parametrize("kwargs, match", [
    ({"noise": 0.1}, "noise"),
    ({"noise": 0.1 * u.Jy / u.beam}, "noise"),
    ({"noise": -1 * u.K}, "noise"),
    ({"mask": np.ones((2, 2, 2), bool)}, "mask shape"),
    ({"core": 1.0, "edge": 2.0}, "mask thresholds"),
])
def test_bad_input(kwargs, match):
    cube, *_ = _line_cube()
    with pytest.raises(InstrumentError, match=match):
        moment_maps(cube, **kwargs)


def test_unit_not_surface_brightness():
    cube, *_ = _line_cube(unit="Jy")
    with pytest.raises(InstrumentError, match="unit"):
        moment_maps(cube)
