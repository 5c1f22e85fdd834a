"""Cross-validated Nystrom ridge: with every training point a landmark it is exact kernel ridge
(Williams & Seeger, NIPS 13, 2001), so its search must pick what scikit-learn's GridSearchCV over
KernelRidge picks on the same folds and grid, and predict what KernelRidge predicts."""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.model_selection import GridSearchCV, KFold

from molinv.models import NystromRidgeCV, load_model, save_model
from tests.test_models_nystrom import synthetic

WIDTHS = (0.4, 0.8, 1.6, 3.2)
REGULARIZATIONS = (1e-4, 1e-3, 1e-2, 1e-1)


@pytest.mark.parametrize("kind, name", [("gaussian", "rbf"), ("laplacian", "laplacian")])
def test_all_landmarks_choice_equals_grid_search(kind, name):
    X, y = synthetic(n=160, seed=3)
    model = NystromRidgeCV(kind, widths=WIDTHS, regularizations=REGULARIZATIONS, cv=4, width_unit="absolute",
                           n_landmarks=10_000, baseline=None, random_state=5, predictive_std=False).fit(X[:120], y[:120])
    gamma = [1 / (2 * w**2) for w in WIDTHS] if kind == "gaussian" else [1 / w for w in WIDTHS]
    search = GridSearchCV(KernelRidge(kernel=name), {"alpha": list(REGULARIZATIONS), "gamma": gamma},
                          cv=KFold(4, shuffle=True, random_state=5), scoring="neg_mean_absolute_error").fit(X[:120], y[:120])
    assert model.width_ == pytest.approx(WIDTHS[gamma.index(search.best_params_["gamma"])])
    assert model.regularization_ == pytest.approx(search.best_params_["alpha"])
    # Same validation MAE per grid point (GridSearchCV's cv_results_ loop alpha outer, gamma inner).
    reference = -search.cv_results_["mean_test_score"].reshape(len(REGULARIZATIONS), len(WIDTHS)).T
    np.testing.assert_allclose(model.cv_mae_, reference, rtol=1e-5)
    np.testing.assert_allclose(model.predict(X[120:]), search.predict(X[120:]), atol=1e-6)


def test_few_landmarks_saves_and_reloads(tmp_path):
    X, y = synthetic(n=300, seed=4)
    model = NystromRidgeCV("gaussian", n_landmarks=60, cv=3, baseline="mean").fit(X[:250], y[:250])
    assert model.cv_mae_.shape == (4, 4)
    path = save_model(tmp_path / "model.npz", model)
    loaded, _ = load_model(path)
    mean, std = model.predict(X[250:], return_std=True)
    loaded_mean, loaded_std = loaded.predict(X[250:], return_std=True)
    np.testing.assert_array_equal(mean, loaded_mean)
    np.testing.assert_array_equal(std, loaded_std)


def test_search_on_a_subset_chooses_as_grid_search_on_it_and_refits_on_all():
    X, y = synthetic(n=200, seed=7)
    model = NystromRidgeCV("laplacian", widths=WIDTHS, regularizations=REGULARIZATIONS, cv=4, width_unit="absolute",
                           n_landmarks=10_000, baseline=None, random_state=5, predictive_std=False,
                           search_size=90).fit(X[:160], y[:160])
    rows = model.search_rows_
    assert len(np.unique(rows)) == 90 and rows.max() < 160
    gamma = [1 / w for w in WIDTHS]
    search = GridSearchCV(KernelRidge(kernel="laplacian"), {"alpha": list(REGULARIZATIONS), "gamma": gamma},
                          cv=KFold(4, shuffle=True, random_state=5), scoring="neg_mean_absolute_error").fit(X[rows], y[rows])
    reference = -search.cv_results_["mean_test_score"].reshape(len(REGULARIZATIONS), len(WIDTHS)).T
    np.testing.assert_allclose(model.cv_mae_, reference, rtol=1e-5)
    alpha, width = search.best_params_["alpha"], WIDTHS[gamma.index(search.best_params_["gamma"])]
    assert (model.width_, model.regularization_) == pytest.approx((width, alpha))
    refit = KernelRidge(kernel="laplacian", gamma=1 / width, alpha=alpha).fit(X[:160], y[:160])
    np.testing.assert_allclose(model.predict(X[160:]), refit.predict(X[160:]), atol=1e-6)


def test_failed_factorisations_are_skipped_in_the_search_and_the_refit(monkeypatch):
    import scipy.linalg

    from molinv.models import nystrom

    X, y = synthetic(n=160, seed=9)
    settings = dict(widths=WIDTHS, regularizations=REGULARIZATIONS, cv=4, width_unit="absolute", n_landmarks=60,
                    baseline=None, random_state=5, predictive_std=False)
    reference = NystromRidgeCV("gaussian", **settings).fit(X, y)
    cho_factor, cholesky = scipy.linalg.cho_factor, scipy.linalg.cholesky
    calls = {"search": 0, "refit": 0}

    def search_fails_first(*args, **kwargs):
        calls["search"] += 1
        if calls["search"] == 1:  # first width, first regularisation, first fold
            raise np.linalg.LinAlgError("not positive definite")
        return cho_factor(*args, **kwargs)

    def refit_fails_first(*args, **kwargs):
        calls["refit"] += 1
        if calls["refit"] == 1:
            raise np.linalg.LinAlgError("not positive definite")
        return cholesky(*args, **kwargs)

    monkeypatch.setattr(nystrom.scipy.linalg, "cho_factor", search_fails_first)
    monkeypatch.setattr(nystrom.scipy.linalg, "cholesky", refit_fails_first)
    model = NystromRidgeCV("gaussian", **settings).fit(X, y)
    assert np.isinf(model.cv_mae_[0, 0])
    np.testing.assert_allclose(model.cv_mae_.ravel()[1:], reference.cv_mae_.ravel()[1:], rtol=1e-12)
    widths, regs = np.unravel_index(np.argsort(model.cv_mae_, axis=None, kind="stable")[:2], model.cv_mae_.shape)
    assert model.refused_ == [[WIDTHS[widths[0]], REGULARIZATIONS[regs[0]]]]
    assert (model.width_, model.regularization_) == (WIDTHS[widths[1]], REGULARIZATIONS[regs[1]])
