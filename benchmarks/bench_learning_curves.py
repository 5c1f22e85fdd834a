"""QM9 learning curves of atomization energy (from U0, kcal/mol) for every main descriptor.

    python benchmarks/bench_learning_curves.py --sizes 100 200 500 1000 2000 5000 10000 20000 \
        --large-sizes 10000 20000 50000 100000 --test-size 10000 --draws 3 \
        --atom-components 128 --out benchmarks/results/qm9_curves

Runs ``molinv curve`` on one QM9 sample with identical splits for every descriptor:
first exact kernel ridge (cross-validated width and regularisation) at ``--sizes``,
then, into the same run, the Nystrom model ('large', also cross-validated) at
``--large-sizes``. Resumable (rerun the same command after an interruption), with
descriptors cached in ``--cache``. The results folder holds points.csv, summary.csv,
the plots and report.html. ``--atom-components`` projects the atom-centred vectors
(2,325 entries each) on their leading principal directions, which is what lets
100,000 molecules fit in memory; give the same value on every rerun.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Published kernel-ridge
results for comparison are beside the table in benchmarks/RESULTS.md, with their sources.
"""

from __future__ import annotations

import argparse
import sys

from molinv.cli import main as molinv


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=None,
                        help="QM9 sample size (default: test + twice the largest size, so draws differ; "
                             "all of QM9 when that is more)")
    parser.add_argument("--sizes", type=int, nargs="*", default=[100, 200, 500, 1000, 2000, 5000, 10000, 20000],
                        help="training sizes for exact kernel ridge (none: only the Nystrom model)")
    parser.add_argument("--large-sizes", type=int, nargs="*", default=[],
                        help="training sizes for the Nystrom model (none by default)")
    parser.add_argument("--test-size", type=int, default=10000)
    parser.add_argument("--draws", type=int, default=3)
    parser.add_argument("--descriptors", nargs="+", default=["atoms", "bonds", "coulomb-sorted", "coulomb", "density-exact"])
    parser.add_argument("--atom-components", type=int, default=None)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--cache", default="benchmarks/results/feature_cache")
    parser.add_argument("--out", default="benchmarks/results/qm9_curves")
    args = parser.parse_args()
    largest = max(args.sizes + args.large_sizes)
    source = f"qm9:{args.molecules or args.test_size + 2 * largest}:{args.seed}"
    if args.molecules is None and args.test_size + 2 * largest > 130_000:
        source = f"qm9::{args.seed}"
    common = [source, "--test-size", str(args.test_size), "--draws", str(args.draws), "--seed", str(args.seed),
              "--jobs", str(args.jobs), "--cache", args.cache, "--out", args.out, "--target", "1.0"]
    if args.atom_components is not None:
        common += ["--atom-components", str(args.atom_components)]
    for descriptor in args.descriptors:
        common += ["--descriptor", descriptor]
    status = molinv(["curve", *common, "--model", "kernel", "--sizes", *map(str, args.sizes)]) if args.sizes else 0
    if status == 0 and args.large_sizes:
        status = molinv(["curve", *common, "--model", "large", "--sizes", *map(str, args.large_sizes)])
    return status


if __name__ == "__main__":
    sys.exit(main())
