"""Geometry routes: how a molecule's coordinates were made, and bringing molecules onto one route.

A model learns the energy from geometries made one way, and predicts well only from
geometries made the same way: descriptors react strongly to the small, systematic
differences between a DFT-optimised and a force-field geometry (on QM9, a model trained
on DFT geometries errs several times more on force-field geometries of the same
molecules; benchmarks/results/smiles_route/). Two routes:

- ``embedded``: the geometry is made from the SMILES by
  :func:`~molinv.molecules.embedding.embed_smiles` (ETKDG + MMFF94). Candidates given as
  SMILES arrive this way, so it is the route of screening.
- ``file``: the coordinates of an input file, at a level of theory the user names
  (for QM9, B3LYP/6-31G(2df,p)).

A molecule given with coordinates is brought onto the embedded route by embedding its
SMILES again (``info['smiles']``, or bonds perceived from the coordinates).
"""

from __future__ import annotations

from typing import Sequence

from ase import Atoms
from joblib import Parallel, delayed
from rdkit import Chem
from tqdm.auto import tqdm

from .checks import MoleculeError
from .embedding import embedding_settings, embed_smiles, is_embedded

EMBEDDED = "embedded"
FILE = "file"
ROUTES = (EMBEDDED, FILE)
#: Coordinates files carry no level of theory; the user may name it.
LEVEL_NOT_STATED = "not stated"


def route_of(atoms: Atoms) -> str:
    return EMBEDDED if is_embedded(atoms) else FILE


def route_settings(kind: str, level: str | None = None) -> dict:
    """What a model records about its training geometries."""
    if kind == EMBEDDED:
        return {"kind": EMBEDDED, "embedding": embedding_settings()}
    if kind == FILE:
        return {"kind": FILE, "level": level or LEVEL_NOT_STATED}
    raise ValueError(f"unknown geometry route {kind!r}; choose one of: {', '.join(ROUTES)}")


def training_route(molecules: Sequence[Atoms], level: str | None = None) -> dict:
    """The route shared by all training molecules; mixed routes are refused, since the
    model would learn the difference between the routes as part of the energy."""
    kinds = {route_of(atoms) for atoms in molecules}
    if len(kinds) > 1:
        embedded = sum(is_embedded(atoms) for atoms in molecules)
        raise MoleculeError(f"the training molecules mix geometry routes ({embedded} made from SMILES, "
                            f"{len(molecules) - embedded} from coordinates); bring them onto one route first")
    kind = kinds.pop() if kinds else FILE
    if kind == FILE and level is None:
        sources = {str(atoms.info.get("geometry_source", "")) for atoms in molecules} - {"", "file"}
        level = sources.pop() if len(sources) == 1 else None
    return route_settings(kind, level)


def describe_route(route: dict) -> str:
    """One line for tables, summaries and reports."""
    if route["kind"] == EMBEDDED:
        embedding = route["embedding"]
        return (f"geometries made from SMILES ({embedding['method']}, {embedding['conformers']} conformer(s), "
                f"RDKit {embedding['rdkit']})")
    return f"geometries from the input files ({route['level']})"


def route_difference(route: dict) -> str:
    """Why candidates embedded by this molinv are not on an embedded route recorded earlier
    ('' when they are)."""
    current = embedding_settings()
    changed = [key for key in current if route["embedding"].get(key) != current[key]]
    if not changed:
        return ""
    return ("the model's geometries were embedded with other settings ("
            + ", ".join(f"{key} {route['embedding'].get(key)} then, {current[key]} now" for key in changed) + ")")


def smiles_for(atoms: Atoms) -> str:
    """The molecule's SMILES: as given, else from bonds perceived in its coordinates."""
    given = atoms.info.get("smiles")
    if given:
        return str(given)
    from .writing import bonded_molecule

    mol = bonded_molecule(atoms)
    try:
        return Chem.MolToSmiles(Chem.RemoveHs(mol))
    except (ValueError, RuntimeError, Chem.rdchem.MolSanitizeException) as error:
        raise MoleculeError(f"no SMILES could be perceived from the coordinates ({error})") from None


def re_embedded(atoms: Atoms) -> Atoms:
    """The molecule on the embedded route: its SMILES embedded anew, its other information kept.
    Raises :class:`MoleculeError` with the reason when that fails."""
    if is_embedded(atoms):
        return atoms
    smiles = smiles_for(atoms)
    embedded = embed_smiles(smiles)
    if sorted(embedded.numbers) != sorted(atoms.numbers):
        raise MoleculeError(f"the SMILES {smiles!r} does not hold the molecule's atoms "
                            f"({embedded.get_chemical_formula()} against {atoms.get_chemical_formula()})")
    how = "given SMILES" if atoms.info.get("smiles") else "bonds perceived from the coordinates"
    kept = {k: v for k, v in atoms.info.items() if k not in ("geometry_source", "smiles")}
    embedded.info.update(kept)
    embedded.info["geometry_source"] += f", from the {how}"
    return embedded


def _re_embedded_block(block: Sequence[Atoms]) -> list[Atoms | str]:
    """Each molecule re-embedded, or the reason it could not be (one joblib task)."""
    done = []
    for atoms in block:
        try:
            done.append(re_embedded(atoms))
        except MoleculeError as error:
            done.append(f"could not bring onto the model's geometry route: {error}")
    return done


def onto_embedded_route(molecules: Sequence[Atoms], n_jobs: int = 1, progress: bool | None = None,
                        chunk_size: int = 200) -> list[Atoms | str]:
    """Each molecule on the embedded route, or the reason it could not be brought there."""
    result: list[Atoms | str] = list(molecules)
    pending = [i for i, atoms in enumerate(molecules) if not is_embedded(atoms)]
    chunks = [pending[i:i + chunk_size] for i in range(0, len(pending), chunk_size)]
    blocks = [[molecules[i] for i in chunk] for chunk in chunks]
    if n_jobs == 1 or len(blocks) <= 1:
        finished = map(_re_embedded_block, blocks)
    else:
        finished = Parallel(n_jobs=n_jobs, return_as="generator")(delayed(_re_embedded_block)(b) for b in blocks)
    disabled = None if progress is None else not progress
    with tqdm(total=len(pending), desc="embedding SMILES", unit="mol", disable=disabled) as bar:
        for chunk, done in zip(chunks, finished):
            for i, item in zip(chunk, done):
                result[i] = item
            bar.update(len(chunk))
    return result
