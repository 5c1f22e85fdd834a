"""Ctrl-C stops a run: RDKit's embedding takes SIGINT for itself (it cancels that one
embedding and carries on), so molinv must pass the interruption on."""

import os
import re
import signal
import subprocess
import sys
import threading
import time

import pytest

#: Seconds from the signal to the exit. The goal is 2 s (issue 19), met at load up to about 9 on
#: 2 cores; shutting down worker processes took up to 2.7 s at load 10-11, so the tests allow
#: twice the goal to stay reliable on a shared machine (common practice, no source).
STOP_WITHIN = 4.0


@pytest.fixture(scope="module")
def smiles_file(qm9, tmp_path_factory):
    positions = qm9.sample(2000, seed=3)  # about 25 s of embedding: a signal lands mid-run
    path = tmp_path_factory.mktemp("smiles") / "many.smi"
    path.write_text("".join(f"{s} m{i}\n" for i, s in zip(qm9.arrays["index"][positions], qm9.arrays["smiles"][positions])))
    return path


@pytest.mark.parametrize("delay", [0.0, 0.4, 0.8])
def test_ctrl_c_while_embedding_stops_the_run(tmp_path, smiles_file, delay):
    # The default BLAS thread pool: its threads must hold the signal (see the next test).
    # Measured: 20 single Ctrl-C at random moments of the embedding, load 9.7 on 2 cores:
    # 20 of 20 stopped, the slowest 0.87 s after the signal.
    process = subprocess.Popen([sys.executable, "-m", "molinv.cli", "check", str(smiles_file),
                                "--rejected-out", str(tmp_path / "rejected.csv")],
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    err = []
    reader = threading.Thread(target=lambda: err.extend(iter(lambda: os.read(process.stderr.fileno(), 65536), b"")),
                              daemon=True)
    reader.start()
    deadline = time.time() + 120
    while b"many.smi:" not in b"".join(err) and time.time() < deadline:  # the progress bar: embedding has begun
        time.sleep(0.05)
    time.sleep(delay)
    assert process.poll() is None, "the run ended before the signal: make the input longer"
    os.kill(process.pid, signal.SIGINT)
    sent = time.perf_counter()
    process.wait(timeout=120)
    stopped = time.perf_counter() - sent
    reader.join(timeout=5)
    text = b"".join(err).decode(errors="replace")
    # Most of the time goes to RDKit, which used to take the signal for itself and carry on.
    assert process.returncode == 130, (process.returncode, text[-1500:])
    assert "interrupted" in text
    assert stopped < STOP_WITHIN, stopped
    assert not (tmp_path / "rejected.csv").exists()


def screen_inputs(tmp_path, qm9):
    """A quickly fitted model file and 600 QM9 SMILES to screen with it."""
    from molinv.cli import main

    model_path = tmp_path / "model.npz"
    assert main(["fit", "qm9:150:3", "--descriptor", "counts", "--model", "baseline", "--out", str(model_path)]) == 0
    positions = qm9.sample(600, seed=33)
    candidates = tmp_path / "candidates.smi"
    candidates.write_text("".join(f"{s} q{i}\n" for i, s in zip(qm9.arrays["index"][positions],
                                                                qm9.arrays["smiles"][positions])))
    return model_path, candidates


def test_killed_screen_leaves_no_worker_behind(tmp_path, qm9):
    psutil = pytest.importorskip("psutil")
    model_path, candidates = screen_inputs(tmp_path, qm9)
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


def test_thread_pools_started_by_the_command_hold_ctrl_c():
    # Held by every thread but the main one, a Ctrl-C waits until RDKit has returned and then
    # reaches Python's handler; a pool thread that takes it runs RDKit's handler instead, which
    # loses it when the embedding has passed its last check (6 of 40 single Ctrl-C were lost).
    probe = ("import os, threading, molinv.cli\n"
             "from molinv.molecules.embedding import _other_threads_hold_sigint\n"
             "print(len(os.listdir('/proc/self/task')), _other_threads_hold_sigint())\n")
    env = {key: value for key, value in os.environ.items() if not key.endswith("_NUM_THREADS")}
    env["OPENBLAS_NUM_THREADS"] = "4"  # a pool even on a small machine
    threads, held = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=env,
                                   check=True).stdout.split()
    assert int(threads) > 1, "no thread pool was started: the check checks nothing"
    assert held == "True"


def _interrupt_when(command, ready, timeout=180):
    """Run the command, send one SIGINT once ``ready(pid, stderr so far)`` holds, and return (exit status, seconds
    from the signal to the exit, the processes it had started)."""
    psutil = pytest.importorskip("psutil")
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    err = []
    reader = threading.Thread(target=lambda: err.extend(iter(lambda: os.read(process.stderr.fileno(), 65536), b"")),
                              daemon=True)
    reader.start()
    deadline = time.time() + timeout
    while not ready(process.pid, b"".join(err)) and process.poll() is None and time.time() < deadline:
        time.sleep(0.05)
    assert process.poll() is None, ("the run ended before the signal", b"".join(err)[-1500:])
    workers = psutil.Process(process.pid).children(recursive=True)
    os.kill(process.pid, signal.SIGINT)
    sent = time.perf_counter()
    try:
        process.wait(timeout=60)
    finally:
        stopped = time.perf_counter() - sent
        if process.poll() is None:
            process.kill()
    _, alive = psutil.wait_procs(workers, timeout=5)
    for worker in alive:  # leave nothing behind, even when the check fails
        worker.kill()
    reader.join(timeout=5)
    return process.returncode, stopped, workers, alive, b"".join(err).decode(errors="replace")


def test_ctrl_c_stops_fit_with_workers(tmp_path):
    psutil = pytest.importorskip("psutil")
    command = [sys.executable, "-m", "molinv.cli", "fit", "qm9:2000:5", "--jobs", "2", "--out", str(tmp_path / "m.npz")]

    def describing(pid, _):  # the worker processes have started
        return len(psutil.Process(pid).children(recursive=True)) >= 2

    status, stopped, workers, alive, text = _interrupt_when(command, describing)
    assert status == 130, (status, text[-1500:])
    assert workers and not alive, [w.pid for w in alive]
    assert stopped < STOP_WITHIN, stopped
    assert not (tmp_path / "m.npz").exists()


def test_ctrl_c_stops_screen_and_keeps_finished_chunks(tmp_path, qm9):
    model_path, candidates = screen_inputs(tmp_path, qm9)
    chunks = tmp_path / "screen" / "chunks"
    command = [sys.executable, "-m", "molinv.cli", "screen", str(model_path), str(candidates),
               "--out", str(tmp_path / "screen"), "--jobs", "2", "--chunk-size", "20"]
    finished = {}

    def two_chunks_done(pid, _):
        finished["before"] = {path.name: path.read_bytes() for path in chunks.glob("part-*.csv")}
        return len(finished["before"]) >= 2

    status, stopped, workers, alive, text = _interrupt_when(command, two_chunks_done)
    assert status == 130, (status, text[-1500:])
    assert workers and not alive, [w.pid for w in alive]
    assert stopped < STOP_WITHIN, stopped
    kept = {path.name: path.read_bytes() for path in chunks.glob("part-*.csv")}
    assert finished["before"].items() <= kept.items()  # every chunk finished before the signal is kept, unchanged


def test_ctrl_c_stops_curve_while_it_embeds_smiles(tmp_path):
    # curve embeds QM9's SMILES itself (molinv.molecules.route), not through the file reader.
    command = [sys.executable, "-m", "molinv.cli", "curve", "qm9:2000:4", "--out", str(tmp_path / "curve")]

    def embedding(pid, err):  # some molecules embedded already
        return re.search(rb"embedding SMILES: +[1-9]", err) is not None

    status, stopped, _, alive, text = _interrupt_when(command, embedding)
    assert "embedding SMILES" in text, text[-1500:]
    assert status == 130, (status, text[-1500:])
    assert not alive
    assert stopped < STOP_WITHIN, stopped
