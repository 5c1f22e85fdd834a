"""Delta-learning beats direct learning at the same training size on a small QM9 sample.

Target: QM9 atomization energy from U0, B3LYP/6-31G(2df,p) (Ramakrishnan et al., Sci. Data 1,
140022, 2014). Cheap method: GFN2-xTB through tblite. Method: Ramakrishnan, Dral, Rupp,
von Lilienfeld, J. Chem. Theory Comput. 11, 2087 (2015).
"""

import numpy as np
import pytest

from molinv.labels import LabelError, LabelMethod, label_chunk
from molinv.labels.delta import DeltaModel
from molinv.molecules.units import convert_energy
from molinv.recipes import EnergyModel, make_descriptor, make_regressor

pytest.importorskip("tblite")


@pytest.fixture(scope="module")
def sample(qm9):
    molecules = qm9.molecules(qm9.sample(200, seed=11, elements=["H", "C", "N", "O"]))
    for atoms, row in zip(molecules, label_chunk(molecules, LabelMethod("xtb"))):
        atoms.info["xtb_atomization_energy"] = row["atomization_energy_eV"]
    return molecules


def bonds_model(molecules):
    # Bag sizes from all molecules (no labels used), so that every test molecule fits the padding.
    bag_sizes = make_descriptor("bonds").fit(molecules).bag_sizes_
    return EnergyModel(make_descriptor("bonds", bag_sizes=bag_sizes), make_regressor("kernel", per_atom=False))


def test_delta_learning_beats_direct_learning_at_the_same_training_size(sample):
    train, test = sample[:120], sample[120:]
    target = np.array([m.info["atomization_energy"] for m in sample])
    direct = bonds_model(sample).fit(train, target[:120])
    delta = DeltaModel(bonds_model(sample), cheap_key="xtb_atomization_energy").fit(train, target[:120])
    direct_mae = convert_energy(np.mean(np.abs(direct.predict(test) - target[120:])), "eV", "kcal/mol")
    delta_mae = convert_energy(np.mean(np.abs(delta.predict(test) - target[120:])), "eV", "kcal/mol")
    # Measured (120 training, 80 test molecules): direct 13.1 kcal/mol, Delta 4.9 kcal/mol.
    assert delta_mae < 0.7 * direct_mae, (direct_mae, delta_mae)
    predicted, std = delta.predict(test, return_std=True)
    assert np.allclose(predicted, delta.predict(test)) and np.all(std > 0)


def test_a_molecule_without_its_cheap_energy_is_named(sample):
    model = DeltaModel(bonds_model(sample)).fit(sample[:30], [m.info["atomization_energy"] for m in sample[:30]])
    missing = sample[40].copy()
    del missing.info["xtb_atomization_energy"]
    with pytest.raises(LabelError, match=f"{missing.info['name']}.*no finite cheap energy"):
        model.predict([sample[41], missing])
