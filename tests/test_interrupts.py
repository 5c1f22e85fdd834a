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
