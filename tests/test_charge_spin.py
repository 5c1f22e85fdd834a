"""Charge and spin multiplicity: read from every input, carried into the tables, known to the model.

Electron counts are the sums of the atomic numbers minus the charge (periodic table);
the expected charges and multiplicities are those of the structures as drawn (acetate
-1 singlet, methyl radical doublet, O2 written with two radical oxygens a triplet).
"""

import numpy as np
import pandas as pd
import pytest
from ase import Atoms

from molinv.molecules import MoleculeError, embed_smiles, read_molecules
from molinv.molecules.electrons import electronic_state
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening import prediction_table


def states(result):
    return {a.info["name"]: (a.info["charge"], a.info["multiplicity"]) for a in result.molecules}


def reasons(result):
    return {r.name: r.reason for r in result.rejected}


def test_smiles_and_csv_columns(tmp_path):
    path = tmp_path / "ions.csv"
    path.write_text("name,smiles,charge,multiplicity\n"
                    "acetate,CC(=O)[O-],,\n"
                    "carbonate,[O-]C(=O)[O-],,\n"
                    "methyl,[CH3],,\n"
                    "oxygen closed,O=O,,\n"
                    "oxygen triplet,O=O,,3\n"
                    "oxygen radicals,[O][O],,\n"
                    "acetic acid,CC(=O)O,-1,\n"
                    "methyl singlet,[CH3],,1\n"
                    "ethane word,CC,,triplet\n")
    result = read_molecules(path)
    assert states(result) == {"acetate": (-1, 1), "carbonate": (-2, 1), "methyl": (0, 2), "oxygen closed": (0, 1),
                              "oxygen triplet": (0, 3), "oxygen radicals": (0, 3)}
    why = reasons(result)
    assert "charge -1 is stated, but the structure's formal charges add up to +0" in why["acetic acid"]
    assert "multiplicity 1 does not match the odd number of electrons (9" in why["methyl singlet"]
    assert "multiplicity 'triplet' is not a whole number" in why["ethane word"]


def test_extended_xyz_fields_and_plain_xyz_defaults(tmp_path):
    o2 = "O 0 0 0\nO 0 0 1.21\n"
    methyl = "C 0 0 0\nH 1.08 0 0\nH -0.54 0.935 0\nH -0.54 -0.935 0\n"
    path = tmp_path / "frames.xyz"
    path.write_text(f"2\nname=o2_triplet multiplicity=3\n{o2}"
                    f"2\nname=superoxide charge=-1\n{o2}"
                    f"2\nname=o2_spin spin=2\n{o2}"
                    f"4\nname=methyl\n{methyl}"
                    f"4\nname=methyl_cation charge=1\n{methyl}"
                    f"2\nname=o2_bad multiplicity=2\n{o2}")
    result = read_molecules(path)
    # Unstated: neutral, lowest multiplicity the electron count allows (methyl: 9 electrons, doublet).
    assert states(result) == {"o2_triplet": (0, 3), "superoxide": (-1, 2), "methyl": (0, 2),
                              "methyl_cation": (1, 1)}
    why = reasons(result)
    assert "'spin'" in why["o2_spin"] and "ambiguous" in why["o2_spin"]
    assert "multiplicity 2 does not match the even number of electrons (16" in why["o2_bad"]


def test_sdf_charges_and_radicals(tmp_path):
    from rdkit import Chem
    from rdkit.Chem import AllChem

    path = tmp_path / "mols.sdf"
    with Chem.SDWriter(str(path)) as writer:
        for name, smiles in [("acetate", "CC(=O)[O-]"), ("ammonium", "[NH4+]"), ("methyl", "[CH3]")]:
            mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
            AllChem.EmbedMolecule(mol, randomSeed=1)
            mol.SetProp("_Name", name)
            writer.write(mol)
    assert "M  CHG" in path.read_text() and "M  RAD" in path.read_text()
    assert states(read_molecules(path)) == {"acetate": (-1, 1), "ammonium": (1, 1), "methyl": (0, 2)}


def test_electronic_state_defaults_for_molecules_built_in_python():
    water = Atoms("OH2", positions=[[0, 0, 0], [0.96, 0, 0], [-0.24, 0.93, 0]])
    assert electronic_state(water) == (0, 1)
    hydroxyl = Atoms("OH", positions=[[0, 0, 0], [0.97, 0, 0]])
    assert electronic_state(hydroxyl) == (0, 2)
    hydroxyl.info["charge"] = -1
    assert electronic_state(hydroxyl) == (-1, 1)
    hydroxyl.info["charge"] = 20
    with pytest.raises(MoleculeError, match="leaves -11 electrons"):
        electronic_state(hydroxyl)


@pytest.fixture(scope="module")
def neutral_model(qm9, tmp_path_factory):
    train = qm9.molecules(qm9.sample(150, seed=5, elements=["H", "C", "N", "O"]))
    energies = np.array([m.info["atomization_energy"] for m in train])
    model = EnergyModel(make_descriptor("counts"), make_regressor("linear", per_atom=False)).fit(train, energies)
    path = model.save(tmp_path_factory.mktemp("model") / "model.npz", target="atomization_energy")
    return EnergyModel.load(path)[0]


def test_model_records_training_states_and_fails_other_states(neutral_model, tmp_path):
    path = tmp_path / "candidates.csv"
    path.write_text("name,smiles,multiplicity\n"
                    "ethanol,CCO,\n"
                    "acetate,CC(=O)[O-],\n"
                    "ammonium,[NH4+],\n"
                    "methyl,[CH3],\n"
                    "oxygen triplet,O=O,3\n"
                    "typo,C1CC,\n")
    result = read_molecules(path)
    table = prediction_table(neutral_model, result.molecules, result.rejected, target="atomization_energy")
    assert len(table) == 6
    rows = table.set_index("name")
    # Predicted (the model learnt from QM9's own geometries, so an embedded SMILES may be flagged for that).
    assert rows.loc["ethanol", "status"] != "failed" and "trained on" not in rows.loc["ethanol", "reason"]
    assert (rows.loc["ethanol", "charge"], rows.loc["ethanol", "multiplicity"]) == (0, 1)
    assert rows.loc["acetate", "charge"] == -1 and rows.loc["oxygen triplet", "multiplicity"] == 3
    for name in ("acetate", "ammonium", "methyl", "oxygen triplet"):
        assert rows.loc[name, "status"] == "failed", name
        assert np.isnan(rows.loc[name, "atomization_energy_kcal/mol"])
        assert "the model was trained on neutral singlet molecules only" in rows.loc[name, "reason"]
    assert rows.loc["acetate", "reason"].startswith("charge -1 singlet:")
    assert rows.loc["methyl", "reason"].startswith("neutral doublet:")
    assert rows.loc["typo", "status"] == "failed" and pd.isna(rows.loc["typo", "charge"])


def test_charged_training_set_is_recorded():
    smiles = ["CCO", "CCCO", "CC(C)O", "CCN", "CC=O", "CCCC", "CC(=O)[O-]", "CCC(=O)[O-]", "C[NH3+]"]
    molecules = [embed_smiles(s) for s in smiles]
    energies = np.arange(len(molecules), dtype=float)  # invented: only the recorded states are checked
    model = EnergyModel(make_descriptor("counts"), make_regressor("baseline", per_atom=False)).fit(molecules, energies)
    assert model.chemistry_.states_ == [(-1, 1), (0, 1), (1, 1)]
    assert model.chemistry_.refusal(embed_smiles("CCCC(=O)[O-]")) == ""
    assert "charge -2 singlet" in model.chemistry_.refusal(embed_smiles("[O-]C(=O)[O-]"))


def test_check_reports_the_states(tmp_path, capsys):
    from molinv.cli import main

    path = tmp_path / "mixed.csv"
    path.write_text("name,smiles\nethanol,CCO\nacetate,CC(=O)[O-]\nmethyl,[CH3]\noxygen,O=O\n")
    assert main(["check", str(path)]) == 0
    assert "charge and spin: 2 neutral singlet, 1 charge -1 singlet, 1 neutral doublet" in capsys.readouterr().out
