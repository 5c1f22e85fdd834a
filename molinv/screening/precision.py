"""Numbers of result tables written to the digits that mean something.

Energies are written to a resolution of :data:`ENERGY_RESOLUTION_KCAL_MOL` or finer in the
table's unit (4 decimals in kcal/mol and kJ/mol, 6 in eV, 7 in Hartree), far below any
model's error; domain distances to :data:`DISTANCE_DIGITS` significant digits. Only the
written file is rounded: chunk files keep every digit, so that rankings, relative energies and
per-atom values are computed from the full values, and rounding the same value always writes
the same text, whether a table was written whole or merged from chunks.
"""

from __future__ import annotations

import math
from typing import Callable, Iterable

import pandas as pd

from molinv.molecules.units import convert_energy

from .spreadsheet import INPUT_PREFIX

#: Finest energy difference written, kcal/mol (our choice: a thousandth of the smallest
#: error any model here reaches).
ENERGY_RESOLUTION_KCAL_MOL = 1e-4
#: Significant digits of a domain distance (a ratio to a threshold).
DISTANCE_DIGITS = 4


def energy_decimals(unit: str) -> int:
    """Decimals that resolve :data:`ENERGY_RESOLUTION_KCAL_MOL` in ``unit``."""
    return math.ceil(-math.log10(convert_energy(ENERGY_RESOLUTION_KCAL_MOL, "kcal/mol", unit)) - 1e-9)


def _significant(value: float) -> float:
    return float(f"{float(value):.{DISTANCE_DIGITS}g}")


def roundings(columns: Iterable[str], unit: str) -> dict[str, Callable[[float], float]]:
    """How each rounded column of a table in ``unit`` is rounded: energies (molinv's columns named
    ``..._<unit>``) and the domain distance; the input's own columns are written as given."""
    decimals = energy_decimals(unit)
    found = {}
    for column in columns:
        if column == "domain_distance":
            found[column] = _significant
        elif column.endswith(f"_{unit}") and not column.startswith(INPUT_PREFIX):
            # Python's float rounding (numpy's differs in the last digit), as for the text of merged files.
            found[column] = lambda value, decimals=decimals: round(float(value), decimals)
    return found


def round_text(text: str, rounding: Callable[[float], float]) -> str:
    """A number as pandas writes it to CSV (``repr``), rounded; '' (missing) stays ''."""
    return text if text == "" else repr(rounding(float(text)))


def rounded(table: pd.DataFrame, unit: str) -> pd.DataFrame:
    """A copy of ``table`` with its energies and distances rounded as the module docstring says."""
    table = table.copy()
    for column, rounding in roundings(table.columns, unit).items():
        if pd.api.types.is_float_dtype(table[column]):
            table[column] = table[column].map(lambda value: value if pd.isna(value) else rounding(value))
    return table
