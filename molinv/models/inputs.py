"""Inputs of the energy models: feature containers, element counts, checks, fingerprints.

Models take one of three kinds of ``X``:

* a 2-D array of global (one row per molecule) features;
* :class:`CountedFeatures`, the same array with each molecule's element counts
  attached, so that a per-element baseline can be fitted under the model;
* :class:`~molinv.descriptors.base.AtomFeatures`, one vector per atom (element
  counts follow from its ``numbers``).

All three index by molecule, so scikit-learn's cross-validation splits them.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np
from ase.data import chemical_symbols

from molinv.descriptors.base import AtomFeatures, element_numbers
from molinv.errors import MolinvError


class ModelInputError(MolinvError, ValueError):
    """Features or targets a model cannot use: wrong kind, shape, elements or values."""


@dataclass
class CountedFeatures:
    """Global features (``values``, one row per molecule) with element counts attached.

    ``counts[i, j]`` is the number of atoms of atomic number ``elements[j]`` in molecule ``i``.
    """

    values: np.ndarray
    counts: np.ndarray
    elements: tuple[int, ...]

    def __post_init__(self):
        self.values = np.asarray(self.values, dtype=float)
        self.counts = np.asarray(self.counts, dtype=float)
        self.elements = tuple(int(z) for z in self.elements)
        if self.values.ndim != 2 or self.counts.ndim != 2 or len(self.values) != len(self.counts):
            raise ModelInputError(
                f"values {self.values.shape} and counts {self.counts.shape} must be 2-D with one row per molecule each"
            )
        if self.counts.shape[1] != len(self.elements):
            raise ModelInputError(f"counts has {self.counts.shape[1]} columns for {len(self.elements)} elements")

    def __len__(self) -> int:
        return len(self.values)

    @property
    def shape(self) -> tuple[int, int]:
        # scikit-learn reads the number of samples from shape[0].
        return self.values.shape

    def __getitem__(self, selection) -> "CountedFeatures":
        picked = np.atleast_1d(np.arange(len(self))[selection])
        return CountedFeatures(self.values[picked], self.counts[picked], self.elements)


def with_element_counts(values, molecules, elements=None) -> CountedFeatures:
    """Attach the element counts of ``molecules`` (a list of ``ase.Atoms``) to global features.

    ``elements`` (symbols or atomic numbers) fixes the columns; ``None`` takes those present.
    """
    numbers = [np.asarray(atoms.numbers) for atoms in molecules]
    if len(numbers) != len(values):
        raise ModelInputError(f"{len(values)} feature rows for {len(numbers)} molecules")
    present = sorted(set(np.concatenate(numbers).tolist()))
    columns = element_numbers(elements) if elements is not None else tuple(present)
    _refuse_unknown_elements(present, columns)
    lookup = {z: j for j, z in enumerate(columns)}
    counts = np.zeros((len(numbers), len(columns)))
    for i, row in enumerate(numbers):
        np.add.at(counts[i], [lookup[int(z)] for z in row], 1.0)
    return CountedFeatures(np.asarray(values, dtype=float), counts, columns)


def _refuse_unknown_elements(present, allowed) -> None:
    extra = sorted(set(int(z) for z in present) - set(int(z) for z in allowed))
    if extra:
        raise ModelInputError(
            "molecules contain "
            + ", ".join(chemical_symbols[z] for z in extra)
            + "; the model knows only "
            + (", ".join(chemical_symbols[z] for z in allowed) or "no elements")
        )


def element_counts(X, elements=None) -> tuple[np.ndarray, tuple[int, ...]]:
    """Element-count matrix ``(n_molecules, n_elements)`` of ``X`` and its column elements.

    ``X`` is AtomFeatures, CountedFeatures, or a 2-D count matrix whose columns are
    ``elements`` (for a bare matrix ``elements`` may be ``None``: unnamed columns).
    With ``elements`` given, AtomFeatures/CountedFeatures are mapped onto those columns
    and any other element present raises :class:`ModelInputError`.
    """
    columns = None if elements is None else tuple(element_numbers(elements))
    if isinstance(X, AtomFeatures):
        numbers = np.asarray(X.numbers, dtype=int)
        present = tuple(np.unique(numbers).tolist())
        if columns is None:
            # The descriptor's element set, so a training subset lacking an element still
            # gives the full set of columns (that element's contribution is then zero).
            columns = tuple(X.elements) if X.elements else present
        _refuse_unknown_elements(present, columns)
        counts = np.zeros((len(X), len(columns)))
        column_of = np.searchsorted(np.asarray(columns), numbers)
        np.add.at(counts, (X.molecule_index(), column_of), 1.0)
        return counts, columns
    if isinstance(X, CountedFeatures):
        if columns is None:
            return X.counts, X.elements
        used = [z for z, total in zip(X.elements, X.counts.sum(axis=0)) if total > 0]
        _refuse_unknown_elements(used, columns)
        counts = np.zeros((len(X), len(columns)))
        for j, z in enumerate(X.elements):
            if z in columns:
                counts[:, columns.index(z)] = X.counts[:, j]
        return counts, columns
    counts = _finite_matrix(X, "element-count matrix")
    if columns is not None and counts.shape[1] != len(columns):
        raise ModelInputError(f"count matrix has {counts.shape[1]} columns for {len(columns)} elements")
    return counts, (columns if columns is not None else ())


def _finite_matrix(X, what: str) -> np.ndarray:
    if isinstance(X, AtomFeatures):
        raise ModelInputError(f"expected a {what} (one row per molecule), got AtomFeatures (one row per atom)")
    array = np.asarray(X, dtype=float)
    if array.ndim != 2:
        raise ModelInputError(f"expected a 2-D {what}, got shape {array.shape}")
    if len(array) == 0:
        raise ModelInputError(f"empty {what}")
    if not np.all(np.isfinite(array)):
        raise ModelInputError(f"{what} contains NaN or infinite values")
    return array


def global_values(X) -> np.ndarray:
    """The ``(n_molecules, d)`` feature array of global features (bare or CountedFeatures)."""
    return _finite_matrix(X.values if isinstance(X, CountedFeatures) else X, "global feature array")


def atom_features(X) -> AtomFeatures:
    """Check that ``X`` is a non-empty AtomFeatures with finite values."""
    if not isinstance(X, AtomFeatures):
        raise ModelInputError(f"expected AtomFeatures (one vector per atom), got {type(X).__name__}")
    if len(X) == 0 or X.values.ndim != 2:
        raise ModelInputError("AtomFeatures holds no molecules or its values are not 2-D")
    # In row blocks: the values may be a memory-mapped file larger than memory.
    for start in range(0, len(X.values), 100_000):
        if not np.all(np.isfinite(X.values[start : start + 100_000])):
            raise ModelInputError("AtomFeatures values contain NaN or infinite values")
    return X


def targets(y, n_molecules: int) -> np.ndarray:
    """Energies as a finite 1-D float array with one value per molecule."""
    y = np.asarray(y, dtype=float)
    if y.ndim != 1 or len(y) != n_molecules:
        raise ModelInputError(f"expected {n_molecules} energies in a 1-D array, got shape {y.shape}")
    if not np.all(np.isfinite(y)):
        raise ModelInputError("energies contain NaN or infinite values")
    return y


def per_element_sums(X: AtomFeatures, elements) -> np.ndarray:
    """Molecule vectors from atom vectors: for each element, the sum over that element's atoms.

    Returns ``(n_molecules, n_elements * d)``; block ``j`` sums the vectors of atoms
    with atomic number ``elements[j]``.
    """
    elements = tuple(int(z) for z in elements)
    _refuse_unknown_elements(np.unique(X.numbers), elements)
    width = X.values.shape[1]
    sums = np.zeros((len(X), len(elements) * width))
    molecule = X.molecule_index()
    for j, z in enumerate(elements):
        rows = X.numbers == z
        np.add.at(sums[:, j * width : (j + 1) * width], molecule[rows], X.values[rows])
    return sums


def fingerprint(*arrays) -> str:
    """SHA-256 (hex) over the dtype, shape and bytes of each array, in order."""
    digest = hashlib.sha256()
    for array in arrays:
        array = np.ascontiguousarray(array)
        digest.update(f"{array.dtype.str}{array.shape}".encode())
        digest.update(memoryview(array).cast("B"))  # the array's bytes, without a copy
    return digest.hexdigest()


def training_fingerprint(X, y) -> str:
    """Fingerprint of a training set (features of any accepted kind, and energies)."""
    if isinstance(X, AtomFeatures):
        parts = (X.values, X.numbers, X.offsets)
    elif isinstance(X, CountedFeatures):
        parts = (X.values, X.counts, np.asarray(X.elements))
    else:
        parts = (np.asarray(X, dtype=float),)
    return fingerprint(*parts, np.asarray(y, dtype=float))
