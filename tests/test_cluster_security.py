"""Dask clusters and who can reach them: the local dashboard listens on this machine only,
and a scheduler reached without TLS from another machine is warned about (anyone who can
reach a Dask scheduler can run code on its workers: Dask documentation, "TLS/SSL"); a tls://
scheduler is reached with the certificates of Dask's configuration, and warned about without them."""

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


#: Certificates in Dask's configuration, as a user sets them (README, cluster section);
#: the files need not exist until a connection is made.
TLS_SETTINGS = {"distributed.comm.tls.ca-file": "/certs/ca.pem",
                "distributed.comm.tls.client.cert": "/certs/client.pem",
                "distributed.comm.tls.client.key": "/certs/client-key.pem"}


@pytest.mark.parametrize(("spec", "settings", "warning"),
                         [("tcp://10.1.2.3:8786", {}, "without TLS"), ("head-node:8786", {}, "without TLS"),
                          ("tcp://127.0.0.1:8786", {}, None), ("localhost:8786", {}, None),
                          ("tls://head-node:8786", TLS_SETTINGS, None),
                          ("tls://head-node:8786", {}, "lacks distributed.comm.tls.ca-file, distributed.comm.tls.client.cert"),
                          ("tls://head-node:8786", {"distributed.comm.tls.ca-file": "/certs/ca.pem"},
                           "lacks distributed.comm.tls.client.cert:")])
def test_remote_scheduler_without_tls_or_certificates_is_warned_about(monkeypatch, spec, settings, warning):
    import dask

    def unreachable(address, timeout, security):
        raise OSError("no scheduler here")

    monkeypatch.setattr(dask_cluster._dask(), "Client", unreachable)
    with dask.config.set(dict.fromkeys(TLS_SETTINGS)), dask.config.set(settings):  # none but ``settings``
        with pytest.warns(UnsafeClusterWarning, match=warning) if warning else _no_warning():
            with pytest.raises(ClusterError, match="cannot reach"):
                open_cluster(spec)


def test_tls_scheduler_is_reached_with_the_certificates_of_the_dask_configuration(monkeypatch):
    import dask

    used = {}

    def connect(address, timeout, security):
        used[address] = security
        raise OSError("no scheduler here")

    monkeypatch.setattr(dask_cluster._dask(), "Client", connect)
    with dask.config.set(TLS_SETTINGS):
        for spec in ("tls://head-node:8786", "tcp://127.0.0.1:8786"):
            with pytest.raises(ClusterError):
                open_cluster(spec)
    security = used["tls://head-node:8786"]
    assert (security.tls_ca_file, security.tls_client_cert, security.tls_client_key) == \
        ("/certs/ca.pem", "/certs/client.pem", "/certs/client-key.pem")
    assert used["tcp://127.0.0.1:8786"] is None  # Dask's own default


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

    def unreachable(address, timeout, security):
        raise OSError("no scheduler here")

    monkeypatch.setattr(dask_cluster._dask(), "Client", unreachable)
    smiles = tmp_path / "c.smi"
    smiles.write_text("CCO ethanol\n")
    assert main(["describe", str(smiles), "--descriptor", "counts", "--out", str(tmp_path / "f.npz"),
                 "--cluster", "tcp://10.1.2.3:8786"]) == 2
    error = capsys.readouterr().err.splitlines()
    assert error[0].startswith("molinv describe: warning: the Dask scheduler tcp://10.1.2.3:8786 is reached without TLS")
    assert "cannot reach" in error[1]


def test_tls_scheduler_without_certificates_is_a_clear_error():
    import dask

    with dask.config.set(dict.fromkeys(TLS_SETTINGS)), pytest.warns(UnsafeClusterWarning, match="lacks"):
        with pytest.raises(ClusterError, match="cannot reach the Dask scheduler at tls://127.0.0.1:1: TLS expects"):
            open_cluster("tls://127.0.0.1:1")
