"""Per-element baseline and linear ridge checked against scikit-learn's LinearRegression / Ridge."""

import numpy as np
import pytest
from ase import Atoms
from sklearn.linear_model import LinearRegression, Ridge

from molinv.descriptors.base import AtomFeatures
from molinv.models import ElementBaseline, LinearRidge, ModelInputError, with_element_counts


def molecules(n, seed=0):
    """Invented molecules (random H/C/N/O atoms), each with random atom vectors."""
    rng = np.random.default_rng(seed)
    result, blocks = [], []
    for _ in range(n):
        size = int(rng.integers(2, 9))
        atoms = Atoms(numbers=rng.choice([1, 6, 7, 8], size=size), positions=rng.normal(size=(size, 3)))
        result.append(atoms)
        blocks.append(rng.normal(size=(size, 3)))
    return result, AtomFeatures.from_blocks(blocks, [a.numbers for a in result]), blocks


def test_element_baseline_from_atom_features_equals_lstsq_on_ase_counts():
    mols, features, _ = molecules(60)
    rng = np.random.default_rng(2)
    energies = rng.normal(size=60) * 0.1 - np.array([m.get_chemical_symbols().count("C") for m in mols]) * 5.0
    # Counts built independently with ase's chemical symbols.
    symbols = ["H", "C", "N", "O"]
    counts = np.array([[m.get_chemical_symbols().count(s) for s in symbols] for m in mols], dtype=float)
    reference = LinearRegression(fit_intercept=False).fit(counts, energies)
    from_atoms = ElementBaseline().fit(features, energies)
    from_counts = ElementBaseline(elements=symbols).fit(counts, energies)
    np.testing.assert_allclose(from_atoms.contributions_, reference.coef_, atol=1e-10)
    np.testing.assert_allclose(from_counts.predict(counts), reference.predict(counts), atol=1e-10)
    np.testing.assert_allclose(from_atoms.predict(features), reference.predict(counts), atol=1e-10)
    assert from_atoms.elements_ == (1, 6, 7, 8)


def test_element_baseline_refuses_unseen_element():
    mols, features, _ = molecules(30)
    baseline = ElementBaseline().fit(features[:20], np.zeros(20))
    fluorine = AtomFeatures(np.zeros((1, 3)), np.array([9]), np.array([0, 1]))
    with pytest.raises(ModelInputError, match="F"):
        baseline.predict(fluorine)


def test_linear_ridge_on_global_features_matches_sklearn_ridge():
    mols, _, _ = molecules(80, seed=3)
    rng = np.random.default_rng(4)
    values = rng.normal(size=(80, 7))
    energies = values @ rng.normal(size=7) + rng.normal(size=80) * 0.1
    features = with_element_counts(values, mols)
    ours = LinearRidge(regularization=0.5).fit(features[:60], energies[:60])
    counts = features.counts
    baseline = LinearRegression(fit_intercept=False).fit(counts[:60], energies[:60])
    ridge = Ridge(alpha=0.5, fit_intercept=False).fit(values[:60], energies[:60] - baseline.predict(counts[:60]))
    expected = baseline.predict(counts[60:]) + ridge.predict(values[60:])
    np.testing.assert_allclose(ours.predict(features[60:]), expected, atol=1e-9)


def test_linear_ridge_on_atom_features_uses_per_element_sums():
    mols, features, blocks = molecules(70, seed=5)
    energies = np.array([b.sum() for b in blocks])
    ours = LinearRidge(regularization=0.1, baseline=None).fit(features[:50], energies[:50])
    # Per-element sums built by hand, element blocks in the order H, C, N, O.
    design = np.array([np.concatenate([b[m.numbers == z].sum(axis=0) for z in (1, 6, 7, 8)])
                       for m, b in zip(mols, blocks)])
    ridge = Ridge(alpha=0.1, fit_intercept=False).fit(design[:50], energies[:50])
    np.testing.assert_allclose(ours.predict(features[50:]), ridge.predict(design[50:]), atol=1e-9)
