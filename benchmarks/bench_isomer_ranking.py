"""Ranking held-out C7H10O2 isomers of QM9 by predicted atomization energy (from U0).

    python benchmarks/bench_isomer_ranking.py --train 10000 --isomers 6094 --model large \
        --atom-components 128 --jobs 2

Training molecules are drawn from QM9 without any C7H10O2 isomer; --isomers of the
6,094 C7H10O2 isomers are ranked by the model and compared with QM9's order by
Spearman rank correlation (scipy.stats.spearmanr) and the MAE on them.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import stats

from molinv.evaluation.curves import chosen_hyperparameters
from molinv.molecules.qm9 import open_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import EnergyModel, make_descriptor, make_regressor


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--train", type=int, default=10000)
    parser.add_argument("--isomers", type=int, default=1000)
    parser.add_argument("--descriptor", default="atoms")
    parser.add_argument("--model", default="kernel")
    parser.add_argument("--atom-components", type=int, default=None,
                        help="project the 'atoms' vectors on this many principal directions per element")
    parser.add_argument("--jobs", type=int, default=1, help="processes for describing")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    qm9 = open_qm9()
    counts = qm9.element_counts()
    is_isomer = (counts["C"] == 7) & (counts["H"] == 10) & (counts["O"] == 2) & (counts["N"] == 0) & (counts["F"] == 0)
    rng = np.random.default_rng(args.seed)
    train = qm9.molecules(rng.choice(np.flatnonzero(~is_isomer), args.train, replace=False))
    isomers = qm9.molecules(rng.choice(np.flatnonzero(is_isomer), args.isomers, replace=False))
    overrides = {"n_components": args.atom_components} if args.atom_components is not None else {}
    descriptor = make_descriptor(args.descriptor, n_jobs=args.jobs, **overrides)
    model = EnergyModel(descriptor, make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor))
    started = time.perf_counter()
    model.fit(train, [m.info["atomization_energy"] for m in train])
    fitted = time.perf_counter() - started
    reference = np.array([m.info["atomization_energy"] for m in isomers])
    predicted = model.predict(isomers)
    rho = stats.spearmanr(reference, predicted).statistic
    mae = convert_energy(float(np.abs(predicted - reference).mean()), "eV", "kcal/mol")
    spread = convert_energy(float(reference.std()), "eV", "kcal/mol")
    print(f"{args.descriptor} + {args.model}, {args.train} training molecules (fit {fitted:.0f} s), "
          f"{args.isomers} held-out C7H10O2 isomers:")
    print(f"  Spearman rank correlation {rho:.3f}; MAE {mae:.2f} kcal/mol; spread of the isomers {spread:.1f} kcal/mol")
    chosen = chosen_hyperparameters(model.regressor_)
    if chosen:
        print("  hyperparameters: " + ", ".join(f"{k}={v:g}" for k, v in chosen.items()))


if __name__ == "__main__":
    main()
