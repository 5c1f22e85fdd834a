"""From RDKit molecules and SMILES to ``ase.Atoms``.

SMILES get 3D coordinates with hydrogens by RDKit's ETKDG distance geometry
(Riniker, Landrum, J. Chem. Inf. Model. 55, 2562, 2015) with a fixed seed, then
an MMFF94 optimisation (Halgren, J. Comput. Chem. 17, 490, 1996), so the same
SMILES always gives the same geometry on the same RDKit version.
"""

from __future__ import annotations

import logging
import re
from contextlib import contextmanager

import numpy as np
from ase import Atoms
from rdkit import Chem, RDLogger
from rdkit.Chem import AllChem

from .checks import MoleculeError

#: Seed for ETKDG; fixed so that embedding is reproducible.
EMBED_SEED = 20141005
MAX_FORCE_FIELD_STEPS = 2000

# Route RDKit's C++ log through Python logging so a failing record's reason can be reported.
RDLogger.logger().setLevel(RDLogger.WARNING)
Chem.rdBase.LogToPythonLogger()
_rdkit_log = logging.getLogger("rdkit")
# RDKit installs its own stderr handler; the library reports reasons instead of printing them.
_rdkit_log.handlers.clear()
_rdkit_log.addHandler(logging.NullHandler())
_rdkit_log.propagate = False


class _Collector(logging.Handler):
    def __init__(self):
        super().__init__(level=logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record):
        self.messages.append(record.getMessage().strip())


@contextmanager
def rdkit_messages():
    """Collect RDKit's warnings and errors raised inside the block (a list of strings)."""
    collector = _Collector()
    _rdkit_log.addHandler(collector)
    try:
        yield collector.messages
    finally:
        _rdkit_log.removeHandler(collector)


_TIMESTAMP = re.compile(r"^\[\d\d:\d\d:\d\d\]")


def rdkit_reason(messages: list[str], fallback: str) -> str:
    """RDKit's first telling message, without timestamps, stack traces or recovery notes."""
    for message in messages:
        for line in message.splitlines():
            line = _TIMESTAMP.sub("", line).strip()
            if line.startswith("ERROR: "):
                line = line[len("ERROR: "):]
            noise = not line or line[0] in "*-#" or line[0].isdigit() or "moving to the beginning" in line
            if not noise and not line.startswith(("Could not sanitize", "Stack trace", "Post-condition")):
                return line
    return fallback


def atoms_from_rdkit(mol: Chem.Mol, conformer_id: int = -1) -> Atoms:
    """An ``ase.Atoms`` with the elements and coordinates (Angstrom) of one conformer."""
    conformer = mol.GetConformer(conformer_id)
    positions = np.array(conformer.GetPositions(), dtype=float)
    numbers = [atom.GetAtomicNum() for atom in mol.GetAtoms()]
    return Atoms(numbers=numbers, positions=positions)


def embed_smiles(smiles: str, seed: int = EMBED_SEED, optimize: bool = True) -> Atoms:
    """3D geometry with explicit hydrogens for a SMILES string.

    Raises :class:`MoleculeError` with RDKit's reason when the SMILES does not
    parse or the embedding fails. ``info['smiles']`` holds the input, and
    ``info['geometry_source']`` says how the coordinates were made.
    """
    if not isinstance(smiles, str) or not smiles.strip():
        raise MoleculeError("empty SMILES")
    with rdkit_messages() as messages:
        mol = Chem.MolFromSmiles(smiles.strip())
    if mol is None:
        raise MoleculeError(f"RDKit cannot parse SMILES {smiles!r}: {rdkit_reason(messages, 'invalid SMILES')}")
    fragments = len(Chem.GetMolFrags(mol))
    if fragments > 1:
        # Separate fragments embed on top of each other; a record is one molecule.
        raise MoleculeError(
            f"SMILES {smiles!r} has {fragments} disconnected fragments; give one molecule per record "
            "(remove counter-ions or solvent)"
        )
    mol = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = int(seed)
    with rdkit_messages() as messages:
        status = AllChem.EmbedMolecule(mol, params)
        if status != 0:
            # Strained cages sometimes embed only from random starting coordinates.
            params.useRandomCoords = True
            status = AllChem.EmbedMolecule(mol, params)
    if status != 0:
        raise MoleculeError(
            f"RDKit cannot embed SMILES {smiles!r} in 3D: {rdkit_reason(messages, 'distance geometry failed')}"
        )
    source = "rdkit-etkdg"
    if optimize:
        if AllChem.MMFFHasAllMoleculeParams(mol):
            AllChem.MMFFOptimizeMolecule(mol, maxIters=MAX_FORCE_FIELD_STEPS)
            source = "rdkit-etkdg+mmff94"
        else:
            # MMFF94 lacks parameters for some elements and charge states; UFF covers the table.
            AllChem.UFFOptimizeMolecule(mol, maxIters=MAX_FORCE_FIELD_STEPS)
            source = "rdkit-etkdg+uff"
    atoms = atoms_from_rdkit(mol)
    atoms.info["smiles"] = smiles.strip()
    atoms.info["geometry_source"] = source
    atoms.info.update(charge_and_multiplicity(mol))
    return atoms


def charge_and_multiplicity(mol: Chem.Mol) -> dict[str, int]:
    """Net charge (elementary charges) from the formal charges, and spin multiplicity 2S+1
    from the radical electrons, all unpaired taken parallel (RDKit keeps no spin state)."""
    unpaired = sum(atom.GetNumRadicalElectrons() for atom in mol.GetAtoms())
    return {"charge": int(Chem.GetFormalCharge(mol)), "multiplicity": int(unpaired) + 1}
