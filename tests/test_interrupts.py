"""Ctrl-C stops a run: RDKit's embedding takes SIGINT for itself (it cancels that one
embedding and carries on), so molinv must pass the interruption on."""

import os
import signal
import subprocess
import sys
import threading
import time

import pytest


@pytest.fixture(scope="module")
def smiles_file(qm9, tmp_path_factory):
    positions = qm9.sample(400, seed=3)
    path = tmp_path_factory.mktemp("smiles") / "many.smi"
    path.write_text("".join(f"{s} m{i}\n" for i, s in zip(qm9.arrays["index"][positions], qm9.arrays["smiles"][positions])))
    return path


@pytest.mark.parametrize("delay", [0.0, 0.4, 0.8])
def test_ctrl_c_while_embedding_stops_the_run(tmp_path, smiles_file, delay):
    process = subprocess.Popen([sys.executable, "-m", "molinv.cli", "check", str(smiles_file),
                                "--rejected-out", str(tmp_path / "rejected.csv")],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    err = []
    reader = threading.Thread(target=lambda: err.extend(iter(lambda: process.stderr.read(1), "")), daemon=True)
    reader.start()
    deadline = time.time() + 60
    while "many.smi:" not in "".join(err) and time.time() < deadline:  # the progress bar: embedding has begun
        time.sleep(0.05)
    time.sleep(delay)
    os.kill(process.pid, signal.SIGINT)
    sent = time.perf_counter()
    out = process.stdout.read()
    process.wait(timeout=60)
    reader.join(timeout=5)
    # Most of the time goes to RDKit, which used to take the signal for itself and carry on.
    assert process.returncode == 130, (out[-300:], "".join(err)[-300:])
    assert "interrupted" in "".join(err)
    assert time.perf_counter() - sent < 2.0
    assert not (tmp_path / "rejected.csv").exists()


def test_killed_screen_leaves_no_worker_behind(tmp_path, qm9):
    psutil = pytest.importorskip("psutil")
    from molinv.cli import main

    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(model_path)]) == 0
    positions = qm9.sample(600, seed=33)
    candidates = tmp_path / "candidates.smi"
    candidates.write_text("".join(f"{s} q{i}\n" for i, s in zip(qm9.arrays["index"][positions],
                                                                qm9.arrays["smiles"][positions])))
    process = subprocess.Popen([sys.executable, "-m", "molinv.cli", "screen", str(model_path), str(candidates),
                                "--out", str(tmp_path / "screen"), "--jobs", "2", "--chunk-size", "20"],
                               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.time() + 120
    while len(list((tmp_path / "screen" / "chunks").glob("part-*.csv"))) < 2 and time.time() < deadline:
        time.sleep(0.05)
    workers = psutil.Process(process.pid).children(recursive=True)
    assert workers
    os.kill(process.pid, signal.SIGKILL)
    process.wait()
    gone, alive = psutil.wait_procs(workers, timeout=10)
    for worker in alive:  # leave nothing behind, even when the check fails
        worker.kill()
    assert not alive, [w.pid for w in alive]
