"""Benchmark of the energy models (timings are ratios within one run; machines are noisy).

1. Cross-validated kernel ridge: molinv's KernelRidgeCV against scikit-learn's GridSearchCV over
   KernelRidge, same features, folds (KFold, fixed seed), grid and scoring (neg MAE); reports
   both times, the ratio and whether the chosen hyperparameters agree.
2. Cost of one eigendecomposition in Cholesky factorisations (the solver choice's constant).
3. Atom-by-atom kernel in float32 against float64: time ratio and error, on QM9 atom features.
4. Optional (--nystrom-n): Nystrom ridge with the atom-by-atom kernel on many QM9 molecules:
   fit time, held-out MAE and peak memory.

    python benchmarks/bench_models.py --n 2000 --features qm9 --threads 1
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np
import scipy.linalg
from sklearn.kernel_ridge import KernelRidge
from sklearn.model_selection import GridSearchCV, KFold
from threadpoolctl import threadpool_limits

from molinv.models import ElementBaseline, KernelRidgeCV, NystromRidge
from molinv.models.kernels import AtomwiseKernel


def coulomb_eigenvalues(molecules, size: int = 29) -> np.ndarray:
    """Sorted Coulomb-matrix eigenvalues (Rupp et al., PRL 108, 058301, 2012), Z^2.4/2 and Z_i Z_j / r
    with r in Angstrom, by decreasing magnitude, zero-padded to ``size``."""
    result = np.zeros((len(molecules), size))
    for row, atoms in enumerate(molecules):
        charges = atoms.numbers.astype(float)
        distances = np.linalg.norm(atoms.positions[:, None] - atoms.positions[None], axis=-1)
        np.fill_diagonal(distances, 1.0)
        matrix = np.outer(charges, charges) / distances
        np.fill_diagonal(matrix, 0.5 * charges**2.4)
        eigenvalues = np.linalg.eigvalsh(matrix)
        result[row, : len(eigenvalues)] = eigenvalues[np.argsort(-np.abs(eigenvalues))]
    return result


def global_features(kind: str, n: int, dim: int, seed: int):
    if kind == "random":
        rng = np.random.default_rng(seed)
        X = rng.normal(size=(n, dim)) * np.linspace(0.2, 3.0, dim)
        return X, np.sin(X[:, 0]) + 0.1 * X[:, 1] ** 2 + 0.05 * rng.normal(size=n)
    from molinv.molecules.qm9 import load_qm9

    molecules = load_qm9(n=n, seed=seed)
    return coulomb_eigenvalues(molecules), np.array([a.info["atomization_energy"] for a in molecules])


def bench_cross_validation(X, y, kernel: str, folds: int, seed: int):
    spread = np.median(np.abs(X - X.mean(axis=0)).sum(axis=1)) if kernel == "laplacian" else np.sqrt(np.sum(X.var(axis=0)))
    widths = spread * np.array([0.25, 0.5, 1.0, 2.0, 4.0])
    regularizations = [1e-10, 1e-8, 1e-6, 1e-4, 1e-2, 1.0]
    splitter = KFold(folds, shuffle=True, random_state=seed)
    start = time.perf_counter()
    ours = KernelRidgeCV(kernel, widths=tuple(widths), regularizations=tuple(regularizations), cv=splitter,
                         baseline=None, predictive_std=False, progress=False).fit(X, y)
    ours_time = time.perf_counter() - start
    gammas = 1.0 / widths if kernel == "laplacian" else 1.0 / (2.0 * widths**2)
    start = time.perf_counter()
    search = GridSearchCV(KernelRidge(kernel="laplacian" if kernel == "laplacian" else "rbf"),
                          {"alpha": regularizations, "gamma": list(gammas)}, cv=splitter,
                          scoring="neg_mean_absolute_error").fit(X, y)
    sklearn_time = time.perf_counter() - start
    chosen_gamma = 1.0 / ours.width_ if kernel == "laplacian" else 1.0 / (2.0 * ours.width_**2)
    agree = np.isclose(chosen_gamma, search.best_params_["gamma"], rtol=1e-12) and ours.regularization_ == search.best_params_["alpha"]
    print(f"cross-validation, {kernel} kernel, n={len(y)}, d={X.shape[1]}, {folds} folds, {len(widths)} widths x {len(regularizations)} regularisations")
    print(f"  molinv KernelRidgeCV (solver {ours.solver_}): {ours_time:8.2f} s   best MAE {ours.cv_mae_.min():.6g}")
    print(f"  sklearn GridSearchCV(KernelRidge):   {sklearn_time:8.2f} s   best MAE {-search.best_score_:.6g}")
    print(f"  speed-up {sklearn_time / ours_time:.1f}x; same choice: {bool(agree)} "
          f"(width {ours.width_:.4g}, lambda {ours.regularization_:g}; sklearn gamma {search.best_params_['gamma']:.4g}, "
          f"alpha {search.best_params_['alpha']:g})")


def bench_eigen_to_cholesky(n: int, seed: int):
    rng = np.random.default_rng(seed)
    factor = rng.normal(size=(n, n))
    matrix = factor @ factor.T + n * np.eye(n)
    start = time.perf_counter()
    for _ in range(3):
        scipy.linalg.cholesky(matrix, lower=True)
    cholesky_time = (time.perf_counter() - start) / 3
    start = time.perf_counter()
    scipy.linalg.eigh(matrix)
    eigen_time = time.perf_counter() - start
    print(f"eigendecomposition / Cholesky at n={n}: {eigen_time / cholesky_time:.1f}x "
          f"({eigen_time:.3f} s / {cholesky_time:.4f} s)")


def qm9_atom_features(n: int, seed: int):
    """QM9 atomization energies (eV) and the test suite's radial atom descriptor (same features as the test)."""
    from molinv.molecules.qm9 import load_qm9

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from tests.test_models_qm9 import radial_features

    molecules = load_qm9(n=n, seed=seed)
    return radial_features(molecules), np.array([a.info["atomization_energy"] for a in molecules])


def bench_nystrom(n_train: int, n_landmarks: int, seed: int, n_test: int = 2000):
    features, energies = qm9_atom_features(n_train + n_test, seed)
    train, test = features[:n_train], features[n_train:]
    start = time.perf_counter()
    model = NystromRidge("atomwise", width=8.0, regularization=1e-3, n_landmarks=n_landmarks, dtype="float32",
                         progress=False).fit(train, energies[:n_train])
    fit_time = time.perf_counter() - start
    predicted, std = model.predict(test, return_std=True)
    errors = predicted - energies[n_train:]
    baseline = ElementBaseline().fit(train, energies[:n_train]).predict(test) - energies[n_train:]
    peak_gib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"Nystrom atomwise, {n_train} QM9 training molecules ({len(train.values)} atoms), {n_landmarks} landmarks "
          f"per element: fit {fit_time:.1f} s (with std calibration), held-out MAE {np.mean(np.abs(errors)):.3f} eV "
          f"(element baseline {np.mean(np.abs(baseline)):.3f} eV), 90% coverage {np.mean(np.abs(errors) <= 1.6449 * std):.3f}, "
          f"peak memory {peak_gib:.2f} GiB")


def bench_atomwise_precision(n_train: int, n_test: int, seed: int):
    features, energies = qm9_atom_features(n_train + n_test, seed)
    train, test = features[:n_train], features[n_train:]
    widths = [1.0, 2.0, 4.0, 8.0]
    tables, times = {}, {}
    for dtype in ("float64", "float32"):
        kernel = AtomwiseKernel(dtype)
        start = time.perf_counter()
        tables[dtype, "train"] = kernel.table(train, train, widths)
        times[dtype, "train"] = time.perf_counter() - start
        start = time.perf_counter()
        tables[dtype, "test"] = kernel.table(test, train, widths)
        times[dtype, "test"] = time.perf_counter() - start
    print(f"atom-by-atom kernel on QM9, {n_train} training ({len(train.values)} atoms) and {n_test} test molecules "
          f"({len(test.values)} atoms), {len(widths)} widths")
    for part in ("train", "test"):
        print(f"  {part} kernel: float64 {times['float64', part]:.2f} s, float32 {times['float32', part]:.2f} s, "
              f"ratio {times['float64', part] / times['float32', part]:.2f}x")
    for i, width in enumerate(widths):
        exact, single = tables["float64", "test"].matrix(i), tables["float32", "test"].matrix(i)
        print(f"  width {width}: max |K32 - K64| / max K64 = {np.max(np.abs(single - exact)) / np.max(exact):.2e}, "
              f"max relative entry error {np.max(np.abs(single - exact) / np.maximum(exact, 1e-300)):.2e}")
    # Effect on predictions: kernel ridge on the element-baseline residual, solved by scikit-learn.
    baseline = ElementBaseline().fit(train, energies[:n_train])
    residual = energies[:n_train] - baseline.predict(train)
    i_width = widths.index(4.0)
    for regularization in (1e-1, 1e-2, 1e-3, 1e-4):
        predictions = {}
        for dtype in ("float64", "float32"):
            solver = KernelRidge(kernel="precomputed", alpha=regularization)
            solver.fit(tables[dtype, "train"].matrix(i_width), residual)
            predictions[dtype] = solver.predict(tables[dtype, "test"].matrix(i_width)) + baseline.predict(test)
        gap = np.abs(predictions["float32"] - predictions["float64"])
        mae = {d: np.mean(np.abs(p - energies[n_train:])) for d, p in predictions.items()}
        print(f"  width 4, lambda {regularization:g}: |E32 - E64| mean {gap.mean():.2e} max {gap.max():.2e} eV; "
              f"test MAE float64 {mae['float64']:.4f}, float32 {mae['float32']:.4f} eV")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--n", type=int, default=5000, help="molecules for the cross-validation benchmark")
    parser.add_argument("--features", choices=("random", "qm9"), default="qm9",
                        help="random vectors or QM9 Coulomb-matrix eigenvalues")
    parser.add_argument("--dim", type=int, default=29, help="feature length for --features random")
    parser.add_argument("--kernel", choices=("laplacian", "gaussian", "both"), default="both")
    parser.add_argument("--folds", type=int, default=5)
    parser.add_argument("--atomwise-train", type=int, default=2000)
    parser.add_argument("--atomwise-test", type=int, default=1000)
    parser.add_argument("--skip-atomwise", action="store_true")
    parser.add_argument("--nystrom-n", type=int, default=0, help="QM9 training molecules for the Nystrom run (0: skip)")
    parser.add_argument("--nystrom-landmarks", type=int, default=1000)
    parser.add_argument("--threads", type=int, default=None, help="BLAS threads (default: library default)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    with threadpool_limits(limits=args.threads, user_api="blas"):
        X, y = global_features(args.features, args.n, args.dim, args.seed)
        for kernel in (("laplacian", "gaussian") if args.kernel == "both" else (args.kernel,)):
            bench_cross_validation(X, y, kernel, args.folds, args.seed)
        bench_eigen_to_cholesky(int(args.n * (args.folds - 1) / args.folds), args.seed)
        if not args.skip_atomwise:
            bench_atomwise_precision(args.atomwise_train, args.atomwise_test, args.seed)
        if args.nystrom_n:
            bench_nystrom(args.nystrom_n, args.nystrom_landmarks, args.seed)


if __name__ == "__main__":
    main()
