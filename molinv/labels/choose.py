"""Choosing the next batch to compute: the most uncertain candidates, spread out.

A batch of the k largest predicted standard deviations tends to hold near-copies
of one another (isomers a few bonds apart have similar uncertainty), and
computing near-copies teaches the model little more than one of them. So the
k are chosen among a shortlist of the most uncertain by greedy farthest-point
selection in descriptor space (Gonzalez, Theor. Comput. Sci. 38, 293, 1985):
start with the most uncertain, then repeatedly add the shortlisted candidate
farthest (Euclidean) from everything chosen so far and from the labelled set.
"""

from __future__ import annotations

import numpy as np
from sklearn.utils.validation import check_is_fitted

from molinv.descriptors.base import AtomFeatures
from molinv.models.inputs import CountedFeatures, per_element_sums

from .methods import LabelError


def molecule_vectors(inputs, elements=None) -> np.ndarray:
    """One vector per molecule from any model input: global rows as they are, atom
    vectors summed per element (see :func:`molinv.models.inputs.per_element_sums`)."""
    if isinstance(inputs, AtomFeatures):
        return per_element_sums(inputs, np.unique(inputs.numbers) if elements is None else elements)
    if isinstance(inputs, CountedFeatures):
        return inputs.values
    return np.asarray(inputs, dtype=float)


def _squared_distances(rows: np.ndarray, centres: np.ndarray) -> np.ndarray:
    """min over centres of |row - centre|^2, for each row; +inf when there are no centres."""
    if len(centres) == 0:
        return np.full(len(rows), np.inf)
    squared = (np.sum(rows**2, 1)[:, None] - 2.0 * rows @ centres.T + np.sum(centres**2, 1)[None, :])
    return np.maximum(squared.min(axis=1), 0.0)


def pick_batch(std, vectors, k: int, shortlist_factor: float = 4.0, labelled_vectors=None) -> np.ndarray:
    """Positions of ``k`` candidates: farthest-point selection among the most uncertain.

    Parameters
    ----------
    std : (n,) predicted standard deviations of the candidates.
    vectors : (n, d) candidate vectors in descriptor space.
    k : batch size.
    shortlist_factor : the ``ceil(shortlist_factor * k)`` most uncertain form the shortlist;
        1 means plain largest-uncertainty selection (common practice, no source, for the default 4).
    labelled_vectors : (m, d), optional; candidates close to already labelled molecules count as near.

    Returns positions in the order picked.
    """
    std = np.asarray(std, dtype=float)
    vectors = np.asarray(vectors, dtype=float)
    if std.ndim != 1 or vectors.ndim != 2 or len(std) != len(vectors):
        raise LabelError(f"std {std.shape} and vectors {vectors.shape} must be (n,) and (n, d)")
    if not 1 <= k <= len(std):
        raise LabelError(f"cannot pick {k} of {len(std)} candidates")
    if not np.all(np.isfinite(std)):
        raise LabelError("the model gave no finite standard deviation for some candidates; use a kernel model")
    if shortlist_factor < 1:
        raise LabelError("shortlist_factor must be at least 1")
    size = min(len(std), int(np.ceil(shortlist_factor * k)))
    shortlist = np.argsort(-std, kind="stable")[:size]
    rows = vectors[shortlist]
    labelled = np.zeros((0, vectors.shape[1])) if labelled_vectors is None else np.asarray(labelled_vectors, float)
    nearest = _squared_distances(rows, labelled)
    chosen = [int(np.argmax(std[shortlist]))]
    nearest = np.minimum(nearest, _squared_distances(rows, rows[chosen]))
    while len(chosen) < k:
        nearest[chosen] = -np.inf
        following = int(np.argmax(nearest))
        chosen.append(following)
        nearest = np.minimum(nearest, _squared_distances(rows, rows[[following]]))
    return shortlist[chosen]


def choose_next(model, candidates, k: int, shortlist_factor: float = 4.0, labelled=None) -> dict[str, np.ndarray]:
    """Pick ``k`` of ``candidates`` (``ase.Atoms``) for a fitted :class:`molinv.recipes.EnergyModel`.

    Candidates the fitted descriptor cannot describe (an element or size outside
    its training set) are not picked; their reason says why. Returns
    ``{'picked': positions in pick order, 'predicted': eV, 'std': eV, 'reason': str}``
    over all candidates (NaN predictions where the reason is not empty).
    """
    from molinv.recipes import model_inputs
    from molinv.screening.table import describable

    check_is_fitted(model, "regressor_")
    if not model.gives_std:
        raise LabelError("choosing by uncertainty needs a model that states one (model 'kernel' or 'large')")
    candidates = list(candidates)
    reasons = np.array([describable(model.descriptor_, atoms) for atoms in candidates], dtype=object)
    usable = np.flatnonzero(reasons == "")
    if len(usable) < k:
        raise LabelError(f"only {len(usable)} of {len(candidates)} candidates can be described by this model; "
                         f"cannot pick {k}")
    inputs = model_inputs(model.descriptor_, [candidates[i] for i in usable], model.feature_store)
    predicted, std = np.full(len(candidates), np.nan), np.full(len(candidates), np.nan)
    predicted[usable], std[usable] = model.regressor_.predict(inputs, return_std=True)
    elements = model.descriptor_.elements_
    known = None
    if labelled:
        labelled = [atoms for atoms in labelled if not describable(model.descriptor_, atoms)]
        known = molecule_vectors(model_inputs(model.descriptor_, labelled, model.feature_store), elements)
    picked = usable[pick_batch(std[usable], molecule_vectors(inputs, elements), k, shortlist_factor, known)]
    return {"picked": picked, "predicted": predicted, "std": std, "reason": reasons}
