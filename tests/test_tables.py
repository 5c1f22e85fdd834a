"""Result tables a chemist feeds into the next step (issue 18, item 9): failed rows keep what the
input said, the input's own columns pass through, names the input left empty are reported.

Training data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014); candidates invented for the test.
"""

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from molinv.cli import main

# name, smiles, supplier (text), price (number), multiplicity; what each row tests.
ROWS = [
    ("ethanol", "CCO", "=S-001", "12.5", ""),
    ("typo", "C1CC", "S-002", "3", ""),  # does not parse: SMILES kept, no formula
    ("sodium acetate", "CC(=O)[O-].[Na+]", "S-003", "-4.25", ""),  # two fragments: rejected after parsing
    ("doublet oxygen", "O=O", "S-004", "", "2"),  # multiplicity impossible for 16 electrons
    ("", "CCCO", "S-005", "7", ""),  # empty name
]


@pytest.fixture
def model(counts_model_file):
    return counts_model_file


@pytest.fixture
def candidates(tmp_path):
    path = tmp_path / "mine.csv"
    path.write_text("name,smiles,supplier,price,multiplicity\n" + "".join(",".join(row) + "\n" for row in ROWS))
    return path


def check_rows(table: pd.DataFrame) -> None:
    table = table.sort_values("record").reset_index(drop=True)
    assert list(table["smiles"]) == [row[1] for row in ROWS]
    formulas = dict(zip(table["smiles"], table["formula"].fillna("")))
    # Formulas counted by hand from the SMILES with their hydrogens.
    assert formulas == {"CCO": "C2H6O", "C1CC": "", "CC(=O)[O-].[Na+]": "C2H3NaO2", "O=O": "O2", "CCCO": "C3H8O"}
    assert list(table["status"][1:4]) == ["failed"] * 3
    # The input's own columns, after molinv's, under a prefix; multiplicity is molinv's own column.
    assert list(table["input_supplier"].str.lstrip("'")) == [row[2] for row in ROWS]
    np.testing.assert_array_equal(table["input_price"].to_numpy(float), [12.5, 3, -4.25, np.nan, 7])
    assert "input_multiplicity" not in table.columns and "input_name" not in table.columns
    assert table.columns.get_loc("input_supplier") > table.columns.get_loc("domain_distance")


def test_predict_keeps_failed_rows_smiles_formula_and_input_columns(model, candidates, tmp_path):
    out = tmp_path / "predicted.csv"
    assert main(["predict", str(model), str(candidates), "--out", str(out)]) == 0
    table = pd.read_csv(out)
    check_rows(table)
    # A supplier code that a spreadsheet would run as a formula is written as text.
    assert table.loc[table["smiles"] == "CCO", "input_supplier"].item() == "'=S-001"


def test_screen_keeps_them_too_across_chunks(model, candidates, tmp_path):
    assert main(["screen", str(model), str(candidates), "--out", str(tmp_path / "screen"), "--chunk-size", "2"]) == 0
    check_rows(pd.read_csv(tmp_path / "screen" / "ranked.csv"))


def test_pick_keeps_them_too(model, candidates, tmp_path):
    out = tmp_path / "picked.csv"
    assert main(["pick", str(model), str(candidates), "--k", "1", "--out", str(out)]) == 0
    check_rows(pd.read_csv(out))


def test_sdf_and_extended_xyz_properties_pass_through(model, tmp_path):
    sdf = tmp_path / "mine.sdf"
    with Chem.SDWriter(str(sdf)) as writer:
        for name, smiles, batch in (("ethanol", "CCO", "B7"), ("propanol", "CCCO", "B8")):
            mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
            AllChem.EmbedMolecule(mol, randomSeed=1)
            mol.SetProp("_Name", name)
            mol.SetProp("batch", batch)
            writer.write(mol)
    xyz = tmp_path / "mine.xyz"
    xyz.write_text('3\nname=water batch=B9 Properties=species:S:1:pos:R:3\n'
                   "O 0.0 0.0 0.0\nH 0.96 0.0 0.0\nH -0.24 0.93 0.0\n")
    for path, batches in ((sdf, ["B7", "B8"]), (xyz, ["B9"])):
        out = tmp_path / f"{path.suffix[1:]}.csv"
        assert main(["predict", str(model), str(path), "--out", str(out)]) == 0
        assert list(pd.read_csv(out).sort_values("record")["input_batch"]) == batches


def test_check_reports_rows_without_a_name(candidates, capsys):
    assert main(["check", str(candidates)]) == 0
    out = capsys.readouterr().out
    assert "1 without a name in the input (records 5), named 'mine:5'" in out


def decimals(texts) -> list[int]:
    return [len(text.split(".")[1]) if "." in text else 0 for text in texts if text]


def significant_digits(texts) -> list[int]:
    return [len(f"{float(text):e}".split("e")[0].replace(".", "").rstrip("0")) for text in texts if text]


def test_energies_to_1e4_kcal_mol_and_distances_to_4_digits(model, candidates, tmp_path):
    out = tmp_path / "predicted.csv"
    assert main(["predict", str(model), str(candidates), "--out", str(out)]) == 0
    written = pd.read_csv(out, dtype=str, keep_default_na=False)
    energies = [c for c in written.columns if c.endswith("_kcal/mol")]
    assert len(energies) == 4  # value, std, per atom, relative to the best isomer
    for column in energies:
        assert max(decimals(written[column])) <= 4, column
    assert max(significant_digits(written["domain_distance"])) <= 4


def test_screen_chunks_keep_every_digit_and_the_table_rounds_them(model, candidates, tmp_path):
    folder = tmp_path / "screen"
    assert main(["screen", str(model), str(candidates), "--out", str(folder), "--chunk-size", "2"]) == 0
    full = pd.concat([pd.read_csv(path) for path in sorted((folder / "chunks").glob("part-*.csv"))])
    full = full.set_index("record").sort_index()
    ranked = pd.read_csv(folder / "ranked.csv").set_index("record").sort_index()
    value = "atomization_energy_kcal/mol"
    assert max(decimals(full[value].dropna().map(repr))) > 4  # what the model gives
    np.testing.assert_array_equal(ranked[value], full[value].map(lambda v: round(v, 4)))
    np.testing.assert_array_equal(ranked["domain_distance"], full["domain_distance"].map(lambda v: float(f"{v:.4g}")))


def test_predict_reports_rows_without_a_name(model, candidates, tmp_path, capsys):
    assert main(["predict", str(model), str(candidates), "--out", str(tmp_path / "predicted.csv")]) == 0
    assert "1 without a name in the input (records 5), named 'mine:5'" in capsys.readouterr().out
