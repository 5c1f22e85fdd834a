"""Labelling runs: many molecules, parallel single-thread workers, one row per molecule written at once.

The unit of work is :func:`label_chunk` (a list of ``ase.Atoms`` in, one row per
molecule out). It limits every numerical library to one thread itself, so the same
chunks can run in joblib workers here or on a cluster's workers.

:func:`label_molecules` appends each finished chunk's rows to a CSV labels file
and skips the names already in it, so a restarted run computes nothing twice.
Columns (our layout): name, formula, method, status ('ok' or 'failed'),
energy_Hartree, energy_eV, atomization_energy_eV, seconds, reason.
"""

from __future__ import annotations

import csv
import io
import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from threadpoolctl import threadpool_limits
from tqdm.auto import tqdm

from molinv.molecules.units import ENERGY_UNITS

from .methods import LabelError, LabelFailure, LabelMethod, atomization_energy_ev, total_energy_hartree

COLUMNS = ("name", "formula", "method", "status", "energy_Hartree", "energy_eV", "atomization_energy_eV",
           "seconds", "reason")
NUMBER_COLUMNS = ("energy_Hartree", "energy_eV", "atomization_energy_eV", "seconds")
#: Thread-count variables of OpenMP and the BLAS libraries, set to 1 in worker processes:
#: two threads per process on 2 cores made PySCF and tblite 2-20x slower (as measured when issue 7 was filed).
THREAD_VARIABLES = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS", "BLIS_NUM_THREADS")


def molecule_names(molecules: Sequence[Atoms]) -> list[str]:
    """``info['name']`` of each molecule, else 'molecule_<position>'; repeated names are refused
    because a restarted run recognises finished molecules by name."""
    names = [str(a.info.get("name", f"molecule_{i}")) for i, a in enumerate(molecules)]
    seen: dict[str, int] = {}
    for position, name in enumerate(names):
        if name in seen:
            raise LabelError(f"name {name!r} is used by the molecules at positions {seen[name]} and {position}; "
                             "names must be unique to resume a labelling run")
        seen[name] = position
    return names


def label_one(atoms: Atoms, name: str, method: LabelMethod) -> dict:
    """One row: the energies of ``atoms``, or status 'failed' with the reason."""
    row = {"name": name, "formula": atoms.get_chemical_formula(), "method": method.name, "status": "ok",
           "energy_Hartree": np.nan, "energy_eV": np.nan, "atomization_energy_eV": np.nan, "reason": ""}
    started = time.perf_counter()
    try:
        total = total_energy_hartree(atoms, method)
        row["energy_Hartree"] = total
        row["energy_eV"] = total * ENERGY_UNITS["Hartree"]
        row["atomization_energy_eV"] = atomization_energy_ev(atoms, total, method)
    except LabelFailure as failure:
        # A total energy without its atomization energy is still kept, with the reason.
        row["status"] = "failed" if np.isnan(row["energy_Hartree"]) else "ok"
        row["reason"] = str(failure)
    row["seconds"] = time.perf_counter() - started
    return row


def label_chunk(molecules: Sequence[Atoms], method: LabelMethod, names: Sequence[str] | None = None) -> list[dict]:
    """Rows for a chunk of molecules, computed one after another on one thread.

    Any picklable caller (joblib, a Dask cluster) can run chunks independently;
    a failing molecule gives a 'failed' row and the chunk goes on.
    """
    names = molecule_names(molecules) if names is None else list(names)
    for variable in THREAD_VARIABLES:
        os.environ[variable] = "1"
    with threadpool_limits(limits=1):
        if method.kind != "xtb":
            from pyscf import lib

            lib.num_threads(1)
        return [label_one(atoms, name, method) for atoms, name in zip(molecules, names)]


def _finished_rows(path: Path, method: LabelMethod | None) -> pd.DataFrame:
    """Rows already in the labels file; a last line cut short by an interruption is dropped."""
    if not path.exists() or path.stat().st_size == 0:
        return pd.DataFrame(columns=COLUMNS)
    text = path.read_text()
    if not text.endswith("\n"):
        text = text[: text.rfind("\n") + 1]
        path.write_text(text)
    try:
        # Only the number columns read 'nan' as missing: a molecule may well be called 'NA'.
        missing = {column: ["nan", ""] for column in NUMBER_COLUMNS}
        table = pd.read_csv(io.StringIO(text), dtype={"name": str, "reason": str}, keep_default_na=False,
                            na_values=missing)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as error:
        raise LabelError(f"{path}: not a molinv labels file ({error})") from None
    if tuple(table.columns) != COLUMNS:
        raise LabelError(f"{path}: columns {list(table.columns)} are not those of a molinv labels file")
    methods = set(table["method"])
    if method is not None and methods - {method.name}:
        raise LabelError(f"{path} holds labels of {', '.join(sorted(methods))}, not {method.name}; "
                         "choose another file")
    return table


@dataclass
class LabelSummary:
    path: Path
    already_done: int
    computed: int
    failed: int

    def text(self) -> str:
        return (f"{self.computed} molecules computed ({self.failed} failed), {self.already_done} already in "
                f"{self.path}")


def label_molecules(molecules: Sequence[Atoms], method: LabelMethod, path, *, n_jobs: int = 1,
                    chunk_size: int | None = None, retry_failed: bool = False, progress: bool | None = None
                    ) -> LabelSummary:
    """Compute every molecule not yet in the labels file ``path`` and append its row as its chunk finishes.

    ``n_jobs`` processes run with one thread each. ``chunk_size`` defaults to 1 for
    PySCF (each result written the moment it exists) and 16 for GFN2-xTB (about
    10 ms each, where per-task overhead would dominate). ``retry_failed`` recomputes
    the molecules whose earlier row failed (their old rows stay, marked by time order).
    """
    from joblib import Parallel, delayed

    if n_jobs < 1:
        raise LabelError("n_jobs must be at least 1")
    path = Path(path)
    molecules = list(molecules)
    names = molecule_names(molecules)
    finished = _finished_rows(path, method)
    done_rows = finished[finished["status"] == "ok"] if retry_failed else finished
    done = set(done_rows["name"])
    todo = [i for i, name in enumerate(names) if name not in done]
    size = chunk_size or (16 if method.kind == "xtb" else 1)
    chunks = [todo[start:start + size] for start in range(0, len(todo), size)]
    path.parent.mkdir(parents=True, exist_ok=True)
    new_file = not path.exists() or path.stat().st_size == 0
    computed = failed = 0
    with open(path, "a", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=COLUMNS)
        if new_file:
            writer.writeheader()
            handle.flush()
        tasks = (delayed(label_chunk)([molecules[i] for i in chunk], method, [names[i] for i in chunk])
                 for chunk in chunks)
        options = {"inner_max_num_threads": 1} if n_jobs > 1 else {}
        results = Parallel(n_jobs=n_jobs, backend="loky", return_as="generator_unordered", **options)(tasks)
        with tqdm(total=len(todo), desc=f"labels {method.name}", unit="mol",
                  disable=None if progress is None else not progress) as bar:
            for rows in results:
                for row in rows:
                    writer.writerow(row)
                    failed += row["status"] == "failed"
                handle.flush()
                computed += len(rows)
                bar.update(len(rows))
    return LabelSummary(path, len(names) - len(todo), computed, failed)


def read_labels(path, method: LabelMethod | None = None) -> pd.DataFrame:
    """A labels file as a table, the latest row per name (a retried molecule's new row wins)."""
    path = Path(path)
    if not path.exists():
        raise LabelError(f"{path}: no labels file")
    table = _finished_rows(path, method)
    return table.drop_duplicates("name", keep="last").reset_index(drop=True)
