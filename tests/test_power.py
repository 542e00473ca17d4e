"""Power spectra and slope fits (synth.analysis.power)."""

import numpy as np
import pytest

from synth.errors import InstrumentError
from synth.analysis.power import (fit_power_slope, gaussian_random_field, power_spectrum,
                                  radial_bins)


@pytest.mark.parametrize("slope", [-2.0, -2.8, -3.6])
@pytest.mark.parametrize("seed", [1, 2])
def test_gaussian_random_field_slope_recovered(slope, seed):
    """A Gaussian random field made with P ~ k^slope by spectral synthesis (Peitgen & Saupe
    1988, The Science of Fractal Images, ch. 2) gives back its slope within 0.05."""
    field = gaussian_random_field((256, 256), slope, seed=seed, pixscale_arcsec=2.0)
    table = power_spectrum(field, 2.0)
    fitted, err, nb = fit_power_slope(table, scale_range=(6.0, 150.0))
    assert fitted == pytest.approx(slope, abs=0.05)
    assert 0 < err < 0.05 and nb >= 5


def test_slope_does_not_depend_on_pixel_scale():
    """Invariant: the same pixels with a 3x larger pixel scale give the same slope over the
    scaled range (the slope is dimensionless)."""
    field = gaussian_random_field((128, 128), -3.0, seed=4)
    s1 = fit_power_slope(power_spectrum(field, 1.0), (3.0, 40.0))[0]
    s3 = fit_power_slope(power_spectrum(field, 3.0), (9.0, 120.0))[0]
    assert s3 == pytest.approx(s1, abs=1e-9)


def test_gaussian_image_power_matches_analytic_transform():
    """The power spectrum of a Gaussian of FWHM theta is |V|^2 with
    V(k) = exp(-(pi theta k)^2 / (4 ln 2)) (analytic Fourier transform of a Gaussian;
    docs/references.md): each annulus equals the analytic |V|^2 averaged over its FFT
    cells, within 1 %."""
    n, theta = 128, 10.0
    y, x = np.mgrid[:n, :n] - n / 2
    img = np.exp(-4 * np.log(2) * (x**2 + y**2) / theta**2)
    t = power_spectrum(img, 1.0)
    index, edges = radial_bins(img.shape, 1.0)
    kk = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n)))
    v2 = np.exp(-2 * (np.pi * theta * kk) ** 2 / (4 * np.log(2)))
    norm = (np.pi * theta**2 / (4 * np.log(2))) ** 2 / img.size   # |FT|^2 / N at k = 0
    expect = np.array([v2[index == b].mean() for b in range(edges.size - 1)
                       if np.any(index == b)]) * norm
    sel = expect > 1e-3 * norm
    assert np.allclose(np.asarray(t["power"])[sel], expect[sel], rtol=0.01)


def test_parseval_total_power():
    """Parseval's theorem: sum over all FFT cells of |F|^2 / N equals sum of I^2; the binned
    table (which drops k = 0 and the corners beyond Nyquist) holds no more than that."""
    field = gaussian_random_field((64, 64), -2.5, seed=3)
    t = power_spectrum(field, 1.0)
    binned = float(np.sum(t["power"] * t["n_modes"]))
    assert binned <= np.sum(field**2) * (1 + 1e-12)
    assert binned > 0.9 * np.sum(field**2)


def test_radial_bins_cover_fundamental_to_nyquist():
    """Bin edges run from 1/(N dx) to 1/(2 dx) (definition of the DFT frequencies)."""
    _, edges = radial_bins((64, 64), 2.0)
    assert edges[0] == pytest.approx(1 / 128, rel=1e-6)
    assert edges[-1] == pytest.approx(1 / 4, rel=1e-6)


def test_random_field_reproducible_by_seed():
    """Randomness only through the explicit seed."""
    a = gaussian_random_field((32, 32), -3, seed=7)
    b = gaussian_random_field((32, 32), -3, seed=7)
    c = gaussian_random_field((32, 32), -3, seed=8)
    assert np.array_equal(a, b) and not np.allclose(a, c)


@pytest.mark.parametrize("call, match", [
    (lambda: power_spectrum(np.zeros(64), 1.0), "need a 2-D image"),
    (lambda: power_spectrum(np.zeros((4, 4)), 1.0), "at least 8x8"),
    (lambda: power_spectrum(np.ones((16, 16)), 1.0, apodize="hann"), "apodize"),
    (lambda: fit_power_slope(power_spectrum(np.random.default_rng(0).normal(size=(32, 32)),
                                            1.0), (10.0, 11.0)), "scale_range"),
])
def test_bad_input(call, match):
    with pytest.raises(InstrumentError, match=match):
        call()
