"""The dask.distributed backend, end to end through the real ``foldsweep`` command.

- an embedded LocalCluster of 2 worker processes over TLS on loopback gives the same result rows
  as the joblib backend; it refuses a client without its credentials (none, or TLS of its own);
- an existing TLS-secured cluster (a LocalCluster started here, its scheduler in this process)
  reached with ``--scheduler tls://127.0.0.1:PORT`` and its credentials in dask's configuration
  gives the same rows, runs every job there, and receives each dataset once (one scatter per dataset, counted at the scheduler), not once per job.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from tests.conftest import run_foldsweep

#: columns that legitimately differ between two runs of the same jobs
VOLATILE = ("fit_seconds", "predict_seconds", "host")

SPEC = """
name = "dask-e2e"
[folds]
k = 3
seed = 4
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "synthetic"
synthetic = { n_samples = 90, n_features = 5, n_informative = 3, n_classes = 3 }
[[model]]
worker = "decision_tree"
grid = { max_depth = [2, 3] }
[[model]]
worker = "knn"
grid = { n_neighbors = [3, 5] }
"""
JOBS = 2 * 4 * 3
DATASETS = 2


def _ok(proc: Any) -> Any:
    assert proc.returncode == 0, f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    return proc


def _run(folder: Path, *extra: str, env: dict[str, str] | None = None) -> tuple[Path, dict[str, Any]]:
    folder.mkdir(parents=True, exist_ok=True)
    spec = folder / "sweep.toml"
    spec.write_text(SPEC)
    proc = _ok(run_foldsweep("run", spec, "--json", "--progress", "none", *extra, env=env))
    return spec, json.loads(proc.stdout.strip().splitlines()[-1])


def _rows(spec: Path) -> list[dict[str, Any]]:
    text = _ok(run_foldsweep("results", spec, "--format", "json")).stdout
    rows = [json.loads(line) for line in text.splitlines() if line.strip()]
    return sorted(({k: v for k, v in r.items() if k not in VOLATILE} for r in rows), key=lambda r: r["key"])


@pytest.fixture(scope="module")
def joblib_rows(tmp_path_factory: pytest.TempPathFactory) -> list[dict[str, Any]]:
    """The reference: the same spec through the embedded joblib backend with 2 worker processes."""
    spec, summary = _run(tmp_path_factory.mktemp("joblib"), "--workers", "2")
    assert summary["done"] == JOBS
    return _rows(spec)


def test_local_cluster_gives_the_joblib_rows(tmp_path: Path, joblib_rows: list[dict[str, Any]]) -> None:
    spec, summary = _run(tmp_path, "--backend", "dask", "--workers", "2")
    assert (summary["done"], summary["failed"], summary["pending"], summary["ran"]) == (JOBS, 0, 0, JOBS)
    rows = _rows(spec)
    # common practice: the same fold jobs through another execution engine give identical rows
    assert len(rows) == JOBS and rows == joblib_rows
    # a re-run has nothing to do: the cluster it started goes away cleanly, without a word
    # (a cluster process killed mid-start would leave semaphores that the resource tracker reports)
    again = _ok(run_foldsweep("run", spec, "--backend", "dask", "--workers", "2", "--progress", "none"))
    assert "nothing left to do" in again.stdout and again.stderr == "", again.stderr


def test_embedded_cluster_refuses_a_client_without_its_credentials() -> None:
    # the embedded cluster runs code sent to it as the sweep's user: another local user must not be
    # able to send any (dask's TLS with per-cluster credentials; common practice for a server that
    # runs code: authenticate the client)
    from distributed import Client
    from distributed.security import Security

    from sweep.dask_executor import DaskExecutor

    executor = DaskExecutor(1)
    try:
        address = executor.cluster.scheduler_address
        assert address.startswith("tls://127.0.0.1:")
        assert executor.client.submit(sum, [1, 2]).result(timeout=60) == 3  # its own client is let in
        attempts = {"no credentials": dict(address=address),
                    "plain TCP": dict(address=address.replace("tls://", "tcp://")),
                    "TLS credentials of another cluster": dict(address=address, security=Security.temporary())}
        for what, kwargs in attempts.items():
            with pytest.raises((OSError, TypeError, TimeoutError)):
                client = Client(**kwargs, timeout=5)
                client.close()
                raise AssertionError(f"{what}: connected")
    finally:
        executor.close()


class _Counter:
    """Counts, at a scheduler living in this process, scatter requests and finished fold-job tasks."""

    def __init__(self, scheduler: Any) -> None:
        self.scatters = 0
        self.scattered_keys: list[str] = []
        self.jobs_done = 0
        original = scheduler.handlers["scatter"]

        async def scatter(*args: Any, **kwargs: Any) -> Any:
            self.scatters += 1
            keys = await original(*args, **kwargs)
            self.scattered_keys.extend(map(str, keys))
            return keys

        scheduler.handlers["scatter"] = scatter
        counter = self

        from distributed.diagnostics.plugin import SchedulerPlugin

        class _Finished(SchedulerPlugin):
            def transition(self, key: Any, start: str, finish: str, *args: Any, **kwargs: Any) -> None:
                if finish == "memory" and str(key).startswith("run_jobs-"):
                    counter.jobs_done += 1

        scheduler.add_plugin(_Finished(), name="foldsweep-test-counter")


def test_existing_scheduler_runs_the_jobs_and_receives_each_dataset_once(
        tmp_path: Path, joblib_rows: list[dict[str, Any]]) -> None:
    # a TLS-secured scheduler, its credentials given to foldsweep as the README shows (dask's own
    # configuration, through environment variables)
    from distributed import LocalCluster
    from distributed.security import Security

    security = Security.temporary()
    files = {"CA_FILE": security.tls_ca_file, "CLIENT__CERT": security.tls_client_cert,
             "CLIENT__KEY": security.tls_client_key}
    env = {"DASK_DISTRIBUTED__COMM__REQUIRE_ENCRYPTION": "True"}
    for name, pem in files.items():
        path = tmp_path / f"{name.lower()}.pem"
        path.write_text(pem)
        env[f"DASK_DISTRIBUTED__COMM__TLS__{name}"] = str(path)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", protocol="tls",
                      security=security, dashboard_address=None, scheduler_kwargs={"dashboard_address": None},
                      silence_logs=50) as cluster:
        counter = _Counter(cluster.scheduler)
        address = cluster.scheduler_address
        assert address.startswith("tls://127.0.0.1:")
        spec, summary = _run(tmp_path, "--backend", "dask", "--scheduler", address, env=env)
        assert (summary["done"], summary["failed"], summary["ran"]) == (JOBS, 0, JOBS)
        # every fold job ran on this cluster: the driver has no other executor, and the tasks it sent
        # (one or more jobs each: jobs of milliseconds are batched) all finished there
        assert 1 <= counter.jobs_done <= JOBS
        assert counter.scatters == DATASETS  # one scatter per dataset, not one per job
        assert len(counter.scattered_keys) == DATASETS
    assert _rows(spec) == joblib_rows


def test_unreachable_scheduler_is_one_line_exit_2(tmp_path: Path) -> None:
    import socket

    with socket.socket() as sock:  # a loopback port that nothing listens on
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    tmp_path.mkdir(exist_ok=True)
    spec = tmp_path / "sweep.toml"
    spec.write_text(SPEC)
    proc = run_foldsweep("run", spec, "--backend", "dask", "--scheduler", f"tcp://127.0.0.1:{port}",
                         "--progress", "none", env={"DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT": "2s"})
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "cannot reach the dask scheduler" in lines[0], proc.stderr
