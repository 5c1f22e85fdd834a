"""Descriptors: scikit-learn transformers from lists of ``ase.Atoms`` to feature arrays."""

from .base import AtomFeatures, DescriptorError, MoleculeDescriptor, validate_molecules
from .atomic import AtomWaveletInvariants
from .density import DensityScattering
from .reference import BagOfBonds, CoulombMatrix, ElementCounts

__all__ = [
    "AtomFeatures",
    "AtomWaveletInvariants",
    "DescriptorError",
    "MoleculeDescriptor",
    "validate_molecules",
    "BagOfBonds",
    "DensityScattering",
    "CoulombMatrix",
    "ElementCounts",
]
