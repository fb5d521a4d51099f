"""The Dask executor: the same results as a local run, BLAS pinned on the cluster's workers,
results back to the one database writer, clear errors when dask is missing or the scheduler
cannot be reached.

The reference is the local executor on the same series (itself checked against a serial run in
test_pool.py); the thread counts come from threadpoolctl's inspection of each worker.
"""

from __future__ import annotations

import json
import socket
import sys

import dask
import pytest
from distributed import Client, LocalCluster
from simulated_portfolio import write_portfolio_csv
from test_pool import assert_same_results, blas_threads

from app.cli import main
from app.core.errors import LagdeskError
from app.jobs.executors import ExecutorChoice, map_unordered
from app.store.analyses import load_analysis
from app.store.database import open_database
from app.store.imports import import_portfolio
from app.store.series import series_ids_to_analyse

SERIES = 5


@pytest.fixture(scope="module")
def portfolio_csv(tmp_path_factory):
    return write_portfolio_csv(tmp_path_factory.mktemp("dask") / "portfolio.csv", SERIES, seed=11)


@pytest.fixture
def unpinned_cluster(monkeypatch):
    """A running cluster of 2 single-threaded worker processes that, unlike dask's default,
    leaves the BLAS thread count of its workers alone, as a cluster set up by others may.
    One per test: the executor's worker plugin stays registered on a cluster it has used."""
    # A LocalCluster leaves its pre-spawn settings (OPENBLAS_NUM_THREADS=1 ...) in os.environ.
    for name in dask.config.get("distributed.nanny.pre-spawn-environ"):
        monkeypatch.delenv(name, raising=False)
    with dask.config.set({"distributed.nanny.pre-spawn-environ": {}}):
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
            yield cluster.scheduler_address


def _json_form(analysis):
    """A stored analysis as JSON, so :func:`assert_same_results` compares it leaf by leaf."""
    return analysis.to_dict() if analysis is not None else None


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_identify_on_a_local_dask_cluster_gives_the_local_results(portfolio_csv, capsys):
    code, local, _ = run_cli(capsys, "identify", portfolio_csv, "--json", "--workers", 1)
    assert code == 0
    code, on_dask, _ = run_cli(capsys, "identify", portfolio_csv, "--json", "--workers", 2, "--executor", "dask")
    assert code == 0
    assert_same_results(json.loads(on_dask), json.loads(local))
    assert len(json.loads(local)["series"]) == SERIES


def test_analyze_on_an_existing_scheduler_stores_the_local_results(portfolio_csv, unpinned_cluster, tmp_path, capsys):
    stored = {}
    for executor in ("local", "dask"):
        db_path = tmp_path / f"{executor}.db"
        with open_database(db_path) as db:
            import_portfolio(db, portfolio_csv)
        extra = ["--scheduler", unpinned_cluster] if executor == "dask" else []
        code, _, err = run_cli(capsys, "analyze", "--db", db_path, "--workers", 1, "--executor", executor, *extra)
        assert code == 0, err
        with open_database(db_path) as db:
            stored[executor] = {i: _json_form(load_analysis(db, i)) for i in series_ids_to_analyse(db, everything=True)}
    assert_same_results(stored["dask"], stored["local"])
    assert len(stored["local"]) == SERIES and all(v is not None for v in stored["local"].values())


def test_dask_workers_run_blas_on_one_thread(unpinned_cluster):
    with Client(unpinned_cluster) as client:
        before = client.run(blas_threads, None)
    if all(threads == 1 for pools in before.values() for _, threads in pools):
        pytest.skip("BLAS starts with one thread on this machine: nothing to pin")
    on_workers = list(map_unordered(blas_threads, range(4), 2, chunk=1, executor=ExecutorChoice("dask", unpinned_cluster)))
    for pools in on_workers:
        assert any(api in ("openblas", "mkl", "blis") for api, _ in pools), pools
        assert all(threads == 1 for _, threads in pools), pools


def test_dask_executor_says_how_to_install_dask_when_it_is_missing(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)
    monkeypatch.delitem(sys.modules, "app.jobs.executors.dask", raising=False)
    with pytest.raises(LagdeskError, match=r"install lagdesk\[dask\]"):
        list(map_unordered(blas_threads, range(2), 2, executor=ExecutorChoice("dask")))


def test_identify_names_a_scheduler_it_cannot_reach(portfolio_csv, monkeypatch, capsys):
    import app.jobs.executors.dask as dask_executor

    monkeypatch.setattr(dask_executor, "CONNECT_TIMEOUT_S", 1)
    with socket.socket() as probe:  # a port nobody listens on
        probe.bind(("127.0.0.1", 0))
        address = f"tcp://127.0.0.1:{probe.getsockname()[1]}"
    code, _, err = run_cli(capsys, "identify", portfolio_csv, "--executor", "dask", "--scheduler", address)
    assert code == 2
    assert f"cannot reach the Dask scheduler at {address}" in err


def test_a_scheduler_without_the_dask_executor_is_refused(portfolio_csv, capsys):
    code, _, err = run_cli(capsys, "identify", portfolio_csv, "--scheduler", "tcp://127.0.0.1:8786")
    assert code == 2
    assert "only used with the dask executor" in err
