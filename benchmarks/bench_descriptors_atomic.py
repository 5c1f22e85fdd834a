"""Speed and accuracy of AtomWaveletInvariants on QM9.

Speed: milliseconds per molecule of ``transform`` on a fixed random sample of
QM9 (Ramakrishnan, Dral, Rupp, von Lilienfeld, Sci. Data 1, 140022, 2014).

Accuracy (``--learning``): a small kernel ridge regression check of QM9 U0
atomization energy, only to choose descriptor settings (the project's models
live in molinv.models). Per-element least-squares baseline (energy ~ sum of
element counts times fitted weights) is subtracted first; the residual is
fitted with the molecule kernel

    K(A, B) = sum_{i in A, k in B, Z_i = Z_k} k(x_i, x_k),

summing an atom kernel over same-element atom pairs, with
``k = exp(-|x_i - x_k|^2 / (2 w^2))`` ("gaussian") or ``(x_i . x_k)^zeta``
("power", for unit-length vectors). The width ``w`` (in multiples of the
median distance between atom vectors), ``zeta`` and the ridge ``lambda`` are
chosen on a separate validation set; MAE is reported on a separate test set.

Example::

    python benchmarks/bench_descriptors_atomic.py --n 1000
    python benchmarks/bench_descriptors_atomic.py --learning --sizes 1000,2000,4000
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
import scipy.linalg
import scipy.sparse

from molinv.descriptors.atomic import AtomWaveletInvariants
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy

QM9_ELEMENTS = ("H", "C", "N", "O", "F")


def descriptor_from_args(args) -> AtomWaveletInvariants:
    return AtomWaveletInvariants(
        n_scales=args.n_scales, min_width=args.min_width, max_width=args.max_width,
        max_degree=args.max_degree, atom_width=args.atom_width, cutoff=args.cutoff,
        scale_exponent=args.scale_exponent,
        cross_products=not args.moduli_only, normalize=args.normalize,
        elements=QM9_ELEMENTS, n_jobs=args.n_jobs, progress=False,
    )


def time_transform(descriptor, molecules) -> float:
    """Milliseconds per molecule for one ``transform`` call."""
    descriptor.fit(molecules[:1])
    start = time.perf_counter()
    descriptor.transform(molecules)
    return 1e3 * (time.perf_counter() - start) / len(molecules)


def element_counts(molecules) -> np.ndarray:
    numbers = [1, 6, 7, 8, 9]
    return np.array([[np.sum(atoms.numbers == z) for z in numbers] for atoms in molecules], float)


def molecule_kernels(features, train, rows, kernels, chunk=4000):
    """Molecule kernels ``K[rows, train]`` for each atom kernel in ``kernels``.

    Sums the atom kernel over same-element atom pairs; atom kernels are
    functions of (Gram block, squared norms of rows, squared norms of train).
    """
    train_part, row_part = features[train], features[rows]
    out = [np.zeros((len(rows), len(train))) for _ in kernels]  # float64: sums of many atom pairs
    for z in np.unique(train_part.numbers):
        tr_atoms = np.flatnonzero(train_part.numbers == z)
        row_atoms = np.flatnonzero(row_part.numbers == z)
        if len(row_atoms) == 0:
            continue
        x_train = train_part.values[tr_atoms].astype(np.float32)
        tr_mol = train_part.molecule_index()[tr_atoms]
        row_mol = row_part.molecule_index()[row_atoms]
        to_train = scipy.sparse.csr_matrix((np.ones(len(tr_atoms)), (np.arange(len(tr_atoms)), tr_mol)), shape=(len(tr_atoms), len(train)))
        norms_train = np.einsum("ij,ij->i", x_train, x_train)
        for start in range(0, len(row_atoms), chunk):
            part = slice(start, start + chunk)
            x_rows = row_part.values[row_atoms[part]].astype(np.float32)
            gram = x_rows @ x_train.T
            norms_rows = np.einsum("ij,ij->i", x_rows, x_rows)
            from_rows = scipy.sparse.csr_matrix((np.ones(len(x_rows)), (row_mol[part], np.arange(len(x_rows)))), shape=(len(rows), len(x_rows)))
            for target, kernel in zip(out, kernels):
                atom_kernel = kernel(gram, norms_rows, norms_train)
                target += from_rows @ (to_train.T @ atom_kernel.T).T
    return out


def median_distance(values, rng, sample=2000) -> float:
    picked = values[rng.choice(len(values), min(sample, len(values)), replace=False)]
    squared = np.sum(picked**2, 1)[:, None] + np.sum(picked**2, 1)[None, :] - 2 * picked @ picked.T
    return float(np.sqrt(np.median(np.maximum(squared[np.triu_indices(len(picked), 1)], 0.0))))


def kernel_family(width_scale: float, width_factors, zetas):
    kernels, names = [], []
    for factor in width_factors:
        w = factor * width_scale
        kernels.append(lambda g, a, b, w=w: np.exp(np.maximum(a[:, None] + b[None, :] - 2 * g, 0.0) * np.float32(-0.5 / w**2)))
        names.append(f"gaussian w={factor:g}*median")
    for zeta in zetas:
        kernels.append(lambda g, a, b, zeta=zeta: np.maximum(g, 0.0) ** np.float32(zeta))
        names.append(f"power zeta={zeta:g}")
    return kernels, names


def learning_curve(args, descriptor) -> list[dict]:
    sizes = sorted(int(s) for s in args.sizes.split(","))
    n_total = args.n_test + args.n_val + sizes[-1]
    molecules = load_qm9(n=n_total, seed=args.seed)
    # The sample comes back in QM9 index order (small molecules first); shuffle so that
    # test, validation and each nested training set are drawn from the same population.
    order = np.random.default_rng(args.seed).permutation(n_total)
    molecules = [molecules[i] for i in order]
    energies = np.array([atoms.info["atomization_energy"] for atoms in molecules])  # eV
    start = time.perf_counter()
    features = descriptor.fit(molecules[:1]).transform(molecules)
    describe_s = time.perf_counter() - start
    test = np.arange(args.n_test)
    val = np.arange(args.n_test, args.n_test + args.n_val)
    train_all = np.arange(args.n_test + args.n_val, n_total)
    rng = np.random.default_rng(args.seed)
    scale = median_distance(features.values, rng)
    kernels, names = kernel_family(scale, args.width_factors, args.zetas if args.normalize else [])
    rows = np.concatenate([train_all, val, test])
    start = time.perf_counter()
    blocks = molecule_kernels(features, train_all, rows, kernels)
    kernel_s = time.perf_counter() - start
    counts = element_counts(molecules)
    results = []
    for size in sizes:
        train = train_all[:size]
        weights, *_ = np.linalg.lstsq(counts[train], energies[train], rcond=None)
        residual = energies - counts @ weights
        best = None
        for name, block in zip(names, blocks):
            k_train = block[:size, :size]
            k_val = block[len(train_all) : len(train_all) + len(val), :size]
            k_test = block[len(train_all) + len(val) :, :size]
            for lam in args.ridges:
                try:
                    factor = scipy.linalg.cho_factor(k_train + lam * np.eye(size))
                except np.linalg.LinAlgError:
                    continue  # ridge too small for this kernel's rounding errors
                alpha = scipy.linalg.cho_solve(factor, residual[train])
                val_mae = np.mean(np.abs(k_val @ alpha - residual[val]))
                if best is None or val_mae < best["val_mae_eV"]:
                    test_mae = np.mean(np.abs(k_test @ alpha - residual[test]))
                    best = dict(kernel=name, ridge=lam, val_mae_eV=val_mae, test_mae_eV=test_mae)
        baseline_mae = np.mean(np.abs(residual[test]))
        row = dict(
            n_train=size, kernel=best["kernel"], ridge=best["ridge"],
            test_mae_kcal_mol=float(convert_energy(best["test_mae_eV"], "eV", "kcal/mol")),
            val_mae_kcal_mol=float(convert_energy(best["val_mae_eV"], "eV", "kcal/mol")),
            baseline_only_mae_kcal_mol=float(convert_energy(baseline_mae, "eV", "kcal/mol")),
        )
        results.append(row)
        print(json.dumps(row), flush=True)
    print(json.dumps(dict(n_features=descriptor.n_features_, describe_s=round(describe_s, 1), kernel_s=round(kernel_s, 1), median_distance=scale)))
    return results


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1000, help="molecules timed")
    parser.add_argument("--n-jobs", type=int, default=1)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--n-scales", type=int, default=6)
    parser.add_argument("--min-width", type=float, default=0.3, help="Angstrom")
    parser.add_argument("--max-width", type=float, default=4.0, help="Angstrom")
    parser.add_argument("--max-degree", type=int, default=4)
    parser.add_argument("--atom-width", type=float, default=0.3, help="Angstrom")
    parser.add_argument("--cutoff", type=float, default=None, help="Angstrom")
    parser.add_argument("--scale-exponent", type=float, default=3.0)
    parser.add_argument("--moduli-only", action="store_true")
    parser.add_argument("--normalize", action="store_true", help="unit-length atom vectors")
    parser.add_argument("--learning", action="store_true", help="run the kernel ridge accuracy check")
    parser.add_argument("--sizes", default="1000,2000,4000", help="training sizes, comma separated")
    parser.add_argument("--n-val", type=int, default=500)
    parser.add_argument("--n-test", type=int, default=1000)
    parser.add_argument("--width-factors", type=lambda s: [float(x) for x in s.split(",")], default=[1.5, 2.0, 3.0])
    parser.add_argument("--zetas", type=lambda s: [float(x) for x in s.split(",")], default=[2.0, 4.0])
    parser.add_argument("--ridges", type=lambda s: [float(x) for x in s.split(",")], default=[1e-6, 1e-5, 1e-4, 1e-3, 1e-2])
    args = parser.parse_args(argv)
    descriptor = descriptor_from_args(args)
    sample = load_qm9(n=args.n, seed=args.seed + 1)
    ms = time_transform(descriptor, sample)
    atoms = np.mean([len(a) for a in sample])
    print(json.dumps(dict(ms_per_molecule=round(ms, 2), n_molecules=args.n, mean_atoms=round(float(atoms), 1), n_jobs=args.n_jobs, n_features=descriptor.n_features_, params=descriptor.get_params())))
    if args.learning:
        learning_curve(args, descriptor)


if __name__ == "__main__":
    main()
