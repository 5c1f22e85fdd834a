"""Screening a candidate file of any length in chunks that survive interruption.

The input is read record by record; every ``chunk_size`` records are predicted
together and written to ``<out>/chunks/part-NNNNNN.csv`` before the next chunk
starts. A restarted screen skips the records of the finished chunks without
building them (no re-embedding), so it resumes where it stopped; the final
table is assembled from the chunk files. Memory holds one chunk at a time.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from itertools import islice
from pathlib import Path

import pandas as pd
from tqdm.auto import tqdm

from molinv.molecules.checks import Rejected
from molinv.molecules.reading import iter_molecules

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

    def text(self, unit: str) -> str:
        lines = [f"{self.rows} candidates: {self.ok} ok, {self.flagged} flagged, {self.failed} failed",
                 f"ranked table: {self.table_path}", "most stable predicted (ok rows):"]
        lines += ["  " + line for line in self.top.to_string(index=False, float_format=lambda v: f"{v:.2f}").splitlines()]
        lines.append(f"Caution: {CAUTION}")
        return "\n".join(lines)


def _file_fingerprint(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()[:16]


def screen_file(model, path, out, *, model_fingerprint: str, target: str = "energy", unit: str = "kcal/mol",
                chunk_size: int = 1000, read_options: dict | None = None, parquet: bool = False,
                progress: bool | None = None, top: int = 10) -> ScreenSummary:
    """Screen every record of ``path`` with a fitted EnergyModel; see the module docstring.

    ``model_fingerprint`` identifies the model (for example its file's SHA-256), so
    that a folder is resumed only by the same model on the same input.
    """
    path, out = Path(path), Path(out)
    if chunk_size < 1:
        raise ScreenError("chunk_size must be at least 1")
    read_options = dict(read_options or {})
    chunks = out / "chunks"
    chunks.mkdir(parents=True, exist_ok=True)
    settings = {"input": str(path.resolve()), "input_sha256": _file_fingerprint(path), "model": model_fingerprint,
                "chunk_size": chunk_size, "unit": unit, "target": target,
                "read_options": {k: str(v) for k, v in read_options.items()}}
    record = out / "screen.json"
    if record.exists() and json.loads(record.read_text()) != settings:
        raise ScreenError(f"{out} holds a screen of another input, model or settings; choose another folder")
    record.write_text(json.dumps(settings, indent=2))

    done = sorted(chunks.glob("part-*.csv"))
    first_chunk = len(done)
    records = iter_molecules(path, skip_records=first_chunk * chunk_size, **read_options)
    with tqdm(desc=f"screen {path.name}", unit="mol", initial=first_chunk * chunk_size,
              disable=None if progress is None else not progress) as bar:
        for number in range(first_chunk, 10**9):
            items = list(islice(records, chunk_size))
            if not items:
                break
            molecules = [item for item in items if not isinstance(item, Rejected)]
            rejected = [item for item in items if isinstance(item, Rejected)]
            table = prediction_table(model, molecules, rejected, unit=unit, target=target, rank=False)
            target_file = chunks / f"part-{number:06d}.csv"
            partial = chunks / f".part-{number:06d}.{os.getpid()}.tmp"
            table.to_csv(partial, index=False)
            os.replace(partial, target_file)
            bar.update(len(items))

    parts = [pd.read_csv(p, keep_default_na=False, na_values=[""]) for p in sorted(chunks.glob("part-*.csv"))]
    table = finish_ranking(pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(), unit=unit, target=target)
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
                            int(counts.get("failed", 0)), table_path, best)
    (out / "summary.txt").write_text(summary.text(unit) + "\n")
    return summary
