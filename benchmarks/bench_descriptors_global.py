"""Speed of the global descriptors on QM9, and accuracy of the grid terms.

Speed: milliseconds per molecule of ``transform`` on a fixed random sample of
QM9 (Ramakrishnan, Dral, Rupp, von Lilienfeld, Sci. Data 1, 140022, 2014).
The grid-based settings of DensityScattering are timed on the first
``--grid-n`` molecules of the sample (they are about 100 times slower).

Accuracy (``--accuracy-n``): grid terms at each timed setting against the same
descriptor on a fine grid (spacing 0.3 widths, margin 8 widths), as the
largest and median relative error over non-zero features; the ``q = 2``
first-order terms are exact (pair sums) at every setting.

Example::

    python benchmarks/bench_descriptors_global.py --n 1000 --grid-n 100 --accuracy-n 3
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from molinv.descriptors.density import DensityScattering
from molinv.descriptors.reference import BagOfBonds, CoulombMatrix, ElementCounts
from molinv.molecules.qm9 import load_qm9

QM9_ELEMENTS = ("H", "C", "N", "O", "F")
REFERENCE_GRID = dict(grid_spacing=0.3, padding=8.0)


def descriptors(n_jobs: int) -> list[tuple[str, object, bool]]:
    """(label, descriptor, uses grids) for every timed setting."""
    common = dict(elements=QM9_ELEMENTS, n_jobs=n_jobs, progress=False)
    return [
        ("element counts", ElementCounts(**common), False),
        ("Coulomb matrix, eigenvalues", CoulombMatrix(**common), False),
        ("Coulomb matrix, sorted", CoulombMatrix(variant="sorted_matrix", **common), False),
        ("bag of bonds", BagOfBonds(**common), False),
        ("density, q=2 only (exact)", DensityScattering(powers=(2.0,), second_order=False, **common), False),
        ("density, 1st order", DensityScattering(second_order=False, **common), True),
        ("density, 1st+2nd order", DensityScattering(**common), True),
        ("density, 1st+2nd, spacing 0.7, margin 5",
         DensityScattering(grid_spacing=0.7, padding=5.0, **common), True),
        ("density, 1st+2nd, spacing 1.0, margin 4",
         DensityScattering(grid_spacing=1.0, padding=4.0, **common), True),
    ]


def milliseconds_per_molecule(descriptor, molecules) -> tuple[float, int]:
    start = time.perf_counter()
    features = descriptor.transform(molecules)
    return 1e3 * (time.perf_counter() - start) / len(molecules), features.shape[1]


def relative_errors(descriptor, molecules) -> tuple[float, float]:
    reference = descriptor.__class__(**{**descriptor.get_params(), **REFERENCE_GRID}).fit(molecules)
    expected = reference.transform(molecules)
    got = descriptor.transform(molecules)
    nonzero = np.abs(expected) > 1e-12 * np.abs(expected).max()
    errors = np.abs(got[nonzero] / expected[nonzero] - 1)
    return float(errors.max()), float(np.median(errors))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1000, help="QM9 molecules timed (fixed seed)")
    parser.add_argument("--grid-n", type=int, default=100, help="molecules timed for grid-based settings")
    parser.add_argument("--accuracy-n", type=int, default=0, help="molecules for the grid accuracy check (0: skip)")
    parser.add_argument("--n-jobs", type=int, default=1)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)

    molecules = load_qm9(n=args.n, seed=args.seed)
    sizes = np.array([len(m) for m in molecules])
    print(f"QM9 sample: {len(molecules)} molecules, seed {args.seed}, atoms per molecule mean {sizes.mean():.1f}, max {sizes.max()}")
    print(f"n_jobs={args.n_jobs}; timings are wall clock, ms per molecule")
    header = f"{'descriptor':44s} {'molecules':>9s} {'features':>8s} {'ms/mol':>9s}"
    if args.accuracy_n:
        header += f" {'max rel err':>11s} {'median':>8s}"
    print(header)
    for label, descriptor, uses_grids in descriptors(args.n_jobs):
        timed = molecules[: args.grid_n] if uses_grids else molecules
        descriptor.fit(molecules)
        milliseconds, n_features = milliseconds_per_molecule(descriptor, timed)
        line = f"{label:44s} {len(timed):9d} {n_features:8d} {milliseconds:9.2f}"
        if args.accuracy_n and uses_grids:
            worst, median = relative_errors(descriptor, molecules[: args.accuracy_n])
            line += f" {worst:11.1e} {median:8.1e}"
        print(line, flush=True)


if __name__ == "__main__":
    main()
