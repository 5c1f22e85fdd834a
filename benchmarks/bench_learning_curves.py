"""QM9 learning curves of atomization energy (from U0, kcal/mol) for every main descriptor.

    python benchmarks/bench_learning_curves.py --sizes 100 200 500 1000 2000 5000 10000 20000 \
        --test-size 10000 --draws 3 --out benchmarks/results/qm9_curves

Runs ``molinv curve`` on one QM9 sample with identical splits for every descriptor
(kernel ridge with cross-validated hyperparameters), resumable (rerun the same
command after an interruption), with descriptors cached in ``--cache``. The results
folder holds points.csv, summary.csv, the plots and report.html.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Published kernel-ridge
results for comparison belong beside the table in the README, with their sources.
"""

from __future__ import annotations

import argparse
import sys

from molinv.cli import main as molinv


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=None,
                        help="QM9 sample size (default: test + twice the largest size, so draws differ)")
    parser.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 500, 1000, 2000, 5000, 10000, 20000])
    parser.add_argument("--test-size", type=int, default=10000)
    parser.add_argument("--draws", type=int, default=3)
    parser.add_argument("--descriptors", nargs="+", default=["atoms", "density", "coulomb", "bonds"])
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--cache", default="benchmarks/results/feature_cache")
    parser.add_argument("--out", default="benchmarks/results/qm9_curves")
    args = parser.parse_args()
    n = args.molecules or args.test_size + 2 * max(args.sizes)
    command = ["curve", f"qm9:{n}:{args.seed}", "--model", "kernel", "--sizes", *map(str, args.sizes),
               "--test-size", str(args.test_size), "--draws", str(args.draws), "--seed", str(args.seed),
               "--jobs", str(args.jobs), "--cache", args.cache, "--out", args.out, "--target", "1.0"]
    for descriptor in args.descriptors:
        command += ["--descriptor", descriptor]
    return molinv(command)


if __name__ == "__main__":
    sys.exit(main())
