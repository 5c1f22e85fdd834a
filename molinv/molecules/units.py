"""Units: one internal system (eV, Angstrom) and explicit conversions at the boundary.

Conversion factors come from :mod:`ase.units`, which derives them from CODATA
fundamental constants (ASE's default set is CODATA 2014; Mohr, Newell, Taylor,
Rev. Mod. Phys. 88, 035009, 2016). The calorie is the thermochemical calorie,
exactly 4.184 J (NIST SP 811, 2008, appendix B.8).
"""

from __future__ import annotations

import numpy as np
from ase import units as _ase_units

from ..errors import MolinvError

INTERNAL_ENERGY_UNIT = "eV"
INTERNAL_LENGTH_UNIT = "Angstrom"

#: Size of one unit in eV.
ENERGY_UNITS: dict[str, float] = {
    "eV": 1.0,
    "meV": 1e-3,
    "Hartree": _ase_units.Hartree,
    "kcal/mol": _ase_units.kcal / _ase_units.mol,
    "kJ/mol": _ase_units.kJ / _ase_units.mol,
}

#: Size of one unit in Angstrom.
LENGTH_UNITS: dict[str, float] = {
    "Angstrom": 1.0,
    "Bohr": _ase_units.Bohr,
    "nm": 10.0,
}

_ALIASES = {
    "ev": "eV",
    "mev": "meV",
    "hartree": "Hartree",
    "ha": "Hartree",
    "eh": "Hartree",
    "au": "Hartree",
    "kcal/mol": "kcal/mol",
    "kcal_mol": "kcal/mol",
    "kcalmol": "kcal/mol",
    "kj/mol": "kJ/mol",
    "kj_mol": "kJ/mol",
    "kjmol": "kJ/mol",
    "angstrom": "Angstrom",
    "ang": "Angstrom",
    "a": "Angstrom",
    "bohr": "Bohr",
    "a0": "Bohr",
    "nm": "nm",
}


class UnitError(MolinvError, ValueError):
    """An energy or length unit that molinv does not know."""


def _canonical(unit: str, table: dict[str, float], kind: str) -> str:
    name = _ALIASES.get(str(unit).strip().lower(), str(unit).strip())
    if name not in table:
        raise UnitError(f"unknown {kind} unit {unit!r}; choose one of: {', '.join(table)}")
    return name


def energy_unit(unit: str) -> str:
    """Canonical spelling of an energy unit (``'hartree'`` -> ``'Hartree'``)."""
    return _canonical(unit, ENERGY_UNITS, "energy")


def length_unit(unit: str) -> str:
    """Canonical spelling of a length unit (``'bohr'`` -> ``'Bohr'``)."""
    return _canonical(unit, LENGTH_UNITS, "length")


def convert_energy(value, from_unit: str, to_unit: str):
    """Convert energies (scalar or array) between units, e.g. Hartree -> kcal/mol."""
    factor = ENERGY_UNITS[energy_unit(from_unit)] / ENERGY_UNITS[energy_unit(to_unit)]
    return np.asarray(value, dtype=float) * factor if np.ndim(value) else float(value) * factor


def convert_length(value, from_unit: str, to_unit: str):
    """Convert lengths (scalar or array) between units, e.g. Bohr -> Angstrom."""
    factor = LENGTH_UNITS[length_unit(from_unit)] / LENGTH_UNITS[length_unit(to_unit)]
    return np.asarray(value, dtype=float) * factor if np.ndim(value) else float(value) * factor
