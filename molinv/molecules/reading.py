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

import codecs
import csv
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator, NamedTuple, Sequence

import numpy as np
from ase import Atoms
from ase.data import atomic_numbers
from ase.io import read as ase_read
from ase.io.extxyz import key_val_str_to_dict, parse_properties
from rdkit import Chem
from tqdm.auto import tqdm

from ..errors import MolinvError
from .checks import MoleculeError, Rejected, check_geometry, shorten
from .electrons import merge_stated, settle_electronic_state
from .embedding import (EMBED_SEED, atoms_from_rdkit, charge_and_multiplicity, embed_smiles, rdkit_messages,
                        rdkit_reason, sigint_held)
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


class InputError(MolinvError, ValueError):
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

    def unnamed(self) -> list[int]:
        """Records of molecules the file gave no name (or an empty one), named by
        :func:`default_name` instead."""
        return [atoms.info["record"] for atoms in self.molecules if "record" in atoms.info
                and atoms.info.get("name") == default_name(str(atoms.info.get("source", "")).rpartition(":")[0],
                                                           atoms.info["record"])]

    def summary(self) -> str:
        text = f"{self.source}: {len(self.molecules)} molecules read, {len(self.rejected)} rejected"
        unnamed = self.unnamed()
        if unnamed:
            shown = ", ".join(map(str, unnamed[:10])) + (", ..." if len(unnamed) > 10 else "")
            text += (f"; {len(unnamed)} without a name in the input (records {shown}), named "
                     f"{default_name(self.source, unnamed[0])!r} and so on")
        return text


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

    Records are built one at a time, so memory does not grow with the file (XYZ
    files, whose framing looks ahead, are read whole as lines).

    Parameters
    ----------
    path : str or Path
        XYZ/extended XYZ, SDF/MOL, SMILES list (``.smi``: SMILES then an optional
        name per line) or CSV with a SMILES column (one row per line). UTF-8, with
        or without a byte-order mark, LF or CRLF line ends.
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

    @property
    def properties(self) -> dict:
        """The record's other columns, where it is a row of a SMILES table."""
        return self.build.properties if isinstance(self.build, SmilesBuilder) else {}

    def build_molecule(self) -> Atoms | Rejected:
        """The molecule, or the record's rejection; raises KeyboardInterrupt when Ctrl-C was
        pressed while RDKit embedded it (see :func:`molinv.molecules.embedding.embed_smiles`)."""
        try:
            atoms = self.build()
            _finish(atoms, self.units, self.name or default_name(self.source, self.number),
                    f"{self.source}:{self.number}")
        except MoleculeError as error:
            return self._rejected(str(error))
        except Exception as error:  # noqa: BLE001  RDKit and ase fail in many ways on odd records; each is that record's
            return self._rejected(f"cannot build the record: {_summary(error)}")
        atoms.info["record"] = self.number
        return atoms

    def _rejected(self, reason: str) -> Rejected:
        return Rejected(self.source, self.number, self.line, self.name, reason, self.smiles, dict(self.properties))


def default_name(source: str, record: int) -> str:
    """The name given to a record that has none in its file: the file's stem and the record number."""
    return f"{Path(source).stem}:{record}"


def _summary(error: Exception) -> str:
    """The exception type and the first lines of its message (RDKit's C++ errors run to a
    stack of lines: 'Pre-condition Violation', the cause, then source files)."""
    lines = [line.strip() for line in str(error).splitlines() if line.strip()][:2]
    return f"{type(error).__name__}: {': '.join(lines)}"


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
    with sigint_held(always=True):  # a monitor thread tqdm starts here inherits the hold
        bar = tqdm(records, desc=path.name, unit="rec", disable=_disabled(progress))
    for number, line, name, build in bar:
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
        given = atoms.info[key]
        if isinstance(given, (bool, np.bool_)):
            raise MoleculeError(f"energy {key!r} is a boolean ({given}), not a number")
        value = _as_number(given)
        if value is None:
            raise MoleculeError(f"non-numeric energy {key!r}: {shorten(repr(given), 60)}")
        if not math.isfinite(value):
            raise MoleculeError(f"energy {key!r} is not finite: {given!r}")
        atoms.info[key] = value * ENERGY_UNITS[units.energy]
    atoms.info.setdefault("name", name)
    atoms.info["name"] = str(atoms.info["name"])
    atoms.info["source"] = source
    # The geometry first: a dummy atom or a unit mix-up explains an odd electron count too.
    check_geometry(atoms)
    settle_electronic_state(atoms)


def _as_number(value) -> float | None:
    """``value`` as a float (infinity and NaN included), or None for text and booleans."""
    if isinstance(value, (bool, np.bool_)):
        return None
    try:
        return float(value)
    except (TypeError, ValueError, OverflowError):
        return None


# Each reader yields (record number, start line, name or None, build) where build()
# returns the Atoms or raises MoleculeError, so that failures stay per record.
Record = tuple[int, "int | None", "str | None", "callable"]

#: Longest line read (bytes); a longer one is cut and its record rejected, which bounds
#: the work and memory spent on one record.
MAX_LINE_BYTES = 1_000_000
#: Longest SMILES embedded: embedding time grows steeply with size, and a SMILES this long
#: already has about MAX_ATOMS atoms with its hydrogens (common practice, no source).
MAX_SMILES_CHARACTERS = 1000
#: Most columns read from a CSV header.
MAX_CSV_COLUMNS = 10_000


class TextLine(NamedTuple):
    number: int  # from 1
    text: str  # without its line end
    problem: str | None  # why the line cannot be read: not UTF-8, too long


def _text_lines(path: Path) -> Iterator[TextLine]:
    """Lines of a text file without their line ends (LF or CRLF) and without a leading
    UTF-8 byte-order mark. A line that is not UTF-8 or is longer than MAX_LINE_BYTES
    carries its problem, so that only its record is rejected."""
    with open(path, "rb") as handle:
        number = 0
        while raw := handle.readline(MAX_LINE_BYTES + 1):
            number += 1
            problem = None
            if len(raw) > MAX_LINE_BYTES and not raw.endswith(b"\n"):
                while (rest := handle.readline(MAX_LINE_BYTES)) and not rest.endswith(b"\n"):
                    pass
                problem = f"line {number} is longer than {MAX_LINE_BYTES:,} bytes"
            if number == 1 and raw.startswith(codecs.BOM_UTF8):
                raw = raw[len(codecs.BOM_UTF8):]
            raw = raw.rstrip(b"\r\n")
            try:
                text = raw.decode("utf-8")
            except UnicodeDecodeError as error:
                text = raw.decode("utf-8", "replace")
                problem = problem or (f"line {number} is not UTF-8 text "
                                      f"(byte 0x{raw[error.start]:02x} at column {error.start + 1})")
            yield TextLine(number, text, problem)


def _first_problem(lines: Sequence[TextLine]) -> str | None:
    return next((line.problem for line in lines if line.problem), None)


def _quoted(text: str, limit: int = 60) -> str:
    return repr(text if len(text) <= limit else text[:limit] + "...")


_COUNT_LINE = re.compile(r"\s*\+?(\d{1,18})\s*", re.ASCII)


def _atom_count(text: str) -> int | None:
    """The atom count when ``text`` is an XYZ count line (one whole number), else None."""
    match = _COUNT_LINE.fullmatch(text)
    return int(match.group(1)) if match else None


def _is_atom_line(text: str) -> bool:
    """An element and three numbers (extended XYZ may add columns)."""
    fields = text.split(None, 4)
    return len(fields) >= 4 and all(_as_number(value) is not None for value in fields[1:4])


def _next_count_line(texts: Sequence[str], position: int) -> int:
    while position < len(texts) and _atom_count(texts[position]) is None:
        position += 1
    return position


def _xyz_records(path: Path) -> Iterator[Record]:
    """Frames of an XYZ file; framing by the atom-count line, parsing by ase.io.

    The count is checked against the atom lines that follow it, so that a wrong count
    rejects its own frame only: a frame stops at the first line that is not an atom line,
    and after a frame that came up short, reading resumes at the next count line.
    """
    lines = list(_text_lines(path))  # XYZ framing looks ahead; SMILES and SDF stream
    texts = [line.text for line in lines]
    position, number = 0, 0
    while position < len(lines):
        if not texts[position].strip():
            position += 1
            continue
        number += 1
        start = position
        count = _atom_count(texts[start])
        if count is None:
            position = _next_count_line(texts, start + 1)
            yield number, start + 1, None, _failing(
                f"expected an atom count on line {start + 1}, found {_quoted(texts[start])}")
            continue
        comment = texts[start + 1] if start + 1 < len(texts) else ""
        name = _name_from_comment(comment)
        first_atom = end = start + 2
        while end < len(texts) and _is_atom_line(texts[end]):
            end += 1
        found = end - first_atom
        position = end
        if found < count:
            if end < len(texts):
                stop = f"line {end + 1} is not an atom line: {_quoted(texts[end])}"
                position = _next_count_line(texts, end)
            else:
                stop = "the file ends"
            reason = f"truncated record: {count} atoms declared, {found} atom lines found; {stop}"
        elif found > count:
            reason = (f"{count} atoms declared on line {start + 1}, but {found} atom lines follow "
                      f"(lines {first_atom + 1}-{end})")
        elif count == 0:
            reason = "empty record: atom count is 0"
        else:
            reason = _first_problem(lines[start:end])
        if reason:
            yield number, start + 1, name, _failing(reason)
        else:
            yield number, start + 1, name, _xyz_builder(texts[start:end], comment, start + 1)


def _name_from_comment(comment: str) -> str | None:
    if "=" in comment:
        for token in comment.split():
            if token.startswith("name="):
                return token[len("name=") :].strip("\"'")
        return None
    return comment.strip() or None


def _xyz_builder(frame: list[str], comment: str, first_line: int):
    def build() -> Atoms:
        text = "\n".join(frame) + "\n"
        try:
            atoms = ase_read(io.StringIO(text), format="extxyz" if "=" in comment else "xyz")
        except Exception as error:  # ase raises many exception types for malformed frames
            raise MoleculeError(_frame_problem(frame, comment, first_line) or (
                f"cannot parse the frame (lines {first_line}-{first_line + len(frame) - 1}): "
                f"{type(error).__name__}: {error}")) from None
        if "=" not in comment and comment.strip():
            atoms.info["name"] = comment.strip()
        return atoms

    return build


def _frame_problem(frame: list[str], comment: str, first_line: int) -> str | None:
    """Where and why a frame that ase refused is wrong: an extended-XYZ comment line that is
    not key=value pairs, or an unknown element."""
    if "=" in comment:
        try:
            parse_properties(str(key_val_str_to_dict(comment).get("Properties", "species:S:1:pos:R:3")))
        except Exception:  # noqa: BLE001  ase's parser raises several types; the line is what matters
            return (f"line {first_line + 1}: the extended-XYZ comment line is not key=value pairs with a valid "
                    f"Properties column list: {_quoted(comment)}")
    for offset, text in enumerate(frame[2:], start=2):
        symbol = text.split(None, 1)[0]
        if not (symbol.isdigit() or symbol.lower().capitalize() in atomic_numbers):
            return f"line {first_line + offset}: unknown element symbol {_quoted(symbol)}"
    return None


def _failing(reason: str):
    def build():
        raise MoleculeError(reason)

    return build


#: The counts line of a molfile (V2000 or V3000), which starts every molecule of an SDF.
_COUNTS_LINE = re.compile(r"[ \d]{6}.*V[23]000\s*", re.ASCII)


def _sdf_records(path: Path) -> Iterator[Record]:
    """Records of an SDF/MOL file, each parsed by RDKit on its own for per-record reasons.

    A molecule that follows another without a '$$$$' line between them (molfiles
    concatenated, a damaged separator) is found by its counts line and read as a
    record of its own, its three header lines before the counts line.
    """
    block: list[TextLine] = []
    counts_at = end_at = None  # positions in block of the counts line and of 'M  END'
    number = 0
    for line in _text_lines(path):
        if line.text.strip() == "$$$$":
            block.append(line)
            number += 1
            yield number, block[0].number, _sdf_title(block), _sdf_builder(block)
            block, counts_at, end_at = [], None, None
            continue
        is_counts = bool(_COUNTS_LINE.fullmatch(line.text))
        if is_counts and counts_at is not None:
            floor = counts_at + 1 if end_at is None else end_at + 1
            split = max(floor, len(block) - 3)
            number += 1
            yield number, block[0].number, _sdf_title(block[:split]), _sdf_builder(block[:split])
            block, counts_at, end_at = block[split:], None, None
        if is_counts and counts_at is None:
            counts_at = len(block)
        elif line.text.startswith("M  END") and end_at is None:
            end_at = len(block)
        block.append(line)
    if any(line.text.strip() for line in block):
        number += 1
        yield number, block[0].number, _sdf_title(block), _sdf_builder(block)


def _sdf_title(block: list[TextLine]) -> str | None:
    return block[0].text.strip() or None if block else None


def _sdf_builder(lines: list[TextLine]):
    problem = _first_problem(lines)
    if problem:
        return _failing(problem)
    block = "".join(line.text + "\n" for line in lines)

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
    for line in _text_lines(path):
        stripped = line.text.strip()
        if not stripped or stripped.startswith("#"):
            continue
        fields = stripped.split(None, 1)
        if number == 0 and fields[0].lower() == "smiles":
            continue
        number += 1
        name = fields[1].strip() if len(fields) > 1 else None
        yield number, line.number, name, _failing(line.problem) if line.problem else SmilesBuilder(fields[0], seed, {})


@dataclass(frozen=True)
class SmilesBuilder:
    """Builds one SMILES record: embedding, then the record's other columns as properties."""

    smiles: str
    seed: int
    properties: dict

    def __call__(self) -> Atoms:
        if len(self.smiles) > MAX_SMILES_CHARACTERS:
            raise MoleculeError(f"SMILES of {len(self.smiles)} characters, more than the {MAX_SMILES_CHARACTERS} "
                                "of the largest molecule molinv embeds")
        atoms = embed_smiles(self.smiles, seed=self.seed)
        merge_stated(atoms, self.properties)
        return atoms


def _find_column(columns: Iterable[str], wanted: str | None, defaults: tuple[str, ...], path: Path) -> str | None:
    columns = list(columns)
    if wanted is not None:
        if wanted not in columns:
            raise InputError(shorten(f"{path}: no column {wanted!r}; columns are {', '.join(columns)}"))
        return wanted
    lowered = {c.strip().lower(): c for c in columns}
    for candidate in defaults:
        if candidate in lowered:
            return lowered[candidate]
    return None


def _csv_cells(line: TextLine) -> list[str]:
    """The cells of one CSV line; MoleculeError names the line when it cannot be split."""
    if line.problem:
        raise MoleculeError(line.problem)
    try:
        return next(csv.reader([line.text]))
    except csv.Error as error:
        raise MoleculeError(f"line {line.number} is not a CSV row: {error}") from None


def _csv_records(path: Path, smiles_column: str | None, name_column: str | None, seed: int) -> Iterator[Record]:
    """Rows of a CSV table: a SMILES column, an optional name column, property columns.

    Rows are read one at a time, one row per line (a cell cannot hold a line break), so
    that a damaged row (a stray quote, a missing or extra cell, bytes that are not UTF-8)
    is rejected alone and every line number is exact.
    """
    lines = (line for line in _text_lines(path) if line.text.strip())
    header = next(lines, None)
    if header is None:
        return
    if header.problem:
        raise InputError(f"{path}: cannot read the header: {header.problem}")
    if header.text.count(",") >= MAX_CSV_COLUMNS:
        raise InputError(f"{path}: the header (line {header.number}) has {header.text.count(',') + 1:,} columns; "
                         f"at most {MAX_CSV_COLUMNS:,} are read")
    try:
        columns = _csv_cells(header)
    except MoleculeError as error:
        raise InputError(f"{path}: cannot read the header: {error}") from None
    columns = [c if c.strip() else f"column {i}" for i, c in enumerate(columns, start=1)]
    repeated = sorted({c for c in columns if columns.count(c) > 1})
    if repeated:
        raise InputError(shorten(f"{path}: column names repeat in the header: {', '.join(map(repr, repeated))}"))
    smiles_key = _find_column(columns, smiles_column, ("smiles",), path)
    if smiles_key is None:
        raise InputError(shorten(f"{path}: no SMILES column; name it with --smiles-column (smiles_column in Python) "
                                 f"(columns: {', '.join(columns)})"))
    name_key = _find_column(columns, name_column, ("name", "id"), path)
    name_index = columns.index(name_key) if name_key else None
    property_keys = [c for c in columns if c not in (smiles_key, name_key)]

    for row_number, line in enumerate(lines, start=1):
        try:
            cells = _csv_cells(line)
        except MoleculeError as error:
            yield row_number, line.number, None, _failing(str(error))
            continue
        name = cells[name_index].strip() or None if name_index is not None and name_index < len(cells) else None
        if len(cells) != len(columns):
            yield row_number, line.number, name, _failing(
                f"line {line.number} has {len(cells)} cells, the header has {len(columns)} columns")
            continue
        values = dict(zip(columns, cells))
        properties = {}
        for key in property_keys:
            text = values[key].strip()
            if text == "":
                continue  # an empty cell is a missing value; require_energy reports it when it matters
            number = _as_number(text)
            properties[key] = number if number is not None else text
        yield row_number, line.number, name, SmilesBuilder(values[smiles_key], seed, properties)
