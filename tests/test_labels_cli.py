"""The verbs label, pick and pick-loop, end to end on small QM9 samples.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014); energies GFN2-xTB through tblite.
"""

import json

import pandas as pd
import pytest

from molinv.cli import main

pytest.importorskip("tblite")


def test_label_writes_rows_then_skips_them_on_a_rerun(tmp_path, capsys):
    out = tmp_path / "labels.csv"
    assert main(["label", "qm9:5:3", "--method", "xtb", "--out", str(out)]) == 0
    assert "5 molecules computed (0 failed), 0 already in" in capsys.readouterr().out
    assert main(["label", "qm9:5:3", "--method", "xtb", "--out", str(out)]) == 0
    assert "0 molecules computed (0 failed), 5 already in" in capsys.readouterr().out
    table = pd.read_csv(out)
    assert len(table) == 5 and (table["status"] == "ok").all() and (table["atomization_energy_eV"] > 0).all()
    assert main(["label", "qm9:5:3", "--method", "hf", "--basis", "STO-3G", "--out", str(out)]) == 2
    assert "holds labels of GFN2-xTB" in capsys.readouterr().err


def test_pick_and_pick_loop(tmp_path, capsys):
    model = tmp_path / "model.npz"
    assert main(["fit", "qm9:120:4", "--descriptor", "counts", "--out", str(model)]) == 0
    assert main(["pick", str(model), "qm9:200:6", "--k", "4", "--out", str(tmp_path / "picked.csv")]) == 0
    picked = pd.read_csv(tmp_path / "picked.csv")
    assert len(picked) == 200 and sorted(picked["pick_order"].dropna()) == [1, 2, 3, 4]
    for strategy in ("spread", "variance"):
        out = tmp_path / f"{strategy}.csv"
        assert main(["pick", str(model), "qm9:200:6", "--k", "4", "--strategy", strategy, "--reference", "50",
                     "--out", str(out)]) == 0
        assert sorted(pd.read_csv(out)["pick_order"].dropna()) == [1, 2, 3, 4]
    capsys.readouterr()
    folder = tmp_path / "loop"
    arguments = ["pick-loop", "qm9:300:8", "--simulate", "--descriptor", "coulomb-sorted", "--sizes", "20", "40",
                 "--test-size", "80", "--out", str(folder)]
    assert main(arguments) == 0
    out = capsys.readouterr().out
    assert "labels revealed in this run: 120 (test set and picked molecules only)" in out
    assert main(arguments[:-4] + ["60", "--test-size", "80", "--out", str(folder)]) == 0
    assert "labels revealed in this run: 20" in capsys.readouterr().out
    assert list(pd.read_csv(folder / "rounds.csv")["size"]) == [20, 40, 60]
    assert (folder / "learning_curve.png").stat().st_size > 0
    tuned = tmp_path / "tuned"
    assert main(arguments[:-1] + [str(tuned), "--strategy", "variance", "--reference", "50", "--tune-once"]) == 0
    assert "variance, test set of 80" in capsys.readouterr().out
    assert json.loads((tuned / "loop.json").read_text())["tune_once"] is True


def test_pick_loop_computes_the_labels_it_picks(tmp_path, capsys):
    folder = tmp_path / "loop"
    assert main(["pick-loop", "qm9:90:2", "--method", "xtb", "--descriptor", "counts", "--sizes", "10", "20",
                 "--test-size", "30", "--out", str(folder)]) == 0
    computed = pd.read_csv(folder / "computed.csv")
    labels = pd.read_csv(folder / "labels.csv")
    assert len(computed) == 50 and computed["name"].is_unique
    assert sorted(computed["name"]) == sorted(labels["name"])
    assert list(pd.read_csv(folder / "rounds.csv")["size"]) == [10, 20]
