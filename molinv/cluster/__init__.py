"""Work split into chunks that survive interruption, run here, in local processes or on Dask.

:func:`~molinv.cluster.chunks.run_chunks` is the engine; screening, predicting and
describing use it, and any other per-molecule job can: write a module-level
function ``task(chunk, shared) -> DataFrame or dict of arrays`` over a
:class:`~molinv.molecules.packed.MoleculeChunk`. Dask is imported only by
:func:`executor_for` when a cluster is asked for.
"""

from __future__ import annotations

from .chunks import ChunkReport, InProcess, LocalProcesses, finished_chunks, read_arrays, read_tables, run_chunks


def executor_for(cluster: str | None = None, n_jobs: int = 1):
    """The executor for a ``--cluster`` value: None runs locally (``n_jobs`` processes,
    1: this process); otherwise see :func:`molinv.cluster.dask_cluster.open_cluster`."""
    if cluster:
        from .dask_cluster import open_cluster

        return open_cluster(cluster, n_workers=None if n_jobs in (1, -1) else n_jobs)
    return InProcess() if n_jobs == 1 else LocalProcesses(n_jobs)


__all__ = ["ChunkReport", "InProcess", "LocalProcesses", "executor_for", "finished_chunks", "read_arrays",
           "read_tables", "run_chunks"]
