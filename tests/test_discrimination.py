"""Every C7H10O2 isomer of QM9 gets its own description.

QM9 holds the constitutional isomers of C7H10O2 (6,095 in the full set of 133,885;
Ramakrishnan, Dral, Rupp, von Lilienfeld, Sci. Data 1, 140022, 2014; one of them is among
the 3,054 uncharacterised molecules that qm9pack leaves out).
"""

import numpy as np
import pytest

from molinv.recipes import make_descriptor


@pytest.fixture(scope="module")
def isomers(qm9):
    counts = qm9.element_counts()
    chosen = np.flatnonzero((counts["C"] == 7) & (counts["H"] == 10) & (counts["O"] == 2)
                            & (counts["N"] == 0) & (counts["F"] == 0))
    return qm9.molecules(chosen)


def smallest_relative_gap(vectors: np.ndarray) -> float:
    """Smallest pairwise Euclidean distance over the mean vector norm, by blocks."""
    norms = np.einsum("ij,ij->i", vectors, vectors)
    smallest = np.inf
    for start in range(0, len(vectors), 1024):
        block = vectors[start : start + 1024]
        squared = norms[start : start + 1024, None] + norms[None, :] - 2.0 * block @ vectors.T
        squared[np.arange(len(block)), start + np.arange(len(block))] = np.inf
        smallest = min(smallest, float(np.sqrt(max(squared.min(), 0.0))))
    return smallest / float(np.sqrt(norms).mean())


def per_element_sums(descriptor, molecules, chunk=500):
    """Molecule vectors from atom vectors: the sum over the atoms of each element, side by side."""
    rows = []
    for start in range(0, len(molecules), chunk):
        features = descriptor.transform(molecules[start : start + chunk])
        elements = sorted(set(features.numbers))
        block = np.zeros((len(features), len(elements) * features.values.shape[1]))
        width = features.values.shape[1]
        for j, z in enumerate(elements):
            atoms = features.numbers == z
            np.add.at(block[:, j * width : (j + 1) * width], features.molecule_index()[atoms], features.values[atoms])
        rows.append(block)
    return np.vstack(rows)


def test_qm9_holds_the_isomers(isomers):
    assert len(isomers) == 6095 - 1


@pytest.mark.parametrize("name", ["coulomb", "bonds", "density-exact", "density"])
def test_global_descriptors_tell_all_isomers_apart(isomers, name):
    vectors = make_descriptor(name).fit(isomers).transform(isomers)
    # Coordinates in QM9 carry 10 significant digits; distinct structures differ far above 1e-6.
    assert smallest_relative_gap(vectors) > 1e-6


def test_atom_centred_descriptor_tells_all_isomers_apart(isomers):
    descriptor = make_descriptor("atoms", max_degree=2, n_scales=4).fit(isomers)
    assert smallest_relative_gap(per_element_sums(descriptor, isomers)) > 1e-6
