"""Labelling runs: many molecules, parallel single-thread workers, one row per molecule written at once.

The unit of work is :func:`label_chunk` (a list of ``ase.Atoms`` in, one row per
molecule out). It limits every numerical library to one thread itself, so the same
chunks can run in joblib workers here or on a cluster's workers.

:func:`label_molecules` runs the chunks through :func:`molinv.cluster.chunks.run_chunks`
(this process, local processes or a Dask cluster), appends each finished chunk's rows
to a CSV labels file and skips the names already in it, so a restarted run computes
nothing twice.
Columns (our layout): name, formula, charge, multiplicity (the state computed),
geometry_source (where the coordinates came from: the input file, or RDKit's embedding of a
SMILES, on which the energy is a single point), method, status ('ok' or 'failed'),
energy_Hartree, energy_eV, atomization_energy_eV, seconds, reason. Files written before
charge, multiplicity and geometry_source were columns are given them on reading (charge 0
and, where computed, multiplicity 1: all that could be computed then; the geometry source
unknown) and rewritten with them before new rows are added.

With ``geometries``, the molecules whose row is 'ok' are also appended, as their chunk
finishes, to an extended-XYZ file with their coordinates (Angstrom), name, charge,
multiplicity, method, geometry_source, ``energy`` (total, eV) and ``atomization_energy``
(eV; none for ions): the file ``molinv fit`` reads as it is.
"""

from __future__ import annotations

import csv
import io
import os
import shutil
import time
from contextlib import contextmanager, suppress
from dataclasses import dataclass, replace
from functools import partial
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from ase.io import write as ase_write
from threadpoolctl import threadpool_limits

from molinv.cluster.chunks import (InProcess, LocalProcesses, chunked, folder_beside, part_path, read_arrays,
                                   run_chunks)
from molinv.molecules.packed import MoleculeChunk, pack
from molinv.molecules.units import ENERGY_UNITS
from molinv.outputs import written_atomically

from .methods import (LabelError, LabelFailure, LabelMethod, atomization_energy_ev, computed_state,
                      total_energy_hartree, xtb_optimised)

COLUMNS = ("name", "formula", "charge", "multiplicity", "geometry_source", "method", "status", "energy_Hartree",
           "energy_eV", "atomization_energy_eV", "seconds", "reason")
#: The columns of files written before the charge, multiplicity and geometry source were recorded.
COLUMNS_WITHOUT_STATE = tuple(c for c in COLUMNS if c not in ("charge", "multiplicity", "geometry_source"))
NUMBER_COLUMNS = ("charge", "multiplicity", "energy_Hartree", "energy_eV", "atomization_energy_eV", "seconds")
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


#: ``info`` key of a molecule whose geometry optimisation failed: the reason, which its row then gives.
OPTIMISATION_FAILURE = "optimisation_failure"


def label_one(atoms: Atoms, name: str, method: LabelMethod) -> dict:
    """One row: the energies of ``atoms``, or status 'failed' with the reason."""
    row = {"name": name, "formula": atoms.get_chemical_formula(), "charge": np.nan, "multiplicity": np.nan,
           "geometry_source": atoms.info.get("geometry_source", "file"), "method": method.name, "status": "ok", "energy_Hartree": np.nan, "energy_eV": np.nan,
           "atomization_energy_eV": np.nan, "reason": ""}
    started = time.perf_counter()
    try:
        if atoms.info.get(OPTIMISATION_FAILURE):
            raise LabelFailure(atoms.info[OPTIMISATION_FAILURE])
        row["charge"], row["multiplicity"] = computed_state(atoms)
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
    with one_thread(method):
        return [label_one(atoms, name, method) for atoms, name in zip(molecules, names)]


@contextmanager
def one_thread(method: LabelMethod):
    """Every numerical library on one thread inside the block."""
    for variable in THREAD_VARIABLES:
        os.environ[variable] = "1"
    with threadpool_limits(limits=1):
        if method.kind != "xtb":
            from pyscf import lib

            lib.num_threads(1)
        yield


def optimise_packed(chunk: MoleculeChunk, method: LabelMethod) -> dict[str, np.ndarray]:
    """Each molecule of a packed chunk at its GFN2-xTB minimum, packed again (a
    :func:`molinv.cluster.chunks.run_chunks` task); one that cannot be optimised keeps its
    geometry and the reason, which its label row then gives."""
    moved = []
    with one_thread(method):
        for atoms in chunk.unpack():
            try:
                moved.append(xtb_optimised(atoms))
            except LabelFailure as failure:
                atoms.info[OPTIMISATION_FAILURE] = str(failure)
                moved.append(atoms)
    return replace(pack(moved), names=chunk.names, named=chunk.named).arrays()


def _optimised(molecules: list[Atoms], names: list[str], folder: Path, method: LabelMethod, size: int, executor,
               progress) -> list[Atoms]:
    """The molecules at their GFN2-xTB minima, optimised chunk by chunk by ``executor`` in ``folder``."""
    chunks = ((number, partial(_named_chunk, [molecules[i] for i in group], [names[i] for i in group]))
              for number, group in chunked(range(len(molecules)), size))
    run_chunks(optimise_packed, chunks, folder, shared=method, executor=executor, total=len(molecules),
               progress=progress, description="GFN2-xTB optimisation")
    moved = [atoms for arrays in read_arrays(folder) for atoms in MoleculeChunk.from_arrays(arrays).unpack()]
    shutil.rmtree(folder)
    return moved


def _finished_rows(path: Path, method: LabelMethod | None) -> pd.DataFrame:
    """Rows already in the labels file; a last line cut short by an interruption is dropped."""
    if not path.exists() or path.stat().st_size == 0:
        return pd.DataFrame(columns=COLUMNS)
    text = path.read_text()
    if not text.endswith("\n"):
        text = text[: text.rfind("\n") + 1]
        with written_atomically(path) as temporary:
            temporary.write_text(text)
    try:
        # Only the number columns read 'nan' as missing: a molecule may well be called 'NA'.
        missing = {column: ["nan", ""] for column in NUMBER_COLUMNS}
        table = pd.read_csv(io.StringIO(text), dtype={"name": str, "reason": str}, keep_default_na=False,
                            na_values=missing)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as error:
        raise LabelError(f"{path}: not a molinv labels file ({error})") from None
    if tuple(table.columns) == COLUMNS_WITHOUT_STATE:
        table = table.assign(charge=0, multiplicity=np.where(table["status"] == "ok", 1.0, np.nan),
                             geometry_source="")[list(COLUMNS)]
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
                    chunk_size: int | None = None, retry_failed: bool = False, progress: bool | None = None,
                    executor=None, geometries=None) -> LabelSummary:
    """Compute every molecule not yet in the labels file ``path`` and append its row as its chunk finishes.

    ``n_jobs`` processes run with one thread each; ``executor`` (for example a
    :class:`~molinv.cluster.dask_cluster.DaskCluster`) runs the chunks elsewhere instead.
    Either way each chunk's rows are first written to ``<path>.chunks/run-<started>/part-NNNNNN.csv``
    where the chunk ran, then moved into ``path``; rows of chunks that finished after an
    earlier run stopped are moved in at the start, not recomputed. ``chunk_size``
    defaults to 1 for PySCF (each result written the moment it exists) and 16 for
    GFN2-xTB (about 10 ms each, where per-task overhead would dominate).
    ``retry_failed`` recomputes the molecules whose earlier row failed (their old rows
    stay, marked by time order). ``geometries``: the extended-XYZ file of the module
    docstring (rows of leftover chunks whose names are not in ``molecules`` have no
    coordinates to write there; they stay in ``path``).
    """
    if n_jobs < 1:
        raise LabelError("n_jobs must be at least 1")
    path = Path(path)
    molecules = list(molecules)
    names = molecule_names(molecules)
    finished = _finished_rows(path, method)
    if _header(path) == ",".join(COLUMNS_WITHOUT_STATE):
        finished.to_csv(path, index=False)  # given the state columns, so that new rows line up
    path.parent.mkdir(parents=True, exist_ok=True)
    if not path.exists() or path.stat().st_size == 0:
        _append(path, [], header=True)
    folder = folder_beside(path)
    by_name = dict(zip(names, molecules))
    for part in sorted(folder.glob("run-*/part-*.csv")):
        _append_geometries(geometries, _move_rows(part, path, method, _done_names(finished, retry_failed)), by_name)
    done = _done_names(_finished_rows(path, method), retry_failed)
    # Each run numbers its chunks afresh, so each gets a folder of its own: a chunk of a stopped
    # run that a worker finishes late must not take the place of this run's chunk of that number.
    run_folder = folder / f"run-{time.strftime('%Y%m%d-%H%M%S')}-{os.urandom(3).hex()}"
    todo = [i for i, name in enumerate(names) if name not in done]
    size = chunk_size or (16 if method.kind == "xtb" else 1)
    if executor is None:
        executor = LocalProcesses(n_jobs, inner_threads=1) if n_jobs > 1 else InProcess()
    if method.optimize and todo:
        moved = _optimised([molecules[i] for i in todo], [names[i] for i in todo], run_folder / "optimised", method,
                           chunk_size or 4, executor, progress)
        for i, atoms in zip(todo, moved):
            molecules[i] = by_name[names[i]] = atoms
    chunks = ((number, partial(_named_chunk, [molecules[i] for i in group], [names[i] for i in group]))
              for number, group in chunked(todo, size))
    failed = 0

    def move(report):
        nonlocal failed
        rows = _move_rows(part_path(run_folder, report.number, ".csv"), path, method, done)
        failed += int((rows["status"] == "failed").sum())
        _append_geometries(geometries, rows, by_name)

    reports = run_chunks(label_packed, chunks, run_folder, shared=method, executor=executor, total=len(todo),
                         progress=progress, description=f"labels {method.name}", on_finished=move)
    for empty in [*folder.glob("run-*"), folder]:  # their rows are in the labels file now
        with suppress(OSError):
            empty.rmdir()
    return LabelSummary(path, len(names) - len(todo), sum(report.items for report in reports), failed)


def _append_geometries(path, rows: pd.DataFrame, by_name: dict) -> None:
    """Append the 'ok' rows' molecules, with their energies and state, to the extended-XYZ file ``path``."""
    if path is None:
        return
    frames = []
    for row in rows[(rows["status"] == "ok") & rows["name"].isin(list(by_name))].itertuples(index=False):
        atoms = by_name[row.name]
        frame = Atoms(numbers=atoms.numbers, positions=atoms.positions)
        frame.info.update(name=row.name, charge=int(row.charge), multiplicity=int(row.multiplicity),
                          geometry_source=row.geometry_source, method=row.method, energy=float(row.energy_eV))
        if np.isfinite(row.atomization_energy_eV):
            frame.info["atomization_energy"] = float(row.atomization_energy_eV)
        if atoms.info.get("smiles"):
            frame.info["smiles"] = str(atoms.info["smiles"])
        frames.append(frame)
    if frames:
        ase_write(path, frames, format="extxyz", append=True)


def label_packed(chunk: MoleculeChunk, method: LabelMethod) -> pd.DataFrame:
    """Rows of one packed chunk of named molecules: a :func:`molinv.cluster.chunks.run_chunks` task."""
    return pd.DataFrame(label_chunk(chunk.unpack(), method), columns=COLUMNS)


def _named_chunk(molecules: list[Atoms], names: list[str]) -> MoleculeChunk:
    # Names travel explicitly: an unnamed molecule's name comes from its place in the whole input.
    return replace(pack(molecules), names=np.array(names, dtype=str), named=np.ones(len(names), dtype=bool))


def _header(path: Path) -> str:
    if not path.exists():
        return ""
    with open(path) as handle:
        return handle.readline().rstrip("\r\n")


def _done_names(finished: pd.DataFrame, retry_failed: bool) -> set[str]:
    return set((finished[finished["status"] == "ok"] if retry_failed else finished)["name"])


def _move_rows(part: Path, path: Path, method: LabelMethod, done: set[str]) -> pd.DataFrame:
    """Append a chunk file's rows to the labels file, except names in ``done``, then delete the chunk file.

    A run stopped between the two steps leaves rows that are in both; the next run skips them
    (with ``retry_failed``, a failed row may then appear twice; the later one counts).
    """
    rows = _finished_rows(part, method)
    rows = rows[~rows["name"].isin(done)]
    _append(path, rows.to_dict("records"))
    part.unlink()
    return rows


def _append(path: Path, rows: list[dict], header: bool = False) -> None:
    with open(path, "a", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=COLUMNS)
        if header:
            writer.writeheader()
        writer.writerows(rows)


def read_labels(path, method: LabelMethod | None = None) -> pd.DataFrame:
    """A labels file as a table, the latest row per name (a retried molecule's new row wins)."""
    path = Path(path)
    if not path.exists():
        raise LabelError(f"{path}: no labels file")
    table = _finished_rows(path, method)
    return table.drop_duplicates("name", keep="last").reset_index(drop=True)
