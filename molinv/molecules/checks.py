"""Physical sanity checks on a molecule, and the record of what was rejected and why."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from ase import Atoms
from scipy.spatial.distance import pdist, squareform

from .units import LENGTH_UNITS

#: Shortest distance accepted between two nuclei, Angstrom. The shortest covalent bond,
#: H2, is 0.741 Angstrom (CRC Handbook of Chemistry and Physics, "Bond lengths in
#: diatomic molecules"; value from memory); 0.6 leaves room for strained or
#: compressed geometries while catching coordinates in the wrong unit.
MIN_DISTANCE_ANGSTROM = 0.6

#: A hydrogen farther than this from every other atom is not bonded (common practice,
#: no source: the longest X-H bonds in neutral molecules are about 1.5 Angstrom).
MAX_HYDROGEN_BOND_ANGSTROM = 1.6


#: Longest reason or name kept in a report: a damaged record can carry a line of megabytes.
MAX_MESSAGE_CHARACTERS = 300


class MoleculeError(ValueError):
    """A molecule that fails a check; the message gives the reason."""


def shorten(text: str, limit: int = MAX_MESSAGE_CHARACTERS) -> str:
    """``text`` cut to ``limit`` characters, saying how much was cut."""
    text = str(text)
    return text if len(text) <= limit else f"{text[:limit]}... ({len(text) - limit:,} more characters)"


@dataclass(frozen=True)
class Rejected:
    """One input record that did not become a molecule.

    ``record`` counts records from 1 in the order of the file; ``line`` is the
    1-based line where the record starts, when the format has lines.
    """

    source: str
    record: int
    line: int | None
    name: str | None
    reason: str

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


def nearest_neighbour_distances(positions: np.ndarray) -> np.ndarray:
    """Distance from each atom to its closest other atom (same unit as ``positions``)."""
    distances = squareform(pdist(positions))
    np.fill_diagonal(distances, np.inf)
    return distances.min(axis=1)


def check_geometry(atoms: Atoms) -> None:
    """Raise :class:`MoleculeError` when the geometry cannot be a molecule.

    Checks: at least one atom, finite coordinates, no two nuclei closer than
    :data:`MIN_DISTANCE_ANGSTROM`, and every hydrogen bonded to something. When
    distances look scaled by the Bohr/Angstrom ratio (0.529 or 1.89), the message
    says so.
    """
    if len(atoms) == 0:
        raise MoleculeError("empty record: no atoms")
    positions = atoms.get_positions()
    if not np.all(np.isfinite(positions)):
        bad = int(np.flatnonzero(~np.isfinite(positions).all(axis=1))[0])
        raise MoleculeError(f"non-finite coordinates for atom {bad + 1} ({atoms[bad].symbol})")
    if len(atoms) == 1:
        return
    nearest = nearest_neighbour_distances(positions)
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


def _looks_scaled(nearest: np.ndarray, factor: float) -> bool:
    """True when undoing ``factor`` puts the typical bond length where bonds live.

    Typical nearest-neighbour distances in organic molecules lie between about 0.95
    (O-H) and 1.55 Angstrom (C-C) (common practice, no source).
    """
    typical = float(np.median(nearest)) / factor
    return 0.9 <= typical <= 1.6
