"""Screening throughput (embedding, describing, predicting) and the cost of force-field geometries.

    python benchmarks/bench_screening.py --train 2000 --screen 2000 --geometry 500

1. Fits atoms + kernel (or --model) on --train QM9 molecules.
2. Screens --screen QM9 SMILES not used for training: ETKDG+MMFF94 embedding, describing and
   predicting timed separately; molecules per second and peak memory (ru_maxrss).
3. For --geometry held-out molecules, predicts the atomization energy from QM9's own
   B3LYP geometry and from the SMILES-embedded one, and reports both MAEs against QM9
   and their mean absolute difference (kcal/mol).

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Timings on a shared 2-core
machine are noisy; compare stages as ratios within one run.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np

from molinv.molecules import embed_smiles
from molinv.molecules.checks import MoleculeError
from molinv.molecules.qm9 import open_qm9
from molinv.molecules.units import convert_energy
from molinv.recipes import EnergyModel, make_descriptor, make_regressor


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--train", type=int, default=2000)
    parser.add_argument("--screen", type=int, default=2000)
    parser.add_argument("--geometry", type=int, default=500)
    parser.add_argument("--descriptor", default="atoms")
    parser.add_argument("--model", default="kernel")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    qm9 = open_qm9()
    order = np.random.default_rng(args.seed).permutation(len(qm9))
    train = qm9.molecules(order[: args.train])
    started = time.perf_counter()
    descriptor = make_descriptor(args.descriptor)
    model = EnergyModel(descriptor, make_regressor(args.model, descriptor.per_atom)).fit(
        train, [m.info["atomization_energy"] for m in train])
    print(f"fit {args.descriptor} + {args.model} on {args.train}: {time.perf_counter() - started:.1f} s")

    screened = order[args.train : args.train + args.screen]
    timings = {}
    started = time.perf_counter()
    embedded, failures = [], 0
    for smiles in qm9.arrays["smiles"][screened]:
        try:
            embedded.append(embed_smiles(str(smiles)))
        except MoleculeError:
            failures += 1
    timings["embed"] = time.perf_counter() - started
    started = time.perf_counter()
    inputs = model._inputs(embedded)
    timings["describe"] = time.perf_counter() - started
    started = time.perf_counter()
    model.regressor_.predict(inputs)
    timings["predict"] = time.perf_counter() - started
    total = sum(timings.values())
    print(f"screen {len(screened)} SMILES ({failures} failed to embed):")
    for stage, seconds in timings.items():
        print(f"  {stage:9s} {seconds:8.1f} s  {len(screened) / seconds:8.1f} mol/s  {seconds / total:6.1%} of the time")
    print(f"  end to end {len(screened) / total:.1f} mol/s; peak memory {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.2f} GiB")

    held_out = order[args.train + args.screen : args.train + args.screen + args.geometry]
    own = qm9.molecules(held_out)
    pairs = []
    for atoms in own:
        try:
            pairs.append((atoms, embed_smiles(atoms.info["smiles"])))
        except MoleculeError:
            pass
    reference = np.array([a.info["atomization_energy"] for a, _ in pairs])
    from_qm9 = model.predict([a for a, _ in pairs])
    from_embedding = model.predict([b for _, b in pairs])
    kcal = lambda v: convert_energy(v, "eV", "kcal/mol")  # noqa: E731
    print(f"geometry effect on {len(pairs)} held-out molecules (kcal/mol):")
    print(f"  MAE from QM9 geometries      {kcal(np.abs(from_qm9 - reference).mean()):.2f}")
    print(f"  MAE from embedded geometries {kcal(np.abs(from_embedding - reference).mean()):.2f}")
    print(f"  mean |difference|            {kcal(np.abs(from_embedding - from_qm9).mean()):.2f}")


if __name__ == "__main__":
    main()
