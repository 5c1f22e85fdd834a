"""molinv: invariant multiscale descriptions of small molecules and energy models on them.

Internal units everywhere: energies in eV, lengths in Angstrom (the ASE convention).
Conversions at the boundaries go through :mod:`molinv.molecules.units`.
"""

__version__ = "0.1.0"
