"""Chunks of work, each written to its own file the moment it finishes.

:func:`run_chunks` applies a task ``task(chunk, shared) -> result`` to numbered
chunks and writes each result to ``<folder>/part-NNNNNN.<csv|npz>`` where the
task ran (the folder must be shared with the workers). A chunk whose file exists
is finished: a rerun skips it, so an interrupted run, or a lost worker, loses
only the chunks that were unfinished. Results are tables (pandas DataFrame,
written as CSV) or dicts of numpy arrays (written as ``.npz``, read back without
pickle). Files appear under their final name only when complete (written aside,
then renamed).

The task runs in this process (:class:`InProcess`), in local worker processes
(:class:`LocalProcesses`, joblib) or on a Dask cluster
(:class:`molinv.cluster.dask_cluster.DaskCluster`); the results are the same.
``shared`` is what every chunk needs (a fitted model): each executor sends it to
each worker once, not once per chunk.
"""

from __future__ import annotations

import hashlib
import json
import os
import socket
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Iterator

import numpy as np
import pandas as pd
from tqdm.auto import tqdm
from molinv.errors import MolinvError
from molinv.outputs import written_atomically

PART_PATTERN = "part-{number:06d}{suffix}"


class ChunkError(MolinvError, RuntimeError):
    """A chunk folder that cannot be used, or a task result that cannot be written."""


@dataclass(frozen=True)
class ChunkReport:
    """What one finished chunk cost: items in, wall and CPU seconds of the worker running it
    (task and file writing), and where it ran."""

    number: int
    items: int
    seconds: float
    worker: str
    cpu_seconds: float = float("nan")


def folder_beside(path) -> Path:
    """The chunk folder of an output file: ``<path>.chunks`` next to it."""
    path = Path(path)
    return path.with_name(path.name + ".chunks")


def file_fingerprint(path) -> str:
    """SHA-256 of a file's bytes (first 16 hex digits): chunks of one input are never reused for another."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()[:16]


def claim_folder(folder, settings: dict, record_name: str = "settings.json") -> Path:
    """Create ``folder`` for a run with ``settings`` (JSON-able), or reopen it for the same
    settings; a folder holding another run's chunks is refused (they would be reused)."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    record = folder / record_name
    text = json.dumps(settings, indent=2, sort_keys=True)
    if record.exists() and json.loads(record.read_text()) != json.loads(text):
        raise ChunkError(f"{folder} holds the chunks of another input, model or settings; choose another folder")
    with written_atomically(record) as temporary:
        temporary.write_text(text)
    return folder


def part_path(folder, number: int, suffix: str) -> Path:
    return Path(folder) / PART_PATTERN.format(number=number, suffix=suffix)


def finished_chunks(folder) -> set[int]:
    """Numbers of the chunks whose result file is complete."""
    folder = Path(folder)
    found = set()
    for path in list(folder.glob("part-*.csv")) + list(folder.glob("part-*.npz")):
        found.add(int(path.name[len("part-"):].split(".")[0]))
    return found


def write_part(folder, number: int, result) -> Path:
    """Write one chunk's result atomically; the name says it is finished."""
    if isinstance(result, pd.DataFrame):
        suffix = ".csv"
    elif isinstance(result, dict):
        suffix = ".npz"
    else:
        raise ChunkError(f"chunk {number}: a task must return a DataFrame or a dict of arrays, "
                         f"not {type(result).__name__}")
    target = part_path(folder, number, suffix)
    with written_atomically(target) as temporary:
        if suffix == ".csv":
            result.to_csv(temporary, index=False)
        else:
            with open(temporary, "wb") as handle:
                np.savez(handle, **result)
    return target


def iter_tables(folder, text_columns: Iterable[str] = ()) -> Iterator[pd.DataFrame]:
    """Each finished chunk table, in chunk order. ``text_columns`` are read as text: a CSV file
    does not keep types, and a name such as '007' would otherwise come back as the number 7."""
    text = {column: str for column in text_columns}
    for path in sorted(Path(folder).glob("part-*.csv")):
        yield pd.read_csv(path, keep_default_na=False, na_values=[""], dtype=text)


def read_tables(folder, text_columns: Iterable[str] = ()) -> pd.DataFrame:
    """All finished chunk tables, in chunk order, as one table (``text_columns`` as in
    :func:`iter_tables`)."""
    parts = list(iter_tables(folder, text_columns))
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()


def read_arrays(folder) -> Iterator[dict[str, np.ndarray]]:
    """Each finished chunk's arrays, in chunk order."""
    for path in sorted(Path(folder).glob("part-*.npz")):
        with np.load(path, allow_pickle=False) as data:
            yield {name: data[name] for name in data.files}


def compute_and_write(task, number: int, chunk, shared, folder: str) -> ChunkReport:
    """Run one chunk where the executor placed it, and write its file there."""
    started, cpu_started = time.perf_counter(), time.process_time()
    result = task(chunk, shared)
    write_part(folder, number, result)
    return ChunkReport(number, len(chunk), time.perf_counter() - started, f"{socket.gethostname()}:{os.getpid()}",
                       time.process_time() - cpu_started)


class InProcess:
    """Run chunks one after the other in this process."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self) -> None:
        pass

    def share(self, value):
        return value

    def map_unordered(self, function: Callable, calls: Iterable[tuple]) -> Iterator:
        for arguments in calls:
            yield function(*arguments)

    def check_folder(self, folder: Path) -> None:
        pass


class LocalProcesses(InProcess):
    """Run chunks in ``n_jobs`` local worker processes (joblib); ``n_jobs=-1``: one per core.

    joblib's default backend pickles the shared value with each task, but
    keeps its large numpy arrays in shared memory (memory-mapped) after the first.

    ``inner_threads`` caps the threads of OpenMP and BLAS inside each worker (joblib's
    loky backend sets them when it starts the worker); None leaves joblib's default.
    """

    def __init__(self, n_jobs: int = -1, inner_threads: int | None = None):
        self.n_jobs = n_jobs
        self.inner_threads = inner_threads

    def map_unordered(self, function: Callable, calls: Iterable[tuple]) -> Iterator:
        from joblib import Parallel, delayed

        options = {} if self.inner_threads is None else {"backend": "loky", "inner_max_num_threads": self.inner_threads}
        # pre_dispatch bounds the chunks built ahead of the workers, so memory stays flat.
        runner = Parallel(n_jobs=self.n_jobs, return_as="generator_unordered", pre_dispatch="2*n_jobs", **options)
        parent = os.getpid()
        yield from runner(delayed(run_beside_parent)(parent, function, *arguments) for arguments in calls)


def run_beside_parent(parent: int, function: Callable, *arguments):
    """``function(*arguments)`` in a local worker process that exits as soon as its parent
    ``parent`` is gone: joblib's workers otherwise outlive a killed run (SIGKILL gives the
    parent no chance to stop them) and compute on for nobody."""
    if parent != os.getpid() and not _parent_watch:
        _parent_watch.append(threading.Thread(target=_exit_without_parent, args=(parent,), daemon=True))
        _parent_watch[0].start()
    return function(*arguments)


_parent_watch: list[threading.Thread] = []


def _exit_without_parent(parent: int) -> None:
    while os.getppid() == parent:
        time.sleep(0.5)
    os._exit(1)


def run_chunks(task: Callable, chunks: Iterable[tuple[int, Callable[[], object]]], folder, *, shared=None,
               executor=None, total: int | None = None, progress: bool | None = None,
               description: str = "chunks", on_finished: Callable[[ChunkReport], None] | None = None
               ) -> list[ChunkReport]:
    """Run ``task(chunk, shared)`` on every unfinished chunk and write each result as it finishes.

    Parameters
    ----------
    task : callable
        A module-level function (or ``functools.partial`` of one) so that it can be
        sent to worker processes; returns a DataFrame or a dict of numpy arrays.
    chunks : iterable of (number, make_chunk)
        ``make_chunk()`` builds the chunk (a sized object, for example a
        :class:`~molinv.molecules.packed.MoleculeChunk`); it is called only for
        unfinished chunks, in this process, just before the chunk is sent.
    folder : path
        Where the chunk files go; on a cluster, a folder every worker sees at the same path.
    shared : object
        Passed to every call of ``task``; sent to each worker once.
    executor : InProcess, LocalProcesses or DaskCluster
        Default: this process.
    total : int, optional
        Items expected over all chunks, for the progress bar.
    on_finished : callable, optional
        Called here with each chunk's report as soon as its file is written (for
        example to move its rows into a file that grows as the run goes).

    Returns the reports of the chunks computed by this call (finished ones are skipped).
    """
    executor = executor or InProcess()
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    executor.check_folder(folder)
    done = finished_chunks(folder)
    handle = executor.share(shared)

    def calls():
        for number, make_chunk in chunks:
            if number not in done:
                yield task, number, make_chunk(), handle, str(folder)

    reports = []
    with tqdm(total=total, desc=description, unit="mol", disable=None if progress is None else not progress) as bar:
        for report in executor.map_unordered(compute_and_write, calls()):
            reports.append(report)
            if on_finished is not None:
                on_finished(report)
            bar.update(report.items)
    return reports


def chunked(items: Iterable, size: int) -> Iterator[tuple[int, list]]:
    """Consecutive groups of ``size`` items, numbered from 0."""
    group, number = [], 0
    for item in items:
        group.append(item)
        if len(group) == size:
            yield number, group
            group, number = [], number + 1
    if group:
        yield number, group
