"""The local Dask cluster's workers must not run with glibc's malloc trimming switched on.

Dask's default worker environment sets MALLOC_TRIM_THRESHOLD_; any such setting freezes
glibc's mmap threshold (glibc mallopt(3) manual page, M_MMAP_THRESHOLD: "setting any of
M_TRIM_THRESHOLD, M_TOP_PAD, M_MMAP_THRESHOLD or M_MMAP_MAX disables the dynamic
adjustment"), which made our numpy-heavy chunks 1.9x slower than in local processes.
"""

import os

import pytest

pytest.importorskip("distributed")

from molinv.cluster.dask_cluster import open_cluster  # noqa: E402


def test_local_cluster_workers_keep_dynamic_malloc_thresholds(monkeypatch):
    monkeypatch.delenv("OMP_NUM_THREADS", raising=False)
    with open_cluster("local", n_workers=1) as cluster:
        seen = cluster.client.run(os.environ.get, "MALLOC_TRIM_THRESHOLD_")
        threads = cluster.client.run(os.environ.get, "OMP_NUM_THREADS")
    assert list(seen.values()) == [None]
    # Dask's other worker settings (one BLAS thread per worker) stay in place.
    assert list(threads.values()) == ["1"]
