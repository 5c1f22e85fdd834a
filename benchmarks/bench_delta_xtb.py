"""Delta-learning on QM9 with GFN2-xTB as the cheap method: correction curve against the direct curve.

    nice -n 5 python benchmarks/bench_delta_xtb.py --molecules 2000 --test-size 500 \
        --sizes 100 200 500 1000 1500 --draws 2 --out benchmarks/results/delta_xtb

Target: QM9 atomization energy from U0, B3LYP/6-31G(2df,p) (Ramakrishnan et al., Sci. Data 1,
140022, 2014). Cheap: GFN2-xTB atomization energy (tblite; free atoms spin-polarised),
computed here for every molecule of the sample into ``xtb_labels.csv`` (resumable).
Delta-learning (Ramakrishnan, Dral, Rupp, von Lilienfeld, J. Chem. Theory Comput. 11, 2087,
2015) learns target - cheap and predicts cheap + correction; its test error equals the
error of the learned correction, so the correction curve is run with the learning-curve
code on the same test set and the same training draws (same seed) as the direct curve.
Model: kernel ridge with width and regularisation by 5-fold cross-validation.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from molinv.evaluation import CurveRun, summarize
from molinv.evaluation.report import plot_learning_curves
from molinv.labels import LabelMethod, label_molecules, read_labels
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import make_descriptor, make_regressor, model_inputs


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=2000)
    parser.add_argument("--test-size", type=int, default=500)
    parser.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 500, 1000, 1500])
    parser.add_argument("--draws", type=int, default=2)
    parser.add_argument("--descriptor", default="bonds")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--jobs", type=int, default=2, help="xTB worker processes, one thread each")
    parser.add_argument("--out", type=Path, default=Path("benchmarks/results/delta_xtb"))
    args = parser.parse_args()

    started = time.perf_counter()
    molecules = load_qm9(n=args.molecules, seed=args.seed)
    xtb = LabelMethod("xtb")
    labelling = label_molecules(molecules, xtb, args.out / "xtb_labels.csv", n_jobs=args.jobs, progress=True)
    xtb_seconds = time.perf_counter() - started
    labels = read_labels(args.out / "xtb_labels.csv", xtb).set_index("name")
    cheap = labels.loc[[m.info["name"] for m in molecules], "atomization_energy_eV"].to_numpy(float)
    usable = np.flatnonzero(np.isfinite(cheap))
    print(f"GFN2-xTB: {labelling.text()}; {len(molecules) - len(usable)} without an xTB energy are left out")
    molecules = [molecules[i] for i in usable]
    target = np.array([m.info["atomization_energy"] for m in molecules])
    cheap = cheap[usable]

    descriptor = make_descriptor(args.descriptor, progress=True).fit(molecules)
    inputs = model_inputs(descriptor, molecules)
    regressor = make_regressor("kernel", descriptor.per_atom, progress=False, descriptor=args.descriptor)
    runs = {}
    with threadpool_limits(limits=1, user_api="blas"):
        for name, y in (("direct", target), ("delta (xTB + correction)", target - cheap)):
            folder = args.out / "runs" / name.split()[0]
            run = CurveRun.open(folder, y, test_size=args.test_size, sizes=args.sizes, n_draws=args.draws,
                                seed=args.seed)
            runs[name] = run.run(inputs, regressor, f"{args.descriptor} {name}", progress=True)
    points = pd.concat(runs.values(), ignore_index=True)
    points.to_csv(args.out / "points.csv", index=False)
    summary = summarize(points, unit="kcal/mol")
    summary.to_csv(args.out / "summary.csv", index=False)
    plot_learning_curves(summary, {}, "kcal/mol", None, args.out / "learning_curves.png")

    test = run.test
    raw_xtb_mae = convert_energy(float(np.mean(np.abs((cheap - target)[test]))), "eV", "kcal/mol")
    offset_mae = convert_energy(float(np.mean(np.abs((cheap - target)[test] - np.mean((cheap - target)[test])))),
                                "eV", "kcal/mol")
    table = summary.pivot(index="size", columns="label", values="mae_mean_kcal/mol").round(2)
    lines = [f"QM9 sample {len(molecules)}, test {args.test_size}, {args.draws} draws, descriptor "
             f"{args.descriptor}, kernel ridge (CV); test MAE kcal/mol of the atomization energy (U0)",
             table.to_string(), "",
             f"GFN2-xTB alone on the test set: MAE {raw_xtb_mae:.1f} kcal/mol "
             f"({offset_mae:.1f} after removing the mean difference)",
             f"xTB labelling {xtb_seconds:.0f} s for {labelling.computed} molecules ({args.jobs} processes); "
             f"total {time.perf_counter() - started:.0f} s on a shared 2-core machine"]
    (args.out / "summary.txt").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
