"""Molecular data as one validated, immutable product: levels, radiative lines, collision rates.

Energies are stored as E/k in K, frequencies in Hz, Einstein A in s^-1 and downward collision
rate coefficients in cm^3 s^-1 (plain float arrays, read-only). Level and line indices are
0-based. The layout follows the content of the Leiden molecular-data format (Schöier et al.
2005, A&A 432, 369), whatever file or formula the numbers come from.
"""

import dataclasses
from dataclasses import dataclass

import numpy as np
import astropy.units as u

from ..errors import ExcitationError, MolecularDataError, UnknownSpeciesError

__all__ = ["CollisionRates", "MolecularData", "COLLISION_PARTNERS", "LEIDEN_PARTNER_CODES",
           "normalise_transition_label"]

#: Collision partner names used by synth.
COLLISION_PARTNERS = ("H2", "pH2", "oH2", "e", "H", "He", "H+")

#: Partner codes of the Leiden format (Schöier et al. 2005, section 3) -> partner name.
LEIDEN_PARTNER_CODES = {1: "H2", 2: "pH2", 3: "oH2", 4: "e", 5: "H", 6: "He", 7: "H+"}


def _frozen(values, dtype, name, owner):
    """Return a read-only 1-D or 2-D copy of ``values`` as ``dtype``, or raise naming ``name``."""
    try:
        arr = np.array(values, dtype=dtype)
    except (TypeError, ValueError):
        raise MolecularDataError(f"{owner}: {name} must be numeric, got {values!r}") from None
    if not np.all(np.isfinite(arr)):
        raise MolecularDataError(f"{owner}: {name} holds non-finite values")
    arr.setflags(write=False)
    return arr


def _check_indices(upper, lower, n_levels, owner):
    """Raise unless 0 <= lower, upper < n_levels and upper != lower."""
    for name, idx in (("upper", upper), ("lower", lower)):
        bad = (idx < 0) | (idx >= n_levels)
        if np.any(bad):
            raise MolecularDataError(
                f"{owner}: {name} level index {int(idx[bad][0])} out of range 0..{n_levels - 1}")
    if np.any(upper == lower):
        raise MolecularDataError(f"{owner}: a transition has upper == lower level")


def normalise_transition_label(label):
    """Canonical form of a transition label: '1-0' from 'J=1-0', '1 - 0', 'J=1->0', 'j 1-0'."""
    text = str(label).strip().replace("->", "-").replace(" ", "")
    if text[:2].upper() == "J=":
        text = text[2:]
    elif text[:1] in "Jj" and text[1:2].isdigit():
        text = text[1:]
    return text


@dataclass(frozen=True, eq=False)
class CollisionRates:
    """Downward collision rate coefficients of one collision partner.

    Attributes
    ----------
    partner : str
        One of :data:`COLLISION_PARTNERS`.
    temperatures_k : ndarray (nT,)
        Kinetic temperatures of the table, K, strictly increasing.
    upper, lower : ndarray (ntr,) of int
        0-based upper and lower level of each collisional transition.
    rates_cm3s : ndarray (ntr, nT)
        Downward rate coefficients C_ul / n_partner, cm^3 s^-1 (>= 0).
    """

    partner: str
    temperatures_k: np.ndarray
    upper: np.ndarray
    lower: np.ndarray
    rates_cm3s: np.ndarray

    def __post_init__(self):
        owner = f"collision rates ({self.partner})"
        if self.partner not in COLLISION_PARTNERS:
            raise MolecularDataError(f"collision partner {self.partner!r} unknown; valid: "
                                     f"{', '.join(COLLISION_PARTNERS)}")
        temps = _frozen(self.temperatures_k, np.float64, "temperatures_k", owner)
        upper = _frozen(self.upper, np.int64, "upper", owner)
        lower = _frozen(self.lower, np.int64, "lower", owner)
        rates = _frozen(self.rates_cm3s, np.float64, "rates_cm3s", owner)
        if temps.ndim != 1 or temps.size == 0 or np.any(temps <= 0) or np.any(np.diff(temps) <= 0):
            raise MolecularDataError(f"{owner}: temperatures_k must be positive and increasing, "
                                     f"got {temps.tolist()}")
        if upper.shape != lower.shape or upper.ndim != 1:
            raise MolecularDataError(f"{owner}: upper {upper.shape} and lower {lower.shape} "
                                     "must be 1-D of equal length")
        if rates.shape != (upper.size, temps.size):
            raise MolecularDataError(f"{owner}: rates_cm3s has shape {rates.shape}, expected "
                                     "(n_transitions, n_temperatures) = "
                                     f"{(upper.size, temps.size)}")
        if np.any(rates < 0):
            raise MolecularDataError(f"{owner}: rates_cm3s must be >= 0")
        for name, value in (("temperatures_k", temps), ("upper", upper), ("lower", lower),
                            ("rates_cm3s", rates)):
            object.__setattr__(self, name, value)

    @property
    def n_transitions(self):
        """Number of collisional transitions."""
        return int(self.upper.size)


@dataclass(frozen=True, eq=False)
class MolecularData:
    """Levels, radiative transitions and collision rates of one species.

    Attributes
    ----------
    name : str
    mass_amu : float
        Molecular mass, atomic mass units.
    energy_k : ndarray (n_levels,)
        Level energies E/k, K; the first level is the ground level (0 K).
    g : ndarray (n_levels,)
        Statistical weights.
    level_labels : tuple of str
        Quantum-number label of each level ("0", "1", ... for a linear rotor).
    upper, lower : ndarray (n_lines,) of int
        0-based upper and lower level of each radiative transition.
    a_ul_s : ndarray (n_lines,)
        Einstein A coefficients, s^-1.
    freq_hz : ndarray (n_lines,)
        Rest frequencies, Hz.
    collisions : dict
        Partner name -> :class:`CollisionRates` (may be empty).
    source : str
        Where the numbers come from (citation or file path).
    """

    name: str
    mass_amu: float
    energy_k: np.ndarray
    g: np.ndarray
    level_labels: tuple
    upper: np.ndarray
    lower: np.ndarray
    a_ul_s: np.ndarray
    freq_hz: np.ndarray
    collisions: dict
    source: str

    def __post_init__(self):
        owner = f"molecular data {self.name!r}"
        arrays = {"energy_k": _frozen(self.energy_k, np.float64, "energy_k", owner),
                  "g": _frozen(self.g, np.float64, "g", owner),
                  "upper": _frozen(self.upper, np.int64, "upper", owner),
                  "lower": _frozen(self.lower, np.int64, "lower", owner),
                  "a_ul_s": _frozen(self.a_ul_s, np.float64, "a_ul_s", owner),
                  "freq_hz": _frozen(self.freq_hz, np.float64, "freq_hz", owner)}
        labels = tuple(str(label) for label in self.level_labels)
        self._check_shapes(arrays, labels, owner)
        self._check_values(arrays, owner)
        collisions = dict(self.collisions)
        for partner, rates in collisions.items():
            if not isinstance(rates, CollisionRates) or rates.partner != partner:
                raise MolecularDataError(f"{owner}: collisions[{partner!r}] must be "
                                         f"CollisionRates with partner {partner!r}")
            _check_indices(rates.upper, rates.lower, len(labels), f"{owner} {partner}")
            if np.any(arrays["energy_k"][rates.upper] < arrays["energy_k"][rates.lower]):
                raise MolecularDataError(f"{owner}: {partner} rates have an upper level below "
                                         "the lower level")
        if not (np.isfinite(self.mass_amu) and self.mass_amu > 0):
            raise MolecularDataError(f"{owner}: mass_amu must be > 0, got {self.mass_amu!r}")
        for name, value in arrays.items():
            object.__setattr__(self, name, value)
        object.__setattr__(self, "level_labels", labels)
        object.__setattr__(self, "collisions", collisions)
        object.__setattr__(self, "mass_amu", float(self.mass_amu))

    @staticmethod
    def _check_shapes(arrays, labels, owner):
        n_levels = arrays["energy_k"].size
        if n_levels < 2 or arrays["energy_k"].ndim != 1:
            raise MolecularDataError(f"{owner}: need at least 2 levels, got {n_levels}")
        if arrays["g"].shape != (n_levels,) or len(labels) != n_levels:
            raise MolecularDataError(f"{owner}: energy_k has {n_levels} levels but g has "
                                     f"{arrays['g'].size} and level_labels {len(labels)}")
        if len(set(labels)) != n_levels:
            raise MolecularDataError(f"{owner}: level_labels must be unique")
        n_lines = arrays["upper"].size
        for name in ("lower", "a_ul_s", "freq_hz"):
            if arrays[name].shape != (n_lines,):
                raise MolecularDataError(f"{owner}: upper has {n_lines} lines but {name} has "
                                         f"shape {arrays[name].shape}")
        if n_lines == 0:
            raise MolecularDataError(f"{owner}: no radiative transitions")
        _check_indices(arrays["upper"], arrays["lower"], n_levels, owner)

    @staticmethod
    def _check_values(arrays, owner):
        energy = arrays["energy_k"]
        if abs(energy[0]) > 1e-9 or np.any(energy < 0):
            raise MolecularDataError(f"{owner}: energy_k must start at 0 K and be >= 0")
        checks = (("g", arrays["g"]), ("a_ul_s", arrays["a_ul_s"]), ("freq_hz", arrays["freq_hz"]))
        for name, values in checks:
            if np.any(values <= 0):
                i = int(np.argmax(values <= 0))
                raise MolecularDataError(
                    f"{owner}: {name}[{i}] = {float(values[i])!r}; must be > 0")
        bad = energy[arrays["upper"]] <= energy[arrays["lower"]]
        if np.any(bad):
            i = int(np.argmax(bad))
            raise MolecularDataError(f"{owner}: line {i} has upper level energy "
                                     f"{energy[arrays['upper'][i]]} K <= lower level energy "
                                     f"{energy[arrays['lower'][i]]} K")

    @property
    def n_levels(self):
        """Number of energy levels."""
        return int(self.energy_k.size)

    @property
    def n_lines(self):
        """Number of radiative transitions."""
        return int(self.upper.size)

    @property
    def transition_labels(self):
        """Labels "upper-lower" of the radiative transitions, e.g. ("1-0", "2-1", ...)."""
        lab = self.level_labels
        return tuple(f"{lab[i]}-{lab[j]}" for i, j in zip(self.upper, self.lower))

    def transition_index(self, label):
        """0-based index of the radiative transition called ``label``.

        Accepts "1-0", "J=1-0", "1 - 0" and "1->0". An unknown label raises
        :class:`~synth.errors.UnknownSpeciesError` listing the valid ones.
        """
        key = normalise_transition_label(label)
        labels = self.transition_labels
        if key in labels:
            return labels.index(key)
        raise UnknownSpeciesError(
            f"unknown transition {str(label)!r} for {self.name}; valid: {', '.join(labels)}")

    def partition_function(self, t_k):
        """Partition function Q(T) = sum_i g_i exp(-E_i / kT) over the levels held.

        Parameters
        ----------
        t_k : float, array or Quantity (temperature)
            Temperature(s), K, all > 0. Any shape; the result has the same shape.

        Returns
        -------
        ndarray of float
            Dimensionless Q (e.g. Mangum & Shirley 2015, PASP 127, 266, eq. 48).
        """
        if isinstance(t_k, u.Quantity):
            t_k = t_k.to_value(u.K, equivalencies=u.temperature())
        t = np.asarray(t_k, dtype=np.float64)
        if not np.all(t > 0):
            raise ExcitationError(f"t_k must be > 0 K for the partition function of "
                                  f"{self.name}; got min {np.nanmin(t) if t.size else t!r}")
        q = np.zeros_like(t)
        inv_t = 1.0 / t
        for e_k, g in zip(self.energy_k, self.g):  # loop over levels: memory stays t.shape
            q += g * np.exp(-e_k * inv_t)
        return q

    def with_collisions(self, collisions, source):
        """A new MolecularData with ``collisions`` replacing the collision rates."""
        return dataclasses.replace(self, collisions=dict(collisions), source=str(source))
