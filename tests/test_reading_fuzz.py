"""Seeded fuzzing of every reader: files of valid records, one or two of them damaged.

Each case writes a few valid molecules in one format, damages chosen records (truncation,
byte flips, deleted/duplicated/inserted lines, wrong atom counts, NaN/inf/huge
coordinates, unknown elements, bytes that are not UTF-8, empty and huge lines, a removed
SDF separator, a boolean or infinite extended-XYZ energy), sometimes adds a byte-order
mark or CRLF line ends to the whole file (which must change nothing), and reads it.
Since the damaged records are known, the checks are exact:

- no exception escapes, except :class:`InputError` when a CSV header was damaged;
- the records are numbered 1..n without gap or repeat across molecules and rejections;
- every undamaged record comes back as a molecule with its name and formula (nothing
  lost inside a rejected neighbour, nothing silently changed);
- every rejection names its line, inside the file, with a short reason free of parser
  internals.

``benchmarks/bench_reading_fuzz.py`` runs the same cases at larger counts.
"""

from __future__ import annotations

import functools
import random
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from molinv.molecules import InputError, read_molecules, write_molecules

FORMATS = ("xyz", "extxyz", "sdf", "smi", "csv")
# Small molecules of ase's G2 set (Curtiss et al., J. Chem. Phys. 106, 1063, 1997); CO2 and
# N2 have no hydrogen, which the unit checks treat apart.
GEOMETRIES = ("CH4", "NH3", "H2O", "C2H6", "CH3OH", "HCN", "C2H2", "C2H4", "H2CO", "CH3CN", "CO2", "N2")
SMILES = ("C", "O", "N", "CC", "CO", "C=O", "C#N", "CCO", "CN", "OC=O", "CC#N", "NC=O")
#: Words that betray a parser's internals rather than a reason.
INTERNALS = ("unpack", "Traceback", "has no attribute", "index out of range", "NoneType", "invalid literal",
             "codec can't decode", "Errno")
#: Longest time one case may take (seconds): a generous bound that catches a hang.
MAX_SECONDS_PER_CASE = 10.0


@dataclass
class Case:
    """One damaged file: its bytes, its records (name, formula) and which were damaged."""

    fmt: str
    records: list[tuple[str, str]]
    data: bytes = b""
    damaged: set[int] = field(default_factory=set)  # 0-based record positions
    lost_after: int | None = None  # records from here on were cut off by a truncation
    header_damaged: bool = False
    mutations: list[str] = field(default_factory=list)

    @property
    def suffix(self) -> str:
        return {"smi": "smi"}.get(self.fmt, self.fmt)


def record_texts(fmt: str, rng: random.Random, tmp: Path) -> tuple[list[str], list[tuple[str, str]], str]:
    """Valid records in ``fmt`` as text blocks (each ending in a newline), their (name,
    formula), and the file's header (CSV) or ''."""
    from ase.build import molecule as g2_molecule
    from rdkit import Chem
    from rdkit.Chem.rdMolDescriptors import CalcMolFormula

    count = rng.randint(3, 6)
    names = [f"m{rng.randrange(16**6):06x}{i}" for i in range(count)]
    blocks, records = [], []
    if fmt in ("smi", "csv"):
        for name in names:
            smiles = rng.choice(SMILES)
            formula = _hill(CalcMolFormula(Chem.AddHs(Chem.MolFromSmiles(smiles))))
            energy = round(rng.uniform(-500, -1), 4)
            blocks.append(f"{smiles} {name}\n" if fmt == "smi" else f"{name},{smiles},{energy}\n")
            records.append((name, formula))
        return blocks, records, "name,smiles,energy\n" if fmt == "csv" else ""
    for name in names:
        formula = rng.choice(GEOMETRIES)
        energy = f"{rng.uniform(-500, -1):.4f}"
        blocks.append(_geometry_record(fmt, formula, tmp).replace(NAME, name).replace(ENERGY, energy))
        records.append((name, g2_molecule(formula).get_chemical_formula()))
    return blocks, records, ""


NAME, ENERGY = "placeholdername", "-1.2345"


@functools.lru_cache(maxsize=None)
def _geometry_record(fmt: str, formula: str, tmp: Path) -> str:
    """One G2 molecule as a record of ``fmt``, named NAME with energy ENERGY (SDF bond
    perception is slow: made once per molecule)."""
    from ase.build import molecule as g2_molecule

    atoms = g2_molecule(formula)
    if fmt == "xyz":
        lines = [str(len(atoms)), NAME] + [f"{a.symbol} {x:.6f} {y:.6f} {z:.6f}" for a, (x, y, z)
                                            in zip(atoms, atoms.positions)]
        return "\n".join(lines) + "\n"
    atoms.info.update(name=NAME, energy=float(ENERGY))
    return write_molecules(tmp / f"one.{fmt}", [atoms]).read_text()


def _hill(formula: str) -> str:
    from ase import Atoms

    return Atoms(formula.replace("+", "").replace("-", "")).get_chemical_formula()


def make_case(seed: int, fmt: str, tmp: Path) -> Case:
    rng = random.Random(seed)
    blocks, records, header = record_texts(fmt, rng, tmp)
    case = Case(fmt, records)
    lines = [[line + "\n" for line in block.splitlines()] for block in blocks]
    for _ in range(rng.choice((1, 1, 2))):
        target = rng.randrange(len(lines))
        case.damaged.add(target)
        case.mutations.append(_damage(fmt, lines, target, rng, case))
    # A damaged record still ends its last line: damage stays inside its record.
    lines = [block if "".join(block).endswith("\n") else block + ["\n"] for block in lines]
    text = header + "".join("".join(block) for block in lines)
    data = text.encode("utf-8", "surrogateescape")
    if case.lost_after is not None:
        cut = len(header.encode()) + sum(len("".join(b).encode("utf-8", "surrogateescape"))
                                        for b in lines[:case.lost_after])
        cut_record = "".join(lines[case.lost_after]).encode("utf-8", "surrogateescape")
        data = data[: cut + rng.randrange(max(1, len(cut_record) - 1))]
    if rng.random() < 0.15:
        data = data.replace(b"\n", b"\r\n")
        case.mutations.append("crlf")
    if rng.random() < 0.1:
        data = b"\xef\xbb\xbf" + data
        case.mutations.append("bom")
    if fmt == "csv" and rng.random() < 0.03:
        case.header_damaged = True
        case.damaged.update(range(len(records)))  # every row is read by the header's columns
        data = _flip(data, rng.randrange(len(header)), rng)
        case.mutations.append("header byte flip")
    case.data = data
    return case


def _flip(data: bytes, position: int, rng: random.Random) -> bytes:
    return data[:position] + bytes([rng.randrange(256)]) + data[position + 1:]


def _damage(fmt: str, lines: list[list[str]], target: int, rng: random.Random, case: Case) -> str:
    """Damage record ``target`` in place (its lines); returns what was done."""
    block = lines[target]
    if not block:  # every line deleted by an earlier mutation
        block.append("junk\n")
        return f"insert record {target + 1}"
    row = rng.randrange(len(block))
    kinds = ["flip", "delete", "duplicate", "insert", "truncate", "non-utf8", "number", "element"]
    if fmt in ("xyz", "extxyz"):
        kinds += ["count", "count", "count"]
    if fmt == "extxyz":
        kinds += ["energy"]
    if fmt == "sdf":
        kinds += ["separator", "separator"]
    kind = rng.choice(kinds)
    if kind == "flip":
        encoded = block[row].encode("utf-8", "surrogateescape")
        # Not the record's last line end: that would join the next record to this one.
        last = row == len(block) - 1 and encoded.endswith(b"\n")
        flipped = _flip(encoded, rng.randrange(max(1, len(encoded) - last)), rng)
        block[row] = flipped.decode("utf-8", "surrogateescape")
    elif kind == "delete":
        del block[row]
    elif kind == "duplicate":
        block.insert(row, block[row])
    elif kind == "insert":
        if row == 0 and target > 0 and fmt in ("xyz", "extxyz"):
            # A line between two frames may be the last atom of the one before (a count too small).
            case.damaged.add(target - 1)
        block.insert(row, rng.choice(["\n", " \n", "junk\n", "7\n", "1 2 3 4 5\n", "$$$$\n", "x" * 100_000 + "\n",
                                      "y" * 1_100_000 + "\n", "\t\n"]))
    elif kind == "truncate":
        case.lost_after = target
        for later in range(target + 1, len(lines)):
            case.damaged.add(later)
    elif kind == "non-utf8":
        text = block[row]
        at = rng.randrange(len(text))
        block[row] = text[:at] + rng.choice(["\udcff", "\udcc3", "\udce9", "\udc80"]) + text[at:]
    elif kind == "number":
        tokens = block[row].split(" ")
        numeric = [i for i, t in enumerate(tokens) if _is_number(t)]
        if numeric:
            tokens[rng.choice(numeric)] = rng.choice(["nan", "inf", "-inf", "1e300", "1e6", "1e400", "NaN"])
            block[row] = " ".join(tokens) + ("" if tokens[-1].endswith("\n") else "\n")
    elif kind == "element":
        stripped = block[row].lstrip()
        first = stripped.split(" ", 1)[0] if stripped else ""
        if first.isalpha():
            block[row] = block[row].replace(first, rng.choice(["Xq", "X", "Zz", "*", "Uuu"]), 1)
    elif kind == "count":
        declared = int(block[0]) if block[0].strip().isdigit() else 3
        block[0] = rng.choice(["0", "-1", "abc", "1000000000000", "99999999999999999999999"] +
                              [str(declared + d) for d in (-2, -1, 1, 2)]) + "\n"
    elif kind == "energy":
        block[1] = block[1].replace("energy=", "energy=" + rng.choice(["T", "F", "inf", "nan", "x"]) + "#", 1)
    elif kind == "separator":
        separators = [i for i, line in enumerate(block) if line.strip() == "$$$$"]
        if separators:
            block[separators[0]] = rng.choice(["", "$$$\n", "$$#$\n", "$$$$$\n"])
    return f"{kind} record {target + 1}"


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def check_case(case: Case, path: Path) -> Counter:
    """Read the case's file and assert every promise; returns counts of the outcomes."""
    path.write_bytes(case.data)
    options = {"file_format": "xyz", "require_energy": True} if case.fmt == "extxyz" else {}
    began = time.perf_counter()
    try:
        result = read_molecules(path, **options)
    except InputError as error:
        assert case.header_damaged, f"{case.mutations}: whole file refused: {error}"
        assert len(str(error)) < 600
        return Counter(files=1, records_in=len(case.records), refused_files=1)
    assert time.perf_counter() - began < MAX_SECONDS_PER_CASE, case.mutations
    numbers = sorted([m.info["record"] for m in result.molecules] + [r.record for r in result.rejected])
    assert numbers == list(range(1, len(numbers) + 1)), case.mutations
    found = Counter((m.info["name"], m.get_chemical_formula()) for m in result.molecules)
    undamaged = {name: formula for position, (name, formula) in enumerate(case.records)
                 if position not in case.damaged}
    for m in result.molecules:
        if m.info["name"] in undamaged:
            assert m.get_chemical_formula() == undamaged[m.info["name"]], (case.mutations, m.info["name"])
    for record in undamaged.items():
        assert found[record] >= 1, f"{case.mutations}: undamaged record {record} lost"
    n_lines = case.data.count(b"\n") + 1
    for rejected in result.rejected:
        assert rejected.line is not None and 1 <= rejected.line <= n_lines, (case.mutations, rejected)
        assert f"record {rejected.record} (line {rejected.line})" in str(rejected)
        assert len(rejected.reason) < 400, case.mutations
        assert not any(word in rejected.reason for word in INTERNALS), (case.mutations, rejected.reason)
    return Counter(files=1, records_in=len(case.records), good=len(result.molecules),
                   rejected=len(result.rejected),
                   undamaged=len(case.records) - len(case.damaged))


@pytest.mark.parametrize("fmt", FORMATS)
def test_fuzzed_files_lose_nothing(tmp_path, fmt):
    totals = Counter()
    for number in range(500):
        case = make_case(20261203 + number, fmt, tmp_path)
        totals += check_case(case, tmp_path / f"case.{case.suffix}")
    # The damage must have reached the readers: some records rejected, the rest kept.
    assert totals["rejected"] > 100 and totals["good"] >= totals["undamaged"]
