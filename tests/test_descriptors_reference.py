"""Coulomb matrix, bag of bonds and element counts against their published definitions.

Molecules: ase.build.molecule, ASE's copy of the G2 set (Curtiss, Raghavachari,
Redfern, Pople, J. Chem. Phys. 106, 1063, 1997; ASE: Larsen et al., J. Phys.:
Condens. Matter 29, 273002, 2017). Bohr from ase.units (CODATA 2014).
"""

import json
from collections import Counter

import numpy as np
import pytest
from ase import units
from ase.build import molecule
from scipy.spatial.transform import Rotation

from molinv.descriptors import BagOfBonds, CoulombMatrix, DescriptorError, ElementCounts
from molinv.descriptors.base import descriptor_from_settings

SMALL = ["H2O", "CH4", "CH3OH", "CH3CH2OH"]


def moved(atoms, seed, reflect=False, permute=True):
    """A rotated (optionally reflected), translated, permuted copy."""
    rng = np.random.default_rng(seed)
    rotation = Rotation.random(random_state=seed).as_matrix()
    if reflect:
        rotation = rotation @ np.diag([1.0, 1.0, -1.0])
    copy = atoms[rng.permutation(len(atoms))] if permute else atoms.copy()
    copy.positions = copy.positions @ rotation.T + rng.normal(scale=3.0, size=3)
    return copy


def hand_coulomb_matrix_water():
    """Rupp et al., PRL 108, 058301 (2012), eq. 1, written out for H2O in Bohr."""
    water = molecule("H2O")
    z = water.numbers
    r = water.positions / units.Bohr
    m = np.empty((3, 3))
    for i in range(3):
        for j in range(3):
            m[i, j] = 0.5 * z[i] ** 2.4 if i == j else z[i] * z[j] / np.sqrt(np.sum((r[i] - r[j]) ** 2))
    return m


def test_coulomb_matrix_water_by_hand():
    hand = hand_coulomb_matrix_water()
    # Rows by descending norm: O first, then the two (equal) H rows.
    order = np.argsort(-np.linalg.norm(hand, axis=1), kind="stable")
    expected = hand[np.ix_(order, order)][np.triu_indices(3)]
    got = CoulombMatrix(variant="sorted_matrix").fit([molecule("H2O")]).transform([molecule("H2O")])[0]
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    assert got[0] == pytest.approx(0.5 * 8**2.4)
    eigenvalues = CoulombMatrix().fit([molecule("H2O")]).transform([molecule("H2O")])[0]
    # Trace and determinant identities of the hand-built matrix.
    assert eigenvalues.sum() == pytest.approx(np.trace(hand), rel=1e-12)
    assert np.prod(eigenvalues) == pytest.approx(np.linalg.det(hand), rel=1e-10)
    assert np.all(np.diff(eigenvalues) <= 0)


def test_coulomb_matrix_length_unit_and_padding():
    water = molecule("H2O")
    in_bohr = CoulombMatrix(variant="sorted_matrix", max_atoms=5).fit([water]).transform([water])[0]
    in_angstrom = CoulombMatrix(variant="sorted_matrix", max_atoms=5, length_unit="Angstrom").fit([water]).transform([water])[0]
    assert in_bohr.shape == (15,)
    # Off-diagonal terms scale with 1 / length: Bohr values = Angstrom values * (1 Bohr / 1 Angstrom).
    off_diagonal = np.ones((5, 5), bool)
    np.fill_diagonal(off_diagonal, False)
    mask = off_diagonal[np.triu_indices(5)] & (in_bohr != 0)
    np.testing.assert_allclose(in_bohr[mask], in_angstrom[mask] * units.Bohr, rtol=1e-12)
    assert np.count_nonzero(in_bohr) == 6
    eigen = CoulombMatrix(max_atoms=5).fit([water]).transform([water])[0]
    assert np.all(eigen[3:] == 0) and np.all(eigen[:3] != 0)


@pytest.mark.parametrize("variant", ["eigenvalues", "sorted_matrix"])
def test_coulomb_matrix_invariance(variant):
    ethanol = molecule("CH3CH2OH")
    descriptor = CoulombMatrix(variant=variant).fit([ethanol])
    reference = descriptor.transform([ethanol])
    # Sorting by row norm is order dependent for atoms with equal norms (ethanol's
    # methyl and methylene H pairs), so that variant is checked without permutation.
    permute = variant == "eigenvalues"
    for seed, reflect in [(1, False), (2, True)]:
        got = descriptor.transform([moved(ethanol, seed, reflect, permute)])
        np.testing.assert_allclose(got, reference, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("variant", ["eigenvalues", "sorted_matrix"])
def test_coulomb_matrix_rebuilt_from_settings(variant):
    molecules = [molecule(name) for name in SMALL]
    descriptor = CoulombMatrix(variant=variant).fit(molecules)
    rebuilt = descriptor_from_settings(json.loads(json.dumps(descriptor.settings())))
    assert rebuilt.max_atoms_ == 9
    np.testing.assert_array_equal(rebuilt.transform(molecules[:2]), descriptor.transform(molecules[:2]))


def test_coulomb_matrix_too_many_atoms():
    descriptor = CoulombMatrix(elements=["H", "C", "O"]).fit([molecule("H2O")])
    with pytest.raises(DescriptorError, match="more than the 3 this descriptor was fitted for"):
        descriptor.transform([molecule("CH4")])


def test_bag_of_bonds_water_by_hand():
    # Hansen et al., J. Phys. Chem. Lett. 6, 2326 (2015): bags of Coulomb matrix entries per element pair.
    water, methane = molecule("H2O"), molecule("CH4")
    descriptor = BagOfBonds().fit([water, methane])
    sizes = descriptor.bag_sizes_
    # H2O: 2 H, 1 O; CH4: 4 H, 1 C. H-H pairs: max(1, 6) = 6; C-H: 4; O-H: 2.
    assert sizes == {"H": 4, "C": 1, "O": 1, "H-H": 6, "C-H": 4, "O-H": 2, "C-C": 0, "O-C": 0, "O-O": 0}
    hand = hand_coulomb_matrix_water()  # atom order in ase's H2O: O, H, H
    got = descriptor.transform([water])[0]
    expected = np.concatenate([
        [0.5, 0.5, 0, 0],  # H diagonal: 0.5 * 1^2.4
        [0],  # C
        [0.5 * 8**2.4],  # O
        [hand[1, 2], 0, 0, 0, 0, 0],  # H-H
        [0, 0, 0, 0],  # C-H
        sorted([hand[0, 1], hand[0, 2]], reverse=True),  # O-H
    ])
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_bag_of_bonds_invariance_and_rebuild():
    molecules = [molecule(name) for name in SMALL]
    descriptor = BagOfBonds().fit(molecules)
    reference = descriptor.transform(molecules)
    np.testing.assert_allclose(descriptor.transform([moved(m, 3, True) for m in molecules]), reference, rtol=1e-10, atol=1e-12)
    settings = json.loads(json.dumps(descriptor.settings()))  # as a model file stores it
    np.testing.assert_array_equal(descriptor_from_settings(settings).transform(molecules), reference)
    # The stored sizes can also be given as a parameter: fitting on other data then changes nothing.
    rebuilt = BagOfBonds(**{**settings["params"], "bag_sizes": settings["bag_sizes"]}).fit([molecule("H2O")])
    np.testing.assert_array_equal(rebuilt.transform(molecules), reference)
    with pytest.raises(DescriptorError, match="bag"):
        BagOfBonds(elements=["H", "O"]).fit([molecule("H2O")]).transform([molecule("H2O2")])


def test_element_counts_match_ase_symbols():
    molecules = [molecule(name) for name in SMALL]
    descriptor = ElementCounts().fit(molecules)
    counts = descriptor.transform(molecules)
    symbols = ["H", "C", "O"]
    for row, atoms in zip(counts, molecules):
        tally = Counter(atoms.get_chemical_symbols())
        assert list(row) == [tally[s] for s in symbols]


@pytest.mark.parametrize("cls", [CoulombMatrix, BagOfBonds, ElementCounts])
def test_element_mismatch_raises(cls):
    descriptor = cls().fit([molecule("CH4")])
    with pytest.raises(DescriptorError, match="contains O"):
        descriptor.transform([molecule("CH3OH")])


def test_isomers_differ_and_enantiomers_agree():
    ethanol, ether = molecule("CH3CH2OH"), molecule("CH3OCH3")
    for descriptor in [CoulombMatrix(), CoulombMatrix(variant="sorted_matrix"), BagOfBonds()]:
        descriptor.fit([ethanol, ether])
        a, b = descriptor.transform([ethanol, ether])
        assert np.linalg.norm(a - b) > 1e-2 * np.linalg.norm(a)
        mirror = ethanol.copy()
        mirror.positions[:, 0] *= -1
        np.testing.assert_allclose(descriptor.transform([mirror])[0], a, rtol=1e-12)
