"""Net charge and spin multiplicity of a molecule: read from the input, checked against its electrons.

Convention: ``atoms.info['charge']`` is the net charge in elementary charges and
``atoms.info['multiplicity']`` the spin multiplicity 2S+1, both integers.

Where they come from:

* SMILES: the formal charges and radical electrons RDKit reads
  (:func:`molinv.molecules.embedding.embed_smiles`); ``O=O`` is read closed-shell.
* SDF/MOL: the same, from the atom block's charges and ``M  CHG`` / ``M  RAD`` lines.
* Extended XYZ: the comment-line fields ``charge=`` and ``multiplicity=``. A ``spin=``
  field alone is refused: some codes mean 2S by it, others 2S+1, so it cannot be read
  without guessing.
* CSV: optional ``charge`` and ``multiplicity`` columns (an empty cell: not stated).
  A ``multiplicity`` property overrides what the structure says (a SMILES cannot say
  that O=O is a triplet); a ``charge`` property that contradicts the structure's formal
  charges is refused, because the structure fixes the atoms and their charges.

Where the input does not say, the molecule is neutral, and its multiplicity is the
lowest the electron count allows: 1 (singlet) for an even count, 2 (doublet) for an odd
one, as a chemist reading a radical's geometry would assume. A stated multiplicity whose
parity does not match the electron count (a singlet with 31 electrons) is refused.
"""

from __future__ import annotations

import numpy as np
from ase import Atoms

from .checks import MoleculeError

CHARGE, MULTIPLICITY = "charge", "multiplicity"
#: Property names that state spin ambiguously (2S in PySCF, 2S+1 in some data sets): refused.
AMBIGUOUS_SPIN_KEYS = ("spin",)


def electron_count(numbers, charge: int = 0) -> int:
    """Electrons of a molecule: the sum of the nuclear charges minus the net charge."""
    return int(np.sum(numbers)) - int(charge)


def _whole_number(value, what: str) -> int:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise MoleculeError(f"{what} {value!r} is not a whole number") from None
    if not np.isfinite(number) or number != round(number):
        raise MoleculeError(f"{what} {value!r} is not a whole number")
    return int(round(number))


def electronic_state(atoms: Atoms) -> tuple[int, int]:
    """(charge, multiplicity) of a molecule, from ``atoms.info`` or the defaults of the module
    docstring; raises :class:`MoleculeError` when they cannot describe its electrons."""
    info = atoms.info
    if MULTIPLICITY not in info:
        ambiguous = [key for key in AMBIGUOUS_SPIN_KEYS if key in info]
        if ambiguous:
            raise MoleculeError(f"property {ambiguous[0]!r}={info[ambiguous[0]]!r} is ambiguous (2S or 2S+1?); "
                                f"state the spin multiplicity 2S+1 as 'multiplicity'")
    charge = _whole_number(info.get(CHARGE, 0), "charge")
    electrons = electron_count(atoms.numbers, charge)
    if electrons < 0:
        raise MoleculeError(f"charge {charge:+d} leaves {electrons} electrons")
    if info.get(MULTIPLICITY) is None:
        return charge, 1 + electrons % 2
    multiplicity = _whole_number(info[MULTIPLICITY], "multiplicity")
    if multiplicity < 1 or multiplicity - 1 > electrons:
        raise MoleculeError(f"multiplicity {multiplicity} is impossible with {electrons} electrons")
    if (multiplicity - 1) % 2 != electrons % 2:
        parity = "odd" if electrons % 2 else "even"
        raise MoleculeError(f"multiplicity {multiplicity} does not match the {parity} number of electrons "
                            f"({electrons} at charge {charge:+d}); a {parity} count needs an "
                            f"{'even' if electrons % 2 else 'odd'} multiplicity")
    return charge, multiplicity


def settle_electronic_state(atoms: Atoms) -> None:
    """Write the checked (charge, multiplicity) into ``atoms.info`` as integers."""
    atoms.info[CHARGE], atoms.info[MULTIPLICITY] = electronic_state(atoms)


def merge_stated(atoms: Atoms, properties: dict) -> None:
    """Add an input record's properties to a molecule whose structure already set its charge and
    multiplicity (SMILES, SDF): a stated multiplicity wins, a contradicting charge is refused."""
    properties = dict(properties)
    if CHARGE in properties and CHARGE in atoms.info:
        stated = _whole_number(properties.pop(CHARGE), "charge")
        if stated != atoms.info[CHARGE]:
            raise MoleculeError(f"charge {stated:+d} is stated, but the structure's formal charges add up to "
                                f"{atoms.info[CHARGE]:+d}")
    atoms.info.update(properties)


def state_name(charge: int, multiplicity: int) -> str:
    """'neutral singlet', 'charge -1 singlet', 'neutral triplet', ..."""
    names = {1: "singlet", 2: "doublet", 3: "triplet", 4: "quartet", 5: "quintet"}
    spin = names.get(multiplicity, f"multiplicity {multiplicity}")
    return f"{'neutral' if charge == 0 else f'charge {charge:+d}'} {spin}"
