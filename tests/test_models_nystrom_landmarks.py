"""Landmark choice and the cross-validated search of the Nystrom ridge.

The search's fold solutions are checked against scikit-learn's Ridge on the same features; k-means
landmarks against random ones by how closely the Nystrom model reproduces exact kernel ridge
(scikit-learn's KernelRidge), the comparison made by Zhang, Tsang and Kwok, "Improved Nystrom
low-rank approximation and error analysis", ICML 2008 (k-means landmarks approximate the kernel
matrix better than uniformly sampled ones)."""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.linear_model import Ridge
from sklearn.model_selection import KFold

from molinv.errors import MolinvError
from molinv.models import NystromRidge
from molinv.models.modelfile import load_model, save_model
from molinv.models.nystrom import fold_errors
from tests.test_models_atomwise import random_atom_features


@pytest.mark.parametrize("n_rows, n_features", [(24, 60), (200, 12)], ids=["dual", "primal"])
def test_fold_errors_equal_scikit_learn_ridge_per_fold(n_rows, n_features):
    rng = np.random.default_rng(3)
    features = rng.normal(size=(n_rows, n_features))
    y = features @ rng.normal(size=n_features) + 0.1 * rng.normal(size=n_rows)
    folds = list(KFold(4, shuffle=True, random_state=0).split(features))
    residuals = [(y[train], y[validation]) for train, validation in folds]
    regularizations = (1e-3, 1e-1, 10.0)
    expected = [
        np.mean([np.mean(np.abs(Ridge(alpha=reg, fit_intercept=False, solver="cholesky")
                                .fit(features[train], y[train]).predict(features[validation]) - y[validation]))
                 for train, validation in folds])
        for reg in regularizations
    ]
    np.testing.assert_allclose(fold_errors(features, folds, residuals, regularizations), expected, rtol=1e-7)


def clustered(seed=0):
    """One dense cluster and two sparse ones (sizes 1,000, 60, 60 in 4-D), a smooth target."""
    rng = np.random.default_rng(seed)
    centres = np.array([[0, 0, 0, 0], [4, 0, 0, 0], [0, 4, 0, 0]], dtype=float)
    X = np.concatenate([c + rng.normal(scale=0.7, size=(n, 4)) for c, n in zip(centres, (1000, 60, 60))])
    return X, np.sin(X[:, 0]) + np.cos(X[:, 1]) + 0.3 * X[:, 2]


def test_kmeans_landmarks_approach_exact_kernel_ridge_closer_than_random():
    X, y = clustered()
    train = np.random.default_rng(1).permutation(len(X))
    test, train = train[:200], train[200:]
    width, regularization = 2.5, 1e-2
    exact = KernelRidge(kernel="rbf", gamma=1 / (2 * width**2), alpha=regularization).fit(X[train], y[train])
    reference = exact.predict(X[test])

    def gap(choice, seed):
        model = NystromRidge("gaussian", width=width, regularization=regularization, n_landmarks=50, baseline=None,
                             predictive_std=False, landmark_choice=choice, random_state=seed)
        return np.mean(np.abs(model.fit(X[train], y[train]).predict(X[test]) - reference))

    random_gaps = [gap("random", seed) for seed in range(5)]
    kmeans_gaps = [gap("kmeans", seed) for seed in range(5)]
    # Measured (mean |Nystrom - exact| over 5 seeds, exact predictions ~1 in size): random 0.0333,
    # k-means 0.0182 with 50 landmarks; at widths 1.0-1.5 or 10-25 landmarks the ratio was 0.66-1.05.
    assert np.mean(kmeans_gaps) < 0.8 * np.mean(random_gaps)


def test_atomwise_kmeans_landmarks_per_element():
    X, y = random_atom_features(80, seed=2)
    model = NystromRidge("atomwise", width=1.5, regularization=1e-3, n_landmarks=60, landmark_choice="kmeans",
                         dtype="float64").fit(X[:60], y[:60])
    elements, counts = np.unique(model.landmark_numbers_, return_counts=True)
    np.testing.assert_array_equal(elements, [1, 6, 8])
    # Oxygen has fewer eligible atoms than 60 in these 60 molecules (56 in all, a fifth of the molecules
    # kept for calibration): every one is a landmark, as with random landmarks; H and C get 60 centres.
    random_model = NystromRidge("atomwise", width=1.5, regularization=1e-3, n_landmarks=60, dtype="float64")
    random_counts = np.unique(random_model.fit(X[:60], y[:60]).landmark_numbers_, return_counts=True)[1]
    np.testing.assert_array_equal(counts, random_counts)
    assert counts[0] == counts[1] == 60 and counts[2] < 60


def test_kmeans_model_round_trips_through_a_model_file(tmp_path):
    X, y = clustered(seed=4)
    model = NystromRidge("gaussian", width=1.5, regularization=1e-4, n_landmarks=20, landmark_choice="kmeans",
                         baseline=None).fit(X[:900], y[:900])
    loaded, _ = load_model(save_model(tmp_path / "kmeans", model, {}))
    assert loaded.get_params()["landmark_choice"] == "kmeans"
    np.testing.assert_array_equal(loaded.predict(X[900:], return_std=True), model.predict(X[900:], return_std=True))


def test_unknown_landmark_choice_is_refused():
    X, y = clustered()
    with pytest.raises(MolinvError, match="landmark_choice"):
        NystromRidge(landmark_choice="leverage").fit(X, y)
