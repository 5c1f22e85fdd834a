"""Shared machinery for descriptors: scikit-learn transformers over lists of ``ase.Atoms``.

A descriptor's ``fit`` fixes the element set (from the data, or from the
``elements`` parameter); ``transform`` refuses molecules with other elements, so
that a saved model always rebuilds exactly the features it was trained on.
Per-molecule work runs in parallel with joblib over chunks of molecules, with a
tqdm progress bar over chunks.
"""

from __future__ import annotations

import hashlib

from dataclasses import dataclass
from typing import Sequence

import numpy as np
from ase import Atoms
from ase.data import atomic_numbers, chemical_symbols
from joblib import Parallel, delayed
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted
from tqdm.auto import tqdm

from molinv.errors import MolinvError


class DescriptorError(MolinvError, ValueError):
    """Bad input to a descriptor: wrong type, or an element it was not fitted for."""


def molecule_name(atoms: Atoms, position: int) -> str:
    """The identifier used in messages: ``info['name']`` or the list position."""
    name = atoms.info.get("name") if isinstance(atoms, Atoms) else None
    return f"molecule {name!r} (position {position})" if name is not None else f"molecule at position {position}"


def validate_molecules(molecules) -> list[Atoms]:
    """Check that the input is a non-empty sequence of non-empty ``ase.Atoms``."""
    if isinstance(molecules, Atoms):
        raise DescriptorError("expected a list of ase.Atoms, got a single ase.Atoms; wrap it in a list")
    molecules = list(molecules)
    if not molecules:
        raise DescriptorError("no molecules given")
    for position, atoms in enumerate(molecules):
        if not isinstance(atoms, Atoms):
            raise DescriptorError(f"item at position {position} is {type(atoms).__name__}, not ase.Atoms")
        if len(atoms) == 0:
            raise DescriptorError(f"{molecule_name(atoms, position)} has no atoms")
    return molecules


def element_numbers(elements) -> tuple[int, ...]:
    """Sorted atomic numbers from symbols or numbers (``['H', 'C']`` -> ``(1, 6)``)."""
    numbers = set()
    for element in elements:
        if isinstance(element, str):
            if element not in atomic_numbers:
                raise DescriptorError(f"unknown element symbol {element!r}")
            numbers.add(atomic_numbers[element])
        else:
            numbers.add(int(element))
    return tuple(sorted(numbers))


@dataclass
class AtomFeatures:
    """One feature vector per atom, for many molecules, stored flat.

    ``values[offsets[i]:offsets[i+1]]`` are the vectors of molecule ``i``'s atoms
    and ``numbers`` the matching atomic numbers. ``elements`` is the element set
    of the descriptor that made them (a subset of molecules may lack some).
    Indexing with an integer array or slice selects molecules, so scikit-learn's
    cross-validation can split it.
    """

    values: np.ndarray
    numbers: np.ndarray
    offsets: np.ndarray
    elements: tuple[int, ...] | None = None

    def __len__(self) -> int:
        return len(self.offsets) - 1

    @property
    def shape(self) -> tuple[int, int]:
        # scikit-learn reads the number of samples from shape[0].
        return (len(self), self.values.shape[1])

    def molecule_index(self) -> np.ndarray:
        """For each atom row, the index of its molecule."""
        return np.repeat(np.arange(len(self)), np.diff(self.offsets))

    def __getitem__(self, selection) -> "AtomFeatures":
        picked = np.arange(len(self))[selection]
        picked = np.atleast_1d(picked)
        starts, stops = self.offsets[picked], self.offsets[picked + 1]
        rows = np.concatenate([np.arange(a, b) for a, b in zip(starts, stops)]) if len(picked) else np.zeros(0, int)
        offsets = np.concatenate([[0], np.cumsum(stops - starts)])
        return AtomFeatures(self.values[rows], self.numbers[rows], offsets, self.elements)

    @classmethod
    def from_blocks(cls, blocks: Sequence[np.ndarray], numbers: Sequence[np.ndarray],
                    elements: tuple[int, ...] | None = None) -> "AtomFeatures":
        sizes = [len(b) for b in blocks]
        return cls(
            np.concatenate(blocks, axis=0).astype(float, copy=False),
            np.concatenate(numbers).astype(int, copy=False),
            np.concatenate([[0], np.cumsum(sizes)]).astype(int),
            elements,
        )


def _describe_chunk(descriptor, chunk):
    return [descriptor._describe_one(atoms) for atoms in chunk]


class MoleculeDescriptor(TransformerMixin, BaseEstimator):
    """Base class. Subclasses implement ``_describe_one(atoms) -> np.ndarray``.

    Parameters shared by every descriptor
    -------------------------------------
    elements : sequence of symbols or atomic numbers, optional
        Element set to describe. ``None``: taken from the molecules given to ``fit``.
    n_jobs : int
        Worker processes for ``transform`` (joblib); 1 runs in this process.
    chunk_size : int
        Molecules per parallel task and per progress-bar step.
    progress : bool or None
        Show a tqdm bar; ``None`` lets tqdm decide (shown only on a terminal).
    """

    #: True for descriptors that return one vector per atom (an AtomFeatures).
    per_atom = False

    def fit(self, molecules, y=None):
        molecules = validate_molecules(molecules)
        if self.elements is None:
            found = set()
            for atoms in molecules:
                found.update(int(z) for z in atoms.numbers)
            self.elements_ = tuple(sorted(found))
        else:
            self.elements_ = element_numbers(self.elements)
        self._check_settings()
        self._fit_features(molecules)
        return self

    def _check_settings(self) -> None:
        """Raise DescriptorError for invalid settings; subclasses extend."""

    def _fit_features(self, molecules: list[Atoms]) -> None:
        """Learn data-dependent sizes (for example padding length); default none."""

    def _check_elements(self, molecules: list[Atoms]) -> None:
        allowed = set(self.elements_)
        for position, atoms in enumerate(molecules):
            extra = set(int(z) for z in atoms.numbers) - allowed
            if extra:
                names = ", ".join(chemical_symbols[z] for z in sorted(extra))
                fitted = ", ".join(chemical_symbols[z] for z in self.elements_)
                raise DescriptorError(
                    f"{molecule_name(atoms, position)} contains {names}; "
                    f"this descriptor was fitted for {fitted} only"
                )

    def transform(self, molecules):
        check_is_fitted(self, "elements_")
        molecules = validate_molecules(molecules)
        self._check_elements(molecules)
        chunks = [molecules[i : i + self.chunk_size] for i in range(0, len(molecules), self.chunk_size)]
        bar = dict(total=len(molecules), unit="mol", desc="describe molecules", disable=self._progress_disabled())
        results = []
        with tqdm(**bar) as progress:
            if self.n_jobs == 1 or len(chunks) == 1:
                for chunk in chunks:
                    results.extend(_describe_chunk(self, chunk))
                    progress.update(len(chunk))
            else:
                runner = Parallel(n_jobs=self.n_jobs, return_as="generator")
                for chunk, rows in zip(chunks, runner(delayed(_describe_chunk)(self, c) for c in chunks)):
                    results.extend(rows)
                    progress.update(len(chunk))
        if self.per_atom:
            return AtomFeatures.from_blocks(results, [atoms.numbers for atoms in molecules], self.elements_)
        return np.vstack(results).astype(float, copy=False)

    def _progress_disabled(self):
        return None if self.progress is None else not self.progress

    def settings(self) -> dict:
        """Parameters plus the fitted element set: all a model file needs to rebuild the features."""
        check_is_fitted(self, "elements_")
        params = {k: v for k, v in self.get_params(deep=False).items() if k not in ("n_jobs", "progress", "chunk_size")}
        params["elements"] = [chemical_symbols[z] for z in self.elements_]
        return {"descriptor": type(self).__name__, "params": _jsonable(params), **self._fitted_state()}

    def _fitted_state(self) -> dict:
        """Data-dependent fitted values to store beside the parameters (JSON); default none.
        Arrays go to :meth:`fitted_arrays`, with their digest here."""
        return {}

    def fitted_arrays(self) -> dict[str, np.ndarray]:
        """Fitted arrays too large for the settings (a model file stores them beside); default none."""
        return {}

    def _restore_fitted_state(self, state: dict, arrays: dict[str, np.ndarray]) -> None:
        """Inverse of :meth:`_fitted_state` and :meth:`fitted_arrays`; by default the features
        depend on settings only."""
        self._fit_features([])


def _subclasses(cls) -> list[type]:
    found = []
    for sub in cls.__subclasses__():
        found += [sub, *_subclasses(sub)]
    return found


def array_digest(array: np.ndarray) -> str:
    """SHA-256 of an array's float64 bytes and shape, to tie stored arrays to their settings."""
    values = np.ascontiguousarray(array, dtype=np.float64)
    return hashlib.sha256(str(values.shape).encode() + values.tobytes()).hexdigest()


def descriptor_from_settings(settings: dict, arrays: dict[str, np.ndarray] | None = None) -> MoleculeDescriptor:
    """Rebuild a fitted descriptor from :meth:`MoleculeDescriptor.settings` and
    :meth:`MoleculeDescriptor.fitted_arrays` (as stored in a model file)."""
    import molinv.descriptors  # noqa: F401  (registers every descriptor class)

    classes = {cls.__name__: cls for cls in _subclasses(MoleculeDescriptor)}
    name = settings.get("descriptor")
    if name not in classes:
        raise DescriptorError(f"unknown descriptor {name!r}; this molinv knows {', '.join(sorted(classes))}")
    params = dict(settings["params"])
    try:
        descriptor = classes[name](**params)
    except TypeError as error:
        raise DescriptorError(f"settings do not fit {name} in this molinv: {error}") from None
    descriptor.elements_ = element_numbers(params["elements"])
    descriptor._check_settings()
    state = {k: v for k, v in settings.items() if k not in ("descriptor", "params")}
    descriptor._restore_fitted_state(state, arrays or {})
    return descriptor


def _jsonable(value):
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value
