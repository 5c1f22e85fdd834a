"""Grid and landmark variants of the 'large' (Nystrom) model, one QM9 split.

    python benchmarks/explore_nystrom.py --molecules 110000 --size 10000 \
        --variants '[{"widths": [2, 4, 8, 16, 32], "regs": [1e-8, 1e-7, 1e-6, 1e-5, 1e-4], "landmarks": 2000}]'
    python benchmarks/explore_nystrom.py --descriptor density --size 100000 \
        --variants '[{"widths": [2, 4], "regs": [1e-6], "landmarks": 12000}]'

For each variant (widths in median distances: between same-element atoms for 'atoms', between
molecules for a global descriptor; regularisations; landmarks: atoms per element for 'atoms',
molecules otherwise), fits the cross-validated Nystrom model on one training draw and prints one
JSON line: test MAE (kcal/mol, 10,000 held-out molecules), the chosen width and regularisation,
wall and CPU seconds of the fit, and the cross-validated MAE of every grid point (rows: widths,
columns: regularisations), so a recipe grid can be checked for choices on its edge.

Data: QM9 atomization energies from U0 (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np

from molinv.descriptors.store import FeatureStore
from molinv.evaluation.curves import test_split, training_draw
from molinv.molecules.qm9 import load_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import make_descriptor, make_regressor, model_inputs


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--molecules", type=int, default=None, help="QM9 sample size (default: all)")
    parser.add_argument("--size", type=int, default=10000, help="training molecules")
    parser.add_argument("--test-size", type=int, default=10000)
    parser.add_argument("--descriptor", default="atoms", help="descriptor recipe name (kernel as the 'large' recipe's)")
    parser.add_argument("--components", type=int, default=128, help="projection components of 'atoms'")
    parser.add_argument("--variants", required=True,
                        help='JSON list of {"widths": [...], "regs": [...], "landmarks": N}')
    parser.add_argument("--cache", default="benchmarks/results/feature_cache")
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    molecules = load_qm9(n=args.molecules, seed=0)
    energies = np.array([atoms.info["atomization_energy"] for atoms in molecules])
    overrides = {"n_components": args.components} if args.descriptor == "atoms" else {}
    descriptor = make_descriptor(args.descriptor, n_jobs=args.jobs, progress=True, **overrides).fit(molecules)
    inputs = model_inputs(descriptor, molecules, FeatureStore(args.cache))
    test, pool = test_split(len(energies), args.test_size, 0)
    train = training_draw(pool, args.size, 0, 0)
    for variant in json.loads(args.variants):
        # The 'large' recipe (kernel and scaling per descriptor) with this variant's grid and landmarks.
        model = make_regressor("large", descriptor.per_atom, progress=False, descriptor=args.descriptor,
                               landmarks=variant["landmarks"])
        model.set_params(widths=variant["widths"], regularizations=variant["regs"],
                         search_size=variant.get("search_size"), predictive_std=False)
        wall, cpu = time.perf_counter(), time.process_time()
        model.fit(inputs[train], energies[train])
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        mae = convert_energy(float(np.mean(np.abs(model.predict(inputs[test]) - energies[test]))), "eV", "kcal/mol")
        print(json.dumps({**variant, "descriptor": args.descriptor, "size": args.size, "mae_kcal/mol": round(mae, 4),
                          "width_units": round(model.width_ / model.width_unit_value_, 3),
                          "regularization": model.regularization_, "fit_s": round(wall), "fit_cpu_s": round(cpu),
                          "cv_mae_kcal/mol": np.round(convert_energy(model.cv_mae_, "eV", "kcal/mol"), 3).tolist()}),
              flush=True)


if __name__ == "__main__":
    main()
