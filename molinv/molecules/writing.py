"""Writing molecules back out, in the formats :mod:`molinv.molecules.reading` reads.

Energies named in ``energy_keys`` are converted from eV to the requested unit;
coordinates from Angstrom to the requested length unit.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from ase.io import write as ase_write
from rdkit import Chem
from rdkit.Chem import AllChem, rdDetermineBonds

from molinv.outputs import written_atomically

from .reading import InputError, detect_format
from .units import ENERGY_UNITS, LENGTH_UNITS, energy_unit, length_unit

# Keys molinv adds on reading; not written back as properties.
_BOOKKEEPING = {"source", "geometry_source", "record"}


def _scalar_properties(atoms: Atoms, energy_keys: Sequence[str], energy_factor: float) -> dict:
    properties = {}
    for key, value in atoms.info.items():
        if key in _BOOKKEEPING or np.ndim(value) != 0:
            continue
        properties[key] = value / energy_factor if key in energy_keys else value
    return properties


def write_molecules(
    path,
    molecules: Sequence[Atoms],
    *,
    file_format: str | None = None,
    length: str = "Angstrom",
    energy: str = "eV",
    energy_keys: Sequence[str] = ("energy",),
) -> Path:
    """Write molecules as extended XYZ, SDF, a SMILES list or a CSV table.

    SMILES and CSV outputs keep the SMILES (``info['smiles']``) and properties, not
    the coordinates. SDF bonds are perceived from the coordinates by RDKit.
    """
    path = Path(path)
    fmt = file_format or detect_format(path)
    length_factor = LENGTH_UNITS[length_unit(length)]
    energy_factor = ENERGY_UNITS[energy_unit(energy)]
    if fmt not in ("xyz", "sdf", "smiles", "csv"):
        raise InputError(f"{path}: unknown format {fmt!r}; choose xyz, sdf, smiles or csv")
    if fmt in ("smiles", "csv"):
        missing = [str(a.info.get("name", i)) for i, a in enumerate(molecules) if "smiles" not in a.info]
        if missing:
            raise InputError(f"{path}: molecules without a SMILES cannot be written as {fmt}: {', '.join(missing[:5])}")
    with written_atomically(path) as temporary:
        if fmt == "xyz":
            frames = []
            for atoms in molecules:
                frame = Atoms(numbers=atoms.numbers, positions=atoms.get_positions() / length_factor)
                frame.info.update(_scalar_properties(atoms, energy_keys, energy_factor))
                frames.append(frame)
            ase_write(temporary, frames, format="extxyz")
        elif fmt == "sdf":
            with Chem.SDWriter(str(temporary)) as writer:
                for atoms in molecules:
                    writer.write(_rdkit_molecule(atoms, length_factor, energy_keys, energy_factor))
        else:
            rows = [_scalar_properties(atoms, energy_keys, energy_factor) for atoms in molecules]
            if fmt == "smiles":
                temporary.write_text("".join(f"{row['smiles']} {row.get('name', '')}".rstrip() + "\n" for row in rows))
            else:
                table = pd.DataFrame(rows)
                leading = [c for c in ("name", "smiles") if c in table.columns]
                table[leading + [c for c in table.columns if c not in leading]].to_csv(temporary, index=False)
    return path


def _bonded_from_xyz(xyz_block: str, smiles: str | None, charge: int) -> Chem.Mol:
    """RDKit molecule with bonds: connectivity from the geometry, bond orders from the
    molecule's SMILES when known (exact), else perceived from the geometry."""
    connected = Chem.MolFromXYZBlock(xyz_block)
    rdDetermineBonds.DetermineConnectivity(connected, charge=charge)
    template = Chem.AddHs(Chem.MolFromSmiles(smiles)) if smiles and Chem.MolFromSmiles(smiles) else None
    if template is not None:
        # Strained cages put non-bonded atoms within the covalent cut-off; without
        # those contacts the connectivity matches the SMILES.
        for candidate in (connected, _without_overlong_contacts(connected)):
            try:
                mol = AllChem.AssignBondOrdersFromTemplate(template, candidate)
                Chem.SanitizeMol(mol)
                return mol
            except (ValueError, RuntimeError, Chem.rdchem.MolSanitizeException):
                continue
    for candidate in (connected, _without_overlong_contacts(connected)):
        perceived = Chem.Mol(candidate)
        try:
            rdDetermineBonds.DetermineBondOrders(perceived, charge=charge)
            Chem.SanitizeMol(perceived)
            return perceived
        except (ValueError, RuntimeError, Chem.rdchem.MolSanitizeException):
            continue
    # Bond orders cannot always be assigned (radicals, odd charge states); connectivity still can.
    return connected


def _without_overlong_contacts(mol: Chem.Mol) -> Chem.Mol:
    """Drop, at every atom with more bonds than its largest usual valence, its longest bonds."""
    table = Chem.GetPeriodicTable()
    editable = Chem.RWMol(mol)
    conformer = mol.GetConformer()
    for atom in mol.GetAtoms():
        limit = max(table.GetValenceList(atom.GetAtomicNum()))
        bonded = editable.GetAtomWithIdx(atom.GetIdx()).GetNeighbors()
        if limit < 0 or len(bonded) <= limit:
            continue
        centre = conformer.GetAtomPosition(atom.GetIdx())
        by_length = sorted(bonded, key=lambda n: -centre.Distance(conformer.GetAtomPosition(n.GetIdx())))
        for neighbour in by_length[: len(bonded) - limit]:
            editable.RemoveBond(atom.GetIdx(), neighbour.GetIdx())
    return editable.GetMol()


def bonded_molecule(atoms: Atoms) -> Chem.Mol:
    """RDKit molecule of ``atoms`` with bonds and its coordinates (Angstrom): bond orders from
    ``info['smiles']`` when known, else perceived from the geometry at ``info['charge']``."""
    lines = [str(len(atoms)), ""]
    lines += [f"{s} {x:.10f} {y:.10f} {z:.10f}" for s, (x, y, z) in zip(atoms.get_chemical_symbols(), atoms.positions)]
    return _bonded_from_xyz("\n".join(lines) + "\n", atoms.info.get("smiles"), int(atoms.info.get("charge", 0)))


def _rdkit_molecule(atoms: Atoms, length_factor: float, energy_keys, energy_factor: float) -> Chem.Mol:
    mol = bonded_molecule(atoms)
    conformer = mol.GetConformer()
    for i, position in enumerate(atoms.positions / length_factor):
        conformer.SetAtomPosition(i, position.tolist())
    properties = _scalar_properties(atoms, energy_keys, energy_factor)
    mol.SetProp("_Name", str(properties.pop("name", "")))
    for key, value in properties.items():
        mol.SetProp(key, repr(float(value)) if isinstance(value, (float, np.floating)) else str(value))
    return mol
