"""Descriptors computed once and kept on disk, keyed by molecule and settings.

Layout: one folder per descriptor setting (its name and a hash of
:meth:`MoleculeDescriptor.settings`), holding ``settings.json`` and numbered
``part-NNNNNN.npz`` files (numpy arrays only, read with ``allow_pickle=False``).
Each part lists the keys of its molecules (a hash of atomic numbers and exact
coordinates) beside their features. Parts are written as each chunk finishes, so
an interrupted run keeps its finished chunks and a rerun computes only the rest.
"""

from __future__ import annotations

import copy
import hashlib
import json
from pathlib import Path
from typing import Sequence

import numpy as np
from ase import Atoms
from tqdm.auto import tqdm

from molinv.outputs import written_atomically

from .base import AtomFeatures, MoleculeDescriptor, validate_molecules


def molecule_key(atoms: Atoms) -> str:
    """Hash of the atomic numbers and exact float64 coordinates (Angstrom)."""
    digest = hashlib.blake2b(digest_size=16)
    digest.update(np.ascontiguousarray(atoms.numbers, dtype=np.int64).tobytes())
    digest.update(np.ascontiguousarray(atoms.positions, dtype=np.float64).tobytes())
    return digest.hexdigest()


def molecules_fingerprint(molecules: Sequence[Atoms]) -> str:
    """Identity of a list of molecules: elements and exact coordinates, in order."""
    digest = hashlib.sha256()
    for atoms in molecules:
        digest.update(molecule_key(atoms).encode())
    return digest.hexdigest()[:16]


def settings_key(settings: dict) -> str:
    return hashlib.sha256(json.dumps(settings, sort_keys=True).encode()).hexdigest()[:16]


class FeatureStore:
    """A folder of cached descriptor values; see the module docstring."""

    def __init__(self, root):
        self.root = Path(root)

    def folder(self, descriptor: MoleculeDescriptor) -> Path:
        settings = descriptor.settings()
        folder = self.root / f"{settings['descriptor']}-{settings_key(settings)}"
        folder.mkdir(parents=True, exist_ok=True)
        record = folder / "settings.json"
        if not record.exists():
            record.write_text(json.dumps(settings, indent=2, sort_keys=True))
        return folder

    def _load(self, folder: Path, per_atom: bool) -> dict[str, tuple]:
        """Key -> (values) or (values, numbers) for every cached molecule."""
        cached = {}
        for part in sorted(folder.glob("part-*.npz")):
            with np.load(part, allow_pickle=False) as data:
                keys, values = data["molecule_keys"], data["values"]
                if per_atom:
                    numbers, offsets = data["numbers"], data["offsets"]
                    for i, key in enumerate(keys):
                        cached[str(key)] = (values[offsets[i] : offsets[i + 1]], numbers[offsets[i] : offsets[i + 1]])
                else:
                    for key, row in zip(keys, values):
                        cached[str(key)] = (row,)
        return cached

    def _save_part(self, folder: Path, keys: list[str], features) -> None:
        existing = sorted(folder.glob("part-*.npz"))
        number = int(existing[-1].stem.split("-")[1]) + 1 if existing else 0
        arrays = {"molecule_keys": np.array(keys)}
        if isinstance(features, AtomFeatures):
            arrays.update(values=features.values, numbers=features.numbers, offsets=features.offsets)
        else:
            arrays["values"] = features
        with written_atomically(folder / f"part-{number:06d}.npz") as temporary, open(temporary, "wb") as handle:
            np.savez(handle, **arrays)

    def describe(
        self,
        descriptor: MoleculeDescriptor,
        molecules: Sequence[Atoms],
        chunk_size: int = 1000,
        progress: bool | None = None,
    ):
        """Features of ``molecules`` from a fitted descriptor, computing only what is not cached.

        Returns what ``descriptor.transform`` returns, rows in the order of ``molecules``.
        """
        molecules = validate_molecules(molecules)
        folder = self.folder(descriptor)
        per_atom = descriptor.per_atom
        cached = self._load(folder, per_atom)
        keys = [molecule_key(atoms) for atoms in molecules]
        missing = sorted({key: i for i, key in enumerate(keys) if key not in cached}.values())
        with tqdm(total=len(missing), unit="mol", desc="describe molecules",
                  disable=None if progress is None else not progress) as bar:
            for start in range(0, len(missing), chunk_size):
                positions = missing[start : start + chunk_size]
                chunk = [molecules[i] for i in positions]
                features = descriptor.transform(chunk)
                chunk_keys = [keys[i] for i in positions]
                self._save_part(folder, chunk_keys, features)
                if per_atom:
                    for j, key in enumerate(chunk_keys):
                        rows = slice(features.offsets[j], features.offsets[j + 1])
                        cached[key] = (features.values[rows], features.numbers[rows])
                else:
                    for key, row in zip(chunk_keys, features):
                        cached[key] = (row,)
                bar.update(len(chunk))
        if per_atom:
            return AtomFeatures.from_blocks([cached[k][0] for k in keys], [cached[k][1] for k in keys],
                                            descriptor.elements_)
        return np.vstack([cached[k][0] for k in keys])


def describe_chunk(chunk, descriptor) -> dict[str, np.ndarray]:
    """Features of one packed chunk of molecules (a :func:`~molinv.cluster.chunks.run_chunks` task)."""
    features = descriptor.transform(chunk.unpack())
    if isinstance(features, AtomFeatures):
        return {"values": features.values, "numbers": features.numbers, "offsets": features.offsets}
    return {"values": features}


def describe_in_chunks(descriptor: MoleculeDescriptor, molecules: Sequence[Atoms], folder, *, chunk_size: int = 1000,
                       executor=None, progress: bool | None = None):
    """What ``descriptor.transform(molecules)`` returns, computed chunk by chunk into ``folder``
    (one ``.npz`` per chunk, written as it finishes; a rerun computes only the missing ones)
    by ``executor`` (this process, local processes or a Dask cluster; see :mod:`molinv.cluster`)."""
    from molinv.cluster.chunks import claim_folder, read_arrays, run_chunks
    from molinv.molecules.packed import packed_chunks

    molecules = validate_molecules(molecules)
    claim_folder(folder, {"descriptor": descriptor.settings(), "molecules": molecules_fingerprint(molecules),
                          "chunk_size": chunk_size})
    # Parallel work happens across chunks; inside one, the descriptor runs in its worker alone.
    worker_copy = copy.copy(descriptor).set_params(n_jobs=1, progress=False)
    run_chunks(describe_chunk, packed_chunks(molecules, chunk_size), folder, shared=worker_copy, executor=executor,
               total=len(molecules), progress=progress, description="describe molecules")
    parts = list(read_arrays(folder))
    values = np.concatenate([part["values"] for part in parts])
    if not descriptor.per_atom:
        return values
    sizes = np.concatenate([np.diff(part["offsets"]) for part in parts])
    return AtomFeatures(values, np.concatenate([part["numbers"] for part in parts]),
                        np.concatenate([[0], np.cumsum(sizes)]).astype(int), descriptor.elements_)
