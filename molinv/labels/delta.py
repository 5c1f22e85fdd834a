"""Delta-learning: learn the difference between a target method and a cheap one.

R. Ramakrishnan, P. O. Dral, M. Rupp, O. A. von Lilienfeld, "Big Data Meets Quantum
Chemistry Approximations: The Delta-Machine Learning Approach", J. Chem. Theory
Comput. 11, 2087 (2015): the model learns ``target - cheap`` and predicts
``cheap + learned correction``. The cheap energy of each molecule is read from
``atoms.info[cheap_key]`` (eV), e.g. a GFN2-xTB atomization energy from
:func:`molinv.labels.label_molecules`.
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.utils.validation import check_is_fitted

from molinv.descriptors.base import molecule_name, validate_molecules

from .methods import LabelError


def cheap_energies(molecules, cheap_key: str) -> np.ndarray:
    """``info[cheap_key]`` of every molecule, eV; a missing or non-finite value names the molecule."""
    values = np.empty(len(molecules))
    for position, atoms in enumerate(molecules):
        value = atoms.info.get(cheap_key)
        try:
            values[position] = float(value)
        except (TypeError, ValueError):
            values[position] = np.nan
        if not np.isfinite(values[position]):
            raise LabelError(f"{molecule_name(atoms, position)} has no finite cheap energy info[{cheap_key!r}] "
                             f"(got {value!r}); label it first or leave it out")
    return values


class DeltaModel(RegressorMixin, BaseEstimator):
    """Target energy = cheap energy + a learned correction.

    Parameters
    ----------
    model : estimator over lists of ``ase.Atoms``
        Learns the correction, e.g. :class:`molinv.recipes.EnergyModel`.
    cheap_key : str
        ``atoms.info`` key of the cheap method's energy, in eV and of the same kind
        as the target (both total energies, or both atomization energies).
    """

    def __init__(self, model, cheap_key: str = "xtb_atomization_energy"):
        self.model = model
        self.cheap_key = cheap_key

    def fit(self, molecules, y):
        molecules = validate_molecules(molecules)
        correction = np.asarray(y, dtype=float) - cheap_energies(molecules, self.cheap_key)
        self.model_ = clone(self.model).fit(molecules, correction)
        return self

    def predict(self, molecules, return_std: bool = False):
        """Target energies, eV; with ``return_std`` the correction model's standard deviation
        (the cheap energy is taken as exact)."""
        check_is_fitted(self, "model_")
        molecules = validate_molecules(molecules)
        cheap = cheap_energies(molecules, self.cheap_key)
        if return_std:
            correction, std = self.model_.predict(molecules, return_std=True)
            return cheap + correction, std
        return cheap + self.model_.predict(molecules)
