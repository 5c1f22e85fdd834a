"""How often SMILES fail to embed, which fallback rescued the others, and the time per molecule.

QM9 SMILES (Ramakrishnan et al., Sci. Data 1, 140022, 2014), a random sample::

    python benchmarks/bench_embedding.py --molecules 10000 --conformers 1
"""

from __future__ import annotations

import argparse
import collections
import time

from tqdm.auto import tqdm

from molinv.molecules.checks import MoleculeError
from molinv.molecules.embedding import embed_smiles
from molinv.molecules.qm9 import load_qm9


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--molecules", type=int, default=10000)
    parser.add_argument("--seed", type=int, default=1, help="seed of the QM9 sample")
    parser.add_argument("--conformers", type=int, default=1)
    args = parser.parse_args()
    smiles = [atoms.info["smiles"] for atoms in load_qm9(n=args.molecules, seed=args.seed)]
    sources, failures = collections.Counter(), []
    started = time.process_time()
    for text in tqdm(smiles, desc="embedding SMILES"):
        try:
            sources[embed_smiles(text, conformers=args.conformers).info["geometry_source"]] += 1
        except MoleculeError as error:
            failures.append(str(error))
    seconds = time.process_time() - started
    print(f"{len(smiles)} QM9 SMILES (sample seed {args.seed}), {args.conformers} conformer(s) each: "
          f"{1000 * seconds / len(smiles):.1f} ms CPU per molecule")
    for source, count in sources.most_common():
        print(f"  {count:6d}  {source}")
    print(f"failed: {len(failures)} ({100 * len(failures) / len(smiles):.2f}%)")
    for reason in failures:
        print(f"  {reason}")


if __name__ == "__main__":
    main()
