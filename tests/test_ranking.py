"""Streamed ranking of chunk files: the same files as ranking the whole table in memory.

The reference is the in-memory ranking the screen used before it streamed (kept here as it
was, pandas on the whole table). Data: invented chunk tables (this checks the bookkeeping,
not predictions): names repeated within and across chunks, names missing or all digits, failed
rows, equal values, several formulas, reasons with commas and quotes, columns empty in
some chunks.
"""

import importlib.util
import io

import numpy as np
import pandas as pd
import pytest

from molinv.cluster.chunks import read_tables, write_part
from molinv.screening.precision import rounded
from molinv.screening.ranking import finish_ranking, write_ranking


def reference_finish_ranking(table: pd.DataFrame, unit: str, target: str) -> pd.DataFrame:
    """The in-memory ranking, pandas on the whole table: isomers ranked within their formula,
    formulas in text order, unranked rows last by record; no ranking for non-stability targets."""
    if table.empty:
        return table
    table = table.copy()
    value_column = f"{target}_{unit}"
    repeated = table["name"].notna() & table.duplicated("name", keep="first")
    first_record = table.groupby("name")["record"].transform("first")
    table.loc[repeated & (table["status"] == "ok"), "status"] = "flagged"
    reasons = table["reason"].fillna("").astype(str)
    note = "name also used by record " + first_record.astype("Int64").astype(str)
    table["reason"] = reasons.where(~repeated, reasons.where(reasons == "", reasons + "; ") + note)
    table = table.astype({"record": "Int64", "n_atoms": "Int64"})
    if target not in ("atomization_energy", "energy"):
        return table.sort_values("record", na_position="last", kind="stable").reset_index(drop=True)
    table[f"{target}_per_atom_{unit}"] = table[value_column] / table["n_atoms"]
    larger_is_stabler = target == "atomization_energy"
    predicted = table[value_column].where(table["status"] != "failed")
    best = predicted.groupby(table["formula"]).transform("max" if larger_is_stabler else "min")
    table[f"relative_to_best_isomer_{unit}"] = (best - predicted) if larger_is_stabler else (predicted - best)
    table["rank_in_formula"] = predicted.groupby(table["formula"]).rank(ascending=not larger_is_stabler,
                                                                         method="first").astype("Int64")
    ranked = table[predicted.notna()].sort_values(["formula", "rank_in_formula"], kind="stable")
    unranked = table[predicted.isna()].sort_values("record", na_position="last", kind="stable")
    return pd.concat([ranked, unranked]).reset_index(drop=True)


def invented_chunk(rng, first_record: int, size: int, value_column: str, *, digit_names=False, no_reasons=False,
                   no_smiles=False, missing_records=False) -> pd.DataFrame:
    records = np.arange(first_record, first_record + size)
    pool = [str(n) for n in range(7, 12)] if digit_names else ["ala", "gly", "ser", "val, 2", 'the "x"', "pro"]
    names = [pool[i] if i < len(pool) else None for i in rng.integers(0, len(pool) + 1, size)]
    failed = rng.random(size) < 0.25
    formulas = np.array(["C2H6O", "C3H8O", "CH4", "C4H10"])[rng.integers(0, 4, size)]
    values = np.round(rng.normal(-500, 3, size), 1)  # one decimal: many equal values
    rejected = failed & (rng.random(size) < 0.5)  # unreadable records: no formula, no atom count
    table = pd.DataFrame({
        "record": records, "name": names, "smiles": "" if no_smiles else [f"C{'C' * (r % 4)}O" for r in records],
        "formula": np.where(rejected, "", formulas), "n_atoms": np.where(rejected, np.nan, rng.integers(5, 15, size)),
        "geometry_source": np.where(rejected, "", "rdkit-etkdg+mmff94"),
        "status": np.where(failed, "failed", np.where(rng.random(size) < 0.2, "flagged", "ok")),
        "reason": "", value_column: np.where(failed, np.nan, values),
        "std_kcal/mol": np.where(failed, np.nan, rng.random(size)), "domain_distance": rng.random(size) * 2})
    if not no_reasons:
        table.loc[failed, "reason"] = "cannot parse SMILES, line 3"
        table.loc[table["status"] == "flagged", "reason"] = 'far from "training", 1.3'
    if missing_records:
        table.loc[rng.random(size) < 0.3, "record"] = None
    return table


def invented_chunks(folder, target: str, missing_records: bool, digit_names: bool):
    rng = np.random.default_rng(61)
    folder.mkdir()
    value_column = f"{target}_kcal/mol"
    plans = [dict(), dict(no_reasons=True), dict(digit_names=digit_names), dict(no_smiles=True), dict(), dict()]
    start = 1
    for number, (size, plan) in enumerate(zip([9, 5, 7, 11, 6, 8], plans)):
        write_part(folder, number, invented_chunk(rng, start, size, value_column, missing_records=missing_records,
                                                  **plan))
        start += size


@pytest.mark.parametrize("target", ["energy", "atomization_energy", "gap"])
@pytest.mark.parametrize("variant", ["typical", "missing records", "digit names"])
def test_streamed_files_equal_ranking_in_memory(tmp_path, target, variant):
    chunks = tmp_path / "chunks"
    # A chunk whose names are all digits must keep them as text ('7', not 7 or 7.0).
    invented_chunks(chunks, target, missing_records=variant == "missing records", digit_names=variant == "digit names")
    reference = reference_finish_ranking(read_tables(chunks, text_columns=["name"]), unit="kcal/mol", target=target)
    assert reference["reason"].str.contains("name also used by record").sum() >= 5  # the data repeats names
    assert reference[f"{target}_kcal/mol"].duplicated().sum() >= 5
    if target == "gap":  # no stability order: no energy columns, rows by record
        assert not {"rank_in_formula", "gap_per_atom_kcal/mol", "relative_to_best_isomer_kcal/mol"} & set(reference)
    else:
        assert reference["rank_in_formula"].isna().sum() >= 5 and (reference["rank_in_formula"] == 2).sum() >= 3

    parquet = importlib.util.find_spec("pyarrow") is not None
    ranked = write_ranking(chunks, tmp_path / "ranked.csv", unit="kcal/mol", target=target, top=4, run_rows=7, fan_in=3,
                           parquet_path=tmp_path / "ranked.parquet" if parquet else None)
    # Written with energies and distances rounded, as predict writes its table.
    assert (tmp_path / "ranked.csv").read_bytes() == rounded(reference, "kcal/mol").to_csv(index=False).encode()
    assert ranked.rows == len(reference)
    assert ranked.counts == reference["status"].value_counts().to_dict()
    leaders = reference["status"] == "ok"
    if target != "gap":  # only each formula's most stable isomer
        leaders &= reference["relative_to_best_isomer_kcal/mol"] == 0
    pd.testing.assert_frame_equal(ranked.top.reset_index(drop=True), reference[leaders].head(4).reset_index(drop=True))
    in_memory = finish_ranking(read_tables(chunks, text_columns=["name"]), unit="kcal/mol", target=target)
    pd.testing.assert_frame_equal(in_memory, reference, check_exact=True)
    if variant == "digit names":
        assert {"7", "8", "9", "10", "11"} & set(reference["name"].dropna())
    pq = pytest.importorskip("pyarrow.parquet")
    expected = io.BytesIO()
    rounded(reference, "kcal/mol").to_parquet(expected, index=False)
    written, wanted = pq.read_table(tmp_path / "ranked.parquet"), pq.read_table(expected)
    assert written.schema.remove_metadata().equals(wanted.schema.remove_metadata())
    assert written.equals(wanted.cast(written.schema))
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "ranked.parquet"), pd.read_parquet(expected))

