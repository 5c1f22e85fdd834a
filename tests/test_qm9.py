"""QM9 read from the qm9pack wheel, checked against the facts of the data paper.

Ramakrishnan, Dral, Rupp, von Lilienfeld, "Quantum chemistry structures and properties
of 134 kilo molecules", Sci. Data 1, 140022 (2014).
"""

import subprocess
import sys

import numpy as np
import pytest
from ase import units as ase_units

from molinv.molecules.qm9 import atomization_energies
from molinv.molecules.units import convert_energy


def test_counts_elements_and_sizes_match_the_paper(qm9):
    # 133,885 molecules, of which 3,054 failed the consistency check: 130,831 remain (paper, Methods).
    assert len(qm9) == 133_885 - 3_054
    assert set(np.unique(qm9.arrays["numbers"])) == {1, 6, 7, 8, 9}  # H, C, N, O, F
    assert qm9.heavy_atom_counts().max() == 9  # "up to nine heavy atoms"
    assert qm9.n_atoms.max() == 29  # "up to 29 atoms" (C9H20)
    assert len(np.unique(qm9.arrays["index"])) == len(qm9)


def test_enthalpy_minus_internal_energy_is_rt(qm9):
    # Ideal gas: H = U + pV = U + k_B T at T = 298.15 K (any physical chemistry text);
    # QM9's H and U are given to 1e-6 Hartree.
    difference = qm9.arrays["H"] - qm9.arrays["U"]
    kt = ase_units.kB * 298.15
    assert np.abs(difference - kt).max() < convert_energy(2e-6, "Hartree", "eV")


def test_atomization_energies_near_experiment(qm9):
    # Experimental atomization energies at 0 K, D0, kcal/mol, from the G2 test set
    # (Curtiss, Raghavachari, Trucks, Pople, J. Chem. Phys. 94, 7221, 1991; values from memory).
    # B3LYP deviates from these by a few kcal/mol; a wrong atomic reference energy or
    # unit would be off by tens to thousands.
    experiment = {1: 392.5, 2: 276.7, 3: 219.3}  # QM9 index: CH4, NH3, H2O
    positions = [int(np.flatnonzero(qm9.arrays["index"] == i)[0]) for i in experiment]
    computed = convert_energy(qm9.atomization_energy()[positions], "eV", "kcal/mol")
    for value, reference in zip(computed, experiment.values()):
        assert value == pytest.approx(reference, abs=8.0)
    assert (qm9.atomization_energy() > 0).all()


def test_atomization_energy_of_one_molecule_by_hand():
    # Methane from the QM9 record dsgdb9nsd_000001: U0 = -40.47893 Hartree.
    numbers, offsets = np.array([6, 1, 1, 1, 1]), np.array([0, 5])
    computed = atomization_energies(numbers, offsets, np.array([convert_energy(-40.47893, "Hartree", "eV")]))
    by_hand = -37.846772 + 4 * -0.500273 - -40.47893  # atomic references of the QM9 atomref table
    assert computed[0] == pytest.approx(convert_energy(by_hand, "Hartree", "eV"), rel=1e-12)


def test_molecules_carry_geometry_and_properties(qm9):
    (methane,) = qm9.molecules(np.flatnonzero(qm9.arrays["index"] == 1))
    assert methane.get_chemical_formula() == "CH4"
    assert methane.info["smiles"] == "C"
    assert methane.info["U0"] == pytest.approx(convert_energy(-40.47893, "Hartree", "eV"))
    assert methane.info["ZPVE"] == pytest.approx(convert_energy(0.044749, "Hartree", "eV"))
    # C-H bond of methane 1.087 Angstrom (CRC Handbook, from memory); B3LYP gives 1.09.
    assert methane.get_distance(0, 1) == pytest.approx(1.09, abs=0.01)
    assert len(methane.info["frequencies"]) == 3 * 5 - 6


def test_subsets_and_reproducible_samples(qm9):
    small = qm9.select(max_heavy_atoms=3)
    assert (qm9.heavy_atom_counts()[small] <= 3).all() and len(small) < 100
    no_fluorine = qm9.select(elements=["H", "C", "N", "O"])
    assert (qm9.element_counts()["F"][no_fluorine] == 0).all()
    assert len(no_fluorine) < len(qm9)
    first, again, other = qm9.sample(100, seed=3), qm9.sample(100, seed=3), qm9.sample(100, seed=4)
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)
    with pytest.raises(ValueError, match="H, C, N, O, F only"):
        qm9.select(elements=["C", "S"])


def test_cached_load_reads_no_csv_and_never_imports_qm9pack(qm9, tmp_path):
    # The cache was written by the fixture's first load; a new process must use it.
    script = (
        "import sys, pandas\n"
        "pandas.read_csv = lambda *a, **k: (_ for _ in ()).throw(AssertionError('CSV read'))\n"
        "from molinv.molecules.qm9 import open_qm9\n"
        "data = open_qm9()\n"
        "assert len(data) == 130831\n"
        "assert 'qm9pack' not in sys.modules\n"
        "print('ok')\n"
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"
