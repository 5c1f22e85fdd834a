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


def neutralised(value):
    """``value`` with a leading quote when a spreadsheet would run it as a formula; idempotent."""
    return "'" + value if isinstance(value, str) and value.startswith(FORMULA_STARTS) else value


def restored(value):
    """The inverse of :func:`neutralised`."""
    quoted = isinstance(value, str) and value.startswith("'") and value[1:].startswith(FORMULA_STARTS)
    return value[1:] if quoted else value


def spreadsheet_safe(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` with its :data:`TEXT_COLUMNS` neutralised."""
    table = table.copy()
    for column in TEXT_COLUMNS:
        if column in table.columns:
            table[column] = table[column].map(neutralised)
    return table
