"""Report generation over a million job rows: best, table, rank (and cell statistics).

Builds a synthetic results frame shaped like the loader's (one row per job:
30 datasets x 1,000 configurations x 5 folds x 7 repeats = 1,050,000 rows,
string ids, three parameters, synthetic metrics) and times each report,
then prints the peak resident memory of the process. Targets (issue 5): the
reports in <= 10 s together, peak memory <= 2 GiB; (issue 12, ``--store`` only) the HTML study
report, loaded and built, in <= 15 s.

    python benchmarks/bench_report.py [--datasets 30] [--configs 1000] [--folds 5] [--repeats 7] [--trace]
    python benchmarks/bench_report.py --store      # the same shape read from a real SQLite tracker

``--store`` builds a real tracker first (a spec of synthetic datasets and a
grid of the benchmark's spin worker, every job marked done with synthetic
metrics), then, in a fresh process, times ``load_sweep_results`` (spec,
datasets, plan, SQL, frame) followed by the reports, and that process's peak
memory.

``--trace`` repeats the run under tracemalloc and prints the peak of
traced allocations (slower; the timings of that pass are not the figures).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sweep import report  # noqa: E402
from sweep.report import SweepResults  # noqa: E402


def synthetic_results(n_datasets: int, n_configs: int, folds: int, repeats: int, seed: int = 0) -> SweepResults:
    """A results frame of n_datasets x n_configs x repeats x folds job rows with paired noise."""
    rng = np.random.default_rng(seed)
    per_cell = folds * repeats
    n = n_datasets * n_configs * per_cell
    d_idx = np.repeat(np.arange(n_datasets), n_configs * per_cell)
    c_idx = np.tile(np.repeat(np.arange(n_configs), per_cell), n_datasets)
    job = np.tile(np.arange(per_cell), n_datasets * n_configs)
    config_ids = np.array([f"{h:012x}" for h in rng.integers(0, 2**48, size=n_configs)], dtype=object)
    dataset_names = np.array([f"dataset_{i:02d}" for i in range(n_datasets)], dtype=object)
    skill = rng.normal(0, 0.02, size=n_configs)
    base = rng.uniform(0.6, 0.9, size=n_datasets)
    accuracy = np.clip(base[d_idx] + skill[c_idx] + rng.normal(0, 0.03, size=n), 0, 1)
    reasoning = np.array(["winning", "additive", "choquet"], dtype=object)[np.arange(n_configs) % 3]
    measure = np.where(reasoning == "choquet", np.array(["power", "sugeno"], dtype=object)[np.arange(n_configs) % 2], None)
    frame = pd.DataFrame(
        {
            "key": pd.Series(np.char.mod("%016x", rng.integers(0, 2**62, size=n)), dtype=object),
            "dataset": dataset_names[d_idx],
            "config_id": config_ids[c_idx],
            "worker": "fuzzy_rules",
            "repeat": job // folds,
            "fold": job % folds,
            "accuracy": accuracy,
            "balanced_accuracy": accuracy - 0.01,
            "kappa": 2 * accuracy - 1,
            "train_accuracy": np.minimum(accuracy + 0.05, 1.0),
            "fit_seconds": rng.gamma(2.0, 0.5, size=n),
            "predict_seconds": rng.gamma(2.0, 0.01, size=n),
            "rules_selected": rng.integers(5, 60, size=n),
            "reasoning": reasoning[c_idx],
            "measure": measure[c_idx],
            "labels": (3 + 2 * (np.arange(n_configs) // 3 % 3))[c_idx],
        }
    )
    planned = pd.DataFrame(
        {"dataset": np.repeat(dataset_names, n_configs), "config_id": np.tile(config_ids, n_datasets), "jobs": per_cell}
    )
    return SweepResults(frame, ["reasoning", "measure", "labels"], planned, "bench.toml")


def _timed(label: str, fn, times: dict[str, float]):
    t0 = time.perf_counter()
    out = fn()
    times[label] = time.perf_counter() - t0
    return out


def run_reports(res: SweepResults) -> dict[str, float]:
    times: dict[str, float] = {}
    _timed("cell_stats", lambda: report.cell_stats(res), times)
    b = _timed("best", lambda: report.best(res), times)
    _timed("best fit_seconds", lambda: report.best(res, "fit_seconds"), times)
    text = _timed("table markdown", lambda: report.table(res, sd=True), times)
    _timed("table latex", lambda: report.table(res, fmt="latex"), times)
    rr = _timed("rank (Friedman, CD)", lambda: report.rank(res), times)
    control = rr.ranking()["config_id"].iloc[0]
    _timed("rank vs control (Holm)", lambda: report.rank(res, control=control), times)
    first, second = b["config_id"].iloc[0], b["runner_up"].iloc[0]
    _timed("compare", lambda: report.compare(res, first, second), times)
    assert len(b) == res.frame["dataset"].nunique() and len(text) > 0
    return times


def build_store(folder: Path, n_datasets: int, n_configs: int, folds: int, repeats: int) -> Path:
    """A spec and a tracker holding n_datasets x n_configs x repeats x folds done jobs."""
    import sqlite3

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from sweep.run import load_inputs, open_store, sync_store

    datasets = "".join(f"""
[[dataset]]
name = "d{i:02d}"
synthetic = {{ n_samples = 60, n_features = 4, n_informative = 2, n_redundant = 0, random_state = {i} }}
""" for i in range(n_datasets))
    spec = folder / "big.toml"
    spec.write_text(f"""name = "big"\nstore = "big.sqlite"\n[folds]\nk = {folds}\nrepeats = {repeats}\n{datasets}
[[model]]
worker = "spin_worker:SPIN"
grid = {{ index = {list(range(n_configs))} }}
""")
    inputs = load_inputs(spec)
    store = open_store(inputs.spec)
    sync_store(store, inputs)
    store.close()
    rng = np.random.default_rng(0)
    con = sqlite3.connect(folder / "big.sqlite")
    jobs = con.execute("SELECT key, dataset, fingerprint, scheme, config_id, repeat, fold FROM jobs").fetchall()
    acc = rng.uniform(0.5, 1.0, size=len(jobs))
    con.execute("UPDATE jobs SET state = 'done'")
    con.executemany("INSERT INTO results (key, dataset, fingerprint, scheme, config_id, repeat, fold, accuracy, "
                    "balanced_accuracy, kappa, train_accuracy, fit_seconds, predict_seconds, figures, model_text, "
                    "worker_version, host, finished_at) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                    ((*job, a, a, 2 * a - 1, a, 0.5, 0.01, '{"rules_selected": 9}', None, "1", "bench", 0.0)
                     for job, a in zip(jobs, acc.tolist())))
    con.commit()
    con.close()
    return spec


def from_store(spec: Path) -> None:
    """Time the loader and the reports over a real tracker (run in a fresh process)."""
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from sweep.results import load_sweep_results

    from sweep.study_report import build_report

    t0, c0 = time.perf_counter(), time.process_time()
    # what `foldsweep report SPEC --out study.html` does: load (with job counts, failures, dataset records)
    # and build the HTML study report; CPU time beside wall time, since a shared machine stretches the latter
    study_res = load_sweep_results(spec, metrics=["accuracy"], details=True)
    study_load, study_load_cpu = time.perf_counter() - t0, time.process_time() - c0
    t0, c0 = time.perf_counter(), time.process_time()
    page = build_report(study_res, "accuracy")
    study_build, study_build_cpu = time.perf_counter() - t0, time.process_time() - c0
    del study_res
    t0 = time.perf_counter()
    # the metrics the reports below use, as the report commands ask for theirs
    res = load_sweep_results(spec, metrics=["accuracy", "fit_seconds"])
    load = time.perf_counter() - t0
    times = run_reports(res)
    core = sum(times[k] for k in ("best", "table markdown", "rank (Friedman, CD)"))
    peak_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"rows read from the tracker: {len(res.frame):,}")
    print(f"  load_sweep_results (spec, plan, SQL, frame): {load:7.2f} s")
    print(f"  best + table + rank:                         {core:7.2f} s")
    print(f"  load + best + table + rank:                  {load + core:7.2f} s   (target <= 10 s, "
          f"ratio {(load + core) / 10:.2f})")
    print(f"  peak RSS: {peak_rss:.2f} GiB   (target <= 2 GiB, ratio {peak_rss / 2:.2f})")
    wall, cpu = study_load + study_build, study_load_cpu + study_build_cpu
    print(f"study report (foldsweep report): load {study_load:.2f} s + build {study_build:.2f} s = {wall:.2f} s "
          f"wall (target <= 15 s, ratio {wall / 15:.2f}); CPU {study_load_cpu:.2f} + {study_build_cpu:.2f} = "
          f"{cpu:.2f} s (ratio {cpu / 15:.2f}); {len(page) / 2**20:.1f} MiB of HTML")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--store", action="store_true", help="read the rows from a real SQLite tracker")
    ap.add_argument("--load-spec", help=argparse.SUPPRESS)
    ap.add_argument("--datasets", type=int, default=30)
    ap.add_argument("--configs", type=int, default=1000)
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--trace", action="store_true")
    args = ap.parse_args()
    if args.load_spec:
        from_store(Path(args.load_spec))
        return
    if args.store:
        import os
        import subprocess
        import tempfile

        with tempfile.TemporaryDirectory() as tmp:
            os.environ.setdefault("FOLDSWEEP_CACHE", str(Path(tmp) / "cache"))
            t0 = time.perf_counter()
            spec = build_store(Path(tmp), args.datasets, args.configs, args.folds, args.repeats)
            print(f"built a tracker of {args.datasets * args.configs * args.folds * args.repeats:,} done jobs "
                  f"in {time.perf_counter() - t0:.1f} s")
            subprocess.run([sys.executable, __file__, "--load-spec", str(spec)], check=True)
        return

    t0 = time.perf_counter()
    res = synthetic_results(args.datasets, args.configs, args.folds, args.repeats)
    build = time.perf_counter() - t0
    frame_mib = res.frame.memory_usage(deep=True).sum() / 2**20
    print(f"rows: {len(res.frame):,}  frame: {frame_mib:,.0f} MiB  built in {build:.2f} s")

    times = run_reports(res)
    width = max(map(len, times))
    for label, seconds in times.items():
        print(f"  {label:<{width}}  {seconds:7.3f} s")
    core = sum(times[k] for k in ("best", "table markdown", "rank (Friedman, CD)"))
    total = sum(times.values())
    peak_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # KiB on Linux
    print(f"best + table + rank: {core:.2f} s   (target <= 10 s, ratio {core / 10:.2f})")
    print(f"all reports above:   {total:.2f} s")
    print(f"peak RSS of the process (frame included): {peak_rss:.2f} GiB   (target <= 2 GiB, ratio {peak_rss / 2:.2f})")

    if args.trace:
        tracemalloc.start()
        run_reports(res)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"peak traced allocations of the reports (frame excluded): {peak / 2**20:,.0f} MiB")


if __name__ == "__main__":
    main()
