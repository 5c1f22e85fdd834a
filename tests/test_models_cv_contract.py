"""One contract for ``cv`` in the cross-validated models: an int k or any scikit-learn splitter.

Exact models (every training point a landmark) are checked against scikit-learn's GridSearchCV
over KernelRidge on the same splitter (scikit-learn 1.x, sklearn.model_selection.KFold); an int k
means KFold(k, shuffle=True, random_state=random_state), as the docstrings say.
"""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.model_selection import GridSearchCV, KFold

from molinv.evaluation.curves import fit_summary
from molinv.models import KernelRidgeCV, ModelInputError, NystromRidgeCV
from molinv.models.kernel_ridge import fixed_hyperparameters

WIDTHS = (0.4, 0.8, 1.6, 3.2)
REGULARIZATIONS = (1e-4, 1e-3, 1e-2, 1e-1)


def synthetic(n=90, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-2, 2, size=(n, 3))
    return X, np.sin(2 * X[:, 0]) + X[:, 1] * X[:, 2]


def exact_models(cv, **extra):
    """The exact and the all-landmark Nystrom model with the same grid and ``cv``."""
    common = dict(widths=WIDTHS, regularizations=REGULARIZATIONS, cv=cv, random_state=5, width_unit="absolute",
                  baseline=None, predictive_std=False, **extra)
    return [KernelRidgeCV("laplacian", **common), NystromRidgeCV("laplacian", n_landmarks=10_000, **common)]


def grid_search_errors(X, y, splitter):
    gamma = [1 / w for w in WIDTHS]
    search = GridSearchCV(KernelRidge(kernel="laplacian"), {"alpha": list(REGULARIZATIONS), "gamma": gamma},
                          cv=splitter, scoring="neg_mean_absolute_error").fit(X, y)
    # cv_results_ loops alpha outer, gamma inner; cv_mae_ is (widths, regularisations).
    return -search.cv_results_["mean_test_score"].reshape(len(REGULARIZATIONS), len(WIDTHS)).T


@pytest.mark.parametrize("model_index", [0, 1], ids=["KernelRidgeCV", "NystromRidgeCV"])
def test_a_splitter_is_used_as_given(model_index):
    X, y = synthetic()
    model = exact_models(KFold(3))[model_index].fit(X, y)
    np.testing.assert_allclose(model.cv_mae_, grid_search_errors(X, y, KFold(3)), rtol=1e-5)


@pytest.mark.parametrize("model_index", [0, 1], ids=["KernelRidgeCV", "NystromRidgeCV"])
def test_an_int_is_shuffled_k_fold(model_index):
    X, y = synthetic()
    model = exact_models(3)[model_index].fit(X, y)
    np.testing.assert_allclose(model.cv_mae_, grid_search_errors(X, y, KFold(3, shuffle=True, random_state=5)),
                               rtol=1e-5)


def test_a_splitter_works_with_a_search_subset():
    X, y = synthetic(n=120)
    model = exact_models(KFold(3), search_size=60)[1].fit(X, y)
    rows = model.search_rows_
    np.testing.assert_allclose(model.cv_mae_, grid_search_errors(X[rows], y[rows], KFold(3)), rtol=1e-5)


@pytest.mark.parametrize("model_index", [0, 1], ids=["KernelRidgeCV", "NystromRidgeCV"])
@pytest.mark.parametrize("cv, words", [(1, "at least 2"), (200, "200 folds"), ("five", "splitter")])
def test_bad_cv_is_refused_the_same_way(model_index, cv, words):
    X, y = synthetic()
    with pytest.raises(ModelInputError, match=words):
        exact_models(cv)[model_index].fit(X, y)


def test_fit_summary_counts_the_folds_of_a_splitter():
    X, y = synthetic()
    model = exact_models(KFold(3))[0].fit(X, y)
    assert fit_summary(model)[0].startswith("cross-validated MAE (3-fold, 90 molecules)")


@pytest.mark.parametrize("model_index", [0, 1], ids=["KernelRidgeCV", "NystromRidgeCV"])
def test_fixed_hyperparameters_refit_predicts_as_the_search_did(model_index):
    X, y = synthetic()
    searched = exact_models(3)[model_index].fit(X[:70], y[:70])
    fixed = fixed_hyperparameters(searched)
    assert type(fixed) is type(searched).fixed_class and not hasattr(fixed, "cv")
    assert (fixed.width, fixed.regularization) == (searched.width_, searched.regularization_)
    np.testing.assert_allclose(fixed.fit(X[:70], y[:70]).predict(X[70:]), searched.predict(X[70:]), atol=1e-8)
