"""Molecules in, as ``ase.Atoms``: reading, checks, units and the public QM9 set."""

from .checks import MoleculeError, Rejected, check_geometry
from .embedding import embed_smiles
from .reading import InputError, ReadResult, read_molecules
from .units import convert_energy, convert_length
from .writing import write_molecules

__all__ = [
    "InputError",
    "MoleculeError",
    "ReadResult",
    "Rejected",
    "check_geometry",
    "convert_energy",
    "convert_length",
    "embed_smiles",
    "read_molecules",
    "write_molecules",
]
