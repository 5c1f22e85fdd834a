"""Screening: every row once with its status, resumable after a kill, and the applicability flag.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014) for training and as candidates.
"""

import copy
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest

from molinv.cluster import executor_for
from molinv.molecules.route import onto_embedded_route
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening import prediction_table
from molinv.screening.screen import screen_file


def atomization(molecules):
    return np.array([m.info["atomization_energy"] for m in molecules])


@pytest.fixture(scope="module")
def small_model(qm9, tmp_path_factory):
    # Trained on the SMILES route, as the candidates below arrive.
    train = onto_embedded_route(qm9.molecules(qm9.sample(200, seed=31, elements=["H", "C", "N", "O"])))
    model = EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True)).fit(train, atomization(train))
    path = model.save(tmp_path_factory.mktemp("model") / "model.npz", target="atomization_energy")
    return model, path


@pytest.fixture(scope="module")
def geometry_model(qm9):
    """Trained on QM9's own coordinates: candidates' coordinates are described as given."""
    train = qm9.molecules(qm9.sample(200, seed=31, elements=["H", "C", "N", "O"]))
    return EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True)).fit(train, atomization(train))


@pytest.mark.parametrize("jobs", [1, 2])
def test_mixed_batch_every_row_once_with_the_right_status(tmp_path, small_model, jobs):
    # jobs=2: chunks embedded, described and predicted in two worker processes.
    model, path = small_model
    candidates = tmp_path / "batch.csv"
    candidates.write_text(
        "name,smiles\n"
        "alpha,CCO\n"  # record 1: ok
        "beta,C1CC\n"  # record 2: does not parse
        "gamma,C1#CC#CC#C1\n"  # record 3: does not embed
        "delta,CS(C)=O\n"  # record 4: sulfur, not in the training set
        "alpha,CCCO\n"  # record 5: repeated name
        "epsilon,CC(=O)OC\n"  # record 6: ok
    )
    summary = screen_file(model, candidates, tmp_path / "out", model_fingerprint="m", target="atomization_energy",
                          chunk_size=4 if jobs == 1 else 2, executor=executor_for(None, jobs))
    table = pd.read_csv(summary.table_path)
    assert sorted(table["record"]) == [1, 2, 3, 4, 5, 6]
    status = dict(zip(table["record"], table["status"]))
    assert status == {1: "ok", 2: "failed", 3: "failed", 4: "failed", 5: "flagged", 6: "ok"}
    reasons = dict(zip(table["record"], table["reason"].fillna("")))
    assert "cannot parse SMILES" in reasons[2]
    assert "cannot embed" in reasons[3]
    assert "elements not in the training set: S" in reasons[4]
    assert "name also used by record 1" in reasons[5]
    assert set(table.loc[table["status"] != "failed", "geometry_source"]) == {"rdkit-etkdg+mmff94"}
    text = (tmp_path / "out" / "summary.txt").read_text()
    assert "6 candidates: 2 ok, 1 flagged, 3 failed" in text and "not a substitute for validated" in text


def test_killed_screen_restarts_to_the_same_table(tmp_path, qm9, small_model):
    _, model_path = small_model
    positions = qm9.sample(240, seed=32, elements=["H", "C", "N", "O"])
    smiles = tmp_path / "candidates.smi"
    smiles.write_text("".join(f"{s} q{i}\n" for i, s in zip(qm9.arrays["index"][positions],
                                                             qm9.arrays["smiles"][positions])))
    command = [sys.executable, "-m", "molinv.cli", "screen", str(model_path), str(smiles), "--chunk-size", "20"]
    reference = subprocess.run(command + ["--out", str(tmp_path / "whole")], capture_output=True, text=True)
    assert reference.returncode == 0, reference.stderr
    interrupted = tmp_path / "interrupted"
    process = subprocess.Popen(command + ["--out", str(interrupted)], stdout=subprocess.DEVNULL,
                               stderr=subprocess.DEVNULL)
    deadline = time.time() + 120
    while len(list((interrupted / "chunks").glob("part-*.csv"))) < 3 and time.time() < deadline:
        time.sleep(0.05)
    os.kill(process.pid, signal.SIGKILL)
    process.wait()
    finished_before = len(list((interrupted / "chunks").glob("part-*.csv")))
    assert 3 <= finished_before < 12  # killed midway: some chunks done, not all
    resumed = subprocess.run(command + ["--out", str(interrupted)], capture_output=True, text=True)
    assert resumed.returncode == 0, resumed.stderr
    whole, again = pd.read_csv(tmp_path / "whole" / "ranked.csv"), pd.read_csv(interrupted / "ranked.csv")
    assert len(again) == 240 and again["record"].is_unique
    pd.testing.assert_frame_equal(whole, again)


def test_applicability_flag_on_larger_molecules(qm9):
    # Trained on QM9 molecules with at most 6 heavy atoms (QM9 has only 175 with at most 5),
    # screened on held-out ones like them and on molecules with 9 heavy atoms.
    small = qm9.select(max_heavy_atoms=6)
    rng = np.random.default_rng(33)
    chosen = rng.permutation(small)
    train, held_out = qm9.molecules(chosen[:550]), qm9.molecules(chosen[550:])
    heavy = qm9.heavy_atom_counts()
    large = qm9.molecules(rng.choice(np.flatnonzero(heavy == 9), 200, replace=False))
    model = EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True)).fit(train, atomization(train))
    known = set(model.descriptor_.elements_)
    large = [m for m in large if set(m.numbers) <= known]
    flagged_similar = (prediction_table(model, held_out)["status"] == "flagged").mean()
    flagged_large = (prediction_table(model, large)["status"] == "flagged").mean()
    # Measured: 0.026 of the similar molecules flagged, 1.000 of those with 9 heavy atoms.
    assert flagged_similar <= 0.05
    assert flagged_large >= 0.8


def test_digit_only_names_stay_text_across_chunks(tmp_path, small_model):
    # One record per chunk: the ranking reads the names back from the chunk files, where '007'
    # and '7' once both became the number 7 and the second was flagged as a repeated name.
    model, _ = small_model
    candidates = tmp_path / "batch.csv"
    candidates.write_text("name,smiles\n007,CCO\n7,CCCO\n")
    summary = screen_file(model, candidates, tmp_path / "out", model_fingerprint="m", target="atomization_energy",
                          chunk_size=1, executor=executor_for(None, 1))
    table = pd.read_csv(summary.table_path, dtype={"name": str})
    assert sorted(table["name"]) == ["007", "7"]
    assert list(table["status"]) == ["ok", "ok"]


def far_atom_batch(qm9):
    """Four QM9 molecules and a copy of the first with one atom moved to 1e300 Angstrom
    (issue 19: this blocked the whole prediction)."""
    good = qm9.molecules(qm9.sample(4, seed=41, elements=["H", "C", "N", "O"]))
    broken = good[0].copy()
    broken.positions[0] = [1e300, 0.586, 0.0]
    broken.info["name"] = "far"
    return good + [broken]


def test_a_molecule_that_cannot_be_described_fails_alone(qm9, geometry_model):
    model = geometry_model
    table = prediction_table(model, far_atom_batch(qm9), target="atomization_energy", rank=False)
    status = dict(zip(table["name"], table["status"]))
    assert status.pop("far") == "failed"
    assert set(status.values()) <= {"ok", "flagged"} and len(status) == 4
    (reason,) = table.loc[table["name"] == "far", "reason"]
    assert "1e+300 Angstrom" in reason
    assert table.loc[table["name"] != "far", "atomization_energy_kcal/mol"].notna().all()


def test_screen_chunk_with_an_undescribable_molecule_finishes(tmp_path, qm9, geometry_model):
    model = geometry_model
    summary = screen_file(model, far_atom_batch(qm9), tmp_path / "out", model_fingerprint="m",
                          target="atomization_energy", chunk_size=5)
    assert (summary.rows, summary.failed) == (5, 1)


def test_predictions_that_are_not_finite_are_never_ok(qm9, geometry_model):
    model = geometry_model
    damaged = copy.deepcopy(model)
    damaged.regressor_.coef_[0] = np.nan  # as in a model file edited with its checksum recomputed
    molecules = qm9.molecules(qm9.sample(3, seed=42, elements=["H", "C", "N", "O"]))
    table = prediction_table(damaged, molecules, target="atomization_energy", rank=False)
    assert set(table["status"]) == {"failed"}
    assert table["reason"].str.contains("not finite").all()


def test_rdkit_exception_in_a_screen_chunk_fails_its_row_only(tmp_path, small_model):
    # RDKit's UFF set-up raises "Pre-condition Violation" for this SMILES (RDKit 2026.09).
    model, _ = small_model
    candidates = tmp_path / "batch.smi"
    candidates.write_text("CCO ethanol\nO=C1C=CON~CC1=O broken\nCCC propane\n")
    summary = screen_file(model, candidates, tmp_path / "out", model_fingerprint="m", target="atomization_energy",
                          chunk_size=3)
    table = pd.read_csv(summary.table_path)
    assert dict(zip(table["name"], table["status"])) == {"ethanol": "ok", "broken": "failed", "propane": "ok"}
    assert "Pre-condition Violation" in table.loc[table["name"] == "broken", "reason"].item()
