"""Finding molecular data by name, and the Line a tracer is observed in.

Order of look-up in :func:`molecule`:

1. ``datafile`` given: that Leiden-format file.
2. Collision rates wanted (``need_collisions=True``): a file ``<name>.dat`` / ``<name>.txt``
   (as given or in lower case) in a directory of the environment variable ``SYNTH_MOLDATA``
   (``os.pathsep``-separated); else for CO the carried file ``data/co_h2_rates.txt`` (its own
   levels, lines and rates); for 13CO, C18O, C17O the built-in rotor with CO's rates mapped by
   J (common practice); else :class:`~synth.errors.ExcitationError` saying what to supply.
3. Otherwise: the built-in linear rotor (:mod:`synth.molecules.rotor`), or a file in
   ``SYNTH_MOLDATA`` for a species that is not built in.
"""

import functools
import os
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u

from ..errors import ExcitationError, UnknownSpeciesError
from .data_model import CollisionRates
from .leiden import read_leiden
from .rotor import ROTOR_CONSTANTS, linear_rotor

__all__ = ["molecule", "Line", "builtin_species", "line_table", "format_line_table",
           "canonical_species", "CO_RATES_FILE", "CO_ISOTOPOLOGUES", "MOLDATA_ENV"]

#: The carried CO file (Schöier et al. 2005; rates Yang et al. 2010), see data/README.md.
CO_RATES_FILE = Path(__file__).parent / "data" / "co_h2_rates.txt"
#: Isotopologues that borrow CO's collision rates, mapped by J.
CO_ISOTOPOLOGUES = ("13CO", "C18O", "C17O")
#: Environment variable listing directories with Leiden-format files.
MOLDATA_ENV = "SYNTH_MOLDATA"


def builtin_species():
    """Names of the built-in species, e.g. ("CO", "13CO", ...)."""
    return tuple(ROTOR_CONSTANTS)


def canonical_species(name):
    """The built-in name matching ``name`` up to case and surrounding spaces, else None."""
    key = str(name).strip().lower()
    return next((n for n in ROTOR_CONSTANTS if n.lower() == key), None)


@functools.lru_cache(maxsize=64)
def _read_cached(path, _mtime_ns):
    return read_leiden(path)


def _read(path):
    path = Path(path).expanduser().resolve()
    try:
        mtime = path.stat().st_mtime_ns
    except OSError:
        mtime = None  # read_leiden raises the error naming the file
    return _read_cached(str(path), mtime)


def _find_in_moldata(name):
    """Path of a Leiden-format file for ``name`` in the SYNTH_MOLDATA directories, or None."""
    dirs = [d for d in os.environ.get(MOLDATA_ENV, "").split(os.pathsep) if d]
    stems = dict.fromkeys((name, name.lower()))
    for directory in dirs:
        for stem in stems:
            for ext in (".dat", ".txt"):
                path = Path(directory) / f"{stem}{ext}"
                if path.is_file():
                    return path
    return None


@functools.lru_cache(maxsize=32)
def _rotor(name):
    return linear_rotor(name)


@functools.lru_cache(maxsize=8)
def _isotopologue_with_co_rates(name):
    """Rotor levels of ``name`` with the carried CO rates for the same J pair (common practice)."""
    iso, co = _rotor(name), _read(CO_RATES_FILE)
    index = {label: i for i, label in enumerate(iso.level_labels)}
    collisions = {}
    for partner, rates in co.collisions.items():
        pairs = [(k, index.get(co.level_labels[up]), index.get(co.level_labels[lo]))
                 for k, (up, lo) in enumerate(zip(rates.upper, rates.lower))]
        pairs = [p for p in pairs if p[1] is not None and p[2] is not None]
        rows = [p[0] for p in pairs]
        collisions[partner] = CollisionRates(partner, rates.temperatures_k,
                                             [p[1] for p in pairs], [p[2] for p in pairs],
                                             rates.rates_cm3s[rows])
    return iso.with_collisions(
        collisions, f"{iso.source}; collision rates of CO ({co.source}) mapped by J "
                    "(common practice)")


def _supply_hint(name):
    return (f"supply a Leiden-format file for {name}: datafile='path/to/{name.lower()}.dat' "
            f"(config key `datafile`), or put {name.lower()}.dat in a directory listed in the "
            f"environment variable {MOLDATA_ENV}")


def molecule(name, datafile=None, need_collisions=False):
    """Molecular data for species ``name`` (cached; the look-up order is in the module doc).

    Parameters
    ----------
    name : str
        Species, a built-in name up to case (:func:`builtin_species`) or any name when
        ``datafile`` is given or a file for it is in ``SYNTH_MOLDATA``.
    datafile : str or os.PathLike, optional
        A file in the Leiden molecular-data format (Schöier et al. 2005, A&A 432, 369).
    need_collisions : bool
        Return data that carries collision rates (needed by LVG), or raise.

    Returns
    -------
    MolecularData

    Raises
    ------
    UnknownSpeciesError
        Unknown name without a file.
    ExcitationError
        Collision rates are needed but none are available; says what to supply.
    """
    if datafile is not None:
        mol = _read(datafile)
        if need_collisions and not mol.collisions:
            raise ExcitationError(f"datafile {os.fspath(datafile)} has no collision rates; "
                                  + _supply_hint(name))
        return mol
    canon = canonical_species(name)
    found = _find_in_moldata(str(name).strip()) if need_collisions or canon is None else None
    if found is not None:
        mol = _read(found)
        if need_collisions and not mol.collisions:
            raise ExcitationError(f"{found} has no collision rates; " + _supply_hint(name))
        return mol
    if canon is None:
        raise UnknownSpeciesError(
            f"unknown species {name!r}; built-in: {', '.join(builtin_species())}; for another "
            "species " + _supply_hint(str(name).strip()))
    if not need_collisions:
        return _rotor(canon)
    if canon == "CO":
        return _read(CO_RATES_FILE)
    if canon in CO_ISOTOPOLOGUES:
        return _isotopologue_with_co_rates(canon)
    raise ExcitationError(f"no collision rates carried for {canon} (needed for LVG); "
                          + _supply_hint(canon))


@dataclass(frozen=True)
class Line:
    """One spectral line of one species, e.g. ``Line("CO", "1-0")``.

    Only the strings are stored (the object pickles); the molecular data come from the cached
    registry. On construction the species and transition are checked and put in canonical
    form ("co", "J=1-0" -> "CO", "1-0").
    """

    species: str
    transition: str
    datafile: str | None = None

    def __post_init__(self):
        datafile = None if self.datafile is None else os.fspath(self.datafile)
        object.__setattr__(self, "datafile", datafile)
        if datafile is None and canonical_species(self.species) is not None:
            object.__setattr__(self, "species", canonical_species(self.species))
        mol = molecule(self.species, datafile)
        label = mol.transition_labels[mol.transition_index(self.transition)]
        object.__setattr__(self, "transition", label)

    def __str__(self):
        return f"{self.species} {self.transition}"

    @property
    def molecule(self):
        """The MolecularData the line belongs to (without the need for collision rates)."""
        return molecule(self.species, self.datafile)

    def collision_molecule(self):
        """MolecularData with collision rates for LVG (see :func:`molecule`); find the line
        in it with ``.transition_index(line.transition)``."""
        return molecule(self.species, self.datafile, need_collisions=True)

    @property
    def index(self):
        """0-based index of the line among the molecule's radiative transitions."""
        return self.molecule.transition_index(self.transition)

    @property
    def upper(self):
        """0-based upper level index."""
        return int(self.molecule.upper[self.index])

    @property
    def lower(self):
        """0-based lower level index."""
        return int(self.molecule.lower[self.index])

    @property
    def freq_hz(self):
        """Rest frequency, Hz (float)."""
        return float(self.molecule.freq_hz[self.index])

    @property
    def a_ul_s(self):
        """Einstein A, s^-1 (float)."""
        return float(self.molecule.a_ul_s[self.index])

    @property
    def e_up_k(self):
        """Upper level energy E_u/k, K (float)."""
        return float(self.molecule.energy_k[self.upper])

    @property
    def frequency(self):
        """Rest frequency (Quantity, GHz)."""
        return (self.freq_hz * u.Hz).to(u.GHz)

    @property
    def a_ul(self):
        """Einstein A (Quantity, 1/s)."""
        return self.a_ul_s / u.s

    @property
    def e_up(self):
        """Upper level energy E_u/k (Quantity, K)."""
        return self.e_up_k * u.K

    @property
    def g_up(self):
        """Statistical weight of the upper level."""
        return float(self.molecule.g[self.upper])

    @property
    def g_low(self):
        """Statistical weight of the lower level."""
        return float(self.molecule.g[self.lower])

    @property
    def mass_amu(self):
        """Molecular mass, u."""
        return self.molecule.mass_amu


def line_table(species=None, max_e_up_k=None, max_lines=None):
    """Rows describing the lines of ``species`` (a name or names; default all built-in).

    Each row is a dict with keys species, transition, frequency_ghz, e_up_k, a_ul_s, g_up.
    Lines with E_u/k above ``max_e_up_k`` (K, optional) are left out; ``max_lines`` keeps the
    first that many lines of each species (in the molecule's order).
    """
    names = builtin_species() if species is None else (
        (species,) if isinstance(species, str) else tuple(species))
    rows = []
    for name in names:
        mol = molecule(name)
        kept = 0
        for k, label in enumerate(mol.transition_labels):
            if max_lines is not None and kept >= max_lines:
                break
            e_up = float(mol.energy_k[mol.upper[k]])
            if max_e_up_k is not None and e_up > max_e_up_k:
                continue
            rows.append({"species": canonical_species(name) or mol.name, "transition": label,
                         "frequency_ghz": float(mol.freq_hz[k]) / 1e9, "e_up_k": e_up,
                         "a_ul_s": float(mol.a_ul_s[k]), "g_up": float(mol.g[mol.upper[k]])})
            kept += 1
    return rows


def format_line_table(rows):
    """Plain-text table of :func:`line_table` rows, one line per spectral line."""
    header = f"{'species':<8} {'line':<7} {'freq [GHz]':>13} {'E_up/k [K]':>11} " \
             f"{'A_ul [1/s]':>11} {'g_up':>5}"
    body = [f"{r['species']:<8} {r['transition']:<7} {r['frequency_ghz']:>13.7f} "
            f"{r['e_up_k']:>11.2f} {r['a_ul_s']:>11.3e} {r['g_up']:>5.0f}" for r in rows]
    return "\n".join([header, "-" * len(header), *body])
