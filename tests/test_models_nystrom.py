"""Nystrom ridge: exact kernel ridge when every training point is a landmark (Williams & Seeger,
NIPS 13, 2001: the approximation is exact on the landmark span), checked against scikit-learn's
KernelRidge; with fewer landmarks the error shrinks as landmarks are added (measured below)."""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge

from molinv.models import AtomwiseKernelRidge, KernelRidgeModel, NystromRidge
from tests.test_models_atomwise import random_atom_features


def synthetic(n=150, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-2, 2, size=(n, 3))
    return X, np.sin(2 * X[:, 0]) + X[:, 1] * X[:, 2]


@pytest.mark.parametrize("kind, name, gamma", [("gaussian", "rbf", 1 / (2 * 1.2**2)), ("laplacian", "laplacian", 1 / 1.2)])
def test_all_landmarks_equals_exact_kernel_ridge(kind, name, gamma):
    X, y = synthetic()
    approx = NystromRidge(kind, width=1.2, regularization=1e-3, n_landmarks=10_000, baseline=None, chunk_size=37)
    approx.fit(X[:100], y[:100])
    reference = KernelRidge(kernel=name, gamma=gamma, alpha=1e-3).fit(X[:100], y[:100])
    # Tolerance: round-off of K^{-1/2} (condition number of K about 1e5 here) times |y|.
    np.testing.assert_allclose(approx.predict(X[100:]), reference.predict(X[100:]), atol=1e-6)
    exact = KernelRidgeModel(kind, width=1.2, regularization=1e-3, baseline=None).fit(X[:100], y[:100])
    mean, std = approx.predict(X[100:], return_std=True)
    exact_mean, exact_std = exact.predict(X[100:], return_std=True)
    np.testing.assert_allclose(std, exact_std, rtol=1e-5)


def test_atomwise_all_landmarks_equals_exact_atomwise_ridge():
    X, y = random_atom_features(60, seed=7)
    settings = dict(width=1.5, regularization=1e-3, dtype="float64", baseline="elements")
    approx = NystromRidge("atomwise", n_landmarks=100_000, chunk_size=16, **settings).fit(X[:45], y[:45])
    exact = AtomwiseKernelRidge(**settings).fit(X[:45], y[:45])
    np.testing.assert_allclose(approx.predict(X[45:]), exact.predict(X[45:]), atol=1e-6)


def test_error_against_exact_shrinks_with_more_landmarks():
    X, y = synthetic(n=400, seed=1)
    exact = KernelRidge(kernel="rbf", gamma=1 / (2 * 0.8**2), alpha=1e-4).fit(X[:300], y[:300]).predict(X[300:])
    # Measured (mean |approx - exact|, exact predictions ~1.2 in size): m=10: 0.83, 20: 0.70, 40: 0.48,
    # 80: 0.18, 160: 0.094, 240: 0.028, 300 (all): 5e-14. Below 300 a fifth of the molecules is kept
    # out of the landmark draw for calibrating the intervals, so 240 is the most landmarks short of all.
    gaps = []
    for m in (10, 40, 160, 240, 300):
        approx = NystromRidge("gaussian", width=0.8, regularization=1e-4, n_landmarks=m, baseline=None,
                              predictive_std=False).fit(X[:300], y[:300])
        gaps.append(np.mean(np.abs(approx.predict(X[300:]) - exact)))
    assert gaps[0] > gaps[1] > gaps[2] > gaps[3] > gaps[4]
    assert gaps[3] < 0.1 * gaps[0]
    assert gaps[4] < 1e-8
