"""Kernel ridge regression of energies, with fixed or cross-validated hyperparameters.

Fit: dual coefficients :math:`\\alpha = (K + \\lambda I)^{-1} y` for the residual
``y`` left by the baseline; prediction :math:`f(x) = k_x^T \\alpha` plus the
baseline (Rupp et al., Phys. Rev. Lett. 108, 058301, 2012; Hansen et al.,
J. Chem. Theory Comput. 9, 3404, 2013).

Uncertainty, in the Gaussian-process reading of kernel ridge (Rasmussen and
Williams, Gaussian Processes for Machine Learning, MIT Press 2006, eqs. 2.26 and
5.12): the predictive variance of a new energy is

.. math::  \\sigma^2(x) = a^2 \\left(k(x, x) - k_x^T (K + \\lambda I)^{-1} k_x + \\lambda\\right)

where the amplitude :math:`a` is calibrated on the exact leave-one-out residuals
:math:`r_i = \\alpha_i / [C^{-1}]_{ii}` with variances :math:`1/[C^{-1}]_{ii}`
(:math:`C = K + \\lambda I`): :math:`a` is chosen so that the central normal
interval of probability ``interval_level`` covers that fraction of the
leave-one-out residuals. The baseline is held fixed in the leave-one-out step.

Cross-validation (:class:`KernelRidgeCV`, :class:`AtomwiseKernelRidgeCV`)
shares the costly parts: distances once (once in all when no per-fold scaling,
else once per fold) reused for every width; each width's kernel once for the whole
training set, the fold blocks cut from it by indexing; per fold and width, either one
Cholesky factorisation per regularisation value or one eigendecomposition
:math:`K = V \\Lambda V^T` reused for all of them,
:math:`\\alpha(\\lambda) = V (\\Lambda + \\lambda)^{-1} V^T y`, whichever is cheaper
(:func:`choose_solver`); the validation predictions for all regularisation values are
one matrix product. What remains is the factorisations themselves (74% of the time at
1,500 molecules, more at larger sizes): an exact search cannot be faster than one
factorisation per fold, width and value (benchmarks/bench_models.py measures that floor).

Above ``search_size`` training rows the search runs on a random subset of that many and only
the final fit uses them all (choosing hyperparameters on a subsample and refitting on the full
set is common practice, no source): the search then costs the same at every size, and a fit
at 20,000 rows is one factorisation instead of hundreds.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from scipy.stats import norm
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.model_selection import KFold
from sklearn.utils.validation import check_is_fitted
from tqdm.auto import tqdm

from molinv.descriptors.base import AtomFeatures
from molinv.models.baseline import BaselineMixin, fit_baseline, predict_baseline
from molinv.models.inputs import (
    CountedFeatures,
    ModelInputError,
    atom_features,
    global_values,
    targets,
    training_fingerprint,
)
from molinv.models.kernels import AtomwiseKernel, GlobalKernel, check_widths

#: Cost of a symmetric eigendecomposition in units of one Cholesky factorisation of
#: the same matrix. A prototype measured 7-18x (LAPACK syevd vs potrf, n = 1,000-4,000);
#: benchmarks/bench_models.py measured 17.5x at n = 4,000 (scipy eigh, one thread, shared machine);
#: 12 is the middle of that range. With fewer regularisation values per width than
#: this, Cholesky per value is cheaper.
EIG_TO_CHOLESKY_COST = 12.0
SOLVERS = ("auto", "cholesky", "eigen")


def choose_solver(solver: str, n_regularizations: int, eig_to_cholesky_cost: float = EIG_TO_CHOLESKY_COST) -> str:
    """``"cholesky"`` or ``"eigen"``: resolve ``"auto"`` by comparing ``n_regularizations`` Cholesky
    factorisations with one eigendecomposition."""
    if solver not in SOLVERS:
        raise ModelInputError(f"solver must be one of {SOLVERS}, got {solver!r}")
    if solver != "auto":
        return solver
    return "eigen" if n_regularizations > eig_to_cholesky_cost else "cholesky"


class NotPositiveDefinite(ModelInputError):
    """The training kernel plus regularisation cannot be factorised (too small a regularisation
    for the width: very wide Gaussian kernels are numerically rank-deficient)."""


def check_regularizations(values) -> np.ndarray:
    values = np.atleast_1d(np.asarray(values, dtype=float))
    if values.ndim != 1 or len(values) == 0 or not np.all(np.isfinite(values)) or np.any(values <= 0):
        raise ModelInputError(f"regularisation values must be positive finite numbers, got {values}")
    return values


def cv_splitter(cv, random_state):
    """What ``cv`` of a cross-validated model stands for: an int k is ``KFold(k, shuffle=True,
    random_state=random_state)``; a scikit-learn splitter (``split`` and ``get_n_splits``) is used as given."""
    if isinstance(cv, (int, np.integer)) and not isinstance(cv, bool):
        if cv < 2:
            raise ModelInputError(f"cv must be at least 2 folds, got {cv!r}")
        return KFold(int(cv), shuffle=True, random_state=random_state)
    if not (hasattr(cv, "split") and hasattr(cv, "get_n_splits")):
        raise ModelInputError(f"cv must be an int or a scikit-learn splitter, got {cv!r}")
    return cv


def cv_folds(cv, n_rows: int, random_state) -> list[tuple[np.ndarray, np.ndarray]]:
    """The (training, validation) row indices of each fold over ``n_rows`` rows (see :func:`cv_splitter`)."""
    splitter = cv_splitter(cv, random_state)
    rows = np.zeros((n_rows, 1))
    n_folds = splitter.get_n_splits(rows)
    if n_folds > n_rows:
        raise ModelInputError(f"cv asks for {n_folds} folds of {n_rows} molecules; give at most {n_rows}")
    return list(splitter.split(rows))


def solve_regularized(kernel: np.ndarray, y: np.ndarray, regularization: float, work: np.ndarray | None = None) -> np.ndarray:
    """``(K + lambda I)^{-1} y`` by Cholesky; least squares if ``K + lambda I`` is not positive definite
    (the same fallback as :class:`sklearn.kernel_ridge.KernelRidge`). ``kernel`` is left intact;
    ``work``, a C-ordered array of its shape, is overwritten (pass one to reuse it across calls)."""
    system = with_added_diagonal(kernel, regularization, work)
    try:
        # The transposed view of a C-ordered symmetric matrix is Fortran-ordered: LAPACK factors it in place.
        factor = scipy.linalg.cho_factor(system.T, lower=True, overwrite_a=True, check_finite=False)
    except np.linalg.LinAlgError:
        return scipy.linalg.lstsq(with_added_diagonal(kernel, regularization, system), y, check_finite=False)[0]
    return scipy.linalg.cho_solve(factor, y, check_finite=False)


def with_added_diagonal(matrix: np.ndarray, value: float, out: np.ndarray | None = None) -> np.ndarray:
    """A C-ordered copy of ``matrix`` (into ``out`` when given) with ``value`` added to its diagonal."""
    result = np.empty(matrix.shape) if out is None else out
    np.copyto(result, matrix)
    result.flat[:: len(result) + 1] += value
    return result


def validation_errors(kernel_train, kernel_val, y_train, y_val, regularizations, solver: str) -> np.ndarray:
    """Mean absolute validation error for each regularisation value at one width.

    ``kernel_train`` (C-ordered, symmetric) is a scratch copy: the eigen solver overwrites it. Dual
    coefficients for all regularisation values go into one matrix, so that the validation
    predictions are one matrix product.
    """
    if solver == "eigen":
        eigenvalues, vectors = scipy.linalg.eigh(kernel_train.T, overwrite_a=True, check_finite=False)
        coefficients = vectors @ ((vectors.T @ y_train)[:, None] / (eigenvalues[:, None] + regularizations[None, :]))
    else:
        work = np.empty(kernel_train.shape)
        coefficients = np.column_stack([solve_regularized(kernel_train, y_train, reg, work) for reg in regularizations])
    return np.mean(np.abs(kernel_val @ coefficients - y_val[:, None]), axis=0)


def interval_scale(residuals: np.ndarray, variances: np.ndarray, level: float) -> float:
    """Amplitude ``a`` such that ``|r| <= a z sqrt(var)`` for a fraction ``level`` of held-out residuals,
    ``z`` being the normal quantile of the central ``level`` interval."""
    ratios = np.abs(residuals) / np.sqrt(np.maximum(variances, np.finfo(float).tiny))
    return float(np.quantile(ratios, level) / norm.ppf(0.5 + level / 2))


def check_interval_level(level) -> float:
    level = float(level)
    if not 0.0 < level < 1.0:
        raise ModelInputError(f"interval_level must lie strictly between 0 and 1, got {level}")
    return level


def forget_uncertainty(model) -> None:
    """Drop the uncertainty state of an earlier fit, so a refit without it cannot use stale arrays."""
    for name in ("cholesky_", "std_scale_", "n_calibration_"):
        if hasattr(model, name):
            delattr(model, name)


def median_distance(features, kernel, random_state: int, n_pairs: int = 20000) -> float:
    """Median distance (L1 for the Laplacian kernel, else Euclidean) between random pairs of
    training rows; for AtomFeatures, between random pairs of atoms of the same element."""
    rng = np.random.default_rng(random_state)
    if isinstance(features, AtomFeatures):
        first, second = [], []
        for z in np.unique(features.numbers):
            rows = np.flatnonzero(features.numbers == z)
            if len(rows) > 1:
                share = max(1, n_pairs * len(rows) // len(features.numbers))
                first.append(rng.choice(rows, share))
                second.append(rng.choice(rows, share))
        values = features.values
        first, second = np.concatenate(first), np.concatenate(second)
    else:
        values = np.asarray(features)
        first, second = rng.integers(0, len(values), n_pairs), rng.integers(0, len(values), n_pairs)
    keep = first != second
    differences = values[first[keep]] - values[second[keep]]
    laplacian = getattr(kernel, "kind", None) == "laplacian"
    distances = np.abs(differences).sum(axis=1) if laplacian else np.linalg.norm(differences, axis=1)
    median = float(np.median(distances))
    if not median > 0:
        raise ModelInputError("training features are all identical; no kernel width can be derived from them")
    return median


def width_unit_value(width_unit: str, features, kernel, random_state: int) -> float:
    """1 for absolute widths; for ``width_unit="median"`` the median distance between
    training rows (same-element atoms for atom features), so that one grid suits any
    descriptor's scale (a common heuristic for kernel widths; no source)."""
    if width_unit == "absolute":
        return 1.0
    if width_unit != "median":
        raise ModelInputError(f"width_unit must be 'absolute' or 'median', got {width_unit!r}")
    return median_distance(features, kernel, random_state)


def fit_scaling(values: np.ndarray, scale: bool) -> tuple[np.ndarray, np.ndarray]:
    """Per-feature mean and standard deviation (1 where constant); identity when ``scale`` is false.

    A column counts as constant when its spread is below 1e-10 of its largest magnitude:
    the standard deviation of identical values comes out at rounding level (1e-13 for
    36.858, measured), and dividing by it would blow up any other value in that column."""
    if not scale:
        return np.zeros(values.shape[1]), np.ones(values.shape[1])
    spread = values.std(axis=0)
    return values.mean(axis=0), np.where(spread > 1e-10 * np.abs(values).max(axis=0, initial=0.0), spread, 1.0)


class _KernelRidgeBase(BaselineMixin, RegressorMixin, BaseEstimator):
    """Shared fit-with-fixed-hyperparameters and predict. Subclasses define the kernel and features."""

    def _fit_fixed(self, X, y, width: float, regularization: float, kernel=None):
        """Fit at one width and regularisation; ``kernel``, if given, is the training kernel already computed
        (it is overwritten by the factorisation)."""
        y = targets(y, len(X))
        features = self._fit_features(X)
        residual = self._fit_baseline(X, y)
        if kernel is None:
            kernel = self._make_kernel().table(features, features, [width]).matrix(0)
        # ``kernel`` is not needed afterwards: the factorisation works in its memory.
        kernel.flat[:: len(kernel) + 1] += regularization
        try:
            lower = scipy.linalg.cholesky(kernel.T, lower=True, overwrite_a=True, check_finite=False)
        except np.linalg.LinAlgError as error:
            raise NotPositiveDefinite(
                f"K + lambda I is not positive definite at width {width}, regularisation {regularization}; "
                "increase the regularisation"
            ) from error
        self.width_ = float(width)
        self.regularization_ = float(regularization)
        self.dual_coef_ = scipy.linalg.cho_solve((lower, True), residual, check_finite=False)
        forget_uncertainty(self)
        if self.predictive_std:
            # diag(C^{-1}) = column sums of squares of L^{-1}, for C = L L^T.
            inverse_lower = scipy.linalg.solve_triangular(lower, np.eye(len(lower)), lower=True, check_finite=False)
            inverse_diagonal = np.einsum("ij,ij->j", inverse_lower, inverse_lower)
            self.std_scale_ = interval_scale(
                self.dual_coef_ / inverse_diagonal, 1.0 / inverse_diagonal, check_interval_level(self.interval_level)
            )
            self.cholesky_ = lower
        self.training_fingerprint_ = training_fingerprint(X, y)
        return self

    def predict(self, X, return_std: bool = False):
        """Energies of ``X``; with ``return_std``, also the calibrated standard deviation of each."""
        check_is_fitted(self, "dual_coef_")
        features = self._features(X)
        kernel = self._make_kernel()
        cross = kernel.table(features, self._training_features(), [self.width_]).matrix(0)
        energies = cross @ self.dual_coef_ + self._predict_baseline(X)
        if not return_std:
            return energies
        if not hasattr(self, "cholesky_"):
            raise ModelInputError("this model was fitted with predictive_std=False; refit with predictive_std=True")
        reduced = scipy.linalg.solve_triangular(self.cholesky_, cross.T, lower=True, check_finite=False)
        latent = np.maximum(kernel.self_similarity(features, self.width_) - np.sum(reduced**2, axis=0), 0.0)
        return energies, self.std_scale_ * np.sqrt(latent + self.regularization_)

    def prior_kernel(self, X, Y=None) -> np.ndarray:
        """The fitted kernel (chosen width) between ``X`` and ``Y``, or the training set when ``Y`` is None:
        the prior covariance of the Gaussian-process reading, in units of ``std_scale_**2``.
        ``prior_kernel(X, Y=None)`` rows match the columns of ``cholesky_``."""
        check_is_fitted(self, "dual_coef_")
        other = self._training_features() if Y is None else self._features(Y)
        return self._make_kernel().table(self._features(X), other, [self.width_]).matrix(0)

    def prior_variance(self, X) -> np.ndarray:
        """``k(x, x)`` for each molecule of ``X`` with the fitted width (1 for global kernels)."""
        check_is_fitted(self, "dual_coef_")
        return self._make_kernel().self_similarity(self._features(X), self.width_)


class _GlobalFeatures:
    """Features: one vector per molecule, optionally standardised with training statistics."""

    def _make_kernel(self):
        return GlobalKernel(self.kernel)

    @staticmethod
    def _as_input(X):
        return X if isinstance(X, CountedFeatures) else global_values(X)

    def _fit_features(self, X):
        values = global_values(X)
        self.feature_mean_, self.feature_scale_ = fit_scaling(values, self.scale)
        self.train_features_ = (values - self.feature_mean_) / self.feature_scale_
        return self.train_features_

    def _features(self, X):
        values = global_values(X)
        if values.shape[1] != len(self.feature_mean_):
            raise ModelInputError(f"features have {values.shape[1]} columns; the model was fitted on {len(self.feature_mean_)}")
        return (values - self.feature_mean_) / self.feature_scale_

    def _training_features(self):
        return self.train_features_

    def _scales_per_fold(self) -> bool:
        return bool(self.scale)

    def _fold_features(self, X, train, validation):
        values = global_values(X)
        mean, spread = fit_scaling(values[train], self.scale)
        return (values[train] - mean) / spread, (values[validation] - mean) / spread


class _AtomFeatures:
    """Features: AtomFeatures, compared atom by atom within each element."""

    def _make_kernel(self):
        return AtomwiseKernel(self.dtype, self.block_size)

    @staticmethod
    def _as_input(X):
        return atom_features(X)

    def _fit_features(self, X):
        X = atom_features(X)
        self.train_values_, self.train_numbers_, self.train_offsets_ = X.values, X.numbers, X.offsets
        return X

    def _features(self, X):
        X = atom_features(X)
        if X.values.shape[1] != self.train_values_.shape[1]:
            raise ModelInputError(
                f"atom vectors have {X.values.shape[1]} entries; the model was fitted on {self.train_values_.shape[1]}"
            )
        return X

    def _training_features(self):
        return AtomFeatures(self.train_values_, self.train_numbers_, self.train_offsets_)

    def _scales_per_fold(self) -> bool:
        return False


class _GridSearch:
    """k-fold cross-validation over widths x regularisations, then a refit on all data.

    Sets ``cv_mae_`` (n_widths, n_regularizations: mean validation MAE over folds),
    ``solver_``, ``width_`` and ``regularization_``; with more rows than ``search_size`` the
    search (and ``width_unit_value_``) uses a random subset of that many, ``search_rows_``
    (see the module docstring). ``refused_`` lists the better grid points (width,
    regularisation) whose final factorisation failed, if any. Ties go to the first grid point in scikit-learn's ``ParameterGrid`` order
    (regularisation outer, width inner).
    """

    def _width_unit_value(self, features) -> float:
        return width_unit_value(self.width_unit, features, self._make_kernel(), self.random_state)

    def _fold_kernels(self, X, kernel, folds, widths, shared):
        """``(i_fold, i_width, K_train, K_validation)`` for every fold and width. With ``shared`` (the
        kernel table of the whole training set) each width's kernel is computed once and the fold
        blocks are cut from it; otherwise (per-fold scaling) one table per fold."""
        if shared is not None:
            for i_width in range(len(widths)):
                full = shared.matrix(i_width)
                for i_fold, (train, validation) in enumerate(folds):
                    yield i_fold, i_width, full[np.ix_(train, train)], full[np.ix_(validation, train)]
            return
        for i_fold, (train, validation) in enumerate(folds):
            train_features, val_features = self._fold_features(X, train, validation)
            train_table = kernel.table(train_features, train_features, widths)
            val_table = kernel.table(val_features, train_features, widths)
            for i_width in range(len(widths)):
                yield i_fold, i_width, train_table.matrix(i_width), val_table.matrix(i_width)

    def _search_rows(self, n: int) -> np.ndarray:
        """The rows the grid search runs on: all, or ``search_size`` of them drawn with ``random_state``."""
        if self.search_size is None or int(self.search_size) >= n:
            return np.arange(n)
        if int(self.search_size) < 2:
            raise ModelInputError(f"search_size must be at least 2 (or None), got {self.search_size!r}")
        return np.sort(np.random.default_rng(self.random_state).choice(n, int(self.search_size), replace=False))

    def fit(self, X, y):
        X = self._as_input(X)
        y = targets(y, len(X))
        rows = self.search_rows_ = self._search_rows(len(y))
        searched_all = len(rows) == len(y)
        widths, regularizations, shared = self._search(X if searched_all else X[rows], y[rows])
        # Best grid point first (ties: ParameterGrid order). A point whose final factorisation fails
        # (possible when the search saw fewer rows, or fell back to least squares) gives way to the next.
        order = np.argsort(self.cv_mae_.T, axis=None, kind="stable")
        self.refused_ = []
        for i_reg, i_width in zip(*np.unravel_index(order, self.cv_mae_.T.shape)):
            # The search's kernel at this width is the final one only when it saw every row.
            kernel = shared.matrix(i_width) if shared is not None and searched_all else None
            try:
                return self._fit_fixed(X, y, widths[i_width], regularizations[i_reg], kernel)
            except NotPositiveDefinite:
                self.refused_.append([float(widths[i_width]), float(regularizations[i_reg])])
        raise NotPositiveDefinite("K + lambda I is not positive definite at any grid point; add larger regularisations")

    def _search(self, X, y):
        """Cross-validate the grid on ``X`` (sets ``cv_mae_``); returns the widths, the regularisations
        and the kernel table of ``X`` when one was shared by all folds (else None)."""
        regularizations = check_regularizations(self.regularizations)
        self.solver_ = choose_solver(self.solver, len(regularizations))
        folds = cv_folds(self.cv, len(y), self.random_state)
        kernel = self._make_kernel()
        training_features = self._fit_features(X)
        self.width_unit_value_ = self._width_unit_value(training_features)
        widths = check_widths(self.widths) * self.width_unit_value_
        shared = None if self._scales_per_fold() else kernel.table(training_features, self._training_features(), widths)
        residuals = []
        for train, validation in folds:
            state = fit_baseline(self.baseline, X[train], y[train])
            residuals.append((y[train] - predict_baseline(state, X[train]), y[validation] - predict_baseline(state, X[validation])))
        errors = np.zeros((len(folds), len(widths), len(regularizations)))
        blocks = self._fold_kernels(X, kernel, folds, widths, shared)
        bar = tqdm(blocks, total=len(folds) * len(widths), desc="cross-validation", unit="fold x width",
                   disable=None if self.progress is None else not self.progress)
        for i_fold, i_width, kernel_train, kernel_val in bar:
            y_train, y_val = residuals[i_fold]
            errors[i_fold, i_width] = validation_errors(kernel_train, kernel_val, y_train, y_val, regularizations, self.solver_)
        self.cv_mae_ = errors.mean(axis=0)
        return widths, regularizations, shared


_STD_DOC = """
    predictive_std : bool
        Keep the Cholesky factor and calibrate the amplitude, for ``predict(X, return_std=True)``
        (costs one extra inverse of the training kernel, and n^2 stored floats).
    interval_level : float
        Coverage the calibration aims at: central intervals of this probability should hold
        this fraction of held-out errors."""


class _FixedHyperparameters:
    """``fit`` with the given ``width`` and ``regularization`` (no search)."""

    def fit(self, X, y):
        X = self._as_input(X)
        return self._fit_fixed(X, y, check_widths(self.width)[0], check_regularizations(self.regularization)[0])


class KernelRidgeModel(_GlobalFeatures, _FixedHyperparameters, _KernelRidgeBase):
    __doc__ = f"""Kernel ridge regression with a Gaussian or Laplacian kernel on global features.

    Parameters
    ----------
    kernel : {{"gaussian", "laplacian"}}
        ``exp(-|x-y|_2^2 / (2 width^2))`` or ``exp(-|x-y|_1 / width)``.
    width : float
        Kernel width ``s``, in the (scaled) feature unit.
    regularization : float
        ``lambda`` added to the kernel diagonal.
    scale : bool
        Standardise each feature with the training mean and standard deviation.
    baseline : {{"elements", "mean", None}}
        What is fitted first and added back (see :mod:`molinv.models.baseline`);
        ``"elements"`` needs CountedFeatures.
    {_STD_DOC}
    """

    def __init__(self, kernel="laplacian", width=1.0, regularization=1e-8, scale=False, baseline="elements",
                 predictive_std=True, interval_level=0.9):
        self.kernel = kernel
        self.width = width
        self.regularization = regularization
        self.scale = scale
        self.baseline = baseline
        self.predictive_std = predictive_std
        self.interval_level = interval_level


class KernelRidgeCV(_GlobalFeatures, _GridSearch, _KernelRidgeBase):
    __doc__ = f"""Kernel ridge regression with width and regularisation chosen by k-fold CV (lowest mean MAE).

    Parameters
    ----------
    kernel : {{"gaussian", "laplacian"}}
    widths, regularizations : sequences of float
        The grid.
    cv : int or scikit-learn splitter
        An int means ``KFold(cv, shuffle=True, random_state=random_state)``.
    random_state : int
    solver : {{"auto", "cholesky", "eigen"}}
        How each width is solved for all regularisations; ``"auto"``: see :func:`choose_solver`.
    scale, baseline :
        As in :class:`KernelRidgeModel`; both are fitted on each training fold only.
    {_STD_DOC}
    progress : bool or None
        tqdm bar over folds (``None``: shown on a terminal only).
    width_unit : {"absolute", "median"}
        ``"median"``: ``widths`` are multiples of the median distance between random
        pairs of training rows (``width_unit_value_``), so one grid suits any descriptor.
    search_size : int or None
        With more training rows than this, the grid is searched on a random subset of this
        many (drawn with ``random_state``) and the choice refitted on all rows; None: all rows.
    """

    fixed_class = KernelRidgeModel  # what fixed_hyperparameters makes of a fitted model

    def __init__(self, kernel="laplacian", widths=(1.0, 4.0, 16.0, 64.0, 256.0, 1024.0),
                 regularizations=(1e-10, 1e-8, 1e-6, 1e-4, 1e-2, 1.0), cv=5, random_state=0, solver="auto",
                 scale=False, baseline="elements", predictive_std=True, interval_level=0.9, progress=None,
                 width_unit="absolute", search_size=None):
        self.kernel = kernel
        self.search_size = search_size
        self.widths = widths
        self.width_unit = width_unit
        self.regularizations = regularizations
        self.cv = cv
        self.random_state = random_state
        self.solver = solver
        self.scale = scale
        self.baseline = baseline
        self.predictive_std = predictive_std
        self.interval_level = interval_level
        self.progress = progress


_ATOM_DOC = """dtype : {"float64", "float32"}
        Precision of atom-pair distances and atom kernels (molecule kernels are summed in float64).
        Measured on the 'atoms' descriptor of QM9 (2,325 numbers per atom; 500 training, 300 test
        molecules; benchmarks/bench_models.py, shared machine): float32 1.7x (training kernel) and
        2.9x (test kernel) faster; kernel error about 1.4e-7 of the largest entry at 4 median widths;
        mean |E32 - E64| 0.016, 0.061, 0.12, 0.15 kcal/mol at regularisation 1e-2, 1e-3, 1e-4, 1e-5
        (test MAE about 2.1 kcal/mol). Cross-validation on QM9 picks 1e-4 to 1e-3, where float32 adds
        3-6% of the error: keep float64 for final models, float32 where speed matters more.
    block_size : int
        Atoms per block in the kernel computation (memory vs. call overhead)."""


class AtomwiseKernelRidge(_AtomFeatures, _FixedHyperparameters, _KernelRidgeBase):
    __doc__ = f"""Kernel ridge regression with the atom-by-atom Gaussian kernel on AtomFeatures.

    ``K(A, B) = sum over same-element atom pairs of exp(-|x_i - x_k|^2 / (2 width^2))``
    (De, Bartok, Csanyi, Ceriotti, Phys. Chem. Chem. Phys. 18, 13754, 2016).

    Parameters
    ----------
    width, regularization, baseline :
        As in :class:`KernelRidgeModel` (the element baseline comes from the atomic numbers).
    {_ATOM_DOC}
    {_STD_DOC}
    """

    def __init__(self, width=1.0, regularization=1e-8, dtype="float64", block_size=2048, baseline="elements",
                 predictive_std=True, interval_level=0.9):
        self.width = width
        self.regularization = regularization
        self.dtype = dtype
        self.block_size = block_size
        self.baseline = baseline
        self.predictive_std = predictive_std
        self.interval_level = interval_level


class AtomwiseKernelRidgeCV(_AtomFeatures, _GridSearch, _KernelRidgeBase):
    __doc__ = f"""Atom-by-atom kernel ridge regression with width and regularisation chosen by k-fold CV.

    The molecule kernels of all training molecules are computed once for every width
    (atom-pair distances shared across widths, only half the atom pairs thanks to symmetry)
    and sliced per fold.

    Parameters
    ----------
    widths, regularizations, cv, random_state, solver, baseline, progress, width_unit, search_size :
        As in :class:`KernelRidgeCV`.
    {_ATOM_DOC}
    {_STD_DOC}
    """

    fixed_class = AtomwiseKernelRidge  # what fixed_hyperparameters makes of a fitted model

    def __init__(self, widths=(0.5, 1.0, 2.0, 4.0), regularizations=(1e-10, 1e-8, 1e-6, 1e-4, 1e-2, 1.0), cv=5,
                 random_state=0, solver="auto", dtype="float64", block_size=2048, baseline="elements",
                 predictive_std=True, interval_level=0.9, progress=None, width_unit="absolute", search_size=None):
        self.search_size = search_size
        self.widths = widths
        self.width_unit = width_unit
        self.regularizations = regularizations
        self.cv = cv
        self.random_state = random_state
        self.solver = solver
        self.dtype = dtype
        self.block_size = block_size
        self.baseline = baseline
        self.predictive_std = predictive_std
        self.interval_level = interval_level
        self.progress = progress


def fixed_hyperparameters(model):
    """An unfitted model of the fixed-hyperparameter class with the width and regularisation that the
    fitted cross-validated ``model`` chose, its other settings kept: refits skip the search."""
    target = getattr(type(model), "fixed_class", None)
    if target is None:
        raise ModelInputError(f"{type(model).__name__} has no fixed-hyperparameter counterpart")
    check_is_fitted(model, "width_")
    settings = {name: value for name, value in model.get_params().items() if name in target().get_params()}
    return target(**{**settings, "width": model.width_, "regularization": model.regularization_})
