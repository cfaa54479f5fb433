"""Tests of sweep.store: the schema file, refusing foreign stores unchanged, claim/renew/release/commit."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

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

def _open_new_store(path: str) -> str:
    try:
        Store.open(f"sqlite:///{path}").close()
        return "ok"
    except StoreError as exc:
        return str(exc)


def test_drivers_creating_one_new_store_at_once_all_open_it(tmp_path: Path) -> None:
    # the store appears whole under its name (built aside, linked into place): before this, a driver
    # that met the empty file SQLite writes first refused it as damaged (seen 4 times in 30 rounds of 4)
    import multiprocessing

    context = multiprocessing.get_context("spawn")
    with context.Pool(4) as pool:
        for round_ in range(5):
            path = tmp_path / f"s{round_}.sqlite"
            assert pool.map(_open_new_store, [str(path)] * 4) == ["ok"] * 4
    left = {p.name for p in tmp_path.iterdir()}
    assert not any(".new-" in name for name in left), left


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
    from sweep.identity import owner_id

    code = "from sweep.identity import owner_id; print(owner_id())"
    gone = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()
    host, pid, token, boot, namespace, start = gone.split(":")
    store.claim(SWEEP, gone, 1, 3600, 3)  # a driver of this host, boot and PID namespace that exited
    store.claim(SWEEP, owner_id(), 1, 3600, 3)  # this one, alive
    # the same pid in another PID namespace (another container): never judged from here, only by its lease
    store.claim(SWEEP, ":".join([host, pid, token, boot, "4026599999", start]), 1, 3600, 3)
    store.claim(SWEEP, f"another-host.example:{pid}:{token}:{boot}:{namespace}:{start}", 1, 3600, 3)
    store.claim(SWEEP, f"{host}:{pid}:old-format", 1, 3600, 3)  # an identity without boot, namespace, start
    assert store.requeue_stale(SWEEP) == 1  # of 5 claimed jobs (one a driver), only the gone driver's
    assert store.counts(SWEEP)["running"] == 4


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


# ---- one store, several sweeps: a job is shared by every sweep that plans it --------------------

def test_a_job_planned_by_two_sweeps_is_stored_once_and_counted_by_both(store: Store) -> None:
    assert store.sync_jobs("other", SCHEME, planned(8)) == 2  # 6 of its 8 jobs are store-test's already
    (job,) = store.claim("other", "host:1:b", 1, 60, 3)
    store.commit_results("host:1:b", [ok_result(job.key)])
    assert store.counts(SWEEP)["done"] == 1 and store.counts("other")["done"] == 1
    assert len(store.claim(SWEEP, "host:1:a", 10, 60, 3)) == 5  # never a job the other one holds or did
    assert len(store.claim("other", "host:1:b", 10, 60, 3)) == 2


def test_a_smaller_plan_of_one_sweep_leaves_the_others_counts_alone(store: Store) -> None:
    store.sync_jobs("other", SCHEME, planned(6))
    store.sync_jobs(SWEEP, SCHEME, planned(2))
    assert sum(store.counts(SWEEP).values()) == 2 and sum(store.counts("other").values()) == 6
    assert len(store.job_states([j.key for j in planned(6)])) == 6


def test_claimed_jobs_carry_the_claiming_sweeps_name_for_the_data(store: Store) -> None:
    renamed = [j._replace(dataset="flowers") for j in planned(6)]
    store.sync_jobs("other", SCHEME, renamed)
    assert {c.dataset for c in store.claim("other", "host:1:b", 6, 60, 3)} == {"flowers"}
    assert store.sweep_fingerprints("other") == {"flowers": {"fp0"}}
    assert store.sweep_fingerprints(SWEEP) == {"iris": {"fp0"}}


# ---- reads: no write lock, read-only stores --------------------------------------------------

def test_a_read_does_not_wait_for_a_writer(store: Store) -> None:
    writer = sqlite3.connect(store.url[len("sqlite:///"):], isolation_level=None)
    try:
        writer.execute("BEGIN IMMEDIATE")  # a driver in the middle of a commit
        writer.execute("UPDATE jobs SET attempts = 1")
        started = time.monotonic()
        reader = Store.open(store.url, create=False)
        try:
            assert reader.counts(SWEEP)["pending"] == 6
        finally:
            reader.close()
        assert time.monotonic() - started < 5  # the busy timeout is 60 s: a read that queued would show
    finally:
        writer.execute("ROLLBACK")
        writer.close()


def test_a_store_opened_for_reading_is_opened_read_only(store: Store) -> None:
    reader = Store.open(store.url, create=False)
    try:
        with pytest.raises(StoreError, match="cannot be written.*nothing committed was lost"):
            reader.sync_jobs(SWEEP, SCHEME, planned(7))
    finally:
        reader.close()


def test_durability_is_synchronous_full(store: Store) -> None:
    # common practice (sqlite.org/pragma.html#pragma_synchronous): in WAL mode, NORMAL may lose the
    # transactions since the last checkpoint on a power cut or OS crash; FULL syncs the log at each commit
    with store.engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == 2  # 2 = FULL
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"


# ---- end to end: two specs on one store, a grid changed under one name, a dataset renamed ---------

SHARED = """
name = "a"
store = "shared.sqlite"
[folds]
k = 3
seed = 4
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "wine"
builtin = "wine"
[[model]]
worker = "decision_tree"
grid = { max_depth = [1, 2, 3, 4, 5] }
"""
SHARED_JOBS = 2 * 5 * 3


def _spec(folder: Path, name: str, text: str) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(text)
    return path


def _json(*args: Any) -> Any:
    from tests.conftest import run_foldsweep

    proc = run_foldsweep(*args, "--json")
    assert proc.returncode == 0 and not proc.stderr.strip(), proc.stderr  # no warning either
    text = proc.stdout.strip()
    return json.loads(text if args[0] != "run" else text.splitlines()[-1])  # run prints progress first


def _status(spec: Path) -> dict[str, int]:
    return {k: v for k, v in _json("status", spec).items() if k != "failures"}


def _all_done(n: int) -> dict[str, int]:
    return {"total": n, "done": n, "failed": 0, "pending": 0, "running": 0, "gone": 0}


@pytest.mark.slow
def test_two_specs_differing_only_by_name_share_one_store(tmp_path: Path) -> None:
    a = _spec(tmp_path, "a", SHARED)
    b = _spec(tmp_path, "b", SHARED.replace('name = "a"', 'name = "b"'))
    assert _json("run", a, "--workers", "1", "--progress", "none")["ran"] == SHARED_JOBS
    summary = _json("run", b, "--workers", "1", "--progress", "none")
    assert (summary["ran"], summary["new"], summary["done"], summary["pending"]) == (0, 0, SHARED_JOBS, 0)
    assert _status(b) == _status(a) == _all_done(SHARED_JOBS)
    best_a, best_b = _json("best", a), _json("best", b)
    assert best_a == best_b and {r["folds"] for r in best_b} == {3}
    db = tmp_path / "shared.sqlite"
    with sqlite3.connect(db) as conn:  # one job and one result per cell, planned by both sweeps
        assert conn.execute("SELECT count(*) FROM results").fetchone() == (SHARED_JOBS,)
        assert conn.execute("SELECT sweep, count(*) FROM sweep_jobs GROUP BY sweep").fetchall() == [
            ("a", SHARED_JOBS), ("b", SHARED_JOBS)]
    conn.close()


@pytest.mark.slow
def test_a_grid_changed_under_one_name_keeps_the_first_grids_jobs_done(tmp_path: Path) -> None:
    first = _spec(tmp_path, "first", SHARED)
    second = _spec(tmp_path, "second", SHARED.replace("[1, 2, 3, 4, 5]", "[4, 5, 6]"))  # also name = "a"
    _json("run", first, "--workers", "1", "--progress", "none")
    assert _json("run", second, "--workers", "1", "--progress", "none")["ran"] == 2 * 1 * 3  # only depth 6
    assert _status(first) == _all_done(SHARED_JOBS)  # depths 1-3 are no longer "a"'s plan, still done
    assert _status(second) == _all_done(2 * 3 * 3)
    table = _json("table", first)
    assert len(table["columns"]) == 5 and len(table["rows"]) == 2, table  # every cell of the first grid
    assert all(r["complete"] and r["folds"] == 3 for r in _json("best", first))
    summary = _json("run", first, "--workers", "1", "--progress", "none")
    assert (summary["ran"], summary["done"]) == (0, SHARED_JOBS)


@pytest.mark.slow
def test_a_dataset_renamed_in_the_spec_is_reported_under_its_new_name(tmp_path: Path) -> None:
    spec = _spec(tmp_path, "a", SHARED)
    _json("run", spec, "--workers", "1", "--progress", "none")
    spec.write_text(SHARED.replace('name = "iris"', 'name = "flowers"'))
    assert _json("run", spec, "--workers", "1", "--progress", "none")["ran"] == 0  # same content, same jobs
    assert _status(spec) == _all_done(SHARED_JOBS)
    best = _json("best", spec)  # _json: no RuntimeWarning or other line on stderr
    assert sorted(r["dataset"] for r in best) == ["flowers", "wine"]
    assert all(r["folds"] == 3 and r["complete"] for r in best), best
    from tests.conftest import run_foldsweep

    rows = run_foldsweep("results", spec, "--format", "json").stdout.splitlines()
    assert {json.loads(r)["dataset"] for r in rows} == {"flowers", "wine"}
    text = run_foldsweep("best", spec).stdout
    assert "iris" not in text and "no finished jobs" not in text and "incomplete" not in text, text


# ---- a read-only store is readable by status and every report ----------------------------------

def _read_everything(spec: Path, out: Path) -> None:
    """status, results, model and every report on ``spec``: each exits 0 with no line on stderr."""
    from tests.conftest import run_foldsweep

    rows = [json.loads(r) for r in run_foldsweep("results", spec, "--format", "json").stdout.splitlines()]
    assert len(rows) == SHARED_JOBS
    configs = sorted({r["config_id"] for r in rows})
    commands = [["status"], ["results"], ["model", rows[0]["key"]], ["best"], ["table"],
                ["compare", configs[0], configs[1]], ["rank"], ["plot", "--out", str(out)]]
    for command in commands:
        proc = run_foldsweep(command[0], spec, *command[1:])
        if command[0] == "model":  # read, and found to be a decision tree's: no rule base to print
            assert proc.returncode == 2 and "stores no model text" in proc.stderr, proc.stderr
            continue
        assert proc.returncode == 0 and not proc.stderr.strip(), (command, proc.stderr)
    assert out.stat().st_size > 0


@pytest.mark.slow
def test_a_read_only_store_is_readable_by_status_and_every_report(tmp_path: Path) -> None:
    src = tmp_path / "src"
    src.mkdir()
    spec = _spec(src, "a", SHARED)
    _json("run", spec, "--workers", "2", "--progress", "none")
    db = src / "shared.sqlite"
    assert not (src / "shared.sqlite-wal").exists()
    before = digest(db)
    mounted = tmp_path / "ro"
    mounted.mkdir()
    shutil.copytree(src, tmp_path / "copy")
    # a read-only bind mount: even root cannot write there (a file's mode 0444 does not stop root)
    if subprocess.run(["mount", "--bind", "-o", "ro", str(tmp_path / "copy"), str(mounted)],
                      capture_output=True).returncode != 0:
        mounted = None
    try:
        if mounted is not None:
            assert not os.access(mounted, os.W_OK)
            _read_everything(mounted / "a.toml", tmp_path / "ranks-mounted.png")
            assert digest(mounted / "shared.sqlite") == before
            assert sorted(p.name for p in mounted.iterdir()) == ["a.toml", "shared.sqlite"]
    finally:
        if mounted is not None:
            subprocess.run(["umount", "-l", str(mounted)], capture_output=True)
    db.chmod(0o444)
    src.chmod(0o555)
    try:
        _read_everything(spec, tmp_path / "ranks.png")
    finally:
        src.chmod(0o755)
    assert digest(db) == before
    if mounted is None:
        pytest.skip("a read-only bind mount is not permitted here (needs CAP_SYS_ADMIN): checked mode 0444 only")


@pytest.mark.slow
@pytest.mark.parametrize("folder", ["what?now", "100%25 sure#1"])
def test_a_store_path_is_a_path_even_with_url_characters(tmp_path: Path, folder: str) -> None:
    # "?", "%" and "#" in a folder's name are part of the path, not a URL's query, escape or fragment
    home = tmp_path / folder
    home.mkdir()
    spec = _spec(home, "a", SHARED.replace("[1, 2, 3, 4, 5]", "[1]"))
    assert _json("run", spec, "--workers", "1", "--progress", "none")["done"] == 2 * 3
    assert sorted(p.name for p in home.iterdir()) == ["a.toml", "shared.sqlite"]
    assert sorted(p.name for p in tmp_path.iterdir()) == [folder]
    assert _status(spec) == _all_done(2 * 3)
