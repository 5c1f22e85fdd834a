"""Labelling and describing with --cluster give what the local path gives.

Molecules: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014): geometries labelled with
GFN2-xTB (tblite), and SMILES for describing (embedded by RDKit ETKDG + MMFF). The
reference for every check is the local path (this process, no Dask). Work meant for the
workers is made to fail in this process, so a check passes only if the workers did it.
"""

import time

import numpy as np
import pandas as pd
import pytest
from ase import units

from molinv.cli import main
from molinv.labels import LabelMethod, label_molecules, read_labels
from molinv.molecules import read_molecules
from molinv.molecules.writing import write_molecules

pytest.importorskip("dask.distributed")

XTB = LabelMethod("xtb")
ENERGIES = ["energy_Hartree", "energy_eV", "atomization_energy_eV"]


class NotHere(RuntimeError):
    pass


def fail_here(*args, **kwargs):
    raise NotHere("this work belongs on the Dask workers")


@pytest.fixture(scope="module")
def small(qm9, tmp_path_factory):
    """16 QM9 molecules of at most 5 heavy atoms (xtb: a few ms each) in an XYZ file."""
    molecules = qm9.molecules(qm9.sample(16, seed=97, max_heavy_atoms=5))
    path = write_molecules(tmp_path_factory.mktemp("labels") / "small.xyz", molecules)
    return molecules, path


@pytest.fixture(scope="module")
def local_labels(small, tmp_path_factory):
    pytest.importorskip("tblite")
    out = tmp_path_factory.mktemp("local") / "labels.csv"
    assert main(["label", str(small[1]), "--method", "xtb", "--chunk-size", "4", "--out", str(out)]) == 0
    table = read_labels(out, XTB)
    assert len(table) == 16 and (table["status"] == "ok").all()  # the comparisons are on real energies
    return table


def assert_same_rows(found: pd.DataFrame, expected: pd.DataFrame) -> None:
    assert list(found.columns) == list(expected.columns)
    found = found.sort_values("name").reset_index(drop=True)
    expected = expected.sort_values("name").reset_index(drop=True)
    other = [c for c in expected.columns if c not in ENERGIES + ["seconds"]]
    pd.testing.assert_frame_equal(found[other], expected[other])
    # 1e-8 Hartree: GFN2-xTB runs in two processes agreed to about 4e-10 Hartree here, not bit for bit.
    np.testing.assert_allclose(found["energy_Hartree"], expected["energy_Hartree"], rtol=0, atol=1e-8)
    for column in ("energy_eV", "atomization_energy_eV"):
        np.testing.assert_allclose(found[column], expected[column], rtol=0, atol=1e-8 * units.Hartree)


def test_label_on_the_cluster_equals_local_and_a_rerun_computes_nothing(small, local_labels, client, tmp_path,
                                                                         capsys, monkeypatch):
    from molinv.labels import run

    monkeypatch.setattr(run, "label_chunk", fail_here)
    out = tmp_path / "labels.csv"
    arguments = ["label", str(small[1]), "--method", "xtb", "--chunk-size", "4", "--cluster",
                 client.scheduler.address, "--out", str(out)]
    assert main(arguments) == 0
    assert "16 molecules computed (0 failed), 0 already in" in capsys.readouterr().out
    table = pd.read_csv(out, keep_default_na=False, na_values={c: ["nan", ""] for c in ENERGIES})
    assert len(table) == 16 and table["name"].is_unique  # one row per molecule
    assert_same_rows(table, local_labels)
    assert not (tmp_path / "labels.csv.chunks").exists()  # every row moved into the labels file
    text = out.read_text()
    assert main(arguments) == 0
    assert "0 molecules computed (0 failed), 16 already in" in capsys.readouterr().out
    assert out.read_text() == text


def test_an_interrupted_labelling_run_keeps_its_finished_chunks(small, local_labels, client, tmp_path, monkeypatch):
    from molinv.cluster.dask_cluster import DaskCluster
    from molinv.labels import run

    # Read from the file the local run read, so that the rows' geometry_source ('file') agrees too.
    molecules = read_molecules(small[1]).molecules
    path = tmp_path / "labels.csv"
    move = run._move_rows

    def stop_at_the_second_chunk(part, *args):
        if stop_at_the_second_chunk.moved:
            raise NotHere("the client stops with one chunk moved, the next one only in its file")
        stop_at_the_second_chunk.moved = True
        return move(part, *args)

    stop_at_the_second_chunk.moved = False
    monkeypatch.setattr(run, "_move_rows", stop_at_the_second_chunk)
    with pytest.raises(NotHere):
        label_molecules(molecules, XTB, path, chunk_size=4, executor=DaskCluster(client))
    monkeypatch.undo()
    # Chunks already running on a worker still finish and write their file; wait until none is.
    parts, stable_since = [], time.time()
    while time.time() - stable_since < 1.5:
        time.sleep(0.1)
        now = sorted((tmp_path / "labels.csv.chunks").glob("run-*/part-*.csv"))
        if now != parts:
            parts, stable_since = now, time.time()
    in_file = read_labels(path, XTB)
    waiting = pd.concat([pd.read_csv(part) for part in parts])
    assert len(in_file) == 4 and len(waiting) >= 4

    monkeypatch.setattr(run, "label_chunk", fail_here)
    summary = label_molecules(molecules, XTB, path, chunk_size=4, executor=DaskCluster(client))
    assert summary.already_done == len(in_file) + len(waiting)  # the finished chunks are not computed again
    assert summary.computed == 16 - summary.already_done
    table = pd.read_csv(path, keep_default_na=False, na_values={c: ["nan", ""] for c in ENERGIES})
    assert len(table) == 16 and table["name"].is_unique
    assert_same_rows(table, local_labels)


def test_describe_on_the_cluster_embeds_on_the_workers_and_equals_local(qm9, client, tmp_path, capsys, monkeypatch):
    from molinv.molecules.reading import SmilesBuilder

    table = qm9.table(qm9.sample(8, seed=98, max_heavy_atoms=5))
    lines = [f"{s} {n}" for s, n in zip(table["smiles"], table["name"])]
    lines.insert(3, "C1CC broken_ring")  # an unclosed ring: rejected, line 4
    smiles = tmp_path / "molecules.smi"
    smiles.write_text("\n".join(lines) + "\n")
    common = ["describe", str(smiles), "--descriptor", "atoms"]
    assert main(common + ["--out", str(tmp_path / "local.npz")]) == 0
    local_report = capsys.readouterr().out
    monkeypatch.setattr(SmilesBuilder, "__call__", fail_here)
    assert main(common + ["--cluster", client.scheduler.address, "--out", str(tmp_path / "dask.npz")]) == 0
    dask_report = capsys.readouterr().out

    rejected = [line for line in local_report.splitlines() if "rejected:" in line]
    assert any("broken_ring" in line and "line 4" in line for line in rejected)
    assert rejected == [line for line in dask_report.splitlines() if "rejected:" in line]
    with np.load(tmp_path / "local.npz") as local, np.load(tmp_path / "dask.npz") as dask:
        assert sorted(local.files) == sorted(dask.files)
        assert len(local["names"]) == 8 - sum("qm9_" in line for line in rejected)
        for name in local.files:
            assert np.array_equal(local[name], dask[name]), name
    assert list((tmp_path / "dask.npz.chunks" / "read").glob("part-*.npz"))  # built where the chunks ran
