"""Screening a candidate file of any length in chunks that survive interruption.

The input is read record by record; every ``chunk_size`` records form a chunk
(SMILES still as text, other records as packed arrays, see
:mod:`molinv.molecules.packed`) that is embedded, described and predicted
together and written to ``<out>/chunks/part-NNNNNN.csv`` as soon as it finishes.
Chunks run in this process, in local worker processes or on a Dask cluster
(``executor``, see :mod:`molinv.cluster`); the table is the same. A restarted
screen skips the finished chunks without building their records (no
re-embedding), so it resumes where it stopped; the ranked table is assembled from
the chunk files without holding them all (:func:`~molinv.screening.ranking.write_ranking`).
Memory holds a few chunks at a time.
"""

from __future__ import annotations

import html
from collections import Counter
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

import pandas as pd

from molinv.cluster.chunks import ChunkError, ChunkReport, claim_folder, file_fingerprint, run_chunks
from molinv.descriptors.store import molecules_fingerprint
from molinv.errors import MolinvError
from molinv.molecules.checks import Rejected
from molinv.molecules.packed import MoleculeChunk, packed_chunks
from molinv.molecules.reading import iter_records
from molinv.molecules.route import describe_route
from molinv.outputs import written_atomically

from .ranking import RANK_COLUMN, ranking_note, write_ranking
from .table import CAUTION, prediction_table

#: Kinds of reason listed in a screen's summary.
SHOWN_REASON_KINDS = 8


class ScreenError(MolinvError, ValueError):
    """A screen that cannot start or resume (for example: folder of another screen)."""


@dataclass
class ScreenSummary:
    rows: int
    ok: int
    flagged: int
    failed: int
    table_path: Path
    top: pd.DataFrame
    #: How the table is ordered (:func:`~molinv.screening.ranking.ranking_note`).
    ranking: str
    #: Kinds of reason of the rows not 'ok', with their counts.
    reasons: Counter
    #: The model's geometry route, in words.
    route: str
    #: Chunks computed by this call (finished ones from an earlier run are skipped).
    computed: list[ChunkReport] = field(default_factory=list)

    def text(self, unit: str) -> str:
        lines = [f"{self.rows} candidates: {self.ok} ok, {self.flagged} flagged, {self.failed} failed",
                 f"model's geometry route: {self.route}",
                 f"table: {self.table_path}, {self.ranking}"]
        if RANK_COLUMN in self.top.columns:
            lines.append("most stable predicted isomer of each formula (ok rows, formulas in text order):")
        else:
            lines.append("first ok rows:")
        if self.top.empty:
            lines.append("  none")
        else:
            lines += ["  " + line for line in self.top.to_string(index=False, float_format=lambda v: f"{v:.2f}").splitlines()]
        if self.reasons:
            lines.append("most frequent reasons to flag or fail (rows):")
            lines += [f"  {count:>7}  {kind}" for kind, count in self.reasons.most_common(SHOWN_REASON_KINDS)]
        lines.append(f"Caution: {CAUTION}")
        return "\n".join(lines)

    def html(self, title: str) -> str:
        """The same as a page of its own (what a browser or a colleague opens)."""
        reasons = "".join(f"<tr><td>{count}</td><td>{html.escape(kind)}</td></tr>"
                          for kind, count in self.reasons.most_common(SHOWN_REASON_KINDS))
        top = self.top.to_html(index=False, float_format=lambda v: f"{v:.2f}", na_rep="")
        return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{html.escape(title)}</title></head><body>
<h1>{html.escape(title)}</h1>
<p>{self.rows} candidates: {self.ok} ok, {self.flagged} flagged, {self.failed} failed. Table:
<a href="{html.escape(self.table_path.name)}">{html.escape(self.table_path.name)}</a>, {html.escape(self.ranking)}.</p>
<h2>{'Most stable predicted isomer of each formula' if RANK_COLUMN in self.top.columns else 'First ok rows'}</h2>
{top}
<h2>Most frequent reasons to flag or fail</h2>
<table><tr><th>rows</th><th>reason</th></tr>{reasons}</table>
<p>Model's geometry route: {html.escape(self.route)}.</p>
<p><strong>Caution:</strong> {html.escape(CAUTION)}</p>
</body></html>
"""


def predict_chunk(chunk: MoleculeChunk, model, *, unit: str, target: str,
                  energy_keys: tuple[str, ...] = ("energy",)) -> pd.DataFrame:
    """Unranked prediction table of one chunk (embedding its SMILES first); a chunk task."""
    items = chunk.unpack()
    molecules = [item for item in items if not isinstance(item, Rejected)]
    rejected = [item for item in items if isinstance(item, Rejected)]
    return prediction_table(model, molecules, rejected, unit=unit, target=target, rank=False, energy_keys=energy_keys)


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

    if parquet:
        try:
            import pyarrow  # noqa: F401  (checked before the chunks run, not after)
        except ImportError as error:
            raise ScreenError(f"Parquet output needs pyarrow: pip install 'molinv[parquet]' ({error})") from None
    task = partial(predict_chunk, unit=unit, target=target,
                   energy_keys=tuple(read_options.get("energy_keys", ("energy",))))
    computed = run_chunks(task, packed_chunks(items, chunk_size),
                          out / "chunks", shared=model, executor=executor, progress=progress,
                          description=f"screen {Path(label).name}")
    table_path = out / "ranked.csv"
    ranked = write_ranking(out / "chunks", table_path, unit=unit, target=target, top=top, progress=progress,
                           parquet_path=out / "ranked.parquet" if parquet else None)
    shown = [RANK_COLUMN, "name", "formula", f"{target}_{unit}", f"std_{unit}"]
    best = ranked.top.reindex(columns=[c for c in shown if c in ranked.top.columns])
    counts = ranked.counts
    summary = ScreenSummary(ranked.rows, counts.get("ok", 0), counts.get("flagged", 0), counts.get("failed", 0),
                            table_path, best, ranking_note(target), ranked.reasons, describe_route(model.route_),
                            computed)
    with written_atomically(out / "summary.txt") as temporary:
        temporary.write_text(summary.text(unit) + "\n")
    with written_atomically(out / "summary.html") as temporary:
        temporary.write_text(summary.html(f"molinv screen of {Path(label).name}"))
    return summary
