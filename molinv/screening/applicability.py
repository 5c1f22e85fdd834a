"""Is a candidate like the molecules the model was trained on?

The test compares a candidate's distance to its nearest training neighbour in
descriptor space with the same distance measured inside the training set (each
training molecule against the others), and flags candidates beyond a high
quantile of the training set's own values (the usual nearest-neighbour
applicability domain; Sahigara et al., "Comparison of different approaches to define the
applicability domain of QSAR models", Molecules 17, 4791, 2012; from memory).

* Global descriptors: Euclidean distance between molecule vectors as the model's kernel
  sees them: standardised per column where the model standardises them (``scale``),
  raw otherwise. Standardising the raw bag-of-bonds columns, as this check once did,
  divided by spreads of floating-point noise (1e-13 for a bag entry that every training
  molecule shares), so ethanol came out 1e12 times the threshold; columns whose spread
  is at the noise level now count as constant (see
  :func:`molinv.models.kernel_ridge.fit_scaling`).
* Atom-centred descriptors: for every atom the distance to the nearest training
  atom of the same element in another molecule; a molecule's value is its
  largest atom value (one unfamiliar environment is enough to flag it).

Atom-centred vectors describe local environments, which a large molecule shares
with small ones; so a second test, the range of the training compositions (the
"bounding box" approach in the same review), flags a candidate with more atoms of
some element than any training molecule had.
"""

from __future__ import annotations

import numpy as np

from ase.data import chemical_symbols

from molinv.descriptors.base import AtomFeatures
from molinv.models.inputs import CountedFeatures, element_counts
from molinv.models.kernel_ridge import fit_scaling

#: Training quantile of nearest-neighbour distances beyond which a candidate is flagged
#: (common practice, no source: 0.95-0.99 are usual).
DEFAULT_QUANTILE = 0.99
#: At most this many reference vectors (molecules, or atoms per element) are kept.
DEFAULT_MAX_REFERENCES = 20000
_BLOCK = 2048


def nearest_distances(queries: np.ndarray, references: np.ndarray,
                      query_groups: np.ndarray | None = None, reference_groups: np.ndarray | None = None) -> np.ndarray:
    """Euclidean distance from each query row to its nearest reference row, computed in blocks.

    ``|q - r|^2 = |q|^2 + |r|^2 - 2 q.r``; pairs with equal group labels (the same
    molecule) are skipped, so training molecules are not their own neighbours.
    """
    reference_norms = np.einsum("ij,ij->i", references, references)
    result = np.empty(len(queries))
    for start in range(0, len(queries), _BLOCK):
        block = queries[start : start + _BLOCK]
        squared = np.einsum("ij,ij->i", block, block)[:, None] + reference_norms[None, :] - 2.0 * block @ references.T
        if query_groups is not None:
            squared[query_groups[start : start + _BLOCK, None] == reference_groups[None, :]] = np.inf
        result[start : start + _BLOCK] = np.sqrt(np.maximum(squared.min(axis=1), 0.0))
    return result


def _with_heavy_total(counts: np.ndarray, elements: np.ndarray) -> np.ndarray:
    """Element counts with one more column: the number of non-hydrogen atoms."""
    return np.column_stack([counts, counts[:, elements > 1].sum(axis=1)])


class ApplicabilityCheck:
    """Nearest-neighbour distance test of candidates against the training inputs.

    ``fit(X)`` takes the model inputs of the training molecules (array,
    CountedFeatures or AtomFeatures); ``distances(X)`` and ``outside(X)`` take the
    candidates' inputs of the same kind. ``state()``/``from_state`` give plain
    arrays and numbers for a model file.
    """

    def __init__(self, quantile: float = DEFAULT_QUANTILE, max_references: int = DEFAULT_MAX_REFERENCES,
                 random_state: int = 0, scale: bool = False):
        self.quantile = quantile
        self.max_references = max_references
        self.random_state = random_state
        self.scale = scale

    def _subsample(self, n: int, rng) -> np.ndarray:
        return np.arange(n) if n <= self.max_references else np.sort(rng.choice(n, self.max_references, replace=False))

    def fit(self, X) -> "ApplicabilityCheck":
        rng = np.random.default_rng(self.random_state)
        if isinstance(X, AtomFeatures):
            self.per_atom_ = True
            molecule = X.molecule_index()
            self.references_, self.reference_rows_, training_values = {}, {}, np.zeros(len(X))
            for z in np.unique(X.numbers):
                rows = np.flatnonzero(X.numbers == z)
                kept = rows[self._subsample(len(rows), rng)]
                self.references_[int(z)] = (X.values[kept], molecule[kept])
                self.reference_rows_[int(z)] = kept
                nearest = nearest_distances(X.values[rows], X.values[kept], molecule[rows], molecule[kept])
                np.maximum.at(training_values, molecule[rows], np.where(np.isfinite(nearest), nearest, 0.0))
        else:
            self.per_atom_ = False
            values = X.values if isinstance(X, CountedFeatures) else np.asarray(X, float)
            self.mean_, self.scale_ = fit_scaling(values, self.scale)
            scaled = (values - self.mean_) / self.scale_
            kept = self._subsample(len(scaled), rng)
            self.references_, self.reference_rows_ = {0: (scaled[kept], kept)}, {}
            training_values = nearest_distances(scaled, scaled[kept], np.arange(len(scaled)), kept)
        self.training_distances_ = training_values
        self.threshold_ = float(np.quantile(training_values, self.quantile))
        if isinstance(X, (AtomFeatures, CountedFeatures)):
            counts, elements = element_counts(X)
            self.count_elements_ = np.asarray(elements, int)
            self.max_counts_ = _with_heavy_total(counts, self.count_elements_).max(axis=0)
        else:
            self.count_elements_, self.max_counts_ = np.zeros(0, int), np.zeros(0)
        return self

    def reasons(self, X, distances: np.ndarray | None = None) -> list[str]:
        """Why each candidate lies outside the training domain ('' when it does not)."""
        distances = self.distances(X) if distances is None else distances
        found = [[] for _ in range(len(distances))]
        for i in np.flatnonzero(distances > self.threshold_):
            found[i].append(f"unlike the training molecules (nearest-neighbour distance {distances[i] / self.threshold_:.2f}"
                            f" times the training set's {self.quantile:.0%} quantile)")
        if len(self.count_elements_) and isinstance(X, (AtomFeatures, CountedFeatures)):
            counts = _with_heavy_total(element_counts(X, tuple(self.count_elements_))[0], self.count_elements_)
            names = [f"{chemical_symbols[z]} atoms" for z in self.count_elements_] + ["non-hydrogen atoms"]
            for i, j in zip(*np.nonzero(counts > self.max_counts_)):
                found[i].append(f"more {names[j]} than any training molecule ({counts[i, j]:.0f} > {self.max_counts_[j]:.0f})")
        return ["; ".join(r) for r in found]

    def distances(self, X) -> np.ndarray:
        """Each candidate's nearest-neighbour distance (inf where an element has no training atom)."""
        if self.per_atom_:
            if not isinstance(X, AtomFeatures):
                raise TypeError("this check was fitted on atom-centred features; pass AtomFeatures")
            values = np.zeros(len(X))
            molecule = X.molecule_index()
            for z in np.unique(X.numbers):
                rows = np.flatnonzero(X.numbers == z)
                if int(z) not in self.references_:
                    values[molecule[rows]] = np.inf
                    continue
                nearest = nearest_distances(X.values[rows], self.references_[int(z)][0])
                np.maximum.at(values, molecule[rows], nearest)
            return values
        values = X.values if isinstance(X, CountedFeatures) else np.asarray(X, float)
        return nearest_distances((values - self.mean_) / self.scale_, self.references_[0][0])

    def state(self, training_values: np.ndarray | None = None) -> tuple[dict, dict]:
        """(numbers, arrays) describing the fitted check, for a model file.

        ``training_values``: the training atoms' vectors as another part of the model file keeps
        them (an atom-centred kernel model does); reference atoms found there are stored as row
        numbers into them, not copied (at 500 QM9 molecules the copies were half of a 340 MB file)."""
        numbers = {"quantile": float(self.quantile), "max_references": int(self.max_references),
                   "random_state": int(self.random_state), "scale": bool(self.scale), "per_atom": bool(self.per_atom_),
                   "threshold": self.threshold_}
        arrays = {"training_distances": self.training_distances_, "count_elements": self.count_elements_,
                  "max_counts": self.max_counts_}
        for z, (vectors, _) in self.references_.items():
            rows = self.reference_rows_.get(z)
            if (training_values is not None and rows is not None and len(rows) and rows.max() < len(training_values)
                    and np.array_equal(training_values[rows], vectors)):
                arrays[f"reference_rows_{z}"] = rows
            else:
                arrays[f"references_{z}"] = vectors
        if not self.per_atom_:
            arrays.update(mean=self.mean_, scale=self.scale_)
        return numbers, arrays

    @classmethod
    def from_state(cls, numbers: dict, arrays: dict, training_values: np.ndarray | None = None) -> "ApplicabilityCheck":
        """The check :meth:`state` described; ``training_values`` as given to it when it stored rows."""
        # Files written before 'scale' was recorded standardised every column; their arrays say how.
        check = cls(numbers["quantile"], numbers["max_references"], numbers["random_state"], numbers.get("scale", True))
        check.per_atom_, check.threshold_ = bool(numbers["per_atom"]), float(numbers["threshold"])
        check.training_distances_ = arrays["training_distances"]
        check.count_elements_, check.max_counts_ = arrays["count_elements"], arrays["max_counts"]
        check.references_ = {int(k.split("_")[1]): (v, None) for k, v in arrays.items() if k.startswith("references_")}
        check.reference_rows_ = {int(k.split("_")[2]): rows for k, rows in arrays.items()
                                 if k.startswith("reference_rows_")}
        for z, rows in check.reference_rows_.items():
            if training_values is None:
                raise ValueError("this check refers to the training atoms of its model; pass them")
            check.references_[z] = (training_values[rows], None)
        if not check.per_atom_:
            check.mean_, check.scale_ = arrays["mean"], arrays["scale"]
        return check
