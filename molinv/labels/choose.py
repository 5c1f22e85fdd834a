"""Choosing the next batch to compute.

Three strategies (:data:`STRATEGIES`):

* 'uncertain' (:func:`pick_batch`): a batch of the k largest predicted standard
  deviations tends to hold near-copies of one another (isomers a few bonds apart
  have similar uncertainty), so the k are chosen among a shortlist of the most
  uncertain by greedy farthest-point selection in descriptor space (Gonzalez,
  Theor. Comput. Sci. 38, 293, 1985): start with the most uncertain, then
  repeatedly add the shortlisted candidate farthest (Euclidean) from everything
  chosen so far and from the labelled set. The most uncertain molecules are
  unusual ones: on QM9 this lowers the largest test error but not the MAE.
* 'spread' (:func:`spread_batch`): farthest-point selection alone, no model.
* 'variance' (:func:`variance_batch`): the candidates whose labels most lower the
  summed predictive variance over a sample of the candidates, which weighs
  uncertainty by how many molecules resemble the candidate.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd
import scipy.linalg
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


def _farthest_points(rows: np.ndarray, k: int, nearest: np.ndarray, first: int) -> list[int]:
    """Greedy farthest-point order: ``first``, then repeatedly the row farthest from all chosen so far,
    ``nearest`` holding each row's squared distance to what was chosen before (labelled rows)."""
    chosen = [first]
    nearest = np.minimum(nearest, _squared_distances(rows, rows[chosen]))
    while len(chosen) < k:
        nearest[chosen] = -np.inf
        following = int(np.argmax(nearest))
        chosen.append(following)
        nearest = np.minimum(nearest, _squared_distances(rows, rows[[following]]))
    return chosen


def _check_request(n: int, k: int) -> None:
    if not 1 <= k <= n:
        raise LabelError(f"cannot pick {k} of {n} candidates")


def _labelled_rows(labelled_vectors, width: int) -> np.ndarray:
    return np.zeros((0, width)) if labelled_vectors is None else np.asarray(labelled_vectors, float)


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
    _check_request(len(std), k)
    if not np.all(np.isfinite(std)):
        raise LabelError("the model gave no finite standard deviation for some candidates; use a kernel model")
    if shortlist_factor < 1:
        raise LabelError("shortlist_factor must be at least 1")
    size = min(len(std), int(np.ceil(shortlist_factor * k)))
    shortlist = np.argsort(-std, kind="stable")[:size]
    rows = vectors[shortlist]
    nearest = _squared_distances(rows, _labelled_rows(labelled_vectors, vectors.shape[1]))
    return shortlist[_farthest_points(rows, k, nearest, int(np.argmax(std[shortlist])))]


def spread_batch(vectors, k: int, labelled_vectors=None) -> np.ndarray:
    """Positions of ``k`` candidates by greedy farthest-point selection alone, no model.

    Each descriptor entry is first scaled to unit standard deviation over the candidates
    (constant entries left as they are), so that no entry dominates the distance by its unit.
    The first pick is the candidate farthest from the labelled set, or, with none, the one
    nearest the candidates' mean. Returns positions in the order picked.
    """
    vectors = np.asarray(vectors, dtype=float)
    if vectors.ndim != 2:
        raise LabelError(f"vectors {vectors.shape} must be (n, d)")
    _check_request(len(vectors), k)
    mean, spread = vectors.mean(axis=0), vectors.std(axis=0)
    spread = np.where(spread > 0, spread, 1.0)
    rows = (vectors - mean) / spread
    labelled = (_labelled_rows(labelled_vectors, vectors.shape[1]) - mean) / spread
    nearest = _squared_distances(rows, labelled)
    first = int(np.argmax(nearest)) if len(labelled) else int(np.argmin(np.sum(rows**2, axis=1)))
    return np.asarray(_farthest_points(rows, k, nearest, first))


def variance_batch(kernel, prior_variance, known, k: int, noise: float, reference) -> np.ndarray:
    """Positions of ``k`` candidates that most lower the summed predictive variance over ``reference``.

    The Gaussian-process reading of kernel ridge (see :mod:`molinv.models.kernel_ridge`) gives
    the predictive covariance of any two molecules after labelling a set; labelling candidate
    ``c`` lowers the variance at ``r`` by ``cov(r, c)^2 / (var(c) + noise)``. Each pick is the
    candidate with the largest reduction summed over the reference candidates, then the
    covariances are updated as if it were labelled (Cohn, Ghahramani, Jordan, J. Artif. Intell.
    Res. 4, 129, 1996, the integrated-variance criterion). Unlike the largest variance alone, this
    favours candidates that resemble many others: an outlier lowers little variance but its own.
    No energy is needed, only the kernel; the model's width and regularisation fix it.

    Parameters
    ----------
    kernel : callable ``(rows, columns) -> (len(rows), len(columns))`` prior kernel between
        candidates given by position.
    prior_variance : (n,) ``k(c, c)`` of each candidate.
    known : (m, n) ``L^{-1} K(labelled, candidates)`` with ``L L^T = K(labelled, labelled) + noise I``
        (a fitted model's ``cholesky_``); ``(0, n)`` when nothing is labelled yet.
    k : batch size.
    noise : the regularisation added to the kernel diagonal.
    reference : positions of the candidates whose variance counts (a random sample of the pool
        stands for the molecules the model will be used on).

    Returns positions in the order picked. Cost per pick: O(n len(reference) + n (m + k)).
    """
    prior_variance = np.asarray(prior_variance, dtype=float)
    known = np.asarray(known, dtype=float)
    reference = np.asarray(reference, dtype=int)
    n = len(prior_variance)
    if known.ndim != 2 or known.shape[1] != n:
        raise LabelError(f"known {known.shape} must have one column per candidate ({n})")
    _check_request(n, k)
    if len(reference) == 0:
        raise LabelError("variance picking needs at least one reference candidate")
    covariance = kernel(np.arange(n), reference) - known.T @ known[:, reference]
    variance = np.maximum(prior_variance - np.sum(known**2, axis=0), 0.0)
    added = np.zeros((k, n))
    chosen = []
    for step in range(k):
        reduction = np.sum(covariance**2, axis=1) / (variance + noise)
        reduction[chosen] = -np.inf
        pick = int(np.argmax(reduction))
        chosen.append(pick)
        row = kernel(np.array([pick]), np.arange(n))[0] - known[:, pick] @ known - added[:step, pick] @ added[:step]
        added[step] = row / np.sqrt(variance[pick] + noise)
        covariance -= np.outer(added[step], added[step, reference])
        variance = np.maximum(variance - added[step] ** 2, 0.0)
    return np.asarray(chosen)


def model_variance_batch(model, inputs, k: int, reference_size: int = 1000, seed=0, labelled_inputs=None):
    """:func:`variance_batch` for a fitted kernel-ridge model (``prior_kernel``, ``cholesky_``): positions of
    ``k`` of the candidates ``inputs``. Labelled are the model's training set and ``labelled_inputs``
    (optional); the reference is a seeded random sample of ``reference_size`` candidates (all if fewer)."""
    if not hasattr(model, "prior_kernel") or not hasattr(model, "cholesky_"):
        raise LabelError("variance picking needs an exact kernel model fitted with predictive_std "
                         "(model 'kernel')")
    noise = model.regularization_
    factor = model.cholesky_
    known = scipy.linalg.solve_triangular(factor, model.prior_kernel(inputs).T, lower=True, check_finite=False)
    if labelled_inputs is not None and len(labelled_inputs):
        # Block Cholesky: extend the training factor by the extra labelled molecules.
        across = scipy.linalg.solve_triangular(factor, model.prior_kernel(labelled_inputs).T, lower=True,
                                               check_finite=False)
        extra = model.prior_kernel(labelled_inputs, labelled_inputs) - across.T @ across
        extra.flat[:: len(extra) + 1] += noise
        lower = scipy.linalg.cholesky(extra, lower=True, check_finite=False)
        residual = model.prior_kernel(labelled_inputs, inputs) - across.T @ known
        known = np.vstack([known, scipy.linalg.solve_triangular(lower, residual, lower=True, check_finite=False)])
    n = known.shape[1]
    reference = np.random.default_rng(seed).choice(n, size=min(reference_size, n), replace=False)

    def kernel(rows, columns):
        return model.prior_kernel(inputs[rows], inputs[columns])

    return variance_batch(kernel, model.prior_variance(inputs), known, k, noise, reference)


#: Strategies of :func:`choose_next`: what each pick favours.
STRATEGIES = {
    "uncertain": "largest predicted std, spread out (farthest-point among a shortlist of the most uncertain)",
    "spread": "farthest-point in scaled descriptor space, no model",
    "variance": "largest drop of the summed predicted variance over the candidates (needs model 'kernel')",
}


def choose_next(model, candidates, k: int, shortlist_factor: float = 4.0, labelled=None, strategy: str = "uncertain",
                reference_size: int = 1000, seed=0) -> dict[str, np.ndarray]:
    """Pick ``k`` of ``candidates`` (``ase.Atoms``) for a fitted :class:`molinv.recipes.EnergyModel`.

    ``strategy`` is one of :data:`STRATEGIES`; ``shortlist_factor`` applies to 'uncertain',
    ``reference_size`` and ``seed`` to 'variance' (see :func:`model_variance_batch`).
    Candidates the fitted descriptor cannot describe (an element or size outside
    its training set) are not picked; their reason says why. Returns
    ``{'picked': positions in pick order, 'predicted': eV, 'std': eV, 'reason': str}``
    over all candidates (NaN predictions where the reason is not empty).
    """
    from molinv.recipes import model_inputs
    from molinv.screening.table import describable

    if strategy not in STRATEGIES:
        raise LabelError(f"unknown strategy {strategy!r}; choose one of: {', '.join(STRATEGIES)}")
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
    known_inputs = None
    if labelled:
        labelled = [atoms for atoms in labelled if not describable(model.descriptor_, atoms)]
        known_inputs = model_inputs(model.descriptor_, labelled, model.feature_store) if labelled else None
    known = None if known_inputs is None else molecule_vectors(known_inputs, elements)
    if strategy == "variance":
        order = model_variance_batch(model.regressor_, inputs, k, reference_size, seed, known_inputs)
    elif strategy == "spread":
        order = spread_batch(molecule_vectors(inputs, elements), k, known)
    else:
        order = pick_batch(std[usable], molecule_vectors(inputs, elements), k, shortlist_factor, known)
    return {"picked": usable[order], "predicted": predicted, "std": std, "reason": reasons}


#: A candidate with more than this many times the non-hydrogen atoms of the largest training
#: molecule is far outside: one label would not make the model fit for it, and it costs the
#: most to compute (common practice, no source).
FAR_SIZE_FACTOR = 1.5


def far_larger(model, heavy_atoms: pd.Series) -> np.ndarray:
    """Where the non-hydrogen atom counts exceed :data:`FAR_SIZE_FACTOR` times the training set's
    largest (all False where the model keeps no training composition)."""
    check = model.applicability_
    if not len(check.count_elements_):
        return np.zeros(len(heavy_atoms), dtype=bool)
    largest = float(check.max_counts_[-1])  # the last count is the non-hydrogen total
    return (heavy_atoms > FAR_SIZE_FACTOR * largest).to_numpy()


def pick_table(model, molecules, rejected=(), k: int = 10, *, unit: str = "kcal/mol", target: str = "energy",
               include_far: bool = False, energy_keys: Sequence[str] = ("energy",), **choose_options) -> pd.DataFrame:
    """Every input row once, as :func:`molinv.screening.table.prediction_table` gives it (record, status,
    reason, prediction, domain distance...), with ``pick_order`` (1..k for the picked, empty otherwise).

    Picked are only rows that labelling can help: not 'failed' (unreadable, elements or a charge/spin
    state the model cannot stand for), and, unless ``include_far``, not far larger than every training
    molecule (:data:`FAR_SIZE_FACTOR`; their reason says so). Rows flagged for other reasons (unlike
    the training molecules, chemistry it never showed) are those labels teach most, and may be picked.
    Molecules need distinct ``info['record']`` numbers (reading sets them), which tie them to their
    rows. ``energy_keys`` as for the prediction table; ``choose_options`` go to :func:`choose_next`.
    """
    from molinv.screening.table import prediction_table

    # On the model's geometry route, as the table predicts them (the table's call then finds them there).
    molecules, _ = model.onto_route(list(molecules))
    position = {atoms.info.get("record"): i for i, atoms in enumerate(molecules)}
    if None in position or len(position) != len(molecules):
        raise LabelError("pick needs a distinct info['record'] on every molecule (as reading sets it)")
    table = prediction_table(model, molecules, rejected, unit=unit, target=target, rank=False, energy_keys=energy_keys)
    molecule_of_row = table["record"].map(position)
    heavy_atoms = molecule_of_row.map(lambda i: np.nan if pd.isna(i) else int(np.sum(molecules[int(i)].numbers > 1)))
    far = far_larger(model, heavy_atoms) & (table["status"] != "failed").to_numpy()
    if not include_far:
        note = f"not picked: more than {FAR_SIZE_FACTOR:g} times the non-hydrogen atoms of any training molecule"
        table.loc[far, "reason"] = [f"{r}; {note}" if r else note for r in table.loc[far, "reason"]]
    eligible = np.flatnonzero((table["status"] != "failed").to_numpy() & (include_far | ~far))
    if len(eligible) < k:
        raise LabelError(f"only {len(eligible)} of {len(table)} candidates can be picked (the others failed"
                         f"{'' if include_far else ' or are far larger than the training molecules'}); "
                         f"cannot pick {k}")
    choice = choose_next(model, [molecules[int(molecule_of_row.iloc[row])] for row in eligible], k, **choose_options)
    table["pick_order"] = pd.array([pd.NA] * len(table), dtype="Int64")
    table.loc[eligible[choice["picked"]], "pick_order"] = np.arange(1, k + 1)
    return table
