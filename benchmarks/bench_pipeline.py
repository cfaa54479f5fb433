"""Pipeline overhead, measured side by side in one run.

1. 1,000 jobs of 20 ms of CPU each through ``foldsweep run --workers 2``
   versus the same function through a bare ``joblib.Parallel`` loop with
   2 workers (both as fresh processes, so both pay interpreter and pool
   start-up): the ratio and the overhead per job.
2. The planning time of a re-run over a store holding 100,000 done jobs.

Targets (issue 2): ratio <= 1.15 at 2 workers (<= 2 ms per job); re-run planning <= 2 s.
Run: ``python benchmarks/bench_pipeline.py [--jobs 1000] [--ms 20] [--workers 2]``
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
HERE = Path(__file__).resolve().parent


def env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), str(HERE)])}


def precompile() -> None:
    """Byte-compile the project's modules first, as installing a package does: the timed commands
    then load them as a user's runs do, instead of compiling them on every start (as they would
    where ``PYTHONDONTWRITEBYTECODE`` is set, as on our development machines: 0.1 s a run)."""
    import compileall

    for folder in ("sweep", "workers", "benchmarks"):
        compileall.compile_dir(ROOT / folder, quiet=1)


def spec_text(configs: int, ms: float, store: str) -> str:
    return textwrap.dedent(f"""
        name = "bench"
        store = "{store}"
        [folds]
        k = 5
        [[dataset]]
        name = "iris"
        builtin = "iris"
        [[model]]
        worker = "spin_worker:SPIN"
        fixed = {{ ms = {ms} }}
        grid = {{ index = {list(range(configs))} }}
    """)


def timed(cmd: list[str]) -> tuple[float, str]:
    t0 = time.perf_counter()
    done = subprocess.run(cmd, env=env(), capture_output=True, text=True, check=True)
    return time.perf_counter() - t0, done.stdout


def bare_joblib(jobs: int, ms: float, workers: int) -> float:
    code = (f"from joblib import Parallel, delayed\nfrom spin_worker import spin\n"
            f"Parallel(n_jobs={workers})(delayed(spin)({ms}) for _ in range({jobs}))")
    return timed([sys.executable, "-c", code])[0]


def through_foldsweep(folder: Path, jobs: int, ms: float, workers: int) -> float:
    spec = folder / "overhead.toml"
    spec.write_text(spec_text(jobs // 5, ms, "overhead.sqlite"))
    return timed([sys.executable, "-m", "sweep.cli", "run", str(spec), "--workers", str(workers),
                  "--progress", "none"])[0]


def replanning(folder: Path, done_jobs: int) -> tuple[float, float]:
    """(planning seconds of the re-run, whole re-run command seconds)."""
    import sqlalchemy as sa

    sys.path[:0] = [str(ROOT), str(HERE)]
    from sweep.run import load_inputs, open_store, sync_store
    from sweep.store import jobs_table, results_table

    spec = folder / "replan.toml"
    spec.write_text(spec_text(done_jobs // 5, 20, "replan.sqlite"))
    inputs = load_inputs(spec)
    store = open_store(inputs.spec)
    sync_store(store, inputs)
    now = time.time()
    with store.engine.begin() as conn:  # mark everything done with a synthetic result row
        conn.execute(sa.update(jobs_table).values(state="done", finished_at=now))
        j = jobs_table.c
        jobs = conn.execute(sa.select(j.key, j.dataset, j.fingerprint, j.scheme, j.config_id, j.repeat, j.fold))
        conn.execute(sa.insert(results_table), [
            dict(row._mapping, accuracy=0.5, balanced_accuracy=0.5, kappa=0.0, train_accuracy=0.5, fit_seconds=0.02,
                 predict_seconds=0.0, figures="{}", model_text=None, worker_version="1", host="bench",
                 finished_at=now) for row in jobs.all()])
    store.close()
    seconds, out = timed([sys.executable, "-m", "sweep.cli", "run", str(spec), "--json", "--progress", "none"])
    return json.loads(out)["planning_seconds"], seconds


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--jobs", type=int, default=1000)
    parser.add_argument("--ms", type=float, default=20.0)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--done-jobs", type=int, default=100_000)
    args = parser.parse_args()
    precompile()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        os.environ["FOLDSWEEP_CACHE"] = str(folder / "cache")
        ideal = args.jobs * args.ms / 1000 / args.workers
        bare = bare_joblib(args.jobs, args.ms, args.workers)
        ours = through_foldsweep(folder, args.jobs, args.ms, args.workers)
        print(f"{args.jobs} jobs x {args.ms:g} ms of CPU, {args.workers} workers (ideal {ideal:.2f} s)")
        print(f"  bare joblib.Parallel : {bare:7.2f} s")
        print(f"  foldsweep run        : {ours:7.2f} s")
        print(f"  ratio                : {ours / bare:7.3f}   (target <= 1.15)")
        print(f"  overhead per job     : {(ours - bare) / args.jobs * 1000:7.2f} ms (target <= 2 ms)")
        planning, whole = replanning(folder, args.done_jobs)
        print(f"re-run over {args.done_jobs} done jobs: planning {planning:.2f} s (target <= 2 s), "
              f"whole command {whole:.2f} s")


if __name__ == "__main__":
    main()
