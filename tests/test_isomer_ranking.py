"""Rankings compare isomers only, and non-stability targets get no energy columns.

Training data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014); candidates invented for the test.
"""

import numpy as np
import pandas as pd
import pytest

from molinv.molecules import read_molecules
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening import prediction_table
from molinv.screening.screen import screen_file

CANDIDATES = {"pentan-1-ol": "CCCCCO", "pentan-2-ol": "CCCC(C)O", "butyl methyl ether": "CCCCOC", "hexane": "CCCCCC",
              "2-methylpentane": "CCCC(C)C", "triacontane": "C" * 30, "typo": "C1CC"}


@pytest.fixture(scope="module")
def train(qm9):
    from molinv.molecules.route import onto_embedded_route

    # Embedded from their SMILES, as the candidates are: the model's route, so candidates are not flagged for it.
    molecules = onto_embedded_route(qm9.molecules(qm9.sample(150, seed=8, elements=["H", "C", "N", "O"])))
    return [atoms for atoms in molecules if not isinstance(atoms, str)]


def fitted(train, key):
    # Atom-centred, so that isomers get different predictions (element counts would give them one).
    return EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True)).fit(
        train, np.array([m.info[key] for m in train]))


@pytest.fixture
def candidates(tmp_path):
    path = tmp_path / "candidates.csv"
    path.write_text("name,smiles\n" + "".join(f"{n},{s}\n" for n, s in CANDIDATES.items()))
    return path


def test_isomers_are_ranked_within_their_formula(train, candidates, tmp_path):
    model = fitted(train, "atomization_energy")
    result = read_molecules(candidates)
    table = prediction_table(model, result.molecules, result.rejected, target="atomization_energy")
    ranks = dict(zip(table["name"], table["rank_in_formula"]))
    # The largest molecule has the largest atomization energy but is alone in its formula.
    assert ranks["triacontane"] == 1
    assert sorted(ranks[n] for n in ("pentan-1-ol", "pentan-2-ol", "butyl methyl ether")) == [1, 2, 3]
    assert sorted(ranks[n] for n in ("hexane", "2-methylpentane")) == [1, 2]
    c3 = table[table["formula"] == "C5H12O"]
    assert c3["rank_in_formula"].is_monotonic_increasing and c3["atomization_energy_kcal/mol"].nunique() == 3
    assert (c3["relative_to_best_isomer_kcal/mol"] >= 0).all() and c3["atomization_energy_kcal/mol"].is_monotonic_decreasing
    assert pd.isna(ranks["typo"]) and table["name"].iloc[-1] == "typo"
    summary = screen_file(model, candidates, tmp_path / "screen", model_fingerprint="m", target="atomization_energy")
    text = (tmp_path / "screen" / "summary.txt").read_text()
    assert "ranked within each formula" in text and "energies of different formulas are not compared" in text
    assert len(summary.top) >= 2 and (summary.top["rank_in_formula"] == 1).all()
    assert "triacontane" not in set(summary.top["name"])  # flagged: larger than any training molecule
    pd.testing.assert_series_equal(pd.read_csv(summary.table_path)["rank_in_formula"], table["rank_in_formula"],
                                   check_dtype=False)


def test_a_gap_model_gets_no_energy_columns(train, candidates, tmp_path):
    model = fitted(train, "gap")
    result = read_molecules(candidates)
    table = prediction_table(model, result.molecules, result.rejected, target="gap", unit="eV")
    assert "gap_eV" in table.columns
    assert not {"gap_per_atom_eV", "relative_to_best_isomer_eV", "rank_in_formula", "rank"} & set(table.columns)
    assert table["record"].tolist() == sorted(table["record"])
    screen_file(model, candidates, tmp_path / "screen", model_fingerprint="m", target="gap", unit="eV")
    text = (tmp_path / "screen" / "summary.txt").read_text()
    assert "not ranked: gap does not order molecules by stability" in text


def test_counts_are_written_as_whole_numbers(train, candidates, tmp_path):
    model = fitted(train, "atomization_energy")
    result = read_molecules(candidates)
    predicted = tmp_path / "predicted.csv"
    prediction_table(model, result.molecules, result.rejected, target="atomization_energy").to_csv(predicted, index=False)
    summary = screen_file(model, candidates, tmp_path / "screen", model_fingerprint="m", target="atomization_energy",
                          chunk_size=3)
    for path in (predicted, summary.table_path):
        text = pd.read_csv(path, dtype=str, keep_default_na=False)
        for column in ("record", "n_atoms", "charge", "multiplicity", "rank_in_formula"):
            assert text[column].str.fullmatch(r"-?\d*").all(), (path.name, column, list(text[column]))
        assert (text.loc[text["name"] == "typo", ["n_atoms", "charge", "rank_in_formula"]] == "").all(axis=None)
