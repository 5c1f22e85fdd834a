"""Running chunks on a Dask cluster: a scheduler address, a local cluster, or a batch system.

Dask (``dask.distributed``) is imported only here, and only when a cluster is
asked for; the local path never needs it (``pip install 'molinv[cluster]'``).

Where the cluster comes from (:func:`open_cluster`):

``local``
    A ``LocalCluster`` on this machine: one single-threaded worker process per core
    (or ``n_workers``).
``tcp://HOST:PORT`` (or ``HOST:PORT``), ``tls://HOST:PORT``
    A running scheduler, for example one started with ``dask scheduler`` and
    ``dask worker tcp://HOST:PORT`` on each machine. Anyone who reaches a scheduler
    can run code on its workers: a tcp:// scheduler on another machine is warned
    about (:class:`UnsafeClusterWarning`); tls:// takes its certificates from Dask's
    configuration (``distributed.comm.tls``) and is warned about without them.
``jobqueue:KIND[:JOBS]``
    A batch-system cluster from dask-jobqueue (KIND: slurm, pbs, sge, lsf,
    htcondor, moab or oar), with ``JOBS`` batch jobs (default 1) of workers.
    Queue, cores, memory and wall time come from dask-jobqueue's own settings
    (``~/.config/dask/jobqueue.yaml``); see the README for an example.

Chunk files are written by the workers, so the output folder must be on a file
system that every worker sees at the same path (checked before the run starts).
"""

from __future__ import annotations

import ipaddress
import os
import warnings
from itertools import islice
from pathlib import Path
from typing import Callable, Iterable, Iterator

from molinv.errors import MolinvError

#: Dask's setting that makes workers hand freed memory back to the system. Any such glibc
#: setting also freezes glibc's mmap threshold at 128 KiB (mallopt(3)), so every numpy
#: temporary above that size is mapped, page-faulted and unmapped anew: describing 500 QM9
#: molecules with 'atoms' took 10x the page faults and about 1.6x the CPU time with it
#: (benchmarks/bench_worker_malloc.py). Our chunks are bounded, so the memory glibc keeps
#: for reuse is too. None unsets it (Dask's rule for this setting).
MALLOC_TRIM_SETTING = "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_"
JOBQUEUE_KINDS = {"slurm": "SLURMCluster", "pbs": "PBSCluster", "sge": "SGECluster", "lsf": "LSFCluster",
                  "htcondor": "HTCondorCluster", "moab": "MoabCluster", "oar": "OARCluster"}


class ClusterError(MolinvError, RuntimeError):
    """A cluster that cannot be reached or set up, or workers that cannot see the output folder."""


class UnsafeClusterWarning(UserWarning):
    """A scheduler on another machine reached without TLS (whoever reaches it runs code on the workers), or a
    tls:// scheduler with no certificates in Dask's configuration."""


def unsafe_address_reason(address: str) -> str | None:
    """Why connecting to ``address`` exposes the workers or fails to connect (None when it
    does not): a plain tcp:// scheduler on another machine has no encryption and no
    authentication; a tls:// one needs certificates in Dask's configuration."""
    scheme, _, rest = address.partition("://")
    host = rest.rsplit(":", 1)[0].strip("[]")
    if scheme == "tls":
        missing = [setting for setting, value in _tls_client_settings().items() if not value]
        if not missing:
            return None
        return (f"the Dask scheduler {address} is a TLS address but Dask's configuration lacks {', '.join(missing)}: "
                "the client has no certificates to connect with (see the README, 'cluster')")
    if scheme != "tcp" or host == "localhost" or _is_loopback(host):
        return None
    return (f"the Dask scheduler {address} is reached without TLS or authentication: anyone who can reach it can "
            "run code on its workers. Use a tls:// address with certificates in Dask's configuration "
            "(distributed.comm.tls), or keep the scheduler on a private network")


def _tls_client_settings() -> dict[str, object]:
    """What a client needs from Dask's configuration to reach a tls:// scheduler: the authority
    that signed the scheduler's certificate and the client's own certificate (Dask's TLS checks
    both ends; the key may be in the certificate file). A security loader, where configured,
    provides them instead."""
    import dask

    if dask.config.get("distributed.client.security-loader", None):
        return {"distributed.client.security-loader": True}
    return {setting: dask.config.get(setting, None)
            for setting in ("distributed.comm.tls.ca-file", "distributed.comm.tls.client.cert")}


def client_security(address: str):
    """The ``distributed.Security`` a client uses for ``address``: built from Dask's
    configuration (``distributed.comm.tls.*``) for a tls:// scheduler, None (Dask's default)
    otherwise or where a security loader is configured."""
    if not address.startswith("tls://") or "distributed.client.security-loader" in _tls_client_settings():
        return None
    return _dask().Security()


def _is_loopback(host: str) -> bool:
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def _dask():
    try:
        import dask  # noqa: F401
        from dask import distributed
    except ImportError as error:
        raise ClusterError(f"running on a cluster needs Dask: pip install 'molinv[cluster]' ({error})") from None
    return distributed


class DaskCluster:
    """Executor for :func:`molinv.cluster.chunks.run_chunks` on a Dask client.

    Keeps at most ``window`` chunks submitted at a time (default: twice the
    workers), so chunks are built only shortly before a worker is free and memory
    stays flat however long the input. A chunk lost with a worker is resubmitted by
    the scheduler; its file is written only when complete, so no row is written twice.
    """

    def __init__(self, client, cluster=None, window: int | None = None):
        self.client = client
        self.cluster = cluster
        self.window = window

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    def n_workers(self) -> int:
        return max(1, len(self.client.scheduler_info(n_workers=-1)["workers"]))

    def share(self, value):
        """Send ``value`` to the cluster once; each worker fetches it once and hands it to its tasks.

        It travels as the result of a task rather than as scattered data: if every worker
        holding it is lost, the scheduler rebuilds it instead of failing the run.
        """
        if value is None:
            return None
        with warnings.catch_warnings():
            # Dask warns about any large task; this one is sent once on purpose.
            warnings.filterwarnings("ignore", message="Sending large graph", category=UserWarning)
            return self.client.submit(_same, value, key=f"molinv-shared-{os.urandom(4).hex()}", pure=False)

    def check_folder(self, folder: Path) -> None:
        seen = self.client.run(os.path.isdir, str(folder))
        blind = sorted(worker for worker, ok in seen.items() if not ok)
        if blind:
            raise ClusterError(f"workers {', '.join(blind)} cannot see the output folder {folder}; "
                               "put it on a file system shared by every worker")

    def map_unordered(self, function: Callable, calls: Iterable[tuple]) -> Iterator:
        distributed = _dask()
        calls = iter(calls)

        def submit_more(running):
            # Workers may come and go (batch jobs, lost workers): size the window each time.
            wanted = self.window or 2 * self.n_workers()
            for arguments in islice(calls, max(0, wanted - running.count())):
                key = f"molinv-chunk-{arguments[1]:06d}-{os.urandom(4).hex()}"
                running.add(self.client.submit(function, *arguments, key=key, pure=False))

        running = distributed.as_completed()
        submit_more(running)
        for future in running:
            result = future.result()
            future.release()
            submit_more(running)
            yield result


def _same(value):
    return value


def open_cluster(spec: str, n_workers: int | None = None) -> DaskCluster:
    """A :class:`DaskCluster` for ``spec`` ('local', a scheduler address, or 'jobqueue:KIND[:JOBS]')."""
    distributed = _dask()
    spec = spec.strip()
    if spec == "local":
        import dask

        # Each nanny reads its workers' environment once, when created here (restarts reuse it).
        # Nannies also copy that environment into this process before spawning, so a cluster
        # started earlier in this process leaves the variable here for new workers to inherit.
        os.environ.pop(MALLOC_TRIM_SETTING.rsplit(".", 1)[1], None)
        with dask.config.set({MALLOC_TRIM_SETTING: None}):
            # The dashboard on this machine only (Dask's default listens on every interface).
            cluster = distributed.LocalCluster(n_workers=n_workers or os.cpu_count(), threads_per_worker=1,
                                               processes=True, dashboard_address="127.0.0.1:0")
        return DaskCluster(distributed.Client(cluster), cluster)
    if spec.startswith("jobqueue:"):
        parts = spec.split(":")
        kind = parts[1].lower() if len(parts) > 1 else ""
        if kind not in JOBQUEUE_KINDS:
            raise ClusterError(f"cannot read {spec!r}: write jobqueue:KIND[:JOBS], KIND one of {', '.join(JOBQUEUE_KINDS)}")
        try:
            jobs = int(parts[2]) if len(parts) > 2 else 1
        except ValueError:
            raise ClusterError(f"cannot read {spec!r}: JOBS must be a whole number") from None
        try:
            import dask_jobqueue
        except ImportError as error:
            raise ClusterError(f"batch-system clusters need dask-jobqueue: pip install 'molinv[cluster]' ({error})") from None
        try:
            cluster = getattr(dask_jobqueue, JOBQUEUE_KINDS[kind])()
        except ValueError as error:  # dask-jobqueue names missing settings (cores, memory) this way
            raise ClusterError(f"{JOBQUEUE_KINDS[kind]}: {error} (set it in ~/.config/dask/jobqueue.yaml)") from None
        cluster.scale(jobs=jobs)
        return DaskCluster(distributed.Client(cluster), cluster)
    address = spec if "://" in spec else f"tcp://{spec}"
    unsafe = unsafe_address_reason(address)
    if unsafe:
        warnings.warn(unsafe, UnsafeClusterWarning, stacklevel=2)
    try:
        client = distributed.Client(address, timeout="30s", security=client_security(address))
    except (OSError, TypeError) as error:  # Dask's TypeError: a tls:// address without certificates
        raise ClusterError(f"cannot reach the Dask scheduler at {address}: {error}") from None
    return DaskCluster(client)
