"""Unit conversions against CODATA and the thermochemical calorie."""

import numpy as np
import pytest

from molinv.molecules.units import UnitError, convert_energy, convert_length, energy_unit

# CODATA 2018 recommended values (Tiesinga, Mohr, Newell, Taylor, Rev. Mod. Phys. 93, 025010, 2021):
HARTREE_IN_EV = 27.211386245988
BOHR_IN_ANGSTROM = 0.529177210903
AVOGADRO = 6.02214076e23
ELEMENTARY_CHARGE = 1.602176634e-19  # C, exact since 2019
# Thermochemical calorie: exactly 4.184 J (NIST SP 811, 2008, appendix B.8).
CALORIE_IN_J = 4.184
EV_IN_KJ_PER_MOL = ELEMENTARY_CHARGE * AVOGADRO / 1000.0

# ase.units uses CODATA 2014; the two sets differ by < 1e-8 relative for these constants.
CODATA_SET_DIFFERENCE = 1e-8


def test_hartree_to_ev_matches_codata():
    assert convert_energy(1.0, "Hartree", "eV") == pytest.approx(HARTREE_IN_EV, rel=CODATA_SET_DIFFERENCE)


def test_bohr_to_angstrom_matches_codata():
    assert convert_length(1.0, "Bohr", "Angstrom") == pytest.approx(BOHR_IN_ANGSTROM, rel=CODATA_SET_DIFFERENCE)


def test_ev_to_molar_units_match_codata():
    assert convert_energy(1.0, "eV", "kJ/mol") == pytest.approx(EV_IN_KJ_PER_MOL, rel=CODATA_SET_DIFFERENCE)
    assert convert_energy(1.0, "eV", "kcal/mol") == pytest.approx(EV_IN_KJ_PER_MOL / CALORIE_IN_J, rel=CODATA_SET_DIFFERENCE)
    assert convert_energy(1.0, "kcal/mol", "kJ/mol") == pytest.approx(CALORIE_IN_J, rel=1e-12)


def test_hartree_to_kcal_per_mol_handbook_value():
    # 1 Hartree = 627.509 kcal/mol (CODATA 2018 via the constants above; the handbook figure).
    assert convert_energy(1.0, "Hartree", "kcal/mol") == pytest.approx(627.5095, abs=1e-3)


def test_arrays_round_trip_and_aliases():
    values = np.array([-40.47893, -56.525887])
    back = convert_energy(convert_energy(values, "hartree", "kJ/mol"), "kj/mol", "Ha")
    np.testing.assert_allclose(back, values, rtol=1e-14)
    assert energy_unit("kcal_mol") == "kcal/mol"


def test_unknown_unit_is_refused_with_the_choices():
    with pytest.raises(UnitError, match="unknown energy unit 'calories'.*Hartree"):
        convert_energy(1.0, "calories", "eV")
