"""Kernel widths in units of the median training distance (width_unit='median').

Reference: scipy.spatial.distance.pdist for the median over all pairs; the data are QM9
Coulomb-matrix eigenvalues (Ramakrishnan et al., Sci. Data 1, 140022, 2014).
"""

import numpy as np
import pytest
from scipy.spatial.distance import pdist

from molinv.models import KernelRidgeCV
from molinv.recipes import make_descriptor, model_inputs


@pytest.fixture(scope="module")
def coulomb(qm9):
    molecules = qm9.molecules(qm9.sample(300, seed=41))
    X = model_inputs(make_descriptor("coulomb").fit(molecules), molecules)
    return X, np.array([m.info["atomization_energy"] for m in molecules])


@pytest.mark.parametrize(("kernel", "metric"), [("laplacian", "cityblock"), ("gaussian", "euclidean")])
def test_median_unit_matches_scipy_and_absolute_grid(coulomb, kernel, metric):
    X, y = coulomb
    relative = KernelRidgeCV(kernel=kernel, widths=(0.5, 1.0, 2.0), regularizations=(1e-6, 1e-3), width_unit="median")
    relative.fit(X, y)
    exact_median = np.median(pdist(X.values, metric=metric))
    # 20,000 random pairs estimate the median of all 44,850 pairs to a few per cent.
    assert relative.width_unit_value_ == pytest.approx(exact_median, rel=0.05)
    absolute = KernelRidgeCV(kernel=kernel, widths=tuple(np.array([0.5, 1.0, 2.0]) * relative.width_unit_value_),
                             regularizations=(1e-6, 1e-3)).fit(X, y)
    assert absolute.width_ == pytest.approx(relative.width_, rel=1e-12)
    np.testing.assert_allclose(absolute.predict(X), relative.predict(X), rtol=1e-10)
