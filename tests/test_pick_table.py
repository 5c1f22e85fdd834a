"""pick: every input row once with its status, and nothing picked that labelling cannot make usable.

Training data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014); candidates invented for the test.
"""

import pandas as pd
import pytest

from molinv.cli import main

CANDIDATES = {
    "ethanol": "CCO", "propanol": "CCCO", "butan-2-ol": "CCC(C)O", "acetone": "CC(C)=O",
    "methyl acetate": "CC(=O)OC", "propanoic acid": "CCC(=O)O", "ammonium": "[NH4+]",
    "triacontane": "C" * 30, "typo": "C1CC", "pentanal": "CCCCC=O",
}


@pytest.fixture
def model(counts_model_file):
    return counts_model_file


@pytest.fixture
def candidates(tmp_path):
    path = tmp_path / "candidates.csv"
    path.write_text("name,smiles\n" + "".join(f"{n},{s}\n" for n, s in CANDIDATES.items()))
    return path


def test_every_row_once_and_the_unusable_not_picked(model, candidates, tmp_path):
    out = tmp_path / "picked.csv"
    assert main(["pick", str(model), str(candidates), "--k", "3", "--out", str(out)]) == 0
    table = pd.read_csv(out).set_index("name")
    assert sorted(table["record"]) == list(range(1, len(CANDIDATES) + 1))
    for column in ("record", "status", "smiles", "domain_distance", "charge", "multiplicity", "reason"):
        assert column in table.columns
    assert sorted(table["pick_order"].dropna()) == [1, 2, 3]
    assert table.loc["typo", "status"] == "failed" and pd.isna(table.loc["typo", "pick_order"])
    assert table.loc["ammonium", "status"] == "failed" and "charge +1" in table.loc["ammonium", "reason"]
    assert pd.isna(table.loc["ammonium", "pick_order"])
    assert pd.isna(table.loc["triacontane", "pick_order"])
    assert "not picked: more than 1.5 times the non-hydrogen atoms" in table.loc["triacontane", "reason"]


def test_far_larger_candidates_only_when_asked(model, candidates, tmp_path):
    out = tmp_path / "picked.csv"
    assert main(["pick", str(model), str(candidates), "--k", "3", "--include-far", "--out", str(out)]) == 0
    table = pd.read_csv(out).set_index("name")
    # The most uncertain candidate by far, so the first pick once allowed.
    assert table.loc["triacontane", "pick_order"] == 1
    assert pd.isna(table.loc["ammonium", "pick_order"])


def test_geometries_for_the_quantum_chemistry_step(model, candidates, tmp_path):
    from molinv.molecules import read_molecules

    out, sdf = tmp_path / "picked.csv", tmp_path / "picked.sdf"
    assert main(["pick", str(model), str(candidates), "--k", "3", "--out", str(out), "--geometries", str(sdf)]) == 0
    picked = pd.read_csv(out).dropna(subset=["pick_order"]).sort_values("pick_order")
    written = read_molecules(sdf).molecules
    assert [a.info["name"] for a in written] == list(picked["name"])
    xyz = tmp_path / "all.xyz"
    assert main(["predict", str(model), str(candidates), "--out", str(tmp_path / "p.csv"), "--geometries", str(xyz)]) == 0
    written = {a.info["name"]: a for a in read_molecules(xyz).molecules}
    assert len(written) == len(CANDIDATES) - 1  # all but the unreadable SMILES
    assert (written["ammonium"].info["charge"], written["ammonium"].info["multiplicity"]) == (1, 1)
