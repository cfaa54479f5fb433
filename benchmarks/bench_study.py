"""Run-time estimate of a full study from a random sample of its own fold jobs.

Draws ``--sample`` jobs at random (fixed seed, stratified by dataset) from a
spec's plan, runs each in this process exactly as a worker would
(``workers.job.run_job`` on the stored folds' definition), and extrapolates
the CPU time of the whole plan, then the wall time at a few core counts
(assuming the run loop's small overhead, see bench_pipeline.py).

    python benchmarks/bench_study.py [sweeps/measures-study.toml] [--sample 28]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections import defaultdict
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sweep.folds import compute_folds  # noqa: E402
from sweep.run import load_inputs  # noqa: E402
from workers.job import Job, run_job  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("spec", nargs="?", default=str(Path(__file__).resolve().parents[1] / "sweeps/measures-study.toml"))
    ap.add_argument("--sample", type=int, default=28)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    inputs = load_inputs(args.spec)
    plan = inputs.plan
    jobs = plan.jobs
    by_dataset = defaultdict(list)
    for job in jobs:
        by_dataset[job.dataset].append(job)
    rng = np.random.default_rng(args.seed)
    per = max(1, args.sample // len(by_dataset))
    folds = {name: compute_folds(data.y, inputs.spec.folds) for name, data in inputs.datasets.items()}
    cpu: dict[str, list[float]] = defaultdict(list)
    for name, candidates in by_dataset.items():
        for i in rng.choice(len(candidates), size=min(per, len(candidates)), replace=False):
            planned = candidates[i]
            config = plan.by_config[planned.config_id]
            fold = next(f for f in folds[name] if (f.repeat, f.fold) == (planned.repeat, planned.fold))
            job = Job(planned.key, config.worker, dict(config.params), name, planned.fingerprint,
                      planned.repeat, planned.fold, fold.test_index, folds_seed=inputs.spec.folds.seed)
            t0 = time.process_time()
            result = run_job(job, inputs.datasets[name])
            cpu[name].append(time.process_time() - t0)
            label = ", ".join(f"{k}={v}" for k, v in config.params.items()
                              if k in ("reasoning", "measure", "tnorm", "min_support", "depth")) or config.worker
            print(f"  {name:<14} {cpu[name][-1]:6.2f} cpu-s  {'ok ' if result.ok else 'ERR'}  {label}", flush=True)
    total_cpu = sum(np.mean(cpu[name]) * len(by_dataset[name]) for name in by_dataset)
    print(f"{len(jobs)} jobs planned; sampled {sum(map(len, cpu.values()))}; "
          f"mean {np.mean([t for ts in cpu.values() for t in ts]):.2f} cpu-s per job")
    print(f"estimated CPU time of the whole study: {total_cpu / 3600:.1f} CPU-hours")
    for cores in (2, 8, 16, 32):
        print(f"  wall time on {cores:>2} cores: {total_cpu / cores / 3600:6.1f} h")


if __name__ == "__main__":
    main()
