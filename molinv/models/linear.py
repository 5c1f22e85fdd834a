"""Linear ridge regression on a descriptor, the second baseline.

Weights :math:`w = (\\Phi^T \\Phi + \\lambda I)^{-1} \\Phi^T y` on the residual left by the
baseline, with :math:`\\Phi` the global features or, for AtomFeatures, the sum over each
molecule's atoms of their vectors taken per element (one block per element).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted

from molinv.descriptors.base import AtomFeatures
from molinv.models.baseline import BaselineMixin
from molinv.models.inputs import (
    CountedFeatures,
    ModelInputError,
    element_counts,
    global_values,
    per_element_sums,
    targets,
    training_fingerprint,
)
from molinv.models.kernel_ridge import check_regularizations, fit_scaling


def ridge_weights(design: np.ndarray, y: np.ndarray, regularization: float) -> np.ndarray:
    """``w = (Phi^T Phi + lambda I)^{-1} Phi^T y``, by Cholesky.

    With more features than molecules the same ``w`` is ``Phi^T (Phi Phi^T + lambda I)^{-1} y``
    (the push-through identity), which factorises the smaller ``n x n`` matrix.
    """
    n_rows, n_columns = design.shape
    if n_columns > n_rows:
        gram = design @ design.T + regularization * np.eye(n_rows)
        return design.T @ scipy.linalg.cho_solve(scipy.linalg.cho_factor(gram, lower=True), y)
    gram = design.T @ design + regularization * np.eye(n_columns)
    return scipy.linalg.cho_solve(scipy.linalg.cho_factor(gram, lower=True), design.T @ y)


class LinearRidge(BaselineMixin, RegressorMixin, BaseEstimator):
    """Ridge regression of energies on descriptor vectors.

    Parameters
    ----------
    regularization : float
        ``lambda`` added to the diagonal of ``Phi^T Phi``.
    scale : bool
        Standardise each column of ``Phi`` with the training mean and standard deviation.
    baseline : {"elements", "mean", None}
        See :mod:`molinv.models.baseline`.

    Attributes
    ----------
    coef_ : ndarray
        Weights on the (scaled) columns of ``Phi``.
    feature_elements_ : ndarray of int
        For AtomFeatures, the element of each block of ``Phi``; empty for global features.
    """

    def __init__(self, regularization=1e-6, scale=False, baseline="elements"):
        self.regularization = regularization
        self.scale = scale
        self.baseline = baseline

    def _design(self, X) -> np.ndarray:
        if isinstance(X, AtomFeatures):
            return per_element_sums(X, self.feature_elements_)
        return global_values(X)

    def fit(self, X, y):
        if not isinstance(X, (AtomFeatures, CountedFeatures)):
            X = global_values(X)
        y = targets(y, len(X))
        self.feature_elements_ = (
            np.asarray(element_counts(X)[1], dtype=int) if isinstance(X, AtomFeatures) else np.zeros(0, dtype=int)
        )
        design = self._design(X)
        self.feature_mean_, self.feature_scale_ = fit_scaling(design, self.scale)
        residual = self._fit_baseline(X, y)
        regularization = check_regularizations(self.regularization)[0]
        self.coef_ = ridge_weights((design - self.feature_mean_) / self.feature_scale_, residual, regularization)
        self.training_fingerprint_ = training_fingerprint(X, y)
        return self

    def predict(self, X):
        check_is_fitted(self, "coef_")
        if isinstance(X, AtomFeatures) != bool(len(self.feature_elements_)):
            raise ModelInputError("fitted on " + ("AtomFeatures" if len(self.feature_elements_) else "global features"))
        design = self._design(X)
        if design.shape[1] != len(self.coef_):
            raise ModelInputError(f"{design.shape[1]} feature columns; the model was fitted on {len(self.coef_)}")
        return ((design - self.feature_mean_) / self.feature_scale_) @ self.coef_ + self._predict_baseline(X)
