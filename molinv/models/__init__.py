"""Energy models: scikit-learn regressors on molinv descriptors.

* :class:`ElementBaseline` - least-squares per-element contributions.
* :class:`KernelRidgeModel`, :class:`KernelRidgeCV` - Gaussian/Laplacian kernel ridge on global features.
* :class:`LinearRidge` - ridge on global features or per-element atom sums.
* :class:`AtomwiseKernelRidge`, :class:`AtomwiseKernelRidgeCV` - atom-by-atom kernel on AtomFeatures.
* :class:`NystromRidge`, :class:`NystromRidgeCV` - landmark (Nystrom) approximation of either kernel, for large training sets.

Model files: :func:`save_model` / :func:`load_model` (npz + JSON, no pickle).

Energies are in the unit of the training targets (eV inside molinv).
"""

from molinv.models.baseline import ElementBaseline
from molinv.models.inputs import CountedFeatures, ModelInputError, with_element_counts
from molinv.models.kernel_ridge import AtomwiseKernelRidge, AtomwiseKernelRidgeCV, KernelRidgeCV, KernelRidgeModel
from molinv.models.linear import LinearRidge
from molinv.models.modelfile import ModelFileError, load_model, save_model
from molinv.models.nystrom import NystromRidge, NystromRidgeCV

__all__ = [
    "AtomwiseKernelRidge",
    "AtomwiseKernelRidgeCV",
    "CountedFeatures",
    "ElementBaseline",
    "KernelRidgeCV",
    "KernelRidgeModel",
    "LinearRidge",
    "ModelFileError",
    "ModelInputError",
    "NystromRidge",
    "NystromRidgeCV",
    "load_model",
    "save_model",
    "with_element_counts",
]
