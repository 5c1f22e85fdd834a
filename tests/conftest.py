"""Shared fixtures: QM9 from the qm9pack wheel (Ramakrishnan et al., Sci. Data 1, 140022, 2014)."""

import pytest


@pytest.fixture(scope="session")
def qm9():
    from molinv.molecules.qm9 import open_qm9

    return open_qm9()


@pytest.fixture(scope="session")
def qm9_sample(qm9):
    """50 QM9 molecules, fixed seed."""
    return qm9.molecules(qm9.sample(50, seed=7))
