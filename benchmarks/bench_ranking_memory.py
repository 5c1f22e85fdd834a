"""Peak memory of ranking a screen's chunk files: the whole table in memory against streaming.

    python benchmarks/bench_ranking_memory.py --sizes 100000 1000000

Writes N invented rows as chunk files of ``--chunk-size`` rows (the columns and kinds of
values a screen writes; this measures memory, not accuracy, so the rows need not be
predictions of anything), then ranks them in a fresh process per method:

* ``memory``: the ranking as it was before streaming: every chunk file read into one
  table, ranked by pandas on the whole table, written with ``to_csv`` (the reference
  function of ``tests/test_ranking.py``);
* ``streamed``: :func:`molinv.screening.ranking.write_ranking`;
* ``book``: only the first pass of ``write_ranking`` (what it keeps for every distinct
  name and formula), to measure that bookkeeping alone.

Prints, per method, the process's peak resident memory (``ru_maxrss``), its resident
memory after imports, the wall and CPU seconds, and whether both ranked files are the
same bytes. Names are unique but for one row in a hundred, the worst case for the
per-name bookkeeping.
"""

from __future__ import annotations

import argparse
import hashlib
import importlib.util
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
UNIT, TARGET = "kcal/mol", "atomization_energy"


def resident_mib() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def invented_chunk(rng, first_record: int, size: int, formulas: np.ndarray) -> pd.DataFrame:
    records = np.arange(first_record, first_record + size)
    failed = rng.random(size) < 0.014
    rejected = failed & (rng.random(size) < 0.5)
    flagged = ~failed & (rng.random(size) < 0.007)
    names = np.char.add("cand-", records.astype(str)).astype(object)
    repeats = rng.random(size) < 0.01
    names[repeats] = np.char.add("cand-", rng.integers(1, first_record + size, repeats.sum()).astype(str))
    letters = np.array(list("CCCCNOc1()=#"))
    smiles = ["".join(row) for row in letters[rng.integers(0, len(letters), (size, 18))]]
    reason = np.where(flagged, "far from the training molecules: distance 1.43 of the threshold", "")
    reason = np.where(failed, "cannot embed: ETKDG found no 3D geometry", reason)
    return pd.DataFrame({
        "record": records, "name": names, "smiles": smiles,
        "formula": np.where(rejected, "", formulas[rng.integers(0, len(formulas), size)]),
        "n_atoms": np.where(rejected, np.nan, rng.integers(8, 28, size)),
        "geometry_source": np.where(rejected, "", "rdkit-etkdg+mmff94"),
        "status": np.where(failed, "failed", np.where(flagged, "flagged", "ok")), "reason": reason,
        f"{TARGET}_{UNIT}": np.where(failed, np.nan, rng.normal(-1500, 150, size)),
        f"std_{UNIT}": np.where(failed, np.nan, rng.gamma(2, 1.5, size)),
        "domain_distance": np.where(failed, np.nan, rng.gamma(4, 0.15, size))})


def write_chunks(folder: Path, rows: int, chunk_size: int) -> None:
    from molinv.cluster.chunks import write_part

    rng = np.random.default_rng(71)
    formulas = np.array([f"C{c}H{h}N{n}O{o}" for c in range(1, 10) for h in range(4, 21, 2)
                         for n in range(3) for o in range(4)])  # 972 formulas
    folder.mkdir(parents=True)
    for number, start in enumerate(range(0, rows, chunk_size)):
        write_part(folder, number, invented_chunk(rng, start + 1, min(chunk_size, rows - start), formulas))


def rank(method: str, folder: Path, out: Path) -> dict:
    from molinv.cluster.chunks import iter_tables, read_tables
    from molinv.screening.ranking import read_book, write_ranking

    spec = importlib.util.spec_from_file_location("reference", ROOT / "tests" / "test_ranking.py")
    reference = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(reference)
    after_imports = resident_mib()
    started, cpu_started = time.perf_counter(), time.process_time()
    extra = {}
    if method == "memory":
        reference.reference_finish_ranking(read_tables(folder), unit=UNIT, target=TARGET).to_csv(out, index=False)
    elif method == "streamed":
        write_ranking(folder, out, unit=UNIT, target=TARGET, progress=False)
    else:
        book = read_book(lambda: iter_tables(folder), UNIT, TARGET)
        extra = {"shared": len(book.shared_hashes), "names": len(book.first_use), "formulas": len(book.best),
                 "book_mib": resident_mib() - after_imports}
    return {"peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, "after_imports_mib": after_imports,
            "wall_s": time.perf_counter() - started, "cpu_s": time.process_time() - cpu_started, **extra}


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:16]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--chunk-size", type=int, default=1000, help="rows per chunk file (the screen's default)")
    parser.add_argument("--methods", nargs="+", default=["memory", "streamed", "book"],
                        choices=["memory", "streamed", "book"])
    parser.add_argument("--child", nargs=3, metavar=("METHOD", "FOLDER", "OUT"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        method, folder, out = args.child
        print(json.dumps(rank(method, Path(folder), Path(out))))
        return
    print(f"{'rows':>9} {'method':>9} {'peak MiB':>9} {'after imports':>13} {'wall s':>7} {'cpu s':>6}  notes")
    for rows in args.sizes:
        with tempfile.TemporaryDirectory(prefix="bench-ranking-") as scratch:
            scratch = Path(scratch)
            write_chunks(scratch / "chunks", rows, args.chunk_size)
            outputs = {}
            for method in args.methods:
                out = scratch / f"ranked-{method}.csv"
                done = subprocess.run([sys.executable, __file__, "--child", method, str(scratch / "chunks"), str(out)],
                                      capture_output=True, text=True, check=True)
                result = json.loads(done.stdout.splitlines()[-1])
                notes = ""
                if method == "book":
                    notes = (f"kept {result['names']:,} repeated names ({result['shared']:,} hashes), "
                             f"{result['formulas']} formulas; resident after the first pass "
                             f"{result['book_mib']:+.0f} MiB")
                else:
                    outputs[method] = digest(out)
                print(f"{rows:>9,} {method:>9} {result['peak_mib']:>9.0f} {result['after_imports_mib']:>13.0f} "
                      f"{result['wall_s']:>7.1f} {result['cpu_s']:>6.1f}  {notes}", flush=True)
            if len(outputs) == 2:
                same = len(set(outputs.values())) == 1
                print(f"{rows:>9,} ranked.csv of both methods: {'same bytes' if same else 'DIFFERENT'} "
                      f"(sha256 {outputs['memory']}, {outputs['streamed']})", flush=True)


if __name__ == "__main__":
    main()
