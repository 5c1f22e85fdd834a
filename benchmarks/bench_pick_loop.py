"""Picked against random batches on QM9, labels hidden until picked.

    nice -n 5 python benchmarks/bench_pick_loop.py --molecules 12000 --test-size 2000 \
        --sizes 100 200 300 500 700 1000 1400 2000 --seeds 0 1 2 --out benchmarks/results/pick_loop

One QM9 sample and one test set; for every seed, the same random initial set of
``sizes[0]`` molecules, then rounds that add molecules picked by each strategy of
``--strategies`` (see :class:`molinv.labels.loop.PickLoop`; 'uncertain' once per
``--shortlists`` factor) or at random, up to ``sizes[-1]``. The model is refitted
(kernel ridge) every round: width and regularisation by 5-fold cross-validation
every round, or with ``--tune-once`` on round 0 only (the 100 random molecules) and
kept. Atomization energy from U0, kcal/mol. Resumable: rerun the same command
after an interruption.

Question asked (issue 7): does picking reach, with at most half the labels, the
test MAE that random batches reach with ``sizes[-1]`` labels?

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from molinv.descriptors.store import FeatureStore
from molinv.evaluation import summarize
from molinv.evaluation.curves import test_split
from molinv.evaluation.report import plot_learning_curves
from molinv.labels.choose import molecule_vectors
from molinv.labels.loop import HiddenLabels, PickLoop
from molinv.molecules.qm9 import load_qm9
from molinv.recipes import make_descriptor, make_regressor, model_inputs


def labels_needed(curve: pd.DataFrame, mae: float) -> float:
    """Smallest training size where the (log-log interpolated) mean curve reaches ``mae``; inf if it never does."""
    sizes, errors = curve["size"].to_numpy(float), curve["mae_mean_kcal/mol"].to_numpy(float)
    for i in range(len(sizes)):
        if errors[i] <= mae:
            if i == 0:
                return sizes[0]
            fraction = (np.log(mae) - np.log(errors[i - 1])) / (np.log(errors[i]) - np.log(errors[i - 1]))
            return float(np.exp(np.log(sizes[i - 1]) + fraction * (np.log(sizes[i]) - np.log(sizes[i - 1]))))
    return float("inf")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=12000)
    parser.add_argument("--test-size", type=int, default=2000)
    parser.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 300, 500, 700, 1000, 1400, 2000])
    parser.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    parser.add_argument("--descriptor", default="bonds")
    parser.add_argument("--strategies", nargs="+", default=["uncertain"],
                        choices=["uncertain", "spread", "variance"], help="compared with random batches")
    parser.add_argument("--shortlists", type=float, nargs="+", default=[4.0, 1.0],
                        help="shortlist factors of the uncertain strategy (1: no diversity step)")
    parser.add_argument("--reference", type=int, default=1000, help="reference sample of the variance strategy")
    parser.add_argument("--tune-once", action="store_true", help="cross-validate on round 0 only")
    parser.add_argument("--cache", type=Path, help="feature cache folder")
    parser.add_argument("--out", type=Path, default=Path("benchmarks/results/pick_loop"))
    args = parser.parse_args()

    started = time.perf_counter()
    molecules = load_qm9(n=args.molecules, seed=0)
    energies = np.array([m.info["atomization_energy"] for m in molecules])
    names = [m.info["name"] for m in molecules]
    descriptor = make_descriptor(args.descriptor, progress=True).fit(molecules)
    inputs = model_inputs(descriptor, molecules, FeatureStore(args.cache) if args.cache else None)
    vectors = molecule_vectors(inputs, descriptor.elements_)
    test, _ = test_split(len(molecules), args.test_size, seed=0)
    print(f"{len(molecules)} QM9 molecules described with {args.descriptor} in {time.perf_counter() - started:.0f} s")

    variants = [("random", 4.0)]
    for strategy in args.strategies:
        variants += [("uncertain", factor) for factor in args.shortlists] if strategy == "uncertain" else [(strategy, 4.0)]
    tables = []
    with threadpool_limits(limits=1, user_api="blas"):
        for seed in args.seeds:
            for strategy, factor in variants:
                name = f"{strategy}-{factor:g}" if strategy == "uncertain" else strategy
                folder = args.out / "runs" / f"{name}-seed{seed}"
                hidden = HiddenLabels(energies)
                regressor = make_regressor("kernel", descriptor.per_atom, descriptor=args.descriptor)
                loop = PickLoop(folder, names, inputs, vectors, regressor, hidden, test, sizes=args.sizes,
                                strategy=strategy, seed=seed, shortlist_factor=factor,
                                reference_size=args.reference, tune_once=args.tune_once)
                tic = time.perf_counter()
                table = loop.run(progress=True)
                print(f"seed {seed} {loop.label}: {time.perf_counter() - tic:.0f} s, labels revealed this run "
                      f"{len(hidden.revealed)}")
                tables.append(table)
    points = pd.concat(tables, ignore_index=True)
    points.to_csv(args.out / "points.csv", index=False)
    summary = summarize(points, unit="kcal/mol")
    summary.to_csv(args.out / "summary.csv", index=False)
    plot_learning_curves(summary, {}, "kcal/mol", None, args.out / "learning_curves.png")

    largest = max(args.sizes)
    random_curve = summary[summary["label"] == "random"]
    goal = float(random_curve.loc[random_curve["size"] == largest, "mae_mean_kcal/mol"].iloc[0])
    tuning = "CV on round 0 only, then fixed" if args.tune_once else "CV every round"
    lines = [f"QM9 sample {args.molecules}, test {args.test_size}, descriptor {args.descriptor}, kernel ridge "
             f"({tuning}), seeds {args.seeds}; MAE kcal/mol, mean over seeds",
             summary.pivot(index="size", columns="label", values="mae_mean_kcal/mol").round(2).to_string(), "",
             "MAE kcal/mol, standard deviation over seeds",
             summary.pivot(index="size", columns="label", values="mae_std_kcal/mol").round(2).to_string(), "",
             "RMSE kcal/mol, mean over seeds",
             summary.pivot(index="size", columns="label", values="rmse_mean_kcal/mol").round(2).to_string(), "",
             "largest test error kcal/mol, mean over seeds",
             summary.pivot(index="size", columns="label", values="max_error_mean_kcal/mol").round(1).to_string(), "",
             f"random batches at {largest} labels: {goal:.2f} kcal/mol"]
    for label, curve in summary.groupby("label"):
        needed = labels_needed(curve, goal)
        lines.append(f"{label}: reaches {goal:.2f} kcal/mol at about {needed:.0f} labels "
                     f"({needed / largest:.2f} of {largest})")
    lines.append(f"total {time.perf_counter() - started:.0f} s on a shared 2-core machine")
    (args.out / "summary.txt").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
