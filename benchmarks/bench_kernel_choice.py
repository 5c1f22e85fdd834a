"""Kernel and feature scaling per global descriptor, compared by 5-fold cross-validation on QM9.

    nice -n 19 python benchmarks/bench_kernel_choice.py --sizes 1000 2000 \
        --descriptors bonds coulomb-sorted coulomb density \
        --cache benchmarks/results/feature_cache

For each training size, the training draw 0 of the learning-curve split (QM9 all molecules,
10,000 test molecules, seed 0: the split of bench_learning_curves.py; the test set is not
touched here) is described, and kernel ridge with the Laplacian and the Gaussian kernel, on raw
and on standardised features, is cross-validated (5 folds, per-element baseline first) on a
wide grid: widths 2^-3 to 2^10 median distances, regularisations 10^-12 to 1. Printed: one
Markdown row per setting with the best mean validation MAE of the atomization energy (U0,
kcal/mol), where it was found, whether that is on the grid edge, and the best MAE per width.
This is what chose ``GLOBAL_KERNEL_CHOICE`` in molinv/recipes.py.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from molinv.descriptors.store import FeatureStore
from molinv.evaluation.curves import test_split, training_draw
from molinv.models import KernelRidgeCV
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import make_descriptor, model_inputs

WIDTHS = tuple(2.0**k for k in range(-3, 11))
REGULARIZATIONS = tuple(10.0**k for k in range(-12, 1))
SETTINGS = {"laplacian-raw": ("laplacian", False), "gaussian-raw": ("gaussian", False),
            "laplacian-standardised": ("laplacian", True), "gaussian-standardised": ("gaussian", True)}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000])
    parser.add_argument("--descriptors", nargs="+", default=["bonds", "coulomb-sorted", "coulomb", "density"])
    parser.add_argument("--settings", nargs="+", default=list(SETTINGS), choices=list(SETTINGS))
    parser.add_argument("--test-size", type=int, default=10000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--cache", default=None, help="feature cache folder (optional)")
    args = parser.parse_args()
    molecules = load_qm9(None, args.seed)
    energies = np.array([atoms.info["atomization_energy"] for atoms in molecules])
    _, pool = test_split(len(energies), args.test_size, args.seed)
    store = FeatureStore(args.cache) if args.cache else None
    print("| descriptor | training molecules | kernel, features | CV MAE (kcal/mol) | width (median distances) "
          "| regularisation | on grid edge | best CV MAE per width 2^-3 ... 2^10 | CPU s |")
    print("|---|---|---|---|---|---|---|---|---|")
    for name in args.descriptors:
        descriptor = make_descriptor(name).fit(molecules)
        for size in args.sizes:
            train = training_draw(pool, size, 0, args.seed)
            X = model_inputs(descriptor, [molecules[i] for i in train], store)
            for label in args.settings:
                kernel, scale = SETTINGS[label]
                started = time.process_time()
                model = KernelRidgeCV(kernel, WIDTHS, REGULARIZATIONS, scale=scale, width_unit="median",
                                      solver="eigen", predictive_std=False, progress=False).fit(X, energies[train])
                cv = convert_energy(model.cv_mae_, "eV", "kcal/mol")
                i_width, i_reg = np.unravel_index(np.argmin(cv), cv.shape)
                edges = [what for what, i, n in (("width", i_width, len(WIDTHS)), ("regularisation", i_reg,
                                                 len(REGULARIZATIONS))) if i in (0, n - 1)]
                per_width = " ".join(f"{v:.2f}" for v in cv.min(axis=1))
                print(f"| `{name}` | {size:,} | {label} | {cv.min():.2f} | {WIDTHS[i_width]:g} | "
                      f"{REGULARIZATIONS[i_reg]:.0e} | {', '.join(edges) or 'no'} | {per_width} | "
                      f"{time.process_time() - started:.0f} |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
