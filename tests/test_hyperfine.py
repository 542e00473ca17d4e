"""Hyperfine components in the transfer: thin-limit ratios, the thin-limit sum, thick
saturation, the averaged option and the refusal of a request without data."""

import numpy as np
import pytest
import astropy.units as u

import synth
from synth.errors import ConfigError
from synth.transfer.synthesize import synthesize_products

C_KMS = 299792.458
HCN = synth.Line("HCN", "1-0")
N2HP = synth.Line("N2H+", "1-0")
# Component frequencies (MHz) and thin-limit strengths: HCN F = 1-1, 2-1, 0-1 (from memory,
# strengths 3 : 5 : 1, common practice); N2H+ F1F = 01-12 (isolated), 23-12, 11-10 (Caselli,
# Myers & Thaddeus 1995, ApJ 455, L77; from memory), strengths (2F+1)/27 = 3, 7, 3 of 27.
HCN_COMPS = [(88630.4160, 3 / 9), (88631.8470, 5 / 9), (88633.9360, 1 / 9)]
N2HP_COMPS = [(93176.2527, 3 / 27), (93173.7643, 7 / 27), (93171.6086, 3 / 27)]


def _slab(n_cm3, t_k=10.0, nz=10, cell_pc=0.01):
    shape = (1, 1, nz)
    return synth.Snapshot(n_h2=np.full(shape, n_cm3) * u.cm**-3,
                          t_kin=np.full(shape, t_k) * u.K,
                          velocity=np.zeros((3,) + shape) * u.km / u.s,
                          cell_size=cell_pc * u.pc, sigma_turb=0.0 * u.km / u.s)


def _run(line, x, hyperfine=None, width=0.01, vrange=(-12, 12)):
    res = synthesize_products(_slab(1e3), line, x, distance=1 * u.kpc,
                              channel_width=width * u.km / u.s,
                              velocity_range=vrange * u.km / u.s, hyperfine=hyperfine,
                              products=("tau",))
    v = res.cube.spectral_axis.to_value(u.km / u.s)
    return v, res.cube.unmasked_data[:, 0, 0].value, res


def _window(v, spec, v_c, half=0.3):
    sel = np.abs(v - v_c) < half
    return spec[sel].sum()


@pytest.mark.parametrize("line, comps", [(HCN, HCN_COMPS), (N2HP, N2HP_COMPS)])
def test_thin_component_ratios_equal_the_line_strengths(line, comps):
    """Optically thin (peak tau < 1e-4), 10 K gas without turbulence (sigma 0.05 km/s): the
    integrated intensity of each component, in +-0.3 km/s around c (nu_0 - nu_k) / nu_0, is
    its strength times the whole line's, within 0.5 % (strengths and frequencies above)."""
    v, spec, res = _run(line, 1e-13)
    assert res.stats["tau_max"] < 1e-4 and res.cube.meta["HYPERFIN"]
    total = spec.sum()
    nu0 = line.freq_hz / 1e6
    for nu_k, s_k in comps:
        got = _window(v, spec, C_KMS * (nu0 - nu_k) / nu0) / total
        assert got == pytest.approx(s_k, rel=5e-3)


@pytest.mark.parametrize("line", [HCN, N2HP])
def test_thin_sum_equals_the_averaged_line(line):
    """Thin limit: the sum over the components equals the integrated intensity of the
    hyperfine-averaged line (hyperfine=false), both against the thin-slab value
    (h c^3 A N_u / (8 pi k nu^2)) [1 - (e^{h nu/kT} - 1)/(e^{h nu/kT_bg} - 1)]
    (Mangum & Shirley 2015, PASP 127, 266, eqs. 30 and 80): within 0.5 %."""
    import astropy.constants as const
    h, k, c = const.h.cgs.value, const.k_B.cgs.value, const.c.cgs.value
    x = 1e-13
    _, split, _ = _run(line, x)
    _, averaged, res_avg = _run(line, x, hyperfine=False)
    assert not res_avg.cube.meta["HYPERFIN"]
    mol, t = line.molecule, 10.0
    f_u = mol.g[line.upper] * np.exp(-mol.energy_k[line.upper] / t) / np.sum(
        mol.g * np.exp(-mol.energy_k / t))
    n_u = 1e3 * x * 10 * 0.01 * u.pc.to(u.cm) * f_u
    nu, a = line.freq_hz, line.a_ul_s
    ref = (h * c**3 * a * n_u / (8 * np.pi * k * nu**2)
           * (1 - np.expm1(h * nu / (k * t)) / np.expm1(h * nu / (k * 2.725)))) / 1e5
    assert split.sum() * 0.01 == pytest.approx(averaged.sum() * 0.01, rel=5e-3)
    assert split.sum() * 0.01 == pytest.approx(ref, rel=5e-3)


def test_thick_components_saturate_to_equal_peaks():
    """Optically thick HCN (weakest component tau > 50): every component's peak tends to
    J(T) - J(T_bg) (Mangum & Shirley 2015, eq. 28, tau >> 1), so the 1 : 5 : 3 thin ratios
    become 1 : 1 : 1 within 1 %."""
    v, spec, res = _run(HCN, 1e-5)
    nu0 = HCN.freq_hz / 1e6
    peaks = [spec[np.abs(v - C_KMS * (nu0 - nu_k) / nu0) < 0.3].max() for nu_k, _ in HCN_COMPS]
    assert res.stats["tau_max"] * min(s for _, s in HCN_COMPS) / max(
        s for _, s in HCN_COMPS) > 50
    h_nu_k = 6.62607015e-27 * HCN.freq_hz / 1.380649e-16
    j = lambda t: h_nu_k / np.expm1(h_nu_k / t)   # noqa: E731
    np.testing.assert_allclose(peaks, j(10.0) - j(2.725), rtol=0.01)


def test_auto_velocity_range_covers_the_components():
    """Without a velocity range the band spans every component +- 5 sigma (HCN: F = 0-1 at
    -7.07 km/s and 1-1 at +4.84 km/s from F = 2-1, from the frequencies above)."""
    res = synthesize_products(_slab(1e3), HCN, 1e-13, distance=1 * u.kpc,
                              channel_width=0.05 * u.km / u.s)
    v = res.cube.spectral_axis.to_value(u.km / u.s)
    nu0 = HCN.freq_hz / 1e6
    offs = [C_KMS * (nu0 - nu_k) / nu0 for nu_k, _ in HCN_COMPS]
    assert v.min() < min(offs) - 0.2 and v.max() > max(offs) + 0.2


@pytest.mark.parametrize("line, value, match", [
    (synth.Line("CS", "2-1"), True, r"hyperfine=true: no hyperfine data for CS 2-1; valid: "),
    (HCN, "yes", r"hyperfine='yes'; valid: true, false or unset"),
])
def test_bad_hyperfine_request(line, value, match):
    with pytest.raises(ConfigError, match=match):
        synthesize_products(_slab(1e3), line, 1e-10, distance=1 * u.kpc,
                            channel_width=0.1 * u.km / u.s, hyperfine=value)
