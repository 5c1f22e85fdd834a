"""Ranking a prediction table by stability, in memory or streamed from chunk files.

The rules (:func:`finish_ranking`): a name already used by an earlier row is
flagged, with a note naming the first record that used it. For an energy that
measures stability (:data:`STABILITY_TARGETS`: atomization energy, total energies)
candidates are compared with their isomers only, because energies of different
formulas are not comparable (a 30-carbon alkane has a larger atomization energy than
any isomer of C3H8O, and is no more stable for it): the per-atom value is added;
``relative_to_best_isomer_<unit>`` is the difference to the most stable non-failed
candidate of the same formula (never negative); non-failed rows are grouped by formula
(in text order) and ranked within it from the most stable (largest atomization energy,
smallest total energy), ``rank_in_formula`` 1 being the best isomer, equal values in row
order. Rows without a prediction have no rank and come last, by record. For any other
target (a HOMO-LUMO gap, say) there is no stability order: no per-atom, relative or
rank columns, rows by record.

A screen's table can be longer than memory allows, so :func:`write_ranking`
applies the same rules in three passes over its chunk files, holding one run of
rows at a time: the first pass reads every chunk for what the rules need from
all rows (the first record of each name, the best value of each formula, the
column types the chunks share); the second finishes each chunk's rows and writes
them sorted to temporary run files; the third merges the runs into the ranked
CSV file, numbering the ranks as the rows come out (and rounding energies and distances
for the written file only: :mod:`molinv.screening.precision`). The bookkeeping of the first
pass grows with the number of distinct names and formulas, nothing else with the
number of rows. :func:`finish_ranking` is the same rules on one table in memory.
"""

from __future__ import annotations

import csv
import heapq
import os
import re
import tempfile
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from molinv.cluster.chunks import iter_tables
from molinv.outputs import written_atomically

from .precision import round_text, roundings
from .spreadsheet import neutralised, restored, text_columns

#: Sort key of a finished row, written before its fields in a run file: unranked (0 or 1),
#: missing order value (0 or 1), order value, position of the row in the whole table.
KEY_COLUMNS = ["unranked", "missing", "formula", "order", "position"]
#: Targets whose value orders isomers by stability, and whether larger is stabler.
STABILITY_TARGETS = {"atomization_energy": True, "energy": False, "U0": False, "U": False, "H": False, "G": False}
#: The rank column of a table of a stability target.
RANK_COLUMN = "rank_in_formula"


@dataclass
class RankingBook:
    """What the rules need to know about every row before any row is finished."""

    unit: str
    target: str
    #: Column types of the whole table, as concatenating all chunks gives them.
    dtypes: pd.Series | None = None
    #: formula -> most stable predicted value.
    best: dict = field(default_factory=dict)
    rows: int = 0
    #: Sorted hashes (:func:`name_hashes`) that more than one row's name has: only these names can repeat.
    shared_hashes: np.ndarray = field(default_factory=lambda: np.empty(0, dtype=np.int64))
    #: name -> (number of the chunk where it first appears, first record given for it), for those names.
    first_use: dict = field(default_factory=dict)

    @property
    def value_column(self) -> str:
        return f"{self.target}_{self.unit}"

    @property
    def larger_is_stabler(self) -> bool:
        return STABILITY_TARGETS.get(self.target, False)

    @property
    def ranks(self) -> bool:
        """Whether the target orders isomers by stability (else no rank and no energy columns)."""
        return self.target in STABILITY_TARGETS

    def add(self, table: pd.DataFrame) -> np.ndarray:
        """Take note of the types and best values of one chunk; returns its names' hashes."""
        if self.dtypes is None:
            self.dtypes = table.dtypes
        else:
            # Concatenated from new empty columns: empty text columns concatenated
            # again and again keep one piece each (45 MiB after 300 chunks, measured).
            empty = pd.DataFrame({name: pd.Series([], dtype=dtype) for name, dtype in self.dtypes.items()})
            self.dtypes = pd.concat([empty, table.iloc[:0]], ignore_index=True).dtypes
        extreme = "max" if self.larger_is_stabler else "min"
        values = predicted(table, self.value_column) if self.ranks else pd.Series(dtype=float)
        for formula, value in values.groupby(table["formula"]).agg(extreme).items():
            known = self.best.get(formula, np.nan)
            self.best[formula] = np.fmax(known, value) if self.larger_is_stabler else np.fmin(known, value)
        self.rows += len(table)
        return name_hashes(table["name"])[table["name"].notna().to_numpy()]

    def may_repeat(self, names: pd.Series) -> np.ndarray:
        return names.notna().to_numpy() & np.isin(name_hashes(names), self.shared_hashes)

    def add_first_uses(self, table: pd.DataFrame, number: int) -> None:
        """Take note of the first chunk and record of each name of chunk ``number`` that may repeat
        (chunks in table order)."""
        table = table[self.may_repeat(table["name"])]
        # groupby's "first" skips missing records, as the whole table's would.
        for name, record in table["record"].groupby(table["name"], sort=False).first().items():
            known = self.first_use.get(name)
            if known is None:
                self.first_use[name] = (number, record)
            elif pd.isna(known[1]) and not pd.isna(record):
                self.first_use[name] = (known[0], record)


def name_hashes(names: pd.Series) -> np.ndarray:
    """Python's hash of each name, 0 where missing: names equal as pandas compares them
    (``"a"``, ``7`` and ``7.0``) hash equally, so names whose hash no other row has are unique."""
    present = names.notna().to_numpy()
    hashes = np.zeros(len(names), dtype=np.int64)
    hashes[present] = np.fromiter(map(hash, names[present]), dtype=np.int64, count=int(present.sum()))
    return hashes


def read_book(tables: Callable[[], Iterable[pd.DataFrame]], unit: str, target: str) -> RankingBook:
    """First pass: a :class:`RankingBook` of all chunks (``tables()`` yields them in table order).

    Only the names whose hash another row shares are kept (with their first record,
    read in a second run over the chunks, skipped when there are none), so that the
    bookkeeping for a table of unique names is eight bytes a row.
    """
    book = RankingBook(unit, target)
    hashes = np.sort(np.concatenate([book.add(table) for table in tables()] or [np.empty(0, dtype=np.int64)]))
    book.shared_hashes = np.unique(hashes[1:][hashes[1:] == hashes[:-1]])
    if len(book.shared_hashes):
        for number, table in enumerate(tables()):
            book.add_first_uses(table, number)
    return book


def predicted(table: pd.DataFrame, value_column: str) -> pd.Series:
    """The values that take part in the ranking: those of rows that did not fail."""
    return table[value_column].where(table["status"] != "failed")


#: Columns that count things: written as whole numbers, empty where missing.
WHOLE_NUMBER_COLUMNS = ("record", "n_atoms", "charge", "multiplicity", RANK_COLUMN)


def whole_numbers(table: pd.DataFrame) -> pd.DataFrame:
    """The table with its counting columns as nullable integers (CSV '3', not '3.0')."""
    present = [column for column in WHOLE_NUMBER_COLUMNS if column in table.columns]
    return table.astype({column: "Int64" for column in present})


def reason_kinds(reasons: pd.Series) -> Counter:
    """How often each kind of reason occurs: every '; '-separated part, without its parenthesised
    detail, names and numbers ('unlike the training molecules', "molecule '…' has N atoms, ...")."""
    kinds = Counter()
    for text in reason_text(reasons):
        for part in filter(None, text.split("; ")):
            # Charges stay ('charge -1 singlet'): a few distinct values, each telling.
            kind = re.sub(r"(?<!charge )(?<![-+\d])[-+]?\d+(\.\d+)?", "N", re.sub(r"'[^']*'", "'…'", part.split(" (")[0]))
            kinds[kind.strip()] += 1
    return kinds


def reason_text(reasons: pd.Series) -> pd.Series:
    # Read back from chunk files, a column of empty reasons is all NaN (float): make it text first.
    return reasons.fillna("").astype(str)


def finish_rows(table: pd.DataFrame, book: RankingBook, number: int, start: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Second pass on chunk ``number``, whose first row is row ``start`` of the whole table:
    the finished rows (all columns but the rank) and their sort keys (:data:`KEY_COLUMNS`)."""
    # Chunks may lack input columns others have (SDF records with other data fields).
    table = whole_numbers(table.reindex(columns=book.dtypes.index).astype(book.dtypes))
    names = table["name"]
    uses = [book.first_use[name] if may else (number, np.nan) for name, may in zip(names, book.may_repeat(names))]
    earlier_chunk = np.array([use[0] < number for use in uses], dtype=bool)
    repeated = names.notna() & (table.duplicated("name", keep="first") | earlier_chunk)
    first_record = pd.Series([use[1] for use in uses], index=table.index, dtype=float)
    table.loc[repeated & (table["status"] == "ok"), "status"] = "flagged"
    reasons = reason_text(table["reason"])
    note = "name also used by record " + first_record.astype("Int64").astype(str)
    table["reason"] = reasons.where(~repeated, reasons.where(reasons == "", reasons + "; ") + note)
    value_column, unit = book.value_column, book.unit
    if not book.ranks:
        return table, sort_keys(pd.Series(np.nan, index=table.index), table["record"], table["formula"], start, False)
    table[f"{book.target}_per_atom_{unit}"] = table[value_column] / table["n_atoms"]
    values = predicted(table, value_column)
    best = table["formula"].map(book.best).astype(float)
    table[f"relative_to_best_isomer_{unit}"] = (best - values) if book.larger_is_stabler else (values - best)
    return table, sort_keys(values, table["record"], table["formula"], start, book.larger_is_stabler)


def sort_keys(values: pd.Series, records: pd.Series, formulas: pd.Series, start: int,
              larger_is_stabler: bool) -> pd.DataFrame:
    """Ranked rows by formula, then by value (most stable first), equal values in row order;
    then the unranked rows by record, missing records last, equal records in row order."""
    unranked = values.isna().to_numpy()
    records = records.to_numpy(dtype=float, na_value=np.nan)
    stability = -values.to_numpy() if larger_is_stabler else values.to_numpy()
    order = np.where(unranked, records, stability)
    return pd.DataFrame({"unranked": unranked.astype(np.int8),
                         "missing": (unranked & np.isnan(records)).astype(np.int8),
                         "formula": np.where(unranked, "", formulas.fillna("").astype(str).to_numpy()),
                         "order": np.nan_to_num(order, nan=0.0),
                         "position": np.arange(start, start + len(values), dtype=np.int64)})


def sorted_rows(table: pd.DataFrame, keys: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    # Formulas as fixed-width text: numpy sorts those by code point, as the merge compares str.
    order = np.lexsort([keys[column].to_numpy(dtype=str if column == "formula" else None)
                        for column in reversed(KEY_COLUMNS)])
    return table.iloc[order].reset_index(drop=True), keys.iloc[order].reset_index(drop=True)


def ranking_note(target: str) -> str:
    """How a table of ``target`` is ordered, in words, for its summary."""
    if target in STABILITY_TARGETS:
        return (f"ranked within each formula: {RANK_COLUMN} 1 is the most stable predicted isomer, "
                "relative_to_best_isomer the energy above it (energies of different formulas are not compared)")
    return f"not ranked: {target} does not order molecules by stability; rows in input order"


def ranks(keys: pd.DataFrame) -> np.ndarray:
    """Ranks 1, 2, ... within each formula of sorted rows; NaN for the unranked ones (which come last)."""
    within = keys.groupby("formula", sort=False).cumcount().to_numpy() + 1.0
    return np.where(keys["unranked"].to_numpy(dtype=bool), np.nan, within)


def finish_ranking(table: pd.DataFrame, unit: str, target: str) -> pd.DataFrame:
    """Flag repeated names, add per-atom and relative-to-best-isomer energies, rank by stability
    (see the module docstring).

    For a positive atomization energy the most stable candidate has the largest
    value; for a total energy, the smallest. ``relative_to_best_isomer_<unit>``
    is never negative: 0 for the most stable candidate of each formula.
    """
    if table.empty:
        return table
    book = read_book(lambda: [table], unit, target)
    finished, keys = sorted_rows(*finish_rows(table, book, 0, 0))
    if book.ranks:
        finished[RANK_COLUMN] = pd.array(ranks(keys), dtype="Int64")
    return finished


@dataclass
class RankedFiles:
    """What :func:`write_ranking` wrote: the number of rows, rows per status, and the
    first ``top`` rows with status ``ok`` in ranked order (all columns; for a stability
    target only each formula's most stable isomer)."""

    rows: int
    counts: dict[str, int]
    top: pd.DataFrame
    #: Kinds of reason of the rows not 'ok', with their counts (:func:`reason_kinds`).
    reasons: Counter = field(default_factory=Counter)


def write_ranking(folder, csv_path, *, unit: str, target: str, parquet_path=None, top: int = 10,
                  run_rows: int = 20_000, fan_in: int = 64, progress: bool | None = None) -> RankedFiles:
    """Rank the chunk tables of ``folder`` (see :func:`molinv.cluster.chunks.iter_tables`) into
    ``csv_path`` (and ``parquet_path``, row group by row group) with the rules of
    :func:`finish_ranking`, holding at most about ``run_rows`` rows (and one chunk) at a
    time; the CSV file has the bytes, the Parquet file the values and types, that writing
    ``finish_ranking`` of all chunks at once, rounded by :func:`molinv.screening.precision.rounded`,
    gives (both files rounded alike; in the CSV file, names and
    reasons that a spreadsheet would run as formulas start with a quote: see
    :mod:`molinv.screening.spreadsheet`). At most ``fan_in`` run
    files are open at once.

    Temporary run files go to a folder beside ``csv_path`` and are removed at the end.
    """
    folder, csv_path = Path(folder), Path(csv_path)
    chunks = len(list(folder.glob("part-*.csv")))

    def tables(description):
        return tqdm(iter_tables(folder, text_columns=["name"]), total=chunks, desc=description, unit="chunk",
                    disable=None if progress is None else not progress)

    book = read_book(lambda: tables("rank: read"), unit, target)
    if book.rows == 0:
        with written_atomically(csv_path) as temporary:
            pd.DataFrame().to_csv(temporary, index=False)
        return RankedFiles(0, {}, pd.DataFrame())
    with tempfile.TemporaryDirectory(dir=csv_path.parent, prefix=".ranking-") as scratch:
        runs = RunWriter(Path(scratch), run_rows, top, f"relative_to_best_isomer_{unit}" if book.ranks else None)
        start = 0
        for number, table in enumerate(tables("rank: sort")):
            runs.add(*finish_rows(table, book, number, start))
            start += len(table)
        runs.flush()
        columns = list(runs.dtypes.index) + ([RANK_COLUMN] if book.ranks else [])
        leaders = set(runs.leader_keys["position"].tolist())
        with written_atomically(csv_path) as temporary:
            ranks_of = merge_runs(merge_into_runs(runs.paths, fan_in), temporary, columns, leaders, book.ranks,
                                  text_columns(runs.dtypes), unit)
    best = runs.leaders
    if book.ranks:
        best = best.assign(**{RANK_COLUMN: pd.array([ranks_of[p] for p in runs.leader_keys["position"].tolist()],
                                                    dtype="Int64")})
    if parquet_path is not None:
        write_parquet(csv_path, parquet_path, runs.dtypes, run_rows, book.ranks)
    return RankedFiles(book.rows, runs.counts, best, runs.reasons)


class RunWriter:
    """Second pass: finished rows gathered into runs of at least ``run_rows`` rows, each
    written sorted to a CSV file with its sort keys first; keeps the status counts and
    the ``top`` most stable rows with status ``ok``."""

    def __init__(self, folder: Path, run_rows: int, top: int, relative_column: str | None = None):
        self.folder, self.run_rows, self.top = folder, run_rows, top
        #: With it, the leaders are only rows that are their formula's most stable isomer.
        self.relative_column = relative_column
        self.pending: list[tuple[pd.DataFrame, pd.DataFrame]] = []
        self.paths: list[Path] = []
        self.counts: dict[str, int] = {}
        self.reasons = Counter()
        self.leaders = self.leader_keys = self.dtypes = None

    def add(self, rows: pd.DataFrame, keys: pd.DataFrame) -> None:
        self.dtypes = rows.dtypes
        for status, count in rows["status"].value_counts().items():
            self.counts[status] = self.counts.get(status, 0) + int(count)
        ok = (rows["status"] == "ok").to_numpy()
        self.reasons.update(reason_kinds(rows.loc[~ok, "reason"]))
        if self.relative_column is not None:
            ok = ok & (rows[self.relative_column] == 0).to_numpy()
        leaders = [(rows[ok], keys[ok])] + ([] if self.leaders is None else [(self.leaders, self.leader_keys)])
        leaders, keys_of_leaders = sorted_rows(*(pd.concat(part, ignore_index=True) for part in zip(*leaders)))
        self.leaders, self.leader_keys = leaders.head(self.top), keys_of_leaders.head(self.top)
        self.pending.append((rows, keys))
        if sum(len(part) for part, _ in self.pending) >= self.run_rows:
            self.flush()

    def flush(self) -> None:
        if not self.pending:
            return
        rows, keys = sorted_rows(*(pd.concat(part, ignore_index=True) for part in zip(*self.pending)))
        path = self.folder / f"run-{len(self.paths):06d}.csv"
        pd.concat([keys, rows], axis=1).to_csv(path, header=False, index=False)
        self.paths.append(path)
        self.pending = []


def run_records(path: Path) -> Iterator[tuple[tuple, list[str]]]:
    """(sort key, fields as written, the key's first) of each row of a run file, in order."""
    with open(path, newline="") as handle:
        for fields in csv.reader(handle):
            yield (int(fields[0]), int(fields[1]), fields[2], float(fields[3]), int(fields[4])), fields


def merged_records(paths: list[Path]) -> Iterator[tuple[tuple, list[str]]]:
    # Keys are unique (they end with the row's position), so rows are never compared.
    return heapq.merge(*(run_records(path) for path in paths))


def merge_into_runs(paths: list[Path], fan_in: int) -> list[Path]:
    """Merge groups of ``fan_in`` runs into longer runs until at most ``fan_in`` remain, so that
    the final merge never opens more files than that."""
    level = 0
    while len(paths) > fan_in:
        level, merged = level + 1, []
        for first in range(0, len(paths), fan_in):
            merged.append(paths[first].with_name(f"run-{level}-{len(merged):06d}.csv"))
            with open(merged[-1], "w", newline="") as handle:
                csv.writer(handle).writerows(fields for _, fields in merged_records(paths[first:first + fan_in]))
            for path in paths[first:first + fan_in]:
                path.unlink()
        paths = merged
    return paths


def merge_runs(paths: list[Path], csv_path: Path, columns: list[str], wanted: set[int],
               with_ranks: bool = True, texts: list[str] = (), unit: str | None = None) -> dict[int, int]:
    """Third pass: merge sorted runs into one CSV file (written as pandas writes one), numbering
    the ranks within each formula on the way (``with_ranks``), the free-text columns ``texts``
    made safe for spreadsheets and, with the table's ``unit``, energies and distances rounded
    (:mod:`molinv.screening.precision`); returns the rank of each row whose position is in ``wanted``."""
    found, rank, group = {}, 0, None
    with open(csv_path, "w", newline="") as handle:
        # pandas writes CSV with the csv module's default dialect and the platform's line end.
        writer = csv.writer(handle, lineterminator=os.linesep)
        writer.writerow(columns)
        text_positions = [columns.index(c) for c in texts]
        rounded_positions = [(columns.index(c), how) for c, how in roundings(columns, unit).items()] if unit else []
        for (unranked, _, formula, _, position), fields in merged_records(paths):
            rank = 1 if formula != group else rank + 1
            group = formula
            text = "" if unranked else str(rank)
            if position in wanted:
                found[position] = pd.NA if unranked else rank
            row = fields[len(KEY_COLUMNS):]
            for column in text_positions:
                row[column] = neutralised(row[column])
            for column, rounding in rounded_positions:
                row[column] = round_text(row[column], rounding)
            writer.writerow(row + ([text] if with_ranks else []))
    return found


def write_parquet(csv_path: Path, parquet_path, dtypes: pd.Series, batch_rows: int, with_ranks: bool = True) -> None:
    """The ranked CSV file as Parquet, one row group per ``batch_rows`` rows; every column as
    typed in the table (text read as text, so that names like '007' stay as they are)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    if with_ranks:
        dtypes = pd.concat([dtypes, pd.Series({RANK_COLUMN: pd.Int64Dtype()})])
    text = {name: str for name, dtype in dtypes.items() if not pd.api.types.is_numeric_dtype(dtype)}
    writer = None
    with written_atomically(parquet_path) as temporary:
        try:
            for batch in pd.read_csv(csv_path, chunksize=batch_rows, keep_default_na=False, na_values=[""],
                                     dtype={**dtypes.to_dict(), **text}):
                batch = batch.astype(dtypes)
                batch["reason"] = reason_text(batch["reason"])
                for column in text_columns(dtypes):  # Parquet is not opened by spreadsheets: the text as read
                    batch[column] = batch[column].map(restored)
                if writer is None:
                    schema = pa.Schema.from_pandas(batch, preserve_index=False)
                    # A text column empty in the first batch would otherwise be typed null.
                    for index, column in enumerate(schema):
                        if pa.types.is_null(column.type):
                            schema = schema.set(index, column.with_type(pa.string()))
                    writer = pq.ParquetWriter(temporary, schema)
                writer.write_table(pa.Table.from_pandas(batch, schema=writer.schema, preserve_index=False))
        finally:
            if writer is not None:
                writer.close()
