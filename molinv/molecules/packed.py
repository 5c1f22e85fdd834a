"""Molecules packed into a few flat numpy arrays, to send to other processes or machines.

A :class:`MoleculeChunk` holds consecutive input records of one of three kinds:
built molecules (atomic numbers and positions, Angstrom, stored flat with
offsets as in :class:`~molinv.descriptors.base.AtomFeatures`), SMILES still to
embed (the receiver embeds them: embedding is the slow step, so it travels as
text and runs where the work is done), and records rejected on reading (with
their reason). No Python object per atom or per molecule crosses the wire.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import partial
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
from ase import Atoms

from .checks import Rejected
from .reading import PendingRecord, ReadResult, SmilesBuilder, UnitsDeclared, iter_records

BUILT, TO_EMBED, REJECTED = 0, 1, 2
#: ``info`` keys kept in their own arrays; other scalar properties travel as JSON text.
_OWN_COLUMNS = ("name", "record", "source", "smiles", "geometry_source")


@dataclass
class MoleculeChunk:
    """Consecutive records as arrays; ``unpack`` rebuilds the ``Atoms`` and ``Rejected`` in order."""

    kinds: np.ndarray  # int8: BUILT, TO_EMBED or REJECTED
    records: np.ndarray  # int64: record number in the input (1-based)
    lines: np.ndarray  # int64: line where the record starts, -1 if unknown
    names: np.ndarray  # str; '' with named False for records without a name
    named: np.ndarray  # bool
    sources: np.ndarray  # str: the input file (built molecules: their info["source"])
    smiles: np.ndarray  # str: SMILES to embed (TO_EMBED), or the molecule's SMILES when known
    texts: np.ndarray  # str: scalar properties as JSON
    reasons: np.ndarray  # str: why the record was rejected (REJECTED), '' otherwise
    geometry_sources: np.ndarray  # str
    numbers: np.ndarray  # int16 per atom of the BUILT records
    positions: np.ndarray  # float64 (n_atoms, 3), Angstrom
    offsets: np.ndarray  # int64 (len + 1): atoms of record i are offsets[i]:offsets[i+1]
    units: str = ""  # JSON of the UnitsDeclared for records to embed
    seed: int = 0

    def __len__(self) -> int:
        return len(self.records)

    @property
    def nbytes(self) -> int:
        return sum(getattr(self, name).nbytes for name in self.__dataclass_fields__
                   if isinstance(getattr(self, name), np.ndarray))

    def arrays(self) -> dict[str, np.ndarray]:
        """Every field as a numpy array (``np.savez`` writes them, no pickle)."""
        return {name: np.asarray(getattr(self, name)) for name in self.__dataclass_fields__}

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> MoleculeChunk:
        fields = dict(arrays)
        if "reasons" not in fields:  # written by molinv before rejected records kept their properties
            rejected = fields["kinds"] == REJECTED
            fields["reasons"] = np.where(rejected, fields["texts"], "")
            fields["texts"] = np.where(rejected, "{}", fields["texts"])
        return cls(**{**fields, "units": str(fields["units"]), "seed": int(fields["seed"])})

    def unpack(self) -> list[Atoms | Rejected]:
        """The records as ``ase.Atoms`` (SMILES embedded here) or :class:`Rejected`, in order."""
        units = UnitsDeclared(**json.loads(self.units)) if self.units else None
        items = []
        for i, kind in enumerate(self.kinds):
            name = str(self.names[i]) if self.named[i] else None
            line = int(self.lines[i]) if self.lines[i] >= 0 else None
            source, number = str(self.sources[i]), int(self.records[i])
            if kind == REJECTED:
                items.append(Rejected(source, number, line, name, str(self.reasons[i]), str(self.smiles[i]) or None,
                                      json.loads(str(self.texts[i]))))
            elif kind == TO_EMBED:
                build = SmilesBuilder(str(self.smiles[i]), self.seed, json.loads(str(self.texts[i])))
                items.append(PendingRecord(source, number, line, name, build, units).build_molecule())
            else:
                start, stop = self.offsets[i], self.offsets[i + 1]
                atoms = Atoms(numbers=self.numbers[start:stop].astype(int), positions=self.positions[start:stop])
                atoms.info.update(json.loads(str(self.texts[i])))
                atoms.info.update(record=number, source=source)
                if self.geometry_sources[i]:
                    atoms.info["geometry_source"] = str(self.geometry_sources[i])
                if name is not None:
                    atoms.info["name"] = name
                if self.smiles[i]:
                    atoms.info["smiles"] = str(self.smiles[i])
                items.append(atoms)
        return items


def _scalar_properties(atoms: Atoms) -> str:
    kept = {}
    for key, value in atoms.info.items():
        if key in _OWN_COLUMNS:
            continue
        if isinstance(value, (np.generic,)):
            value = value.item()
        if isinstance(value, (bool, int, float, str)):
            kept[key] = value
    return json.dumps(kept)


def pack(items: Sequence[PendingRecord | Atoms | Rejected]) -> MoleculeChunk:
    """Pack records: pending SMILES stay text (embedded by :meth:`MoleculeChunk.unpack`),
    other pending records are built here, molecules and rejections go in as they are.

    Built molecules need ``info['record']`` (as :func:`~molinv.molecules.reading.iter_molecules`
    sets it); molecules without one are numbered by their position in ``items`` (from 1).
    """
    columns = {key: [] for key in ("kinds", "records", "lines", "names", "named", "sources", "smiles", "texts",
                                   "reasons", "geometry_sources")}
    numbers, positions, sizes = [], [], []
    units, seed = "", 0

    def add(kind, record, line, name, source, smiles="", text="{}", reason="", geometry_source="", atoms=None):
        for key, value in zip(columns, (kind, record, -1 if line is None else line, name or "", name is not None,
                                        source, smiles, text, reason, geometry_source)):
            columns[key].append(value)
        sizes.append(0 if atoms is None else len(atoms))
        if atoms is not None:
            numbers.append(atoms.numbers)
            positions.append(atoms.positions)

    for position, item in enumerate(items, start=1):
        if isinstance(item, PendingRecord) and item.smiles is not None:
            units = json.dumps({"length": item.units.length, "energy": item.units.energy,
                                "energy_keys": list(item.units.energy_keys),
                                "require_energy": item.units.require_energy})
            seed = item.build.seed
            add(TO_EMBED, item.number, item.line, item.name, item.source, item.smiles,
                json.dumps(item.build.properties))
            continue
        if isinstance(item, PendingRecord):
            item = item.build_molecule()
        if isinstance(item, Rejected):
            add(REJECTED, item.record, item.line, item.name, item.source, item.smiles or "",
                json.dumps(item.properties), item.reason)
        else:
            info = item.info
            add(BUILT, int(info.get("record", position)), None, info.get("name"), str(info.get("source", "")),
                str(info.get("smiles", "")), _scalar_properties(item), "", str(info.get("geometry_source", "")), item)
    return MoleculeChunk(
        kinds=np.array(columns["kinds"], dtype=np.int8),
        records=np.array(columns["records"], dtype=np.int64),
        lines=np.array(columns["lines"], dtype=np.int64),
        names=np.array(columns["names"], dtype=str),
        named=np.array(columns["named"], dtype=bool),
        sources=np.array(columns["sources"], dtype=str),
        smiles=np.array(columns["smiles"], dtype=str),
        texts=np.array(columns["texts"], dtype=str),
        reasons=np.array(columns["reasons"], dtype=str),
        geometry_sources=np.array(columns["geometry_sources"], dtype=str),
        numbers=np.concatenate(numbers).astype(np.int16) if numbers else np.zeros(0, np.int16),
        positions=np.concatenate(positions).astype(float) if positions else np.zeros((0, 3)),
        offsets=np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64),
        units=units,
        seed=seed,
    )


def packed_chunks(items: Iterable, chunk_size: int):
    """``(number, make_chunk)`` for consecutive groups of ``chunk_size`` records or molecules,
    as :func:`molinv.cluster.chunks.run_chunks` takes them; packing waits until a chunk is due."""
    from molinv.cluster.chunks import chunked

    return ((number, partial(pack, group)) for number, group in chunked(items, chunk_size))


def build_chunk(chunk: MoleculeChunk, shared=None) -> dict[str, np.ndarray]:
    """The records of ``chunk`` built where this runs (SMILES embedded) and packed again:
    a :func:`molinv.cluster.chunks.run_chunks` task."""
    return pack(chunk.unpack()).arrays()


def read_in_chunks(path, folder, *, chunk_size: int = 1000, executor=None, progress: bool | None = None,
                   **read_options) -> ReadResult:
    """What :func:`~molinv.molecules.reading.read_molecules` returns, with the records built
    (SMILES embedded) chunk by chunk by ``executor`` (this process, local processes or a
    Dask cluster; see :mod:`molinv.cluster`) rather than here.

    Each chunk's built molecules and rejections are kept in ``folder`` (``.npz``) as it
    finishes, so a rerun on the same file rebuilds only the missing chunks.
    ``read_options`` are those of :func:`~molinv.molecules.reading.iter_records`.
    """
    from molinv.cluster.chunks import claim_folder, file_fingerprint, read_arrays, run_chunks

    path = Path(path)
    records = iter_records(path, progress=False, **read_options)
    claim_folder(folder, {"input": str(path.resolve()), "input_sha256": file_fingerprint(path),
                          "chunk_size": chunk_size, "read_options": {k: str(v) for k, v in read_options.items()}})
    run_chunks(build_chunk, packed_chunks(records, chunk_size), folder, executor=executor, progress=progress,
               description=f"read {path.name}")
    result = ReadResult(source=str(path))
    for arrays in read_arrays(folder):
        for item in MoleculeChunk.from_arrays(arrays).unpack():
            result.add(item)
    return result
