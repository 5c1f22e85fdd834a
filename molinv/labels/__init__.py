"""Deciding what to compute next, and computing it.

* :mod:`.methods` - reference energies of one molecule: HF and DFT (PySCF), GFN2-xTB (tblite).
* :mod:`.run` - labelling runs: chunks of molecules in parallel single-thread workers, resumable.
* :mod:`.delta` - Delta-learning: learn target minus a cheap method's energy.
* :mod:`.choose` - the next batch: most uncertain predictions, spread out in descriptor space.
* :mod:`.loop` - pick, label, refit, measure; repeated for rounds, resumable.

Energies in eV inside; the quantum-chemistry codes' Hartree values are kept beside them.
"""

from .methods import LabelError, LabelFailure, LabelMethod
from .run import label_chunk, label_molecules, read_labels

__all__ = ["LabelError", "LabelFailure", "LabelMethod", "label_chunk", "label_molecules", "read_labels"]
