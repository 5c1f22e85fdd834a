"""Labelling runs: restarts compute nothing twice, failures are recorded and do not stop the others.

Molecules: QM9 geometries (Ramakrishnan et al., Sci. Data 1, 140022, 2014) computed with
GFN2-xTB through tblite (about 10 ms each), plus invented failing cases.
"""

import numpy as np
import pandas as pd
import pytest
from ase import Atoms

from molinv.labels import LabelError, LabelMethod, label_chunk, label_molecules, read_labels

pytest.importorskip("tblite")

XTB = LabelMethod("xtb")


def methyl_radical(**info):
    return Atoms("CH3", positions=[[0, 0, 0], [1.08, 0, 0], [-0.54, 0.935, 0], [-0.54, -0.935, 0]],
                 info={"name": "methyl radical", **info})


@pytest.fixture(scope="module")
def molecules(qm9):
    return qm9.molecules(qm9.sample(10, seed=71))


def test_a_restarted_run_computes_nothing_twice(tmp_path, molecules):
    path = tmp_path / "labels.csv"
    first = label_molecules(molecules[:6], XTB, path)
    before = path.read_text()
    second = label_molecules(molecules, XTB, path)
    assert (first.computed, first.already_done) == (6, 0)
    assert (second.computed, second.already_done) == (4, 6)
    assert path.read_text().startswith(before)  # the finished rows are untouched
    table = pd.read_csv(path)
    assert sorted(table["name"]) == sorted(m.info["name"] for m in molecules)
    assert label_molecules(molecules, XTB, path).computed == 0


def test_a_row_cut_short_by_an_interruption_is_computed_again_once(tmp_path, molecules):
    path = tmp_path / "labels.csv"
    label_molecules(molecules[:3], XTB, path)
    with open(path, "a") as handle:  # what a kill in the middle of writing leaves behind
        handle.write(f"{molecules[3].info['name']},C7H10O2,GFN2-xTB,ok,-3")
    summary = label_molecules(molecules[:5], XTB, path)
    assert summary.computed == 2
    table = read_labels(path, XTB)
    assert len(table) == 5 and table["name"].is_unique and (table["status"] == "ok").all()


def test_failing_molecules_do_not_stop_the_others(tmp_path, molecules):
    uranium = Atoms("U2", positions=[[0, 0, 0], [0, 0, 2.5]], info={"name": "diuranium"})
    batch = [molecules[0], methyl_radical(multiplicity=1), uranium, molecules[1]]
    summary = label_molecules(batch, XTB, tmp_path / "labels.csv")
    assert (summary.computed, summary.failed) == (4, 2)
    table = read_labels(tmp_path / "labels.csv").set_index("name")
    assert "multiplicity 1 does not match the odd number of electrons (9" in table.loc["methyl radical", "reason"]
    assert "unsupported element for GFN2-xTB" in table.loc["diuranium", "reason"]
    ok = table.loc[[molecules[0].info["name"], molecules[1].info["name"]]]
    assert (ok["status"] == "ok").all() and np.isfinite(ok["atomization_energy_eV"]).all()


def test_pyscf_failures_keep_their_reason():
    pytest.importorskip("pyscf")
    water = Atoms("OH2", positions=[[0, 0, 0], [0.96, 0, 0], [-0.24, 0.93, 0]], info={"name": "water"})
    gold = Atoms("Au2", positions=[[0, 0, 0], [0, 0, 2.5]], info={"name": "gold dimer"})
    rows = label_chunk([water, gold], LabelMethod("hf", basis="6-31G"))
    assert [r["status"] for r in rows] == ["ok", "failed"]
    assert "cannot build the basis '6-31G'" in rows[1]["reason"]
    # HF atomization energy of water is positive (bound) and below the experimental
    # equilibrium value, about 232 kcal/mol (from memory): Hartree-Fock misses correlation.
    assert 0 < rows[0]["atomization_energy_eV"] < 232 * 0.0434


def test_parallel_workers_give_the_same_energies_as_one_process(tmp_path, molecules):
    label_molecules(molecules[:6], XTB, tmp_path / "one.csv", n_jobs=1)
    label_molecules(molecules[:6], XTB, tmp_path / "two.csv", n_jobs=2, chunk_size=2)
    one = read_labels(tmp_path / "one.csv").set_index("name").sort_index()
    two = read_labels(tmp_path / "two.csv").set_index("name").sort_index()
    np.testing.assert_allclose(two["energy_Hartree"], one["energy_Hartree"], rtol=0, atol=1e-9)


def test_units_hartree_and_ev_agree(tmp_path, molecules):
    # 1 Hartree = 27.211386 eV (CODATA 2018; ase.units within 1e-6 relative).
    row = label_chunk(molecules[:1], XTB)[0]
    assert row["energy_eV"] / row["energy_Hartree"] == pytest.approx(27.211386, rel=1e-6)


def test_repeated_names_and_another_methods_file_are_refused(tmp_path, molecules):
    twins = [molecules[0], molecules[1].copy()]
    twins[1].info["name"] = molecules[0].info["name"]
    with pytest.raises(LabelError, match="names must be unique"):
        label_molecules(twins, XTB, tmp_path / "labels.csv")
    label_molecules(molecules[:1], XTB, tmp_path / "labels.csv")
    with pytest.raises(LabelError, match="holds labels of GFN2-xTB, not HF/STO-3G"):
        label_molecules(molecules[:1], LabelMethod("hf", basis="STO-3G"), tmp_path / "labels.csv")
