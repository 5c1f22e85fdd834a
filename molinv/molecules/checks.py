"""Physical sanity checks on a molecule, and the record of what was rejected and why."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from ase import Atoms
from ase.data import covalent_radii
from scipy.sparse.csgraph import connected_components
from scipy.spatial.distance import pdist, squareform

from ..errors import MolinvError
from .units import LENGTH_UNITS

#: Shortest distance accepted between two nuclei, Angstrom. The shortest covalent bond,
#: H2, is 0.741 Angstrom (CRC Handbook of Chemistry and Physics, "Bond lengths in
#: diatomic molecules"; value from memory); 0.6 leaves room for strained or
#: compressed geometries while catching coordinates in the wrong unit.
MIN_DISTANCE_ANGSTROM = 0.6

#: A hydrogen farther than this from every other atom is not bonded (common practice,
#: no source: the longest X-H bonds in neutral molecules are about 1.5 Angstrom).
MAX_HYDROGEN_BOND_ANGSTROM = 1.6

#: Most atoms in one record. molinv models small molecules (QM9's largest has 29 atoms);
#: the checks and descriptors grow with the square of the atom count, and a bound keeps
#: one absurd record from taking the memory of a whole run (common practice, no source).
MAX_ATOMS = 2000

#: Largest coordinate accepted, Angstrom. Far beyond any molecule: the PDB format, made
#: for the largest biomolecules, stores at most 9999.999 (wwPDB Atomic Coordinate Entry
#: Format 3.3, ATOM record, columns 31-54); ten times that leaves room for shifted origins.
MAX_COORDINATE_ANGSTROM = 1e5

#: Two atoms are bonded when closer than this times the sum of their covalent radii
#: (ase.data.covalent_radii: Cordero et al., "Covalent radii revisited", Dalton Trans.
#: 2008, 2832). The factor is common practice, no source: bond perception tolerances of
#: 1.1-1.3 are usual.
BOND_TOLERANCE = 1.3

#: Atoms farther than this from every atom of the rest belong to another molecule
#: (common practice, no source: van der Waals contacts between first- and second-row
#: atoms, hydrogen bonds included, are shorter than 4 Angstrom).
MAX_CONTACT_ANGSTROM = 4.0


#: Longest reason or name kept in a report: a damaged record can carry a line of megabytes.
MAX_MESSAGE_CHARACTERS = 300


class MoleculeError(MolinvError, ValueError):
    """A molecule that fails a check; the message gives the reason."""


def shorten(text: str, limit: int = MAX_MESSAGE_CHARACTERS) -> str:
    """``text`` cut to ``limit`` characters, saying how much was cut."""
    text = str(text)
    return text if len(text) <= limit else f"{text[:limit]}... ({len(text) - limit:,} more characters)"


@dataclass(frozen=True)
class Rejected:
    """One input record that did not become a molecule.

    ``record`` counts records from 1 in the order of the file; ``line`` is the
    1-based line where the record starts, when the format has lines. ``smiles`` and
    ``properties`` (the record's other columns) are kept where the record gave them, so
    that a table row of the failed record still shows what it was.
    """

    source: str
    record: int
    line: int | None
    name: str | None
    reason: str
    smiles: str | None = None
    properties: dict = field(default_factory=dict, hash=False)

    def __post_init__(self):
        object.__setattr__(self, "reason", shorten(self.reason))
        if self.name is not None:
            object.__setattr__(self, "name", shorten(self.name))

    def __str__(self) -> str:
        where = f"{self.source}: record {self.record}"
        if self.line is not None:
            where += f" (line {self.line})"
        if self.name:
            where += f" [{self.name}]"
        return f"{where}: {self.reason}"


def check_geometry(atoms: Atoms) -> None:
    """Raise :class:`MoleculeError` when the geometry cannot be a molecule.

    Checks: at least one atom and at most :data:`MAX_ATOMS`, no dummy atoms (Z = 0), finite coordinates no larger
    than :data:`MAX_COORDINATE_ANGSTROM`, no two nuclei closer than
    :data:`MIN_DISTANCE_ANGSTROM`, every hydrogen bonded to something, at least one
    bond (:data:`BOND_TOLERANCE`), and no group of atoms farther than
    :data:`MAX_CONTACT_ANGSTROM` from the rest. When distances look scaled by the
    Bohr/Angstrom ratio (0.529 or 1.89), the message says so.
    """
    if len(atoms) == 0:
        raise MoleculeError("empty record: no atoms")
    if len(atoms) > MAX_ATOMS:
        raise MoleculeError(f"{len(atoms)} atoms, more than the {MAX_ATOMS} of the largest molecule molinv reads")
    dummies = np.flatnonzero(atoms.numbers == 0)
    if len(dummies):
        raise MoleculeError(f"atom {dummies[0] + 1} is a dummy atom (atomic number 0), not an element")
    positions = atoms.get_positions()
    if not np.all(np.isfinite(positions)):
        bad = int(np.flatnonzero(~np.isfinite(positions).all(axis=1))[0])
        raise MoleculeError(f"non-finite coordinates for atom {bad + 1} ({atoms[bad].symbol})")
    largest = np.abs(positions).max(axis=1)
    if largest.max() > MAX_COORDINATE_ANGSTROM:
        bad = int(largest.argmax())
        raise MoleculeError(f"atom {bad + 1} ({atoms[bad].symbol}) has a coordinate of {largest[bad]:.3g} Angstrom, "
                            f"beyond {MAX_COORDINATE_ANGSTROM:.0e} Angstrom: not a molecular geometry")
    if len(atoms) == 1:
        return
    distances = squareform(pdist(positions))
    np.fill_diagonal(distances, np.inf)
    nearest = distances.min(axis=1)
    closest = float(nearest.min())
    if closest < MIN_DISTANCE_ANGSTROM:
        i = int(nearest.argmin())
        message = (
            f"atoms closer than {MIN_DISTANCE_ANGSTROM} Angstrom: atom {i + 1} ({atoms[i].symbol}) "
            f"is {closest:.3f} Angstrom from its nearest neighbour"
        )
        if closest > 0.2 and _looks_scaled(nearest, LENGTH_UNITS["Bohr"]):
            message += (
                "; all distances look about 0.53x too short: were Angstrom coordinates read as Bohr? "
                "check the declared length unit"
            )
        raise MoleculeError(message)
    hydrogens = atoms.numbers == 1
    if hydrogens.any() and nearest[hydrogens].max() > MAX_HYDROGEN_BOND_ANGSTROM:
        i = int(np.flatnonzero(hydrogens)[nearest[hydrogens].argmax()])
        message = (
            f"hydrogen atom {i + 1} has no neighbour within {MAX_HYDROGEN_BOND_ANGSTROM} Angstrom "
            f"(nearest at {nearest[i]:.3f} Angstrom)"
        )
        if _looks_scaled(nearest, 1.0 / LENGTH_UNITS["Bohr"]):
            message += (
                "; all distances look about 1.89x too long: were Bohr coordinates read as Angstrom? "
                "check the declared length unit"
            )
        raise MoleculeError(message)
    _check_bonded(atoms, distances)


def _check_bonded(atoms: Atoms, distances: np.ndarray) -> None:
    """At least one bond, and no group of atoms apart from the rest.

    Heavy-atom molecules (CO2, CF4) written in Bohr and read as Angstrom have no
    hydrogen to give them away, but every distance is then 1.89 times a bond length:
    no two atoms are bonded.
    """
    radii = covalent_radii[atoms.numbers]
    bond_lengths = radii[:, None] + radii[None, :]
    if not (distances < BOND_TOLERANCE * bond_lengths).any():
        i, j = np.unravel_index(np.argmin(distances / bond_lengths), distances.shape)
        message = (f"no two atoms are bonded: the closest pair for its elements, atoms {i + 1} ({atoms[i].symbol}) "
                   f"and {j + 1} ({atoms[j].symbol}), is {distances[i, j]:.3f} Angstrom apart, more than "
                   f"{BOND_TOLERANCE} x their covalent bond length {bond_lengths[i, j]:.2f} Angstrom")
        if (distances * LENGTH_UNITS["Bohr"] < BOND_TOLERANCE * bond_lengths).any(axis=1).all():
            message += ("; in Bohr every atom would be bonded: were Bohr coordinates read as Angstrom? "
                        "check the declared length unit")
        raise MoleculeError(message)
    groups, labels = connected_components(distances < MAX_CONTACT_ANGSTROM, directed=False)
    if groups > 1:
        sizes = np.bincount(labels)
        raise MoleculeError(f"the atoms form {groups} groups more than {MAX_CONTACT_ANGSTROM} Angstrom apart "
                            f"(of {', '.join(map(str, sizes[:5]))}{'...' if groups > 5 else ''} atoms); "
                            "give one molecule per record")


def _looks_scaled(nearest: np.ndarray, factor: float) -> bool:
    """True when undoing ``factor`` puts the typical bond length where bonds live.

    Typical nearest-neighbour distances in organic molecules lie between about 0.95
    (O-H) and 1.55 Angstrom (C-C) (common practice, no source).
    """
    typical = float(np.median(nearest)) / factor
    return 0.9 <= typical <= 1.6
