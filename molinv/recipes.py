"""Named descriptor and model choices, and the estimator that chains them on molecules.

:class:`EnergyModel` is a scikit-learn regressor whose ``X`` is a list of
``ase.Atoms``: it fits the descriptor (element set, padding) on the training
molecules, turns them into the regressor's input and fits the regressor. Its
model file holds the regressor's arrays plus the descriptor settings, units and
target name (see :mod:`molinv.models.modelfile`; no pickle).
"""

from __future__ import annotations

import inspect
from importlib import import_module

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin, clone
from sklearn.utils.validation import check_is_fitted

from molinv.descriptors.base import MoleculeDescriptor, descriptor_from_settings
from molinv.errors import MolinvError
from molinv.models.inputs import with_element_counts
from molinv.models.modelfile import load_model, read_extra_arrays, save_model
from molinv.molecules import route as routes
from molinv.screening.applicability import ApplicabilityCheck
from molinv.screening.coverage import TrainingChemistry

#: Descriptor choices: our name -> (module, class, parameters, what it is).
DESCRIPTORS = {
    "atoms": ("molinv.descriptors.atomic", "AtomWaveletInvariants", {},
              "atom-centred solid-harmonic wavelet invariants, one vector per atom"),
    "density": ("molinv.descriptors.density", "DensityScattering", {"second_order_channels": ("charge",)},
                "global solid-harmonic wavelet scattering invariants of the density, first order on all channels, "
                "second order on the charge channel (grid-based: about 7-12 ms per QM9 molecule, "
                "grid terms within 1e-2 of a fine grid)"),
    "density-exact": ("molinv.descriptors.density", "DensityScattering", {"powers": (2,), "second_order": False},
                      "the q=2 global scattering invariants only, exact sums over atom pairs (about 1 ms per molecule)"),
    "coulomb": ("molinv.descriptors.reference", "CoulombMatrix", {"variant": "eigenvalues"},
                "sorted Coulomb-matrix eigenvalues (Rupp et al. 2012)"),
    "coulomb-sorted": ("molinv.descriptors.reference", "CoulombMatrix", {"variant": "sorted_matrix"},
                       "Coulomb matrix sorted by row norm (Rupp et al. 2012)"),
    "bonds": ("molinv.descriptors.reference", "BagOfBonds", {}, "bag of bonds (Hansen et al. 2015)"),
    "counts": ("molinv.descriptors.reference", "ElementCounts", {}, "number of atoms of each element"),
}

MODELS = ("kernel", "linear", "baseline", "large")
#: Cross-validation grid of the 'kernel' model on atom-centred descriptors: widths in units of
#: the median distance between same-element training atoms.
KERNEL_WIDTHS = (0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0)
KERNEL_REGULARIZATIONS = (1e-10, 1e-8, 1e-6, 1e-4, 1e-3, 1e-2, 1e-1, 1.0)
#: Kernel and feature standardisation of the 'kernel' and 'large' models per global descriptor,
#: chosen by 5-fold cross-validation on 1,000 and 2,000 QM9 molecules (the comparison is in
#: benchmarks/results/qm9_curves_reference/kernel_choice.md): the Laplacian kernel on raw
#: features for bag of bonds and the sorted Coulomb matrix (as published for them: Hansen et al.,
#: J. Phys. Chem. Lett. 6, 2326, 2015, from memory), the Laplacian on standardised eigenvalues,
#: and the Gaussian on standardised scattering invariants (half the error of the Laplacian; for
#: 'density-exact' by the held-out comparison in benchmarks/RESULTS.md, not cross-validated here).
GLOBAL_KERNEL_CHOICE = {
    "bonds": ("laplacian", False),
    "coulomb-sorted": ("laplacian", False),
    "coulomb": ("laplacian", True),
    "density": ("gaussian", True),
    "density-exact": ("gaussian", True),
}
#: For global descriptors not in the table.
DEFAULT_GLOBAL_KERNEL = ("laplacian", False)
#: Cross-validation grid of the 'kernel' and 'large' models on global descriptors, widths in units
#: of the median distance between training rows. Wide because the best widths differ by 10^3
#: between descriptors (0.5 median distances for standardised Coulomb eigenvalues, 512 for the
#: Gaussian on 'density' at 1,000 molecules). In that comparison steps of 4 in width cost at most
#: 0.5% of the best cross-validated error against steps of 2, and regularisations every second
#: decade up to 2% against every decade; 1e-3 and 1e-1 (chosen for 'bonds' and 'coulomb') are added.
GLOBAL_WIDTHS = (0.125, 0.5, 2.0, 8.0, 32.0, 128.0, 512.0, 2048.0)
GLOBAL_REGULARIZATIONS = (1e-12, 1e-10, 1e-8, 1e-6, 1e-4, 1e-3, 1e-2, 1e-1, 1.0)
#: Above this many training molecules the exact model searches its grid on a random subset of
#: this size and refits the choice on all (see molinv.models.kernel_ridge).
KERNEL_SEARCH_SIZE = 4000
#: Cross-validation grid of the 'large' model on 'atoms' (one pass over the search molecules per
#: width; widths in median distances between same-element atoms), its landmarks (molecules for
#: global descriptors, atoms per element for 'atoms') and the molecules its search runs on (a
#: random subset above that size; the choice is then refitted on all). Measured on QM9 'atoms'
#: (128 components, 10,000 test molecules; benchmarks/results/qm9_curves_atoms/README.md): at
#: 10,000 training molecules, 1,000 landmark atoms per element and widths 1-8 gave 0.84 kcal/mol
#: with the width on the grid's top edge, 2,000 landmarks and widths 2-32 gave 0.73 (width 8,
#: 1e-6; cross-validated errors within 2% of the best along 4/1e-5, 8/1e-6, 16/1e-7). From
#: 20,000 to 100,000 molecules the choice moves to width 4 and 1e-5, hence widths 2-16 and
#: regularisations to 1e-4 around that ridge. The search costs about one r x r Cholesky
#: factorisation per width, fold and regularisation, r = landmarks x elements.
LARGE_ATOM_WIDTHS = (2.0, 4.0, 8.0, 16.0)
LARGE_ATOM_REGULARIZATIONS = (1e-7, 1e-6, 1e-5, 1e-4)
LARGE_LANDMARKS = {"atoms": 2500, "molecules": 4000}
LARGE_SEARCH_SIZE = 20000
MODEL_HELP = {
    "kernel": "kernel ridge, width and regularisation by 5-fold cross-validation",
    "linear": "ridge regression on the descriptor",
    "baseline": "per-element energies only (least squares on element counts)",
    "large": "Nystrom-approximated kernel ridge (landmark molecules, or landmark atoms per element for 'atoms'), "
             "width and regularisation by 5-fold cross-validation; for tens of thousands of molecules",
}


#: Model-file extra arrays of the descriptor (for example a projection basis) carry this prefix.
DESCRIPTOR_ARRAY_PREFIX = "descriptor."


class RecipeError(MolinvError, ValueError):
    """An unknown descriptor or model name, or a pairing that cannot work."""


def make_descriptor(name: str, **overrides) -> MoleculeDescriptor:
    if name not in DESCRIPTORS:
        raise RecipeError(f"unknown descriptor {name!r}; choose one of: {', '.join(DESCRIPTORS)}")
    module, cls, params, _ = DESCRIPTORS[name]
    try:
        descriptor_class = getattr(import_module(module), cls)
    except (ImportError, AttributeError) as error:
        raise RecipeError(f"descriptor {name!r} is not available in this molinv ({error})") from None
    return descriptor_class(**{**params, **overrides})


def make_regressor(name: str, per_atom: bool, progress: bool | None = None, descriptor: str | None = None,
                   landmarks: int | None = None):
    """The regressor of model ``name``; for a global descriptor, ``descriptor`` (its name) picks
    the kernel and feature scaling (:data:`GLOBAL_KERNEL_CHOICE`). ``landmarks`` replaces the
    'large' model's default (:data:`LARGE_LANDMARKS`)."""
    from molinv import models

    kernel, scale = GLOBAL_KERNEL_CHOICE.get(descriptor, DEFAULT_GLOBAL_KERNEL)
    if name == "kernel":
        # Widths in units of the median training distance, so one grid fits every descriptor.
        if per_atom:
            return models.AtomwiseKernelRidgeCV(widths=KERNEL_WIDTHS, regularizations=KERNEL_REGULARIZATIONS,
                                                width_unit="median", progress=progress)
        return models.KernelRidgeCV(kernel, widths=GLOBAL_WIDTHS, regularizations=GLOBAL_REGULARIZATIONS, scale=scale,
                                    width_unit="median", search_size=KERNEL_SEARCH_SIZE, progress=progress)
    if name == "linear":
        return models.LinearRidge()
    if name == "baseline":
        return models.ElementBaseline()
    if name == "large":
        if landmarks is None:
            landmarks = LARGE_LANDMARKS["atoms" if per_atom else "molecules"]
        if per_atom:
            return models.NystromRidgeCV("atomwise", widths=LARGE_ATOM_WIDTHS,
                                         regularizations=LARGE_ATOM_REGULARIZATIONS, n_landmarks=landmarks,
                                         search_size=LARGE_SEARCH_SIZE, progress=progress)
        return models.NystromRidgeCV(kernel, widths=GLOBAL_WIDTHS, regularizations=GLOBAL_REGULARIZATIONS,
                                     scale=scale, n_landmarks=landmarks, search_size=LARGE_SEARCH_SIZE,
                                     progress=progress)
    raise RecipeError(f"unknown model {name!r}; choose one of: {', '.join(MODELS)}")


def describe(descriptor: MoleculeDescriptor, molecules, feature_store=None):
    """A fitted descriptor's values for ``molecules``, from the store when one is given."""
    return feature_store.describe(descriptor, molecules) if feature_store is not None else descriptor.transform(molecules)


def model_inputs(descriptor: MoleculeDescriptor, molecules, feature_store=None):
    """What the regressors take: AtomFeatures as they are, global rows with element counts."""
    features = describe(descriptor, molecules, feature_store)
    if descriptor.per_atom:
        return features
    return with_element_counts(features, molecules, descriptor.elements_)


def standardises(regressor) -> bool:
    """Whether a fitted regressor standardises its feature columns (so distances between molecules
    are measured as its kernel measures them)."""
    return bool(getattr(regressor, "scale", False))


class EnergyModel(RegressorMixin, BaseEstimator):
    """Descriptor then regressor, as one estimator over lists of ``ase.Atoms``.

    Parameters
    ----------
    descriptor : MoleculeDescriptor
    regressor : a molinv model (see :mod:`molinv.models`)
    feature_store : FeatureStore, optional
        Cache the descriptor values on disk (see :mod:`molinv.descriptors.store`).
    geometry_level : str, optional
        How the training coordinates were computed (for example "B3LYP/6-31G(2df,p)"), recorded
        with a model trained on coordinates from files.

    The training molecules share one geometry route (:mod:`molinv.molecules.route`), recorded in
    ``route_``: made from SMILES, or coordinates from files. :meth:`onto_route` brings candidates
    onto it, or says why it cannot.
    """

    def __init__(self, descriptor, regressor, feature_store=None, geometry_level=None):
        self.descriptor = descriptor
        self.regressor = regressor
        self.feature_store = feature_store
        self.geometry_level = geometry_level

    def _inputs(self, molecules):
        return model_inputs(self.descriptor_, molecules, self.feature_store)

    def fit(self, molecules, y):
        molecules = list(molecules)
        self.route_ = routes.training_route(molecules, self.geometry_level)
        self.descriptor_ = clone(self.descriptor).fit(molecules)
        inputs = self._inputs(molecules)
        self.regressor_ = clone(self.regressor).fit(inputs, np.asarray(y, dtype=float))
        self.applicability_ = ApplicabilityCheck(scale=standardises(self.regressor_)).fit(inputs)
        self.chemistry_ = TrainingChemistry().fit(molecules)
        return self

    def onto_route(self, molecules, n_jobs: int = 1, progress: bool | None = None) -> tuple[list, list]:
        """Candidates on the training geometries' route: ``(molecules, notes)``, where a note is
        ``None``, ``("failed", reason)`` (the molecule could not be brought there; its entry is
        the input molecule) or ``("flagged", reason)`` (predicted, but from geometries made
        another way than the training ones)."""
        check_is_fitted(self, "route_")
        molecules = list(molecules)
        notes = [None] * len(molecules)
        if self.route_["kind"] == routes.EMBEDDED:
            moved = routes.onto_embedded_route(molecules, n_jobs=n_jobs, progress=progress)
            for i, item in enumerate(moved):
                if isinstance(item, str):
                    notes[i] = ("failed", item)
                else:
                    molecules[i] = item
            changed = routes.route_difference(self.route_)
            if changed:
                notes = [note or ("flagged", changed) for note in notes]
            return molecules, notes
        for i, atoms in enumerate(molecules):
            if routes.route_of(atoms) == routes.EMBEDDED:
                notes[i] = ("flagged", "geometry made from the SMILES by a force field, but the model learnt from "
                                       f"{routes.describe_route(self.route_)}: on QM9 such a model errs several "
                                       "times more on force-field geometries and its error bars do not hold (fit "
                                       "on SMILES, --route embed, to screen SMILES)")
        return molecules, notes

    def assess(self, molecules) -> dict[str, np.ndarray]:
        """Predicted energy (eV), its standard deviation (eV, NaN if the model gives none),
        nearest-training-neighbour distance, what each contains that no training molecule did
        ('unseen'; see :class:`TrainingChemistry`), and why each lies outside the training domain
        (both tests; '' when it does not; see :class:`ApplicabilityCheck`)."""
        check_is_fitted(self, "regressor_")
        molecules = list(molecules)
        inputs = self._inputs(molecules)
        if self.gives_std:
            predicted, std = self.regressor_.predict(inputs, return_std=True)
        else:
            predicted = self.regressor_.predict(inputs)
            std = np.full(len(predicted), np.nan)
        distance = self.applicability_.distances(inputs)
        unseen = [self.chemistry_.unseen(atoms) for atoms in molecules]
        outside = [("; ".join(filter(None, pair))) for pair in zip(self.applicability_.reasons(inputs, distance), unseen)]
        return {"predicted": np.asarray(predicted, float), "std": np.asarray(std, float), "distance": distance,
                "unseen": unseen, "outside_because": outside}

    @property
    def gives_std(self) -> bool:
        """Whether the regressor states an uncertainty (kernel models do, linear ones do not)."""
        return "return_std" in inspect.signature(self.regressor_.predict).parameters

    def predict(self, molecules, return_std: bool = False):
        """Energies (eV); with ``return_std`` also the calibrated standard deviation, NaN
        when the regressor gives none."""
        check_is_fitted(self, "regressor_")
        inputs = self._inputs(list(molecules))
        if not return_std:
            return self.regressor_.predict(inputs)
        if self.gives_std:
            return self.regressor_.predict(inputs, return_std=True)
        predicted = self.regressor_.predict(inputs)
        return predicted, np.full(len(predicted), np.nan)

    def save(self, path, target: str = "energy", training: dict | None = None):
        """Write the model file; energies in eV, lengths in Angstrom."""
        check_is_fitted(self, "regressor_")
        numbers, arrays = self.applicability_.state(getattr(self.regressor_, "train_values_", None))
        arrays.update({DESCRIPTOR_ARRAY_PREFIX + name: a for name, a in self.descriptor_.fitted_arrays().items()})
        metadata = {"descriptor": self.descriptor_.settings(), "units": {"energy": "eV", "length": "Angstrom"},
                    "target": target, "training": training or {}, "applicability": numbers, "route": self.route_,
                    "chemistry": self.chemistry_.state()}
        return save_model(path, self.regressor_, metadata, extra_arrays=arrays)

    @classmethod
    def load(cls, path) -> tuple["EnergyModel", dict]:
        """Rebuild a saved model; returns ``(model, metadata)``."""
        regressor, metadata = load_model(path)
        extra = read_extra_arrays(path)
        descriptor = descriptor_from_settings(metadata["descriptor"], {
            name[len(DESCRIPTOR_ARRAY_PREFIX):]: a for name, a in extra.items() if name.startswith(DESCRIPTOR_ARRAY_PREFIX)})
        model = cls(descriptor, regressor)
        model.descriptor_, model.regressor_ = descriptor, regressor
        model.applicability_ = ApplicabilityCheck.from_state(metadata["applicability"], extra,
                                                             getattr(regressor, "train_values_", None))
        # Model files written before routes were recorded were all trained on file coordinates.
        model.route_ = metadata.get("route") or routes.route_settings(routes.FILE, "not recorded")
        model.chemistry_ = TrainingChemistry.from_state(metadata.get("chemistry"))
        return model, metadata
