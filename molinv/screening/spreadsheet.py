"""Text cells of result tables made safe to open in a spreadsheet program.

A cell that starts with ``=``, ``+``, ``-`` or ``@`` (or a tab or carriage return) is
run as a formula by spreadsheet programs, so a molecule named ``=HYPERLINK(...)`` in an
input file would become a live link in the table (OWASP, "CSV Injection"). The free-text
columns of molinv's result tables, the names from input files and the reasons, get a
leading single quote in such cells, which spreadsheets show as text. The change is
undone where molinv reads such a table back (:func:`restored`).
"""

from __future__ import annotations

import pandas as pd

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
#: Free-text columns of result tables: names from input files, and reasons.
TEXT_COLUMNS = ("name", "reason")
#: Columns of an input file's own properties start with this (see :func:`molinv.screening.table.input_cells`),
#: so that they never take the name of one of molinv's; the text among them is free text too.
INPUT_PREFIX = "input_"


def text_columns(dtypes: pd.Series) -> list[str]:
    """The free-text columns of a table with these column types: :data:`TEXT_COLUMNS` and the input's
    own properties that are not numbers."""
    return [column for column, dtype in dtypes.items() if column in TEXT_COLUMNS or (
        column.startswith(INPUT_PREFIX) and not pd.api.types.is_numeric_dtype(dtype))]


def neutralised(value):
    """``value`` with a leading quote when a spreadsheet would run it as a formula; idempotent."""
    return "'" + value if isinstance(value, str) and value.startswith(FORMULA_STARTS) else value


def restored(value):
    """The inverse of :func:`neutralised`."""
    quoted = isinstance(value, str) and value.startswith("'") and value[1:].startswith(FORMULA_STARTS)
    return value[1:] if quoted else value


def spreadsheet_safe(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` with its free-text columns (:func:`text_columns`) neutralised."""
    table = table.copy()
    for column in text_columns(table.dtypes):
        table[column] = table[column].map(neutralised)
    return table
