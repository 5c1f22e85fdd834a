"""From RDKit molecules and SMILES to ``ase.Atoms``.

SMILES get 3D coordinates with hydrogens by RDKit's ETKDG distance geometry
(Riniker, Landrum, J. Chem. Inf. Model. 55, 2562, 2015) with a fixed seed, then
an MMFF94 optimisation (Halgren, J. Comput. Chem. 17, 490, 1996), so the same
SMILES always gives the same geometry on the same RDKit version.
"""

from __future__ import annotations

import logging
import os
import re
import signal
import threading
from contextlib import contextmanager
from pathlib import Path

import numpy as np
from ase import Atoms
from rdkit import Chem, RDLogger, rdBase
from rdkit.Chem import AllChem

from .checks import MoleculeError

#: Seed for ETKDG; fixed so that embedding is reproducible.
EMBED_SEED = 20141005
MAX_FORCE_FIELD_STEPS = 2000
#: ETKDG conformers minimised per SMILES; the lowest in force-field energy is described. On QM9
#: (molecules held out and given as SMILES) 4 conformers gave 2.74 kcal/mol against 3.05 with 1 at
#: 2,000 training molecules (atoms + kernel), 2.03 against 2.22 at 10,000 (atoms + large), at 3 times
#: the embedding time (benchmarks/results/smiles_route/routes_*.jsonl).
CONFORMERS = 4
#: Geometries from the fallbacks of distance geometry are refused above this MMFF94 energy per heavy
#: atom, kcal/mol: the QM9 cages they rescue sit at 7-12 after minimisation, cyclohexatriyne (no such
#: molecule) at about 30, and 2D starts that stay tangled at 30-47 (measured on 10,000 QM9 SMILES,
#: benchmarks/results/smiles_route/embedding_10k.txt; the limit itself is our choice).
MAX_FALLBACK_STRAIN = 20.0

# Route RDKit's C++ log through Python logging so a failing record's reason can be reported.
RDLogger.logger().setLevel(RDLogger.WARNING)
Chem.rdBase.LogToPythonLogger()
_rdkit_log = logging.getLogger("rdkit")
# RDKit installs its own stderr handler; the library reports reasons instead of printing them.
_rdkit_log.handlers.clear()
_rdkit_log.addHandler(logging.NullHandler())
_rdkit_log.propagate = False


class _Collector(logging.Handler):
    def __init__(self):
        super().__init__(level=logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record):
        self.messages.append(record.getMessage().strip())


@contextmanager
def rdkit_messages():
    """Collect RDKit's warnings and errors raised inside the block (a list of strings)."""
    collector = _Collector()
    _rdkit_log.addHandler(collector)
    try:
        yield collector.messages
    finally:
        _rdkit_log.removeHandler(collector)


_TIMESTAMP = re.compile(r"^\[\d\d:\d\d:\d\d\]")


def rdkit_reason(messages: list[str], fallback: str) -> str:
    """RDKit's first telling message, without timestamps, stack traces or recovery notes."""
    for message in messages:
        for line in message.splitlines():
            line = _TIMESTAMP.sub("", line).strip()
            if line.startswith("ERROR: "):
                line = line[len("ERROR: "):]
            noise = not line or line[0] in "*-#" or line[0].isdigit() or "moving to the beginning" in line
            if not noise and not line.startswith(("Could not sanitize", "Stack trace", "Post-condition")):
                return line
    return fallback


def atoms_from_rdkit(mol: Chem.Mol, conformer_id: int = -1) -> Atoms:
    """An ``ase.Atoms`` with the elements and coordinates (Angstrom) of one conformer."""
    conformer = mol.GetConformer(conformer_id)
    positions = np.array(conformer.GetPositions(), dtype=float)
    numbers = [atom.GetAtomicNum() for atom in mol.GetAtoms()]
    return Atoms(numbers=numbers, positions=positions)


#: What RDKit logs when a Ctrl-C reached it during an embedding (RDKit 2026.09).
RDKIT_INTERRUPTED = "Interrupted, cancelling"


@contextmanager
def sigint_held(always: bool = False):
    """SIGINT held back from the main thread while a record is built. RDKit's embedding
    installs its own SIGINT handler, which only asks the embedding to stop: a signal it
    takes after its last check is lost and the run carries on (6 of 30 measured). Held,
    the signal reaches Python's handler, as a KeyboardInterrupt, once the record is built.
    The kernel would hand a held signal to any other thread that does not hold it (a BLAS
    pool started before molinv), which is worse, so it is held only when every other
    thread holds it too (or ``always``: threads started inside the block inherit the hold).
    The command line imports the libraries that start thread pools with SIGINT held (molinv.cli)."""
    hold = (hasattr(signal, "pthread_sigmask") and threading.current_thread() is threading.main_thread()
            and (always or _other_threads_hold_sigint()))
    if not hold:
        yield
        return
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


_threads_holding_sigint: dict[frozenset, bool] = {}


def _other_threads_hold_sigint() -> bool:
    """Whether every other thread of this process holds SIGINT (from Linux's /proc; False
    where it cannot be read). Checked again only when the set of threads changes."""
    try:
        threads = frozenset(os.listdir("/proc/self/task"))
    except OSError:
        return False
    if threads not in _threads_holding_sigint:
        _threads_holding_sigint.clear()
        me = str(threading.get_native_id())
        _threads_holding_sigint[threads] = all(_holds_sigint(thread) for thread in threads if thread != me)
    return _threads_holding_sigint[threads]


def _holds_sigint(thread: str) -> bool:
    try:
        status = Path(f"/proc/self/task/{thread}/status").read_text()
    except OSError:
        return True  # the thread has ended
    blocked = next((line.split()[1] for line in status.splitlines() if line.startswith("SigBlk:")), "0")
    return bool(int(blocked, 16) & (1 << (signal.SIGINT - 1)))


def embed_smiles(smiles: str, seed: int = EMBED_SEED, optimize: bool = True, conformers: int | None = None) -> Atoms:
    """3D geometry with explicit hydrogens for a SMILES string (see :func:`_embed_smiles`);
    raises KeyboardInterrupt when Ctrl-C was pressed while RDKit embedded it."""
    # Only embedding sets RDKit's own SIGINT handler (see sigint_held).
    with sigint_held(), rdkit_messages() as messages:
        try:
            return _embed_smiles(smiles, seed, optimize, conformers)
        finally:
            if any(RDKIT_INTERRUPTED in message for message in messages):
                # A SIGINT that reached RDKit in another thread: it cancelled this embedding (which then
                # fails or returns), so the failure is not the SMILES's.
                raise KeyboardInterrupt


def _embed_smiles(smiles: str, seed: int = EMBED_SEED, optimize: bool = True, conformers: int | None = None) -> Atoms:
    """3D geometry with explicit hydrogens for a SMILES string.

    ETKDG draws ``conformers`` geometries (default :data:`CONFORMERS`), each is minimised with MMFF94 (UFF where
    MMFF94 has no parameters) and the one of lowest force-field energy is kept.
    When distance geometry fails (strained cages, about 1% of QM9), it is retried
    on the heavy-atom skeleton (hydrogens added afterwards), with other variants of
    the method and seeds, and last from a 2D layout; ``info['geometry_source']``
    says which. Raises :class:`MoleculeError` with RDKit's reason when the SMILES
    does not parse or every attempt fails. ``info['smiles']`` holds the input.
    """
    if not isinstance(smiles, str) or not smiles.strip():
        raise MoleculeError("empty SMILES")
    with rdkit_messages() as messages:
        parsed = Chem.MolFromSmiles(smiles.strip())
    if parsed is None:
        raise MoleculeError(f"RDKit cannot parse SMILES {smiles!r}: {rdkit_reason(messages, 'invalid SMILES')}")
    fragments = len(Chem.GetMolFrags(parsed))
    if fragments > 1:
        # Separate fragments embed on top of each other; a record is one molecule.
        raise MoleculeError(
            f"SMILES {smiles!r} has {fragments} disconnected fragments; give one molecule per record "
            "(remove counter-ions or solvent)"
        )
    with rdkit_messages() as messages:
        try:
            mol, source = _embedded(parsed, seed, CONFORMERS if conformers is None else conformers)
            if mol is None:
                raise MoleculeError(f"RDKit cannot embed SMILES {smiles!r} in 3D: distance geometry failed with "
                                    "every method tried (ETKDG, on the heavy-atom skeleton, ETDG, KDG, 2D layout)")
            if optimize:
                conformer_id, force_field, energy = _lowest_after_minimising(mol)
                strain = energy / max(mol.GetNumHeavyAtoms(), 1)
                if source != "rdkit-etkdg" and force_field == "mmff94" and strain > MAX_FALLBACK_STRAIN:
                    raise MoleculeError(
                        f"RDKit cannot embed SMILES {smiles!r} in 3D: distance geometry failed, and the geometry "
                        f"found otherwise is too strained to trust ({strain:.0f} kcal/mol per heavy atom in MMFF94, "
                        f"limit {MAX_FALLBACK_STRAIN:.0f}): an impossible ring, or a tangled start")
                source += f"+{force_field}"
            else:
                conformer_id = mol.GetConformers()[0].GetId()
        except RuntimeError as error:
            # RDKit raises for molecules its force fields cannot set up (query bonds such as '~').
            failure = ": ".join(line.strip() for line in str(error).splitlines()[:2]) or type(error).__name__
            raise MoleculeError(f"RDKit cannot build a 3D geometry for SMILES {smiles!r}: {failure} "
                                f"({rdkit_reason(messages, 'no further message')})") from None
    atoms = atoms_from_rdkit(mol, conformer_id)
    atoms.info["smiles"] = smiles.strip()
    atoms.info["geometry_source"] = source
    atoms.info.update(charge_and_multiplicity(mol))
    return atoms


def formula_of_smiles(smiles: str) -> str:
    """The formula, as ``ase.Atoms.get_chemical_formula`` writes it, of a SMILES with its implicit
    hydrogens, every fragment counted; '' when RDKit cannot parse it."""
    with rdkit_messages():
        parsed = Chem.MolFromSmiles(smiles.strip()) if smiles.strip() else None
    if parsed is None:
        return ""
    return Atoms(numbers=[atom.GetAtomicNum() for atom in Chem.AddHs(parsed).GetAtoms()]).get_chemical_formula()


#: Geometries made from SMILES say so in ``info['geometry_source']``, which starts with this.
EMBEDDED_PREFIX = "rdkit-"


def is_embedded(atoms: Atoms) -> bool:
    """Whether the molecule's coordinates were made from its SMILES by :func:`embed_smiles`."""
    return str(atoms.info.get("geometry_source", "")).startswith(EMBEDDED_PREFIX)


def embedding_settings() -> dict:
    """What makes an embedded geometry: recorded by models trained on such geometries, so that
    candidates embedded differently (another recipe or RDKit version) can be told apart."""
    return {"method": "ETKDGv3 + MMFF94 (UFF where MMFF94 has no parameters), lowest force-field energy",
            "conformers": CONFORMERS, "seed": EMBED_SEED, "force_field_steps": MAX_FORCE_FIELD_STEPS,
            "rdkit": rdBase.rdkitVersion}


def _embedded(parsed: Chem.Mol, seed: int, conformers: int) -> tuple[Chem.Mol | None, str]:
    """The molecule with hydrogens and at least one conformer, and how it was made;
    ``(None, ...)`` when every attempt fails."""
    mol = Chem.AddHs(parsed)
    for random_start in (False, True):
        params = AllChem.ETKDGv3()
        params.randomSeed = int(seed)
        params.useRandomCoords = random_start
        if AllChem.EmbedMultipleConfs(mol, int(conformers), params):
            return mol, "rdkit-etkdg"
    # Strained cages: distance geometry on the heavy-atom skeleton succeeds more often,
    # then with other variants and seeds; chirality is left free only when the SMILES states none.
    stereo_free = Chem.MolToSmiles(parsed) == Chem.MolToSmiles(parsed, isomericSmiles=False)
    attempts = [(AllChem.ETKDGv3, "etkdg", (seed,), True), (AllChem.ETDG, "etdg", range(1, 6), True)]
    if stereo_free:
        attempts.append((AllChem.KDG, "kdg-unconstrained-stereo", range(1, 6), False))
    for method, name, seeds, enforce_chirality in attempts:
        for attempt_seed in seeds:
            skeleton = Chem.Mol(parsed)
            params = method()
            params.randomSeed = int(attempt_seed)
            params.useRandomCoords = True
            params.enforceChirality = enforce_chirality
            if AllChem.EmbedMolecule(skeleton, params) == 0:
                return Chem.AddHs(skeleton, addCoords=True), f"rdkit-{name}-skeleton"
    if stereo_free:
        flat = _from_layout(parsed, seed)
        if flat is not None:
            return flat, "rdkit-2d-layout"
    return None, ""


def _from_layout(parsed: Chem.Mol, seed: int) -> Chem.Mol | None:
    """A 2D depiction lifted off the plane by small random heights and minimised with MMFF94;
    None when the minimum keeps a bond longer than 2 Angstrom (a tangled start)."""
    mol = Chem.AddHs(parsed)
    if not AllChem.MMFFHasAllMoleculeParams(mol):
        return None
    AllChem.Compute2DCoords(mol)
    conformer = mol.GetConformer()
    flat = np.array(conformer.GetPositions())
    flat[:, 2] = np.random.default_rng(seed).normal(scale=0.5, size=len(flat))
    for i, position in enumerate(flat):
        conformer.SetAtomPosition(i, position.tolist())
    AllChem.MMFFOptimizeMolecule(mol, maxIters=5 * MAX_FORCE_FIELD_STEPS)
    positions = np.array(conformer.GetPositions())
    bonds = np.array([[b.GetBeginAtomIdx(), b.GetEndAtomIdx()] for b in mol.GetBonds()])
    longest = np.linalg.norm(positions[bonds[:, 0]] - positions[bonds[:, 1]], axis=1).max() if len(bonds) else 0.0
    return mol if longest < 2.0 else None


def _lowest_after_minimising(mol: Chem.Mol) -> tuple[int, str, float]:
    """Minimise every conformer; the id of the lowest in force-field energy, the force field
    and that energy (kcal/mol, the force field's unit)."""
    if AllChem.MMFFHasAllMoleculeParams(mol):
        results, force_field = AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=MAX_FORCE_FIELD_STEPS, numThreads=1), "mmff94"
    else:
        # MMFF94 lacks parameters for some elements and charge states; UFF covers the table.
        results, force_field = AllChem.UFFOptimizeMoleculeConfs(mol, maxIters=MAX_FORCE_FIELD_STEPS, numThreads=1), "uff"
    ids = [conformer.GetId() for conformer in mol.GetConformers()]
    energies = [energy for _converged, energy in results]
    lowest = int(np.argmin(energies))
    return ids[lowest], force_field, float(energies[lowest])


def charge_and_multiplicity(mol: Chem.Mol) -> dict[str, int]:
    """Net charge (elementary charges) from the formal charges, and spin multiplicity 2S+1
    from the radical electrons, all unpaired taken parallel (RDKit keeps no spin state)."""
    unpaired = sum(atom.GetNumRadicalElectrons() for atom in mol.GetAtoms())
    return {"charge": int(Chem.GetFormalCharge(mol)), "multiplicity": int(unpaired) + 1}
