"""Built-in linear rotors from spectroscopic constants.

For a linear molecule in its ground vibrational state (Townes & Schawlow 1955, Microwave
Spectroscopy, ch. 1 and eq. 1-25 (memory)):

    E_J = h (B x - D x^2 + H x^3),  x = J(J+1),    g_J = 2J + 1,
    nu_{J -> J-1} = 2 B J - 4 D J^3 + H J^3 (6 J^2 + 2),
    A_{J -> J-1} = 64 pi^4 nu^3 mu^2 J / (3 h c^3 (2J + 1))
                 = 1.16397e-11 nu_GHz^3 mu_D^2 J / (2J + 1)  s^-1.

Hyperfine structure (N2H+, HCN, C17O) is averaged in the levels: one line per J (the
transfer can split HCN 1-0 and N2H+ 1-0 into components, :mod:`synth.molecules.hyperfine`).

The sextic term H matters for the light, fast rotors: for CO it moves 10-9 by 90 kHz and
20-19 by 3 MHz. B, D (and H where the frequencies determine it) are least-squares fits to
catalogue frequencies (sources per species below). For an isotopologue whose own
frequencies do not fix H, H is scaled from the parent by the Dunham isotope relation
H ~ mu_red^-3 ~ B^3 (Dunham 1932, Phys. Rev. 41, 721; Townes & Schawlow 1955, ch. 1).

For the CO isotopologues the dipole is so small (0.11 D) that the centrifugal stretching of
the bond changes it noticeably: the bond lengthens by dr = 4 (B_e/omega_e)^2 r_e J(J+1)
(Herzberg 1950, Spectra of Diatomic Molecules, ch. III; memory), so the dipole matrix
element of J -> J-1 becomes mu_0 - (dmu/dr) dr with J(J+1) averaged over the two levels to
J^2: mu_eff = mu_0 - S J^2 with S = 4 (B_e/omega_e)^2 r_e dmu/dr. This is 2 % in A at J = 10
and 30 % at J = 40 (the published CO data file shows the same trend). For the other species
(dipoles of 2-4 D) the relative change is below 1e-4 at J = 10 and is neglected.
"""

from dataclasses import dataclass

import numpy as np

from ..radiation import C_CGS, H_CGS, K_CGS
from .data_model import MolecularData

__all__ = ["RotorConstants", "ROTOR_CONSTANTS", "J_MAX", "linear_rotor", "einstein_a_dipole"]

#: Highest rotational level built: J = 0 .. 40 (E/k > 3000 K for CO; 41 levels like the
#: published CO data file).
J_MAX = 40

DEBYE_CGS = 1e-18  # esu cm

# Atomic masses, u (Wang et al. 2017, Chinese Phys. C 41, 030003, AME2016; from memory).
_M = {"H": 1.00782503, "C": 12.0, "13C": 13.00335484, "N": 14.00307401, "O": 15.99491462,
      "17O": 16.99913176, "18O": 17.99915961, "Si": 27.97692653, "S": 31.97207117}
_M_E = 5.48579909e-4  # electron mass, u (CODATA 2018)

# Centrifugal change of the CO dipole, S = 4 (B_e/omega_e)^2 r_e dmu/dr in debye per J^2,
# from B_e = 1.93128 cm^-1, omega_e = 2169.81 cm^-1, r_e = 1.12832 A (Huber & Herzberg 1979,
# memory) and dmu/dr = 3.1 D/A (CO dipole function, e.g. Chackerian & Tipping 1983; memory).
# Isotopologues: (B_e/omega_e)^2 scales with the reduced mass as B does, so S scales with B0.
_S_CO_DEBYE = 4.0 * (1.93128 / 2169.81) ** 2 * 1.12832 * 3.1


@dataclass(frozen=True)
class RotorConstants:
    """Spectroscopic constants of one linear rotor.

    b0_mhz, d0_khz and h0_hz are the ground-state rotational, quartic and sextic
    centrifugal-distortion constants, mu_debye the permanent dipole, mass_amu the molecular
    mass, stretch_debye the centrifugal dipole change S per J^2 (module docstring), source
    where they come from.
    """

    b0_mhz: float
    d0_khz: float
    mu_debye: float
    mass_amu: float
    stretch_debye: float
    source: str
    h0_hz: float = 0.0


def _co_stretch(b0_mhz):
    return _S_CO_DEBYE * b0_mhz / 57635.968


def _h_isotope(h_parent_hz, b_parent_mhz, b_mhz):
    """Sextic constant of an isotopologue from its parent's: H ~ B^3 (module docstring)."""
    return h_parent_hz * (b_mhz / b_parent_mhz) ** 3


def _d_isotope(d_parent_khz, b_parent_mhz, b_mhz):
    """Quartic constant of an isotopologue from its parent's: D ~ B^2 (Dunham 1932)."""
    return d_parent_khz * (b_mhz / b_parent_mhz) ** 2


def _b_from_1_0(nu_mhz, d_khz, h_hz):
    """B that puts J = 1-0 at nu: nu = 2 B - 4 D + 8 H."""
    return (nu_mhz + 4.0 * d_khz * 1e-3 - 8.0 * h_hz * 1e-6) / 2.0


# CO: D0, H0 least-squares fit (here) to the J <= 40 frequencies of the Leiden CO file
# (Schöier et al. 2005, A&A 432, 369; shipped with astroquery), weighted 0.5, 5, 50 kHz for
# J <= 6, <= 20, above, with B0 putting 1-0 at the file's 115271.2018 MHz; residuals < 16 kHz
# to J = 20, < 50 kHz to J = 40. H0 = 0.172 Hz agrees with Winnewisser et al. 1997,
# J. Mol. Spectrosc. 184, 468 (0.171 Hz, from memory).
_CO_B, _CO_D, _CO_H = 57635.967909, 183.50493, 0.17167
# HCO+: B0, D0, H0 fit to J <= 10 catalogue frequencies (from memory; Tinti et al. 2007,
# ApJ 669, L113 for the measurements), residuals < 7 kHz.
_HCOP_B, _HCOP_D, _HCOP_H = 44594.42842, 82.8313, 0.0702
_C17O_H = _h_isotope(_CO_H, _CO_B, 56179.99)
_C17O_D = _d_isotope(_CO_D, _CO_B, 56179.99)
_H13COP_H = _h_isotope(_HCOP_H, _HCOP_B, 43377.30)
_H13COP_D = _d_isotope(_HCOP_D, _HCOP_B, 43377.30)

#: Built-in species (canonical names). "fit" means B0, D0 (and H0) are least-squares fits to
#: the species' J <= 10 catalogue frequencies, recalled from memory (they are the reference
#: table of tests/test_molecules.py; residuals below 10 kHz unless said); masses are sums of
#: atomic masses (AME2016, memory).
ROTOR_CONSTANTS = {
    # mu Goorvitch 1994, ApJS 95, 535
    "CO": RotorConstants(_CO_B, _CO_D, 0.11011, _M["C"] + _M["O"], _co_stretch(_CO_B),
                         "B0, D0, H0 fit to the Leiden CO file (Schöier et al. 2005); "
                         "mu Goorvitch 1994, ApJS 95, 535", _CO_H),
    # B0, D0 fit to J <= 8 (from memory), H0 scaled from CO; mu from memory (Goorvitch 1994)
    "13CO": RotorConstants(55101.01255, 167.6866, 0.11046, _M["13C"] + _M["O"],
                           _co_stretch(55101.01255),
                           "B0, D0 fit, H0 scaled from CO; mu from memory",
                           _h_isotope(_CO_H, _CO_B, 55101.01255)),
    "C18O": RotorConstants(54891.42060, 166.4075, 0.11079, _M["C"] + _M["18O"],
                           _co_stretch(54891.42060),
                           "B0, D0 fit, H0 scaled from CO; mu from memory",
                           _h_isotope(_CO_H, _CO_B, 54891.42060)),
    # from memory: hyperfine-free 1-0 at 112.3592837 GHz; D0 and H0 scaled from CO; mu
    # between CO and 13CO
    "C17O": RotorConstants(_b_from_1_0(112359.2837, _C17O_D, _C17O_H), _C17O_D, 0.1104,
                           _M["C"] + _M["17O"], _co_stretch(56179.99),
                           "from memory (1-0, mu); D0, H0 scaled from CO", _C17O_H),
    # mu 3.90 D (Botschwina et al. 1993, J. Chem. Phys. 99, 9755: 3.888; memory)
    "HCO+": RotorConstants(_HCOP_B, _HCOP_D, 3.90, _M["H"] + _M["C"] + _M["O"] - _M_E, 0.0,
                           "B0, D0, H0 fit; mu Botschwina et al. 1993", _HCOP_H),
    # from memory: 1-0 at 86.7542884 GHz; D0, H0 scaled from HCO+; mu as HCO+
    "H13CO+": RotorConstants(_b_from_1_0(86754.2884, _H13COP_D, _H13COP_H), _H13COP_D, 3.90,
                             _M["H"] + _M["13C"] + _M["O"] - _M_E, 0.0,
                             "from memory (1-0); D0, H0 scaled from HCO+; mu as HCO+",
                             _H13COP_H),
    # hyperfine-free frequencies; H0 1.8 Hz is what the J <= 9 frequencies need (without it
    # the residuals reach 47 kHz); mu Ebenstein & Muenter 1984, J. Chem. Phys. 80, 3989
    "HCN": RotorConstants(44315.97636, 87.2908, 2.985, _M["H"] + _M["C"] + _M["N"], 0.0,
                          "B0, D0, H0 fit; mu Ebenstein & Muenter 1984", 1.838),
    # B0, D0 fit to J <= 4 (from memory; residual 12 kHz at 1-0); mu 3.05 D (Blackman et al.
    # 1976, memory)
    "HNC": RotorConstants(45331.98987, 100.0497, 3.05, _M["H"] + _M["N"] + _M["C"], 0.0,
                          "B0, D0 fit (from memory); mu Blackman et al. 1976"),
    # B0, D0 fit to J <= 10; H0 not determined by them; mu Winnewisser & Cook 1968
    # (J. Mol. Spectrosc. 28, 266; memory)
    "CS": RotorConstants(24495.55852, 40.0626, 1.958, _M["C"] + _M["S"], 0.0,
                         "B0, D0 fit; mu Winnewisser & Cook 1968"),
    # B0, D0 fit to J <= 8; mu Raymonda, Muenter & Klemperer 1970 (J. Chem. Phys. 52, 3458)
    "SiO": RotorConstants(21711.98548, 29.8755, 3.0982, _M["Si"] + _M["O"], 0.0,
                          "B0, D0 fit; mu Raymonda, Muenter & Klemperer 1970"),
    # B0 from memory (hyperfine-free 1-0 at 93.1733977 GHz); D0 and mu Havenith et al. 1990
    # (memory); hyperfine-weighted
    "N2H+": RotorConstants(_b_from_1_0(93173.3977, 88.0, 0.0), 88.0, 3.4, 2 * _M["N"] + _M["H"] - _M_E, 0.0,
                           "B0 from memory, D0 and mu Havenith et al. 1990 (memory)"),
}


def einstein_a_dipole(nu_hz, mu_debye, j_up):
    """Einstein A of the rotational line J_up -> J_up - 1 of a linear molecule, s^-1.

    A = 64 pi^4 nu^3 mu^2 J_u / (3 h c^3 (2 J_u + 1))  (Townes & Schawlow 1955).
    """
    mu = np.asarray(mu_debye) * DEBYE_CGS
    j = np.asarray(j_up, dtype=np.float64)
    return 64.0 * np.pi**4 * np.asarray(nu_hz) ** 3 * mu**2 * j / (3.0 * H_CGS * C_CGS**3
                                                                   * (2.0 * j + 1.0))


def linear_rotor(name, j_max=J_MAX):
    """MolecularData of the built-in linear rotor ``name`` (a key of :data:`ROTOR_CONSTANTS`).

    Levels J = 0 .. j_max with labels "0", "1", ...; lines J -> J-1 labelled "1-0", "2-1", ...
    (formulas in the module docstring); no collision rates.
    """
    c = ROTOR_CONSTANTS[name]
    j = np.arange(j_max + 1, dtype=np.float64)
    b_hz, d_hz = c.b0_mhz * 1e6, c.d0_khz * 1e3
    x = j * (j + 1)
    e_hz = b_hz * x - d_hz * x**2 + c.h0_hz * x**3
    j_up = j[1:]
    nu_hz = e_hz[1:] - e_hz[:-1]  # = 2 B J - 4 D J^3 + H J^3 (6 J^2 + 2)
    mu_eff = c.mu_debye - c.stretch_debye * j_up**2
    return MolecularData(
        name=name, mass_amu=c.mass_amu, energy_k=H_CGS * e_hz / K_CGS, g=2.0 * j + 1.0,
        level_labels=tuple(str(int(v)) for v in j), upper=np.arange(1, j_max + 1),
        lower=np.arange(0, j_max), a_ul_s=einstein_a_dipole(nu_hz, mu_eff, j_up),
        freq_hz=nu_hz, collisions={},
        source=f"built-in linear rotor ({c.source}); Townes & Schawlow 1955")
