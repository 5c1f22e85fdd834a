"""The on-disk descriptor store: computed once, resumed after interruption, same values as transform."""

import numpy as np
import pytest

from molinv.descriptors.base import MoleculeDescriptor
from molinv.descriptors.store import FeatureStore, molecule_key


class CountingDistances(MoleculeDescriptor):
    """Sorted interatomic distances, padded; counts the molecules it describes."""

    described = {"n": 0, "fail_after": None}

    def __init__(self, length=10, per_atom_output=False, elements=None, n_jobs=1, chunk_size=100, progress=False):
        self.length = length
        self.per_atom_output = per_atom_output
        self.elements = elements
        self.n_jobs = n_jobs
        self.chunk_size = chunk_size
        self.progress = progress

    @property
    def per_atom(self):
        return self.per_atom_output

    def _describe_one(self, atoms):
        state = CountingDistances.described
        if state["fail_after"] is not None and state["n"] >= state["fail_after"]:
            raise KeyboardInterrupt
        state["n"] += 1
        distances = np.sort(atoms.get_all_distances().ravel())[::-1]
        if self.per_atom_output:
            return np.sort(atoms.get_all_distances(), axis=1)[:, -3:]
        return np.pad(distances[: self.length], (0, max(0, self.length - len(distances))))


@pytest.fixture(autouse=True)
def reset_counter():
    CountingDistances.described.update(n=0, fail_after=None)


@pytest.mark.parametrize("per_atom", [False, True])
def test_second_call_computes_nothing_and_matches_transform(tmp_path, qm9_sample, per_atom):
    descriptor = CountingDistances(per_atom_output=per_atom).fit(qm9_sample)
    direct = descriptor.transform(qm9_sample)
    CountingDistances.described["n"] = 0
    store = FeatureStore(tmp_path)
    first = store.describe(descriptor, qm9_sample, chunk_size=20)
    assert CountingDistances.described["n"] == len(qm9_sample)
    second = FeatureStore(tmp_path).describe(descriptor, qm9_sample[::-1], chunk_size=20)
    assert CountingDistances.described["n"] == len(qm9_sample)  # nothing recomputed
    if per_atom:
        np.testing.assert_array_equal(first.values, direct.values)
        np.testing.assert_array_equal(second.values, direct[np.arange(len(qm9_sample))[::-1]].values)
    else:
        np.testing.assert_array_equal(first, direct)
        np.testing.assert_array_equal(second, direct[::-1])


def test_other_settings_get_their_own_folder(tmp_path, qm9_sample):
    store = FeatureStore(tmp_path)
    store.describe(CountingDistances(length=5).fit(qm9_sample), qm9_sample)
    store.describe(CountingDistances(length=8).fit(qm9_sample), qm9_sample)
    assert len(list(tmp_path.iterdir())) == 2
    assert CountingDistances.described["n"] == 2 * len(qm9_sample)


def test_interrupted_describe_keeps_finished_chunks(tmp_path, qm9_sample):
    descriptor = CountingDistances().fit(qm9_sample)
    CountingDistances.described["fail_after"] = 25
    with pytest.raises(KeyboardInterrupt):
        FeatureStore(tmp_path).describe(descriptor, qm9_sample, chunk_size=10)
    CountingDistances.described.update(n=0, fail_after=None)
    values = FeatureStore(tmp_path).describe(descriptor, qm9_sample, chunk_size=10)
    assert CountingDistances.described["n"] == len(qm9_sample) - 20  # two chunks of 10 were kept
    np.testing.assert_array_equal(values, descriptor.transform(qm9_sample))


def test_key_changes_with_any_coordinate(qm9_sample):
    moved = qm9_sample[0].copy()
    moved.positions[0, 0] += 1e-12
    assert molecule_key(moved) != molecule_key(qm9_sample[0])
