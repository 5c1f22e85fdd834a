"""fit says how good the model is: cross-validated MAE with its unit, the chosen width and
regularisation, and what a choice on a grid edge means.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

import re

import numpy as np
import pandas as pd
import pytest

from molinv.cli import main
from molinv.evaluation.curves import fit_summary
from molinv.models import KernelRidgeCV
from molinv.molecules.units import convert_energy
from molinv.recipes import make_descriptor, model_inputs


def test_fit_prints_the_cross_validated_error_and_the_choice(tmp_path, capsys):
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--out", str(tmp_path / "m.npz")]) == 0
    out = capsys.readouterr().out
    assert re.search(r"cross-validated MAE \(5-fold, 150 molecules\): [0-9.]+ kcal/mol \([0-9.]+ eV\)", out)
    assert re.search(r"chosen kernel width [0-9.e+]+ x the median training distance .*, regularisation [0-9.e-]+", out)
    assert "grid_edge" not in out
    assert "trained on neutral singlet molecules" in out


def test_edge_choices_come_with_advice_and_the_error_is_the_chosen_points(qm9):
    molecules = qm9.molecules(qm9.sample(80, seed=9))
    inputs = model_inputs(make_descriptor("counts").fit(molecules), molecules)
    energies = np.array([m.info["atomization_energy"] for m in molecules])
    # Two much too narrow widths: both kernels are the identity to rounding, the errors tie and the
    # first (narrowest) width is kept, on the grid's lower edge.
    model = KernelRidgeCV("laplacian", widths=(1e-4, 1e-3), regularizations=(1e-8, 1e-6, 1e-4),
                          width_unit="median").fit(inputs, energies)
    lines = fit_summary(model)
    assert model.width_ == 1e-4 * model.width_unit_value_
    i_reg = list(model.regularizations).index(model.regularization_)
    mae = convert_energy(model.cv_mae_[0, i_reg], "eV", "kcal/mol")
    assert f"{mae:.3g} kcal/mol" in lines[0]
    assert any("the narrowest kernel width tried" in line for line in lines)
    assert fit_summary(make_descriptor("counts")) == []  # nothing cross-validated, nothing said


def test_predict_on_molecules_with_references_reports_the_error_and_coverage(tmp_path, capsys):
    from ase import units

    from molinv.molecules.qm9 import load_qm9

    model, out = tmp_path / "m.npz", tmp_path / "p.csv"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--out", str(model)]) == 0
    capsys.readouterr()
    assert main(["predict", str(model), "qm9:80:9", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert re.search(r"ok rows \(\d+\): MAE [0-9.]+ kcal/mol", text)
    assert re.search(r"references inside the predicted 90% interval \(\+-1\.645 std\): \d+% of \d+", text)
    table = pd.read_csv(out).set_index("name")
    # The reference is QM9's atomization energy, in kcal/mol by ASE's constants.
    for atoms in load_qm9(n=80, seed=9):
        expected = atoms.info["atomization_energy"] / (units.kcal / units.mol)
        assert table.loc[atoms.info["name"], "reference_atomization_energy_kcal/mol"] == pytest.approx(expected)
    errors = table["atomization_energy_kcal/mol"] - table["reference_atomization_energy_kcal/mol"]
    # Each of the three columns is rounded to 1e-4 kcal/mol when written: up to 1.5e-4 apart.
    np.testing.assert_allclose(table["error_kcal/mol"], errors, rtol=0, atol=1.6e-4)
    ok = table[table["status"] == "ok"]
    assert f"MAE {ok['error_kcal/mol'].abs().mean():.3g} kcal/mol" in text
