"""Did the training set show the candidate's chemistry?

A distance in descriptor space can call a molecule familiar although it holds a group
no training molecule had: on a QM9-trained 'bonds' model butanoic acid lies closer to
its nearest training molecule than most training molecules do to theirs, yet QM9 has
no carboxylic acid. So a fitted model also records, as short readable names, what its
training molecules contained:

* charge and spin states ('neutral singlet'): the descriptors do not see charge or spin,
  so a prediction for another state is that of a different species; such candidates
  are refused (status ``failed``), and picking them to label cannot help;
* functional groups (:data:`FUNCTIONAL_GROUPS`), atom environments (element, number of
  neighbours, aromaticity, formal charge), ring sizes and bonded element pairs; a
  candidate with one the training set never showed is flagged, naming it
  ("carboxylic acid: none in the training set").

Bonds come from the molecule's SMILES when it has one (exact), else they are perceived
from the geometry (:func:`molinv.molecules.writing.bonded_molecule`); where bond orders
cannot be perceived, the groups that need them go unseen.
"""

from __future__ import annotations

from functools import lru_cache

from ase import Atoms
from rdkit import Chem

from molinv.molecules.checks import MoleculeError
from molinv.molecules.electrons import electronic_state, state_name
from molinv.molecules.embedding import rdkit_messages
from molinv.molecules.writing import bonded_molecule

#: Functional groups as SMARTS, written for this check (common practice, no source); the
#: names are those of an organic chemistry textbook. Hydrogen counts (H1) count explicit
#: hydrogen atoms too.
FUNCTIONAL_GROUPS = {
    "carboxylic acid": "[CX3](=O)[OX2H1]",
    "carboxylate": "[CX3](=O)[OX1-]",
    "ester": "[#6][CX3](=O)[OX2H0][#6]",
    "anhydride": "[CX3](=O)[OX2][CX3](=O)",
    "acyl halide": "[CX3](=O)[F,Cl,Br,I]",
    "amide": "[CX3](=[OX1])[NX3]",
    "carbamate": "[NX3][CX3](=[OX1])[OX2]",
    "urea": "[NX3][CX3](=[OX1])[NX3]",
    "aldehyde": "[CX3;H1,H2]=[OX1]",
    "ketone": "[#6][CX3](=[OX1])[#6]",
    "alcohol": "[OX2H1][CX4]",
    "enol or phenol": "[OX2H1][$([CX3]=[#6]),c]",
    "ether": "[OX2]([#6;!$([CX3]=[O,S,N])])[#6;!$([CX3]=[O,S,N])]",
    "peroxide": "[OX2][OX2]",
    "primary amine": "[NX3;H2;!$(N[CX3]=[O,S,N])][#6]",
    "secondary amine": "[NX3;H1;!$(N[CX3]=[O,S,N])]([#6])[#6]",
    "tertiary amine": "[NX3;H0;!$(N[CX3]=[O,S,N]);!$(N~[!#6])]([#6])([#6])[#6]",
    "ammonium": "[NX4+]",
    "imine": "[CX3]=[NX2]",
    "oxime": "[CX3]=[NX2][OX2H1]",
    "hydrazine": "[NX3][NX3]",
    "azo": "[#6][NX2]=[NX2][#6]",
    "nitrile": "[CX2]#[NX1]",
    "isocyanate": "[NX2]=[CX2]=[OX1]",
    "nitro": "[$([NX3](=O)=O),$([NX3+](=O)[O-])]",
    "alkyne": "[CX2]#[CX2]",
    "thiol": "[SX2H1]",
    "sulfide": "[SX2]([#6])[#6]",
    "sulfonyl": "[SX4](=[OX1])(=[OX1])",
}
#: Reasons listed per candidate before the rest is counted.
SHOWN_REASONS = 4


@lru_cache(maxsize=None)
def _patterns() -> dict[str, Chem.Mol]:
    return {name: Chem.MolFromSmarts(smarts) for name, smarts in FUNCTIONAL_GROUPS.items()}


def rdkit_from_atoms(atoms: Atoms) -> Chem.Mol:
    """The molecule with explicit hydrogens and bonds: from its SMILES when that parses and has
    the same atoms, else perceived from the geometry."""
    smiles = atoms.info.get("smiles")
    if smiles:
        with rdkit_messages():
            parsed = Chem.MolFromSmiles(str(smiles))
        if parsed is not None:
            parsed = Chem.AddHs(parsed)
            if sorted(a.GetAtomicNum() for a in parsed.GetAtoms()) == sorted(atoms.numbers.tolist()):
                return parsed
    with rdkit_messages():
        return bonded_molecule(atoms)


def _environment(atom: Chem.Atom) -> str:
    text = f"{'aromatic ' if atom.GetIsAromatic() else ''}{atom.GetSymbol()} with {atom.GetTotalDegree()} neighbours"
    charge = atom.GetFormalCharge()
    return text + (f", charge {charge:+d}" if charge else "")


def chemistry_names(atoms: Atoms) -> set[str]:
    """Readable names of what a molecule contains: functional groups, atom environments,
    ring sizes and bonded element pairs."""
    mol = rdkit_from_atoms(atoms)
    names = {name for name, pattern in _patterns().items() if mol.HasSubstructMatch(pattern)}
    names |= {f"atom {_environment(atom)}" for atom in mol.GetAtoms()}
    names |= {f"ring of {len(ring)} atoms" for ring in mol.GetRingInfo().AtomRings()}
    for bond in mol.GetBonds():
        pair = sorted((bond.GetBeginAtom().GetSymbol(), bond.GetEndAtom().GetSymbol()))
        names.add(f"{pair[0]}-{pair[1]} bond")
    return names


class TrainingChemistry:
    """What the training molecules contained; ``refusal`` and ``unseen`` judge a candidate.

    ``fit(molecules)`` records the charge/spin states and :func:`chemistry_names` of the
    training set; ``state()``/``from_state`` give a plain JSON-able dict for a model file.
    A check built from nothing (``from_state(None)``, a model file older than this
    check) knows nothing and never refuses or flags.
    """

    def __init__(self):
        self.states_ = self.names_ = None

    def fit(self, molecules) -> "TrainingChemistry":
        states, names = set(), set()
        for atoms in molecules:
            states.add(electronic_state(atoms))
            names |= chemistry_names(atoms)
        self.states_ = sorted(states)
        self.names_ = sorted(names)
        return self

    @property
    def known(self) -> bool:
        return self.states_ is not None

    def refusal(self, atoms: Atoms) -> str:
        """Why the model cannot stand for this molecule's charge and spin ('' when it can)."""
        if not self.known:
            return ""
        try:
            state = electronic_state(atoms)
        except MoleculeError as error:
            return str(error)
        if state in self.states_:
            return ""
        trained = ", ".join(state_name(*known) for known in self.states_)
        return (f"{state_name(*state)}: the model was trained on {trained} molecules only "
                f"(its descriptor does not see charge or spin)")

    def unseen(self, atoms: Atoms) -> str:
        """What this molecule contains that no training molecule did ('' when nothing)."""
        if not self.known:
            return ""
        missing = sorted(chemistry_names(atoms) - set(self.names_))
        reasons = [f"{name}: none in the training set" for name in missing[:SHOWN_REASONS]]
        if len(missing) > SHOWN_REASONS:
            reasons.append(f"and {len(missing) - SHOWN_REASONS} more not in the training set")
        return "; ".join(reasons)

    def state(self) -> dict | None:
        if not self.known:
            return None
        return {"states": [list(state) for state in self.states_], "names": list(self.names_)}

    @classmethod
    def from_state(cls, state: dict | None) -> "TrainingChemistry":
        check = cls()
        if state is not None:
            check.states_ = [tuple(known) for known in state["states"]]
            check.names_ = list(state["names"])
        return check
