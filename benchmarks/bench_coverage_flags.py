"""How well the domain flags sort large prediction errors from small ones, with QM9's own energies.

    nice -n 5 python benchmarks/bench_coverage_flags.py --train 1000 --test 2000 --hold-out amide

A model is fitted on --train QM9 molecules that hold none of the --hold-out functional groups
(names of molinv.screening.coverage.FUNCTIONAL_GROUPS), then predicts --test other QM9
molecules, with and without those groups. For each flag (the chemistry coverage check, the
nearest-neighbour distance test, either) it reports how many test molecules it flags and its
precision and recall for |error| > --large kcal/mol against QM9's atomization energies (from
U0). Holding groups out of training stands in for molecules outside QM9, whose reference
energies would need DFT labels (not computed here).

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Prints one JSON object.
"""

from __future__ import annotations

import argparse
import json

import numpy as np

from molinv.molecules.qm9 import open_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening.coverage import chemistry_names
from molinv.screening.table import describable


def precision_recall(flagged: np.ndarray, large: np.ndarray) -> dict:
    hits = int(np.sum(flagged & large))
    return {"flagged": int(flagged.sum()), "precision": hits / flagged.sum() if flagged.any() else None,
            "recall": hits / large.sum() if large.any() else None}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--train", type=int, default=1000)
    parser.add_argument("--test", type=int, default=2000)
    parser.add_argument("--hold-out", nargs="+", default=["amide"])
    parser.add_argument("--descriptor", default="bonds")
    parser.add_argument("--model", default="kernel")
    parser.add_argument("--large", type=float, default=5.0, help="large error, kcal/mol")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    qm9 = open_qm9()
    pool = qm9.molecules(qm9.sample(3 * (args.train + args.test), seed=args.seed, elements=["H", "C", "N", "O", "F"]))
    held = np.array([bool(chemistry_names(m) & set(args.hold_out)) for m in pool])
    train = [m for m, h in zip(pool, held) if not h][: args.train]
    rest = [m for m, h in zip(pool, held) if h] + [m for m, h in zip(pool, held) if not h][args.train:]
    energies = np.array([m.info["atomization_energy"] for m in train])
    descriptor = make_descriptor(args.descriptor)
    model = EnergyModel(descriptor, make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor))
    model.fit(train, energies)
    test = [m for m in rest if not describable(model.descriptor_, m)][: args.test]
    assessed = model.assess(test)
    errors = np.abs(convert_energy(assessed["predicted"] - np.array([m.info["atomization_energy"] for m in test]),
                                   "eV", "kcal/mol"))
    large = errors > args.large
    coverage = np.array([bool(u) for u in assessed["unseen"]])
    distance = assessed["distance"] > model.applicability_.threshold_
    groups = np.array([bool(chemistry_names(m) & set(args.hold_out)) for m in test])
    print(json.dumps({
        "settings": vars(args), "test_molecules": len(test), "with_held_out_groups": int(groups.sum()),
        "large_errors": int(large.sum()),
        "mae_kcal_mol": {"all": float(errors.mean()), "with_held_out_groups": float(errors[groups].mean()),
                         "others": float(errors[~groups].mean())},
        "coverage": precision_recall(coverage, large), "distance": precision_recall(distance, large),
        "either": precision_recall(coverage | distance, large),
        "coverage_on_held_out_groups": precision_recall(coverage, groups),
    }, indent=1))


if __name__ == "__main__":
    main()
