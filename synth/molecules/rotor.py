"""Built-in linear rotors from spectroscopic constants.

For a linear molecule in its ground vibrational state (Townes & Schawlow 1955, Microwave
Spectroscopy, ch. 1 and eq. 1-25 (memory)):

    E_J = h (B J(J+1) - D J^2 (J+1)^2),    g_J = 2J + 1,
    nu_{J -> J-1} = 2 B J - 4 D J^3,
    A_{J -> J-1} = 64 pi^4 nu^3 mu^2 J / (3 h c^3 (2J + 1))
                 = 1.16397e-11 nu_GHz^3 mu_D^2 J / (2J + 1)  s^-1.

Hyperfine structure (N2H+, HCN, C17O) is averaged: one line per J.

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

    b0_mhz and d0_khz are the ground-state rotational and quartic centrifugal-distortion
    constants, mu_debye the permanent dipole, mass_amu the molecular mass, stretch_debye the
    centrifugal dipole change S per J^2 (module docstring), source where they come from.
    """

    b0_mhz: float
    d0_khz: float
    mu_debye: float
    mass_amu: float
    stretch_debye: float
    source: str


def _co_stretch(b0_mhz):
    return _S_CO_DEBYE * b0_mhz / 57635.968


#: Built-in species (canonical names). B0, D0, mu from /work/shared/REFERENCES.md unless the
#: source says "from memory"; masses are sums of atomic masses (AME2016, memory).
ROTOR_CONSTANTS = {
    # B0 2nd + fit to catalogue frequencies; mu Goorvitch 1994, ApJS 95, 535 (2nd)
    "CO": RotorConstants(57635.968, 183.50, 0.11011, _M["C"] + _M["O"], _co_stretch(57635.968),
                         "B0, D0 fit to CO frequencies; mu Goorvitch 1994, ApJS 95, 535"),
    # B0, D0, mu: REFERENCES.md (2nd)
    "13CO": RotorConstants(55101.01, 167.68, 0.11046, _M["13C"] + _M["O"],
                           _co_stretch(55101.01), "B0, D0, mu as quoted in REFERENCES.md (2nd)"),
    "C18O": RotorConstants(54891.420, 166.32, 0.11079, _M["C"] + _M["18O"],
                           _co_stretch(54891.420), "B0, D0, mu as quoted in REFERENCES.md (2nd)"),
    # from memory: hyperfine-free 1-0 at 112.3592837 GHz, D0 chosen to reproduce it; mu between
    # CO and 13CO
    "C17O": RotorConstants(56179.9911, 174.6, 0.1104, _M["C"] + _M["17O"],
                           _co_stretch(56179.9911), "from memory (B0, D0, mu)"),
    # B0, D0 fit; mu 3.90 D (Botschwina et al. 1993: 3.888, memory)
    "HCO+": RotorConstants(44594.428, 82.8, 3.90, _M["H"] + _M["C"] + _M["O"] - _M_E, 0.0,
                           "B0, D0 fit; mu Botschwina et al. 1993 (REFERENCES.md)"),
    # from memory: 1-0 at 86.7542884 GHz; D0 scaled from HCO+ by (B/B_HCO+)^2; mu as HCO+
    "H13CO+": RotorConstants(43377.302, 78.4, 3.90, _M["H"] + _M["13C"] + _M["O"] - _M_E, 0.0,
                             "from memory (B0, D0); mu as HCO+"),
    # B0, D0 fit; mu Ebenstein & Muenter 1984 (memory, REFERENCES.md)
    "HCN": RotorConstants(44315.976, 87.2, 2.985, _M["H"] + _M["C"] + _M["N"], 0.0,
                          "B0, D0 fit; mu Ebenstein & Muenter 1984 (REFERENCES.md)"),
    # from memory: 1-0 at 90.663568 GHz, D0 ~101 kHz, mu 3.05 D (Blackman et al. 1976)
    "HNC": RotorConstants(45331.987, 101.0, 3.05, _M["H"] + _M["N"] + _M["C"], 0.0,
                          "from memory (B0, D0; mu Blackman et al. 1976)"),
    # B0, D0 fit; mu Winnewisser & Cook 1968 (memory, REFERENCES.md)
    "CS": RotorConstants(24495.559, 40.0, 1.958, _M["C"] + _M["S"], 0.0,
                         "B0, D0 fit; mu Winnewisser & Cook 1968 (REFERENCES.md)"),
    # B0, D0 fit; mu Raymonda, Muenter & Klemperer 1970 (read, REFERENCES.md)
    "SiO": RotorConstants(21711.985, 29.9, 3.0982, _M["Si"] + _M["O"], 0.0,
                          "B0, D0 fit; mu Raymonda, Muenter & Klemperer 1970 (REFERENCES.md)"),
    # B0 2nd; D0, mu memory (Havenith et al. 1990); hyperfine-weighted
    "N2H+": RotorConstants(46586.88, 88.0, 3.4, 2 * _M["N"] + _M["H"] - _M_E, 0.0,
                           "B0 (2nd), D0 and mu Havenith et al. 1990 (memory), REFERENCES.md"),
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
    e_hz = b_hz * j * (j + 1) - d_hz * j**2 * (j + 1) ** 2
    j_up = j[1:]
    nu_hz = e_hz[1:] - e_hz[:-1]  # = 2 B J - 4 D J^3
    mu_eff = c.mu_debye - c.stretch_debye * j_up**2
    return MolecularData(
        name=name, mass_amu=c.mass_amu, energy_k=H_CGS * e_hz / K_CGS, g=2.0 * j + 1.0,
        level_labels=tuple(str(int(v)) for v in j), upper=np.arange(1, j_max + 1),
        lower=np.arange(0, j_max), a_ul_s=einstein_a_dipole(nu_hz, mu_eff, j_up),
        freq_hz=nu_hz, collisions={},
        source=f"built-in linear rotor ({c.source}); Townes & Schawlow 1955")
