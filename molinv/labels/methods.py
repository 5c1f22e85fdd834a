"""Reference energies of one molecule: Hartree-Fock and DFT through PySCF, GFN2-xTB through tblite.

Both codes are optional (``pip install 'molinv[quantum]'``) and imported only when
a calculation runs. They work in Hartree and Bohr; every energy leaving this module
is converted to eV, the internal unit, with the Hartree-valued number kept beside it.

Each molecule is computed at its charge and spin multiplicity (``info['charge']``,
``info['multiplicity']``; see :mod:`molinv.molecules.electrons` for how they are read and
defaulted): closed shells restricted (RHF/RKS), open shells unrestricted (UHF/UKS);
tblite takes the charge and the number of unpaired electrons. Free atoms for atomization
energies are computed spin-polarised (unrestricted) in their ground-state multiplicity,
with the same method and basis; an ion gets no atomization energy (neutral atoms do not
add up to it).

PySCF names: 'B3LYPG' is B3LYP with the VWN3 (VWN-RPA) local correlation used by
Gaussian, and therefore by QM9; PySCF's 'B3LYP5' uses VWN5 (see PySCF's
``dft.libxc`` documentation of the B3LYP definitions).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from functools import lru_cache

import numpy as np
from ase import Atoms
from ase.data import chemical_symbols

from molinv.errors import MolinvError
from molinv.molecules.checks import MoleculeError
from molinv.molecules.electrons import electronic_state
from molinv.molecules.units import ENERGY_UNITS, LENGTH_UNITS

KINDS = ("hf", "dft", "xtb")

#: Spin multiplicity 2S+1 of the free atoms' ground terms (e.g. C 3P, N 4S, O 3P);
#: NIST Atomic Spectra Database, ground levels (Kramida, Ralchenko, Reader et al.).
ATOM_MULTIPLICITY = {
    "H": 2, "He": 1, "Li": 2, "Be": 1, "B": 2, "C": 3, "N": 4, "O": 3, "F": 2, "Ne": 1,
    "Na": 2, "Mg": 1, "Al": 2, "Si": 3, "P": 4, "S": 3, "Cl": 2, "Ar": 1, "Br": 2, "I": 2,
}

#: GFN2-xTB is parametrised for Z = 1-86 (Bannwarth, Ehlert, Grimme, J. Chem. Theory Comput. 15, 1652, 2019).
XTB_MAX_Z = 86


class LabelError(MolinvError, ValueError):
    """Settings or a labels file that a labelling run cannot use."""


class LabelFailure(MolinvError, RuntimeError):
    """One molecule that could not be computed; the message is the reason recorded."""


@dataclass(frozen=True)
class LabelMethod:
    """How to compute a reference energy.

    Parameters
    ----------
    kind : {"hf", "dft", "xtb"}
        Restricted Hartree-Fock, Kohn-Sham DFT (PySCF) or GFN2-xTB (tblite).
    functional : str
        PySCF exchange-correlation name (DFT only), e.g. "B3LYPG", "PBE0".
    basis : str
        PySCF basis name (HF and DFT), e.g. "STO-3G", "6-31G(2df,p)".
    grid_level : int
        PySCF integration grid level 0-9 (DFT only).
    max_cycles : int
        SCF iterations before a molecule counts as not converged.
    convergence : float
        SCF energy convergence threshold, Hartree.
    cartesian : bool
        Cartesian instead of spherical d and f functions (HF and DFT). Gaussian, and so
        QM9, uses Cartesian d with spherical f ("6D 7F") for the 6-31G family, which
        PySCF cannot mix; measured here for B3LYPG/6-31G(2df,p) against QM9: methane
        U0 - ZPVE +0.36 kcal/mol spherical, -1.17 Cartesian; free O atom +2.5
        spherical, +0.35 Cartesian (C +1.14 / -0.57, N +0.62 spherical, H equal).
    optimize : bool
        Move each molecule to its GFN2-xTB minimum first (:func:`xtb_optimised`) and compute
        the energy there; the name then reads 'METHOD//GFN2-xTB' (energy//geometry).
    """

    kind: str = "xtb"
    functional: str = "B3LYPG"
    basis: str = "6-31G(2df,p)"
    grid_level: int = 3
    max_cycles: int = 100
    convergence: float = 1e-9
    cartesian: bool = False
    optimize: bool = False

    def __post_init__(self):
        if self.kind not in KINDS:
            raise LabelError(f"unknown method {self.kind!r}; choose one of: {', '.join(KINDS)}")
        if self.max_cycles < 1 or not self.convergence > 0:
            raise LabelError("max_cycles must be at least 1 and convergence positive")

    @property
    def name(self) -> str:
        """A short label, e.g. 'DFT B3LYPG/6-31G(2df,p)', 'HF/STO-3G', 'GFN2-xTB', 'HF/STO-3G//GFN2-xTB'."""
        return self._energy_name + ("//GFN2-xTB" if self.optimize else "")

    @property
    def _energy_name(self) -> str:
        if self.kind == "xtb":
            return "GFN2-xTB"
        basis = f"{self.basis}{' (Cartesian)' if self.cartesian else ''}"
        if self.kind == "hf":
            return f"HF/{basis}"
        return f"DFT {self.functional}/{basis}"

    def settings(self) -> dict:
        return asdict(self)


def computed_state(atoms: Atoms) -> tuple[int, int]:
    """(charge, multiplicity) the molecule is computed at; a LabelFailure when they cannot be."""
    try:
        return electronic_state(atoms)
    except MoleculeError as error:
        raise LabelFailure(str(error)) from None


#: A GFN2-xTB optimisation has converged when no atom feels more than this force, eV/Angstrom,
#: within this many BFGS steps (common practice, no source: xtb's own default level stops near
#: 0.05 eV/Angstrom).
XTB_MAX_FORCE = 0.02
XTB_MAX_STEPS = 500


def xtb_optimised(atoms: Atoms) -> Atoms:
    """A copy of the molecule at its GFN2-xTB minimum (tblite through ASE's BFGS) at its charge and
    multiplicity; ``info['geometry_source']`` says so. Raises LabelFailure when it does not converge."""
    from ase.optimize import BFGS
    from tblite.ase import TBLite

    charge, multiplicity = computed_state(atoms)
    moved = atoms.copy()
    moved.calc = TBLite(method="GFN2-xTB", charge=charge, multiplicity=multiplicity, verbosity=0)
    try:
        converged = BFGS(moved, logfile=None).run(fmax=XTB_MAX_FORCE, steps=XTB_MAX_STEPS)
    except Exception as error:  # tblite raises its own error types for no convergence and bad input
        raise LabelFailure(f"GFN2-xTB optimisation failed: {type(error).__name__}: {error}") from None
    if not converged:
        raise LabelFailure(f"GFN2-xTB optimisation did not reach {XTB_MAX_FORCE} eV/Angstrom in {XTB_MAX_STEPS} steps")
    moved.calc = None
    moved.info["geometry_source"] = f"GFN2-xTB optimised from {atoms.info.get('geometry_source', 'file')}"
    return moved


def _pyscf_molecule(numbers, positions_angstrom, method: LabelMethod, spin: int, charge: int = 0):
    from pyscf import gto

    symbols = [chemical_symbols[z] for z in numbers]
    try:
        return gto.M(atom=list(zip(symbols, map(tuple, positions_angstrom))), basis=method.basis, unit="Angstrom",
                     charge=charge, spin=spin, cart=method.cartesian, verbose=0)
    except Exception as error:  # PySCF reports missing basis functions with several exception types
        raise LabelFailure(f"PySCF cannot build the basis {method.basis!r} for {' '.join(sorted(set(symbols)))}: "
                           f"{type(error).__name__}: {error}") from None


def _pyscf_energy(numbers, positions_angstrom, method: LabelMethod, spin: int, charge: int = 0) -> float:
    """Total energy, Hartree; restricted for closed shells, unrestricted otherwise (``spin`` = 2S)."""
    from pyscf import dft, scf

    molecule = _pyscf_molecule(numbers, positions_angstrom, method, spin, charge)
    open_shell = spin > 0
    if method.kind == "hf":
        solver = scf.UHF(molecule) if open_shell else scf.RHF(molecule)
    else:
        solver = dft.UKS(molecule) if open_shell else dft.RKS(molecule)
        solver.xc = method.functional
        solver.grids.level = method.grid_level
    solver.max_cycle = method.max_cycles
    solver.conv_tol = method.convergence
    try:
        energy = solver.kernel()
    except Exception as error:
        raise LabelFailure(f"PySCF failed: {type(error).__name__}: {error}") from None
    if not solver.converged:
        raise LabelFailure(f"SCF did not converge in {method.max_cycles} cycles ({method.name})")
    return float(energy)


def _xtb_energy(numbers, positions_angstrom, unpaired: int, charge: int = 0) -> float:
    """GFN2-xTB total energy, Hartree (tblite takes Bohr)."""
    from tblite.interface import Calculator

    too_heavy = sorted({chemical_symbols[z] for z in numbers if z > XTB_MAX_Z})
    if too_heavy:
        raise LabelFailure(f"unsupported element for GFN2-xTB (Z 1-{XTB_MAX_Z}): {', '.join(too_heavy)}")
    positions_bohr = np.asarray(positions_angstrom, float) / LENGTH_UNITS["Bohr"]
    try:
        calculator = Calculator("GFN2-xTB", np.asarray(numbers), positions_bohr, charge=float(charge), uhf=unpaired)
        calculator.set("verbosity", 0)
        return float(calculator.singlepoint().get("energy"))
    except Exception as error:  # tblite raises its own error types for no convergence and bad input
        raise LabelFailure(f"tblite failed: {type(error).__name__}: {error}") from None


def total_energy_hartree(atoms: Atoms, method: LabelMethod) -> float:
    """Total electronic energy at the molecule's charge and multiplicity, Hartree (no zero-point energy)."""
    charge, multiplicity = computed_state(atoms)
    if method.kind == "xtb":
        return _xtb_energy(atoms.numbers, atoms.positions, multiplicity - 1, charge)
    return _pyscf_energy(atoms.numbers, atoms.positions, method, multiplicity - 1, charge)


@lru_cache(maxsize=None)
def atom_energy_hartree(symbol: str, method: LabelMethod) -> float:
    """Energy of the free atom in its ground-state multiplicity, unrestricted, Hartree (cached per process)."""
    if symbol not in ATOM_MULTIPLICITY:
        raise LabelFailure(f"no ground-state multiplicity known for element {symbol}; atomization energy not computed")
    unpaired = ATOM_MULTIPLICITY[symbol] - 1
    numbers, origin = [chemical_symbols.index(symbol)], np.zeros((1, 3))
    if method.kind == "xtb":
        return _xtb_energy(numbers, origin, unpaired)
    return _pyscf_energy(numbers, origin, method, unpaired)


def atomization_energy_ev(atoms: Atoms, total_hartree: float, method: LabelMethod) -> float:
    """Sum of free-atom energies minus the molecule's, eV (positive for a bound molecule); refused for ions."""
    charge, _ = computed_state(atoms)
    if charge:
        raise LabelFailure(f"no atomization energy for an ion (charge {charge:+d}): free neutral atoms do not add "
                           "up to it; the total energy is given")
    atoms_hartree = sum(atom_energy_hartree(symbol, method) for symbol in atoms.get_chemical_symbols())
    return (atoms_hartree - total_hartree) * ENERGY_UNITS["Hartree"]
