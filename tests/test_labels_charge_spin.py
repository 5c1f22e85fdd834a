"""Labels at the molecule's charge and spin multiplicity, checked against PySCF and tblite called directly.

The references are the codes themselves: a charged or open-shell molecule built with
``pyscf.gto.M(charge=..., spin=2S)`` and solved with RHF/UHF, and tblite's
``Calculator(charge=..., uhf=unpaired electrons)``, on the same geometry.
"""

import numpy as np
import pandas as pd
import pytest
from ase import Atoms

from molinv.cli import main
from molinv.labels import LabelMethod, label_chunk, label_molecules, read_labels
from molinv.labels.run import COLUMNS_WITHOUT_STATE
from molinv.molecules import embed_smiles, read_molecules
from molinv.molecules.units import LENGTH_UNITS

HF = LabelMethod("hf", basis="STO-3G")


def pyscf_direct(atoms, charge, spin):
    from pyscf import gto, scf

    molecule = gto.M(atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)],
                     basis="STO-3G", unit="Angstrom", charge=charge, spin=spin, verbose=0)
    solver = scf.UHF(molecule) if spin else scf.RHF(molecule)
    solver.conv_tol = 1e-9
    return solver.kernel()


def test_acetate_and_triplet_oxygen_with_pyscf():
    pytest.importorskip("pyscf")
    acetate = embed_smiles("CC(=O)[O-]")
    oxygen = embed_smiles("O=O")
    triplet = embed_smiles("O=O")
    triplet.info["multiplicity"] = 3
    rows = label_chunk([acetate, oxygen, triplet], HF, names=["acetate", "O2 singlet", "O2 triplet"])
    table = pd.DataFrame(rows).set_index("name")
    # Acetate: 32 electrons at charge -1, a closed shell (was refused as 31 electrons, open shell).
    assert table.loc["acetate", "status"] == "ok"
    assert (table.loc["acetate", "charge"], table.loc["acetate", "multiplicity"]) == (-1, 1)
    assert table.loc["acetate", "energy_Hartree"] == pytest.approx(pyscf_direct(acetate, -1, 0), abs=1e-7)
    assert np.isnan(table.loc["acetate", "atomization_energy_eV"])
    assert "no atomization energy for an ion (charge -1)" in table.loc["acetate", "reason"]
    assert table.loc["O2 triplet", "multiplicity"] == 3
    assert table.loc["O2 triplet", "energy_Hartree"] == pytest.approx(pyscf_direct(triplet, 0, 2), abs=1e-7)
    # Triplet O2 is the ground state (Hund's rule; from memory), so lower than the closed shell.
    assert table.loc["O2 triplet", "energy_Hartree"] < table.loc["O2 singlet", "energy_Hartree"]
    assert np.isfinite(table.loc["O2 triplet", "atomization_energy_eV"])


def test_charges_and_unpaired_electrons_reach_tblite():
    pytest.importorskip("tblite")
    from tblite.interface import Calculator

    acetate = embed_smiles("CC(=O)[O-]")
    methyl = embed_smiles("[CH3]")
    rows = label_chunk([acetate, methyl], LabelMethod("xtb"), names=["acetate", "methyl"])
    for row, atoms, charge, unpaired in zip(rows, (acetate, methyl), (-1, 0), (0, 1)):
        direct = Calculator("GFN2-xTB", atoms.numbers, atoms.positions / LENGTH_UNITS["Bohr"], charge=float(charge),
                            uhf=unpaired)
        direct.set("verbosity", 0)
        assert row["status"] == "ok"
        assert (row["charge"], row["multiplicity"]) == (charge, unpaired + 1)
        assert row["energy_Hartree"] == pytest.approx(direct.singlepoint().get("energy"), abs=1e-8)


def test_label_command_says_the_state_and_takes_a_multiplicity(tmp_path, capsys):
    pytest.importorskip("tblite")
    candidates = tmp_path / "ions.csv"
    candidates.write_text("name,smiles\nacetate,CC(=O)[O-]\ncarbonate,[O-]C(=O)[O-]\noxygen,O=O\nmethyl,[CH3]\n")
    assert main(["label", str(candidates), "--method", "xtb", "--out", str(tmp_path / "labels.csv")]) == 0
    table = read_labels(tmp_path / "labels.csv").set_index("name")
    assert table.loc["carbonate", "charge"] == -2 and table.loc["oxygen", "multiplicity"] == 1
    assert table.loc["methyl", "multiplicity"] == 2 and (table["status"] == "ok").all()
    assert main(["label", str(candidates), "--method", "xtb", "--multiplicity", "3",
                 "--out", str(tmp_path / "triplets.csv")]) == 0
    table = read_labels(tmp_path / "triplets.csv").set_index("name")
    assert table.loc["oxygen", "multiplicity"] == 3 and table.loc["oxygen", "status"] == "ok"
    assert table.loc["methyl", "status"] == "failed"
    assert "multiplicity 3 does not match the odd number of electrons (9" in table.loc["methyl", "reason"]


def test_a_labels_file_without_state_columns_is_continued(tmp_path, qm9):
    pytest.importorskip("tblite")
    molecules = qm9.molecules(qm9.sample(2, seed=4))
    path = tmp_path / "labels.csv"
    label_molecules(molecules[:1], LabelMethod("xtb"), path)
    old = pd.read_csv(path)[list(COLUMNS_WITHOUT_STATE)]
    old.to_csv(path, index=False)  # as written before the state columns existed
    assert label_molecules(molecules, LabelMethod("xtb"), path).computed == 1
    table = read_labels(path)
    assert len(table) == 2 and list(table["charge"]) == [0, 0] and list(table["multiplicity"]) == [1, 1]


def test_label_output_goes_back_into_fit(tmp_path, capsys):
    pytest.importorskip("tblite")
    smiles = ["C", "CC", "CCC", "CCCC", "CO", "CCO", "CCCO", "CC(C)O", "COC", "CC=O", "CC(C)=O", "CC#N",
              "CC(=O)[O-]", "C1CC"]
    candidates = tmp_path / "small.csv"
    candidates.write_text("smiles\n" + "\n".join(smiles) + "\n")
    labels = tmp_path / "labels.csv"
    assert main(["label", str(candidates), "--method", "xtb", "--out", str(labels)]) == 0
    table = read_labels(labels).set_index("name")
    assert set(table["geometry_source"]) == {"rdkit-etkdg+mmff94"}  # a single point on the embedded geometry
    frames = read_molecules(labels.with_suffix(".xyz"))
    assert not frames.rejected and len(frames.molecules) == 13  # every computed molecule, the ion included
    for atoms in frames.molecules:
        row = table.loc[atoms.info["name"]]
        assert atoms.info["energy"] == pytest.approx(row["energy_eV"], rel=1e-12)
        assert (atoms.info["charge"], atoms.info["multiplicity"]) == (row["charge"], row["multiplicity"])
        assert atoms.info["geometry_source"] == "rdkit-etkdg+mmff94"
        np.testing.assert_allclose(atoms.positions, embed_smiles(atoms.info["smiles"]).positions, atol=1e-6)
    capsys.readouterr()
    model = tmp_path / "model.npz"
    assert main(["fit", str(labels.with_suffix(".xyz")), "--energy-key", "atomization_energy", "--descriptor", "counts",
                 "--model", "baseline", "--out", str(model)]) == 0
    out = capsys.readouterr().out
    assert "model fitted on 12 molecules" in out and "missing energy 'atomization_energy'" in out  # the ion


def test_optimise_with_xtb_first(tmp_path):
    pytest.importorskip("tblite")
    from tblite.ase import TBLite

    molecules = [embed_smiles(s) for s in ("CCO", "CC(=O)[O-]")]
    for atoms, name in zip(molecules, ("ethanol", "acetate")):
        atoms.info["name"] = name
    path = tmp_path / "labels.csv"
    single = label_chunk(molecules, LabelMethod("xtb"))
    label_molecules(molecules, LabelMethod("xtb", optimize=True), path, geometries=tmp_path / "labels.xyz")
    table = read_labels(path).set_index("name")
    assert set(table["method"]) == {"GFN2-xTB//GFN2-xTB"}
    assert not any(tmp_path.glob("*.chunks"))  # the optimised chunks are removed once used
    assert set(table["geometry_source"]) == {"GFN2-xTB optimised from rdkit-etkdg+mmff94"}
    frames = {a.info["name"]: a for a in read_molecules(tmp_path / "labels.xyz").molecules}
    for row in single:
        moved = frames[row["name"]]
        # A minimum of the method lies below the force-field geometry's single point.
        assert table.loc[row["name"], "energy_Hartree"] < row["energy_Hartree"]
        # tblite itself, called on the written geometry: its energy, and forces below the threshold.
        moved.calc = TBLite(method="GFN2-xTB", charge=moved.info["charge"], multiplicity=moved.info["multiplicity"],
                            verbosity=0)
        assert moved.get_potential_energy() == pytest.approx(table.loc[row["name"], "energy_eV"], abs=1e-6)
        assert np.abs(moved.get_forces()).max() < 0.02
