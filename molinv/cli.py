"""The ``molinv`` command: a thin shell over the library.

Every verb reports errors as one line on stderr and exits with status 2 for bad
input, 1 for other failures.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .molecules.units import ENERGY_UNITS, LENGTH_UNITS

UNITS_HELP = (
    "Internal units are eV and Angstrom. Lengths in input files: "
    + ", ".join(LENGTH_UNITS)
    + "; energies: "
    + ", ".join(ENERGY_UNITS)
    + "."
)


class CommandError(Exception):
    """A user-facing failure: printed as one line, no traceback."""


def add_input_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("input", type=Path, help="molecules: .xyz/.extxyz, .sdf/.mol, .smi (SMILES name), .csv (SMILES column)")
    parser.add_argument("--format", dest="file_format", choices=["xyz", "sdf", "smiles", "csv"], help="override the guess from the file suffix")
    parser.add_argument("--length-unit", default="Angstrom", help="unit of coordinates in the file (default Angstrom)")
    parser.add_argument("--energy-unit", default="eV", help="unit of energies in the file (default eV)")
    parser.add_argument("--energy-key", default="energy", help="property holding the energy (default 'energy')")
    parser.add_argument("--smiles-column", help="CSV column with SMILES (default: a column named 'smiles')")
    parser.add_argument("--name-column", help="CSV column with names (default: 'name' or 'id')")


def read_input(args, require_energy: bool):
    from .molecules import read_molecules

    return read_molecules(
        args.input,
        file_format=args.file_format,
        length=args.length_unit,
        energy=args.energy_unit,
        energy_keys=(args.energy_key,),
        require_energy=require_energy,
        smiles_column=args.smiles_column,
        name_column=args.name_column,
        progress=True,
    )


def write_rejected(rejected, path: Path) -> None:
    import pandas as pd

    columns = ["source", "record", "line", "name", "reason"]
    pd.DataFrame([[getattr(r, c) for c in columns] for r in rejected], columns=columns).to_csv(path, index=False)


def run_check(args) -> int:
    result = read_input(args, require_energy=args.require_energy)
    print(result.summary())
    for rejected in result.rejected:
        print(f"  rejected: {rejected}")
    if args.rejected_out:
        write_rejected(result.rejected, args.rejected_out)
        print(f"rejected records written to {args.rejected_out}")
    return 0 if result.molecules else 2


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="molinv",
        description="Energies of small molecules from their 3D structure. " + UNITS_HELP,
    )
    verbs = parser.add_subparsers(dest="verb", required=True, metavar="VERB")
    check = verbs.add_parser(
        "check",
        help="read a molecule file, validate every record and list the rejected ones",
        description="Read molecules and report which records are usable. " + UNITS_HELP,
    )
    add_input_options(check)
    check.add_argument("--require-energy", action="store_true", help="reject records without a numeric energy")
    check.add_argument("--rejected-out", type=Path, help="write the rejected records to this CSV")
    check.set_defaults(run=run_check)
    return parser


def main(argv=None) -> int:
    from .molecules.reading import InputError
    from .molecules.units import UnitError

    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except (CommandError, InputError, UnitError) as error:
        print(f"molinv {args.verb}: error: {error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"molinv {args.verb}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
