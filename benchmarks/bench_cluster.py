"""Backends side by side in one run: the same jobs of ``--ms`` of CPU each (default 200 x 2 s).

1. ``foldsweep run --backend joblib --workers 2`` (loky worker processes);
2. ``foldsweep run --backend dask --workers 2`` (an embedded LocalCluster: 2 processes over loopback TLS);
3. (``--backends ...,drivers``) two ``foldsweep run --workers 1`` drivers started together on one SQLite tracker.

Each is timed as whole commands (fresh processes: interpreter, imports, pool or cluster start-up and
shutdown included) and printed as a ratio to the ideal, total CPU work / workers (200 x 2 / 2 = 200 s).
The ``--json`` summary's own ``seconds`` (from the command's start to the end of its run) is shown too.

On a shared machine the jobs themselves stretch with the load (a job of 2 s of CPU takes longer than
2 s of wall time), which the first ratio charges to foldsweep. The last column divides instead by the
work as the jobs measured it (the sum of their own wall times, from the tracker, / workers): what the
machinery adds around the jobs, whatever the load.

``--against PATH``: the same runs, interleaved, with the foldsweep source tree at PATH too (e.g. an
earlier commit exported with ``git archive``), printed beside this tree's.

Targets: jobs of seconds, as fold jobs are (the default), within 1.03x of the ideal for joblib and
dask (issue 13); 400 jobs of 50 ms (``--jobs 400 --ms 50``), within 1.2x (issue 6).

Run: ``python benchmarks/bench_cluster.py [--jobs 200] [--ms 2000] [--workers 2] [--repeat 3]
[--backends joblib,dask,drivers] [--against PATH]``
"""

from __future__ import annotations

import argparse
import json
import os
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_pipeline import HERE, ROOT, precompile, spec_text  # noqa: E402 - the same spec and bytecode


def write_spec(folder: Path, jobs: int, ms: float) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    spec = folder / "bench.toml"
    spec.write_text(spec_text(jobs // 5, ms, "bench.sqlite"))
    return spec


def command(spec: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "sweep.cli", "run", str(spec), "--progress", "none", "--json", *extra]


def timed(tree: Path, *commands: list[str]) -> tuple[float, list[dict[str, float]]]:
    """Wall time of ``commands`` started together (importing foldsweep from ``tree``), and their summaries."""
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(tree), str(HERE)])}
    t0 = time.perf_counter()
    procs = [subprocess.Popen(c, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for c in commands]
    outs = []
    for p in procs:
        out, err = p.communicate()
        if p.returncode != 0:
            raise SystemExit(f"{' '.join(p.args)} failed:\n{err}")
        outs.append(json.loads(out.strip().splitlines()[-1]))
    return time.perf_counter() - t0, outs


def job_seconds(spec: Path) -> float:
    """The jobs' own wall time, summed, as the tracker recorded it."""
    conn = sqlite3.connect(spec.parent / "bench.sqlite")
    try:
        return float(conn.execute("SELECT sum(finished_at - started_at) FROM jobs WHERE state = 'done'")
                     .fetchone()[0])
    finally:
        conn.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=200)
    parser.add_argument("--ms", type=float, default=2000.0)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=3, help="runs of each backend, interleaved (median shown)")
    parser.add_argument("--backends", default="joblib,dask,drivers",
                        help="which of joblib, dask, drivers (several drivers on one SQLite tracker)")
    parser.add_argument("--against", type=Path, default=None, help="another foldsweep source tree to time beside")
    args = parser.parse_args()
    chosen = args.backends.split(",")
    trees = {"": ROOT} if args.against is None else {"this ": ROOT, "other ": args.against.resolve()}
    precompile()
    if args.against is not None:
        import compileall

        for folder in ("sweep", "workers"):
            compileall.compile_dir(args.against / folder, quiet=1)
    ideal = args.jobs * args.ms / 1000 / args.workers
    w = str(args.workers)
    every = {
        "joblib": ("joblib", lambda: [command_for("joblib")]),
        "dask": ("dask LocalCluster", lambda: [command_for("dask")]),
        "drivers": (f"{w} drivers, 1 SQLite", lambda: [["--workers", "1"]] * args.workers),
    }

    def command_for(backend: str) -> list[str]:
        return ["--backend", backend, "--workers", w]

    runs = {f"{label}{every[key][0]}": (tree, every[key][1]) for key in chosen for label, tree in trees.items()}
    with tempfile.TemporaryDirectory(prefix="bench-cluster-") as tmp:
        print(f"{args.jobs} jobs x {args.ms:g} ms CPU, {args.workers} workers: ideal {ideal:.2f} s "
              f"(load average before: {os.getloadavg()[0]:.2f}); median of {args.repeat} interleaved runs")
        measured: dict[str, list[tuple[float, float, float, str]]] = {name: [] for name in runs}
        for r in range(args.repeat):  # interleaved, so that a slow spell of the machine hits all alike
            for i, (name, (tree, extras)) in enumerate(runs.items()):
                spec = write_spec(Path(tmp) / f"run{r}-{i}", args.jobs, args.ms)
                wall, summaries = timed(tree, *[command(spec, *extra) for extra in extras()])
                done = max(s["done"] for s in summaries)
                assert done == args.jobs, f"{name}: {done} of {args.jobs} done"
                ran = "+".join(str(s["ran"]) for s in summaries)
                work = job_seconds(spec) / args.workers
                measured[name].append((wall, max(s["seconds"] for s in summaries), wall / work, ran))
                print(f"  run {r + 1}: {name}: {wall:.2f} s, {wall / ideal:.3f} of the ideal, "
                      f"{wall / work:.3f} of the measured work", flush=True)
        print(f"load average after: {os.getloadavg()[0]:.2f}")
        print(f"{'backend':<28}{'wall s':>9}{'ratio':>8}{'(range)':>14}{'run s':>9}{'ratio':>8}"
              f"{'to work':>9}{'(range)':>14}   jobs ran")
        for name, values in measured.items():
            walls, inners, works = [v[0] for v in values], [v[1] for v in values], [v[2] for v in values]
            wall, inner, work = statistics.median(walls), statistics.median(inners), statistics.median(works)
            spread = f"{min(walls) / ideal:.2f}-{max(walls) / ideal:.2f}"
            work_spread = f"{min(works):.3f}-{max(works):.3f}"
            print(f"{name:<28}{wall:>9.2f}{wall / ideal:>8.3f}{spread:>14}{inner:>9.2f}{inner / ideal:>8.3f}"
                  f"{work:>9.3f}{work_spread:>14}   {values[-1][3]}")
        print("target: ratio <= 1.03 for jobs of seconds, <= 1.2 for jobs of 50 ms (wall: whole commands; "
              "run: the command's own start-to-end-of-run time; to work: wall / (the jobs' own measured "
              "time / workers))")


if __name__ == "__main__":
    main()
