"""Reading and writing molecules: round trips through every format, and bad input."""

import numpy as np
import pytest
from ase.build import molecule as g2_molecule
from rdkit import Chem

from molinv.molecules import InputError, read_molecules, write_molecules
from molinv.molecules.units import ENERGY_UNITS, LENGTH_UNITS


def canonical(smiles):
    # QM9's SMILES carry no stereo labels; compare constitution only.
    return Chem.MolToSmiles(Chem.MolFromSmiles(smiles), isomericSmiles=False)


@pytest.fixture()
def labelled(qm9_sample):
    molecules = [m.copy() for m in qm9_sample[:6]]
    for m in molecules:
        m.info["energy"] = m.info["U0"]
    return molecules


@pytest.mark.parametrize("suffix", ["xyz", "sdf"])
@pytest.mark.parametrize(("length", "energy"), [("Angstrom", "eV"), ("Bohr", "Hartree"), ("Angstrom", "kcal/mol")])
def test_geometry_formats_round_trip(tmp_path, labelled, suffix, length, energy):
    path = write_molecules(tmp_path / f"set.{suffix}", labelled, length=length, energy=energy)
    result = read_molecules(path, length=length, energy=energy, require_energy=True)
    assert result.rejected == []
    assert [m.info["name"] for m in result.molecules] == [m.info["name"] for m in labelled]
    # MDL molfiles keep 4 decimals of the coordinate in the file's unit.
    tolerance = 1e-8 if suffix == "xyz" else 1e-4 * LENGTH_UNITS[length]
    for read, original in zip(result.molecules, labelled):
        assert read.get_chemical_symbols() == original.get_chemical_symbols()
        np.testing.assert_allclose(read.positions, original.positions, atol=tolerance)
        assert read.info["energy"] == pytest.approx(original.info["energy"], rel=1e-12)
        assert canonical(read.info.get("smiles", original.info["smiles"])) == canonical(original.info["smiles"])


def test_sdf_bonds_reproduce_the_qm9_smiles(tmp_path, labelled):
    # QM9's own SMILES (Ramakrishnan et al. 2014) against RDKit's bond perception on its geometry.
    result = read_molecules(write_molecules(tmp_path / "set.sdf", labelled))
    for read, original in zip(result.molecules, labelled):
        assert canonical(read.info["smiles"]) == canonical(original.info["smiles"])


@pytest.mark.parametrize("suffix", ["smi", "csv"])
def test_smiles_formats_round_trip(tmp_path, labelled, suffix):
    path = write_molecules(tmp_path / f"set.{suffix}", labelled, energy="kJ/mol")
    result = read_molecules(path, energy="kJ/mol", require_energy=(suffix == "csv"))
    assert result.rejected == []
    for read, original in zip(result.molecules, labelled):
        assert read.info["name"] == original.info["name"]
        assert read.get_chemical_formula() == original.get_chemical_formula()
        assert read.info["geometry_source"].startswith("rdkit-etkdg")
        if suffix == "csv":
            assert read.info["energy"] == pytest.approx(original.info["energy"], rel=1e-12)


def test_embedding_is_reproducible_and_physical(tmp_path):
    path = tmp_path / "set.smi"
    path.write_text("CCO ethanol\nCOC dimethyl ether\n")
    first, second = read_molecules(path).molecules, read_molecules(path).molecules
    for a, b in zip(first, second):
        np.testing.assert_array_equal(a.positions, b.positions)
    ethanol = first[0]
    # C-O bond of ethanol 1.43 Angstrom (CRC Handbook, bond lengths in organic molecules; from memory).
    carbon, oxygen = np.flatnonzero(ethanol.numbers == 6), np.flatnonzero(ethanol.numbers == 8)[0]
    assert min(ethanol.get_distance(c, oxygen) for c in carbon) == pytest.approx(1.43, abs=0.03)


def test_extxyz_per_frame_properties(tmp_path):
    path = tmp_path / "frames.extxyz"
    path.write_text(
        "3\nname=w1 energy=-76.4 dipole=1.85 tag=abc\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n"
    )
    (water,) = read_molecules(path, file_format="xyz", energy="Hartree", require_energy=True).molecules
    assert water.info["name"] == "w1"
    assert water.info["energy"] == pytest.approx(-76.4 * ENERGY_UNITS["Hartree"])
    assert water.info["dipole"] == pytest.approx(1.85)
    assert water.info["tag"] == "abc"


GOOD_WATER = "O 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n"


def test_bad_xyz_records_are_reported_and_good_ones_kept(tmp_path):
    path = tmp_path / "mixed.xyz"
    path.write_text(
        "3\ngood one\n" + GOOD_WATER  # record 1, line 1
        + "3\nbad element\nXq 0 0 0\nH 0 0.76 -0.47\nH 0 -0.76 -0.47\n"  # record 2, line 6
        + "3\nnot finite\nO 0 0 nan\nH 0 0.76 -0.47\nH 0 -0.76 -0.47\n"  # record 3, line 11
        + "0\nempty\n"  # record 4, line 16
        + "3\ngood two\n" + GOOD_WATER  # record 5, line 18
        + "5\ntruncated\nC 0 0 0\nH 0 0 1.09\n"  # record 6, line 23
    )
    result = read_molecules(path)
    assert [m.info["name"] for m in result.molecules] == ["good one", "good two"]
    problems = {(r.record, r.line): r.reason for r in result.rejected}
    assert set(problems) == {(2, 6), (3, 11), (4, 16), (6, 23)}
    assert "unknown element symbol 'Xq'" in problems[(2, 6)]
    assert "non-finite coordinates for atom 1" in problems[(3, 11)]
    assert "empty record" in problems[(4, 16)]
    assert "truncated record: 5 atoms declared, 2 atom lines found" in problems[(6, 23)]
    assert all(str(path) in str(r) for r in result.rejected)


def test_coordinates_in_the_wrong_unit_get_a_hint(tmp_path):
    methane = g2_molecule("CH4")  # ase's G2 geometry (Curtiss et al., J. Chem. Phys. 106, 1063, 1997)
    path = write_molecules(tmp_path / "methane.xyz", [methane])
    (declared_bohr,) = read_molecules(path, length="Bohr").rejected
    assert "closer than" in declared_bohr.reason or "too short" in declared_bohr.reason
    assert "were Angstrom coordinates read as Bohr?" in declared_bohr.reason
    write_molecules(tmp_path / "methane_bohr.xyz", [methane], length="Bohr")
    (declared_angstrom,) = read_molecules(tmp_path / "methane_bohr.xyz", length="Angstrom").rejected
    assert "were Bohr coordinates read as Angstrom?" in declared_angstrom.reason
    assert read_molecules(tmp_path / "methane_bohr.xyz", length="Bohr").rejected == []


def test_clashing_atoms_without_scaling_have_no_unit_hint(tmp_path):
    path = tmp_path / "clash.xyz"
    path.write_text("3\nclash\nO 0 0 0\nH 0 0 0.3\nH 0 0.96 0\n")
    (rejected,) = read_molecules(path).rejected
    assert "atom 1 (O) is 0.300 Angstrom from its nearest neighbour" in rejected.reason
    assert "Bohr" not in rejected.reason


def test_bad_sdf_records(tmp_path, labelled):
    good = write_molecules(tmp_path / "good.sdf", labelled[:2]).read_text().split("$$$$\n")
    flat = Chem.MolToMolBlock(Chem.MolFromSmiles("CCO"))  # 2D coordinates only
    unknown = good[0].replace(" C   0", " Xq  0", 1)
    path = tmp_path / "mixed.sdf"
    path.write_text(good[0] + "$$$$\n" + flat + "$$$$\n" + unknown + "$$$$\n" + good[1] + "$$$$\n")
    result = read_molecules(path)
    assert [m.info["name"] for m in result.molecules] == [labelled[0].info["name"], labelled[1].info["name"]]
    reasons = {r.record: r.reason for r in result.rejected}
    assert set(reasons) == {2, 3}
    assert "2D coordinates only" in reasons[2]
    assert "RDKit cannot read the record" in reasons[3] and "Xq" in reasons[3]
    assert result.rejected[0].line == good[0].count("\n") + 2


def test_bad_smiles_and_energies_in_csv(tmp_path):
    path = tmp_path / "table.csv"
    path.write_text(
        "name,SMILES,energy,note\n"
        "ok,CCO,-154.9,fine\n"  # row 1, line 2
        "unparsable,C1CC,-100.0,\n"  # row 2, line 3
        "no-embed,C1#CC#CC#C1,-230.0,\n"  # row 3, line 4: cyclohexatriyne, no 3D geometry
        "missing,CC,,\n"  # row 4, line 5
        "text,CC,high,\n"  # row 5, line 6
    )
    result = read_molecules(path, energy="Hartree", require_energy=True)
    assert [m.info["name"] for m in result.molecules] == ["ok"]
    assert result.molecules[0].info["note"] == "fine"
    reasons = {(r.record, r.line, r.name): r.reason for r in result.rejected}
    assert "RDKit cannot parse SMILES 'C1CC'" in reasons[(2, 3, "unparsable")]
    assert "unclosed ring" in reasons[(2, 3, "unparsable")].lower()
    assert "RDKit cannot embed SMILES 'C1#CC#CC#C1'" in reasons[(3, 4, "no-embed")]
    assert reasons[(4, 5, "missing")] == "missing energy 'energy'"
    assert reasons[(5, 6, "text")] == "non-numeric energy 'energy': 'high'"


def test_smiles_list_names_and_empty_lines(tmp_path):
    path = tmp_path / "list.smi"
    path.write_text("# candidates\nsmiles name\nCCO ethanol\n\nC1CC broken ring\nO\n")
    result = read_molecules(path)
    assert [m.info["name"] for m in result.molecules] == ["ethanol", "list:3"]
    (bad,) = result.rejected
    assert (bad.record, bad.line, bad.name) == (2, 5, "broken ring")


def test_whole_file_errors(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_molecules(tmp_path / "absent.xyz")
    (tmp_path / "a.pdbx").write_text("")
    with pytest.raises(InputError, match="cannot tell the format"):
        read_molecules(tmp_path / "a.pdbx")
    (tmp_path / "t.csv").write_text("name,formula\nx,CH4\n")
    with pytest.raises(InputError, match="no SMILES column"):
        read_molecules(tmp_path / "t.csv")


def test_multi_fragment_smiles_is_refused(tmp_path):
    path = tmp_path / "salt.smi"
    path.write_text("CCOC(C)=O.O wet-ester\n")
    (rejected,) = read_molecules(path).rejected
    assert "2 disconnected fragments" in rejected.reason
