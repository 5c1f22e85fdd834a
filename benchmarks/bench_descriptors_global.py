"""Speed of every descriptor on QM9, accuracy of the grid terms, and (optionally) what they learn.

Speed: milliseconds per molecule of ``transform`` on a fixed random sample of
QM9 (Ramakrishnan, Dral, Rupp, von Lilienfeld, Sci. Data 1, 140022, 2014),
for the named recipes (molinv.recipes) plus two reference settings of the
global density invariants. Both the process CPU time (with BLAS limited to one
thread: the cost on one core) and the wall-clock time are reported; on a
shared machine the CPU time is the steadier of the two, so compare rows of one
run rather than runs. The time for all of QM9 on two cores is estimated from
the CPU time as ``130,831 molecules * ms / 2``.

Accuracy (``--accuracy-n``): the grid terms of the 'density' recipe against the
same descriptor on a fine grid (spacing 0.3 widths, margin 8 widths), as the
largest and median relative error over non-zero features, separately for
first-order powers and second order; the q = 2 first-order terms are exact
pair sums at every setting.

Learning (``--learn``): kernel ridge (width and regularisation by 5-fold
cross-validation, per-element baseline first) on ``--train`` molecules, MAE of
the QM9 U0 atomization energy in kcal/mol on ``--test`` other molecules, for
'density' and 'density-exact' on the same split, with the 'kernel' model
(Gaussian kernel, standardised features) and with the Laplacian kernel on raw
features (the recipe before issue 5).

Example::

    nice -n 5 python benchmarks/bench_descriptors_global.py --n 1000 --accuracy-n 4 --learn
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn.base import clone
from threadpoolctl import threadpool_limits
from tqdm.auto import tqdm

from molinv.descriptors.density import DensityScattering
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import make_descriptor, make_regressor, model_inputs

QM9_ELEMENTS = ("H", "C", "N", "O", "F")
#: Molecules in QM9 as distributed (README, data sources).
QM9_SIZE = 130_831
REFERENCE_GRID = dict(grid_spacing=0.3, padding=8.0)


def timed_settings() -> list[tuple[str, object, bool]]:
    """(label, descriptor, on the smaller grid sample) for every timed setting."""
    common = dict(elements=QM9_ELEMENTS, progress=False)
    return [
        ("counts", make_descriptor("counts", **common), False),
        ("coulomb (eigenvalues)", make_descriptor("coulomb", **common), False),
        ("coulomb-sorted", make_descriptor("coulomb-sorted", **common), False),
        ("bonds", make_descriptor("bonds", **common), False),
        ("density-exact (q=2, pair sums)", make_descriptor("density-exact", **common), False),
        ("density, first order only", make_descriptor("density", second_order=False, **common), False),
        ("density (recipe: 1st + 2nd order)", make_descriptor("density", **common), False),
        ("density, 2nd order on all channels", make_descriptor("density", second_order_channels=None, **common), True),
        ("density, fine grid 0.5/6, all channels",
         make_descriptor("density", second_order_channels=None, grid_spacing=0.5, padding=6.0, **common), True),
        ("atoms (per atom)", make_descriptor("atoms", **common), False),
    ]


def milliseconds_per_molecule(descriptor, molecules) -> tuple[float, float, int]:
    """(CPU ms, wall ms) per molecule and the number of features."""
    descriptor.transform(molecules[:2])  # caches (harmonic tables), first-call imports
    cpu, wall = time.process_time(), time.perf_counter()
    features = descriptor.transform(molecules)
    n_features = features.shape[1]
    return (1e3 * (time.process_time() - cpu) / len(molecules), 1e3 * (time.perf_counter() - wall) / len(molecules),
            n_features)


def grid_errors(descriptor, molecules) -> dict[str, tuple[float, float]]:
    """Largest and median relative error of the grid terms against the fine reference grid."""
    reference = DensityScattering(**{**descriptor.get_params(), **REFERENCE_GRID}).fit(molecules)
    expected = np.vstack([reference.transform([atoms]) for atoms in tqdm(molecules, desc="fine-grid reference")])
    got = descriptor.transform(molecules)
    names = descriptor.get_feature_names_out()
    groups = {"first order, q != 2": np.array([n.count("_j") == 1 and not n.startswith("q2_") for n in names]),
              "second order": np.array([n.count("_j") == 2 for n in names])}
    errors = {}
    for label, columns in groups.items():
        values, truth = got[:, columns], expected[:, columns]
        nonzero = np.abs(truth) > 1e-12 * np.abs(truth).max()
        relative = np.abs(values[nonzero] / truth[nonzero] - 1)
        errors[label] = (float(relative.max()), float(np.median(relative)))
    return errors


def learning_check(train, test) -> dict[tuple[str, str], float]:
    """MAE (kcal/mol) on the same split for 'density' and 'density-exact', each with the 'kernel'
    model (Gaussian kernel on standardised features) and with a Laplacian kernel on raw features."""
    energies = {name: np.array([atoms.info["atomization_energy"] for atoms in part])
                for name, part in (("train", train), ("test", test))}
    maes = {}
    for name in ("density", "density-exact"):
        recipe = make_regressor("kernel", per_atom=False, progress=False, descriptor=name)
        models = {"kernel model": recipe, "Laplacian, raw": clone(recipe).set_params(kernel="laplacian", scale=False)}
        descriptor = make_descriptor(name, elements=QM9_ELEMENTS, progress=True).fit(train)
        inputs = {part: model_inputs(descriptor, molecules) for part, molecules in (("train", train), ("test", test))}
        for label, model in models.items():
            predicted = clone(model).fit(inputs["train"], energies["train"]).predict(inputs["test"])
            maes[name, label] = convert_energy(np.mean(np.abs(predicted - energies["test"])), "eV", "kcal/mol")
    return maes


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1000, help="QM9 molecules timed (fixed seed)")
    parser.add_argument("--grid-n", type=int, default=100, help="molecules for the slow reference settings")
    parser.add_argument("--accuracy-n", type=int, default=0, help="molecules for the grid accuracy check (0: skip)")
    parser.add_argument("--learn", action="store_true", help="kernel ridge MAE for 'density' vs 'density-exact'")
    parser.add_argument("--train", type=int, default=1000)
    parser.add_argument("--test", type=int, default=2000)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)

    molecules = load_qm9(n=args.n, seed=args.seed)
    sizes = np.array([len(m) for m in molecules])
    print(f"QM9 sample: {len(molecules)} molecules, seed {args.seed}, atoms per molecule mean {sizes.mean():.1f}, "
          f"max {sizes.max()}")
    print("ms per molecule: CPU time with one BLAS thread (cost on one core) and wall clock; "
          f"all of QM9 ({QM9_SIZE:,} molecules) on 2 cores estimated from the CPU time")
    print(f"{'descriptor':40s} {'molecules':>9s} {'features':>8s} {'CPU ms':>8s} {'wall ms':>8s} {'QM9, 2 cores':>13s}")
    with threadpool_limits(limits=1):
        for label, descriptor, smaller in timed_settings():
            timed = molecules[: args.grid_n] if smaller else molecules
            descriptor.fit(molecules)
            cpu, wall, n_features = milliseconds_per_molecule(descriptor, timed)
            qm9_minutes = QM9_SIZE * cpu / 2 / 1e3 / 60
            print(f"{label:40s} {len(timed):9d} {n_features:8d} {cpu:8.2f} {wall:8.2f} {qm9_minutes:9.1f} min", flush=True)
        if args.accuracy_n:
            recipe = make_descriptor("density", elements=QM9_ELEMENTS, progress=False).fit(molecules)
            print(f"Grid terms of 'density' vs spacing 0.3, margin 8, on {args.accuracy_n} molecules "
                  "(largest / median relative error):")
            for label, (worst, median) in grid_errors(recipe, molecules[: args.accuracy_n]).items():
                print(f"  {label:22s} {worst:.1e} / {median:.1e}", flush=True)
        if args.learn:
            sample = load_qm9(n=args.train + args.test, seed=args.seed + 1)
            maes = learning_check(sample[: args.train], sample[args.train :])
            print(f"Kernel ridge, {args.train} training / {args.test} test molecules (seed {args.seed + 1}), "
                  "U0 atomization energy MAE:")
            for (name, label), mae in maes.items():
                print(f"  {name:14s} {label:24s} {mae:.2f} kcal/mol")


if __name__ == "__main__":
    main()
