"""The chain descriptor -> regressor on molecules, its model file, the prediction table and the CLI.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import cross_val_predict

from molinv.cli import main
from molinv.models import KernelRidgeModel, LinearRidge
from molinv.molecules import read_molecules
from molinv.molecules.route import onto_embedded_route
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening import prediction_table


@pytest.fixture(scope="module")
def no_fluorine(qm9):
    positions = qm9.sample(240, seed=21, elements=["H", "C", "N", "O"])
    return qm9.molecules(positions)


def atomization(molecules):
    return np.array([m.info["atomization_energy"] for m in molecules])


def test_model_file_round_trip_gives_identical_predictions(tmp_path, no_fluorine):
    train, test = no_fluorine[:200], no_fluorine[200:]
    model = EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True)).fit(train, atomization(train))
    path = model.save(tmp_path / "model.npz", target="atomization_energy")
    loaded, metadata = EnergyModel.load(path)
    assert metadata["target"] == "atomization_energy" and metadata["units"]["energy"] == "eV"
    np.testing.assert_array_equal(loaded.predict(test), model.predict(test))


def test_energy_model_composes_with_scikit_learn_cross_validation(no_fluorine):
    model = EnergyModel(make_descriptor("atoms"), LinearRidge(regularization=1e-6))
    predicted = cross_val_predict(model, no_fluorine, atomization(no_fluorine), cv=3)
    errors = np.abs(predicted - atomization(no_fluorine))
    # Far below the spread of QM9 atomization energies (about 10 eV, Ramakrishnan et al. 2014).
    assert errors.mean() < 0.5


def test_prediction_table_has_every_row_once_with_its_status(tmp_path, no_fluorine):
    # Trained on geometries made from the SMILES, as the candidates' are (else they are flagged).
    train = onto_embedded_route(no_fluorine)
    model = EnergyModel(make_descriptor("atoms"), make_regressor("linear", per_atom=True))
    model.fit(train, atomization(train))
    candidates = tmp_path / "candidates.csv"
    candidates.write_text(
        "name,smiles\n"
        "ethanol,CCO\n"
        "dimethyl ether,COC\n"
        "fluoromethane,CF\n"  # F: not in the training set
        "broken,C1CC\n"  # does not parse
        "propanol,CCCO\n"
    )
    read = read_molecules(candidates)
    table = prediction_table(model, read.molecules, read.rejected, unit="kcal/mol", target="atomization_energy")
    assert sorted(table["name"]) == sorted(["ethanol", "dimethyl ether", "fluoromethane", "broken", "propanol"])
    status = dict(zip(table["name"], table["status"]))
    assert status == {"ethanol": "ok", "dimethyl ether": "ok", "propanol": "ok", "fluoromethane": "failed",
                      "broken": "failed"}
    reasons = dict(zip(table["name"], table["reason"]))
    assert "elements not in the training set: F" in reasons["fluoromethane"]
    assert "cannot parse SMILES" in reasons["broken"]
    isomers = table.set_index("name").loc[["ethanol", "dimethyl ether"], "relative_to_best_isomer_kcal/mol"]
    # Ethanol is the more stable C2H6O isomer, by about 12 kcal/mol (NIST Chemistry WebBook heats of
    # formation, -56.2 vs -44.0 kcal/mol in the gas phase; from memory). A linear model on 240
    # molecules gets the order, not the size.
    assert isomers["ethanol"] == 0.0
    assert isomers["dimethyl ether"] > 0.0


def test_cli_fit_predict_and_readable_errors(tmp_path, qm9):
    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(model_path)]) == 0
    smiles = tmp_path / "c.smi"
    smiles.write_text("CCO ethanol\nC1CC broken\n")
    out = tmp_path / "predicted.csv"
    assert main(["predict", str(model_path), str(smiles), "--out", str(out), "--unit", "kJ/mol"]) == 0
    table = pd.read_csv(out)
    assert list(table["name"]) == ["ethanol", "broken"]
    assert "atomization_energy_kJ/mol" in table.columns
    done = subprocess.run([sys.executable, "-m", "molinv.cli", "predict", str(tmp_path / "absent.npz"), str(smiles),
                           "--out", str(out)], capture_output=True, text=True)
    assert done.returncode == 2
    assert "Traceback" not in done.stderr and len(done.stderr.strip().splitlines()) == 1
    assert "absent.npz" in done.stderr


def test_cli_atom_components_reach_the_model_file(tmp_path, qm9):
    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:60:5", "--descriptor", "atoms", "--model", "linear", "--atom-components", "6",
                 "--out", str(model_path)]) == 0
    model, metadata = EnergyModel.load(model_path)
    assert metadata["descriptor"]["params"]["n_components"] == 6
    assert model.descriptor_.basis_.shape[2] == 6


def test_curve_rerun_with_other_atom_components_refuses_the_folder(tmp_path, qm9, capsys):
    # Issue 19: the rerun reported the old full-vector points under the new settings.
    common = ["curve", "qm9:90:5", "--descriptor", "atoms", "--model", "linear", "--sizes", "20", "40",
              "--test-size", "30", "--draws", "1", "--out", str(tmp_path)]
    assert main(common) == 0
    capsys.readouterr()
    assert main(common + ["--atom-components", "6"]) == 2
    error = capsys.readouterr().err
    assert "other settings" in error and "n_components" in error


def test_global_recipes_take_the_kernel_chosen_per_descriptor():
    from molinv.recipes import DEFAULT_GLOBAL_KERNEL, GLOBAL_KERNEL_CHOICE

    for name, choice in [*GLOBAL_KERNEL_CHOICE.items(), ("counts", DEFAULT_GLOBAL_KERNEL)]:
        for model in ("kernel", "large"):
            params = make_regressor(model, per_atom=False, descriptor=name).get_params()
            assert (params["kernel"], params["scale"]) == choice, (name, model)


def test_landmarks_option_reaches_the_nystrom_model(tmp_path):
    # QM9 sample (Ramakrishnan et al., Sci. Data 1, 140022, 2014); the check is the plumbing:
    # the fitted model keeps exactly the number of landmark molecules asked for.
    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:80:3", "--descriptor", "coulomb", "--model", "large", "--landmarks", "17",
                 "--out", str(model_path)]) == 0
    model, _ = EnergyModel.load(model_path)
    assert model.regressor_.n_landmarks == 17
    assert len(model.regressor_.landmarks_) == 17


def test_names_that_spreadsheets_run_as_formulas_are_neutralised(tmp_path, qm9):
    # OWASP "CSV Injection": cells starting with = + - @ are formulas in spreadsheet programs.
    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(model_path)]) == 0
    candidates = tmp_path / "c.csv"
    candidates.write_text('name,smiles\n"=HYPERLINK(""http://x.example"",""open"")",CCO\n@SUM(A1),CCC\n'
                          "-2+3,C1CC\nethanol,CCO\n")
    for jobs in ("1", "2"):
        out = tmp_path / f"predicted{jobs}.csv"
        assert main(["predict", str(model_path), str(candidates), "--out", str(out), "--jobs", jobs]) == 0
        names = sorted(pd.read_csv(out)["name"])
        assert names == sorted(["'=HYPERLINK(\"http://x.example\",\"open\")", "'@SUM(A1)", "'-2+3", "ethanol"])
    rejected = tmp_path / "rejected.csv"
    assert main(["check", str(candidates), "--rejected-out", str(rejected)]) == 0
    assert list(pd.read_csv(rejected)["name"]) == ["'-2+3"]


def test_parquet_keeps_names_as_they_were_read(tmp_path, qm9):
    pytest.importorskip("pyarrow")
    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(model_path)]) == 0
    candidates = tmp_path / "c.smi"
    candidates.write_text("CCO =cmd|' /C calc'!A0\nCCC propane\n")
    assert main(["screen", str(model_path), str(candidates), "--out", str(tmp_path / "s"), "--parquet"]) == 0
    assert sorted(pd.read_csv(tmp_path / "s" / "ranked.csv")["name"]) == ["'=cmd|' /C calc'!A0", "propane"]
    assert sorted(pd.read_parquet(tmp_path / "s" / "ranked.parquet")["name"]) == ["=cmd|' /C calc'!A0", "propane"]


@pytest.mark.parametrize("verb", ["fit", "describe", "predict", "screen", "curve", "check"])
def test_unwritable_output_is_refused_before_the_work(tmp_path, qm9, capsys, verb):
    # A path under a plain file cannot be created, even by root (read-only folders can).
    blocker = tmp_path / "a_file"
    blocker.write_text("")
    smiles = tmp_path / "c.smi"
    smiles.write_text("CCO ethanol\nC1CC broken\n")
    model_path = tmp_path / "model.npz"
    if verb in ("predict", "screen"):
        assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out",
                     str(model_path)]) == 0
    arguments = {
        "fit": ["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(blocker / "m.npz")],
        "describe": ["describe", str(smiles), "--descriptor", "counts", "--out", str(blocker / "f.npz")],
        "predict": ["predict", str(model_path), str(smiles), "--out", str(blocker / "p.csv")],
        "screen": ["screen", str(model_path), str(smiles), "--out", str(blocker / "screen")],
        "curve": ["curve", "qm9:90:5", "--descriptor", "counts", "--model", "linear", "--sizes", "20",
                  "--test-size", "30", "--draws", "1", "--out", str(blocker / "curve")],
        "check": ["check", str(smiles), "--rejected-out", str(blocker / "rejected.csv")],
    }[verb]
    capsys.readouterr()
    assert main(arguments) == 2
    captured = capsys.readouterr()
    assert "cannot write to" in captured.err and "a_file" in captured.err
    assert captured.out == ""  # refused before reading or fitting anything


def test_model_file_is_compressed_and_predicts_bit_for_bit(tmp_path, no_fluorine):
    # Issue 18 item 8: the training atoms' descriptors, most of a kernel model file, are about
    # half zeros (atoms with no neighbour of some element); stored deflated, the file shrinks.
    train, test = no_fluorine[:60], no_fluorine[200:220]
    model = EnergyModel(make_descriptor("atoms"), make_regressor("kernel", per_atom=True)).fit(train, atomization(train))
    path = model.save(tmp_path / "model.npz", target="atomization_energy")
    with np.load(path) as archive:
        array_bytes = sum(archive[name].nbytes for name in archive.files)
    assert path.stat().st_size < 0.9 * array_bytes  # 0.78 measured here, 0.49 at 2,000 QM9 molecules
    loaded, _ = EnergyModel.load(path)
    expected, found = model.assess(test), loaded.assess(test)
    for key in ("predicted", "std", "distance"):
        np.testing.assert_array_equal(found[key], expected[key])
