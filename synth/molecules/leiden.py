"""Reader and writer for the Leiden molecular-data text format (Schöier et al. 2005, A&A 432, 369).

The format holds, in order and each item after a comment line beginning with '!': the molecule
name, the molecular weight, the number of levels and one line per level (number, energy in
cm^-1, statistical weight, quantum numbers), the number of radiative transitions and one line
per transition (number, upper, lower, Einstein A in s^-1, frequency in GHz, E_u/k in K), the
number of collision partners and, per partner, a line with the partner code and a description,
the number of collisional transitions, the number of temperatures, the temperatures, and one
line per transition (number, upper, lower, downward rate coefficients in cm^3 s^-1).

Every problem raises :class:`~synth.errors.MolecularDataError` naming the file, the line and
what was expected there.
"""

import os
from pathlib import Path

import numpy as np

from ..errors import MolecularDataError
from ..radiation import C_CGS, H_CGS, K_CGS
from .data_model import LEIDEN_PARTNER_CODES, CollisionRates, MolecularData

__all__ = ["read_leiden", "write_leiden", "CM_TO_K"]

#: hc/k in K cm: converts level energies in cm^-1 to E/k in K (CODATA 2018 via astropy).
CM_TO_K = H_CGS * C_CGS / K_CGS

_PARTNER_TO_CODE = {name: code for code, name in LEIDEN_PARTNER_CODES.items()}


class _Records:
    """The data lines of a file, with their line numbers and whether a comment preceded them."""

    def __init__(self, path):
        self.fname = Path(path).name
        try:
            text = Path(path).read_text(encoding="utf-8", errors="replace")
        except OSError as exc:
            raise MolecularDataError(f"cannot read molecular data file {path}: {exc}") from None
        self.rows, after_comment = [], False
        lines = text.splitlines()
        for number, line in enumerate(lines, start=1):
            stripped = line.strip()
            if stripped.startswith("!"):
                after_comment = True
            elif stripped:
                self.rows.append((number, stripped, after_comment))
                after_comment = False
        self.end = len(lines) + 1
        self.pos = 0

    def error(self, where, message):
        place = f"line {where}" if where < self.end else f"line {where} (end of file)"
        return MolecularDataError(f"{self.fname} {place}: {message}")

    def peek(self):
        return self.rows[self.pos] if self.pos < len(self.rows) else None

    def take(self, what):
        row = self.peek()
        if row is None:
            raise self.error(self.end, f"expected {what}, found the end of the file")
        self.pos += 1
        return row

    def number(self, token, where, what, kind=float):
        try:
            return kind(token)
        except ValueError:
            raise self.error(where, f"expected {what} (a number), found {token!r}") from None

    def count(self, what, minimum=1):
        where, text, _ = self.take(f"the number of {what}")
        value = self.number(text.split()[0], where, f"the number of {what}", int)
        if value < minimum:
            raise self.error(where, f"the number of {what} must be >= {minimum}, found {value}")
        return value

    def block(self, n, min_tokens, what):
        """The next ``n`` rows of a table, each split into tokens."""
        rows = []
        while len(rows) < n:
            row = self.peek()
            if row is None or (rows and row[2]) or len(row[1].split()) < min_tokens:
                where = row[0] if row is not None else self.end
                raise self.error(where, f"expected {n} {what}, found {len(rows)}")
            self.pos += 1
            rows.append((row[0], row[1].split()))
        nxt = self.peek()
        if nxt is not None and not nxt[2] and len(nxt[1].split()) >= min_tokens:
            raise self.error(nxt[0], f"expected {n} {what}, found more")
        return rows

    def level(self, token, where, n_levels, role):
        index = self.number(token, where, f"the {role} level number", int)
        if not 1 <= index <= n_levels:
            raise self.error(where, f"{role} level {index} out of range 1..{n_levels}")
        return index - 1


def _read_levels(rec):
    n = rec.count("energy levels")
    energy_cm, g, labels = [], [], []
    for k, (where, tok) in enumerate(rec.block(n, 3, "energy levels")):
        found = rec.number(tok[0], where, "the level number", int)
        if found != k + 1:
            raise rec.error(where, f"expected level number {k + 1}, found {found}")
        energy_cm.append(rec.number(tok[1], where, "the level energy in cm^-1"))
        g.append(rec.number(tok[2], where, "the statistical weight"))
        if g[-1] <= 0:
            raise rec.error(where, f"statistical weight must be > 0, found {tok[2]}")
        labels.append("_".join(tok[3:]) if len(tok) > 3 else str(k))
    return np.array(energy_cm) * CM_TO_K, np.array(g), tuple(labels)


def _read_lines(rec, n_levels):
    n = rec.count("radiative transitions")
    upper, lower, a_s, freq_ghz = [], [], [], []
    for where, tok in rec.block(n, 5, "radiative transitions"):
        upper.append(rec.level(tok[1], where, n_levels, "upper"))
        lower.append(rec.level(tok[2], where, n_levels, "lower"))
        a_s.append(rec.number(tok[3], where, "the Einstein A in s^-1"))
        freq_ghz.append(rec.number(tok[4], where, "the frequency in GHz"))
        if a_s[-1] <= 0 or freq_ghz[-1] <= 0:
            raise rec.error(where, f"Einstein A and frequency must be > 0, found {tok[3]}, "
                                   f"{tok[4]}")
    return np.array(upper), np.array(lower), np.array(a_s), np.array(freq_ghz) * 1e9


def _read_partner(rec, n_levels):
    where, text, _ = rec.take("a collision partner code")
    code = rec.number(text.split()[0], where, "a collision partner code", int)
    if code not in LEIDEN_PARTNER_CODES:
        raise rec.error(where, f"collision partner code {code} unknown; valid: "
                               + ", ".join(f"{c} ({p})" for c, p in LEIDEN_PARTNER_CODES.items()))
    description = text.split(None, 1)[1] if len(text.split()) > 1 else ""
    n_trans = rec.count("collisional transitions")
    n_temp = rec.count("collision temperatures")
    t_where, t_text, _ = rec.take("the collision temperatures")
    tokens = t_text.split()
    if len(tokens) != n_temp:
        raise rec.error(t_where, f"expected {n_temp} collision temperatures, found {len(tokens)}")
    temps = [rec.number(t, t_where, "a temperature in K") for t in tokens]
    upper, lower, rates = [], [], []
    for r_where, tok in rec.block(n_trans, 3, "collisional transitions"):
        if len(tok) != 3 + n_temp:
            raise rec.error(r_where, f"expected {n_temp} rate coefficients after the level "
                                     f"numbers, found {len(tok) - 3}")
        upper.append(rec.level(tok[1], r_where, n_levels, "upper"))
        lower.append(rec.level(tok[2], r_where, n_levels, "lower"))
        rates.append([rec.number(t, r_where, "a rate coefficient in cm^3 s^-1") for t in tok[3:]])
    try:
        coll = CollisionRates(LEIDEN_PARTNER_CODES[code], np.array(temps), np.array(upper),
                              np.array(lower), np.array(rates))
    except MolecularDataError as exc:
        raise rec.error(where, f"in the collision block starting here: {exc}") from None
    return where, coll, description


def read_leiden(path):
    """Read a file in the Leiden molecular-data format.

    Level energies in cm^-1 become E/k in K with hc/k; frequencies in GHz become Hz; E_u
    given in the file is not used (it follows from the levels). Partner codes 1..7 become
    "H2", "pH2", "oH2", "e", "H", "He", "H+" (Schöier et al. 2005, A&A 432, 369, section 3).

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    MolecularData

    Raises
    ------
    MolecularDataError
        Naming the file, the line number and what was expected.
    """
    rec = _Records(path)
    name = rec.take("the molecule name")[1]
    where, text, _ = rec.take("the molecular weight")
    mass = rec.number(text.split()[0], where, "the molecular weight")
    energy_k, g, labels = _read_levels(rec)
    upper, lower, a_s, freq_hz = _read_lines(rec, len(g))
    collisions, descriptions = {}, []
    if rec.peek() is not None:
        for _ in range(rec.count("collision partners", minimum=0)):
            where, coll, description = _read_partner(rec, len(g))
            if coll.partner in collisions:
                raise rec.error(where, f"collision partner {coll.partner} given twice")
            collisions[coll.partner] = coll
            descriptions.append(description)
    extra = rec.peek()
    if extra is not None:
        raise rec.error(extra[0], f"unexpected data after the last collision partner: "
                                  f"{extra[1][:40]!r}")
    source = f"{os.fspath(path)} (Leiden format" + "".join(f"; {d}" for d in descriptions) + ")"
    try:
        return MolecularData(name, mass, energy_k, g, labels, upper, lower, a_s, freq_hz,
                             collisions, source)
    except MolecularDataError as exc:
        raise MolecularDataError(f"{rec.fname}: {exc}") from None


def _format_rows(rows):
    return "\n".join("  ".join(str(v) for v in row) for row in rows)


def write_leiden(mol, path):
    """Write ``mol`` in the Leiden molecular-data format (inverse of :func:`read_leiden`).

    Written to a temporary name first and renamed, so no half-written file is left behind.
    """
    e_cm = mol.energy_k / CM_TO_K
    levels = [(i + 1, f"{e:.12g}", f"{g:.12g}", lab)
              for i, (e, g, lab) in enumerate(zip(e_cm, mol.g, mol.level_labels))]
    lines = [(k + 1, u + 1, l + 1, f"{a:.12g}", f"{f / 1e9:.12g}", f"{mol.energy_k[u]:.6f}")
             for k, (u, l, a, f) in enumerate(zip(mol.upper, mol.lower, mol.a_ul_s, mol.freq_hz))]
    parts = ["!MOLECULE", mol.name, "!MOLECULAR WEIGHT", f"{mol.mass_amu:.12g}",
             "!NUMBER OF ENERGY LEVELS", str(mol.n_levels),
             "!LEVEL + ENERGIES(cm^-1) + WEIGHT + QUANTUM NUMBERS", _format_rows(levels),
             "!NUMBER OF RADIATIVE TRANSITIONS", str(mol.n_lines),
             "!TRANS + UP + LOW + EINSTEINA(s^-1) + FREQ(GHz) + E_u(K)", _format_rows(lines),
             "!NUMBER OF COLL PARTNERS", str(len(mol.collisions))]
    for partner, coll in mol.collisions.items():
        rows = [(k + 1, u + 1, l + 1, *(f"{r:.6e}" for r in rr))
                for k, (u, l, rr) in enumerate(zip(coll.upper, coll.lower, coll.rates_cm3s))]
        parts += ["!COLLISIONS BETWEEN", f"{_PARTNER_TO_CODE[partner]} {mol.name}-{partner}",
                  "!NUMBER OF COLL TRANS", str(coll.n_transitions),
                  "!NUMBER OF COLL TEMPS", str(coll.temperatures_k.size),
                  "!COLL TEMPS", "  ".join(f"{t:.6g}" for t in coll.temperatures_k),
                  "!TRANS + UP + LOW + COLLRATES(cm^3 s^-1)", _format_rows(rows)]
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text("\n".join(parts) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    return path
