"""Per-element ("dressed atom") baseline: a molecule's energy as a sum of element contributions.

.. math::  E(M) \\approx \\sum_Z n_Z(M)\\, \\varepsilon_Z

with the contributions :math:`\\varepsilon_Z` fitted by least squares on the
element counts :math:`n_Z`. Removing this baseline before a kernel fit is common
practice, no source checked here (the project brief points to Hansen et al.,
J. Phys. Chem. Lett. 6, 2326, 2015, and works of Ramakrishnan and von Lilienfeld;
not verified).

The other models learn the residual on top of a baseline chosen by their
``baseline`` parameter: ``"elements"`` (this fit), ``"mean"`` (a constant) or
``None`` (nothing, as :class:`sklearn.kernel_ridge.KernelRidge`).
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted

from molinv.models.inputs import ModelInputError, element_counts, targets, training_fingerprint

BASELINE_KINDS = ("elements", "mean", None)


def fit_element_contributions(counts: np.ndarray, energies: np.ndarray) -> np.ndarray:
    """Least-squares contributions ``eps`` minimising ``|counts @ eps - energies|^2``.

    Uses the minimum-norm solution (``numpy.linalg.lstsq``) so that elements whose
    counts are collinear still get finite contributions.
    """
    contributions, *_ = np.linalg.lstsq(counts, energies, rcond=None)
    return contributions


class ElementBaseline(RegressorMixin, BaseEstimator):
    """Energy as a least-squares sum of per-element contributions.

    Parameters
    ----------
    elements : sequence of symbols or atomic numbers, optional
        Elements of the count columns. ``None``: those present in the training
        AtomFeatures/CountedFeatures; for a bare count matrix, unnamed columns.

    Attributes
    ----------
    contributions_ : ndarray (n_elements,)
        Energy per atom of each element, in the unit of ``y`` (eV inside molinv).
    elements_ : tuple of int
        Atomic numbers of the columns (empty for an unnamed count matrix).

    ``X`` may be AtomFeatures, CountedFeatures, or a count matrix
    ``(n_molecules, n_elements)``.
    """

    def __init__(self, elements=None):
        self.elements = elements

    def fit(self, X, y):
        counts, self.elements_ = element_counts(X, self.elements)
        y = targets(y, len(counts))
        self.contributions_ = fit_element_contributions(counts, y)
        self.training_fingerprint_ = training_fingerprint(X, y)
        return self

    def predict(self, X):
        check_is_fitted(self, "contributions_")
        counts, _ = element_counts(X, self.elements_ if self.elements_ else None)
        if counts.shape[1] != len(self.contributions_):
            raise ModelInputError(f"count matrix has {counts.shape[1]} columns; fitted for {len(self.contributions_)}")
        return counts @ self.contributions_


class BaselineMixin:
    """Fits the chosen baseline and hands the residual to the model.

    Sets ``baseline_elements_`` (atomic numbers), ``baseline_contributions_`` and
    ``baseline_offset_``; the baseline prediction is
    ``counts @ baseline_contributions_ + baseline_offset_``.
    """

    def _fit_baseline(self, X, y: np.ndarray) -> np.ndarray:
        state = fit_baseline(self.baseline, X, y)
        self.baseline_elements_, self.baseline_contributions_, self.baseline_offset_ = state
        return y - predict_baseline(state, X)

    def _predict_baseline(self, X) -> np.ndarray:
        state = (self.baseline_elements_, self.baseline_contributions_, self.baseline_offset_)
        return predict_baseline(state, X)


def fit_baseline(kind, X, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    """Baseline state ``(elements, contributions, offset)`` of kind ``"elements"``, ``"mean"`` or ``None``."""
    if kind not in BASELINE_KINDS:
        raise ModelInputError(f"baseline must be one of {BASELINE_KINDS}, got {kind!r}")
    no_elements = np.zeros(0, dtype=int)
    if kind is None:
        return no_elements, np.zeros(0), 0.0
    if kind == "mean":
        return no_elements, np.zeros(0), float(np.mean(y))
    if not hasattr(X, "numbers") and not hasattr(X, "counts"):
        raise ModelInputError(
            "baseline='elements' needs element counts: pass AtomFeatures or CountedFeatures "
            "(molinv.models.with_element_counts), or choose baseline='mean' or None"
        )
    counts, elements = element_counts(X)
    return np.asarray(elements, dtype=int), fit_element_contributions(counts, y), 0.0


def predict_baseline(state, X) -> np.ndarray:
    """Baseline energies of ``X`` from a state made by :func:`fit_baseline`."""
    elements, contributions, offset = state
    if len(contributions) == 0:
        return np.full(len(X), offset)
    counts, _ = element_counts(X, elements)
    return counts @ contributions + offset
