"""The domain distance on the scale of its threshold, for every global descriptor and the atom-centred one.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Ethanol, dimethyl ether,
acetamide and formamide are QM9 molecules; a 'bonds' model once put them 1e12 times
beyond its threshold.
"""

import numpy as np
import pytest

from molinv.models.kernel_ridge import fit_scaling
from molinv.molecules import embed_smiles
from molinv.recipes import EnergyModel, make_descriptor, make_regressor, model_inputs
from molinv.screening.applicability import ApplicabilityCheck
from molinv.screening.table import describable

SMALL_QM9_MOLECULES = ["CCO", "COC", "CC(N)=O", "NC=O"]


@pytest.fixture(scope="module")
def split(qm9):
    molecules = qm9.molecules(qm9.sample(600, seed=11, elements=["H", "C", "N", "O"]))
    return molecules[:300], molecules[300:]


def test_rounding_level_spread_counts_as_constant():
    # The first entry of the carbon bag of bonds, 0.5 * 6**2.4 Hartree, in every molecule.
    column = np.full(700, 0.5 * 6**2.4)
    assert column.std() > 0  # rounding, not variation
    mean, scale = fit_scaling(np.column_stack([column, np.arange(700.0)]), scale=True)
    assert scale[0] == 1.0 and scale[1] == pytest.approx(np.arange(700.0).std())


def test_bonds_kernel_model_keeps_small_qm9_molecules_near_the_threshold(split, tmp_path):
    train, _ = split
    energies = [m.info["atomization_energy"] for m in train]
    model = EnergyModel(make_descriptor("bonds"), make_regressor("kernel", False, descriptor="bonds")).fit(train, energies)
    small = [embed_smiles(s) for s in SMALL_QM9_MOLECULES]
    ratios = model.assess(small)["distance"] / model.applicability_.threshold_
    # Within a few thresholds: the training sample holds no molecule this small (1e12 before).
    assert np.all(ratios < 3), ratios
    loaded, _ = EnergyModel.load(model.save(tmp_path / "model.npz"))
    assert np.allclose(loaded.assess(small)["distance"], model.assess(small)["distance"])


@pytest.mark.parametrize("name", ["bonds", "counts", "coulomb", "coulomb-sorted", "atoms"])
@pytest.mark.parametrize("scale", [False, True])
def test_held_out_molecules_are_flagged_near_the_quantile_rate(split, name, scale):
    train, test = split
    descriptor = make_descriptor(name).fit(train)
    check = ApplicabilityCheck(scale=scale).fit(model_inputs(descriptor, train))
    test = [m for m in test if not describable(descriptor, m)]
    ratios = check.distances(model_inputs(descriptor, test)) / check.threshold_
    # The threshold is the training set's own 99% quantile of nearest-neighbour distances, so about 1% of
    # molecules from the same distribution lie beyond it: 3 of 300 expected, 9 allowed for sampling.
    assert np.mean(ratios > 1) <= 0.03
    assert 0.4 < np.quantile(ratios, 0.99) < 2.0
    small = [m for m in (embed_smiles(s) for s in SMALL_QM9_MOLECULES) if not describable(descriptor, m)]
    assert np.all(check.distances(model_inputs(descriptor, small)) / check.threshold_ < 3)


def test_an_atom_kernel_model_file_keeps_the_training_atoms_once(qm9, tmp_path):
    train = qm9.molecules(qm9.sample(60, seed=3, elements=["H", "C", "N", "O"]))
    model = EnergyModel(make_descriptor("atoms"), make_regressor("kernel", True)).fit(
        train, [m.info["atomization_energy"] for m in train])
    path = model.save(tmp_path / "model.npz")
    stored = np.load(path)
    assert not [name for name in stored.files if "references_" in name and "rows" not in name]
    vectors = stored["array.train_values_"].nbytes
    assert path.stat().st_size < 1.2 * vectors  # the atom vectors once (they were stored twice)
    loaded, _ = EnergyModel.load(path)
    test = qm9.molecules(qm9.sample(20, seed=4, elements=["H", "C", "N", "O"]))
    before, after = model.assess(test), loaded.assess(test)
    np.testing.assert_array_equal(after["distance"], before["distance"])
    np.testing.assert_array_equal(after["predicted"], before["predicted"])
    np.testing.assert_array_equal(after["std"], before["std"])
