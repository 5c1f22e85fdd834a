"""Reading molecules the way chemists store them, into ``ase.Atoms``.

Formats: XYZ and extended XYZ (read by :mod:`ase.io`), SDF/MOL with 3D
coordinates (read by RDKit), SMILES lists and CSV tables with a SMILES column
(embedded to 3D by :func:`molinv.molecules.embedding.embed_smiles`).

Every molecule comes back in internal units (Angstrom, eV) with
``info['name']`` (its identifier), ``info['source']`` (file and record) and its
properties. Records that fail are returned beside the good ones as
:class:`~molinv.molecules.checks.Rejected`, naming the file, record, line and
reason; nothing is dropped silently.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator, Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from ase.io import read as ase_read
from rdkit import Chem
from tqdm.auto import tqdm

from .checks import MoleculeError, Rejected, check_geometry
from .electrons import merge_stated, settle_electronic_state
from .embedding import (EMBED_SEED, atoms_from_rdkit, charge_and_multiplicity, embed_smiles, rdkit_messages,
                        rdkit_reason)
from .units import ENERGY_UNITS, LENGTH_UNITS, energy_unit, length_unit

FORMATS_BY_SUFFIX = {
    ".xyz": "xyz",
    ".extxyz": "xyz",
    ".sdf": "sdf",
    ".sd": "sdf",
    ".mol": "sdf",
    ".smi": "smiles",
    ".smiles": "smiles",
    ".csv": "csv",
}


class InputError(ValueError):
    """A file that cannot be read at all (missing, unknown format, no SMILES column...)."""


@dataclass
class ReadResult:
    """The molecules read from one source, and the records that were rejected."""

    source: str
    molecules: list[Atoms] = field(default_factory=list)
    rejected: list[Rejected] = field(default_factory=list)

    def add(self, item: Atoms | Rejected) -> None:
        (self.rejected if isinstance(item, Rejected) else self.molecules).append(item)

    @property
    def n_records(self) -> int:
        return len(self.molecules) + len(self.rejected)

    def summary(self) -> str:
        return f"{self.source}: {len(self.molecules)} molecules read, {len(self.rejected)} rejected"


@dataclass(frozen=True)
class UnitsDeclared:
    """Units of the numbers in an input file: converted to Angstrom and eV on reading."""

    length: str = "Angstrom"
    energy: str = "eV"
    energy_keys: tuple[str, ...] = ("energy",)
    require_energy: bool = False

    def __post_init__(self):
        object.__setattr__(self, "length", length_unit(self.length))
        object.__setattr__(self, "energy", energy_unit(self.energy))
        object.__setattr__(self, "energy_keys", tuple(self.energy_keys))


def detect_format(path: Path) -> str:
    fmt = FORMATS_BY_SUFFIX.get(path.suffix.lower())
    if fmt is None:
        known = ", ".join(sorted(FORMATS_BY_SUFFIX))
        raise InputError(f"{path}: cannot tell the format from the suffix {path.suffix!r}; known: {known}")
    return fmt


def read_molecules(path, **options) -> ReadResult:
    """Read every molecule in a file: the good ones and the rejected records.

    ``options`` are those of :func:`iter_molecules`.
    """
    result = ReadResult(source=str(path))
    for item in iter_molecules(path, **options):
        result.add(item)
    return result


def iter_molecules(
    path,
    *,
    file_format: str | None = None,
    length: str = "Angstrom",
    energy: str = "eV",
    energy_keys: Sequence[str] = ("energy",),
    require_energy: bool = False,
    smiles_column: str | None = None,
    name_column: str | None = None,
    seed: int = EMBED_SEED,
    progress: bool | None = None,
    skip_records: int = 0,
) -> Iterator[Atoms | Rejected]:
    """Each record of a file in order, as an ``ase.Atoms`` or a :class:`Rejected`.

    Records are built one at a time, so memory does not grow with the file (CSV
    tables are read in blocks).

    Parameters
    ----------
    path : str or Path
        XYZ/extended XYZ, SDF/MOL, SMILES list (``.smi``: SMILES then an optional
        name per line) or CSV with a SMILES column.
    file_format : {'xyz', 'sdf', 'smiles', 'csv'}, optional
        Overrides the guess from the suffix.
    length : str
        Unit of the coordinates in the file: 'Angstrom' or 'Bohr'.
    energy : str
        Unit of the energies in the file: 'eV', 'Hartree', 'kcal/mol' or 'kJ/mol'.
    energy_keys : sequence of str
        Properties that are energies (converted from ``energy`` to eV).
    require_energy : bool
        Reject records whose energy properties are missing or not numbers.
    smiles_column, name_column : str, optional
        CSV columns; by default a column called 'smiles' (any case) and one
        called 'name' or 'id'.
    seed : int
        ETKDG seed for SMILES embedding.
    progress : bool or None
        tqdm progress bar over records (``None``: only on a terminal).
    skip_records : int
        The first records are passed over without being built (resuming a run).
    """

    for record in iter_records(path, file_format=file_format, length=length, energy=energy, energy_keys=energy_keys,
                               require_energy=require_energy, smiles_column=smiles_column, name_column=name_column,
                               seed=seed, progress=progress, skip_records=skip_records):
        yield record.build_molecule()


@dataclass(frozen=True)
class PendingRecord:
    """A record located in a file but not built yet.

    Building parses it, or embeds its SMILES (the slow part of reading a SMILES
    file), then converts units and checks the geometry. Keeping the two apart
    lets a screen send SMILES to worker processes and build them there.
    """

    source: str
    number: int
    line: int | None
    name: str | None
    build: Callable[[], Atoms]
    units: UnitsDeclared

    @property
    def smiles(self) -> str | None:
        """The SMILES to embed, or None when the record holds coordinates."""
        return self.build.smiles if isinstance(self.build, SmilesBuilder) else None

    def build_molecule(self) -> Atoms | Rejected:
        try:
            atoms = self.build()
            _finish(atoms, self.units, self.name or f"{Path(self.source).stem}:{self.number}",
                    f"{self.source}:{self.number}")
        except MoleculeError as error:
            return Rejected(self.source, self.number, self.line, self.name, str(error))
        atoms.info["record"] = self.number
        return atoms


def iter_records(path, *, file_format: str | None = None, length: str = "Angstrom", energy: str = "eV",
                 energy_keys: Sequence[str] = ("energy",), require_energy: bool = False,
                 smiles_column: str | None = None, name_column: str | None = None, seed: int = EMBED_SEED,
                 progress: bool | None = None, skip_records: int = 0) -> Iterator[PendingRecord]:
    """Each record of a file in order, located but not built (see :class:`PendingRecord`);
    parameters as for :func:`iter_molecules`. A missing file or unknown format is refused
    by the call itself, before anything is read."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    units = UnitsDeclared(length, energy, tuple(energy_keys), require_energy)
    fmt = file_format or detect_format(path)
    if fmt == "xyz":
        records = _xyz_records(path)
    elif fmt == "sdf":
        records = _sdf_records(path)
    elif fmt == "smiles":
        records = _smiles_records(path, seed)
    elif fmt == "csv":
        records = _csv_records(path, smiles_column, name_column, seed)
    else:
        raise InputError(f"{path}: unknown format {fmt!r}; choose xyz, sdf, smiles or csv")
    return _pending(records, path, units, progress, skip_records)


def _pending(records, path: Path, units: UnitsDeclared, progress, skip_records: int) -> Iterator[PendingRecord]:
    for number, line, name, build in tqdm(records, desc=path.name, unit="rec", disable=_disabled(progress)):
        if number > skip_records:
            yield PendingRecord(str(path), number, line, name, build, units)


def _disabled(progress):
    return None if progress is None else not progress


def _finish(atoms: Atoms, units: UnitsDeclared, name: str, source: str) -> None:
    """Internal units, properties moved from the calculator to ``info``, checks."""
    if units.length != "Angstrom":
        atoms.set_positions(atoms.get_positions() * LENGTH_UNITS[units.length])
    if atoms.calc is not None:
        for key, value in atoms.calc.results.items():
            if np.ndim(value) == 0:
                atoms.info[key] = value
            elif np.shape(value)[:1] == (len(atoms),):
                atoms.arrays[key] = np.asarray(value)
        atoms.calc = None
    for key in units.energy_keys:
        if key not in atoms.info:
            if units.require_energy:
                raise MoleculeError(f"missing energy {key!r}")
            continue
        value = _as_number(atoms.info[key])
        if value is None:
            raise MoleculeError(f"non-numeric energy {key!r}: {atoms.info[key]!r}")
        atoms.info[key] = value * ENERGY_UNITS[units.energy]
    atoms.info.setdefault("name", name)
    atoms.info["name"] = str(atoms.info["name"])
    atoms.info["source"] = source
    settle_electronic_state(atoms)
    check_geometry(atoms)


def _as_number(value) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


# Each reader yields (record number, start line, name or None, build) where build()
# returns the Atoms or raises MoleculeError, so that failures stay per record.
Record = tuple[int, "int | None", "str | None", "callable"]


def _xyz_records(path: Path) -> Iterator[Record]:
    """Frames of an XYZ file; framing by the atom-count line, parsing by ase.io."""
    lines = path.read_text().splitlines()  # XYZ framing looks ahead; SMILES and SDF stream
    position, number = 0, 0
    while position < len(lines):
        if not lines[position].strip():
            position += 1
            continue
        number += 1
        start = position
        count_text = lines[start].strip()
        try:
            count = int(count_text)
            if count < 0:
                raise ValueError
        except ValueError:
            # Resynchronise at the next line that is a bare atom count.
            position = start + 1
            while position < len(lines) and not lines[position].strip().isdigit():
                position += 1
            yield number, start + 1, None, _failing(f"expected an atom count on the first line, found {count_text!r}")
            continue
        frame = lines[start : start + count + 2]
        position = start + count + 2
        comment = frame[1] if len(frame) > 1 else ""
        name = _name_from_comment(comment)
        if count == 0:
            yield number, start + 1, name, _failing("empty record: atom count is 0")
        elif len(frame) < count + 2 or any(not line.strip() for line in frame[2:]):
            found = sum(1 for line in frame[2:] if line.strip())
            yield number, start + 1, name, _failing(f"truncated record: {count} atoms declared, {found} atom lines found")
        else:
            yield number, start + 1, name, _xyz_builder(frame, comment)


def _name_from_comment(comment: str) -> str | None:
    if "=" in comment:
        for token in comment.split():
            if token.startswith("name="):
                return token[len("name=") :].strip("\"'")
        return None
    return comment.strip() or None


def _xyz_builder(frame: list[str], comment: str):
    def build() -> Atoms:
        text = "\n".join(frame) + "\n"
        try:
            atoms = ase_read(io.StringIO(text), format="extxyz" if "=" in comment else "xyz")
        except KeyError as error:
            raise MoleculeError(f"unknown element symbol {error.args[0]!r}") from None
        except Exception as error:  # ase raises many exception types for malformed frames
            raise MoleculeError(f"cannot parse frame: {error}") from None
        if "=" not in comment and comment.strip():
            atoms.info["name"] = comment.strip()
        return atoms

    return build


def _failing(reason: str):
    def build():
        raise MoleculeError(reason)

    return build


def _sdf_records(path: Path) -> Iterator[Record]:
    """Records of an SDF/MOL file, each parsed by RDKit on its own for per-record reasons."""
    block, start, number = [], 1, 0
    with open(path) as handle:
        for line_number, line in enumerate(handle, start=1):
            block.append(line)
            if line.strip() == "$$$$":
                number += 1
                yield number, start, _sdf_title(block), _sdf_builder("".join(block))
                block, start = [], line_number + 1
    if any(line.strip() for line in block):
        number += 1
        yield number, start, _sdf_title(block), _sdf_builder("".join(block))


def _sdf_title(block: list[str]) -> str | None:
    return block[0].strip() or None if block else None


def _sdf_builder(block: str):
    def build() -> Atoms:
        supplier = Chem.SDMolSupplier()
        with rdkit_messages() as messages:
            supplier.SetData(block, removeHs=False, sanitize=True)
            mol = supplier[0] if len(supplier) else None
        if mol is None:
            raise MoleculeError(f"RDKit cannot read the record: {rdkit_reason(messages, 'invalid MOL block')}")
        if mol.GetNumAtoms() == 0:
            raise MoleculeError("empty record: no atoms")
        if not mol.GetConformer().Is3D():
            raise MoleculeError("record has 2D coordinates only; give 3D coordinates or a SMILES to embed")
        atoms = atoms_from_rdkit(mol)
        atoms.info.update(charge_and_multiplicity(mol))
        properties = {}
        for key, value in mol.GetPropsAsDict(includePrivate=False).items():
            number = _as_number(value)
            properties[key] = number if number is not None else value
        merge_stated(atoms, properties)
        title = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
        if title and "name" not in atoms.info:
            atoms.info["name"] = title
        atoms.info["smiles"] = Chem.MolToSmiles(Chem.RemoveHs(mol, sanitize=False))
        atoms.info["geometry_source"] = "file"
        return atoms

    return build


def _smiles_records(path: Path, seed: int) -> Iterator[Record]:
    """One SMILES per line, optionally followed by a name; '#' starts a comment line."""
    number = 0
    with open(path) as handle:
        for line_number, line in enumerate(handle, start=1):
            stripped = line.strip()
            if not stripped or stripped.startswith("#"):
                continue
            fields = stripped.split(None, 1)
            if number == 0 and fields[0].lower() == "smiles":
                continue
            number += 1
            name = fields[1].strip() if len(fields) > 1 else None
            yield number, line_number, name, SmilesBuilder(fields[0], seed, {})


@dataclass(frozen=True)
class SmilesBuilder:
    """Builds one SMILES record: embedding, then the record's other columns as properties."""

    smiles: str
    seed: int
    properties: dict

    def __call__(self) -> Atoms:
        atoms = embed_smiles(self.smiles, seed=self.seed)
        merge_stated(atoms, self.properties)
        return atoms


def _find_column(columns: Iterable[str], wanted: str | None, defaults: tuple[str, ...], path: Path) -> str | None:
    columns = list(columns)
    if wanted is not None:
        if wanted not in columns:
            raise InputError(f"{path}: no column {wanted!r}; columns are {', '.join(columns)}")
        return wanted
    lowered = {c.strip().lower(): c for c in columns}
    for candidate in defaults:
        if candidate in lowered:
            return lowered[candidate]
    return None


def _csv_records(path: Path, smiles_column: str | None, name_column: str | None, seed: int,
                 block_rows: int = 10000) -> Iterator[Record]:
    """Rows of a CSV table: a SMILES column, an optional name column, property columns.

    Read in blocks of ``block_rows`` so that memory stays flat for long tables.
    """
    try:
        blocks = pd.read_csv(path, dtype=str, keep_default_na=False, chunksize=block_rows)
        first = next(blocks, None)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
        raise InputError(f"{path}: cannot read as CSV: {error}") from None
    if first is None:
        return
    columns = list(first.columns)
    smiles_key = _find_column(columns, smiles_column, ("smiles",), path)
    if smiles_key is None:
        raise InputError(f"{path}: no SMILES column; name one with smiles_column (columns: {', '.join(columns)})")
    name_key = _find_column(columns, name_column, ("name", "id"), path)
    property_keys = [c for c in columns if c not in (smiles_key, name_key)]
    row_number = 0

    def all_blocks():
        yield first
        try:
            yield from blocks
        except (pd.errors.ParserError, UnicodeDecodeError) as error:
            raise InputError(f"{path}: cannot read as CSV after row {row_number}: {error}") from None

    for block in all_blocks():
        for row in block.itertuples(index=False):
            row_number += 1
            values = dict(zip(columns, row))
            properties = {}
            for key in property_keys:
                text = values[key].strip()
                if text == "":
                    continue  # an empty cell is a missing value; require_energy reports it when it matters
                number = _as_number(text)
                properties[key] = number if number is not None else text
            name = values[name_key].strip() if name_key and values[name_key].strip() else None
            # Line numbers count the header as line 1 (quoted newlines inside cells would shift them).
            yield row_number, row_number + 1, name, SmilesBuilder(values[smiles_key], seed, properties)
