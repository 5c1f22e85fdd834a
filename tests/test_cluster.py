"""Screening on a Dask cluster: same table as the local path, a lost worker loses nothing,
an interrupted run resumes without recomputing finished chunks.

Data: QM9 geometries (Ramakrishnan et al., Sci. Data 1, 140022, 2014) as candidates and
training set. The reference for every check is the local path (this process, no Dask).
"""

import hashlib
import os
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pandas as pd
import pytest

from molinv.cluster.chunks import finished_chunks
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening.screen import screen_file

pytest.importorskip("dask.distributed")

N_CANDIDATES, CHUNK = 3000, 60
N_CHUNKS = N_CANDIDATES // CHUNK
# What the command line passes, so that a screen started there can be resumed here.
CLI_READ_OPTIONS = {"file_format": None, "length": "Angstrom", "energy": "eV", "smiles_column": None, "name_column": None}


@pytest.fixture(scope="module")
def setting(qm9, tmp_path_factory):
    folder = tmp_path_factory.mktemp("cluster")
    positions = qm9.sample(200 + N_CANDIDATES, seed=41, elements=["H", "C", "N", "O"])
    train = qm9.molecules(positions[:200])
    # A cheap descriptor (Coulomb-matrix eigenvalues, Rupp et al. 2012) keeps the test short;
    # padded to QM9's largest molecule (29 atoms) so that no candidate fails for its size.
    model = EnergyModel(make_descriptor("coulomb", max_atoms=29), make_regressor("linear", per_atom=False))
    model.fit(train, [m.info["atomization_energy"] for m in train])
    model_path = model.save(folder / "model.npz", target="atomization_energy")
    candidates = folder / "candidates.xyz"
    with open(candidates, "w") as handle:
        for atoms in qm9.molecules(positions[200:]):
            rows = "".join(f"{s} {x!r} {y!r} {z!r}\n" for s, (x, y, z) in zip(atoms.get_chemical_symbols(), atoms.positions.tolist()))
            handle.write(f"{len(atoms)}\n{atoms.info['name']}\n{rows}")
    fingerprint = hashlib.sha256(model_path.read_bytes()).hexdigest()
    options = dict(model_fingerprint=fingerprint, target="atomization_energy", chunk_size=CHUNK,
                   read_options=CLI_READ_OPTIONS, progress=False)
    local = pd.read_csv(screen_file(model, candidates, folder / "local", **options).table_path)
    assert (local["status"] == "ok").mean() > 0.9  # the comparisons below are on real predictions
    return model, model_path, candidates, options, local


def dask_screen(setting, client, out):
    from molinv.cluster.dask_cluster import DaskCluster

    model, _, candidates, options, _ = setting
    return screen_file(model, candidates, out, executor=DaskCluster(client), **options)


def test_cluster_screen_equals_local(setting, client, tmp_path):
    summary = dask_screen(setting, client, tmp_path / "dask")
    table = pd.read_csv(summary.table_path)
    assert len(table) == N_CANDIDATES and table["record"].is_unique
    pd.testing.assert_frame_equal(table, setting[4], check_exact=True)
    assert sorted(r.number for r in summary.computed) == list(range(N_CHUNKS))
    assert len({r.worker for r in summary.computed}) == 2  # both workers took chunks


def test_killed_worker_loses_no_row(setting, client, tmp_path):
    out = tmp_path / "killed"
    victim = next(iter(client.run(os.getpid).values()))
    killed_at, screen_over = [], threading.Event()

    def kill_after_four_chunks():
        while not screen_over.is_set():
            done = len(finished_chunks(out / "chunks")) if (out / "chunks").exists() else 0
            if done >= 4:
                os.kill(victim, signal.SIGKILL)
                killed_at.append(done)
                return
            time.sleep(0.005)

    killer = threading.Thread(target=kill_after_four_chunks)
    killer.start()
    try:
        summary = dask_screen(setting, client, out)
    finally:
        screen_over.set()
        killer.join()
    assert killed_at and killed_at[0] < N_CHUNKS  # the worker died mid-run
    table = pd.read_csv(summary.table_path)
    assert len(table) == N_CANDIDATES and table["record"].is_unique
    pd.testing.assert_frame_equal(table, setting[4], check_exact=True)


def test_interrupted_run_resumes_without_recomputing(setting, client, tmp_path):
    _, model_path, candidates, _, _ = setting
    out = tmp_path / "interrupted"
    command = [sys.executable, "-m", "molinv.cli", "screen", str(model_path), str(candidates), "--chunk-size",
               str(CHUNK), "--cluster", client.scheduler.address, "--out", str(out)]
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.time() + 600  # the subprocess imports molinv and Dask first: slow on a busy machine
    while (not (out / "chunks").exists() or len(finished_chunks(out / "chunks")) < 3) and time.time() < deadline:
        time.sleep(0.005)
    process.kill()
    process.wait()
    # A chunk already running on a worker finishes and is written; wait until none is.
    before, stable_since = finished_chunks(out / "chunks"), time.time()
    while time.time() - stable_since < 3:
        time.sleep(0.2)
        now = finished_chunks(out / "chunks")
        if now != before:
            before, stable_since = now, time.time()
    assert 3 <= len(before) < N_CHUNKS
    summary = dask_screen(setting, client, out)
    assert {r.number for r in summary.computed} == set(range(N_CHUNKS)) - before
    table = pd.read_csv(summary.table_path)
    assert len(table) == N_CANDIDATES and table["record"].is_unique
    pd.testing.assert_frame_equal(table, setting[4], check_exact=True)


def test_local_path_does_not_import_dask():
    code = ("import sys, molinv.cli, molinv.cluster, molinv.screening.screen\n"
            "from molinv.cluster import executor_for\n"
            "executor_for(None, 2)\n"
            "sys.exit(int(any(m.split('.')[0] in ('dask', 'distributed') for m in sys.modules)))")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0


def test_packed_chunk_rebuilds_the_records(tmp_path, qm9):
    from molinv.molecules.packed import BUILT, REJECTED, TO_EMBED, pack
    from molinv.molecules.reading import iter_molecules, iter_records

    smiles = tmp_path / "mixed.csv"
    smiles.write_text("name,smiles,energy\nethanol,CCO,1.5\nbroken,C1CC,2\nacetone,CC(C)=O,x\n")
    xyz = tmp_path / "mixed.xyz"
    xyz.write_text("3\nwater\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n2\nclash\nH 0 0 0\nH 0 0 0.1\n")
    for path, kinds in ((smiles, [TO_EMBED] * 3), (xyz, [BUILT, REJECTED])):
        chunk = pack(list(iter_records(path, energy="kcal/mol")))
        assert list(chunk.kinds) == kinds
        for name in ("names", "smiles", "texts", "positions", "numbers", "offsets"):
            assert not getattr(chunk, name).dtype.hasobject
        for packed, direct in zip(chunk.unpack(), iter_molecules(path, energy="kcal/mol")):
            assert type(packed) is type(direct)
            if hasattr(direct, "reason"):
                assert packed == direct
            else:
                assert np.array_equal(packed.numbers, direct.numbers)
                assert np.array_equal(packed.positions, direct.positions)
                for key in ("name", "record", "source", "geometry_source", "energy"):
                    assert packed.info.get(key) == direct.info.get(key)


def test_describe_on_the_cluster_equals_transform(client, qm9, tmp_path):
    from molinv.cluster.dask_cluster import DaskCluster
    from molinv.descriptors.store import describe_in_chunks

    molecules = qm9.molecules(qm9.sample(160, seed=42))
    descriptor = make_descriptor("atoms").fit(molecules)
    expected = descriptor.transform(molecules)
    found = describe_in_chunks(descriptor, molecules, tmp_path / "parts", chunk_size=40, executor=DaskCluster(client))
    assert len(list((tmp_path / "parts").glob("part-*.npz"))) == 4
    for name in ("values", "numbers", "offsets"):
        assert np.array_equal(getattr(found, name), getattr(expected, name))


def test_cluster_option_errors_are_one_line(setting, tmp_path, capsys):
    from molinv.cli import main

    _, model_path, candidates, _, _ = setting
    arguments = ["screen", str(model_path), str(candidates), "--out", str(tmp_path / "x"), "--cluster"]
    assert main(arguments + ["jobqueue:nosuch"]) == 2
    assert "KIND one of slurm" in capsys.readouterr().err
