"""Reference descriptors: Coulomb matrix, bag of bonds, element counts.

Nuclear charges ``Z`` are the atomic numbers. Distances enter the Coulomb
terms in the unit chosen by ``length_unit`` (default ``"Bohr"``, the atomic
units of the published form, so that ``Z_i Z_j / |R_i - R_j|`` is in Hartree);
positions are read in Angstrom (ASE convention) and converted with
:func:`molinv.molecules.units.convert_length`.

References
----------
M. Rupp, A. Tkatchenko, K.-R. Mueller, O. A. von Lilienfeld, "Fast and accurate
modeling of molecular atomization energies with machine learning",
Phys. Rev. Lett. 108, 058301 (2012).

K. Hansen, F. Biegler, R. Ramakrishnan, W. Pronobis, O. A. von Lilienfeld,
K.-R. Mueller, A. Tkatchenko, "Machine learning predictions of molecular
properties: accurate many-body potentials and nonlocality in chemical space",
J. Phys. Chem. Lett. 6, 2326 (2015).
"""

from __future__ import annotations

from itertools import combinations_with_replacement

import numpy as np
from ase import Atoms
from ase.data import chemical_symbols

from ..molecules.units import convert_length, length_unit as canonical_length_unit
from .base import DescriptorError, MoleculeDescriptor, molecule_name

__all__ = ["CoulombMatrix", "BagOfBonds", "ElementCounts", "coulomb_matrix"]

COULOMB_VARIANTS = ("eigenvalues", "sorted_matrix")


def coulomb_matrix(numbers: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """Coulomb matrix (Rupp et al. 2012, eq. 1).

    ``M_ii = 0.5 Z_i^2.4`` and ``M_ij = Z_i Z_j / |R_i - R_j|`` for ``i != j``,
    with distances in the unit of ``positions``.
    """
    charges = np.asarray(numbers, dtype=float)
    distances = np.linalg.norm(positions[:, None, :] - positions[None, :, :], axis=-1)
    np.fill_diagonal(distances, 1.0)
    matrix = np.outer(charges, charges) / distances
    np.fill_diagonal(matrix, 0.5 * charges**2.4)
    return matrix


def _check_length_unit(unit: str) -> None:
    try:
        canonical_length_unit(unit)
    except ValueError as error:
        raise DescriptorError(str(error)) from error


def _positions_in(atoms: Atoms, unit: str) -> np.ndarray:
    return convert_length(atoms.positions, "Angstrom", unit)


class CoulombMatrix(MoleculeDescriptor):
    """Coulomb matrix of Rupp et al. (2012), made permutation invariant.

    Parameters
    ----------
    variant : {"eigenvalues", "sorted_matrix"}
        ``"eigenvalues"``: the eigenvalues sorted in descending order, zero
        padded to ``max_atoms``. ``"sorted_matrix"``: rows and columns ordered
        by descending row norm, upper triangle (diagonal included) read row by
        row from the zero-padded ``max_atoms x max_atoms`` matrix.
    max_atoms : int, optional
        Padding size; ``None`` learns the largest molecule at ``fit``.
    length_unit : str
        Unit of the distances in ``Z_i Z_j / |R_ij|`` (default Bohr, as published).
    elements, n_jobs, chunk_size, progress
        See :class:`MoleculeDescriptor`.
    """

    def __init__(self, variant="eigenvalues", max_atoms=None, length_unit="Bohr",
                 elements=None, n_jobs=1, chunk_size=256, progress=None):
        self.variant = variant
        self.max_atoms = max_atoms
        self.length_unit = length_unit
        self.elements = elements
        self.n_jobs = n_jobs
        self.chunk_size = chunk_size
        self.progress = progress

    def _check_settings(self):
        if self.variant not in COULOMB_VARIANTS:
            raise DescriptorError(f"variant must be one of {COULOMB_VARIANTS}, got {self.variant!r}")
        if self.max_atoms is not None and int(self.max_atoms) < 1:
            raise DescriptorError(f"max_atoms must be a positive integer, got {self.max_atoms!r}")
        _check_length_unit(self.length_unit)

    def _fit_features(self, molecules):
        self.max_atoms_ = int(self.max_atoms) if self.max_atoms is not None else max(len(a) for a in molecules)

    def _fitted_state(self):
        return {"max_atoms": self.max_atoms_}

    def _restore_fitted_state(self, state, arrays):
        self.max_atoms_ = int(state["max_atoms"])

    def _check_elements(self, molecules):
        super()._check_elements(molecules)
        for position, atoms in enumerate(molecules):
            if len(atoms) > self.max_atoms_:
                raise DescriptorError(
                    f"{molecule_name(atoms, position)} has {len(atoms)} atoms, more than the {self.max_atoms_} "
                    "this descriptor was fitted for: refit with molecules this large among the training "
                    "molecules (in Python, max_atoms fixes the padding before fit)"
                )

    def _describe_one(self, atoms):
        matrix = coulomb_matrix(atoms.numbers, _positions_in(atoms, self.length_unit))
        size = self.max_atoms_
        if self.variant == "eigenvalues":
            values = np.zeros(size)
            values[: len(atoms)] = np.sort(np.linalg.eigvalsh(matrix))[::-1]
            return values
        # Norms rounded to 10 significant digits so that rounding noise (after a
        # rotation, say) cannot reorder equal norms; ties keep the input order.
        # Atoms with equal norms but different rows (symmetry-equivalent atoms
        # in different environments) make this variant depend on the input
        # order, a known property of sorting by row norm; "eigenvalues" has none.
        norms = np.linalg.norm(matrix, axis=1)
        order = np.argsort(-np.round(norms, 10 - int(np.ceil(np.log10(norms.max())))), kind="stable")
        padded = np.zeros((size, size))
        padded[: len(atoms), : len(atoms)] = matrix[np.ix_(order, order)]
        return padded[np.triu_indices(size)]


def _bag_key(z1: int, z2: int | None) -> str:
    """``"C"`` for the diagonal bag of carbon, ``"C-H"`` for carbon-hydrogen pairs."""
    if z2 is None:
        return chemical_symbols[z1]
    first, second = sorted((z1, z2), reverse=True)
    return f"{chemical_symbols[first]}-{chemical_symbols[second]}"


def bag_values(numbers: np.ndarray, positions: np.ndarray) -> dict[str, np.ndarray]:
    """Bag-of-bonds entries of one molecule, each bag sorted in descending order.

    Bags (Hansen et al. 2015): one per element ``e`` with ``0.5 Z_e^2.4`` for
    each atom of ``e`` (the Coulomb matrix diagonal), and one per element pair
    with ``Z_i Z_j / |R_i - R_j|`` over all atom pairs of those elements,
    distances in the unit of ``positions``.
    """
    matrix = coulomb_matrix(numbers, positions)
    bags: dict[str, np.ndarray] = {}
    for z in np.unique(numbers):
        bags[_bag_key(int(z), None)] = np.diag(matrix)[numbers == z]
    upper_i, upper_j = np.triu_indices(len(numbers), k=1)
    keys = np.array([_bag_key(int(numbers[i]), int(numbers[j])) for i, j in zip(upper_i, upper_j)], dtype=object)
    entries = matrix[upper_i, upper_j]
    for key in set(keys):
        bags[key] = entries[keys == key]
    return {key: np.sort(values)[::-1] for key, values in bags.items()}


def bag_counts(numbers: np.ndarray) -> dict[str, int]:
    """Entries per bag: ``n_e`` per element, ``n_e n_f`` per pair, ``n_e (n_e - 1) / 2`` for like pairs."""
    elements, counts = np.unique(numbers, return_counts=True)
    sizes = {_bag_key(int(z), None): int(n) for z, n in zip(elements, counts)}
    for (z1, n1), (z2, n2) in combinations_with_replacement(zip(elements, counts), 2):
        sizes[_bag_key(int(z1), int(z2))] = int(n1 * (n1 - 1) // 2 if z1 == z2 else n1 * n2)
    return sizes


class BagOfBonds(MoleculeDescriptor):
    """Bag of bonds of Hansen et al. (2015).

    Features are the bags in a fixed order (for elements ``e1 < e2 < ...``:
    the diagonal bag of each element, then each element pair ``(e, f)`` with
    ``e >= f``), each sorted in descending order and zero padded to its size.

    Parameters
    ----------
    bag_sizes : dict, optional
        Entries per bag, keyed ``"C"`` (diagonal) or ``"C-H"`` (heavier
        element first). ``None`` learns the largest count of each bag at
        ``fit``; bags missing from the dict are learned too.
    length_unit : str
        Unit of the distances in ``Z_i Z_j / |R_ij|`` (default Bohr, as published).
    elements, n_jobs, chunk_size, progress
        See :class:`MoleculeDescriptor`.
    """

    def __init__(self, bag_sizes=None, length_unit="Bohr", elements=None, n_jobs=1, chunk_size=256, progress=None):
        self.bag_sizes = bag_sizes
        self.length_unit = length_unit
        self.elements = elements
        self.n_jobs = n_jobs
        self.chunk_size = chunk_size
        self.progress = progress

    def _check_settings(self):
        _check_length_unit(self.length_unit)
        if self.bag_sizes is not None:
            known = set(self._bag_order())
            unknown = set(self.bag_sizes) - known
            if unknown:
                raise DescriptorError(f"bag_sizes has bags {sorted(unknown)} outside the element set; known: {sorted(known)}")

    def _bag_order(self) -> list[str]:
        diagonal = [_bag_key(z, None) for z in self.elements_]
        pairs = [_bag_key(z2, z1) for z1, z2 in combinations_with_replacement(self.elements_, 2)]
        return diagonal + pairs

    def _fit_features(self, molecules):
        given = dict(self.bag_sizes or {})
        learned = {key: 0 for key in self._bag_order()}
        for atoms in molecules:
            for key, count in bag_counts(atoms.numbers).items():
                if key in learned:
                    learned[key] = max(learned[key], count)
        self.bag_sizes_ = {key: int(given.get(key, learned[key])) for key in self._bag_order()}

    def _fitted_state(self):
        return {"bag_sizes": dict(self.bag_sizes_)}

    def _restore_fitted_state(self, state, arrays):
        self.bag_sizes_ = {key: int(state["bag_sizes"][key]) for key in self._bag_order()}

    def _check_elements(self, molecules):
        super()._check_elements(molecules)
        for position, atoms in enumerate(molecules):
            for key, count in bag_counts(atoms.numbers).items():
                if count > self.bag_sizes_[key]:
                    raise DescriptorError(
                        f"{molecule_name(atoms, position)} has {count} entries in bag {key}, more than the "
                        f"{self.bag_sizes_[key]} this descriptor was fitted for: refit with molecules this large "
                        "among the training molecules (in Python, bag_sizes fixes the bags before fit)"
                    )

    def _describe_one(self, atoms):
        bags = bag_values(atoms.numbers, _positions_in(atoms, self.length_unit))
        pieces = []
        for key, size in self.bag_sizes_.items():
            values = bags.get(key, np.zeros(0))
            padded = np.zeros(size)
            padded[: len(values)] = values
            pieces.append(padded)
        return np.concatenate(pieces) if pieces else np.zeros(0)


class ElementCounts(MoleculeDescriptor):
    """Number of atoms of each fitted element, one column per element (ascending ``Z``).

    The inputs of a per-element energy fit ``E ~ sum_e n_e w_e``.

    Parameters
    ----------
    elements, n_jobs, chunk_size, progress
        See :class:`MoleculeDescriptor`.
    """

    def __init__(self, elements=None, n_jobs=1, chunk_size=1024, progress=None):
        self.elements = elements
        self.n_jobs = n_jobs
        self.chunk_size = chunk_size
        self.progress = progress

    def _describe_one(self, atoms):
        return (atoms.numbers[:, None] == np.asarray(self.elements_)[None, :]).sum(axis=0).astype(float)
