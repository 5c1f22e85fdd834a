"""Dask clusters and who can reach them: the local dashboard listens on this machine only,
and a scheduler reached without TLS from another machine is warned about (anyone who can
reach a Dask scheduler can run code on its workers: Dask documentation, "TLS/SSL")."""

import pytest

pytest.importorskip("distributed")
psutil = pytest.importorskip("psutil")

from molinv.cluster import dask_cluster  # noqa: E402
from molinv.cluster.dask_cluster import ClusterError, UnsafeClusterWarning, open_cluster  # noqa: E402


def test_local_cluster_dashboard_listens_on_this_machine_only():
    with open_cluster("local", n_workers=1) as cluster:
        port = cluster.cluster.scheduler.http_server.port
        listening = {c.laddr.ip for c in psutil.net_connections("inet")
                     if c.status == psutil.CONN_LISTEN and c.laddr.port == port}
    assert listening and listening <= {"127.0.0.1", "::1"}


@pytest.mark.parametrize(("spec", "warned"), [("tcp://10.1.2.3:8786", True), ("head-node:8786", True),
                                               ("tcp://127.0.0.1:8786", False), ("localhost:8786", False),
                                               ("tls://head-node:8786", False)])
def test_remote_scheduler_without_tls_is_warned_about(monkeypatch, spec, warned):
    def unreachable(address, timeout):
        raise OSError("no scheduler here")

    monkeypatch.setattr(dask_cluster._dask(), "Client", unreachable)
    with pytest.warns(UnsafeClusterWarning, match="without TLS") if warned else _no_warning():
        with pytest.raises(ClusterError, match="cannot reach"):
            open_cluster(spec)


class _no_warning:
    def __enter__(self):
        import warnings

        self.catcher = warnings.catch_warnings(record=True)
        self.caught = self.catcher.__enter__()
        warnings.simplefilter("always")

    def __exit__(self, *exc):
        self.catcher.__exit__(*exc)
        assert not [w for w in self.caught if issubclass(w.category, UnsafeClusterWarning)]


def test_cli_prints_the_warning_even_when_the_scheduler_is_unreachable(monkeypatch, tmp_path, capsys):
    from molinv.cli import main

    def unreachable(address, timeout):
        raise OSError("no scheduler here")

    monkeypatch.setattr(dask_cluster._dask(), "Client", unreachable)
    smiles = tmp_path / "c.smi"
    smiles.write_text("CCO ethanol\n")
    assert main(["describe", str(smiles), "--descriptor", "counts", "--out", str(tmp_path / "f.npz"),
                 "--cluster", "tcp://10.1.2.3:8786"]) == 2
    error = capsys.readouterr().err.splitlines()
    assert error[0].startswith("molinv describe: warning: the Dask scheduler tcp://10.1.2.3:8786 is reached without TLS")
    assert "cannot reach" in error[1]
