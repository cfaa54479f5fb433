"""End-to-end tests of the ``foldsweep`` command, each driving the real command in a subprocess.

They cover the pipeline issue's "done means": a small sweep runs to completion and a re-run has
nothing left to do; 1 and 2 workers give identical rows; a kill -9 of the driver loses nothing and
duplicates nothing; growing a grid runs only the new cells; failed and timed-out jobs are data;
Ctrl-C keeps what finished. The bad-input catalogue (one line, exit code 2, nothing stored changed)
is tests/test_bad_inputs.py.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sqlite3
import time
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow.parquet as pq
import pytest

from results_schema import read
from tests.conftest import run_foldsweep, start_foldsweep
from tests.plugin_workers import FAILURE_MESSAGE

#: columns that legitimately differ between two runs of the same jobs
VOLATILE = ("fit_seconds", "predict_seconds", "host")

DEMO = """
name = "cli-demo"
[folds]
k = 3
repeats = 1
seed = 1
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
DEMO_JOBS = 2 * 4 * 3

#: the plug-in classifier over iris and a synthetic set, 4 feature counts: 24 jobs
SLOW = """
name = "cli-slow"
[folds]
k = 3
seed = 2
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "synthetic"
synthetic = { n_samples = 60, n_features = 4, n_informative = 2, n_classes = 2 }
[[model]]
worker = "tests.plugin_workers:SLOW_CENTROID"
grid = { n_features = [1, 2, 3, 4] }
"""
SLOW_JOBS = 2 * 4 * 3


# ---- helpers --------------------------------------------------------------------------------

def write_spec(folder: Path, text: str, name: str = "sweep.toml") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    path.write_text(text)
    return path


def ok(proc: Any) -> Any:
    assert proc.returncode == 0, f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    return proc


def run_json(spec: Path, *extra: str, env: dict[str, str] | None = None) -> dict[str, Any]:
    proc = run_foldsweep("run", spec, "--json", "--progress", "none", *extra, env=env)
    assert proc.returncode in (0, 1), f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    summary = json.loads(proc.stdout.strip().splitlines()[-1])
    # sweep.cli: exit code 1 when jobs of the sweep are failed, 0 when none is
    assert proc.returncode == (1 if summary["failed"] else 0), (proc.returncode, summary)
    return summary


def status(spec: Path) -> dict[str, Any]:
    return json.loads(ok(run_foldsweep("status", spec, "--json")).stdout)


def counts(spec: Path) -> dict[str, int]:
    return {k: v for k, v in status(spec).items() if k != "failures"}


def result_rows(spec: Path) -> list[dict[str, Any]]:
    text = ok(run_foldsweep("results", spec, "--format", "json")).stdout
    rows = [json.loads(line) for line in text.splitlines() if line.strip()]
    return sorted(({k: v for k, v in r.items() if k not in VOLATILE} for r in rows), key=lambda r: r["key"])


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def query(db: Path, sql: str) -> list[tuple[Any, ...]]:
    """Read the store directly (read-only), as a second opinion next to the command's own reports."""
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=30)
    try:
        return conn.execute(sql).fetchall()
    finally:
        conn.close()


def done_in_store(db: Path) -> int:
    try:
        return query(db, "SELECT count(*) FROM jobs WHERE state = 'done'")[0][0]
    except sqlite3.Error:  # not created yet
        return 0


def wait_for_done(proc: Any, db: Path, at_least: int, timeout: float = 120) -> int:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        done = done_in_store(db)
        if done >= at_least:
            return done
        assert proc.poll() is None, f"the run ended early: {proc.communicate()}"
        time.sleep(0.1)
    raise AssertionError(f"fewer than {at_least} jobs done after {timeout} s")


def metrics_in_store(db: Path) -> list[tuple[Any, ...]]:
    return query(db, "SELECT key, accuracy, balanced_accuracy, kappa, train_accuracy FROM results ORDER BY key")


def assert_each_job_done_once(db: Path, total: int) -> None:
    assert query(db, "SELECT count(*), count(DISTINCT key) FROM results") == [(total, total)]
    assert query(db, "SELECT state, count(*) FROM jobs GROUP BY state") == [("done", total)]
    assert query(db, "SELECT count(*) FROM jobs j JOIN results r ON r.key = j.key") == [(total,)]


# ---- (1) a small sweep, then nothing left to do; (7) parquet out ---------------------------

@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    spec = write_spec(tmp_path_factory.mktemp("demo"), DEMO)
    summary = run_json(spec, "--workers", "2")
    assert summary["ran"] == DEMO_JOBS and summary["new"] == DEMO_JOBS
    return spec


@pytest.mark.slow
def test_small_sweep_runs_to_completion_and_rerun_has_nothing_to_do(demo: Path) -> None:
    assert status(demo) == {"total": DEMO_JOBS, "done": DEMO_JOBS, "failed": 0, "pending": 0, "running": 0, "gone": 0,
                            "failures": {}}
    again = ok(run_foldsweep("run", demo, "--workers", "2"))
    assert "nothing left to do" in again.stdout and f"{DEMO_JOBS} done" in again.stdout
    assert "(0 new)" in again.stdout
    assert_each_job_done_once(demo.with_suffix(".sqlite"), DEMO_JOBS)
    text = ok(run_foldsweep("status", demo)).stdout
    assert f"{DEMO_JOBS}/{DEMO_JOBS} done" in text


@pytest.mark.slow
def test_results_rows_hold_parameters_and_metrics(demo: Path) -> None:
    rows = result_rows(demo)
    assert len(rows) == DEMO_JOBS and len({r["key"] for r in rows}) == DEMO_JOBS
    assert {r["dataset"] for r in rows} == {"iris", "synthetic"}
    assert sorted({r["max_depth"] for r in rows if r["worker"] == "decision_tree"}) == [2, 3]
    assert sorted({r["n_neighbors"] for r in rows if r["worker"] == "knn"}) == [3, 5]
    for r in rows:
        assert 0.0 <= r["accuracy"] <= 1.0 and 0.0 <= r["balanced_accuracy"] <= 1.0
        assert -1.0 <= r["kappa"] <= 1.0 and 0.0 <= r["train_accuracy"] <= 1.0
    # a depth-3 tree and 3-NN both get iris mostly right (from memory: ~0.93-0.97 in 3-fold CV)
    iris = [r["accuracy"] for r in rows if r["dataset"] == "iris"]
    assert sum(iris) / len(iris) > 0.85


@pytest.mark.slow
def test_results_parquet_has_the_published_columns(demo: Path, tmp_path: Path) -> None:
    out = tmp_path / "results.parquet"
    ok(run_foldsweep("results", demo, "--format", "parquet", "--out", out))
    frame = pd.read_parquet(out)
    assert len(frame) == DEMO_JOBS
    fields = json.loads(read("results.arrow.json"))["fields"]
    schema = pq.read_schema(out)
    for field in fields:
        assert field["name"] in frame.columns, field["name"]
        assert str(schema.field(field["name"]).type) == field["type"], field["name"]
    names = [f["name"] for f in fields]
    assert [c for c in frame.columns if c in names] == names, "the fixed columns keep their published order"
    csv_out = tmp_path / "results.csv"
    ok(run_foldsweep("results", demo, "--format", "csv", "--out", csv_out))
    assert sorted(pd.read_csv(csv_out)["key"]) == sorted(frame["key"])


# ---- (2) determinism ------------------------------------------------------------------------

@pytest.mark.slow
def test_one_and_two_workers_give_identical_rows(demo: Path, tmp_path: Path) -> None:
    single = write_spec(tmp_path / "single", DEMO)
    assert run_json(single, "--workers", "1")["ran"] == DEMO_JOBS
    assert result_rows(single) == result_rows(demo)


# ---- (3) resume after kill -9 ---------------------------------------------------------------

@pytest.mark.slow
def test_kill_9_midway_then_resume_loses_and_duplicates_nothing(tmp_path: Path) -> None:
    spec = write_spec(tmp_path / "killed", SLOW)
    db = spec.with_suffix(".sqlite")
    proc = start_foldsweep("run", spec, "--workers", "2", "--progress", "none",
                           env={"FOLDSWEEP_TEST_DELAY": "0.3"})
    try:
        wait_for_done(proc, db, 4)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the driver and its worker processes, as kill -9 would
        proc.communicate(timeout=30)
    assert proc.returncode == -signal.SIGKILL  # subprocess reports death by signal N as -N (Python docs)
    left = counts(spec)
    assert 4 <= left["done"] < SLOW_JOBS, left
    running_at_kill = left["running"]

    summary = run_json(spec, "--workers", "1")
    assert summary["done"] == SLOW_JOBS and summary["pending"] == 0 and summary["failed"] == 0
    assert summary["ran"] == SLOW_JOBS - left["done"]
    assert summary["requeued"] == running_at_kill
    assert_each_job_done_once(db, SLOW_JOBS)

    reference = write_spec(tmp_path / "uninterrupted", SLOW)
    run_json(reference, "--workers", "1")
    assert metrics_in_store(db) == metrics_in_store(reference.with_suffix(".sqlite"))


# ---- (4) growing a grid ---------------------------------------------------------------------

def test_growing_a_grid_runs_only_the_new_cells(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, one_dataset("{ n_features = [1, 2] }"))
    db = spec.with_suffix(".sqlite")
    assert counts(spec) == {"total": 6, "done": 0, "failed": 0, "pending": 6, "running": 0, "gone": 0}  # before any run
    rows = ("SELECT r.key, r.accuracy, r.finished_at, c.params FROM results r JOIN jobs j ON j.key = r.key "
            "JOIN configurations c ON c.config_id = j.config_id")
    assert run_json(spec, "--workers", "1")["ran"] == 2 * 3
    before = {key: rest for key, *rest in query(db, rows)}

    spec.write_text(one_dataset("{ n_features = [1, 2, 3] }"))
    summary = run_json(spec, "--workers", "1")
    assert summary["new"] == 3 and summary["ran"] == 3 and summary["planned"] == 3 * 3
    after = {key: rest for key, *rest in query(db, rows)}
    assert set(before) < set(after) and len(after) == 3 * 3
    assert {json.loads(after[k][2])["n_features"] for k in set(after) - set(before)} == {3}
    # the old jobs were not run again: same rows, same finishing times
    assert all(after[k] == before[k] for k in before)


# ---- (6) a job that raises; (8) a job over its time limit ----------------------------------

def one_dataset(grid: str, extra: str = "") -> str:
    return f"""
name = "cli-one-dataset"
{extra}
[folds]
k = 3
[[dataset]]
name = "iris"
builtin = "iris"
[[model]]
worker = "tests.plugin_workers:SLOW_CENTROID"
grid = {grid}
"""


def test_a_failing_job_is_recorded_with_its_traceback_and_retried(tmp_path: Path) -> None:
    flag = tmp_path / "fail-now"
    flag.write_text("")
    spec = write_spec(tmp_path, one_dataset(f'{{ fail_if_exists = ["", "{flag}"] }}'))
    summary = run_json(spec, "--workers", "1")
    assert summary["done"] == 3 and summary["failed"] == 3 and summary["pending"] == 0
    report = status(spec)
    assert report["failures"] == {f"RuntimeError: {FAILURE_MESSAGE}": 3}
    assert f"3 failed: RuntimeError: {FAILURE_MESSAGE}" in ok(run_foldsweep("status", spec)).stdout
    errors = query(spec.with_suffix(".sqlite"), "SELECT error FROM jobs WHERE state = 'failed'")
    assert len(errors) == 3
    assert all(e.startswith("Traceback") and "plugin_workers.py" in e and FAILURE_MESSAGE in e for (e,) in errors)

    assert run_json(spec, "--workers", "1")["ran"] == 0, "failed jobs wait for --retry-failed"
    flag.unlink()
    summary = run_json(spec, "--workers", "1", "--retry-failed")
    assert summary["ran"] == 3 and summary["done"] == 6 and summary["failed"] == 0
    assert_each_job_done_once(spec.with_suffix(".sqlite"), 6)


@pytest.mark.slow
def test_a_job_over_its_time_limit_is_failed_as_timed_out(tmp_path: Path) -> None:
    # three configurations: quick; fitting for 60 s; building for 2 s (longer than the limit) then quick
    grid = ("{ delay = [0.0, 60.0], build_delay = [0.0, 2.0] }\n"
            "exclude = [ { delay = 60.0, build_delay = 2.0 } ]")
    spec = write_spec(tmp_path, one_dataset(grid, "time_limit = 1.5"))
    summary = run_json(spec, "--workers", "2")
    # building the estimator (importing its libraries) is not part of the limit: only the slow fits fail
    assert summary["done"] == 6 and summary["failed"] == 3
    assert status(spec)["failures"] == {"timed out": 3}
    rows = query(spec.with_suffix(".sqlite"), "SELECT j.timed_out, j.error, c.params, "
                 "j.finished_at - j.started_at FROM jobs j "
                 "JOIN configurations c ON c.config_id = j.config_id WHERE j.state = 'failed'")
    assert len(rows) == 3
    assert all(t == 1 and "timed out after 1.5 s" in e and json.loads(p)["delay"] == 60.0 for t, e, p, _ in rows)
    # stopped at the limit, not waited for: each took far less than its 60 s (the recorded time also holds a
    # fresh worker's first imports, which on a loaded machine can take several seconds)
    assert all(seconds < 30.0 for *_, seconds in rows), rows


# ---- (9) Ctrl-C -----------------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("backend", ["joblib", "dask"])
def test_ctrl_c_keeps_finished_results_and_leaves_the_rest_pending(tmp_path: Path, backend: str) -> None:
    spec = write_spec(tmp_path, SLOW)
    db = spec.with_suffix(".sqlite")
    proc = start_foldsweep("run", spec, "--workers", "2", "--backend", backend, "--progress", "none",
                           env={"FOLDSWEEP_TEST_DELAY": "0.3"})
    try:
        wait_for_done(proc, db, 2)
        # what Ctrl-C on a terminal sends: SIGINT to the whole foreground process group (the driver
        # and every process it started; common practice)
        os.killpg(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    assert proc.returncode == 130, (out, err)  # 128 + SIGINT: the shells' convention (common practice)
    assert "Traceback" not in err, err
    left = counts(spec)
    assert left["running"] == 0 and left["failed"] == 0
    assert 2 <= left["done"] < SLOW_JOBS and left["done"] + left["pending"] == SLOW_JOBS, left
    assert query(db, "SELECT count(*) FROM results") == [(left["done"],)]
    summary = run_json(spec, "--workers", "1")
    assert summary["ran"] == left["pending"] and summary["done"] == SLOW_JOBS and summary["requeued"] == 0
    assert_each_job_done_once(db, SLOW_JOBS)


RULES = """
name = "rules"
store = "rules.sqlite"
[folds]
k = 3
[[dataset]]
name = "iris"
builtin = "iris"
[[model]]
name = "fuzzy"
worker = "fuzzy_rules"
fixed = { evaluations = 200, population = 20 }
[[model]]
name = "tree"
worker = "decision_tree"
"""


def test_model_prints_the_stored_rule_base_of_one_job(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, RULES)
    assert run_json(spec, "--workers", "1")["done"] == 6
    rows = [r for r in result_rows(spec) if r["worker"] == "fuzzy_rules"]
    row = next(r for r in rows if r["repeat"] == 0 and r["fold"] == 1)
    by_key = ok(run_foldsweep("model", spec, row["key"][:10], "--json"))
    shown = json.loads(by_key.stdout)
    assert shown["key"] == row["key"] and shown["accuracy"] == pytest.approx(row["accuracy"])
    # the same job named by dataset, configuration, repeat and fold
    by_cell = ok(run_foldsweep("model", spec, "--dataset", "iris", "--config", row["config_id"], "--fold", "1"))
    text = by_cell.stdout
    assert shown["model_text"] in text and row["key"][:12] in text.splitlines()[0]
    rules = [line for line in text.splitlines() if line.startswith("IF ")]
    assert len(rules) == row["rules_selected"] >= 1
    # classes and variables by the names scikit-learn's iris data gives them (load_iris target_names
    # and feature_names)
    assert {line.rsplit(" THEN ", 1)[1].split()[0] for line in rules} <= {"setosa", "versicolor", "virginica"}
    assert any("petal" in line for line in rules)


def test_model_names_what_is_wrong_in_one_line(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, RULES)
    run_json(spec, "--workers", "1")
    tree = next(r for r in result_rows(spec) if r["worker"] == "decision_tree")
    for args, words in [(("ffffffffff",), "no planned job matches key"),
                        ((), "--dataset and --config"),
                        (("--dataset", "wine", "--config", tree["config_id"]), "the spec has iris"),
                        ((tree["key"],), "stores no model text")]:
        proc = run_foldsweep("model", spec, *args)
        assert proc.returncode == 2 and proc.stdout == "", (args, proc.stdout, proc.stderr)
        assert words in proc.stderr and len(proc.stderr.strip().splitlines()) == 1, (args, proc.stderr)
