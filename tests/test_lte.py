"""LTE excitation against the Boltzmann distribution and the published column-density relation."""

import numpy as np
import pytest
import astropy.units as u

import synth
from synth.errors import ExcitationError
from synth.excitation.lte import lte_excitation, partition_table


def _snap(n=100.0, t=20.0, shape=(2, 2, 2), abundance=None):
    return synth.Snapshot(n_h2=np.full(shape, n) * u.cm**-3, t_kin=np.full(shape, t) * u.K,
                          velocity=np.zeros((3,) + shape) * u.km / u.s, cell_size=0.1 * u.pc,
                          abundance=abundance)


def test_partition_table_interpolation_is_accurate():
    """Q(T) interpolated in log-log from partition_table matches the exact level sum to 1e-7."""
    mol = synth.Line("13CO", "1-0").molecule
    log_t, log_q = partition_table(mol, 5.0, 300.0)
    t = np.geomspace(5.0, 300.0, 777)
    got = np.exp(np.interp(np.log(t), log_t, log_q))
    np.testing.assert_allclose(got, mol.partition_function(t), rtol=1e-7)


def test_lte_opacity_matches_mangum_shirley_column_relation():
    """Optically thin column from the line opacity: N_tot = 8 pi nu^3 Q e^{E_u/kT} /
    (c^3 A g_u (e^{h nu/kT} - 1)) ∫tau dv (Mangum & Shirley 2015, PASP 127, 266, eq. 29-31)."""
    line = synth.Line("C18O", "1-0")
    t, n, x = 15.0, 1e3, 2e-7
    exc = lte_excitation(_snap(n, t), line, x)
    mol = line.molecule
    q = np.sum(mol.g * np.exp(-mol.energy_k / t))
    c, h, k = 2.99792458e10, 6.62607015e-27, 1.380649e-16
    nu, a, g_u = line.freq_hz, line.a_ul_s, mol.g[line.upper]
    n_tot = (8 * np.pi * nu**3 * q * np.exp(mol.energy_k[line.upper] / t)
             / (c**3 * a * g_u * np.expm1(h * nu / (k * t)))) * exc.opacity_integral[0, 0, 0]
    assert n_tot == pytest.approx(n * x, rel=1e-5)
    assert exc.t_ex_k[0, 0, 0] == pytest.approx(t)


def test_lte_opacity_over_a_range_of_temperatures_matches_the_level_sum():
    """Every cell of a snapshot with T_kin from 5 to 300 K and a per-cell abundance against
    the Boltzmann formula with the exact level sum for Q(T) (Mangum & Shirley 2015, eqs.
    29-32): the interpolated partition function (1e-7) and float32 rounding, 3e-7."""
    rng = np.random.default_rng(7)
    shape = (6, 5, 7)
    t = np.exp(rng.uniform(np.log(5.0), np.log(300.0), shape)).astype(np.float32)
    n = np.exp(rng.uniform(np.log(1e2), np.log(1e6), shape)).astype(np.float32)
    ab = rng.uniform(1e-5, 1e-4, shape)
    snap = synth.Snapshot(n_h2=n * u.cm**-3, t_kin=t * u.K,
                          velocity=np.zeros((3,) + shape) * u.km / u.s, cell_size=0.1 * u.pc,
                          abundance={"CO": ab})
    line = synth.Line("CO", "2-1")
    exc = lte_excitation(snap, line, 1e-4)
    mol = line.molecule
    tt = t.astype(np.float64)
    q = np.sum(mol.g[:, None] * np.exp(-mol.energy_k[:, None] / tt.reshape(-1)), axis=0)
    c, h, k = 2.99792458e10, 6.62607015e-27, 1.380649e-16
    nu, a, g_u = line.freq_hz, line.a_ul_s, mol.g[line.upper]
    n_u = n * ab * g_u * np.exp(-mol.energy_k[line.upper] / tt) / q.reshape(shape)
    want = c**3 / (8 * np.pi * nu**3) * a * n_u * np.expm1(h * nu / (k * tt))
    np.testing.assert_allclose(exc.opacity_integral, want, rtol=3e-7)
    assert np.array_equal(exc.t_ex_k, t)


def test_fixed_t_ex_and_per_cell_abundance():
    """t_ex overrides T_kin; a snapshot abundance field overrides the constant abundance and
    opacity scales linearly with it (definition)."""
    line = synth.Line("CO", "1-0")
    ab = np.full((2, 2, 2), 1e-4)
    ab[0] = 2e-4
    exc = lte_excitation(_snap(abundance={"CO": ab}), line, 1e-5, t_ex=12 * u.K)
    assert np.all(exc.t_ex_k == np.float32(12.0))
    assert exc.opacity_integral[0, 0, 0] / exc.opacity_integral[1, 0, 0] == pytest.approx(2.0, rel=1e-6)


@pytest.mark.parametrize("kwargs, match", [
    ({"abundance": -1e-4}, "abundance must be finite and >= 0"),
    ({"abundance": "lots"}, "abundance must be a number"),
    ({"abundance": 1e-4, "t_ex": 10.0}, "t_ex must be a positive temperature"),
    ({"abundance": 1e-4, "t_ex": -5 * u.K}, "t_ex must be a positive temperature"),
])
def test_bad_lte_input(kwargs, match):
    with pytest.raises(ExcitationError, match=match):
        lte_excitation(_snap(), synth.Line("CO", "1-0"), **kwargs)
