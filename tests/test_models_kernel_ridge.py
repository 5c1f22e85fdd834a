"""Kernel ridge models checked against scikit-learn (KernelRidge, GridSearchCV, Pipeline).

Synthetic features are fine here: the check is that our code computes what
scikit-learn computes on the same numbers (scikit-learn 1.x, sklearn.kernel_ridge).
"""

import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import GridSearchCV, KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from molinv.models import CountedFeatures, KernelRidgeCV, KernelRidgeModel, ModelInputError
from molinv.models.kernel_ridge import choose_solver



# scikit-learn's conventions: rbf exp(-gamma |x-y|^2), laplacian exp(-gamma |x-y|_1).
SKLEARN = {"gaussian": ("rbf", lambda s: 1.0 / (2.0 * s**2)), "laplacian": ("laplacian", lambda s: 1.0 / s)}
WIDTHS = [0.5, 1.0, 2.0, 4.0, 8.0]
REGULARIZATIONS = [1e-6, 1e-4, 1e-3, 1e-2, 1e-1, 1.0]


def synthetic(n=160, d=6, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d)) * np.linspace(0.5, 3.0, d)
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1] ** 2 - 0.2 * X[:, 2] * X[:, 3] + 0.05 * rng.normal(size=n)
    return X, y


@pytest.mark.parametrize("kind", ["gaussian", "laplacian"])
def test_fixed_hyperparameters_match_sklearn(kind):
    X, y = synthetic()
    name, gamma = SKLEARN[kind]
    ours = KernelRidgeModel(kind, width=2.0, regularization=1e-3, baseline=None).fit(X[:120], y[:120])
    reference = KernelRidge(kernel=name, gamma=gamma(2.0), alpha=1e-3).fit(X[:120], y[:120])
    np.testing.assert_allclose(ours.predict(X[120:]), reference.predict(X[120:]), rtol=0, atol=1e-8)


def grid_search(kind, X, y, scaled=False):
    name, gamma = SKLEARN[kind]
    model = KernelRidge(kernel=name)
    prefix = ""
    if scaled:
        model, prefix = make_pipeline(StandardScaler(), model), "kernelridge__"
    grid = {prefix + "alpha": REGULARIZATIONS, prefix + "gamma": [gamma(s) for s in WIDTHS]}
    search = GridSearchCV(model, grid, cv=KFold(5, shuffle=True, random_state=0), scoring="neg_mean_absolute_error")
    search.fit(X, y)
    return search.best_params_[prefix + "gamma"], search.best_params_[prefix + "alpha"], -search.best_score_


@pytest.mark.parametrize("kind", ["gaussian", "laplacian"])
@pytest.mark.parametrize("solver", ["cholesky", "eigen"])
def test_cross_validation_chooses_as_grid_search(kind, solver):
    X, y = synthetic()
    ours = KernelRidgeCV(kind, WIDTHS, REGULARIZATIONS, cv=5, random_state=0, solver=solver, baseline=None,
                         predictive_std=False).fit(X, y)
    gamma, alpha, best_mae = grid_search(kind, X, y)
    assert SKLEARN[kind][1](ours.width_) == pytest.approx(gamma, rel=1e-12)
    assert ours.regularization_ == alpha
    assert ours.cv_mae_.min() == pytest.approx(best_mae, rel=1e-7)


def test_scaling_is_learned_on_training_folds_as_in_a_pipeline():
    X, y = synthetic(seed=3)
    X[:, 0] *= 50.0  # make scaling matter
    ours = KernelRidgeCV("gaussian", WIDTHS, REGULARIZATIONS, scale=True, baseline=None, predictive_std=False).fit(X, y)
    gamma, alpha, best_mae = grid_search("gaussian", X, y, scaled=True)
    assert (SKLEARN["gaussian"][1](ours.width_), ours.regularization_) == pytest.approx((gamma, alpha), rel=1e-12)
    assert ours.cv_mae_.min() == pytest.approx(best_mae, rel=1e-7)


def test_element_baseline_residual_matches_sklearn_on_residuals():
    X, y = synthetic()
    rng = np.random.default_rng(1)
    counts = rng.integers(0, 6, size=(len(X), 3)).astype(float)
    energies = y + counts @ np.array([-13.6, -1030.0, -2040.0])
    features = CountedFeatures(X, counts, (1, 6, 8))
    ours = KernelRidgeModel("laplacian", width=4.0, regularization=1e-4).fit(features[:120], energies[:120])
    baseline = LinearRegression(fit_intercept=False).fit(counts[:120], energies[:120])
    residual_model = KernelRidge(kernel="laplacian", gamma=0.25, alpha=1e-4)
    residual_model.fit(X[:120], energies[:120] - baseline.predict(counts[:120]))
    expected = baseline.predict(counts[120:]) + residual_model.predict(X[120:])
    np.testing.assert_allclose(ours.predict(features[120:]), expected, rtol=0, atol=1e-6)


def test_element_baseline_needs_counts():
    X, y = synthetic(n=20)
    with pytest.raises(ModelInputError, match="element counts"):
        KernelRidgeModel().fit(X, y)


def test_solver_choice_follows_cost_ratio():
    assert choose_solver("auto", 6) == "cholesky"
    assert choose_solver("auto", 30) == "eigen"
    assert choose_solver("auto", 6, eig_to_cholesky_cost=3) == "eigen"


@pytest.mark.parametrize("kind", ["gaussian", "laplacian"])
def test_search_on_a_subset_chooses_as_grid_search_on_it_and_refits_on_all(kind):
    X, y = synthetic(n=200, seed=5)
    ours = KernelRidgeCV(kind, WIDTHS, REGULARIZATIONS, cv=5, random_state=0, baseline=None, predictive_std=False,
                         search_size=100).fit(X[:160], y[:160])
    rows = ours.search_rows_
    assert len(np.unique(rows)) == 100 and rows.max() < 160
    gamma, alpha, best_mae = grid_search(kind, X[rows], y[rows])
    assert SKLEARN[kind][1](ours.width_) == pytest.approx(gamma, rel=1e-12)
    assert ours.regularization_ == alpha
    assert ours.cv_mae_.min() == pytest.approx(best_mae, rel=1e-7)
    refit = KernelRidge(kernel=SKLEARN[kind][0], gamma=gamma, alpha=alpha).fit(X[:160], y[:160])
    np.testing.assert_allclose(ours.predict(X[160:]), refit.predict(X[160:]), rtol=0, atol=1e-8)


def test_search_size_covering_the_training_set_is_the_full_search():
    X, y = synthetic(seed=6)
    settings = dict(widths=WIDTHS, regularizations=REGULARIZATIONS, scale=True, baseline=None, predictive_std=False,
                    width_unit="median")
    full = KernelRidgeCV("gaussian", **settings).fit(X[:120], y[:120])
    covering = KernelRidgeCV("gaussian", search_size=120, **settings).fit(X[:120], y[:120])
    subset = KernelRidgeCV("gaussian", search_size=60, **settings).fit(X[:120], y[:120])
    np.testing.assert_array_equal(covering.cv_mae_, full.cv_mae_)
    np.testing.assert_array_equal(covering.predict(X[120:]), full.predict(X[120:]))
    # A real subset searches other rows: its validation errors differ.
    assert not np.allclose(subset.cv_mae_, full.cv_mae_)


def test_grid_point_whose_final_factorisation_fails_gives_way_to_the_next_best(monkeypatch):
    import scipy.linalg

    from molinv.models import kernel_ridge

    X, y = synthetic(seed=8)
    settings = dict(widths=WIDTHS, regularizations=REGULARIZATIONS, baseline=None, predictive_std=False)
    reference = KernelRidgeCV("laplacian", **settings).fit(X[:120], y[:120])
    order = np.argsort(reference.cv_mae_.T, axis=None, kind="stable")
    second_reg, second_width = np.unravel_index(order[1], reference.cv_mae_.T.shape)
    cholesky = scipy.linalg.cholesky
    calls = []

    def failing_once(*args, **kwargs):
        # The search factorises with cho_factor; the final fit's first attempt is made to fail.
        calls.append(1)
        if len(calls) == 1:
            raise np.linalg.LinAlgError("not positive definite")
        return cholesky(*args, **kwargs)

    monkeypatch.setattr(kernel_ridge.scipy.linalg, "cholesky", failing_once)
    ours = KernelRidgeCV("laplacian", **settings).fit(X[:120], y[:120])
    assert ours.refused_ == [[reference.width_, reference.regularization_]]
    assert (ours.width_, ours.regularization_) == (WIDTHS[second_width], REGULARIZATIONS[second_reg])
    monkeypatch.undo()
    expected = KernelRidgeModel("laplacian", width=ours.width_, regularization=ours.regularization_, baseline=None,
                                predictive_std=False).fit(X[:120], y[:120])
    np.testing.assert_allclose(ours.predict(X[120:]), expected.predict(X[120:]), rtol=0, atol=1e-10)
