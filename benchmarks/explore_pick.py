"""Fast exploration of picking strategies (issue 7): QM9, labels hidden until picked.

    OMP_NUM_THREADS=1 nice -n 19 python benchmarks/explore_pick.py --molecules 7000 --test-size 2000 \
        --seeds 0 1 2 --strategies random variance spread uncertain-4 mix --out explore.csv

Same split and seeds as ``bench_pick_loop.py --molecules 7000`` (test set: ``test_split`` seed 0;
round 0: the seed's random 100), but a lighter model path: the L1 distances between all
molecules (bonds descriptor) are computed once (cached in /work/cache/picking, not committed)
and kernel ridge (Laplacian, element baseline) is refitted from them every round with a FIXED
width and regularisation: ``--tune pool1000`` chooses them once by 5-fold CV on 1,000 random
pool molecules (labels outside the counted budget; the same model for every strategy, so only
the picking differs), ``--tune round0`` on each seed's round-0 set.

Strategies: random; uncertain-F (pick_batch, shortlist F); spread (spread_batch); variance
(variance_batch with the model's kernel, 1,000 reference molecules); variance-narrow (the same
with 1/16 of the model's width for the picking only); density (std times mean kernel value to
the reference sample, then pick_batch); mix (spread below 500 labels, variance after).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.linalg
from scipy.spatial.distance import cdist

from molinv.evaluation.curves import test_split
from molinv.models import KernelRidgeCV
from molinv.models.baseline import fit_element_contributions
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import KERNEL_REGULARIZATIONS, KERNEL_WIDTHS, make_descriptor, model_inputs
from molinv.labels.choose import pick_batch, spread_batch, variance_batch

CACHE = Path("/work/cache/picking")


def load(n, test_size):
    molecules = load_qm9(n=n, seed=0)
    y = np.array([m.info["atomization_energy"] for m in molecules])
    desc = make_descriptor("bonds").fit(molecules)
    inputs = model_inputs(desc, molecules)
    path = CACHE / f"l1_{n}.npy"
    if path.exists():
        dist = np.load(path)
    else:
        dist = np.empty((n, n), np.float32)
        for start in range(0, n, 500):
            dist[start:start + 500] = cdist(inputs.values[start:start + 500], inputs.values, "cityblock")
        np.save(path, dist)
    test, _ = test_split(n, test_size, seed=0)
    return inputs, y, dist, test


class Model:
    def __init__(self, dist, counts, y, width, reg):
        self.dist, self.counts, self.y, self.width, self.reg = dist, counts, y, width, reg

    def kernel(self, a, b):
        return np.exp(-self.dist[np.ix_(a, b)].astype(float) / self.width)

    def fit(self, train):
        self.train = train
        self.eps = fit_element_contributions(self.counts[train], self.y[train])
        K = self.kernel(train, train)
        K.flat[:: len(K) + 1] += self.reg
        self.L = scipy.linalg.cholesky(K, lower=True)
        self.alpha = scipy.linalg.cho_solve((self.L, True), self.y[train] - self.counts[train] @ self.eps)
        return self

    def predict(self, rows, std=False):
        cross = self.kernel(rows, self.train)
        e = cross @ self.alpha + self.counts[rows] @ self.eps
        if not std:
            return e
        red = scipy.linalg.solve_triangular(self.L, cross.T, lower=True)
        return e, np.sqrt(np.maximum(1.0 - np.sum(red**2, 0), 0) + self.reg)


def variance_pick(model, pool, k, reference_size, seed, r, width_factor=1.0):
    reference = np.random.default_rng([seed, r, 7]).choice(len(pool), min(reference_size, len(pool)), replace=False)
    picker = model if width_factor == 1.0 else Model(model.dist, model.counts, model.y, model.width * width_factor,
                                                      model.reg).fit(model.train)
    known = scipy.linalg.solve_triangular(picker.L, picker.kernel(model.train, pool), lower=True)
    kernel = lambda rows, cols: picker.kernel(pool[rows], pool[cols])
    return pool[variance_batch(kernel, np.ones(len(pool)), known, k, picker.reg, reference)]


def run(args):
    inputs, y, dist, test = load(args.molecules, args.test_size)
    counts = inputs.counts
    pool_all = np.setdiff1d(np.arange(len(y)), test)
    def tuned(rows):
        cv = KernelRidgeCV(widths=KERNEL_WIDTHS, regularizations=KERNEL_REGULARIZATIONS, width_unit="median",
                           predictive_std=False).fit(inputs[rows], y[rows])
        print(f"CV on {len(rows)}: width {cv.width_:.1f} ({cv.width_ / cv.width_unit_value_:g} median), "
              f"reg {cv.regularization_:g}", flush=True)
        return cv.width_, cv.regularization_

    if args.tune == "pool1000":
        width, reg = tuned(np.random.default_rng(12345).choice(pool_all, 1000, replace=False))
    rows = []
    for seed in args.seeds:
        start = np.random.default_rng([seed, 0]).choice(pool_all, args.sizes[0], replace=False)
        if args.tune == "round0":
            width, reg = tuned(start)
        for strategy in args.strategies:
            tic = time.perf_counter()
            labelled = start
            for r, size in enumerate(args.sizes):
                if r > 0:
                    k = size - len(labelled)
                    pool = np.setdiff1d(pool_all, labelled)
                    if strategy == "random":
                        new = np.random.default_rng([seed, r]).choice(pool, k, replace=False)
                    elif strategy.startswith("uncertain"):
                        factor = float(strategy.split("-")[1])
                        _, s = model.predict(pool, std=True)
                        new = pool[pick_batch(s, inputs.values[pool], k, factor, inputs.values[labelled])]
                    elif strategy == "spread":
                        new = pool[spread_batch(inputs.values[pool], k, inputs.values[labelled])]
                    elif strategy == "variance" or (strategy == "mix" and len(labelled) >= 500):
                        new = variance_pick(model, pool, k, args.reference, seed, r)
                    elif strategy == "variance-narrow":
                        new = variance_pick(model, pool, k, args.reference, seed, r, width_factor=1 / 16)
                    elif strategy == "mix":
                        new = pool[spread_batch(inputs.values[pool], k, inputs.values[labelled])]
                    elif strategy == "density":
                        _, s = model.predict(pool, std=True)
                        ref = np.random.default_rng([seed, r, 7]).choice(pool, min(args.reference, len(pool)), replace=False)
                        density = model.kernel(pool, ref).mean(1)
                        new = pool[pick_batch(s * density, inputs.values[pool], k, 4.0, inputs.values[labelled])]
                    else:
                        raise ValueError(strategy)
                    labelled = np.concatenate([labelled, new])
                model = Model(dist, counts, y, width, reg).fit(labelled)
                err = convert_energy(model.predict(test) - y[test], "eV", "kcal/mol")
                rows.append({"strategy": strategy, "seed": seed, "size": size, "mae": np.mean(np.abs(err)),
                             "rmse": np.sqrt(np.mean(err**2)), "max": np.max(np.abs(err))})
            print(f"seed {seed} {strategy}: {time.perf_counter() - tic:.0f} s, "
                  f"MAE@{args.sizes[-1]} {rows[-1]['mae']:.2f}", flush=True)
    table = pd.DataFrame(rows)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    table.to_csv(args.out, index=False)
    print(table.pivot_table(index="size", columns="strategy", values="mae", aggfunc="mean").round(2))
    print(table.pivot_table(index="size", columns="strategy", values="mae", aggfunc="std").round(2))
    print(table.pivot_table(index="size", columns="strategy", values="max", aggfunc="mean").round(1))


if __name__ == "__main__":
    p = argparse.ArgumentParser()
    p.add_argument("--molecules", type=int, default=7000)
    p.add_argument("--test-size", type=int, default=2000)
    p.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 300, 500, 700, 1000, 1400, 2000])
    p.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    p.add_argument("--reference", type=int, default=1000)
    p.add_argument("--tune", choices=["pool1000", "round0"], default="pool1000")
    p.add_argument("--strategies", nargs="+", default=["random", "uncertain-4", "spread", "variance"])
    p.add_argument("--out", type=Path, default=CACHE / "explore.csv")
    run(p.parse_args())
