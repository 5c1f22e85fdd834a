"""Learning curves on QM9: splits, resumption, metrics and the power-law fit.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Model: scikit-learn's Ridge on
element counts, the per-element energy fit, so that the mechanics are tested on real data
against reference libraries (scikit-learn metrics, scipy.stats.linregress).
"""

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.linear_model import Ridge
from sklearn.metrics import mean_absolute_error, mean_squared_error

from molinv.evaluation import CurveError, CurveRun, fit_power_law, summarize, write_report


@pytest.fixture(scope="module")
def counts_and_energies(qm9):
    positions = qm9.sample(1500, seed=11)
    counts = np.column_stack([c[positions] for c in qm9.element_counts().values()]).astype(float)
    return counts, qm9.atomization_energy()[positions], qm9.n_atoms[positions]


class FailingAfter(Ridge):
    """Ridge that raises after a number of fits: an interrupted run."""

    budget = {"fits": 0}

    def fit(self, X, y):
        if FailingAfter.budget["fits"] <= 0:
            raise KeyboardInterrupt
        FailingAfter.budget["fits"] -= 1
        return super().fit(X, y)


def test_splits_are_disjoint_fixed_and_shared(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    run = CurveRun.open(tmp_path / "run", y, test_size=500, sizes=(50, 100, 400), n_draws=2, seed=5)
    assert len(np.intersect1d(run.test, run.pool)) == 0 and len(run.test) + len(run.pool) == len(y)
    again = CurveRun.open(tmp_path / "other", y, test_size=500, sizes=(50, 100, 400), n_draws=2, seed=5)
    np.testing.assert_array_equal(run.test, again.test)
    points = run.run(X, Ridge(alpha=1e-6), "ridge")
    assert sorted(zip(points["size"], points["draw"])) == [(s, d) for s in (50, 100, 400) for d in (0, 1)]


def test_metrics_match_scikit_learn(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    run = CurveRun.open(tmp_path, y, test_size=500, sizes=(200,), n_draws=1, seed=1)
    (point,) = run.run(X, Ridge(alpha=1e-6), "ridge").to_dict("records")
    train = np.setdiff1d(np.arange(len(y)), run.test)
    from molinv.evaluation.curves import training_draw

    chosen = training_draw(run.pool, 200, 0, 1)
    assert set(chosen) <= set(train)
    reference = Ridge(alpha=1e-6).fit(X[chosen], y[chosen]).predict(X[run.test])
    assert point["mae"] == pytest.approx(mean_absolute_error(y[run.test], reference), rel=1e-10)
    assert point["rmse"] == pytest.approx(np.sqrt(mean_squared_error(y[run.test], reference)), rel=1e-10)
    np.testing.assert_allclose(run.predictions("ridge", 200), reference, rtol=1e-10)


def test_interrupted_run_resumes_without_refitting(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    settings = dict(test_size=500, sizes=(50, 100, 200), n_draws=2, seed=3)
    FailingAfter.budget["fits"] = 4
    with pytest.raises(KeyboardInterrupt):
        CurveRun.open(tmp_path, y, **settings).run(X, FailingAfter(alpha=1e-6), "ridge")
    assert len(CurveRun.open(tmp_path, y, **settings).points()) == 4
    FailingAfter.budget["fits"] = 2  # exactly the two points still missing
    resumed = CurveRun.open(tmp_path, y, **settings).run(X, FailingAfter(alpha=1e-6), "ridge")
    assert len(resumed) == 6 and FailingAfter.budget["fits"] == 0
    uninterrupted = CurveRun.open(tmp_path / "fresh", y, **settings).run(X, Ridge(alpha=1e-6), "ridge")
    pd.testing.assert_frame_equal(resumed.drop(columns="fit_seconds"), uninterrupted.drop(columns="fit_seconds"))


def test_run_folder_refuses_other_data(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    CurveRun.open(tmp_path, y, test_size=500, sizes=(50,), n_draws=1)
    with pytest.raises(CurveError, match="holds a run on other data"):
        CurveRun.open(tmp_path, y[::-1].copy(), test_size=500, sizes=(50,), n_draws=1)


def test_power_law_fit_matches_scipy_linregress(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    run = CurveRun.open(tmp_path, y, test_size=500, sizes=(20, 50, 100, 200, 500), n_draws=3, seed=2)
    points = run.run(X, Ridge(alpha=1e-6), "ridge")
    fit = fit_power_law(points, largest_sizes=4)
    tail = points[points["size"] >= 50]
    reference = stats.linregress(np.log(tail["size"]), np.log(tail["mae"]))
    assert fit.slope == pytest.approx(reference.slope, rel=1e-10)
    assert fit.slope_std == pytest.approx(reference.stderr, rel=1e-8)
    assert fit.intercept == pytest.approx(reference.intercept, rel=1e-10)
    target = fit.mae_at(1000.0)
    assert fit.size_for(target) == pytest.approx(1000.0, rel=1e-9)
    low, high = fit.size_range_for(target)
    assert low <= 1000.0 <= high


def test_report_files(tmp_path, counts_and_energies):
    X, y, n_atoms = counts_and_energies
    run = CurveRun.open(tmp_path / "run", y, test_size=500, sizes=(50, 100, 200), n_draws=2, seed=4)
    run.run(X, Ridge(alpha=1e-6), "element counts")
    run.run(X[:, :2], Ridge(alpha=1e-6), "H and C counts only")
    page = write_report(run, tmp_path / "report", unit="kcal/mol", target=1.0, n_atoms=n_atoms,
                        settings={"data": "QM9 sample"}, data_citation="Ramakrishnan et al. 2014")
    text = page.read_text()
    for name in ("learning_curve.png", "parity.png", "error_histogram.png", "errors_by_size.png"):
        assert (tmp_path / "report" / name).stat().st_size > 1000
        assert name in text
    assert "not a substitute for validated" in text and "Ramakrishnan et al. 2014" in text
    summary = pd.read_csv(tmp_path / "report" / "summary.csv")
    assert set(summary["label"]) == {"element counts", "H and C counts only"}
    expected = summarize(run.points(), "kcal/mol")
    np.testing.assert_allclose(summary["mae_mean_kcal/mol"], expected["mae_mean_kcal/mol"])
    # Issue 18: every measured column says its unit; sizes and draw counts are counts.
    measured = [c for c in summary.select_dtypes("number").columns if c not in ("size", "n_draws")]
    assert measured and all(column.endswith("_kcal/mol") for column in measured)


def test_power_law_on_two_points_has_no_error_estimate():
    # Two (size, MAE) points fix the line exactly; scipy's linregress reports stderr 0 there,
    # which would read as a perfectly known slope, so the fit says "unknown" (NaN) instead.
    points = pd.DataFrame({"size": [50000, 100000], "mae": [0.14, 0.13]})
    fit = fit_power_law(points)
    assert fit.slope == pytest.approx(stats.linregress(np.log([50000, 100000]), np.log([0.14, 0.13])).slope, rel=1e-10)
    assert np.isnan(fit.slope_std)
    assert all(np.isnan(fit.size_range_for(0.05)))


def test_rerun_with_other_model_settings_never_reuses_points(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    settings = dict(test_size=500, sizes=(50, 100), n_draws=1, seed=3)
    first = CurveRun.open(tmp_path, y, **settings).run(X, Ridge(alpha=1e-6), "ridge")
    # Same settings: the finished points are reused as they are.
    pd.testing.assert_frame_equal(first, CurveRun.open(tmp_path, y, **settings).run(X, Ridge(alpha=1e-6), "ridge"))
    with pytest.raises(CurveError, match="other settings.*alpha"):
        CurveRun.open(tmp_path, y, **settings).run(X, Ridge(alpha=10.0), "ridge")


def test_rerun_with_other_descriptor_settings_never_reuses_points(tmp_path, counts_and_energies):
    X, y, _ = counts_and_energies
    settings = dict(test_size=500, sizes=(50,), n_draws=1, seed=3)
    CurveRun.open(tmp_path, y, **settings).run(X, Ridge(alpha=1e-6), "ridge", settings={"n_components": None})
    with pytest.raises(CurveError, match="other settings.*n_components"):  # as --atom-components 8
        CurveRun.open(tmp_path, y, **settings).run(X[:, :2], Ridge(alpha=1e-6), "ridge", settings={"n_components": 8})
