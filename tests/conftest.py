"""Shared fixtures: QM9 from the qm9pack wheel (Ramakrishnan et al., Sci. Data 1, 140022, 2014)."""

import pytest
from threadpoolctl import threadpool_limits


@pytest.fixture(autouse=True, scope="session")
def one_blas_thread():
    """Run BLAS on one thread: on a shared 2-core machine OpenBLAS threads contend with other
    jobs, and a 560 x 560 Cholesky factorisation went from 3 ms to 0.7 s (measured)."""
    with threadpool_limits(limits=1, user_api="blas"):
        yield


@pytest.fixture(scope="session")
def qm9():
    from molinv.molecules.qm9 import open_qm9

    return open_qm9()


@pytest.fixture(scope="session")
def qm9_sample(qm9):
    """50 QM9 molecules, fixed seed."""
    return qm9.molecules(qm9.sample(50, seed=7))


@pytest.fixture(scope="session")
def counts_model_file(tmp_path_factory):
    """A model file fitted fast: element counts and the default model on 150 QM9 molecules."""
    from molinv.cli import main

    path = tmp_path_factory.mktemp("model") / "model.npz"
    assert main(["fit", "qm9:150:4", "--descriptor", "counts", "--out", str(path)]) == 0
    return path


@pytest.fixture(scope="module")
def client():
    """A Dask LocalCluster of 2 single-threaded worker processes, and its client."""
    distributed = pytest.importorskip("dask.distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0")
    with distributed.Client(cluster) as client:
        yield client
    cluster.close()
