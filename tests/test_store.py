"""Tests of sweep.store: the schema file, refusing foreign stores unchanged, claim/renew/release/commit."""

from __future__ import annotations

import hashlib
import os
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa

from results_schema import SCHEMA_VERSION, read
from sweep.errors import SchemaVersionError, StoreError
from sweep.folds import Fold
from sweep.plan import PlannedJob
from sweep.store import Store, schema_sql
from workers.job import JobResult

SWEEP = "store-test"
SCHEME = "stratified-k3-r1-s0"


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def url(path: Path) -> str:
    return f"sqlite:///{path}"


def planned(n: int) -> list[PlannedJob]:
    return [PlannedJob(f"key{i:03d}", "iris", "fp0", "cfg", 0, i) for i in range(n)]


def ok_result(key: str, accuracy: float = 0.9) -> JobResult:
    return JobResult(key=key, ok=True, accuracy=accuracy, balanced_accuracy=accuracy, kappa=0.8,
                     train_accuracy=1.0, fit_seconds=0.01, predict_seconds=0.001, worker_version="1",
                     host="h", started_at=time.time(), finished_at=time.time())


@pytest.fixture
def store(tmp_path: Path):
    s = Store.open(url(tmp_path / "t.sqlite"))
    s.sync_jobs(SWEEP, SCHEME, planned(6))
    yield s
    s.close()


def result_rows(s: Store) -> list[str]:
    with sqlite3.connect(s.url[len("sqlite:///"):]) as conn:
        return [k for (k,) in conn.execute("SELECT key FROM results ORDER BY key")]


def job_states(s: Store) -> dict[str, str]:
    with sqlite3.connect(s.url[len("sqlite:///"):]) as conn:
        return dict(conn.execute("SELECT key, state FROM jobs"))


# ---- the schema -----------------------------------------------------------------------------

def test_schema_file_equals_the_tables_in_code() -> None:
    assert schema_sql() == read("schema.sql")


def test_new_store_records_the_schema_version(tmp_path: Path) -> None:
    Store.open(url(tmp_path / "s.sqlite")).close()
    with sqlite3.connect(tmp_path / "s.sqlite") as conn:
        assert conn.execute("SELECT value FROM meta WHERE name = 'schema_version'").fetchone() == (str(SCHEMA_VERSION),)
        assert conn.execute("PRAGMA journal_mode").fetchone() == ("wal",)


def test_store_of_another_schema_version_is_refused_unchanged(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    Store.open(url(path)).close()
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE meta SET value = '99' WHERE name = 'schema_version'")
    conn.close()
    before = digest(path)
    with pytest.raises(SchemaVersionError, match=rf"{path}: store has schema version 99.*reads version {SCHEMA_VERSION}"):
        Store.open(url(path))
    assert digest(path) == before
    with sqlite3.connect(path) as conn:  # nothing was added to it either
        assert conn.execute("SELECT count(*) FROM jobs").fetchone() == (0,)


def test_database_that_is_not_a_store_is_refused_unchanged(tmp_path: Path) -> None:
    path = tmp_path / "other.sqlite"
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE invoices (id INTEGER PRIMARY KEY, amount REAL)")
        conn.execute("INSERT INTO invoices VALUES (1, 9.5)")
    conn.close()
    before = digest(path)
    with pytest.raises(StoreError, match="not a foldsweep store"):
        Store.open(url(path))
    assert digest(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.sqlite"]


def test_open_without_create_refuses_an_empty_place(tmp_path: Path) -> None:
    with pytest.raises(StoreError, match="no foldsweep store here"):
        Store.open(url(tmp_path / "none.sqlite"), create=False)


# ---- jobs -----------------------------------------------------------------------------------

def test_sync_jobs_adds_only_new_jobs(store: Store) -> None:
    assert store.counts(SWEEP) == {"pending": 6, "running": 0, "done": 0, "failed": 0}
    assert store.sync_jobs(SWEEP, SCHEME, planned(8)) == 2
    assert store.sync_jobs(SWEEP, SCHEME, planned(8)) == 0
    assert store.counts(SWEEP)["pending"] == 8
    store.sync_jobs(SWEEP, SCHEME, planned(5))  # a smaller plan retires jobs, it does not delete them
    assert sum(store.counts(SWEEP).values()) == 5


def test_claim_marks_running_and_never_hands_a_job_out_twice(store: Store) -> None:
    a = store.claim(SWEEP, "host:1:a", 4, 60, 3)
    b = store.claim(SWEEP, "host:1:b", 4, 60, 3)
    assert len(a) == 4 and len(b) == 2
    assert not {c.key for c in a} & {c.key for c in b}
    assert all(c.attempts == 1 for c in a + b)
    assert store.counts(SWEEP) == {"pending": 0, "running": 6, "done": 0, "failed": 0}
    assert store.claim(SWEEP, "host:1:c", 4, 60, 3) == []


def test_commit_writes_result_and_done_together(store: Store) -> None:
    (job,) = store.claim(SWEEP, "host:1:a", 1, 60, 3)
    assert store.commit_results("host:1:a", [ok_result(job.key)]) == 1
    assert result_rows(store) == [job.key]
    assert job_states(store)[job.key] == "done"


def test_commit_by_an_owner_that_does_not_hold_the_job_is_dropped(store: Store) -> None:
    (job,) = store.claim(SWEEP, "host:1:a", 1, 60, 3)
    assert store.commit_results("host:1:b", [ok_result(job.key, 0.1)]) == 0
    assert result_rows(store) == [] and job_states(store)[job.key] == "running"
    assert store.commit_results("host:1:a", [ok_result(job.key, 0.9)]) == 1
    # a late result for a job already done: no second row
    assert store.commit_results("host:1:a", [ok_result(job.key, 0.5)]) == 0
    assert store.commit_results("host:1:b", [ok_result(job.key, 0.5)]) == 0
    assert result_rows(store) == [job.key]
    with sqlite3.connect(store.url[len("sqlite:///"):]) as conn:
        assert conn.execute("SELECT accuracy FROM results").fetchall() == [(0.9,)]


def test_a_failing_commit_writes_neither_result_nor_state(store: Store) -> None:
    jobs = store.claim(SWEEP, "host:1:a", 2, 60, 3)
    broken = JobResult(key=jobs[1].key, ok=True, accuracy=None)  # NOT NULL metrics: the insert fails
    with pytest.raises(sa.exc.IntegrityError):  # a bug, not bad input: not turned into a one-line StoreError
        store.commit_results("host:1:a", [ok_result(jobs[0].key), broken])
    assert result_rows(store) == []
    assert store.counts(SWEEP)["running"] == 2 and store.counts(SWEEP)["done"] == 0


def test_failed_result_keeps_its_error(store: Store) -> None:
    (job,) = store.claim(SWEEP, "host:1:a", 1, 60, 3)
    failed = JobResult(key=job.key, ok=False, error="Traceback ...\nValueError: bad fit", finished_at=time.time())
    assert store.commit_results("host:1:a", [failed]) == 1
    assert store.failures(SWEEP) == [(job.key, "Traceback ...\nValueError: bad fit", False)]
    assert result_rows(store) == []
    assert store.retry_failed(SWEEP) == 1
    assert store.counts(SWEEP)["pending"] == 6


def test_release_gives_jobs_back_without_counting_the_attempt(store: Store) -> None:
    jobs = store.claim(SWEEP, "host:1:a", 2, 60, 3)
    store.release("host:1:b", [jobs[0].key])  # not the holder: no effect
    assert store.counts(SWEEP)["running"] == 2
    store.release("host:1:a", [c.key for c in jobs])
    assert store.counts(SWEEP) == {"pending": 6, "running": 0, "done": 0, "failed": 0}
    again = store.claim(SWEEP, "host:1:c", 6, 60, 3)
    assert {c.key: c.attempts for c in again if c.key in {j.key for j in jobs}} == {j.key: 1 for j in jobs}


def test_max_attempts_stops_claiming(store: Store) -> None:
    for owner in ("host:1:a", "host:1:b"):
        jobs = store.claim(SWEEP, owner, 6, 60, 2)
        store.release(owner, [c.key for c in jobs], count_attempt=True)
    assert store.claim(SWEEP, "host:1:c", 6, 60, 2) == []
    assert len(store.claim(SWEEP, "host:1:c", 6, 60, 3)) == 6


def test_renew_extends_only_the_holders_leases(store: Store) -> None:
    jobs = store.claim(SWEEP, "host:1:a", 2, 1.0, 3)
    store.renew("host:1:a", [jobs[0].key], 3600)
    store.renew("host:1:b", [jobs[1].key], 3600)
    assert store.requeue_stale(SWEEP, now=time.time() + 60) == 1
    assert job_states(store)[jobs[0].key] == "running"
    assert job_states(store)[jobs[1].key] == "pending"


def test_requeue_stale_takes_back_expired_leases(store: Store) -> None:
    jobs = store.claim(SWEEP, f"{socket.gethostname()}:{os.getpid()}:live", 3, 30, 3)
    assert store.requeue_stale(SWEEP) == 0  # a live owner with a valid lease keeps its jobs
    assert store.requeue_stale(SWEEP, now=time.time() + 31) == 3
    assert store.counts(SWEEP)["pending"] == 6
    # the attempt lost with the lease is not charged to the job
    assert all(c.attempts == 1 for c in store.claim(SWEEP, "x:1:y", 6, 60, 3) if c.key in {j.key for j in jobs})


def test_requeue_stale_takes_back_jobs_of_a_dead_driver_on_this_host(store: Store) -> None:
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    dead_pid = int(gone.stdout)
    store.claim(SWEEP, f"{socket.gethostname()}:{dead_pid}:gone", 2, 3600, 3)
    store.claim(SWEEP, f"{socket.gethostname()}:{os.getpid()}:live", 2, 3600, 3)
    store.claim(SWEEP, f"another-host.example:{dead_pid}:far", 2, 3600, 3)  # cannot be checked from here
    assert store.requeue_stale(SWEEP) == 2
    assert store.counts(SWEEP) == {"pending": 2, "running": 4, "done": 0, "failed": 0}


def test_a_late_result_after_requeue_is_not_duplicated(store: Store) -> None:
    (job,) = store.claim(SWEEP, "host:1:a", 1, 1.0, 3)
    store.requeue_stale(SWEEP, now=time.time() + 10)
    (again,) = store.claim(SWEEP, "host:1:b", 1, 60, 3)
    assert again.key == job.key
    assert store.commit_results("host:1:a", [ok_result(job.key)]) == 0  # the first owner lost it
    assert store.commit_results("host:1:b", [ok_result(job.key)]) == 1
    assert result_rows(store) == [job.key]


# ---- folds ----------------------------------------------------------------------------------

def test_folds_round_trip_and_missing_classes_are_reported(store: Store) -> None:
    folds = [Fold(0, 0, np.array([0, 3, 5], dtype=np.int32), ()),
             Fold(0, 1, np.array([1, 2, 4], dtype=np.int32), (2,))]
    store.record_folds(SCHEME, "fp0", folds)
    assert store.has_folds(SCHEME, "fp0") and not store.has_folds(SCHEME, "fp1")
    loaded = store.load_folds(SCHEME, "fp0")
    np.testing.assert_array_equal(loaded[(0, 0)], [0, 3, 5])
    np.testing.assert_array_equal(loaded[(0, 1)], [1, 2, 4])
    assert store.fold_warnings(SCHEME, "fp0") == [(0, 1, [2])]
