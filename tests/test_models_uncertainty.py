"""Predictive standard deviations of kernel ridge checked against scikit-learn's Gaussian process
(sklearn.gaussian_process.GaussianProcessRegressor with fixed kernel) and against explicit
leave-one-out refits of sklearn.kernel_ridge.KernelRidge."""

import numpy as np
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF
from sklearn.kernel_ridge import KernelRidge

from molinv.models import KernelRidgeModel
from molinv.models.kernel_ridge import interval_scale


def data(n=60, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-3, 3, size=(n, 2))
    return X, np.sin(X[:, 0]) * np.cos(X[:, 1]) + 0.05 * rng.normal(size=n)


def test_posterior_variance_is_the_gaussian_process_variance():
    X, y = data()
    width, noise = 1.5, 1e-2
    model = KernelRidgeModel("gaussian", width=width, regularization=noise, baseline=None).fit(X[:40], y[:40])
    # A GP with RBF(length_scale=width) prior and noise variance `noise` (Rasmussen & Williams 2006, eq. 2.26).
    gp = GaussianProcessRegressor(RBF(length_scale=width), alpha=noise, optimizer=None).fit(X[:40], y[:40])
    gp_mean, gp_std = gp.predict(X[40:], return_std=True)
    mean, std = model.predict(X[40:], return_std=True)
    np.testing.assert_allclose(mean, gp_mean, atol=1e-8)
    np.testing.assert_allclose(std / model.std_scale_, np.sqrt(gp_std**2 + noise), rtol=1e-6)


def test_calibration_uses_exact_leave_one_out_residuals():
    X, y = data(n=30)
    model = KernelRidgeModel("gaussian", width=1.0, regularization=1e-2, baseline=None).fit(X, y)
    residuals, variances = [], []
    for i in range(len(X)):
        keep = np.arange(len(X)) != i
        refit = KernelRidge(kernel="rbf", gamma=0.5, alpha=1e-2).fit(X[keep], y[keep])
        gp = GaussianProcessRegressor(RBF(1.0), alpha=1e-2, optimizer=None).fit(X[keep], y[keep])
        residuals.append(y[i] - refit.predict(X[i : i + 1])[0])
        variances.append(gp.predict(X[i : i + 1], return_std=True)[1][0] ** 2 + 1e-2)
    expected = interval_scale(np.array(residuals), np.array(variances), 0.9)
    assert abs(model.std_scale_ - expected) < 1e-6 * expected


def test_interval_scale_recovers_a_known_normal_amplitude():
    # For normal errors with standard deviation 3 sqrt(var), the calibrated amplitude is 3 at any level;
    # the sampling spread of a 4,000-point quantile is about 1-2 %.
    rng = np.random.default_rng(0)
    variances = rng.uniform(0.5, 2.0, size=4000)
    residuals = 3.0 * np.sqrt(variances) * rng.standard_normal(4000)
    for level in (0.68, 0.9, 0.95):
        assert abs(interval_scale(residuals, variances, level) - 3.0) < 0.1
