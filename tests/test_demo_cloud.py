"""Tests of the invented demo cloud (synth.snapshot.demo)."""

import numpy as np
import astropy.units as u
import pytest
from scipy import stats

from synth.errors import MemoryBudgetError, SnapshotError
from synth.snapshot.demo import demo_cloud, demo_source, sound_speed

N = 64


@pytest.fixture(scope="module")
def still_cloud():
    """Turbulence only: no bulk rotation or shear."""
    return demo_cloud(cells=N, seed=7, rotation=0 * u.km / u.s / u.pc, shear=0 * u.km / u.s / u.pc)


def spectral_slope(field, k_min, k_max):
    """Slope of log |F(k)|^2 against log |k| over every Fourier mode (numpy.fft, independent).

    Fitting the modes themselves rather than shell averages avoids the bias of averaging a
    power law over a shell; the log of the exponentially distributed periodogram only shifts
    the intercept (by Euler's gamma), not the slope.
    """
    n = field.shape[0]
    p = np.abs(np.fft.fftn(field - field.mean())) ** 2
    k = np.fft.fftfreq(n, 1.0 / n)
    kk = np.sqrt(k[:, None, None] ** 2 + k[None, :, None] ** 2 + k[None, None, :] ** 2)
    sel = (kk >= k_min) & (kk <= k_max)
    return np.polyfit(np.log(kk[sel]), np.log(p[sel]), 1)[0]


def solenoidal_power_fraction(v):
    """Helmholtz decomposition with numpy.fft: power of k x v_k over total (Federrath 2010)."""
    n = v.shape[1]
    vk = np.stack([np.fft.fftn(c) for c in v])
    k = np.fft.fftfreq(n, 1.0 / n)
    kv = np.stack(np.meshgrid(k, k, k, indexing="ij"))
    k2 = np.sum(kv**2, axis=0)
    k2[0, 0, 0] = 1.0
    comp = kv * np.sum(kv * vk, axis=0) / k2
    total = np.sum(np.abs(vk) ** 2)
    return float(np.sum(np.abs(vk - comp) ** 2) / total)


def test_mean_density_as_requested():
    """Volume-averaged n(H2) within 5 % of the request (brief requirement)."""
    c = demo_cloud(cells=N, seed=2, mean_n_h2=5e3 * u.cm**-3)
    assert c.n_h2_cm3.mean(dtype=np.float64) == pytest.approx(5e3, rel=0.05)


def test_density_pdf_width_follows_mach(still_cloud):
    """sigma_ln^2 = ln(1 + b^2 M^2) with b = 1 - (2/3) 0.7 (Padoan et al. 1997; Federrath et
    al. 2010, eq. 8, from memory)."""
    ln_n = np.log(still_cloud.n_h2_cm3.astype(np.float64)).ravel()
    b = 1 - 2 / 3 * 0.7
    assert np.std(ln_n) == pytest.approx(np.sqrt(np.log(1 + (b * 10.0) ** 2)), rel=0.03)


def test_density_pdf_is_lognormal():
    """ln n is Gaussian: skewness and excess kurtosis ~0 (Coles & Jones 1991 log-normal model).

    A shallower spectrum (beta = 2.5) puts more independent modes in one box, so the sample
    skewness of a Gaussian field scatters by only a few 0.01 rather than ~0.2 at beta = 3.5.
    """
    c = demo_cloud(cells=N, seed=7, density_slope=2.5)
    ln_n = np.log(c.n_h2_cm3.astype(np.float64)).ravel()
    assert abs(stats.skew(ln_n)) < 0.1
    assert abs(stats.kurtosis(ln_n)) < 0.1
    # and the density itself is strongly right-skewed, as a log-normal must be
    assert stats.skew(c.n_h2_cm3.ravel()) > 2.0


@pytest.mark.parametrize("beta", [3.5, 2.5])
def test_log_density_power_spectrum_slope(beta):
    """The Gaussian field behind ln n has P(k) ~ k^-beta: fitted slope within 0.1 (brief)."""
    c = demo_cloud(cells=N, seed=3, density_slope=beta)
    slope = spectral_slope(np.log(c.n_h2_cm3.astype(np.float64)), 2, N // 2)
    assert slope == pytest.approx(-beta, abs=0.1)


def test_sound_speed_at_10_kelvin():
    """c_s(10 K) = 0.19 km/s for 2.37 m_H per particle (Kauffmann et al. 2008; common practice)."""
    assert sound_speed(10 * u.K).to_value(u.km / u.s) == pytest.approx(0.187, rel=0.01)


def test_velocity_dispersion_per_axis(still_cloud):
    """Each 1-D dispersion is within 20 % of M c_s / sqrt(3) (isotropic turbulence)."""
    sigma_1d = 10.0 * sound_speed(10 * u.K).to_value(u.km / u.s) / np.sqrt(3)
    for comp in range(3):
        assert still_cloud.velocity_cms[comp].std() / 1e5 == pytest.approx(sigma_1d, rel=0.2)


@pytest.mark.parametrize("fraction", [0.7, 0.2])
def test_solenoidal_fraction_recovered(fraction):
    """Helmholtz decomposition of the turbulent velocity gives the requested fraction +-0.05."""
    c = demo_cloud(cells=32, seed=5, solenoidal_fraction=fraction,
                   rotation=0 * u.km / u.s / u.pc, shear=0 * u.km / u.s / u.pc)
    measured = solenoidal_power_fraction(c.velocity_cms.astype(np.float64))
    assert measured == pytest.approx(fraction, abs=0.05)


def test_bulk_flow_gradient():
    """Without turbulence v_z = Omega y + S x about the centre and v_y = -Omega z (recipe)."""
    c = demo_cloud(cells=16, seed=1, mach=0.0, box=1.6 * u.pc,
                   rotation=0.5 * u.km / u.s / u.pc, shear=0.2 * u.km / u.s / u.pc)
    r = (np.arange(16) - 7.5) * 0.1
    expect_vz = 0.5 * r[None, :, None] + 0.2 * r[:, None, None]
    np.testing.assert_allclose(c.velocity_cms[2] / 1e5, np.broadcast_to(expect_vz, c.shape),
                               atol=1e-5)
    np.testing.assert_allclose(c.velocity_cms[1] / 1e5, np.broadcast_to(-0.5 * r, c.shape),
                               atol=1e-5)
    np.testing.assert_allclose(c.n_h2_cm3, 3e3, rtol=1e-6)


def test_temperature_recipe_and_range(still_cloud):
    """T = 10 + 50 (n/n0)^-0.3 clipped to 10-60 K (invented recipe); falls with density."""
    n, t = still_cloud.n_h2_cm3, still_cloud.t_kin_k
    assert t.min() >= 10.0 and t.max() <= 60.0
    dense = n > 10 * 3e3
    np.testing.assert_allclose(t[dense], np.clip(10 + 50 * (n[dense] / 3e3) ** -0.3, 10, 60),
                               rtol=1e-5)
    assert stats.spearmanr(n.ravel()[::50], t.ravel()[::50])[0] < -0.5


def test_physically_plausible_defaults():
    """Defaults: mean n 1e3-1e4 cm^-3, 1-D dispersion 0.5-3 km/s, box a few pc (brief)."""
    c = demo_cloud(cells=32)
    assert 1e3 <= c.n_h2_cm3.mean() <= 1e4
    assert 0.5 <= c.velocity_cms[2].std() / 1e5 <= 3.0
    assert c.box_size[0].to_value(u.pc) == pytest.approx(4.0)


def test_microturbulence_scales_with_cell_size():
    """sigma_turb = sigma_1D (dx/L)^((beta_v-3)/2): 1/4 of sigma_1D for n=16, beta_v=4."""
    c = demo_cloud(cells=16, mach=10.0)
    sigma_1d = 10.0 * sound_speed(10 * u.K).to_value(u.km / u.s) / np.sqrt(3)
    assert c.sigma_turb_cms / 1e5 == pytest.approx(sigma_1d / 4.0, rel=1e-6)


def test_same_seed_same_bytes():
    """Randomness only through the seed: identical bytes for the same seed, not for another."""
    a, b, c = demo_cloud(cells=32, seed=11), demo_cloud(cells=32, seed=11), demo_cloud(cells=32, seed=12)
    assert a.n_h2_cm3.tobytes() == b.n_h2_cm3.tobytes()
    assert a.velocity_cms.tobytes() == b.velocity_cms.tobytes()
    assert a.t_kin_k.tobytes() == b.t_kin_k.tobytes()
    assert a.n_h2_cm3.tobytes() != c.n_h2_cm3.tobytes()


def test_demo_source_is_complete():
    """Invented placement: 2.4 kpc, a position and a systemic velocity with units."""
    src = demo_source()
    assert src["distance"].to_value(u.kpc) == pytest.approx(2.4)
    assert src["ra"].unit.physical_type == "angle" and -90 <= src["dec"].to_value(u.deg) <= 90
    assert src["v_sys"].unit.is_equivalent(u.km / u.s)


@pytest.mark.parametrize("kw, match", [
    ({"cells": 4}, "cells = 4 is not valid"),
    ({"cells": 16.0}, "cells = 16.0 is not valid"),
    ({"mach": -1.0}, "mach = -1.0 is not valid"),
    ({"solenoidal_fraction": 1.5}, "solenoidal_fraction = 1.5 is not valid"),
    ({"density_slope": 0.0}, "density_slope = 0.0 is not valid"),
    ({"velocity_slope": np.inf}, "velocity_slope = inf is not valid"),
    ({"t_range": (60.0, 10.0) * u.K}, "t_range = .* is not valid"),
])
def test_bad_arguments(kw, match):
    with pytest.raises(SnapshotError, match=match):
        demo_cloud(**kw)


def test_bare_number_size_refused():
    """A physical input without a unit is refused by the unit check (astropy quantity_input)."""
    with pytest.raises(TypeError, match="box"):
        demo_cloud(cells=16, box=4.0)


def test_memory_guard():
    """A grid beyond max_bytes is refused with the number and the option that allows it."""
    with pytest.raises(MemoryBudgetError, match="max_bytes"):
        demo_cloud(cells=512, max_bytes=1e9)
