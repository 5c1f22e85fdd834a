"""Accuracy and error bars on the screening route: QM9 molecules held out and given only as SMILES.

Each model is trained on one geometry route (QM9's B3LYP geometries, or geometries embedded
from the SMILES) and tested on the held-out molecules given both ways, through the same
prediction table that ``molinv predict`` writes. Reported per training route and test input:
MAE and median absolute error (kcal/mol), how many rows are ``ok`` / ``flagged``, the median
stated standard deviation, the share of ``ok`` rows inside their 90% interval, and isomer
ranking (Spearman within each formula with at least 8 test molecules, weighted by their count).

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014), U0 atomization energies::

    python benchmarks/bench_smiles_route.py --train 2000 --test 1000 --conformers 1 4
    python benchmarks/bench_smiles_route.py --train 10000 --test 2000 --model large --atom-components 128
"""

from __future__ import annotations

import argparse
import hashlib
import json
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

import molinv.molecules.embedding as embedding
from molinv.molecules.qm9 import open_qm9
from molinv.molecules.route import onto_embedded_route
from molinv.recipes import EnergyModel, make_descriptor, make_regressor
from molinv.screening import prediction_table

Z90 = 1.6448536269514722  # two-sided 90% interval of a normal distribution (scipy.stats.norm.ppf(0.95))
CACHE = Path(__file__).parent / "results" / "feature_cache"


def embedded(qm9, positions, conformers: int, jobs: int, label: str):
    """QM9 molecules on the embedded route, cached as positions per molecule (the same
    SMILES always embeds to the same geometry with the same RDKit and settings)."""
    settings = {**embedding.embedding_settings(), "conformers": conformers}
    digest = hashlib.sha256((json.dumps(settings, sort_keys=True) + positions.tobytes().hex()).encode()).hexdigest()
    key = f"{label}-{len(positions)}-{digest[:16]}"
    path = CACHE / f"embedded-{key}.npz"
    molecules = qm9.molecules(positions)
    for atoms in molecules:
        atoms.info.pop("frequencies", None)
    if path.is_file():
        stored = np.load(path, allow_pickle=False)
        moved = []
        for i, atoms in enumerate(molecules):
            if not stored["ok"][i]:
                moved.append(str(stored["reasons"][i]))
                continue
            atoms = atoms.copy()
            atoms.positions = stored["positions"][stored["offsets"][i]:stored["offsets"][i + 1]]
            atoms.numbers = stored["numbers"][stored["offsets"][i]:stored["offsets"][i + 1]]
            atoms.info["geometry_source"] = str(stored["sources"][i])
            moved.append(atoms)
        return moved
    embedding.CONFORMERS = conformers
    moved = onto_embedded_route(molecules, n_jobs=jobs, progress=True)
    ok = np.array([not isinstance(m, str) for m in moved])
    counts = [len(m) if not isinstance(m, str) else 0 for m in moved]
    CACHE.mkdir(parents=True, exist_ok=True)
    np.savez(path, ok=ok, offsets=np.concatenate([[0], np.cumsum(counts)]),
             positions=np.concatenate([m.positions for m in moved if not isinstance(m, str)]),
             numbers=np.concatenate([m.numbers for m in moved if not isinstance(m, str)]),
             sources=np.array([m.info["geometry_source"] if not isinstance(m, str) else "" for m in moved]),
             reasons=np.array([m if isinstance(m, str) else "" for m in moved]))
    return moved


def isomer_spearman(table: pd.DataFrame, truth_column: str, predicted_column: str, minimum: int = 8):
    weights, values = [], []
    for _, group in table.groupby("formula"):
        if len(group) >= minimum:
            values.append(spearmanr(group[truth_column], group[predicted_column]).statistic)
            weights.append(len(group))
    if not values:
        return np.nan, np.nan, 0
    return float(np.average(values, weights=weights)), float(np.min(values)), len(values)


def evaluate(model, molecules, truth_ev: dict, label: str) -> dict:
    usable = [m for m in molecules if not isinstance(m, str)]
    started = time.perf_counter()
    table = prediction_table(model, usable, unit="kcal/mol", target="atomization_energy", rank=False)
    seconds = time.perf_counter() - started
    table["truth_kcal"] = table["name"].map(truth_ev) * 23.060547830619026  # eV -> kcal/mol (ase.units)
    predicted = table["atomization_energy_kcal/mol"]
    table["error"] = (predicted - table["truth_kcal"]).abs()
    ok = table[table["status"] == "ok"]
    done = table[table["status"] != "failed"]
    inside = (ok["error"] <= Z90 * ok["std_kcal/mol"]).mean() if ok["std_kcal/mol"].notna().any() else np.nan
    rho, worst, n_formulas = isomer_spearman(done, "truth_kcal", "atomization_energy_kcal/mol")
    return {"test input": label, "rows": len(molecules), "ok": len(ok), "flagged": int((table["status"] == "flagged").sum()),
            "failed": int((table["status"] == "failed").sum()) + len(molecules) - len(usable),
            "MAE (predicted rows)": done["error"].mean(), "median error": done["error"].median(),
            "MAE (ok rows)": ok["error"].mean(), "median std (ok)": ok["std_kcal/mol"].median(),
            "90% interval covers (ok)": inside, "isomer Spearman": rho, "worst formula": worst,
            "formulas": n_formulas, "prediction s": seconds}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--train", type=int, default=2000)
    parser.add_argument("--test", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--descriptor", default="atoms")
    parser.add_argument("--model", default="kernel")
    parser.add_argument("--atom-components", type=int, default=None)
    parser.add_argument("--conformers", type=int, nargs="+", default=[1])
    parser.add_argument("--routes", nargs="+", default=["file", "embedded"], help="training routes")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--out", type=Path, default=Path(__file__).parent / "results" / "smiles_route")
    args = parser.parse_args()

    qm9 = open_qm9()
    positions = qm9.sample(args.train + args.test, seed=args.seed)
    train_positions, test_positions = positions[:args.train], positions[args.train:]
    truth = dict(zip(qm9.table(positions)["name"], qm9.atomization_energy()[positions]))
    dft_train, dft_test = qm9.molecules(train_positions), qm9.molecules(test_positions)
    rows = []
    for conformers in args.conformers:
        test_smiles = embedded(qm9, test_positions, conformers, args.jobs, f"test{args.seed}")
        for route in args.routes:
            if route == "file":
                if conformers != args.conformers[0]:
                    continue
                train = dft_train
            else:
                train = [m for m in embedded(qm9, train_positions, conformers, args.jobs, f"train{args.seed}")
                         if not isinstance(m, str)]
            overrides = {"n_components": args.atom_components} if args.atom_components else {}
            descriptor = make_descriptor(args.descriptor, n_jobs=args.jobs, **overrides)
            regressor = make_regressor(args.model, descriptor.per_atom, descriptor=args.descriptor, progress=True)
            started = time.perf_counter()
            model = EnergyModel(descriptor, regressor).fit(train, np.array([m.info["atomization_energy"] for m in train]))
            fit_seconds = time.perf_counter() - started
            embedding.CONFORMERS = conformers  # candidates re-embedded on the model's route use the same recipe
            for label, molecules in (("QM9 DFT geometries", dft_test), ("SMILES", test_smiles)):
                row = {"trained on": "QM9 DFT geometries" if route == "file" else f"SMILES, {conformers} conformer(s)",
                       "n train": len(train), "fit s": fit_seconds, **evaluate(model, molecules, truth, label)}
                rows.append(row)
                print(json.dumps(row, default=float), flush=True)
    table = pd.DataFrame(rows)
    args.out.mkdir(parents=True, exist_ok=True)
    name = f"routes_{args.descriptor}_{args.model}_{args.train}_{args.test}"
    table.to_csv(args.out / f"{name}.csv", index=False, float_format="%.4g")
    print(table.to_string(index=False, float_format=lambda v: f"{v:.3g}"))


if __name__ == "__main__":
    main()
