"""Issue 13 item 8: a remote dask scheduler can be reached over TLS with client certificates.

dask moves pickles, so the scheduler and workers must be trusted (docs/running.md says so);
TLS keeps anyone else from connecting or listening. Tested without a TLS cluster (that needs
certificates signed for the host, and the ``cryptography`` package for dask's own test
certificates, which is not installed): the command line's options must reach
``distributed.Client`` as a ``distributed.security.Security`` requiring encryption with the
given files. Before the fix no such option existed.
"""

from __future__ import annotations

import pytest

from harness.cli import build_parser
from harness.cli._options import execution_options
from harness.core.errors import HarnessError

distributed = pytest.importorskip("distributed")


@pytest.fixture
def pems(tmp_path):
    files = {}
    for name in ("ca.pem", "client.pem", "client.key"):
        (tmp_path / name).write_text("-----BEGIN CERTIFICATE-----\n")
        files[name] = str(tmp_path / name)
    return files


def _options(*extra):
    args = build_parser().parse_args(["run", "m.toml", "--executor", "dask", *extra])
    return execution_options(args)


def test_tls_options_become_a_scheduler_requiring_encryption(pems, monkeypatch):
    from harness.execute.dask_cluster import DaskExecutor, TlsScheduler

    options = _options("--scheduler", "tls://scheduler.example:8786", "--tls-ca-file", pems["ca.pem"],
                       "--tls-cert", pems["client.pem"], "--tls-key", pems["client.key"])
    scheduler = options["scheduler"]
    assert scheduler == TlsScheduler("tls://scheduler.example:8786", pems["ca.pem"], pems["client.pem"],
                                     pems["client.key"])
    seen = {}

    class FakeClient:
        def __init__(self, address, security=None):
            seen["address"], seen["security"] = address, security

        def close(self):
            pass

    monkeypatch.setattr(distributed, "Client", FakeClient)
    DaskExecutor(scheduler).close()
    security = seen["security"]
    assert seen["address"] == "tls://scheduler.example:8786"
    assert isinstance(security, distributed.security.Security)
    assert security.require_encryption is True
    assert (security.tls_ca_file, security.tls_client_cert, security.tls_client_key) == (
        pems["ca.pem"], pems["client.pem"], pems["client.key"])


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (("--scheduler", "tls://h:1", "--tls-ca-file", "CA"), "needs all of --tls-ca-file, --tls-cert and --tls-key"),
        (("--tls-ca-file", "CA", "--tls-cert", "C", "--tls-key", "K"), "needs all of"),
        (("--scheduler", "tcp://h:1", "--tls-ca-file", "CA", "--tls-cert", "C", "--tls-key", "K"), "starts with tls://"),
        (("--scheduler", "tls://h:1", "--tls-ca-file", "missing.pem", "--tls-cert", "C", "--tls-key", "K"),
         "is not a file"),
    ],
)
def test_incomplete_or_wrong_tls_options_are_bad_input(pems, extra, message):
    extra = tuple({"CA": pems["ca.pem"], "C": pems["client.pem"], "K": pems["client.key"]}.get(e, e) for e in extra)
    with pytest.raises(HarnessError, match=message):
        _options(*extra)
