"""Reader and writer of the Leiden molecular-data format (Schöier et al. 2005, A&A 432, 369)."""

import os

import numpy as np
import pytest

from synth.errors import MolecularDataError
from synth.molecules.leiden import CM_TO_K, read_leiden, write_leiden
from synth.molecules.registry import CO_RATES_FILE

CO_LINES = CO_RATES_FILE.read_text().splitlines()


def astroquery_co_file():
    """Path of the CO file shipped in astroquery's test data (the outside source we carry)."""
    astroquery = pytest.importorskip("astroquery")
    return os.path.join(os.path.dirname(astroquery.__file__), "lamda", "tests", "data", "co.txt")


def test_carried_file_is_the_astroquery_file_unchanged():
    """data/README.md: co_h2_rates.txt is astroquery's lamda/tests/data/co.txt byte for byte."""
    with open(astroquery_co_file(), "rb") as fh:
        assert fh.read() == CO_RATES_FILE.read_bytes()


def test_counts_of_the_co_file():
    """Counts of astroquery's co.txt (Schöier et al. 2005; read): 41 levels, 40 lines,
    partners pH2 and oH2 (codes 2, 3), 25 temperatures from 2 to 3000 K, 40 transitions each."""
    mol = read_leiden(astroquery_co_file())
    assert (mol.name, mol.n_levels, mol.n_lines) == ("CO", 41, 40)
    assert mol.mass_amu == 28.0
    assert sorted(mol.collisions) == ["oH2", "pH2"]
    for rates in mol.collisions.values():
        assert rates.temperatures_k.shape == (25,)
        assert rates.temperatures_k[[0, -1]].tolist() == [2.0, 3000.0]
        assert rates.rates_cm3s.shape == (40, 25)
    assert mol.level_labels[:3] == ("0", "1", "2")
    assert mol.transition_labels[:2] == ("1-0", "2-1")


def test_values_read_from_the_co_file():
    """Numbers as printed in co.txt (astroquery test data; Yang et al. 2010 rates)."""
    mol = read_leiden(CO_RATES_FILE)
    pH2, oH2 = mol.collisions["pH2"], mol.collisions["oH2"]
    assert (pH2.upper[0], pH2.lower[0]) == (1, 0)
    assert pH2.rates_cm3s[0, 0] == pytest.approx(2.954e-11, rel=1e-12)   # 2 -> 1 at 2 K
    assert pH2.rates_cm3s[2, 2] == pytest.approx(7.150e-11, rel=1e-12)   # 3 -> 2 at 10 K
    assert oH2.rates_cm3s[39, 0] == pytest.approx(3.244e-12, rel=1e-12)  # 10 -> 4 at 2 K
    assert (oH2.upper[39], oH2.lower[39]) == (9, 3)
    assert mol.a_ul_s[0] == pytest.approx(7.203e-08, rel=1e-12)
    assert mol.freq_hz[2] == pytest.approx(345.7959899e9, rel=1e-12)
    assert mol.g[:3].tolist() == [1.0, 3.0, 5.0]


def test_energies_converted_with_hc_over_k():
    """E/k = E[cm^-1] hc/k: hc/k = 1.438777 cm K (CODATA 2018, from memory); the file's own
    E_u column (K, two decimals; 1.5e-5 relative off at J = 40) must agree."""
    assert CM_TO_K == pytest.approx(1.438777, rel=1e-6)
    mol = read_leiden(CO_RATES_FILE)
    assert mol.energy_k[1] == pytest.approx(3.845033413 * 1.4387769, rel=1e-6)
    e_u_file = np.array([float(line.split()[5]) for line in CO_LINES[51:91]])
    np.testing.assert_allclose(mol.energy_k[mol.upper], e_u_file, rtol=2e-5, atol=0.006)


def test_round_trip(tmp_path):
    """write_leiden then read_leiden gives back the same numbers (rates printed as 4-digit
    numbers in the source file, so they survive exactly)."""
    mol = read_leiden(CO_RATES_FILE)
    back = read_leiden(write_leiden(mol, tmp_path / "copy.dat"))
    np.testing.assert_allclose(back.energy_k, mol.energy_k, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(back.freq_hz, mol.freq_hz, rtol=1e-11)
    np.testing.assert_allclose(back.a_ul_s, mol.a_ul_s, rtol=1e-11)
    assert back.level_labels == mol.level_labels
    for partner, rates in mol.collisions.items():
        np.testing.assert_allclose(back.collisions[partner].rates_cm3s, rates.rates_cm3s,
                                   rtol=1e-6)
        np.testing.assert_array_equal(back.collisions[partner].upper, rates.upper)
    assert not list(tmp_path.glob("*.tmp"))


def test_file_without_collision_partners(tmp_path):
    """A file may carry no collision partners (count 0): radiative data only."""
    text = "\n".join(CO_LINES[:91] + ["!NUMBER OF COLL PARTNERS", "0"]) + "\n"
    path = tmp_path / "co_radiative.dat"
    path.write_text(text)
    mol = read_leiden(path)
    assert (mol.n_levels, mol.n_lines, mol.collisions) == (41, 40, {})


def _edit(number, old, new):
    """Replace ``old`` by ``new`` on 1-based line ``number``."""
    def apply(lines):
        assert old in lines[number - 1]
        lines[number - 1] = lines[number - 1].replace(old, new, 1)
        return lines
    return apply


def _drop_last_token(number):
    def apply(lines):
        lines[number - 1] = lines[number - 1].rsplit(None, 1)[0]
        return lines
    return apply


BAD_FILES = [
    ("truncated", lambda lines: lines[:120],
     r"co\.dat line 121 \(end of file\): expected 40 collisional transitions, found 18"),
    ("line missing", lambda lines: lines[:59] + lines[60:],
     r"co\.dat line 92: expected 40 radiative transitions, found 39"),
    ("too many levels claimed", _edit(6, "41", "42"),
     r"co\.dat line 50: expected 42 energy levels, found 41"),
    ("too few levels claimed", _edit(6, "41", "40"),
     r"co\.dat line 48: expected 40 energy levels, found more"),
    ("non-number A", _edit(60, "7.330e-05", "7.33O-05"),
     r"co\.dat line 60: expected the Einstein A in s\^-1 \(a number\), found '7\.33O-05'"),
    ("non-number weight", _edit(4, "28.0", "twenty"),
     r"co\.dat line 4: expected the molecular weight \(a number\), found 'twenty'"),
    ("upper level out of range", _edit(52, "1     2     1", "1    42     1"),
     r"co\.dat line 52: upper level 42 out of range 1\.\.41"),
    ("rate level out of range", _edit(110, "8    5   2", "8    5   0"),
     r"co\.dat line 110: lower level 0 out of range 1\.\.41"),
    ("level numbers out of order", _edit(10, "3    11.5", "4    11.5"),
     r"co\.dat line 10: expected level number 3, found 4"),
    ("partner code", _edit(95, "2 CO-pH2", "9 CO-pH2"),
     r"co\.dat line 95: collision partner code 9 unknown; valid: 1 \(H2\), 2 \(pH2\)"),
    ("partner twice", _edit(144, "3 CO-oH2", "2 CO-oH2"),
     r"co\.dat line 144: collision partner pH2 given twice"),
    ("temperature missing", _drop_last_token(101),
     r"co\.dat line 101: expected 25 collision temperatures, found 24"),
    ("rate missing", _drop_last_token(110),
     r"co\.dat line 110: expected 25 rate coefficients after the level numbers, found 24"),
    ("zero A", _edit(52, "7.203e-08", "0.0"),
     r"co\.dat line 52: Einstein A and frequency must be > 0, found 0\.0, 115\.2712018"),
    ("zero weight", _edit(9, "3.0", "0.0"),
     r"co\.dat line 9: statistical weight must be > 0, found 0\.0"),
    ("data after the end", lambda lines: lines + ["!more", "1 2 3"],
     r"co\.dat line 193: unexpected data after the last collision partner"),
    ("rate row too many", lambda lines: lines + ["41 10 5 " + "1e-12 " * 25],
     r"co\.dat line 192: expected 40 collisional transitions, found more"),
    ("upper below lower", _edit(52, "1     2     1", "1     1     2"),
     r"co\.dat: molecular data 'CO': line 0 has upper level energy 0\.0 K <= lower"),
    ("negative rate", _edit(103, "2.954E-11", "-2.954E-11"),
     r"co\.dat line 95: in the collision block starting here: .*rates_cm3s must be >= 0"),
]


@pytest.mark.parametrize("edit, match", [b[1:] for b in BAD_FILES], ids=[b[0] for b in BAD_FILES])
def test_malformed_files_name_the_line(tmp_path, edit, match):
    """Each defect is reported with the file name, the line number and what was expected."""
    path = tmp_path / "co.dat"
    path.write_text("\n".join(edit(list(CO_LINES))) + "\n")
    with pytest.raises(MolecularDataError, match=match):
        read_leiden(path)


def test_missing_file(tmp_path):
    with pytest.raises(MolecularDataError, match=r"cannot read molecular data file .*nope\.dat"):
        read_leiden(tmp_path / "nope.dat")
