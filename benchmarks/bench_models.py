"""Benchmark of the energy models (timings are ratios within one run; machines are noisy).

1. Cross-validated kernel ridge: molinv's KernelRidgeCV against scikit-learn's GridSearchCV over
   KernelRidge, same features (a molinv descriptor of QM9, or random vectors), folds (KFold, fixed
   seed), grid and scoring (neg MAE); reports both times, the ratio, whether the chosen
   hyperparameters agree, and the time of the Cholesky factorisations alone (one per fold, width
   and regularisation: the floor of any exact search that factorises per value).
2. Cost of one eigendecomposition in Cholesky factorisations (the solver choice's constant).
3. Atom-by-atom kernel in float32 against float64 on the 'atoms' descriptor: time ratio and error.
4. Nystrom ridge with the atom-by-atom kernel on the 'atoms' descriptor of many QM9 molecules,
   described once into a memory-mapped file (--describe): a small hold-out search
   (--nystrom-choice) and the large run (--nystrom-n): fit time, held-out MAE, interval coverage,
   peak memory.

    python benchmarks/bench_models.py --n 5000 --features coulomb --kernel laplacian --skip-atomwise --threads 1
    python benchmarks/bench_models.py --skip-cv --skip-atomwise --describe 102000
    python benchmarks/bench_models.py --skip-cv --skip-atomwise --nystrom-choice 10000 \
        --nystrom-width 0.03 0.06 --nystrom-lambda 1e-5 1e-4
    python benchmarks/bench_models.py --skip-cv --skip-atomwise --nystrom-n 100000 \
        --nystrom-width 0.03 --nystrom-lambda 1e-4
"""

from __future__ import annotations

import argparse
import json
import threading
import time
from pathlib import Path

import numpy as np
import scipy.linalg
from sklearn.kernel_ridge import KernelRidge
from sklearn.model_selection import GridSearchCV, KFold
from threadpoolctl import threadpool_limits

from molinv.descriptors.base import AtomFeatures
from molinv.models import ElementBaseline, KernelRidgeCV, NystromRidge
from molinv.models.kernel_ridge import median_distance
from molinv.models.kernels import AtomwiseKernel, GlobalKernel
from molinv.molecules.units import ENERGY_UNITS

KCAL_MOL = ENERGY_UNITS["kcal/mol"]  # eV


def qm9_sample(n: int, seed: int):
    from molinv.molecules.qm9 import load_qm9

    molecules = load_qm9(n=n, seed=seed)
    return molecules, np.array([atoms.info["atomization_energy"] for atoms in molecules])


def global_features(kind: str, n: int, dim: int, seed: int):
    """Random vectors, or a molinv global descriptor (recipe name) of a QM9 sample with its
    atomization energies (eV)."""
    if kind == "random":
        rng = np.random.default_rng(seed)
        X = rng.normal(size=(n, dim)) * np.linspace(0.2, 3.0, dim)
        return X, np.sin(X[:, 0]) + 0.1 * X[:, 1] ** 2 + 0.05 * rng.normal(size=n)
    from molinv.recipes import make_descriptor

    molecules, energies = qm9_sample(n, seed)
    return make_descriptor(kind).fit(molecules).transform(molecules), energies


class Stopwatch:
    """Wall-clock and CPU time (this process, all threads) of a block. On a shared machine the
    CPU time is the fairer measure of work: other jobs stretch the wall clock unevenly."""

    def __enter__(self):
        self._wall, self._cpu = time.perf_counter(), time.process_time()
        return self

    def __exit__(self, *exc):
        self.wall, self.cpu = time.perf_counter() - self._wall, time.process_time() - self._cpu

    def __str__(self):
        return f"{self.wall:8.2f} s wall, {self.cpu:8.2f} s CPU"


def bench_cross_validation(X, y, kernel: str, folds: int, seed: int):
    spread = np.median(np.abs(X - X.mean(axis=0)).sum(axis=1)) if kernel == "laplacian" else np.sqrt(np.sum(X.var(axis=0)))
    widths = spread * np.array([0.25, 0.5, 1.0, 2.0, 4.0])
    regularizations = [1e-10, 1e-8, 1e-6, 1e-4, 1e-2, 1.0]
    splitter = KFold(folds, shuffle=True, random_state=seed)
    print(f"cross-validation, {kernel} kernel, n={len(y)}, d={X.shape[1]}, {folds} folds, {len(widths)} widths x "
          f"{len(regularizations)} regularisations", flush=True)
    with Stopwatch() as ours_time:
        ours = KernelRidgeCV(kernel, widths=tuple(widths), regularizations=tuple(regularizations), cv=splitter,
                             baseline=None, predictive_std=False, progress=False).fit(X, y)
    print(f"  molinv KernelRidgeCV (solver {ours.solver_}): {ours_time}   best MAE {ours.cv_mae_.min():.6g}", flush=True)
    gammas = 1.0 / widths if kernel == "laplacian" else 1.0 / (2.0 * widths**2)
    with Stopwatch() as sklearn_time:
        search = GridSearchCV(KernelRidge(kernel="laplacian" if kernel == "laplacian" else "rbf"),
                              {"alpha": regularizations, "gamma": list(gammas)}, cv=splitter,
                              scoring="neg_mean_absolute_error").fit(X, y)
    print(f"  sklearn GridSearchCV(KernelRidge):   {sklearn_time}   best MAE {-search.best_score_:.6g}", flush=True)
    # The floor of any exact search: one Cholesky factorisation per fold, width and regularisation.
    first_train = next(splitter.split(X))[0]
    n_train = len(first_train)
    matrix = GlobalKernel(kernel).table(X[first_train], X[first_train], [widths[2]]).matrix(0)
    matrix.flat[:: n_train + 1] += 1e-2
    with Stopwatch() as one:
        scipy.linalg.cholesky(matrix.T, lower=True, overwrite_a=True, check_finite=False)
    count = folds * len(widths) * len(regularizations)
    print(f"  {count} Cholesky factorisations at n={n_train} alone (one timed, times {count}): "
          f"{one.wall * count:8.2f} s wall, {one.cpu * count:8.2f} s CPU (the floor of per-value factorisation; "
          f"sklearn / floor = {sklearn_time.cpu / (one.cpu * count):.1f}x in CPU time)")
    chosen_gamma = 1.0 / ours.width_ if kernel == "laplacian" else 1.0 / (2.0 * ours.width_**2)
    agree = np.isclose(chosen_gamma, search.best_params_["gamma"], rtol=1e-12) and ours.regularization_ == search.best_params_["alpha"]
    print(f"  speed-up {sklearn_time.wall / ours_time.wall:.1f}x wall, {sklearn_time.cpu / ours_time.cpu:.1f}x CPU; "
          f"same choice: {bool(agree)} (width {ours.width_:.4g}, lambda {ours.regularization_:g}; "
          f"sklearn gamma {search.best_params_['gamma']:.4g}, alpha {search.best_params_['alpha']:g})", flush=True)


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
    """QM9 atomization energies (eV) and the 'atoms' descriptor (AtomWaveletInvariants, default settings)."""
    from molinv.recipes import make_descriptor

    molecules, energies = qm9_sample(n, seed)
    return make_descriptor("atoms").fit(molecules).transform(molecules), energies


def atom_descriptor_file(n: int, seed: int, folder: Path, chunk_size: int = 1000):
    """Describe the QM9 sample (n, seed) with the 'atoms' descriptor into ``folder`` once:
    float32 atom vectors in values.npy (memory-mapped later, as the full set does not fit in
    memory: 100,000 molecules are ~1.8 million atom vectors of 2,325 numbers), numbers.npy,
    offsets.npy and energies.npy (eV). Resumable: done.json counts the molecules written."""
    from tqdm.auto import tqdm

    from molinv.molecules.qm9 import load_qm9
    from molinv.recipes import make_descriptor

    molecules = load_qm9(n=n, seed=seed)
    folder.mkdir(parents=True, exist_ok=True)
    descriptor = make_descriptor("atoms").fit(molecules)
    offsets = np.concatenate([[0], np.cumsum([len(atoms) for atoms in molecules])])
    np.save(folder / "offsets.npy", offsets)
    np.save(folder / "numbers.npy", np.concatenate([atoms.numbers for atoms in molecules]))
    np.save(folder / "energies.npy", np.array([atoms.info["atomization_energy"] for atoms in molecules]))
    (folder / "settings.json").write_text(json.dumps({"n": n, "seed": seed, **descriptor.settings()}, default=str))
    shape = (int(offsets[-1]), descriptor.n_features_)
    done_file = folder / "done.json"
    done = json.loads(done_file.read_text())["molecules"] if done_file.exists() else 0
    mode = "r+" if done else "w+"
    values = np.lib.format.open_memmap(folder / "values.npy", mode=mode, dtype=np.float32, shape=shape)
    with tqdm(total=n, initial=done, unit="mol", desc="describe atoms") as bar:
        for start in range(done, n, chunk_size):
            stop = min(start + chunk_size, n)
            values[offsets[start] : offsets[stop]] = descriptor.transform(molecules[start:stop]).values
            values.flush()
            done_file.write_text(json.dumps({"molecules": stop}))
            bar.update(stop - start)
    return folder


def open_atom_descriptor_file(folder: Path):
    """The AtomFeatures written by :func:`atom_descriptor_file` (values memory-mapped, read-only) and energies."""
    done = json.loads((folder / "done.json").read_text())["molecules"]
    offsets = np.load(folder / "offsets.npy")[: done + 1]
    values = np.load(folder / "values.npy", mmap_mode="r")[: offsets[-1]]
    numbers = np.load(folder / "numbers.npy")[: offsets[-1]]
    return AtomFeatures(values, numbers, offsets, (1, 6, 7, 8, 9)), np.load(folder / "energies.npy")[:done]


class MemoryWatch:
    """Peak resident memory of this process, sampled every 0.2 s from /proc/self/status (Linux):
    anonymous (arrays) and file-backed (pages of memory-mapped descriptor files, which the
    system can drop) separately, and their sum."""

    def __init__(self):
        self.peak = {"RssAnon": 0, "RssFile": 0, "VmRSS": 0}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _sample(self):
        for line in Path("/proc/self/status").read_text().splitlines():
            key, _, value = line.partition(":")
            if key in self.peak:
                self.peak[key] = max(self.peak[key], int(value.split()[0]) * 1024)

    def _run(self):
        while not self._stop.wait(0.2):
            self._sample()

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self._sample()

    def summary(self) -> str:
        gib = {key: value / 2**30 for key, value in self.peak.items()}
        return (f"peak memory {gib['VmRSS']:.2f} GiB resident, of which arrays {gib['RssAnon']:.2f} GiB and "
                f"memory-mapped descriptor file {gib['RssFile']:.2f} GiB")


def nystrom_holdout(train, train_y, test, test_y, width, regularization, n_landmarks, predictive_std=True):
    model = NystromRidge("atomwise", width=width, regularization=regularization, n_landmarks=n_landmarks,
                         dtype="float32", predictive_std=predictive_std, progress=True)
    start = time.perf_counter()
    model.fit(train, train_y)
    fit_time = time.perf_counter() - start
    if predictive_std:
        predicted, std = model.predict(test, return_std=True)
    else:
        predicted, std = model.predict(test), None
    errors = predicted - test_y
    coverage = np.nan if std is None else np.mean(np.abs(errors) <= 1.6448536269514722 * std)
    return fit_time, np.mean(np.abs(errors)) / KCAL_MOL, coverage, model


def bench_nystrom_choice(folder: Path, n_train: int, n_validation: int, widths, regularizations, n_landmarks: int):
    """Small hold-out search for the Nystrom width and regularisation on the first molecules of the
    descriptor file (training part only; the test molecules of bench_nystrom are the file's last ones)."""
    features, energies = open_atom_descriptor_file(folder)
    train, validation = features[:n_train], features[n_train : n_train + n_validation]
    for width in widths:
        for regularization in regularizations:
            fit_time, mae, _, _ = nystrom_holdout(train, energies[:n_train], validation,
                                                   energies[n_train : n_train + n_validation], width, regularization,
                                                   n_landmarks, predictive_std=False)
            print(f"Nystrom choice, {n_train} training / {n_validation} validation molecules, {n_landmarks} landmarks "
                  f"per element: width {width:g}, lambda {regularization:g}: validation MAE {mae:.3f} kcal/mol "
                  f"(fit {fit_time:.0f} s)", flush=True)


def bench_nystrom(folder: Path, n_train: int, n_test: int, width: float, regularization: float, n_landmarks: int):
    """Nystrom ridge with the atom-by-atom kernel on the 'atoms' descriptor of ``n_train`` QM9 molecules
    (descriptors already computed, memory-mapped), tested on the file's last ``n_test`` molecules."""
    features, energies = open_atom_descriptor_file(folder)
    if n_train + n_test > len(energies):
        raise SystemExit(f"{folder} holds {len(energies)} described molecules; {n_train} + {n_test} asked")
    # The training part as views of the mapped file (indexing AtomFeatures copies the rows).
    end = features.offsets[n_train]
    train = AtomFeatures(features.values[:end], features.numbers[:end], features.offsets[: n_train + 1], features.elements)
    test = features[len(energies) - n_test :]
    train_y, test_y = energies[:n_train], energies[len(energies) - n_test :]
    with MemoryWatch() as memory:
        fit_time, mae, coverage, model = nystrom_holdout(train, train_y, test, test_y, width, regularization, n_landmarks)
    baseline = ElementBaseline().fit(train, train_y).predict(test) - test_y
    print(f"Nystrom atomwise on 'atoms' ({train.values.shape[1]} numbers per atom), {n_train} QM9 training molecules "
          f"({len(train.values)} atoms), {n_landmarks} landmarks per element (rank {model.projection_shapes_[:, 1].sum()}), "
          f"width {width:g}, lambda {regularization:g}: fit {fit_time:.0f} s (with std calibration); "
          f"{n_test} held-out molecules: MAE {mae:.3f} kcal/mol (element baseline {np.mean(np.abs(baseline)) / KCAL_MOL:.2f}), "
          f"90% interval coverage {coverage:.3f}; {memory.summary()}", flush=True)


def bench_atomwise_precision(n_train: int, n_test: int, seed: int):
    features, energies = qm9_atom_features(n_train + n_test, seed)
    train, test = features[:n_train], features[n_train:]
    # Widths in units of the median same-element atom distance (the 'kernel' recipe's unit);
    # cross-validation on QM9 chose about 2-4 of them.
    median = median_distance(train, AtomwiseKernel(), seed)
    widths = [median * multiple for multiple in (1.0, 2.0, 4.0, 8.0)]
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
        print(f"  width {width / median:g} x median: max |K32 - K64| / max K64 = {np.max(np.abs(single - exact)) / np.max(exact):.2e}, "
              f"max relative entry error {np.max(np.abs(single - exact) / np.maximum(exact, 1e-300)):.2e}")
    # Effect on predictions: kernel ridge on the element-baseline residual, solved by scikit-learn.
    baseline = ElementBaseline().fit(train, energies[:n_train])
    residual = energies[:n_train] - baseline.predict(train)
    i_width = 2
    for regularization in (1e-2, 1e-3, 1e-4, 1e-5):
        predictions = {}
        for dtype in ("float64", "float32"):
            solver = KernelRidge(kernel="precomputed", alpha=regularization)
            solver.fit(tables[dtype, "train"].matrix(i_width), residual)
            predictions[dtype] = solver.predict(tables[dtype, "test"].matrix(i_width)) + baseline.predict(test)
        gap = np.abs(predictions["float32"] - predictions["float64"])
        mae = {d: np.mean(np.abs(p - energies[n_train:])) for d, p in predictions.items()}
        print(f"  width 4 x median, lambda {regularization:g}: |E32 - E64| mean {gap.mean() / KCAL_MOL:.2e} "
              f"max {gap.max() / KCAL_MOL:.2e} kcal/mol; test MAE float64 {mae['float64'] / KCAL_MOL:.3f}, "
              f"float32 {mae['float32'] / KCAL_MOL:.3f} kcal/mol")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--n", type=int, default=5000, help="molecules for the cross-validation benchmark")
    parser.add_argument("--features", default="coulomb",
                        help="'random' vectors or a global descriptor recipe (coulomb, coulomb-sorted, bonds, ...) of QM9")
    parser.add_argument("--dim", type=int, default=29, help="feature length for --features random")
    parser.add_argument("--kernel", choices=("laplacian", "gaussian", "both"), default="both")
    parser.add_argument("--folds", type=int, default=5)
    parser.add_argument("--atomwise-train", type=int, default=2000)
    parser.add_argument("--atomwise-test", type=int, default=1000)
    parser.add_argument("--skip-atomwise", action="store_true")
    parser.add_argument("--skip-cv", action="store_true", help="skip the global cross-validation comparison")
    parser.add_argument("--describe", type=int, default=0,
                        help="first write the 'atoms' descriptor of this many QM9 molecules to --descriptor-file")
    parser.add_argument("--descriptor-file", default="benchmarks/results/feature_cache/qm9-atoms-102000-0")
    parser.add_argument("--nystrom-n", type=int, default=0,
                        help="QM9 training molecules for the Nystrom run on --descriptor-file (0: skip)")
    parser.add_argument("--nystrom-choice", type=int, default=0,
                        help="training molecules of a hold-out search over --nystrom-width x --nystrom-lambda (0: skip)")
    parser.add_argument("--nystrom-width", type=float, nargs="+", default=[0.03])
    parser.add_argument("--nystrom-lambda", type=float, nargs="+", default=[1e-4])
    parser.add_argument("--nystrom-landmarks", type=int, default=1000)
    parser.add_argument("--threads", type=int, default=None, help="BLAS threads (default: library default)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    if args.describe:
        atom_descriptor_file(args.describe, args.seed, Path(args.descriptor_file))
    with threadpool_limits(limits=args.threads, user_api="blas"):
        if not args.skip_cv:
            X, y = global_features(args.features, args.n, args.dim, args.seed)
            for kernel in (("laplacian", "gaussian") if args.kernel == "both" else (args.kernel,)):
                bench_cross_validation(X, y, kernel, args.folds, args.seed)
            bench_eigen_to_cholesky(int(args.n * (args.folds - 1) / args.folds), args.seed)
        if not args.skip_atomwise:
            bench_atomwise_precision(args.atomwise_train, args.atomwise_test, args.seed)
        if args.nystrom_choice:
            bench_nystrom_choice(Path(args.descriptor_file), args.nystrom_choice, 2000, args.nystrom_width,
                                 args.nystrom_lambda, args.nystrom_landmarks)
        if args.nystrom_n:
            bench_nystrom(Path(args.descriptor_file), args.nystrom_n, 2000, args.nystrom_width[0],
                          args.nystrom_lambda[0], args.nystrom_landmarks)


if __name__ == "__main__":
    main()
