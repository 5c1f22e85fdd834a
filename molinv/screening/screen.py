"""Screening a candidate file of any length in chunks that survive interruption.

The input is read record by record; every ``chunk_size`` records form a chunk
(SMILES still as text, other records as packed arrays, see
:mod:`molinv.molecules.packed`) that is embedded, described and predicted
together and written to ``<out>/chunks/part-NNNNNN.csv`` as soon as it finishes.
Chunks run in this process, in local worker processes or on a Dask cluster
(``executor``, see :mod:`molinv.cluster`); the table is the same. A restarted
screen skips the finished chunks without building their records (no
re-embedding), so it resumes where it stopped; the final table is assembled from
the chunk files. Memory holds a few chunks at a time.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

import pandas as pd

from molinv.cluster.chunks import ChunkError, ChunkReport, claim_folder, file_fingerprint, read_tables, run_chunks
from molinv.descriptors.store import molecules_fingerprint
from molinv.molecules.checks import Rejected
from molinv.molecules.packed import MoleculeChunk, packed_chunks
from molinv.molecules.reading import iter_records

from .table import CAUTION, finish_ranking, prediction_table


class ScreenError(ValueError):
    """A screen that cannot start or resume (for example: folder of another screen)."""


@dataclass
class ScreenSummary:
    rows: int
    ok: int
    flagged: int
    failed: int
    table_path: Path
    top: pd.DataFrame
    #: Chunks computed by this call (finished ones from an earlier run are skipped).
    computed: list[ChunkReport] = field(default_factory=list)

    def text(self, unit: str) -> str:
        lines = [f"{self.rows} candidates: {self.ok} ok, {self.flagged} flagged, {self.failed} failed",
                 f"ranked table: {self.table_path}", "most stable predicted (ok rows):"]
        lines += ["  " + line for line in self.top.to_string(index=False, float_format=lambda v: f"{v:.2f}").splitlines()]
        lines.append(f"Caution: {CAUTION}")
        return "\n".join(lines)


def predict_chunk(chunk: MoleculeChunk, model, *, unit: str, target: str) -> pd.DataFrame:
    """Unranked prediction table of one chunk (embedding its SMILES first); a chunk task."""
    items = chunk.unpack()
    molecules = [item for item in items if not isinstance(item, Rejected)]
    rejected = [item for item in items if isinstance(item, Rejected)]
    return prediction_table(model, molecules, rejected, unit=unit, target=target, rank=False)


def predict_in_chunks(model, chunks, folder, *, unit: str = "kcal/mol", target: str = "energy", executor=None,
                      total: int | None = None, progress: bool | None = None,
                      description: str = "predict") -> tuple[pd.DataFrame, list[ChunkReport]]:
    """Ranked prediction table of numbered chunks of records, each chunk written to ``folder``
    as it finishes (see :func:`molinv.cluster.chunks.run_chunks`; ``chunks`` yields
    ``(number, make_chunk)``). Returns the table and the reports of the chunks computed."""
    reports = run_chunks(partial(predict_chunk, unit=unit, target=target), chunks, folder, shared=model,
                         executor=executor, total=total, progress=progress, description=description)
    return finish_ranking(read_tables(folder), unit=unit, target=target), reports


def screen_file(model, path, out, *, model_fingerprint: str, target: str = "energy", unit: str = "kcal/mol",
                chunk_size: int = 1000, read_options: dict | None = None, parquet: bool = False,
                progress: bool | None = None, top: int = 10, executor=None,
                source_label: str | None = None) -> ScreenSummary:
    """Screen every record of ``path`` with a fitted EnergyModel; see the module docstring.

    ``path`` may also be a list of ``ase.Atoms`` already read (named ``source_label``
    in the screen's record).

    ``model_fingerprint`` identifies the model (for example its file's SHA-256), so
    that a folder is resumed only by the same model on the same input. ``executor``
    runs the chunks (default: this process; see :mod:`molinv.cluster`).
    """
    out = Path(out)
    if chunk_size < 1:
        raise ScreenError("chunk_size must be at least 1")
    read_options = dict(read_options or {})
    if isinstance(path, (str, Path)):
        path = Path(path)
        items = iter_records(path, progress=False, **read_options)
        label, fingerprint = str(path.resolve()), file_fingerprint(path)
    else:
        items = list(path)
        label, fingerprint = source_label or "molecules", molecules_fingerprint(items)
    settings = {"input": label, "input_sha256": fingerprint, "model": model_fingerprint,
                "chunk_size": chunk_size, "unit": unit, "target": target,
                "read_options": {k: str(v) for k, v in read_options.items()}}
    try:
        claim_folder(out, settings, "screen.json")
    except ChunkError as error:
        raise ScreenError(str(error)) from None

    table, computed = predict_in_chunks(model, packed_chunks(items, chunk_size), out / "chunks", unit=unit,
                                        target=target, executor=executor, progress=progress,
                                        description=f"screen {Path(label).name}")
    table_path = out / "ranked.csv"
    table.to_csv(table_path, index=False)
    if parquet:
        try:
            table.to_parquet(out / "ranked.parquet", index=False)
        except ImportError as error:
            raise ScreenError(f"Parquet output needs pyarrow: pip install 'molinv[parquet]' ({error})") from None
    counts = table["status"].value_counts()
    value = f"{target}_{unit}"
    best = table[table["status"] == "ok"].head(top)[["rank", "name", "formula", value, f"std_{unit}"]]
    summary = ScreenSummary(len(table), int(counts.get("ok", 0)), int(counts.get("flagged", 0)),
                            int(counts.get("failed", 0)), table_path, best, computed)
    (out / "summary.txt").write_text(summary.text(unit) + "\n")
    return summary
