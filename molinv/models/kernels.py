"""Kernels between molecules, evaluated for several widths from one distance computation.

Global descriptors (one vector per molecule):

* Gaussian   :math:`k(x, y) = \\exp(-|x - y|_2^2 / (2 s^2))`
* Laplacian  :math:`k(x, y) = \\exp(-|x - y|_1 / s)`

(Rupp, Tkatchenko, Mueller, von Lilienfeld, Phys. Rev. Lett. 108, 058301, 2012;
Hansen et al., J. Chem. Theory Comput. 9, 3404, 2013). In scikit-learn's
convention these are ``rbf`` with ``gamma = 1 / (2 s^2)`` and ``laplacian`` with
``gamma = 1 / s``.

Atom-centred descriptors (one vector per atom), the atom-by-atom kernel

.. math::  K(A, B) = \\sum_{i \\in A} \\sum_{k \\in B} \\delta_{Z_i Z_k} \\exp(-|x_i - x_k|^2 / (2 s^2))

(De, Bartok, Csanyi, Ceriotti, Phys. Chem. Chem. Phys. 18, 13754, 2016, the
unnormalised sum). It is computed per element in row blocks: squared distances
by one matrix product, then for every width the atom kernel block is summed into
molecule kernels with sparse indicator matrices, :math:`K = P_A K_{atoms} P_B^T`.

Each kernel's :meth:`table` returns a :class:`KernelTable` whose
``matrix(i_width, rows, cols)`` gives the kernel for ``widths[i_width]``,
restricted to molecules ``rows`` x ``cols`` (for cross-validation folds).
"""

from __future__ import annotations

import numpy as np
from scipy import sparse
from scipy.spatial.distance import cdist

from molinv.descriptors.base import AtomFeatures
from molinv.models.inputs import ModelInputError

GLOBAL_KERNELS = ("gaussian", "laplacian")
ATOM_DTYPES = ("float32", "float64")


def squared_distances(a: np.ndarray, b: np.ndarray, dtype=np.float64) -> np.ndarray:
    """``|a_i - b_j|^2`` as ``|a_i|^2 + |b_j|^2 - 2 a_i . b_j`` (one BLAS matrix product).

    Rounding can make the expansion slightly negative; it is clipped at zero.
    """
    a = np.asarray(a, dtype=dtype)
    b = np.asarray(b, dtype=dtype)
    result = a @ b.T
    result *= -2.0
    result += np.einsum("ij,ij->i", a, a)[:, None]
    result += np.einsum("ij,ij->i", b, b)[None, :]
    np.maximum(result, 0.0, out=result)
    return result


def manhattan_distances(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``|a_i - b_j|_1`` for all pairs."""
    return cdist(a, b, metric="cityblock")


def check_widths(widths) -> np.ndarray:
    """Kernel widths as a 1-D array of positive finite floats."""
    widths = np.atleast_1d(np.asarray(widths, dtype=float))
    if widths.ndim != 1 or len(widths) == 0 or not np.all(np.isfinite(widths)) or np.any(widths <= 0):
        raise ModelInputError(f"kernel widths must be positive finite numbers, got {widths}")
    return widths


def kernel_from_distances(distances: np.ndarray, kind: str, width: float) -> np.ndarray:
    """Gaussian ``exp(-d2 / (2 s^2))`` of squared distances or Laplacian ``exp(-d1 / s)`` of L1 distances
    (one new array, exponentiated in place)."""
    result = distances * (-0.5 / width**2 if kind == "gaussian" else -1.0 / width)
    return np.exp(result, out=result)


class KernelTable:
    """Kernels for several widths between two sets of molecules.

    Holds either one distance matrix (global kernels: the exponential is taken on
    request, so memory is one matrix whatever the number of widths) or one
    precomputed molecule kernel per width (atom-by-atom kernel).
    """

    def __init__(self, widths, distances=None, kind=None, matrices=None):
        self.widths = widths
        self._distances = distances
        self._kind = kind
        self._matrices = matrices

    def matrix(self, i_width: int, rows=None, cols=None) -> np.ndarray:
        source = self._distances if self._matrices is None else self._matrices[i_width]
        if rows is not None or cols is not None:
            rows = np.arange(len(source)) if rows is None else np.asarray(rows)
            cols = np.arange(source.shape[1]) if cols is None else np.asarray(cols)
            source = source[np.ix_(rows, cols)]
        if self._matrices is not None:
            return source
        return kernel_from_distances(source, self._kind, self.widths[i_width])


class GlobalKernel:
    """Gaussian or Laplacian kernel on one feature vector per molecule (float64)."""

    def __init__(self, kind: str):
        if kind not in GLOBAL_KERNELS:
            raise ModelInputError(f"kernel must be one of {GLOBAL_KERNELS}, got {kind!r}")
        self.kind = kind

    def table(self, a: np.ndarray, b: np.ndarray, widths) -> KernelTable:
        distances = squared_distances(a, b) if self.kind == "gaussian" else manhattan_distances(a, b)
        return KernelTable(check_widths(widths), distances=distances, kind=self.kind)

    def self_similarity(self, a: np.ndarray, width: float) -> np.ndarray:
        """``k(x, x)`` for each row: 1 for both kernels."""
        return np.ones(len(a))


def molecule_indicator(molecule_of_atom: np.ndarray, n_molecules: int, dtype) -> sparse.csr_matrix:
    """Sparse ``P`` with ``P[m, j] = 1`` when atom ``j`` belongs to molecule ``m``."""
    n_atoms = len(molecule_of_atom)
    return sparse.csr_matrix(
        (np.ones(n_atoms, dtype=dtype), (molecule_of_atom, np.arange(n_atoms))), shape=(n_molecules, n_atoms)
    )


class AtomwiseKernel:
    """Atom-by-atom Gaussian kernel between molecules given as AtomFeatures.

    Parameters
    ----------
    dtype : {"float32", "float64"}
        Precision of atom-pair distances and atom kernels; molecule kernels are
        always accumulated in float64.
    block_size : int
        Atoms of the first set per block (memory per block: ``block_size`` times
        the atoms of one element in the second set).
    """

    def __init__(self, dtype: str = "float64", block_size: int = 2048):
        if dtype not in ATOM_DTYPES:
            raise ModelInputError(f"dtype must be one of {ATOM_DTYPES}, got {dtype!r}")
        if int(block_size) < 1:
            raise ModelInputError(f"block_size must be positive, got {block_size}")
        self.dtype = np.dtype(dtype)
        self.block_size = int(block_size)

    def table(self, a: AtomFeatures, b: AtomFeatures, widths) -> KernelTable:
        """Molecule kernels ``K(a, b)`` for every width.

        When ``b is a`` only atom pairs ``(i, k)`` with ``k`` not before ``i``'s block are
        computed (about half) and the result is symmetrised.
        """
        widths = check_widths(widths)
        symmetric = b is a
        exponent_factors = (-0.5 / widths**2).astype(self.dtype)
        kernels = np.zeros((len(widths), len(a), len(b)))
        molecule_a, molecule_b = a.molecule_index(), b.molecule_index()
        for z in np.intersect1d(a.numbers, b.numbers):
            atoms_a = np.flatnonzero(a.numbers == z)
            atoms_b = np.flatnonzero(b.numbers == z)
            values_b = b.values[atoms_b].astype(self.dtype)
            indicator_b = molecule_indicator(molecule_b[atoms_b], len(b), self.dtype).tocsc()
            for start in range(0, len(atoms_a), self.block_size):
                block = atoms_a[start : start + self.block_size]
                # Atoms are stored molecule by molecule, so a block covers a contiguous molecule range.
                first, last = molecule_a[block[0]], molecule_a[block[-1]] + 1
                indicator_a = molecule_indicator(molecule_a[block] - first, last - first, self.dtype)
                columns = slice(start, None) if symmetric else slice(None)
                distances = squared_distances(a.values[block], values_b[columns], self.dtype)
                atom_kernel = np.empty_like(distances)
                for i_width, factor in enumerate(exponent_factors):
                    np.multiply(distances, factor, out=atom_kernel)
                    np.exp(atom_kernel, out=atom_kernel)
                    partial = indicator_a @ atom_kernel
                    if not symmetric:
                        kernels[i_width, first:last] += (indicator_b @ partial.T).T
                        continue
                    # Pairs inside the block are all present (both orders); pairs with later atoms
                    # once, so those are added in both orientations.
                    own = len(block)
                    inside = (indicator_b[:, start : start + own] @ partial[:, :own].T).T
                    later = (indicator_b[:, start + own :] @ partial[:, own:].T).T
                    kernels[i_width, first:last] += inside + later
                    kernels[i_width, :, first:last] += later.T
        return KernelTable(widths, matrices=kernels)

    def self_similarity(self, a: AtomFeatures, width: float) -> np.ndarray:
        """``K(A, A)`` for each molecule of ``a`` (one small distance matrix per molecule)."""
        result = np.empty(len(a))
        for m in range(len(a)):
            rows = slice(a.offsets[m], a.offsets[m + 1])
            numbers = a.numbers[rows]
            same_element = numbers[:, None] == numbers[None, :]
            distances = squared_distances(a.values[rows], a.values[rows], self.dtype)
            result[m] = np.sum(np.exp(distances * (-0.5 / width**2)) * same_element, dtype=np.float64)
        return result
