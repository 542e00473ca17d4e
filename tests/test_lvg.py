"""Single-zone statistical equilibrium with escape probabilities (synth.excitation.lvg)."""

import numpy as np
import pytest
import astropy.units as u
from scipy.optimize import brentq

from synth.errors import ConvergenceError, ExcitationError, RateExtrapolationWarning
from synth.molecules.data_model import CollisionRates, MolecularData
from synth.molecules.registry import molecule
from synth.radiation import C_CGS, H_CGS, K_CGS, radiation_temperature
from synth.excitation.escape import GEOMETRIES, escape_probability
from synth.excitation.lvg import (GAUSS_AREA, critical_density, excite,
                                  format_excitation_table)
from synth.excitation.statistical_equilibrium import (collision_matrix, level_system,
                                                      lte_populations, partner_densities,
                                                      solve_levels, thermal_ortho_para_ratio)

NDV = u.cm**-2 / (u.km / u.s)
CM3 = u.cm**-3


def two_level(a_ul=1e-5, nu_ghz=100.0, g=(1.0, 3.0), k_ul=1e-10, temps=(5.0, 500.0),
              partner="H2"):
    """An invented two-level molecule with a temperature-independent rate coefficient."""
    e_u = H_CGS * nu_ghz * 1e9 / K_CGS
    rates = CollisionRates(partner, np.array(temps), np.array([1]), np.array([0]),
                           np.full((1, len(temps)), k_ul))
    return MolecularData("TWO", 30.0, np.array([0.0, e_u]), np.array(g), ("0", "1"),
                         np.array([1]), np.array([0]), np.array([a_ul]),
                         np.array([nu_ghz * 1e9]), {partner: rates}, "invented")


@pytest.fixture(scope="module")
def co():
    return molecule("CO", need_collisions=True)


def _two_level_analytic(mol, n, t_k, ncol_per_fwhm, geometry, t_bg=2.725):
    """Two-level atom with an escape probability (Draine 2011, 'Physics of the Interstellar
    and Intergalactic Medium', ch. 17 two-level balance with the escape-probability
    treatment of trapping; from memory): for fixed beta

        x_u/x_l = (n k_lu + beta A n_bg G) / (n k_ul + beta A (1 + n_bg)),

    G = g_u/g_l, k_lu = G k_ul exp(-T*/T), closed by the scalar equation
    tau = tau_c (N/dv)/1.0645 x_l (G - x_u/x_l), solved here with brentq."""
    a, nu = mol.a_ul_s[0], mol.freq_hz[0]
    gr = mol.g[1] / mol.g[0]
    t_star = H_CGS * nu / K_CGS
    k_ul = mol.collisions["H2"].rates_cm3s[0, 0]
    k_lu = gr * k_ul * np.exp(-t_star / t_k)
    n_bg = 1.0 / np.expm1(t_star / t_bg)
    tau_c = C_CGS**3 * a / (8 * np.pi * nu**3) * ncol_per_fwhm / GAUSS_AREA

    def ratio(tau):
        b = float(escape_probability(tau, geometry))
        return (n * k_lu + b * a * n_bg * gr) / (n * k_ul + b * a * (1 + n_bg))

    def resid(tau):
        r = ratio(tau)
        return tau - tau_c * (gr - r) / (1 + r)

    tau = brentq(resid, 0.0, tau_c * gr + 1.0, xtol=1e-14, rtol=1e-14)
    return t_star / np.log(gr / ratio(tau)), tau


@pytest.mark.parametrize("geometry", GEOMETRIES)
@pytest.mark.parametrize("n", [1e0, 1e2, 1e4, 1e5, 1e6, 1e8])
def test_two_level_analytic(geometry, n):
    """T_ex within 1e-4 relative of the two-level analytic solution (Draine 2011, ch. 17,
    from memory) at tau ~ 10-100, across densities below and above n_crit = A/k = 1e5."""
    mol = two_level()
    ndv = 1e14  # cm^-2 per (cm/s)... i.e. 1e19 cm^-2 / (km/s): optically thick
    t_ex_ref, tau_ref = _two_level_analytic(mol, n, 30.0, ndv, geometry)
    res = excite(mol, n * CM3, 30 * u.K, ndv * u.cm**-3 * u.s, geometry=geometry)
    assert res.t_ex[0].to_value(u.K) == pytest.approx(t_ex_ref, rel=1e-4)
    assert res.tau[0] == pytest.approx(tau_ref, rel=1e-4)
    assert tau_ref > 1.0


def test_boltzmann_at_high_density(co):
    """n(H2) = 1e10 cm^-3: populations equal Boltzmann at T_kin within 1e-4 (absolute
    fractions; collisions dominate every rate, the LTE limit, e.g. Draine 2011, ch. 17)."""
    for t_k in (10.0, 20.0):
        res = excite(co, 1e10 * CM3, t_k * u.K, 1e17 * NDV)
        boltz = co.g * np.exp(-co.energy_k / t_k)
        np.testing.assert_allclose(res.populations, boltz / boltz.sum(), atol=1e-4, rtol=0)
        assert res.t_ex[0].to_value(u.K) == pytest.approx(t_k, rel=1e-3)


def test_thin_low_density_limits(co):
    """Optically thin and n << n_crit: populations do not depend on N/dv; as n -> 0 the
    excitation temperature tends to T_bg (radiative equilibrium with the background,
    Draine 2011, ch. 17)."""
    a = excite(co, 10 * CM3, 20 * u.K, 1e8 * NDV)
    b = excite(co, 10 * CM3, 20 * u.K, 1e10 * NDV)
    assert a.tau[0] < 1e-4 and b.tau[0] < 1e-2
    np.testing.assert_allclose(a.populations[:4], b.populations[:4], rtol=1e-2)
    low = excite(co, 1e-4 * CM3, 20 * u.K, 1e8 * NDV)
    assert low.t_ex[0].to_value(u.K) == pytest.approx(2.725, rel=1e-4)
    assert low.t_r[0].to_value(u.K) == pytest.approx(0.0, abs=1e-6)


def test_co_critical_density(co):
    """CO 1-0: A_ul / sum of downward coefficients at 20 K is 'of order 2e3 cm^-3' (common
    practice); exactly A / k_10(pH2, 20 K) = 7.203e-8 / 3.249e-11 = 2217 cm^-3 from the file
    (Schöier et al. 2005 database; rates Yang et al. 2010), and 9.0e2 cm^-3 at 10 K over all
    j != u with para-H2 (computed from the file)."""
    nc = critical_density(co, 20 * u.K, ortho_para_ratio=0.0)
    assert nc[0].to_value(CM3) == pytest.approx(7.203e-8 / 3.249e-11, rel=1e-6)
    assert 1e3 < critical_density(co, 20 * u.K)[0].to_value(CM3) < 4e3
    nc_all = critical_density(co, 10 * u.K, ortho_para_ratio=0.0, form="all-levels")
    assert nc_all[0].to_value(CM3) == pytest.approx(9.0e2, rel=0.01)


def _leiden_file(path, name, mass, levels, lines, rates, temps):
    """Write an invented Leiden-format file (Schöier et al. 2005 layout)."""
    out = [f"!MOLECULE\n{name}\n!MOLECULAR WEIGHT\n{mass}\n!NUMBER OF ENERGY LEVELS",
           f"{len(levels)}", "!LEVEL + ENERGIES(cm^-1) + WEIGHT + J"]
    out += [f"{i + 1} {e} {g} {i}" for i, (e, g) in enumerate(levels)]
    out += ["!NUMBER OF RADIATIVE TRANSITIONS", f"{len(lines)}", "!TRANS + UP + LOW + A + FREQ + E"]
    out += [f"{i + 1} {up} {lo} {a} {f} 0.0" for i, (up, lo, a, f) in enumerate(lines)]
    out += ["!NUMBER OF COLL PARTNERS", "1", "!COLLISIONS BETWEEN", "1 invented-H2",
            "!NUMBER OF COLL TRANS", f"{len(rates)}", "!NUMBER OF COLL TEMPS", f"{len(temps)}",
            "!COLL TEMPS", " ".join(map(str, temps)), "!TRANS + UP + LOW + RATES"]
    out += [f"{i + 1} {up} {lo} " + " ".join(map(str, k)) for i, (up, lo, k) in enumerate(rates)]
    path.write_text("\n".join(out) + "\n")
    return path


@pytest.mark.parametrize("name, b_cm, a10, k10, k21, k20, shirley", [
    # B (cm^-1) from B0 44594 and 44316 MHz (module rotor); A_10 of the built-in rotors; invented
    # rate coefficients of the usual magnitude; Shirley 2015 (PASP 127, 299) table values at
    # 10 K from memory, low confidence: HCO+ 6.8e4, HCN 4.7e5 cm^-3.
    ("HCO+", 1.4875, 4.187e-5, 2.6e-10, 3.4e-10, 1.1e-10, 6.8e4),
    ("HCN", 1.4782, 2.407e-5, 2.0e-11, 3.0e-11, 2.0e-11, 4.7e5),
])
def test_dense_gas_critical_densities(tmp_path, name, b_cm, a10, k10, k21, k20, shirley):
    """n_crit (all j != u, form="all-levels") from a user file of invented rates agrees with
    Shirley's 10 K values within a factor 2 (order of magnitude, values from memory)."""
    levels = [(b_cm * j * (j + 1), 2 * j + 1) for j in range(4)]
    nu = [2 * b_cm * j * 29.9792458 for j in (1, 2, 3)]
    lines = [(2, 1, a10, nu[0]), (3, 2, a10 * 9.6, nu[1]), (4, 3, a10 * 34.7, nu[2])]
    rates = [(2, 1, [k10] * 3), (3, 1, [k20] * 3), (3, 2, [k21] * 3), (4, 1, [k20 / 3] * 3),
             (4, 2, [k20] * 3), (4, 3, [k21] * 3)]
    path = _leiden_file(tmp_path / f"{name.lower()}.dat", name, 29.0, levels, lines, rates,
                        [5.0, 10.0, 20.0])
    nc = critical_density(name, 10 * u.K, form="all-levels", datafile=path)[0]
    assert shirley / 2 < nc.to_value(CM3) < shirley * 2


def test_detailed_balance_and_lte_null(co):
    """Rate matrices obey detailed balance, C_ij/C_ji = (g_j/g_i) exp(-(E_j-E_i)/kT)
    (Draine 2011, eq. 17.5; Rybicki & Lightman 1979, ch. 10), so LTE populations make the
    collisional net rates vanish."""
    system = level_system(co, t_hot_k=60.0)
    t = np.array([8.0, 35.0, 60.0])
    dens = partner_densities(system, [1e4] * 3, t)
    c = collision_matrix(system, t, dens)
    for b, tk in enumerate(t):
        i, j = np.nonzero(c[b] * c[b].T)
        expect = system.g[j] / system.g[i] * np.exp(-(system.energy_k[j] - system.energy_k[i]) / tk)
        np.testing.assert_allclose(c[b, i, j] / c[b, j, i], expect, rtol=1e-12)
    x = lte_populations(system, t)
    out = x * c.sum(axis=2)
    net = np.einsum("bji,bj->bi", c, x) - out
    has = out > 0
    assert has[:, :10].all()
    assert np.max(np.abs(net[has]) / out[has]) < 1e-12


def test_populations_valid_on_random_zones(co):
    """Populations sum to 1 and are never negative over random (n, T, N/dv); the solution is
    a fixed point: re-solving from it returns it (independent of the starting point)."""
    rng = np.random.default_rng(3)
    n = 10 ** rng.uniform(0, 8, 300)
    t = 10 ** rng.uniform(np.log10(5), 2, 300)
    k = 10 ** rng.uniform(8, 17, 300)
    system = level_system(co, t_hot_k=100.0)
    res = solve_levels(system, n, t, k)
    assert np.all(res.populations >= 0)
    np.testing.assert_allclose(res.populations.sum(axis=1), 1.0, rtol=1e-12)
    flat = np.full_like(res.populations, 1.0 / system.n_levels)
    again = solve_levels(system, n, t, k, x0=flat)
    big = res.populations > 1e-6
    np.testing.assert_allclose(again.populations[big], res.populations[big], rtol=1e-5)


def test_one_zone_result_units_and_table(co):
    """T_R = [J(T_ex) - J(T_bg)](1 - e^-tau) (Mangum & Shirley 2015, eq. 27 uniform slab) and
    integrated intensity = 1.0645 T_R FWHM; units on every field; the table lists every
    transition, its level labels and the critical densities of critical_density()."""
    res = excite("CO", 1e4 * CM3, 20 * u.K, 1e16 * NDV, fwhm=2 * u.km / u.s)
    nu = res.frequency.to_value(u.Hz)
    t_r = (radiation_temperature(nu[:3], res.t_ex[:3].to_value(u.K))
           - radiation_temperature(nu[:3], 2.725)) * -np.expm1(-res.tau[:3])
    np.testing.assert_allclose(res.t_r[:3].to_value(u.K), t_r, rtol=1e-12)
    np.testing.assert_allclose(res.integrated_intensity.to_value(u.K * u.km / u.s),
                               1.0645 * 2 * res.t_r.to_value(u.K), rtol=1e-4)
    assert res.transitions[:2] == ("1-0", "2-1") and res.frequency.unit == u.GHz
    assert res.upper_levels[:2] == ("1", "2") and res.lower_levels[:2] == ("0", "1")
    np.testing.assert_allclose(res.critical_density.to_value(CM3),
                               critical_density("CO", 20 * u.K).to_value(CM3), rtol=1e-12)
    np.testing.assert_allclose(res.critical_density_all.to_value(CM3),
                               critical_density("CO", 20 * u.K, form="all-levels").to_value(CM3),
                               rtol=1e-12)
    lines = format_excitation_table(res).splitlines()
    header = next(i for i, ln in enumerate(lines) if ln.split()[:2] == ["upper", "lower"])
    assert "n_crit [cm-3]" in lines[header] and "W [K km/s]" in lines[header]
    assert len(lines) == header + 1 + len(res.transitions)
    first = lines[header + 1].split()
    assert first[:2] == ["1", "0"]
    assert float(first[2]) == pytest.approx(res.critical_density[0].to_value(CM3), rel=1e-3)
    assert float(first[-1]) == pytest.approx(res.integrated_intensity[0].to_value(u.K * u.km / u.s),
                                             abs=1e-4)
    assert len(format_excitation_table(res, max_lines=3).splitlines()) == header + 4


def test_opr_and_extra_partners(co):
    """Thermal OPR(T) = min(9 exp(-170.5/T), 3) (common practice, from memory); fixed ratios
    split n(H2) as n_o = n OPR/(1+OPR)."""
    assert float(thermal_ortho_para_ratio(20.0)) == pytest.approx(9 * np.exp(-170.5 / 20.0))
    assert float(thermal_ortho_para_ratio(1000.0)) == 3.0
    res = excite(co, 1e4 * CM3, 20 * u.K, 1e15 * NDV, ortho_para_ratio=3.0)
    assert res.partners["oH2"].to_value(CM3) == pytest.approx(7.5e3)
    mol = two_level(partner="H2")
    with_e = CollisionRates("e", np.array([5.0, 500.0]), np.array([1]), np.array([0]),
                            np.full((1, 2), 1e-6))
    mol_e = mol.with_collisions({"H2": mol.collisions["H2"], "e": with_e}, "invented")
    r0 = excite(mol_e, 1e3 * CM3, 30 * u.K, 1e10 * NDV)
    r1 = excite(mol_e, 1e3 * CM3, 30 * u.K, 1e10 * NDV, partners={"e": 1e-5})
    r2 = excite(mol_e, 1e3 * CM3, 30 * u.K, 1e10 * NDV, partners={"e": 1e-2 * CM3})
    assert r1.partners["e"].to_value(CM3) == pytest.approx(1e-2)
    assert r1.t_ex[0] > r0.t_ex[0]  # electrons add excitation
    assert r2.t_ex[0].to_value(u.K) == pytest.approx(r1.t_ex[0].to_value(u.K), rel=1e-12)


def test_rate_extrapolation_warns(co):
    """Temperatures outside the table hold the end values with a RateExtrapolationWarning
    (documented choice)."""
    with pytest.warns(RateExtrapolationWarning, match=r"leave the rate table of pH2 \(2-3000 K\), oH2"):
        hot = excite(co, 1e4 * CM3, 5000 * u.K, 1e14 * NDV)
    assert np.all(np.isfinite(hot.t_ex[:5]))


def test_convergence_error(co):
    with pytest.raises(ConvergenceError, match="1 of 1 zones did not converge"):
        solve_levels(level_system(co), [1e3], [20.0], [1e15], max_iter=1)


@pytest.mark.parametrize("kwargs, match", [
    ({"n_h2": 1e4}, "n_h2 must be a Quantity"),
    ({"n_h2": -1 * CM3}, "n_h2 must be one finite value > 0"),
    ({"t_kin": 20 * u.s}, "t_kin has unit 's'"),
    ({"column_per_width": 1e15 * u.cm**-2}, "column_per_width has unit"),
    ({"geometry": "cube"}, "geometry 'cube' unknown; valid: expanding, uniform-sphere, plane-slab"),
    ({"geometry": "slab"}, 'geometry "slab" was renamed to "plane-slab"'),
    ({"ortho_para_ratio": -1.0}, "ortho_para_ratio must be a finite number >= 0"),
    ({"partners": {"He": 0.1}}, r"partners\['He'\]: no such extra collision partner.*none"),
    ({"partners": {"oH2": 0.1}}, r"partners\['oH2'\]"),
])
def test_bad_input(co, kwargs, match):
    args = {"n_h2": 1e4 * CM3, "t_kin": 20 * u.K, "column_per_width": 1e15 * NDV}
    args.update(kwargs)
    with pytest.raises(ExcitationError, match=match):
        excite(co, **args)


def test_missing_partner_data():
    """Rates missing for a requested partner: errors naming what is available."""
    only_para = two_level(partner="pH2")
    with pytest.raises(ExcitationError, match="needs oH2 collision rates.*only pH2"):
        excite(only_para, 1e4 * CM3, 20 * u.K, 1e15 * NDV, ortho_para_ratio=3.0)
    # with the thermal default the pH2 rates stand for all H2 (documented)
    res = excite(only_para, 1e4 * CM3, 20 * u.K, 1e15 * NDV)
    assert list(res.partners) == ["pH2"]
    no_h2 = two_level(partner="He")
    with pytest.raises(ExcitationError, match="no H2 collision rates.*partners: He"):
        excite(no_h2, 1e4 * CM3, 20 * u.K, 1e15 * NDV)


def test_inconsistent_file_and_no_rates(tmp_path):
    """A file with inconsistent level counts is refused by the reader; a species without
    collision rates is refused with what to supply."""
    from synth.errors import MolecularDataError
    path = _leiden_file(tmp_path / "bad.dat", "BAD", 29.0, [(0.0, 1), (3.0, 3)],
                        [(3, 1, 1e-5, 90.0)], [(2, 1, [1e-10])], [10.0])
    with pytest.raises(MolecularDataError):
        excite("BAD", 1e4 * CM3, 20 * u.K, 1e15 * NDV, datafile=path)
    with pytest.raises(ExcitationError, match="no collision rates carried for CS"):
        excite("CS", 1e4 * CM3, 20 * u.K, 1e15 * NDV)


def test_rate_matrix_additions_with_repeated_pairs():
    """The line terms enter the rate matrix as numpy.add.at would add them: once per line,
    also where two lines share an (i, j) element (a level that is the upper one of several
    lines puts all their terms on one diagonal element)."""
    from synth.excitation.statistical_equilibrium import _add
    rng = np.random.default_rng(0)
    for i, j in (([0, 1, 2], [1, 2, 3]), ([2, 2, 3, 2], [2, 2, 3, 2]), ([1, 0, 1], [0, 1, 0])):
        i, j = np.array(i), np.array(j)
        v = rng.normal(size=(5, i.size))
        got, want = rng.normal(size=(5, 4, 4)), None
        want = got.copy()
        np.add.at(want, (slice(None), i, j), v)
        _add(got, i, j, v)
        np.testing.assert_array_equal(got, want)
