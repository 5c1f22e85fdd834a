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
    python benchmarks/bench_smiles_route.py --train 2000 --test 1000 --routes embedded --delta-xtb
"""

from __future__ import annotations

import argparse
import hashlib
import json
import time
from pathlib import Path

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from tqdm.auto import tqdm
from scipy.stats import spearmanr
from sklearn.base import clone

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
    blocks = [molecules[i:i + 200] for i in range(0, len(molecules), 200)]
    done = Parallel(n_jobs=jobs)(delayed(_embedded_block)(block, conformers) for block in tqdm(blocks, desc="embedding"))
    moved = [item for block in done for item in block]
    ok = np.array([not isinstance(m, str) for m in moved])
    counts = [len(m) if not isinstance(m, str) else 0 for m in moved]
    CACHE.mkdir(parents=True, exist_ok=True)
    np.savez(path, ok=ok, offsets=np.concatenate([[0], np.cumsum(counts)]),
             positions=np.concatenate([m.positions for m in moved if not isinstance(m, str)]),
             numbers=np.concatenate([m.numbers for m in moved if not isinstance(m, str)]),
             sources=np.array([m.info["geometry_source"] if not isinstance(m, str) else "" for m in moved]),
             reasons=np.array([m if isinstance(m, str) else "" for m in moved]))
    return moved


def _embedded_block(block, conformers: int):
    """One joblib task: the recipe's conformer count is a module setting, so each worker sets it."""
    embedding.CONFORMERS = conformers
    return onto_embedded_route(block, progress=False)


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


def with_xtb(molecules, jobs: int, label: str):
    """The molecules with a GFN2-xTB atomization energy (eV) at their own geometry in
    ``info['xtb_atomization_energy']``; those xTB fails on are left out (counted by the caller)."""
    from molinv.labels import LabelMethod, label_molecules, read_labels

    method = LabelMethod("xtb")
    digest = hashlib.sha256(b"".join(m.positions.tobytes() for m in molecules)).hexdigest()[:16]
    path = CACHE / f"xtb-{label}-{len(molecules)}-{digest}.csv"
    label_molecules(molecules, method, path, n_jobs=jobs, progress=True)
    table = read_labels(path, method)
    energies = dict(zip(table.loc[table["status"] == "ok", "name"], table.loc[table["status"] == "ok", "atomization_energy_eV"]))
    kept = []
    for atoms in molecules:
        if np.isfinite(energies.get(atoms.info["name"], np.nan)):
            atoms = atoms.copy()
            atoms.info["xtb_atomization_energy"] = float(energies[atoms.info["name"]])
            kept.append(atoms)
    return kept


def evaluate_delta(model, molecules, truth_ev: dict, label: str, n_inputs: int) -> dict:
    """The Delta model's figures on molecules already on its route (no prediction table:
    the table's model is a single EnergyModel)."""
    started = time.perf_counter()
    predicted, std = model.predict(molecules, return_std=True)
    seconds = time.perf_counter() - started
    to_kcal = 23.060547830619026  # eV -> kcal/mol (ase.units)
    table = pd.DataFrame({"formula": [m.get_chemical_formula() for m in molecules],
                          "truth": [truth_ev[m.info["name"]] * to_kcal for m in molecules],
                          "predicted": predicted * to_kcal, "std": std * to_kcal})
    error = (table["predicted"] - table["truth"]).abs()
    rho, worst, n_formulas = isomer_spearman(table, "truth", "predicted")
    return {"test input": label, "rows": n_inputs, "ok": len(table), "flagged": 0, "failed": n_inputs - len(table),
            "MAE (predicted rows)": error.mean(), "median error": error.median(), "MAE (ok rows)": error.mean(),
            "median std (ok)": table["std"].median(), "90% interval covers (ok)": (error <= Z90 * table["std"]).mean(),
            "isomer Spearman": rho, "worst formula": worst, "formulas": n_formulas, "prediction s": seconds}


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
    parser.add_argument("--delta-xtb", action="store_true",
                        help="also: on the embedded route, learn QM9 minus GFN2-xTB at the embedded geometry")
    parser.add_argument("--out", type=Path, default=Path(__file__).parent / "results" / "smiles_route")
    args = parser.parse_args()

    qm9 = open_qm9()
    positions = qm9.sample(args.train + args.test, seed=args.seed)
    train_positions, test_positions = positions[:args.train], positions[args.train:]
    truth = dict(zip(qm9.table(positions)["name"], qm9.atomization_energy()[positions]))
    dft_train, dft_test = qm9.molecules(train_positions), qm9.molecules(test_positions)
    rows = []
    for conformers in args.conformers:
        # The recipe the models record, and with which candidates are re-embedded onto their route.
        embedding.CONFORMERS = conformers
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
            for label, molecules in (("QM9 DFT geometries", dft_test), ("SMILES", test_smiles)):
                row = {"trained on": "QM9 DFT geometries" if route == "file" else f"SMILES, {conformers} conformer(s)",
                       "n train": len(train), "fit s": fit_seconds, **evaluate(model, molecules, truth, label)}
                rows.append(row)
                print(json.dumps(row, default=float), flush=True)
            if args.delta_xtb and route == "embedded":
                from molinv.labels.delta import DeltaModel

                cheap_train = with_xtb(train, args.jobs, f"train{args.seed}")
                cheap_test = with_xtb([m for m in test_smiles if not isinstance(m, str)], args.jobs, f"test{args.seed}")
                started = time.perf_counter()
                delta = DeltaModel(EnergyModel(clone(descriptor), clone(regressor))).fit(
                    cheap_train, np.array([m.info["atomization_energy"] for m in cheap_train]))
                row = {"trained on": f"SMILES, {conformers} conformer(s), GFN2-xTB + learned correction",
                       "n train": len(cheap_train), "fit s": time.perf_counter() - started,
                       **evaluate_delta(delta, cheap_test, truth, "SMILES", len(test_smiles))}
                rows.append(row)
                print(json.dumps(row, default=float), flush=True)
    table = pd.DataFrame(rows)
    args.out.mkdir(parents=True, exist_ok=True)
    name = f"routes_{args.descriptor}_{args.model}_{args.train}_{args.test}"
    table.to_csv(args.out / f"{name}.csv", index=False, float_format="%.4g")
    print(table.to_string(index=False, float_format=lambda v: f"{v:.3g}"))


if __name__ == "__main__":
    main()
