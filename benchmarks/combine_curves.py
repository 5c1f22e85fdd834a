"""One report from several learning-curve runs on the same data and split.

    python benchmarks/combine_curves.py --runs benchmarks/results/qm9_curves_atoms/run \
        /work/runs/refcurves/run --out benchmarks/results/qm9_curves_all

Runs made separately (for example one per descriptor, on different days) can share one
plot and table when they hold the same data set and test set (their run.json files
match): their finished points are copied into ``--out``/run and the report is written
from them. Nothing is refitted.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014) when the runs are on QM9.
"""

from __future__ import annotations

import argparse
import json
import shutil
from pathlib import Path

from molinv.cli import parse_qm9_source
from molinv.evaluation import CurveRun, write_report
from molinv.molecules.qm9 import CITATION, load_qm9


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--runs", nargs="+", type=Path, required=True, help="run folders (each with run.json)")
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--qm9", default="qm9::0", help="the QM9 source the runs used (qm9:N:SEED, or qm9::SEED for all of QM9)")
    parser.add_argument("--target", type=float, default=1.0, help="accuracy wanted, kcal/mol")
    args = parser.parse_args()
    settings = [json.loads((run / "run.json").read_text()) for run in args.runs]
    if any(s != settings[0] for s in settings[1:]):
        raise SystemExit("the runs hold different data or test sets: " + "; ".join(map(str, settings)))
    source = parse_qm9_source(args.qm9)
    if source is None:
        raise SystemExit(f"--qm9 {args.qm9!r}: write qm9, qm9:N or qm9:N:SEED")
    molecules = load_qm9(n=source[0], seed=source[1])
    energies = [atoms.info["atomization_energy"] for atoms in molecules]
    combined = args.out / "run"
    for run in args.runs:
        for label_folder in (run / "points").iterdir():
            shutil.copytree(label_folder, combined / "points" / label_folder.name, dirs_exist_ok=True)
    run = CurveRun.open(combined, energies, test_size=settings[0]["test_size"], seed=settings[0]["seed"])
    page = write_report(run, args.out, unit="kcal/mol", target=args.target, n_atoms=[len(a) for a in molecules],
                        settings={"data": args.qm9, "energy": "atomization_energy", "test molecules": settings[0]["test_size"],
                                  "combined from": ", ".join(map(str, args.runs))},
                        data_citation=CITATION)
    print(f"report: {page}")


if __name__ == "__main__":
    main()
