"""A PostgreSQL tracker: the store we support for several hosts.

Each test gets a fresh database of its own (the ``pg_url`` fixture): a sweep runs, is killed,
resumes and reports; two drivers on one tracker run every job exactly once; a claim skips the
rows another transaction holds (``FOR UPDATE SKIP LOCKED``), so concurrent claims are disjoint;
a store of another schema version is refused, unchanged.
"""

from __future__ import annotations

import collections
import json
import os
import signal
import threading
import time
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa

from tests.conftest import run_foldsweep, start_foldsweep

pytestmark = pytest.mark.postgres

WORKER = "tests.fault_workers:FAULTY"


def write_spec(folder: Path, url: str, *, configs: int, seconds: float) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "pg.toml"
    path.write_text(f"""name = "pg-sweep"
store = "{url}"
[folds]
k = 2
seed = 5
[[dataset]]
name = "iris"
builtin = "iris"
[[model]]
worker = "{WORKER}"
fixed = {{ seconds = {seconds} }}
grid = {{ index = {list(range(configs))} }}
""")
    return path


def ok(proc: Any) -> Any:
    assert proc.returncode == 0, f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    return proc


def pg(url: str, sql: str) -> list[tuple[Any, ...]]:
    engine = sa.create_engine(url)
    try:
        with engine.begin() as conn:
            result = conn.exec_driver_sql(sql)
            return [tuple(r) for r in result] if result.returns_rows else []
    finally:
        engine.dispose()


def check_exactly_once(url: str) -> dict[str, int]:
    states = dict(pg(url, "SELECT state, count(*) FROM jobs GROUP BY state"))
    n, distinct = pg(url, "SELECT count(*), count(DISTINCT key) FROM results")[0]
    orphans = pg(url, "SELECT count(*) FROM results r JOIN jobs j ON j.key = r.key WHERE j.state <> 'done'")[0][0]
    assert n == distinct and orphans == 0 and n == states.get("done", 0)
    return {"done": states.get("done", 0), "results": n, "total": sum(states.values())}


def completions(folder: Path) -> collections.Counter[str]:
    path = folder / "completed.log"
    return collections.Counter(path.read_text().split() if path.exists() else [])


def env_for(folder: Path) -> dict[str, str]:
    return {"FOLDSWEEP_FAULT_LOG": str(folder / "completed.log")}


def test_sweep_on_postgres_runs_resumes_and_reports(tmp_path: Path, pg_url: str) -> None:
    spec = write_spec(tmp_path, pg_url, configs=6, seconds=0.3)
    proc = start_foldsweep("run", spec, "--workers", "1", "--progress", "none", env=env_for(tmp_path))
    try:
        deadline = time.monotonic() + 120
        while sum(completions(tmp_path).values()) < 4 and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.05)
        time.sleep(1.2)  # past one commit
        assert proc.poll() is None, "the first run finished before it could be killed"
        os.killpg(proc.pid, signal.SIGKILL)
    finally:
        proc.communicate()
    before = check_exactly_once(pg_url)
    assert 0 < before["done"] < 12
    kept = dict(pg(pg_url, "SELECT key, accuracy FROM results"))
    resumed = json.loads(ok(run_foldsweep("run", spec, "--json", "--progress", "none", env=env_for(tmp_path)))
                         .stdout.strip().splitlines()[-1])
    assert resumed["requeued"] >= 1 and resumed["done"] == 12 and resumed["ran"] == 12 - before["done"]
    after = check_exactly_once(pg_url)
    assert after == {"done": 12, "results": 12, "total": 12}
    assert all(dict(pg(pg_url, "SELECT key, accuracy FROM results"))[k] == v for k, v in kept.items())
    status = json.loads(ok(run_foldsweep("status", spec, "--json")).stdout)
    assert (status["total"], status["done"], status["pending"], status["running"]) == (12, 12, 0, 0)
    rows = [json.loads(x) for x in ok(run_foldsweep("results", spec, "--format", "json")).stdout.splitlines() if x]
    assert len(rows) == 12 and len({r["key"] for r in rows}) == 12
    # the majority-class predictor on iris (50 per class, stratified halves): accuracy 1/3 on every fold
    # (scikit-learn's load_iris documentation: 3 classes of 50 samples)
    assert all(abs(r["accuracy"] - 25 / 75) < 1e-9 for r in rows)  # the JSON carries 10 digits
    again = ok(run_foldsweep("run", spec, "--progress", "none"))
    assert "nothing left to do" in again.stdout


def test_two_drivers_on_one_postgres_tracker_run_each_job_once(tmp_path: Path, pg_url: str) -> None:
    spec = write_spec(tmp_path, pg_url, configs=10, seconds=0.15)
    procs = [start_foldsweep("run", spec, "--workers", "1", "--claim", "2", "--progress", "none", "--json",
                             env=env_for(tmp_path)) for _ in range(2)]
    summaries = []
    for p in procs:
        out, err = p.communicate(timeout=240)
        assert p.returncode == 0, err
        summaries.append(json.loads(out.strip().splitlines()[-1]))
    assert check_exactly_once(pg_url) == {"done": 20, "results": 20, "total": 20}
    assert sum(s["ran"] for s in summaries) == 20 and all(s["ran"] > 0 for s in summaries)
    runs = completions(tmp_path)
    assert len(runs) == 20 and set(runs.values()) == {1}, "a job ran to completion twice"
    print(f"\nFAULT FIGURES two drivers on PostgreSQL: planned 20, done 20, duplicates 0, "
          f"ran by each {[s['ran'] for s in summaries]}, re-runs 0")


@pytest.fixture
def synced(tmp_path: Path, pg_url: str) -> Any:
    """A PostgreSQL store holding the 40 pending jobs of a synced spec (no run)."""
    from sweep.run import load_inputs, open_store, sync_store

    spec = write_spec(tmp_path, pg_url, configs=20, seconds=0.0)
    inputs = load_inputs(spec)
    store = open_store(inputs.spec)
    try:
        assert sync_store(store, inputs) == 40
        yield store, inputs.spec.name
    finally:
        store.close()


def test_claim_skips_rows_locked_by_another_transaction(synced: Any, pg_url: str) -> None:
    store, sweep = synced
    engine = sa.create_engine(pg_url)
    try:
        with engine.begin() as conn:  # another driver's claim in progress: it holds 5 rows
            held = set(conn.exec_driver_sql(
                "SELECT key FROM jobs WHERE state = 'pending' ORDER BY dataset, config_id, repeat, fold "
                "LIMIT 5 FOR UPDATE").scalars())
            found: list[Any] = []
            thread = threading.Thread(target=lambda: found.extend(store.claim(sweep, "other", 5, 60, 3)))
            thread.start()
            thread.join(timeout=20)
            assert not thread.is_alive(), "claim waited for the locked rows instead of skipping them"
    finally:
        engine.dispose()
    keys = {c.key for c in found}
    assert len(held) == 5 and len(keys) == 5 and not keys & held


def test_concurrent_claims_are_disjoint(synced: Any, pg_url: str) -> None:
    from sweep.store import Store

    _, sweep = synced
    stores = [Store.open(pg_url) for _ in range(4)]
    barrier = threading.Barrier(len(stores))
    claimed: list[list[str]] = [[] for _ in stores]

    def claim(i: int) -> None:
        barrier.wait()
        while True:
            got = stores[i].claim(sweep, f"driver-{i}", 3, 60, 3)
            if not got:
                return
            claimed[i].extend(c.key for c in got)

    threads = [threading.Thread(target=claim, args=(i,)) for i in range(len(stores))]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    for s in stores:
        s.close()
    every = [k for keys in claimed for k in keys]
    assert len(every) == 40 and len(set(every)) == 40  # each pending job claimed by exactly one driver
    owners = dict(pg(pg_url, "SELECT key, owner FROM jobs"))
    assert all(owners[k] == f"driver-{i}" for i, keys in enumerate(claimed) for k in keys)


def test_store_of_another_schema_version_is_refused_unchanged(tmp_path: Path, pg_url: str) -> None:
    spec = write_spec(tmp_path, pg_url, configs=2, seconds=0.0)
    ok(run_foldsweep("run", spec, "--progress", "none"))
    pg(pg_url, "UPDATE meta SET value = '999' WHERE name = 'schema_version'")
    before = pg(pg_url, "SELECT key, state, attempts, finished_at FROM jobs ORDER BY key")
    proc = run_foldsweep("run", spec, "--retry-failed", "--progress", "none")
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "schema version 999" in lines[0], proc.stderr
    assert pg(pg_url, "SELECT key, state, attempts, finished_at FROM jobs ORDER BY key") == before
    assert pg(pg_url, "SELECT value FROM meta WHERE name = 'schema_version'") == [("999",)]
