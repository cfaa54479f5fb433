"""Faults, each with real processes and real signals (no mocks of the engine).

(a) a dask worker process SIGKILLed mid-job: its jobs run again elsewhere, the sweep completes;
(b) a job that kills its worker every time (``os._exit``): failed after ``max_attempts`` with the
    reason, the rest completes (joblib and dask);
(c) the driver SIGKILLed again and again while it commits results constantly: the SQLite store
    passes ``PRAGMA integrity_check``, nothing is half-written, no committed result is lost or
    changed;
(d) two drivers started together on one spec and one SQLite tracker: every job done exactly once,
    none ran to completion twice, in about half the wall time of one driver;
(e) a job over its ``time_limit`` is stopped and recorded as timed out (joblib and dask);
(f) SIGTERM (and SIGHUP) to the driver mid-run, as a batch scheduler sends at the wall time (joblib
    and dask): every finished result committed, no job left running, exit 128 + the signal;
(g) the driver SIGKILLed mid-run (joblib and dask): no process of the run alive 10 s later, ``status``
    shows its jobs as held by a driver that is gone, the next run removes its scratch folder and
    does exactly the rest;
(h) a second driver in another PID namespace (``unshare``, as in another container) on the same
    host and tracker: both finish, no crash, every job done once.

Each test prints its figures (``pytest -s``): jobs planned, done, duplicates, lost results and the
re-runs the fault caused (runs to completion beyond one per job, from the worker's own log).
"""

from __future__ import annotations

import collections
import json
import os
import random
import signal
import sqlite3
import subprocess
import time
from pathlib import Path
from typing import Any

import pytest

from tests.conftest import run_foldsweep, start_foldsweep

pytestmark = pytest.mark.slow

WORKER = "tests.fault_workers:FAULTY"


# ---- helpers --------------------------------------------------------------------------------

def write_spec(folder: Path, *, configs: int, seconds: float = 0.0, text_kb: int = 0, crash: bool = False,
               time_limit: float | None = None, max_attempts: int = 2, slow: float | None = None) -> Path:
    """A spec of ``configs`` configurations × 2 folds of iris (plus one crashing configuration)."""
    folder.mkdir(parents=True, exist_ok=True)
    head = f"max_attempts = {max_attempts}\n" + (f"time_limit = {time_limit}\n" if time_limit else "")
    text = f"""name = "faults"
{head}
[folds]
k = 2
seed = 3
[[dataset]]
name = "iris"
builtin = "iris"
[[model]]
name = "ok"
worker = "{WORKER}"
fixed = {{ seconds = {seconds}, text_kb = {text_kb} }}
grid = {{ index = {list(range(configs))} }}
"""
    if crash:
        text += f'[[model]]\nname = "crasher"\nworker = "{WORKER}"\nfixed = {{ crash = true, index = 999999 }}\n'
    if slow is not None:
        text += f'[[model]]\nname = "slow"\nworker = "{WORKER}"\nfixed = {{ seconds = {slow}, index = 888888 }}\n'
    path = folder / "faults.toml"
    path.write_text(text)
    return path


def watch_env(folder: Path) -> dict[str, str]:
    return {"FOLDSWEEP_FAULT_LOG": str(folder / "completed.log"),
            "FOLDSWEEP_FAULT_STARTED": str(folder / "started.log")}


def ok(proc: Any) -> Any:
    assert proc.returncode == 0, f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    return proc


def run_json(spec: Path, *extra: str, env: dict[str, str] | None = None) -> dict[str, Any]:
    proc = run_foldsweep("run", spec, "--json", "--progress", "none", *extra, env=env, timeout=240)
    assert proc.returncode in (0, 1), f"exit {proc.returncode}\nstdout:\n{proc.stdout}\nstderr:\n{proc.stderr}"
    summary = json.loads(proc.stdout.strip().splitlines()[-1])
    # sweep.cli: exit code 1 when jobs of the sweep are failed, 0 when none is
    assert proc.returncode == (1 if summary["failed"] else 0), (proc.returncode, summary)
    return summary


def query(db: Path, sql: str) -> list[tuple[Any, ...]]:
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=30)
    try:
        return conn.execute(sql).fetchall()
    finally:
        conn.close()


def store_of(spec: Path) -> Path:
    return spec.with_suffix(".sqlite")


def lines(path: Path) -> list[str]:
    return path.read_text().split() if path.exists() else []


def check_exactly_once(spec: Path) -> dict[str, int]:
    """The store's invariants; returns the counts for the figures."""
    db = store_of(spec)
    states = dict(query(db, "SELECT state, count(*) FROM jobs GROUP BY state"))
    results = query(db, "SELECT count(*), count(DISTINCT key) FROM results")[0]
    orphans = query(db, "SELECT count(*) FROM results r JOIN jobs j ON j.key = r.key WHERE j.state != 'done'")[0][0]
    missing = query(db, "SELECT count(*) FROM jobs j LEFT JOIN results r ON j.key = r.key "
                        "WHERE j.state = 'done' AND r.key IS NULL")[0][0]
    assert results[0] == results[1], "a job has two result rows"
    assert orphans == 0, "a result row belongs to a job that is not done"
    assert missing == 0, "a done job has no result row"
    assert results[0] == states.get("done", 0)
    return {"planned": sum(states.values()), "done": states.get("done", 0), "failed": states.get("failed", 0),
            "duplicates": results[0] - results[1]}


def reruns(folder: Path, jobs_done: int) -> tuple[int, int]:
    """(runs to completion beyond one per done job, jobs that ran to completion more than once)."""
    runs = collections.Counter(lines(folder / "completed.log"))
    assert len(runs) == jobs_done, "the worker's log disagrees with the store about which jobs completed"
    return sum(runs.values()) - len(runs), sum(1 for n in runs.values() if n > 1)


def figures(name: str, **values: Any) -> None:
    print(f"\nFAULT FIGURES {name}: " + json.dumps(values, sort_keys=True))


def wait_for_lines(path: Path, n: int, timeout: float = 120.0,
                   proc: subprocess.Popen[str] | None = None) -> list[str]:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        found = lines(path)
        if len(found) >= n or (proc is not None and proc.poll() is not None):
            return found
        time.sleep(0.02)
    raise AssertionError(f"{path}: fewer than {n} lines after {timeout} s")


def finish(proc: subprocess.Popen[str], timeout: float = 240) -> tuple[str, str]:
    out, err = proc.communicate(timeout=timeout)
    assert proc.returncode == 0, f"exit {proc.returncode}\nstdout:\n{out}\nstderr:\n{err}"
    return out, err


# ---- (a) a dask worker process SIGKILLed mid-job -------------------------------------------------

def test_dask_worker_sigkilled_mid_job_its_jobs_run_elsewhere(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, configs=5, seconds=0.5)
    planned = 10
    env = watch_env(tmp_path)
    proc = start_foldsweep("run", spec, "--backend", "dask", "--workers", "2", "--progress", "none", "--json",
                           env=env)
    try:
        victim = int(wait_for_lines(tmp_path / "started.log", 1)[0])
        assert victim != proc.pid
        os.kill(victim, signal.SIGKILL)  # a worker process, inside its first job
        out, _ = finish(proc)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    summary = json.loads(out.strip().splitlines()[-1])
    counts = check_exactly_once(spec)
    assert counts == {"planned": planned, "done": planned, "failed": 0, "duplicates": 0}
    assert summary["ran"] == planned
    # killed from outside, the job is innocent: the tasks in flight ran again (each alone) without an
    # attempt charged to any of them (a worker death is charged only to a job that died alone)
    retried = query(store_of(spec), "SELECT count(*) FROM jobs WHERE attempts > 1")[0][0]
    assert retried == 0
    extra, twice = reruns(tmp_path, planned)
    figures("a dask worker SIGKILL", planned=planned, done=counts["done"], duplicates=0, lost=0,
            jobs_with_second_attempt=retried, reruns_to_completion=extra, starts=len(lines(tmp_path / "started.log")))


# ---- (b) a job that kills its worker every time ---------------------------------------------------

@pytest.mark.parametrize("backend", ["joblib", "dask"])
def test_job_killing_its_worker_is_failed_after_max_attempts(tmp_path: Path, backend: str) -> None:
    spec = write_spec(tmp_path, configs=4, seconds=0.05, crash=True, max_attempts=2)
    summary = run_json(spec, "--backend", backend, "--workers", "2", env=watch_env(tmp_path))
    assert (summary["planned"], summary["done"], summary["failed"], summary["pending"]) == (10, 8, 2, 0)
    counts = check_exactly_once(spec)
    assert counts == {"planned": 10, "done": 8, "failed": 2, "duplicates": 0}
    failed = query(store_of(spec), "SELECT attempts, error FROM jobs WHERE state = 'failed'")
    for attempts, error in failed:
        assert attempts == 2
        assert error.startswith("worker process died (") and error.endswith("gave up after 2 attempts"), error
    status = json.loads(ok(run_foldsweep("status", spec, "--json")).stdout)
    assert list(status["failures"].values()) == [2], status["failures"]  # one cause, one message
    # the crashing configuration never completes; each of the 8 others is in the log
    extra, twice = reruns(tmp_path, 8)
    crash_starts = len(lines(tmp_path / "started.log")) - sum(1 for _ in lines(tmp_path / "completed.log"))
    figures(f"b os._exit every time ({backend})", planned=10, done=8, failed=2, duplicates=0, lost=0,
            crash_attempts=sum(a for a, _ in failed), reruns_to_completion_of_innocent_jobs=extra,
            starts_not_completed=crash_starts)


# ---- (c) the driver SIGKILLed during result commits -----------------------------------------------

def _snapshot(db: Path) -> dict[str, tuple[Any, ...]]:
    return {k: rest for k, *rest in query(db, "SELECT key, accuracy, kappa, finished_at, length(model_text) "
                                              "FROM results")}


def test_driver_sigkilled_during_commits_loses_and_half_writes_nothing(tmp_path: Path) -> None:
    # 240 jobs of 10 ms with 256 KiB of model text each: a commit of 50 results writes 12.5 MiB, so
    # that much of the driver's time is spent inside commits
    spec = write_spec(tmp_path, configs=120, seconds=0.01, text_kb=256)
    planned = 240
    db = store_of(spec)
    rng = random.Random(6)
    env = watch_env(tmp_path)
    kept: dict[str, tuple[Any, ...]] = {}
    kills = 0
    for _ in range(4):
        started_before = len(lines(tmp_path / "started.log"))
        proc = start_foldsweep("run", spec, "--workers", "1", "--progress", "none", env=env)
        try:
            wait_for_lines(tmp_path / "started.log", started_before + 1, proc=proc)
            time.sleep(rng.uniform(0.1, 1.5))
            if proc.poll() is not None:
                break  # it finished before the kill
            os.killpg(proc.pid, signal.SIGKILL)
            kills += 1
        finally:
            proc.communicate()
        assert query(db, "PRAGMA integrity_check") == [("ok",)]
        check_exactly_once(spec)
        now = _snapshot(db)
        assert all(now.get(k) == v for k, v in kept.items()), "a committed result was lost or changed"
        kept = now
    summary = run_json(spec, "--workers", "1", env=env)
    assert query(db, "PRAGMA integrity_check") == [("ok",)]
    counts = check_exactly_once(spec)
    assert counts == {"planned": planned, "done": planned, "failed": 0, "duplicates": 0}
    final = _snapshot(db)
    lost = sum(1 for k, v in kept.items() if final.get(k) != v)
    assert lost == 0
    assert all(v[3] == 256 * 1024 for v in final.values())  # no truncated model text
    extra, _ = reruns(tmp_path, planned)
    assert kills >= 2
    figures("c driver SIGKILL during commits", planned=planned, done=counts["done"], duplicates=0, lost=lost,
            kills=kills, committed_before_last_kill=len(kept), requeued_by_last_run=summary["requeued"],
            reruns_to_completion=extra)


# ---- (d) two drivers at once on one SQLite tracker --------------------------------------------------

def _timed_drivers(spec: Path, n: int, env: dict[str, str]) -> tuple[float, list[dict[str, Any]]]:
    t0 = time.perf_counter()
    procs = [start_foldsweep("run", spec, "--workers", "1", "--claim", "2", "--progress", "none", "--json", env=env)
             for _ in range(n)]
    outs = [finish(p)[0] for p in procs]
    return time.perf_counter() - t0, [json.loads(o.strip().splitlines()[-1]) for o in outs]


def test_two_drivers_share_one_tracker_each_job_once_in_half_the_time(tmp_path: Path) -> None:
    planned = 40  # 40 jobs of 0.2 s: 8 s of work for one driver
    one = write_spec(tmp_path / "one", configs=20, seconds=0.2)
    two = write_spec(tmp_path / "two", configs=20, seconds=0.2)
    single, _ = _timed_drivers(one, 1, watch_env(tmp_path / "one"))
    pair, summaries = _timed_drivers(two, 2, watch_env(tmp_path / "two"))
    counts = check_exactly_once(two)
    assert counts == {"planned": planned, "done": planned, "failed": 0, "duplicates": 0}
    assert sum(s["ran"] for s in summaries) == planned  # together they ran each job once
    assert all(s["ran"] > 0 for s in summaries)  # both took part
    extra, twice = reruns(tmp_path / "two", planned)
    assert (extra, twice) == (0, 0), "a job ran to completion twice"
    figures("d two drivers", planned=planned, done=counts["done"], duplicates=0, lost=0, reruns=extra,
            ran_by_each=[s["ran"] for s in summaries], one_driver_s=round(single, 2), two_drivers_s=round(pair, 2),
            ratio=round(pair / single, 3))
    assert pair < 0.8 * single, f"two drivers took {pair:.1f} s, one took {single:.1f} s"


# ---- (e) a job over its time limit --------------------------------------------------------------------

@pytest.mark.parametrize("backend", ["joblib", "dask"])
def test_job_over_time_limit_is_stopped_and_recorded_timed_out(tmp_path: Path, backend: str) -> None:
    spec = write_spec(tmp_path, configs=2, seconds=0.05, time_limit=1.5, slow=60.0)
    env = watch_env(tmp_path)
    t0 = time.perf_counter()
    summary = run_json(spec, "--backend", backend, "--workers", "2", env=env)
    took = time.perf_counter() - t0
    assert (summary["done"], summary["failed"], summary["pending"]) == (4, 2, 0)
    counts = check_exactly_once(spec)
    rows = query(store_of(spec), "SELECT timed_out, error, finished_at - started_at FROM jobs WHERE state = 'failed'")
    assert len(rows) == 2
    for timed_out, error, seconds in rows:
        assert timed_out == 1 and error == "timed out after 1.5 s"
        assert seconds < 30  # stopped near its limit, not left to run its 60 s
    status = json.loads(ok(run_foldsweep("status", spec, "--json")).stdout)
    assert status["failures"] == {"timed out": 2}
    assert took < 60  # the 60 s jobs were stopped
    figures(f"e time limit ({backend})", planned=6, done=counts["done"], timed_out=2, duplicates=0, lost=0,
            wall_s=round(took, 1))


# ---- (f) SIGTERM / SIGHUP mid-run --------------------------------------------------------------------

@pytest.mark.parametrize("backend, signum", [("joblib", signal.SIGTERM), ("dask", signal.SIGTERM),
                                             ("joblib", signal.SIGHUP)])
def test_sigterm_commits_what_finished_and_gives_the_rest_back(tmp_path: Path, backend: str, signum: int) -> None:
    # jobs of 2 s, two at a time: the signal comes 0.3 s after the first two completed, while the
    # next two are mid-job (what a batch scheduler does at the wall time: SIGTERM to the driver)
    spec = write_spec(tmp_path, configs=5, seconds=2.0)
    planned = 10
    env = watch_env(tmp_path)
    proc = start_foldsweep("run", spec, "--backend", backend, "--workers", "2", "--progress", "none", "--json",
                           env=env)
    try:
        wait_for_lines(tmp_path / "completed.log", 2, proc=proc)
        time.sleep(0.3)
        os.kill(proc.pid, signum)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    assert proc.returncode == 128 + signum, (proc.returncode, out, err)  # the shells' convention (common practice)
    assert "Traceback" not in err, err
    summary = json.loads(out.strip().splitlines()[-1])
    assert summary["interrupted"] and summary["signal"] == signum
    states = dict(query(store_of(spec), "SELECT state, count(*) FROM jobs GROUP BY state"))
    assert states.get("running", 0) == 0, states
    counts = check_exactly_once(spec)
    completed = len(set(lines(tmp_path / "completed.log")))
    assert counts["done"] == completed >= 2, (counts, completed)  # every finished result was committed
    assert query(store_of(spec), "SELECT max(attempts) FROM jobs WHERE state = 'pending'") == [(0,)]
    summary = run_json(spec, "--backend", backend, "--workers", "2", env=env)  # a re-run does the rest
    assert summary["ran"] == planned - completed and summary["requeued"] == 0
    assert check_exactly_once(spec)["done"] == planned
    figures(f"f {signal.Signals(signum).name} ({backend})", planned=planned, committed_before_signal=completed,
            running_after=0, exit_code=128 + signum)


# ---- (g) the driver SIGKILLed mid-run ------------------------------------------------------------------

def _scratch() -> set[str]:
    import glob
    import tempfile

    return {f for f in glob.glob(os.path.join(tempfile.gettempdir(), "foldsweep-data-*"))
            if os.path.exists(os.path.join(f, ".lock"))}


@pytest.mark.parametrize("backend", ["joblib", "dask"])
def test_driver_sigkilled_leaves_no_process_and_the_next_run_cleans_up(tmp_path: Path, backend: str) -> None:
    # common practice: a killed parent must not leave its worker processes running (they would keep
    # cores and memory, and hold the terminal's output open: `run ... | tee` would hang)
    import psutil

    spec = write_spec(tmp_path, configs=5, seconds=1.0)
    planned = 10
    env = watch_env(tmp_path)
    before = _scratch()
    proc = start_foldsweep("run", spec, "--backend", backend, "--workers", "2", "--progress", "none", env=env)
    try:
        wait_for_lines(tmp_path / "started.log", 2, proc=proc)
        helpers = [p for p in psutil.Process(proc.pid).children(recursive=True)]
        assert len([p for p in helpers if "resource_tracker" not in " ".join(p.cmdline())]) >= 2
        ours = _scratch() - before
        os.kill(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    killed_at = time.monotonic()
    gone, alive = psutil.wait_procs(helpers, timeout=10)
    assert alive == [], [(p.pid, p.cmdline()) for p in alive]
    ended_within = time.monotonic() - killed_at
    # status: the dead driver's jobs are not "running"
    status = json.loads(ok(run_foldsweep("status", spec, "--json")).stdout)
    assert status["running"] == 0 and status["gone"] >= 1, status
    text = ok(run_foldsweep("status", spec)).stdout
    assert "held by a driver that is gone" in text, text
    assert len(ours) == 1 and all(os.path.isdir(f) for f in ours)
    summary = run_json(spec, "--backend", backend, "--workers", "2", env=env)
    assert summary["requeued"] == status["gone"]
    assert not any(os.path.exists(f) for f in ours), "the dead driver's scratch folder is still there"
    counts = check_exactly_once(spec)
    assert counts == {"planned": planned, "done": planned, "failed": 0, "duplicates": 0}
    figures(f"g driver SIGKILL ({backend})", processes_left=0, ended_within_s=round(ended_within, 1),
            held_by_gone=status["gone"], scratch_left=0)


# ---- (h) a second driver in another PID namespace --------------------------------------------------------

def _unshare_works() -> str | None:
    """None if ``unshare --pid --fork --mount-proc`` may be used here, else why not."""
    import shutil

    if shutil.which("unshare") is None:
        return "no unshare command"
    probe = subprocess.run(["unshare", "--pid", "--fork", "--mount-proc", "true"], capture_output=True, text=True)
    return None if probe.returncode == 0 else f"unshare not permitted here: {probe.stderr.strip()}"


def test_second_driver_in_another_pid_namespace_is_not_taken_for_dead(tmp_path: Path) -> None:
    why = _unshare_works()
    if why is not None:
        if os.environ.get("CI") or os.environ.get("FOLDSWEEP_REQUIRE_PG"):
            pytest.fail(why)  # required in CI
        pytest.skip(why)
    from tests.conftest import foldsweep_command, subprocess_env

    spec = write_spec(tmp_path, configs=15, seconds=0.3)
    planned = 30
    env = watch_env(tmp_path)
    args = ("run", spec, "--workers", "1", "--claim", "2", "--progress", "none", "--json")
    outside = start_foldsweep(*args, env=env)
    # the store made and the first job started (two drivers creating one new SQLite file at the same
    # instant is another matter), then the second driver, in a PID namespace of its own
    wait_for_lines(tmp_path / "started.log", 1, proc=outside)
    inside = subprocess.Popen(["unshare", "--pid", "--fork", "--mount-proc", *foldsweep_command(*args)],
                              env=subprocess_env(env), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    outs = [finish(outside), finish(inside)]
    summaries = [json.loads(o.strip().splitlines()[-1]) for o, _ in outs]
    counts = check_exactly_once(spec)
    assert counts == {"planned": planned, "done": planned, "failed": 0, "duplicates": 0}
    assert all(s["ran"] > 0 for s in summaries), summaries  # both took part
    assert sum(s["ran"] for s in summaries) == planned
    extra, twice = reruns(tmp_path, planned)
    assert (extra, twice) == (0, 0), "a job ran to completion twice"
    figures("h a driver in another PID namespace", planned=planned, ran_by_each=[s["ran"] for s in summaries],
            duplicates=0, reruns=extra)
