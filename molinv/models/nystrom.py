"""Nystrom approximation of kernel ridge regression, for training sets too large for an n x n kernel.

With landmarks :math:`L` the kernel is approximated by
:math:`k(x, y) \\approx \\phi(x)^T \\phi(y)`, :math:`\\phi(x) = K_{LL}^{-1/2} k(L, x)`
(Williams and Seeger, "Using the Nystrom method to speed up kernel machines",
NIPS 13, 2001), which turns kernel ridge into linear ridge on :math:`\\phi`:
:math:`w = (\\Phi^T \\Phi + \\lambda I)^{-1} \\Phi^T y`. Only the
:math:`r \\times r` normal equations are held in memory; :math:`\\Phi` is built chunk
by chunk of molecules.

* Global kernels (Gaussian, Laplacian): landmarks are ``n_landmarks`` training molecules.
* Atom-by-atom kernel: ``n_landmarks`` training atoms per element; a molecule's
  feature is the sum over its atoms of their element block,
  :math:`\\phi(A) = \\sum_{i \\in A} K_{L_{Z_i} L_{Z_i}}^{-1/2} k(L_{Z_i}, x_i)`,
  so that :math:`\\phi(A)^T \\phi(B)` approximates the atom-by-atom kernel.

With every training point (every training atom) as a landmark the predictions
are those of exact kernel ridge. Predictive variance, in the same Gaussian-process
reading as :mod:`molinv.models.kernel_ridge`, for the approximate kernel plus the
part of :math:`k(x, x)` the landmarks miss:

.. math::  \\sigma^2(x) = a^2 \\left(k(x, x) - |\\phi|^2 + \\lambda \\phi^T (\\Phi^T \\Phi + \\lambda I)^{-1} \\phi + \\lambda\\right)

calibrated on leave-one-out residuals :math:`r_i / (1 - h_i)` of the linear ridge, with
variances :math:`\\lambda / (1 - h_i) + k(x_i, x_i) - |\\phi_i|^2`,
:math:`h_i = \\phi_i^T (\\Phi^T\\Phi + \\lambda I)^{-1} \\phi_i` (the missed part keeps
the calibration consistent with the test-time variance when landmarks are few).

Calibration molecules: when there are more candidate landmarks than ``n_landmarks``, a
random share of the training molecules (``CALIBRATION_SHARE``, at most ``CALIBRATION_MAX``)
is kept out of the landmark draw, and the amplitude is calibrated on their leave-one-out
residuals only. Their features then do not depend on themselves, so their leave-one-out
residuals are true out-of-sample errors, like those of new molecules (for a landmark molecule
the missed part is zero and its residual small, which made intervals calibrated on all
molecules drift with the landmark share: coverage 0.84-0.96 measured before this). With every
candidate a landmark (the exact limit) all molecules are used, as in exact kernel ridge.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted
from tqdm.auto import tqdm

from molinv.models.baseline import BaselineMixin, fit_baseline, predict_baseline
from molinv.models.inputs import (
    CountedFeatures,
    ModelInputError,
    atom_features,
    global_values,
    targets,
    training_fingerprint,
)
from molinv.models.kernel_ridge import (
    NotPositiveDefinite,
    check_interval_level,
    check_regularizations,
    cv_folds,
    fit_scaling,
    forget_uncertainty,
    interval_scale,
    width_unit_value,
)
from molinv.models.kernels import (
    ATOM_DTYPES,
    GLOBAL_KERNELS,
    AtomwiseKernel,
    GlobalKernel,
    check_widths,
    molecule_indicator,
    squared_distances,
)

NYSTROM_KERNELS = GLOBAL_KERNELS + ("atomwise",)
#: Share of the training molecules (at most CALIBRATION_MAX) kept out of the landmark draw when
#: there are more candidates than landmarks; the interval amplitude is calibrated on their
#: leave-one-out residuals only (see the module docstring).
CALIBRATION_SHARE = 0.2
CALIBRATION_MAX = 5000
LANDMARK_CHOICES = ("random", "kmeans")
#: k-means landmarks are fitted on at most this many candidates per element (a random sample), so
#: that choosing them costs a fixed time whatever the training size.
KMEANS_SAMPLE = 20000
KMEANS_ITERATIONS = 30


def kmeans_landmarks(points: np.ndarray, n_landmarks: int, rng) -> np.ndarray:
    """``n_landmarks`` k-means centres of ``points`` (at most :data:`KMEANS_SAMPLE` of them, drawn
    with ``rng``), k-means++ started.

    Centres spread over the data where random landmarks crowd its densest regions (QM9's
    methyl hydrogens); k-means landmarks give smaller Nystrom approximation errors than random
    ones at the same rank (Zhang, Tsang and Kwok, "Improved Nystrom low-rank approximation and
    error analysis", ICML 2008).
    """
    from sklearn.cluster import KMeans

    if len(points) > KMEANS_SAMPLE:
        points = points[np.sort(rng.choice(len(points), KMEANS_SAMPLE, replace=False))]
    seed = int(rng.integers(2**31 - 1))
    clustering = KMeans(n_landmarks, n_init=1, max_iter=KMEANS_ITERATIONS, random_state=seed)
    return clustering.fit(np.asarray(points, dtype=np.float64)).cluster_centers_


def inverse_square_root(kernel: np.ndarray, rcond: float) -> np.ndarray:
    """``K^{-1/2}`` restricted to eigenvalues above ``rcond * max``: returns ``V_r / sqrt(Lambda_r)``
    (shape ``m x r``), so that ``phi = k(L, x)^T V_r Lambda_r^{-1/2}``."""
    eigenvalues, vectors = scipy.linalg.eigh(kernel)
    keep = eigenvalues > rcond * eigenvalues[-1]
    return vectors[:, keep] / np.sqrt(eigenvalues[keep])


def fold_errors(features: np.ndarray, folds, residuals, regularizations) -> np.ndarray:
    """Mean validation MAE over ``folds`` of linear ridge on ``features`` at each regularisation
    (inf where a fold's system is not positive definite).

    Each fold solves the smaller of the primal system :math:`(\\Phi_T^T \\Phi_T + \\lambda I) w =
    \\Phi_T^T y` (``r x r``) and the dual :math:`(\\Phi_T \\Phi_T^T + \\lambda I) a = y`,
    :math:`w = \\Phi_T^T a` (training rows squared): the same predictions, and with fewer search
    molecules than landmark features the dual is several times cheaper.
    """
    dual = max(len(train) for train, _ in folds) < features.shape[1]
    gram = features @ features.T if dual else features.T @ features
    errors = np.zeros(len(regularizations))
    for (train, validation), (y_train, y_validation) in zip(folds, residuals):
        if dual:
            system_base, moment, cross = gram[np.ix_(train, train)], y_train, gram[np.ix_(validation, train)]
        else:
            held_out = features[validation]
            system_base, moment, cross = gram - held_out.T @ held_out, features[train].T @ y_train, held_out
        for i_reg, regularization in enumerate(regularizations):
            system = system_base.copy()
            system[np.diag_indices_from(system)] += regularization
            try:
                solution = scipy.linalg.cho_solve(scipy.linalg.cho_factor(system, lower=True), moment)
            except np.linalg.LinAlgError:
                # Too small a regularisation for this width: not a candidate.
                errors[i_reg] = np.inf
                continue
            errors[i_reg] += np.mean(np.abs(cross @ solution - y_validation)) / len(folds)
    return errors


class NystromRidge(BaselineMixin, RegressorMixin, BaseEstimator):
    """Kernel ridge regression approximated with Nystrom landmark features.

    Parameters
    ----------
    kernel : {"gaussian", "laplacian", "atomwise"}
        As in :class:`~molinv.models.KernelRidgeModel` (global features) or
        :class:`~molinv.models.AtomwiseKernelRidge` (AtomFeatures).
    width, regularization : float
        Kernel width and ``lambda``.
    n_landmarks : int
        Landmark molecules (global kernels) or landmark atoms per element (atomwise),
        drawn at random from the training set; all of them when there are fewer. Otherwise
        the calibration molecules (a fifth, at most 5,000) are not drawn from, so at most
        80% of the candidates become landmarks.
    landmark_choice : {"random", "kmeans"}
        Landmarks drawn at random from the candidates, or the centres of a k-means clustering of
        them (per element for atomwise; see :func:`kmeans_landmarks`).
    random_state : int
        Seed of the landmark draw.
    rcond : float
        Eigenvalues of the landmark kernel below ``rcond`` times the largest are dropped.
    dtype : {"float32", "float64"}
        Precision of atom-to-landmark kernels (atomwise only); features are summed in float64.
        Measured on QM9 'atoms' (1,000 training molecules, 300 landmarks per element, width 3.1
        median distances): mean |E32 - E64| 0.26, 0.080, 0.021 kcal/mol at regularisation 1e-5,
        1e-4, 1e-3 (MAE 2.2-3.0); dropping more landmark eigenvalues (``rcond`` 1e-7 to 1e-5)
        shrinks the gap but costs more accuracy than it saves.
    scale : bool
        Standardise global features with training statistics (global kernels only).
    baseline : {"elements", "mean", None}
    chunk_size : int
        Molecules per chunk when building features.
    predictive_std, interval_level :
        As in :class:`~molinv.models.KernelRidgeModel`; the calibration needs a second
        pass over the training set.
    progress : bool or None
        tqdm bar over chunks.
    """

    def __init__(self, kernel="gaussian", width=1.0, regularization=1e-8, n_landmarks=1000, random_state=0,
                 rcond=1e-12, dtype="float64", scale=False, baseline="elements", chunk_size=2000,
                 predictive_std=True, interval_level=0.9, progress=None, landmark_choice="random"):
        self.kernel = kernel
        self.width = width
        self.regularization = regularization
        self.n_landmarks = n_landmarks
        self.landmark_choice = landmark_choice
        self.random_state = random_state
        self.rcond = rcond
        self.dtype = dtype
        self.scale = scale
        self.baseline = baseline
        self.chunk_size = chunk_size
        self.predictive_std = predictive_std
        self.interval_level = interval_level
        self.progress = progress

    # --- features -------------------------------------------------------------------------------

    def _check_settings(self):
        if self.kernel not in NYSTROM_KERNELS:
            raise ModelInputError(f"kernel must be one of {NYSTROM_KERNELS}, got {self.kernel!r}")
        if self.dtype not in ATOM_DTYPES:
            raise ModelInputError(f"dtype must be one of {ATOM_DTYPES}, got {self.dtype!r}")
        if int(self.n_landmarks) < 1 or int(self.chunk_size) < 1:
            raise ModelInputError("n_landmarks and chunk_size must be positive")
        if self.landmark_choice not in LANDMARK_CHOICES:
            raise ModelInputError(f"landmark_choice must be one of {LANDMARK_CHOICES}, got {self.landmark_choice!r}")

    def _inputs(self, X):
        if self.kernel == "atomwise":
            return atom_features(X)
        return X if isinstance(X, CountedFeatures) else global_values(X)

    def _scaled(self, X) -> np.ndarray:
        values = global_values(X)
        if values.shape[1] != len(self.feature_mean_):
            raise ModelInputError(f"features have {values.shape[1]} columns; the model was fitted on {len(self.feature_mean_)}")
        return (values - self.feature_mean_) / self.feature_scale_

    def _calibration_molecules(self, n_molecules: int, n_candidates, rng) -> np.ndarray:
        """Boolean mask of the molecules kept out of the landmark draw (none when every
        candidate of every group becomes a landmark)."""
        reserved = np.zeros(n_molecules, dtype=bool)
        if all(count <= int(self.n_landmarks) for count in n_candidates):
            return reserved
        size = max(1, min(CALIBRATION_MAX, int(round(CALIBRATION_SHARE * n_molecules))))
        reserved[rng.choice(n_molecules, size, replace=False)] = True
        return reserved

    def _pick(self, candidates: np.ndarray, rng) -> np.ndarray:
        """Landmarks among the rows ``candidates``: all of them when they are at most
        ``n_landmarks``, else a random draw or k-means centres."""
        if len(candidates) <= int(self.n_landmarks):
            return candidates
        if self.landmark_choice == "kmeans":
            return kmeans_landmarks(candidates, int(self.n_landmarks), rng)
        return candidates[np.sort(rng.choice(len(candidates), int(self.n_landmarks), replace=False))]

    def _choose_landmarks(self, X, rng) -> np.ndarray:
        """Choose the landmarks; returns the calibration mask (see :meth:`_calibration_molecules`)."""
        if self.kernel != "atomwise":
            values = global_values(X)
            self.feature_mean_, self.feature_scale_ = fit_scaling(values, self.scale)
            reserved = self._calibration_molecules(len(values), [len(values)], rng)
            self.landmarks_ = self._pick(self._scaled(values[~reserved]), rng)
            self.landmark_numbers_ = np.zeros(len(self.landmarks_), dtype=int)
            return reserved
        elements, counts = np.unique(X.numbers, return_counts=True)
        reserved = self._calibration_molecules(len(X), counts, rng)
        eligible = ~reserved[X.molecule_index()]
        picked = [self._pick(X.values[(X.numbers == z) & eligible], rng) for z in elements]
        self.landmarks_ = np.concatenate(picked)
        self.landmark_numbers_ = np.repeat(elements, [len(p) for p in picked])
        return reserved

    def _landmark_kernel(self, rows: np.ndarray, landmarks: np.ndarray) -> np.ndarray:
        if self.kernel == "atomwise":
            distances = squared_distances(rows, landmarks, np.dtype(self.dtype))
            return np.exp(distances * np.asarray(-0.5 / self.width_**2, dtype=distances.dtype))
        return GlobalKernel(self.kernel).table(rows, landmarks, [self.width_]).matrix(0)

    def _fit_projections(self):
        blocks, shapes = [], []
        for z in np.unique(self.landmark_numbers_):
            landmarks = self.landmarks_[self.landmark_numbers_ == z]
            block = inverse_square_root(self._landmark_kernel(landmarks, landmarks).astype(float), self.rcond)
            blocks.append(block.ravel())
            shapes.append(block.shape)
        self.projection_flat_ = np.concatenate(blocks)
        self.projection_shapes_ = np.asarray(shapes, dtype=int)

    def _projections(self):
        sizes = np.prod(self.projection_shapes_, axis=1)
        pieces = np.split(self.projection_flat_, np.cumsum(sizes)[:-1])
        return [piece.reshape(shape) for piece, shape in zip(pieces, self.projection_shapes_)]

    def _features(self, X) -> np.ndarray:
        """Landmark features ``phi`` of the molecules of ``X`` (one chunk), ``(n_molecules, r)``."""
        projections = self._projections()
        if self.kernel != "atomwise":
            return self._landmark_kernel(self._scaled(X), self.landmarks_) @ projections[0]
        if X.values.shape[1] != self.landmarks_.shape[1]:
            raise ModelInputError(f"atom vectors have {X.values.shape[1]} entries; fitted on {self.landmarks_.shape[1]}")
        molecule = X.molecule_index()
        elements = np.unique(self.landmark_numbers_)
        unknown = np.setdiff1d(X.numbers, elements)
        if len(unknown):
            raise ModelInputError(f"atomic numbers {unknown.tolist()} have no landmarks in this model")
        parts = []
        for z, projection in zip(elements, projections):
            atoms = np.flatnonzero(X.numbers == z)
            landmarks = self.landmarks_[self.landmark_numbers_ == z]
            indicator = molecule_indicator(molecule[atoms], len(X), np.float64)
            summed = indicator @ self._landmark_kernel(X.values[atoms], landmarks).astype(float)
            parts.append(summed @ projection)
        return np.hstack(parts)

    def _chunks(self, n: int):
        starts = range(0, n, int(self.chunk_size))
        bar = dict(desc="kernel ridge (landmarks)", unit="chunk", disable=None if self.progress is None else not self.progress)
        for start in tqdm(starts, **bar):
            yield np.arange(start, min(start + int(self.chunk_size), n))

    def _self_similarity(self, X) -> np.ndarray:
        if self.kernel == "atomwise":
            return AtomwiseKernel(self.dtype).self_similarity(X, self.width_)
        return np.ones(len(X))

    # --- fit / predict --------------------------------------------------------------------------

    def fit(self, X, y):
        self._check_settings()
        X = self._inputs(X)
        y = targets(y, len(X))
        reserved = self._choose_landmarks(X, np.random.default_rng(self.random_state))
        return self._fit_fixed(X, y, check_widths(self.width)[0], check_regularizations(self.regularization)[0], reserved)

    def _fit_fixed(self, X, y, width: float, regularization: float, reserved: np.ndarray):
        """Fit with landmarks already chosen (``reserved``: the calibration mask they left out)
        and the given hyperparameters."""
        self.width_ = float(width)
        self.regularization_ = float(regularization)
        calibration = reserved if reserved.any() else np.ones(len(y), dtype=bool)
        self._fit_projections()
        residual = self._fit_baseline(X, y)
        rank = int(self.projection_shapes_[:, 1].sum())
        gram, moment = np.zeros((rank, rank)), np.zeros(rank)
        kept = []  # features of the calibration molecules, for the leave-one-out step
        for chunk in self._chunks(len(y)):
            features = self._features(X[chunk])
            gram += features.T @ features
            moment += features.T @ residual[chunk]
            if self.predictive_std:
                kept.append(features[calibration[chunk]])
        gram[np.diag_indices(rank)] += self.regularization_
        try:
            lower = scipy.linalg.cholesky(gram, lower=True)
        except np.linalg.LinAlgError as error:
            raise NotPositiveDefinite(f"Phi^T Phi + lambda I is not positive definite at width {self.width_}, "
                                      f"regularisation {self.regularization_}; increase the regularisation") from error
        self.coef_ = scipy.linalg.cho_solve((lower, True), moment)
        forget_uncertainty(self)
        if self.predictive_std:
            self.cholesky_ = lower
            features, rows = np.vstack(kept), np.flatnonzero(calibration)
            leverage = np.sum(scipy.linalg.solve_triangular(lower, features.T, lower=True) ** 2, axis=0)
            missed = np.maximum(self._self_similarity(X[rows]) - np.sum(features**2, axis=1), 0.0)
            loo_residuals = (residual[rows] - features @ self.coef_) / (1.0 - leverage)
            loo_variances = self.regularization_ / (1.0 - leverage) + missed
            self.std_scale_ = interval_scale(loo_residuals, loo_variances, check_interval_level(self.interval_level))
            self.n_calibration_ = len(rows)
        self.training_fingerprint_ = training_fingerprint(X, y)
        return self

    def predict(self, X, return_std: bool = False):
        """Energies of ``X``; with ``return_std``, also the calibrated standard deviation of each."""
        check_is_fitted(self, "coef_")
        X = self._inputs(X)
        if return_std and not hasattr(self, "cholesky_"):
            raise ModelInputError("this model was fitted with predictive_std=False; refit with predictive_std=True")
        energies, stds = np.empty(len(X)), np.empty(len(X))
        for chunk in self._chunks(len(X)):
            part = X[chunk]
            features = self._features(part)
            energies[chunk] = features @ self.coef_
            if return_std:
                reduced = scipy.linalg.solve_triangular(self.cholesky_, features.T, lower=True)
                missed = self._self_similarity(part) - np.sum(features**2, axis=1)
                latent = np.maximum(missed + self.regularization_ * np.sum(reduced**2, axis=0), 0.0)
                stds[chunk] = self.std_scale_ * np.sqrt(latent + self.regularization_)
        energies += self._predict_baseline(X)
        return (energies, stds) if return_std else energies


class NystromRidgeCV(NystromRidge):
    """:class:`NystromRidge` with width and regularisation chosen by k-fold cross-validation.

    The landmarks are drawn once from the whole training set (they see no labels).
    For each width the landmark features :math:`\\Phi` of every training molecule are
    built once and kept (``n x r`` floats); each fold then needs only
    :math:`\\Phi_T^T \\Phi_T = \\Phi^T \\Phi - \\Phi_V^T \\Phi_V` and one Cholesky factor per
    regularisation of an ``r x r`` matrix, so the search costs about one feature pass per
    width. The baseline is refitted on each training fold, as in
    :class:`~molinv.models.KernelRidgeCV`. The choice minimises the mean validation MAE
    (ties: the first width, then the first regularisation); the model is then refitted on
    all training molecules with it. With more molecules than ``search_size`` the folds are
    cut from a random subset of that many (same landmarks), so the search costs a fixed
    number of feature passes over the subset whatever the training size (common practice,
    no source; see :mod:`molinv.models.kernel_ridge`).

    Parameters
    ----------
    widths : sequence of float
        Kernel widths, absolute or (``width_unit="median"``) in units of the median
        distance between training rows (same-element atoms for ``kernel="atomwise"``).
    regularizations : sequence of float
    cv : int or scikit-learn splitter
        An int means ``KFold(cv, shuffle=True, random_state=random_state)``.
    search_size : int or None
        Molecules the search runs on when there are more (drawn with ``random_state``);
        None: all of them.
    Other parameters as in :class:`NystromRidge`.

    Sets ``cv_mae_`` (n_widths, n_regularizations; inf where a fold could not be factorised),
    ``search_rows_``, ``width_unit_value_``, ``width_``, ``regularization_`` and ``refused_`` (better
    grid points whose final factorisation failed) besides the fitted state of :class:`NystromRidge`.
    """

    fixed_class = NystromRidge  # what fixed_hyperparameters makes of a fitted model

    def __init__(self, kernel="gaussian", widths=(0.5, 1.0, 2.0, 4.0), regularizations=(1e-8, 1e-6, 1e-4, 1e-2),
                 cv=5, width_unit="median", n_landmarks=1000, random_state=0, rcond=1e-12, dtype="float64",
                 scale=False, baseline="elements", chunk_size=2000, predictive_std=True, interval_level=0.9,
                 progress=None, search_size=None, landmark_choice="random"):
        self.kernel = kernel
        self.search_size = search_size
        self.landmark_choice = landmark_choice
        self.widths = widths
        self.regularizations = regularizations
        self.cv = cv
        self.width_unit = width_unit
        self.n_landmarks = n_landmarks
        self.random_state = random_state
        self.rcond = rcond
        self.dtype = dtype
        self.scale = scale
        self.baseline = baseline
        self.chunk_size = chunk_size
        self.predictive_std = predictive_std
        self.interval_level = interval_level
        self.progress = progress

    def _search_rows(self, n: int) -> np.ndarray:
        if self.search_size is None or int(self.search_size) >= n:
            return np.arange(n)
        if int(self.search_size) < 2:
            raise ModelInputError(f"search_size must be at least 2 (or None), got {self.search_size!r}")
        # A generator of its own, so that the landmark draw does not depend on search_size.
        return np.sort(np.random.default_rng([self.random_state, 1]).choice(n, int(self.search_size), replace=False))

    def _width_unit_value(self, X) -> float:
        if self.kernel == "atomwise":
            return width_unit_value(self.width_unit, X, None, self.random_state)
        return width_unit_value(self.width_unit, self._scaled(X), GlobalKernel(self.kernel), self.random_state)

    def fit(self, X, y):
        self._check_settings()
        X = self._inputs(X)
        y = targets(y, len(X))
        regularizations = check_regularizations(self.regularizations)
        reserved = self._choose_landmarks(X, np.random.default_rng(self.random_state))
        self.width_unit_value_ = self._width_unit_value(X)
        widths = check_widths(self.widths) * self.width_unit_value_
        rows = self.search_rows_ = self._search_rows(len(y))
        searched, y_searched = (X, y) if len(rows) == len(y) else (X[rows], y[rows])
        folds = cv_folds(self.cv, len(rows), self.random_state)
        residuals = []
        for train, validation in folds:
            state = fit_baseline(self.baseline, searched[train], y_searched[train])
            residuals.append((y_searched[train] - predict_baseline(state, searched[train]),
                              y_searched[validation] - predict_baseline(state, searched[validation])))
        errors = np.zeros((len(widths), len(regularizations)))
        for i_width, width in enumerate(widths):
            self.width_ = float(width)
            self._fit_projections()
            features = np.empty((len(rows), int(self.projection_shapes_[:, 1].sum())))
            for chunk in self._chunks(len(rows)):
                features[chunk] = self._features(searched[chunk])
            errors[i_width] = fold_errors(features, folds, residuals, regularizations)
            del features
        self.cv_mae_ = errors
        # Best first (ties: the first width, then the first regularisation); a point whose final
        # factorisation fails gives way to the next, as in KernelRidgeCV.
        self.refused_ = []
        for i_width, i_reg in zip(*np.unravel_index(np.argsort(errors, axis=None, kind="stable"), errors.shape)):
            if not np.isfinite(errors[i_width, i_reg]):
                break
            try:
                return self._fit_fixed(X, y, widths[i_width], regularizations[i_reg], reserved)
            except NotPositiveDefinite:
                self.refused_.append([float(widths[i_width]), float(regularizations[i_reg])])
        raise NotPositiveDefinite("no grid point gives a positive definite system; add larger regularisations")
