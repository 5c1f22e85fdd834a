"""The principal-direction projection of the atom-centred invariants (``n_components``),
checked against scikit-learn's PCA on the same atom vectors of real QM9 molecules
(Ramakrishnan et al., Sci. Data 1, 140022, 2014), and through a model file."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.decomposition import PCA

from molinv.descriptors.base import DescriptorError, descriptor_from_settings
from molinv.recipes import EnergyModel, make_regressor
from tests.test_descriptors_atomic import small_descriptor


@pytest.fixture(scope="module")
def molecules(qm9):
    return qm9.molecules(qm9.sample(100, seed=31))


def test_projection_keeps_distances_of_scikit_learn_pca(molecules):
    fitting, others = molecules[:60], molecules[60:80]
    projected = small_descriptor(n_scales=3, n_components=12, basis_molecules=1000).fit(fitting)
    full = small_descriptor(n_scales=3).fit(fitting)
    reference = full.transform(fitting)
    ours, theirs = projected.transform(others), full.transform(others)
    for z in (1, 6):
        pca = PCA(n_components=12, svd_solver="full").fit(reference.values[reference.numbers == z])
        mine = ours.values[ours.numbers == z]
        expected = pca.transform(theirs.values[theirs.numbers == z])
        # Principal directions are defined up to sign, so compare distances between atoms.
        gaps_mine = np.linalg.norm(mine[:, None] - mine[None], axis=2)
        gaps_pca = np.linalg.norm(expected[:, None] - expected[None], axis=2)
        np.testing.assert_allclose(gaps_mine, gaps_pca, rtol=1e-7, atol=1e-9 * gaps_pca.max())
        kept = projected.kept_variance_[projected.elements_.index(z)]
        assert kept == pytest.approx(pca.explained_variance_ratio_.sum(), rel=1e-9)


def test_projected_vectors_have_the_asked_length_and_stay_invariant(molecules):
    descriptor = small_descriptor(n_components=8).fit(molecules[:20])
    molecule = molecules[70].copy()
    before = descriptor.transform([molecule]).values
    molecule.rotate(73, (1, 2, 3), center="COM")
    molecule.positions *= [-1, 1, 1]
    assert before.shape[1] == 8
    np.testing.assert_allclose(descriptor.transform([molecule]).values, before, rtol=1e-9, atol=1e-12)


def test_model_file_keeps_the_basis_and_refuses_an_altered_one(molecules, tmp_path):
    energies = np.array([m.info["atomization_energy"] for m in molecules[:60]])
    model = EnergyModel(small_descriptor(n_scales=3, n_components=10), make_regressor("baseline", per_atom=True))
    model.fit(molecules[:60], energies)
    path = model.save(tmp_path / "model.npz")
    loaded, metadata = EnergyModel.load(path)
    np.testing.assert_array_equal(loaded.descriptor_.transform(molecules[60:]).values,
                                  model.descriptor_.transform(molecules[60:]).values)
    altered = {"basis": model.descriptor_.basis_ * 1.001}
    with pytest.raises(DescriptorError, match="basis"):
        descriptor_from_settings(metadata["descriptor"], altered)
    with pytest.raises(DescriptorError, match="basis"):
        descriptor_from_settings(metadata["descriptor"], {})
