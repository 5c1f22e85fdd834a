"""Choosing the next batch, and the resumable pick loop on QM9 with hidden labels.

Data: QM9 (Ramakrishnan et al., Sci. Data 1, 140022, 2014). Farthest-point selection
checked against its definition with distances from scipy.spatial.distance.cdist.
"""

import json

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import cdist

from molinv.evaluation import curves
from molinv.labels import LabelError
from molinv.labels.choose import (
    choose_next,
    model_variance_batch,
    molecule_vectors,
    pick_batch,
    spread_batch,
    variance_batch,
)
from molinv.labels.loop import HiddenLabels, PickLoop
from molinv.models.kernel_ridge import fixed_hyperparameters
from molinv.recipes import EnergyModel, make_descriptor, make_regressor, model_inputs


def clusters(n_clusters=8, copies=3, seed=0):
    """Tight clusters of near-copies; the two most uncertain clusters hold the six largest std."""
    rng = np.random.default_rng(seed)
    centres = rng.normal(size=(n_clusters, 5)) * 10
    vectors = np.repeat(centres, copies, axis=0) + rng.normal(scale=1e-3, size=(n_clusters * copies, 5))
    std = np.repeat(np.linspace(2.0, 1.0, n_clusters), copies) + rng.uniform(0, 1e-3, n_clusters * copies)
    return std, vectors, np.repeat(np.arange(n_clusters), copies)


def test_a_batch_holds_no_near_copies_where_plain_uncertainty_would():
    std, vectors, cluster = clusters()
    spread = pick_batch(std, vectors, k=4, shortlist_factor=4)
    plain = pick_batch(std, vectors, k=4, shortlist_factor=1)
    assert len(set(cluster[spread])) == 4
    assert len(set(cluster[plain])) == 2  # the four largest std: near-copies from two clusters
    assert spread[0] == np.argmax(std)


def test_each_pick_is_the_farthest_shortlisted_candidate():
    rng = np.random.default_rng(3)
    std, vectors = rng.uniform(size=60), rng.normal(size=(60, 4))
    labelled = rng.normal(size=(5, 4))
    picked = pick_batch(std, vectors, k=6, shortlist_factor=3, labelled_vectors=labelled)
    shortlist = np.argsort(-std)[:18]
    assert set(picked) <= set(shortlist) and len(set(picked)) == 6
    for step in range(1, 6):
        centres = np.vstack([labelled, vectors[picked[:step]]])
        nearest = cdist(vectors[shortlist], centres).min(axis=1)
        remaining = [i for i, s in enumerate(shortlist) if s not in picked[:step]]
        best = max(nearest[i] for i in remaining)
        assert nearest[list(shortlist).index(picked[step])] == pytest.approx(best)


def test_spread_picks_are_the_farthest_points_in_standardised_space():
    rng = np.random.default_rng(4)
    # Entries on very different scales: unscaled distances would follow the last column only.
    vectors = rng.normal(size=(50, 3)) * np.array([1.0, 1.0, 1000.0])
    labelled = rng.normal(size=(4, 3)) * np.array([1.0, 1.0, 1000.0])
    picked = spread_batch(vectors, k=7, labelled_vectors=labelled)
    scaled = (vectors - vectors.mean(0)) / vectors.std(0)
    scaled_labelled = (labelled - vectors.mean(0)) / vectors.std(0)
    assert len(set(picked)) == 7
    for step in range(7):
        centres = np.vstack([scaled_labelled, scaled[picked[:step]]])
        nearest = cdist(scaled, centres).min(axis=1)
        nearest[picked[:step]] = -1.0
        assert picked[step] == np.argmax(nearest)
    alone = spread_batch(vectors, k=3)
    assert alone[0] == np.argmin(np.linalg.norm(scaled, axis=1))  # no labelled set: start at the centre


def gaussian_kernel(points, width=1.5):
    return np.exp(-cdist(points, points, "sqeuclidean") / (2 * width**2))


def test_each_variance_pick_lowers_the_summed_variance_most():
    rng = np.random.default_rng(5)
    points = np.vstack([rng.normal(size=(40, 2)), rng.normal(size=(15, 2)) + 6.0])
    full = gaussian_kernel(points)
    labelled, candidates, noise = np.arange(3), np.arange(3, len(points)), 1e-3
    reference = candidates[::2]
    factor = np.linalg.cholesky(full[np.ix_(labelled, labelled)] + noise * np.eye(3))
    known = np.linalg.solve(factor, full[np.ix_(labelled, candidates)])
    kernel = lambda rows, columns: full[np.ix_(candidates[rows], candidates[columns])]  # noqa: E731
    picked = variance_batch(kernel, np.ones(len(candidates)), known, 6, noise, reference - 3)
    assert len(set(picked)) == 6
    for step in range(6):
        # Predictive covariance after labelling the labelled set and the earlier picks, by direct solve.
        given = np.concatenate([labelled, candidates[picked[:step]]])
        system = full[np.ix_(given, given)] + noise * np.eye(len(given))
        covariance = full - full[:, given] @ np.linalg.solve(system, full[given])
        summed = [np.sum(covariance[reference, c] ** 2) / (covariance[c, c] + noise)
                  if i not in picked[:step] else -np.inf for i, c in enumerate(candidates)]
        assert picked[step] == int(np.argmax(summed))


def test_variance_picks_favour_the_populated_region_where_the_largest_variance_picks_an_outlier():
    rng = np.random.default_rng(6)
    crowd = rng.normal(scale=0.5, size=(60, 2))
    points = np.vstack([crowd, [[8.0, 8.0]]])  # one far outlier
    full = gaussian_kernel(points, width=1.0)
    kernel = lambda rows, columns: full[np.ix_(rows, columns)]  # noqa: E731
    picked = variance_batch(kernel, np.ones(61), np.zeros((0, 61)), 3, 1e-3, np.arange(61))
    assert 60 not in picked
    assert pick_batch(np.ones(61) + np.eye(61)[60], points, 1)[0] == 60  # the largest std is the outlier


def test_bad_requests_are_refused():
    std, vectors, _ = clusters()
    with pytest.raises(LabelError, match="cannot pick 30 of 24"):
        pick_batch(std, vectors, k=30)
    with pytest.raises(LabelError, match="no finite standard deviation"):
        pick_batch(np.full(24, np.nan), vectors, k=2)


@pytest.fixture(scope="module")
def pool(qm9):
    molecules = qm9.molecules(qm9.sample(360, seed=23))
    descriptor = make_descriptor("coulomb-sorted").fit(molecules)
    inputs = model_inputs(descriptor, molecules)
    energies = np.array([m.info["atomization_energy"] for m in molecules])
    return molecules, inputs, molecule_vectors(inputs, descriptor.elements_), energies


def make_loop(folder, pool, labeller, sizes, strategy="uncertain", tune_once=False):
    molecules, inputs, vectors, _ = pool
    test, _ = curves.test_split(len(molecules), 100, seed=0)
    return PickLoop(folder, [m.info["name"] for m in molecules], inputs, vectors,
                    make_regressor("kernel", per_atom=False), labeller, test, sizes=sizes, strategy=strategy, seed=5,
                    reference_size=50, tune_once=tune_once)


def test_labels_stay_hidden_until_picked_and_the_curve_is_recorded(tmp_path, pool):
    hidden = HiddenLabels(pool[3])
    rounds = make_loop(tmp_path, pool, hidden, [20, 40, 60]).run(progress=False)
    assert list(rounds["size"]) == [20, 40, 60] and list(rounds["round"]) == [0, 1, 2]
    assert len(hidden.revealed) == 100 + 60
    labels = pd.read_csv(tmp_path / "labels.csv")
    assert labels["position"].is_unique and len(labels) == 160
    assert np.all(rounds["mae"] > 0)


class StopAfter:
    """A labeller interrupted (as by Ctrl-C) on its n-th call."""

    def __init__(self, energies, calls):
        self.hidden, self.calls = HiddenLabels(energies), calls

    def __call__(self, positions):
        self.calls -= 1
        if self.calls == 0:
            raise KeyboardInterrupt
        return self.hidden(positions)


@pytest.mark.parametrize("strategy", ["uncertain", "spread", "variance", "random"])
def test_an_interrupted_or_extended_loop_picks_what_an_uninterrupted_one_picks(tmp_path, pool, strategy):
    make_loop(tmp_path / "whole", pool, HiddenLabels(pool[3]), [20, 40, 60, 80], strategy).run(progress=False)
    with pytest.raises(KeyboardInterrupt):  # test set, round 0, round 1, then stopped labelling round 2
        make_loop(tmp_path / "parts", pool, StopAfter(pool[3], 4), [20, 40, 60], strategy).run(progress=False)
    again = HiddenLabels(pool[3])
    make_loop(tmp_path / "parts", pool, again, [20, 40, 60], strategy).run(progress=False)
    assert len(again.revealed) == 20  # only round 2's batch
    make_loop(tmp_path / "parts", pool, HiddenLabels(pool[3]), [20, 40, 60, 80], strategy).run(progress=False)
    whole, parts = (pd.read_csv(tmp_path / f / "labels.csv") for f in ("whole", "parts"))
    assert whole[["position", "round"]].equals(parts[["position", "round"]])
    whole, parts = (pd.read_csv(tmp_path / f / "rounds.csv") for f in ("whole", "parts"))
    np.testing.assert_allclose(parts["mae"], whole["mae"], rtol=1e-9)
    with pytest.raises(LabelError, match="holds a loop with other molecules or settings"):
        make_loop(tmp_path / "parts", pool, HiddenLabels(pool[3]), [30, 60], strategy)


def test_tuning_once_keeps_the_round_0_choice(tmp_path, pool):
    rounds = make_loop(tmp_path, pool, HiddenLabels(pool[3]), [20, 40, 60], "variance", tune_once=True).run(False)
    chosen = [json.loads(text) for text in rounds["hyperparameters"]]
    assert [c["width"] for c in chosen[1:]] == [chosen[0]["width"]] * 2
    assert [c["regularization"] for c in chosen[1:]] == [chosen[0]["regularization"]] * 2
    searched = make_loop(tmp_path / "searched", pool, HiddenLabels(pool[3]), [20, 40, 60], "variance").run(False)
    assert not np.allclose(searched["mae"][1:], rounds["mae"][1:])  # the search each round does change fits


def test_variance_picks_count_extra_labelled_molecules_as_labelled(pool):
    _, inputs, _, energies = pool
    train, extra, candidates = np.arange(40), np.arange(40, 70), np.arange(70, 200)
    model = make_regressor("kernel", per_atom=False).fit(inputs[train], energies[train])
    picked = model_variance_batch(model, inputs[candidates], 5, 60, 3, labelled_inputs=inputs[extra])
    # The same pick from a model fitted on both: the known factor then comes from one Cholesky.
    both = fixed_hyperparameters(model).fit(inputs[np.concatenate([train, extra])], energies[:70])
    assert both.width_ == model.width_
    np.testing.assert_array_equal(model_variance_batch(both, inputs[candidates], 5, 60, 3), picked)
    alone = model_variance_batch(model, inputs[candidates], 5, 60, 3)
    assert not np.array_equal(alone, picked)


def test_choose_next_skips_candidates_the_model_cannot_describe(qm9):
    train = qm9.molecules(qm9.sample(60, seed=2, elements=["H", "C", "N", "O"]))
    candidates = qm9.molecules(qm9.sample(80, seed=9))
    model = EnergyModel(make_descriptor("atoms"), make_regressor("kernel", per_atom=True))
    model.fit(train, [m.info["atomization_energy"] for m in train])
    choice = choose_next(model, candidates, k=5, labelled=train)
    with_fluorine = [i for i, m in enumerate(candidates) if "F" in m.get_chemical_symbols()]
    assert with_fluorine, "the sample should hold a fluorine compound"
    assert not set(choice["picked"]) & set(with_fluorine) and len(set(choice["picked"])) == 5
    assert all("F" in choice["reason"][i] for i in with_fluorine)
    assert np.isnan(choice["std"][with_fluorine]).all() and np.isfinite(choice["std"][choice["picked"]]).all()
