"""QM9: 130,831 small organic molecules with B3LYP/6-31G(2df,p) properties.

Source: R. Ramakrishnan, P. O. Dral, M. Rupp, O. A. von Lilienfeld, "Quantum
chemistry structures and properties of 134 kilo molecules", Sci. Data 1, 140022
(2014). The data come from the ``qm9pack`` wheel, whose CSV files are read
directly (the package itself is not imported). The first load writes a compact
numpy cache (``MOLINV_CACHE`` or ``~/.cache/molinv``), read back in well under
a second afterwards.

Units: the CSV holds energies in Hartree; here every energy is in eV (internal
unit), lengths in Angstrom, and the other columns keep the units in their names.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import importlib.util
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from ase import Atoms
from ase.data import atomic_numbers

from ..errors import MolinvError
from .units import ENERGY_UNITS

CITATION = (
    "R. Ramakrishnan, P. O. Dral, M. Rupp, O. A. von Lilienfeld, Quantum chemistry structures and "
    "properties of 134 kilo molecules, Sci. Data 1, 140022 (2014)"
)
LEVEL_OF_THEORY = "B3LYP/6-31G(2df,p)"
CACHE_VERSION = 1
_PARTS = ("qm9_part1.csv", "qm9_part2.csv", "qm9_part3.csv")

#: Energy-like columns: our name -> CSV column (Hartree in the CSV, eV here).
ENERGY_COLUMNS = {
    "U0": "InternalEnergy_0K_au",
    "U": "InternalEnergy_298K_au",
    "H": "Enthalphy_298K_au",
    "G": "GibbsFreeEnergy_298K_au",
    "ZPVE": "ZPVE_au",
    "HOMO": "HOMO_au",
    "LUMO": "LUMO_au",
    "gap": "HOMO_LUMO_gap_au",
}

#: Other scalar columns: our name -> (CSV column, unit).
OTHER_COLUMNS = {
    "rotational_constant_A": ("RotA_GHz", "GHz"),
    "rotational_constant_B": ("RotB_GHz", "GHz"),
    "rotational_constant_C": ("RotC_GHz", "GHz"),
    "dipole_moment": ("Dipole_debye", "Debye"),
    "polarizability": ("Polarizability_bohr3", "Bohr^3"),
    "electronic_spatial_extent": ("R2_bohr2", "Bohr^2"),
    "heat_capacity": ("Heatcapacity_Cv_cal_mol_K", "cal/(mol K)"),
}

#: Units of every property exposed, for reports and file headers.
PROPERTY_UNITS = {
    **{name: "eV" for name in ENERGY_COLUMNS},
    **{name: unit for name, (_, unit) in OTHER_COLUMNS.items()},
    "atomization_energy": "eV",
}

#: Energies of the free atoms at the same level of theory, Hartree: U0, U, H, G
#: (the atomic reference table distributed with QM9, "atomref", Ramakrishnan et
#: al. 2014; values from memory of that table, checked in tests/test_qm9.py
#: against a published atomization energy).
ATOM_REFERENCE_HARTREE = {
    "H": {"U0": -0.500273, "U": -0.498857, "H": -0.497912, "G": -0.510927},
    "C": {"U0": -37.846772, "U": -37.845355, "H": -37.844411, "G": -37.861317},
    "N": {"U0": -54.583861, "U": -54.582445, "H": -54.581501, "G": -54.598897},
    "O": {"U0": -75.064579, "U": -75.063162, "H": -75.062219, "G": -75.079532},
    "F": {"U0": -99.718730, "U": -99.717314, "H": -99.716370, "G": -99.733544},
}


class Qm9Unavailable(MolinvError, RuntimeError):
    """The qm9pack wheel is not installed."""


def data_folder() -> Path:
    """Folder of the qm9pack CSV files, found without importing the package."""
    spec = importlib.util.find_spec("qm9pack")
    if spec is None or not spec.submodule_search_locations:
        raise Qm9Unavailable("QM9 needs the qm9pack wheel: pip install 'molinv[qm9]' (or pip install qm9pack)")
    folder = Path(list(spec.submodule_search_locations)[0]) / "data"
    missing = [p for p in _PARTS if not (folder / p).is_file()]
    if missing:
        raise Qm9Unavailable(f"qm9pack is installed but {folder} lacks {', '.join(missing)}")
    return folder


def cache_folder() -> Path:
    return Path(os.environ.get("MOLINV_CACHE", Path.home() / ".cache" / "molinv"))


def _source_key(folder: Path) -> str:
    """Changes when the wheel or the cache layout changes."""
    try:
        version = importlib.metadata.version("qm9pack")
    except importlib.metadata.PackageNotFoundError:
        version = "unknown"
    stats = [f"{p}:{(folder / p).stat().st_size}" for p in _PARTS]
    return hashlib.sha256(f"{CACHE_VERSION}|{version}|{'|'.join(stats)}".encode()).hexdigest()[:16]


def _parse_flat_floats(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """Numbers from list literals like '[[1.0,2.],[3,4]]' (no eval), flat, with per-row counts."""
    flat = [t.replace("[", "").replace("]", "").strip() for t in texts]
    counts = np.array([t.count(",") + 1 if t else 0 for t in flat])
    values = np.array(",".join(t for t in flat if t).split(","), dtype=float) if counts.sum() else np.zeros(0)
    return values, counts


def _parse_elements(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    symbols = [t.strip("[]").replace("'", "").replace('"', "").split(",") for t in texts]
    counts = np.array([len(s) for s in symbols])
    numbers = np.array([atomic_numbers[s.strip()] for row in symbols for s in row], dtype=np.int8)
    return numbers, counts


def _build_arrays(folder: Path) -> dict[str, np.ndarray]:
    columns = ["XYZ_file", "Index", "SMILES", "InChi", "N_atoms", "Elements", "XYZ_Ang", "Mulliken_pop",
               "Harmonic_Freq_cmi"] + list(ENERGY_COLUMNS.values()) + [c for c, _ in OTHER_COLUMNS.values()]
    table = pd.concat([pd.read_csv(folder / p, usecols=columns, dtype=str) for p in _PARTS], ignore_index=True)
    numbers, atom_counts = _parse_elements(table["Elements"].tolist())
    coordinates, coordinate_counts = _parse_flat_floats(table["XYZ_Ang"].tolist())
    charges, charge_counts = _parse_flat_floats(table["Mulliken_pop"].tolist())
    frequencies, frequency_counts = _parse_flat_floats(table["Harmonic_Freq_cmi"].tolist())
    declared = table["N_atoms"].astype(int).to_numpy()
    if not (np.array_equal(atom_counts, declared) and np.array_equal(charge_counts, declared)
            and len(coordinates) == 3 * declared.sum()):
        raise ValueError(f"{folder}: atom counts in the QM9 CSV files disagree between columns")
    arrays = {
        "source_key": np.array(_source_key(folder)),
        "index": table["Index"].astype(np.int64).to_numpy(),
        "smiles": table["SMILES"].to_numpy(dtype=str),
        "inchi": table["InChi"].to_numpy(dtype=str),
        "numbers": numbers,
        "positions": coordinates.reshape(-1, 3),
        "mulliken_charges": charges,
        "atom_offsets": np.concatenate([[0], np.cumsum(declared)]),
        "frequencies": frequencies,
        "frequency_offsets": np.concatenate([[0], np.cumsum(frequency_counts)]),
    }
    for name, column in ENERGY_COLUMNS.items():
        arrays[name] = table[column].astype(float).to_numpy() * ENERGY_UNITS["Hartree"]
    for name, (column, _unit) in OTHER_COLUMNS.items():
        arrays[name] = table[column].astype(float).to_numpy()
    return arrays


def atomization_energies(numbers: np.ndarray, offsets: np.ndarray, energies: np.ndarray, kind: str = "U0") -> np.ndarray:
    """Positive atomization energies, eV: sum of free-atom energies minus the molecule's.

    ``kind`` picks the matching atomic reference (U0, U, H or G), so that both
    terms come from the same level of theory and temperature.
    """
    reference = np.zeros(max(atomic_numbers[s] for s in ATOM_REFERENCE_HARTREE) + 1)
    for symbol, values in ATOM_REFERENCE_HARTREE.items():
        reference[atomic_numbers[symbol]] = values[kind] * ENERGY_UNITS["Hartree"]
    atom_sums = np.add.reduceat(reference[numbers.astype(int)], offsets[:-1])
    return atom_sums - energies


@dataclass
class Qm9:
    """QM9 held as flat arrays; molecules are built on demand as ``ase.Atoms``."""

    arrays: dict[str, np.ndarray]

    def __len__(self) -> int:
        return len(self.arrays["index"])

    @property
    def n_atoms(self) -> np.ndarray:
        return np.diff(self.arrays["atom_offsets"])

    def heavy_atom_counts(self) -> np.ndarray:
        heavy = (self.arrays["numbers"] > 1).astype(np.int64)
        return np.add.reduceat(heavy, self.arrays["atom_offsets"][:-1])

    def element_counts(self) -> dict[str, np.ndarray]:
        counts = {}
        for symbol in ATOM_REFERENCE_HARTREE:
            hits = (self.arrays["numbers"] == atomic_numbers[symbol]).astype(np.int64)
            counts[symbol] = np.add.reduceat(hits, self.arrays["atom_offsets"][:-1])
        return counts

    def atomization_energy(self, kind: str = "U0") -> np.ndarray:
        return atomization_energies(self.arrays["numbers"], self.arrays["atom_offsets"], self.arrays[kind], kind)

    def select(self, max_heavy_atoms: int | None = None, elements: Sequence[str] | None = None) -> np.ndarray:
        """Positions (0-based) of molecules with at most ``max_heavy_atoms`` heavy atoms
        and only the given elements."""
        keep = np.ones(len(self), dtype=bool)
        if max_heavy_atoms is not None:
            keep &= self.heavy_atom_counts() <= max_heavy_atoms
        if elements is not None:
            allowed = set(elements)
            unknown = allowed - set(ATOM_REFERENCE_HARTREE)
            if unknown:
                raise ValueError(f"QM9 holds H, C, N, O, F only; not {', '.join(sorted(unknown))}")
            for symbol, counts in self.element_counts().items():
                if symbol not in allowed:
                    keep &= counts == 0
        return np.flatnonzero(keep)

    def sample(self, n: int | None = None, seed: int = 0, **selection) -> np.ndarray:
        """A reproducible random sample (positions) of ``n`` molecules from a selection, in random order.

        The order is shuffled too (QM9 is sorted by size), so that taking the first
        molecules of a sample is itself a random draw; ``n=None`` shuffles the whole selection.
        """
        candidates = self.select(**selection)
        rng = np.random.default_rng(seed)
        if n is None or n >= len(candidates):
            return rng.permutation(candidates)
        return rng.choice(candidates, size=n, replace=False)

    def table(self, positions: np.ndarray | None = None) -> pd.DataFrame:
        """Scalar properties, one row per molecule; energies in eV, units in ``PROPERTY_UNITS``."""
        positions = np.arange(len(self)) if positions is None else np.asarray(positions)
        data = {"name": [f"qm9_{i:06d}" for i in self.arrays["index"][positions]],
                "qm9_index": self.arrays["index"][positions],
                "smiles": self.arrays["smiles"][positions],
                "n_atoms": self.n_atoms[positions]}
        for name in list(ENERGY_COLUMNS) + list(OTHER_COLUMNS):
            data[name] = self.arrays[name][positions]
        data["atomization_energy"] = self.atomization_energy()[positions]
        return pd.DataFrame(data)

    def molecules(self, positions: Sequence[int] | None = None) -> list[Atoms]:
        """``ase.Atoms`` for the given positions, with every property in ``info``."""
        positions = np.arange(len(self)) if positions is None else np.asarray(positions, dtype=int)
        arrays, offsets = self.arrays, self.arrays["atom_offsets"]
        atomization = self.atomization_energy()
        scalar_names = list(ENERGY_COLUMNS) + list(OTHER_COLUMNS)
        result = []
        for position in positions:
            start, stop = offsets[position], offsets[position + 1]
            atoms = Atoms(numbers=arrays["numbers"][start:stop].astype(int), positions=arrays["positions"][start:stop])
            atoms.arrays["mulliken_charges"] = arrays["mulliken_charges"][start:stop].copy()
            info = atoms.info
            info["name"] = f"qm9_{arrays['index'][position]:06d}"
            info["qm9_index"] = int(arrays["index"][position])
            info["smiles"] = str(arrays["smiles"][position])
            info["inchi"] = str(arrays["inchi"][position])
            info["geometry_source"] = f"QM9 {LEVEL_OF_THEORY}"
            for name in scalar_names:
                info[name] = float(arrays[name][position])
            info["atomization_energy"] = float(atomization[position])
            f0, f1 = arrays["frequency_offsets"][position], arrays["frequency_offsets"][position + 1]
            info["frequencies"] = arrays["frequencies"][f0:f1].copy()
            result.append(atoms)
        return result


_loaded: Qm9 | None = None


def open_qm9(refresh: bool = False) -> Qm9:
    """QM9 from the numpy cache, building the cache from the CSV files on first use."""
    global _loaded
    if _loaded is not None and not refresh:
        return _loaded
    folder = data_folder()
    key = _source_key(folder)
    cache = cache_folder() / f"qm9-{key}.npz"
    arrays = None
    if cache.is_file() and not refresh:
        with np.load(cache, allow_pickle=False) as stored:
            arrays = {name: stored[name] for name in stored.files}
        if str(arrays.get("source_key")) != key:
            arrays = None
    if arrays is None:
        arrays = _build_arrays(folder)
        cache.parent.mkdir(parents=True, exist_ok=True)
        partial = cache.with_name(cache.name + f".{os.getpid()}.tmp.npz")
        np.savez(partial, **arrays)
        os.replace(partial, cache)
    _loaded = Qm9(arrays)
    return _loaded


def load_qm9(
    n: int | None = None,
    seed: int = 0,
    max_heavy_atoms: int | None = None,
    elements: Sequence[str] | None = None,
) -> list[Atoms]:
    """QM9 molecules as ``ase.Atoms`` (energies in eV; see :meth:`Qm9.molecules`).

    ``n`` draws a reproducible random sample (by ``seed``), in random order, from the
    molecules with at most ``max_heavy_atoms`` heavy atoms and only ``elements``;
    ``None`` takes all of them (shuffled).
    """
    data = open_qm9()
    return data.molecules(data.sample(n, seed, max_heavy_atoms=max_heavy_atoms, elements=elements))

