"""Atom-by-atom kernel (De, Bartok, Csanyi, Ceriotti, PCCP 18, 13754, 2016, unnormalised sum) checked
against scikit-learn's rbf_kernel summed pair by pair, and its ridge fit/CV against sklearn's
KernelRidge / GridSearchCV with a precomputed kernel."""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.metrics.pairwise import rbf_kernel
from sklearn.model_selection import GridSearchCV, KFold

from molinv.descriptors.base import AtomFeatures
from molinv.models import AtomwiseKernelRidge, AtomwiseKernelRidgeCV
from molinv.models.kernels import AtomwiseKernel


def random_atom_features(n_molecules, d=5, seed=0):
    """Invented molecules (3-9 atoms of H, C, O) with random atom vectors, for comparisons only."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(3, 10, size=n_molecules)
    numbers = [rng.choice([1, 6, 8], size=s, p=[0.5, 0.35, 0.15]) for s in sizes]
    blocks = [rng.normal(size=(s, d)) + z[:, None] * 0.1 for s, z in zip(sizes, numbers)]
    features = AtomFeatures.from_blocks(blocks, numbers)
    energies = np.array([np.sum(np.tanh(b[:, 0])) + 0.2 * np.sum(b[:, 1] ** 2) for b in blocks])
    return features, energies


def reference_kernel(a, b, width):
    """sum_{i in A, k in B, Z_i == Z_k} exp(-|x_i - x_k|^2 / (2 width^2)), via sklearn's rbf_kernel."""
    gamma = 1.0 / (2.0 * width**2)
    result = np.zeros((len(a), len(b)))
    for m in range(len(a)):
        xa, za = a.values[a.offsets[m] : a.offsets[m + 1]], a.numbers[a.offsets[m] : a.offsets[m + 1]]
        for n in range(len(b)):
            xb, zb = b.values[b.offsets[n] : b.offsets[n + 1]], b.numbers[b.offsets[n] : b.offsets[n + 1]]
            result[m, n] = np.sum(rbf_kernel(xa, xb, gamma=gamma) * (za[:, None] == zb[None, :]))
    return result


@pytest.mark.parametrize("dtype, tolerance", [("float64", 1e-11), ("float32", 2e-5)])
def test_atomwise_kernel_matches_pairwise_sum(dtype, tolerance):
    a, _ = random_atom_features(25, seed=1)
    b, _ = random_atom_features(18, seed=2)
    widths = [0.7, 1.5, 3.0]
    # A small block size forces several blocks per element.
    table = AtomwiseKernel(dtype, block_size=16).table(a, b, widths)
    for i, width in enumerate(widths):
        expected = reference_kernel(a, b, width)
        # Relative to the largest entry: float32 rounding of exp and of |x|^2+|y|^2-2xy.
        assert np.max(np.abs(table.matrix(i) - expected)) <= tolerance * np.max(expected)
    # The same set on both sides takes the half-computation path.
    symmetric = AtomwiseKernel(dtype, block_size=16).table(a, a, widths)
    for i, width in enumerate(widths):
        expected = reference_kernel(a, a, width)
        assert np.max(np.abs(symmetric.matrix(i) - expected)) <= tolerance * np.max(expected)
    self_similarity = AtomwiseKernel(dtype).self_similarity(a, 1.5)
    np.testing.assert_allclose(self_similarity, np.diag(reference_kernel(a, a, 1.5)), rtol=tolerance)


def test_fit_matches_sklearn_on_precomputed_kernel():
    X, y = random_atom_features(80)
    model = AtomwiseKernelRidge(width=1.5, regularization=1e-3, dtype="float64", baseline=None).fit(X[:60], y[:60])
    reference = KernelRidge(kernel="precomputed", alpha=1e-3).fit(reference_kernel(X[:60], X[:60], 1.5), y[:60])
    expected = reference.predict(reference_kernel(X[60:], X[:60], 1.5))
    np.testing.assert_allclose(model.predict(X[60:]), expected, atol=1e-8)


def test_cross_validation_matches_grid_search_per_width():
    X, y = random_atom_features(70, seed=4)
    widths, regularizations = [0.7, 1.5, 3.0], [1e-6, 1e-4, 1e-2, 1e-1, 1.0, 10.0]
    folds = KFold(5, shuffle=True, random_state=0)
    ours = AtomwiseKernelRidgeCV(widths, regularizations, cv=folds, dtype="float64", baseline=None,
                                 predictive_std=False).fit(X, y)
    best = None
    for width in widths:
        search = GridSearchCV(KernelRidge(kernel="precomputed"), {"alpha": regularizations}, cv=folds,
                              scoring="neg_mean_absolute_error").fit(reference_kernel(X, X, width), y)
        if best is None or -search.best_score_ < best[0]:
            best = (-search.best_score_, width, search.best_params_["alpha"])
    assert (ours.width_, ours.regularization_) == (best[1], best[2])
    assert ours.cv_mae_.min() == pytest.approx(best[0], rel=1e-7)
