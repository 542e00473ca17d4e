"""Critical densities, effective excitation densities and line-ratio grids of the one-zone
solver (synth.excitation.lvg.critical_density, synth.excitation.line_ratios,
synth.report.line_ratios, ``synth ratios``)."""

import csv
import math
import os

import numpy as np
import pytest
import astropy.units as u

import synth
from synth import cli
from synth.errors import ExcitationError, SynthError
from synth.excitation.line_ratios import (effective_excitation_density, line_ratio_grid,
                                          parse_pairs)
from synth.excitation.lvg import critical_density
from synth.report.line_ratios import ratio_csv, ratio_figure, write_line_ratios

CM3 = u.cm**-3
NDV = u.cm**-2 / (u.km / u.s)
KKMS = u.K * u.km / u.s
CO_FILE = os.path.join(os.path.dirname(synth.__file__), "molecules", "data", "co_h2_rates.txt")
HC_OVER_K = 1.438776877  # cm K, second radiation constant (CODATA 2018)


def _read_co_file():
    """The shipped CO file (Leiden format, Schöier et al. 2005; rates Yang et al. 2010),
    read line by line here, independently of synth's reader: levels (E in cm^-1, g),
    radiative lines (up, low, A) and, per partner, the temperatures and downward rates."""
    with open(CO_FILE) as fh:
        rows = [ln.strip() for ln in fh if ln.strip()]
    i = 0

    def after(tag):
        nonlocal i
        while not rows[i].startswith(tag):
            i += 1
        i += 1
        return rows[i]

    n_lev = int(after("!NUMBER OF ENERGY LEVELS"))
    after("!LEVEL")
    levels = {}
    for k in range(n_lev):
        tok = rows[i + k].split()
        levels[int(tok[0])] = (float(tok[1]), float(tok[2]))
    n_rad = int(after("!NUMBER OF RADIATIVE"))
    after("!TRANS")
    lines = []
    for k in range(n_rad):
        tok = rows[i + k].split()
        lines.append((int(tok[1]), int(tok[2]), float(tok[3])))
    n_part = int(after("!NUMBER OF COLL PARTNERS"))
    partners = {}
    for _ in range(n_part):
        name = after("!COLLISIONS BETWEEN").split()[1]   # "CO-pH2" -> pH2 below
        name = name.split("-")[1]
        n_coll = int(after("!NUMBER OF COLL TRANS"))
        temps = [float(t) for t in after("!COLL TEMPS").split()]
        after("!TRANS")
        rates = []
        for k in range(n_coll):
            tok = rows[i + k].split()
            rates.append((int(tok[1]), int(tok[2]), [float(x) for x in tok[3:]]))
        partners[name] = (temps, rates)
    return levels, lines, partners


def _by_hand(levels, lines, partners, up, t_k, opr):
    """Both critical densities of level ``up`` (1-based) by explicit loops over the file:
    sum of A out of up over (a) downward and (b) all collision rate coefficients out of it,
    upward ones by detailed balance k_uj = k_ju (g_j/g_u) exp(-(E_j - E_u) hc/kT)
    (Draine 2011, eq. 17.5), per H2 with fractions 1/(1+opr) para and opr/(1+opr) ortho."""
    frac = {"pH2": 1.0 / (1.0 + opr), "oH2": opr / (1.0 + opr)}
    a_out = 0.0
    for lu, ll, a in lines:
        if lu == up:
            a_out += a
    down = 0.0
    upward = 0.0
    for name, (temps, rates) in partners.items():
        col = temps.index(t_k)   # 10 K and 20 K are tabulated: no interpolation
        for cu, cl, k in rates:
            if cu == up:
                down += frac[name] * k[col]
            elif cl == up:
                e_u, g_u = levels[up]
                e_j, g_j = levels[cu]
                upward += frac[name] * k[col] * (g_j / g_u) * math.exp(-(e_j - e_u) * HC_OVER_K
                                                                      / t_k)
    return a_out / down, a_out / (down + upward)


@pytest.mark.parametrize("t_k", [10.0, 20.0])
@pytest.mark.parametrize("opr", [0.0, 3.0, None])
def test_co_critical_densities_by_hand(t_k, opr):
    """CO 1-0, 2-1, 3-2 critical densities at 10 and 20 K from the shipped rates: the
    downward form sum_l A_ul / sum_{l<u} gamma_ul and the all-levels form
    sum_l A_ul / sum_{j != u} gamma_uj (Shirley 2015, PASP 127, 299, eqs. 4 and 5; equation
    numbers from memory), computed by hand from the file's numbers, within 1e-6. The thermal
    ortho/para ratio is min(9 exp(-170.5/T), 3) (common practice, from memory)."""
    levels, lines, partners = _read_co_file()
    ratio = min(9.0 * math.exp(-170.5 / t_k), 3.0) if opr is None else opr
    down = critical_density("CO", t_k * u.K, ortho_para_ratio=opr)
    every = critical_density("CO", t_k * u.K, ortho_para_ratio=opr, form="all-levels")
    for k, up in enumerate((2, 3, 4)):   # levels J = 1, 2, 3 are 2, 3, 4 in the file
        ref_down, ref_all = _by_hand(levels, lines, partners, up, t_k, ratio)
        assert down[k].to_value(CM3) == pytest.approx(ref_down, rel=1e-6)
        assert every[k].to_value(CM3) == pytest.approx(ref_all, rel=1e-6)
        assert every[k] < down[k]


def test_co_critical_density_published_magnitude():
    """CO 1-0 n_crit (downward form) is ~2e3 cm^-3 at 10-20 K (Shirley 2015 quotes CO 1-0
    of order 10^3 cm^-3; from memory, order of magnitude only)."""
    for t in (10, 20):
        assert 1e3 < critical_density("CO", t * u.K)[0].to_value(CM3) < 4e3


def _w(res, k):
    return res.integrated_intensity[k].to_value(KKMS)


@pytest.mark.parametrize("t_k, ndv", [(20.0, 1e16), (20.0, 1e15), (40.0, 3e15)])
def test_effective_density_reproduces_one_k_km_s(t_k, ndv):
    """Shirley 2015 (PASP 127, 299): the effective excitation density is where the line's
    integrated intensity reaches 1 K km/s. synth.excite at the returned density gives
    1 K km/s within 1 %, and below it (the first crossing) the line is fainter."""
    labels = ["1-0", "2-1", "3-2"]
    n_eff = effective_excitation_density("CO", t_k * u.K, ndv * NDV, labels)
    assert n_eff.shape == (3,) and np.all(np.isfinite(n_eff))
    for k, n in enumerate(n_eff):
        res = synth.excite("CO", n, t_k * u.K, ndv * NDV)
        assert _w(res, k) == pytest.approx(1.0, rel=0.01)
        for f in (0.95, 0.5, 0.1):   # fainter everywhere below
            assert _w(synth.excite("CO", f * n, t_k * u.K, ndv * NDV), k) < 1.0


def test_effective_density_first_crossing_of_a_line_that_fades():
    """CO 1-0 at 20 K, N/dv = 1e15 cm^-2 per km/s: W rises above 1 K km/s near 1e3 cm^-3
    and falls back below it at LTE (thick, suprathermal trapping; synth.excite); the first
    crossing is returned, and a line that never reaches the target gives NaN."""
    n_eff = effective_excitation_density("CO", 20 * u.K, 1e15 * NDV, "1-0")[0]
    assert _w(synth.excite("CO", n_eff, 20 * u.K, 1e15 * NDV), 0) == pytest.approx(1.0,
                                                                                   rel=0.01)
    assert _w(synth.excite("CO", 1e9 * CM3, 20 * u.K, 1e15 * NDV), 0) < 1.0
    faint = effective_excitation_density("CO", 20 * u.K, 1e13 * NDV, ["1-0", "2-1"])
    assert np.all(np.isnan(faint))


def test_effective_density_per_temperature_shape():
    """An array of temperatures gives one row per temperature; each row equals the scalar
    call (same definition)."""
    t = [15.0, 30.0] * u.K
    both = effective_excitation_density("CO", t, 1e16 * NDV, ["2-1", "3-2"])
    assert both.shape == (2, 2)
    one = effective_excitation_density("CO", 30 * u.K, 1e16 * NDV, ["2-1", "3-2"])
    np.testing.assert_allclose(both[1].to_value(CM3), one.to_value(CM3), rtol=1e-9)


@pytest.fixture(scope="module")
def grid():
    return line_ratio_grid("CO", ["2-1/1-0", "3-2/1-0"], np.geomspace(1e2, 1e6, 9) * CM3,
                           [10.0, 20.0, 40.0] * u.K, [1e13, 1e16] * NDV)


def test_grid_point_equals_two_direct_solutions(grid):
    """Every tested grid point's ratio is W(num)/W(den) of direct synth.excite solutions at
    that (n, T, N/dv) (definition), within 1e-5."""
    for ic, it, jn in [(0, 0, 0), (1, 2, 5), (0, 1, 8), (1, 1, 3)]:
        n, t, c = grid.density[jn], grid.temperature[it], grid.column_per_width[ic]
        res = synth.excite("CO", n, t, c)
        for p, (num, den) in enumerate(grid.pairs):
            ref = _w(res, res.transitions.index(num)) / _w(res, res.transitions.index(den))
            assert grid.ratio[ic, it, jn, p] == pytest.approx(ref, rel=1e-5)
    np.testing.assert_array_equal(grid.ratio_of("3-2/1-0"), grid.ratio[..., 1])


def test_grid_carries_critical_and_effective_densities(grid):
    """The grid's per-line critical densities are critical_density() at each temperature and
    its effective densities effective_excitation_density() at each (N/dv, T) (1e-3: the
    grid bisects to 1e-4 dex)."""
    for it, t in enumerate(grid.temperature):
        ref = critical_density("CO", t, form="all-levels")
        for j, s in enumerate(grid.transitions):
            k = ["1-0", "2-1", "3-2"].index(s)
            assert grid.critical_density_all[it, j].to_value(CM3) == pytest.approx(
                ref[k].to_value(CM3), rel=1e-12)
    ref = effective_excitation_density("CO", grid.temperature, 1e16 * NDV, list(grid.transitions))
    np.testing.assert_allclose(grid.effective_density[1].to_value(CM3), ref.to_value(CM3),
                               rtol=1e-3)


@pytest.mark.parametrize("t_k", [10.0, 20.0, 40.0])
def test_thin_co_21_10_rises_with_density_to_lte(t_k):
    """Optically thin CO (N/dv = 1e12): 2-1/1-0 rises monotonically with density at fixed T
    (common practice: the upper level fills as collisions take over), and at 1e10 cm^-3 it
    equals the thin LTE ratio computed from the file by hand, W ∝ (J(T) - J(T_bg)) tau with
    tau ∝ A_ul g_u x_l / (g_l nu^3) (1 - e^{-h nu / kT}), x Boltzmann (Mangum & Shirley 2015,
    PASP 127, 266, eqs. 24 and 29; thin limit 1 - e^-tau -> tau) within 1e-3."""
    n = np.geomspace(10, 1e6, 21)
    g = line_ratio_grid("CO", "2-1/1-0", n * CM3, [t_k] * u.K, 1e12 * NDV)
    r = g.ratio[0, 0, :, 0]
    assert np.all(np.diff(r) > 0)
    dense = line_ratio_grid("CO", "2-1/1-0", [1e10, 2e10] * CM3, [t_k] * u.K, 1e12 * NDV)
    levels, lines, _ = _read_co_file()
    freq = {2: 115.2712018e9, 3: 230.5380000e9}   # the file's GHz column, Hz

    def thin_w(up, low, a):
        (_, g_u), (e_l, g_l) = levels[up], levels[low]
        nu = freq[up]
        hnu_k = 6.62607015e-34 * nu / 1.380649e-23
        x_l = g_l * math.exp(-e_l * HC_OVER_K / t_k)   # Boltzmann, partition sum cancels
        tau = a * g_u * x_l / (g_l * nu**3) * -math.expm1(-hnu_k / t_k)

        def j(t):
            return hnu_k / math.expm1(hnu_k / t)
        return (j(t_k) - j(2.725)) * tau
    a10 = [a for lu, ll, a in lines if (lu, ll) == (2, 1)][0]
    a21 = [a for lu, ll, a in lines if (lu, ll) == (3, 2)][0]
    assert dense.ratio[0, 0, 0, 0] == pytest.approx(thin_w(3, 2, a21) / thin_w(2, 1, a10),
                                                    rel=1e-3)


def test_csv_and_figure(grid, tmp_path):
    """line_ratios.csv: one row per grid point, units in the header, values those of the
    grid; the figure: one panel per pair x N/dv with a colour bar, labelled contours and log
    axes with several labelled ticks; the folder carries synth's marker."""
    files = write_line_ratios(grid, tmp_path / "r")
    assert files == ["line_ratios.csv", "line_ratios.png"]
    with open(tmp_path / "r" / "line_ratios.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    head, body = rows[0], rows[1:]
    assert head[:3] == ["column_per_width [cm-2 per km/s]", "temperature [K]", "density [cm-3]"]
    assert "W(2-1) [K km/s]" in head and "ratio 3-2/1-0 [W/W]" in head
    assert len(body) == grid.ratio[..., 0].size
    row = body[-1]
    assert float(row[0]) == pytest.approx(1e16, rel=1e-6)
    assert float(row[head.index("ratio 3-2/1-0 [W/W]")]) == pytest.approx(
        grid.ratio[1, 2, 8, 1], rel=1e-5)
    assert float(row[head.index("ratio 2-1/1-0 [W/W]")]) == pytest.approx(
        float(row[head.index("W(2-1) [K km/s]")]) / float(row[head.index("W(1-0) [K km/s]")]),
        rel=1e-5)
    assert (tmp_path / "r" / "line_ratios.png").read_bytes()[:4] == b"\x89PNG"
    assert (tmp_path / "r" / "synth-run.json").exists()
    fig = ratio_figure(grid)
    panels = [ax for ax in fig.axes if ax.get_xlabel() == "n(H2) [cm-3]"]
    assert len(panels) == 4 and len(fig.axes) == 8   # each panel has its colour bar
    for ax in panels:
        assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
        lo, hi = ax.get_xlim()
        ticks = [t for t in ax.get_xticks() if lo <= t <= hi]
        assert len(ticks) >= 3
        ylo, yhi = ax.get_ylim()
        assert len([t for t in ax.get_yticks() if ylo <= t <= yhi]) >= 3
        assert len(ax.texts) >= 1   # contour labels
    assert len(ratio_csv(grid).splitlines()) == 1 + len(body)


def test_cli_ratios_and_excite(tmp_path, capsys):
    """`synth ratios` writes the CSV and figure and prints each line's densities and each
    pair's response span; `synth excite` shows the effective excitation density of
    effective_excitation_density() in its table."""
    out = tmp_path / "grid"
    assert cli.main(["ratios", "CO", "--lines", "2-1/1-0", "--density", "1e2", "1e5",
                     "--temperature", "10", "30", "--column-per-width", "1e15",
                     "--density-points", "7", "--temperature-points", "3", "--out", str(out),
                     "--quiet"]) == 0
    text = capsys.readouterr().out
    assert "2-1/1-0" in text and "responds over n [cm-3]" in text
    assert sorted(os.listdir(out)) == ["line_ratios.csv", "line_ratios.png", "synth-run.json"]
    assert cli.main(["excite", "CO", "--density", "1e4", "--temperature", "20",
                     "--column-per-width", "1e16", "--max-lines", "3"]) == 0
    lines = capsys.readouterr().out.splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.split()[:2] == ["upper", "lower"])
    assert "n_eff [cm-3]" in lines[head]
    ref = effective_excitation_density("CO", 20 * u.K, 1e16 * NDV, ["1-0", "2-1", "3-2"])
    for k, row in enumerate(lines[head + 1:]):
        assert float(row.split()[4]) == pytest.approx(ref[k].to_value(CM3), rel=1e-3)


@pytest.mark.parametrize("call, match", [
    (lambda: parse_pairs(["2-1:1-0"]), "line pair '2-1:1-0' is not NUMERATOR/DENOMINATOR"),
    (lambda: parse_pairs(["1-0/1-0"]), "divides a line by itself"),
    (lambda: parse_pairs(["2-1/1-0", "2-1/1-0"]), "line pairs repeat"),
    (lambda: parse_pairs([]), "at least one line pair"),
    (lambda: line_ratio_grid("CO", ["9-7/1-0"], [1e3, 1e4] * CM3, [10.0] * u.K, 1e15 * NDV),
     "line pair '9-7/1-0': unknown transition '9-7'"),
    (lambda: line_ratio_grid("CO", ["2-1/1-0"], [-1.0, 1e4] * CM3, [10.0] * u.K, 1e15 * NDV),
     "density must be finite values > 0"),
    (lambda: line_ratio_grid("CO", ["2-1/1-0"], [1e3, 1e4] * u.K, [10.0] * u.K, 1e15 * NDV),
     "density has unit 'K'"),
    (lambda: line_ratio_grid("CO", ["2-1/1-0"], np.geomspace(1, 1e6, 1000) * CM3,
                             np.linspace(10, 50, 300) * u.K, 1e15 * NDV), "at most 200,000"),
    (lambda: line_ratio_grid("CO", ["2-1/1-0"], [1e3, 1e4] * CM3, [10.0] * u.K, 1e15 * NDV,
                             geometry="slab"), 'geometry "slab" was renamed to "plane-slab"'),
    (lambda: effective_excitation_density("CO", 20 * u.K, 1e15 * NDV,
                                          density_range=[1e5, 1e2] * CM3),
     "density_range must be \\(low, high\\)"),
    (lambda: effective_excitation_density("CO", 20 * u.K, 1e15 * NDV, "7-5"),
     "transitions: unknown transition '7-5'"),
    (lambda: effective_excitation_density("CO", 20 * u.K, 1e15 * NDV, target=0 * KKMS),
     "target must be one finite value > 0"),
    (lambda: critical_density("CO", 20 * u.K, form="upward"),
     "form 'upward' unknown; valid: downward, all-levels"),
])
def test_bad_input(call, match):
    with pytest.raises(ExcitationError, match=match) as info:
        call()
    assert "\n" not in str(info.value) and isinstance(info.value, SynthError)
