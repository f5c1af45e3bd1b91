"""dask executor: the same bytes as the local pool, failures recorded, a clear message without dask.

The cluster is a ``distributed.LocalCluster`` on loopback started inside the test (no other network).
"""

from __future__ import annotations

import sys

import pytest
from command_toys import write_manifest
from runner_toys import folder_bytes, toy_specs

from harness.execute import make_executor
from harness.execute.runner import run_manifest, run_specs
from harness.manifest.loader import load_manifest

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=2, processes=False, protocol="tcp", host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        yield cluster


def test_dask_gives_the_local_pools_bytes(cluster, tmp_path):
    specs = toy_specs(4)
    run_specs(specs, results_dir=tmp_path / "local", workers=2, use_cache=False)
    with distributed.Client(cluster) as client:
        out = run_specs(specs[::-1], results_dir=tmp_path / "dask", executor="dask", scheduler=client, use_cache=False)
    assert out.ok and set(out.sources.values()) == {"trained"}
    assert folder_bytes(tmp_path / "dask") == folder_bytes(tmp_path / "local")


def test_a_command_trainer_on_dask_gives_the_local_pools_bytes(cluster, tmp_path):
    """The command trainer runs its program from a dask worker thread; curves, logs and records agree."""
    manifest = load_manifest(write_manifest(tmp_path / "m", seeds=[1, 2, 3, 4]))
    local = run_manifest(manifest, results_dir=tmp_path / "local", workers=2, use_cache=False)
    with distributed.Client(cluster) as client:
        dask = run_manifest(manifest, results_dir=tmp_path / "dask", executor="dask", scheduler=client, use_cache=False)
    assert local.ok and dask.ok and set(dask.sources.values()) == {"trained"}
    assert len(folder_bytes(tmp_path / "dask")) == 4
    assert folder_bytes(tmp_path / "dask") == folder_bytes(tmp_path / "local")
    for record in dask.results.records:
        curve = f"runs/seed-{record.spec.seed.label}/curve.csv"
        assert (tmp_path / "dask" / curve).read_bytes() == (tmp_path / "local" / curve).read_bytes()


def test_dask_by_scheduler_address_records_failures_and_time_limits(cluster, tmp_path):
    address = cluster.scheduler_address
    assert address.startswith("tcp://127.0.0.1:")
    raising = run_specs(
        toy_specs(3, config={"bad": ["7/1"], "mode": "raise"}), results_dir=tmp_path / "r",
        executor="dask", scheduler=address, use_cache=False,
    )
    assert [r.status for r in raising.results.records] == ["ok", "failed", "ok"]
    assert "RuntimeError: toy trainer broke on purpose at step 25" in raising.results.records[1].failure
    # A slow run (1 s of pauses) with a 0.3 s limit is released and recorded failed; it is not
    # a hang, because dask cannot stop the worker thread and it must end on its own.
    slow = run_specs(
        toy_specs(1, config={"pause": 0.2}), results_dir=tmp_path / "s",
        executor="dask", scheduler=address, use_cache=False, time_limit=0.3,
    )
    assert slow.results.records[0].failure.startswith("exceeded the time limit of 0.3 s per run")


def test_missing_dask_says_how_to_install_it(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(ImportError, match=r"pip install 'rl-harness\[dask\]'"):
        make_executor("dask")


def test_scheduler_is_refused_for_the_local_executor():
    with pytest.raises(ValueError, match="`scheduler` is only for executor='dask'"):
        make_executor("local", scheduler="tcp://127.0.0.1:8786")
