"""Molecular data: the MolecularData product, the Leiden-format reader, built-in linear rotors
and the registry that finds data by species name."""

from .data_model import CollisionRates, MolecularData
from .leiden import read_leiden, write_leiden
from .registry import Line, builtin_species, format_line_table, line_table, molecule

__all__ = ["CollisionRates", "MolecularData", "read_leiden", "write_leiden", "Line",
           "builtin_species", "format_line_table", "line_table", "molecule"]
