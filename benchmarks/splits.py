"""FARC-HD against a decision tree over many stratified k-fold splits of one built-in dataset.

Run: ``python benchmarks/splits.py glass [--seeds 10] [--k 5] [--params '{"cover_limit": 3}']``

Each fold scheme seed 0, 1, ... gives one stratified k-fold split; on it
both workers run every fold as a study runs them (``fuzzy_rules`` with the
genetic seed a study derives from the scheme's seed, the repeat and the
fold; ``decision_tree`` with its own derived seed), all parameters at their
defaults unless ``--params`` overrides some of ``fuzzy_rules``'s. Printed:
per seed the two mean accuracies and their difference, then the means over
the seeds. One split of a small dataset moves a mean accuracy by a few
points; this shows how much of a difference belongs to the split.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
from joblib import Parallel, delayed

from sweep.datasets import Dataset, load_dataset
from sweep.folds import Fold, compute_folds
from sweep.spec import FoldScheme
from workers.job import Job, run_job
from workers.registry import get_worker


def fold_accuracy(worker_name: str, params: dict, data: Dataset, fold: Fold, seed: int) -> float:
    """Test accuracy of one fold job, run as a study runs it (:func:`workers.job.run_job`)."""
    job = Job(key="splits", worker=worker_name, params=params, dataset=data.name, fingerprint=data.fingerprint,
              repeat=fold.repeat, fold=fold.fold, test_index=fold.test_index, folds_seed=seed)
    result = run_job(job, data)
    if not result.ok:
        raise SystemExit(f"{worker_name} failed on seed {seed}, fold {fold.fold}:\n{result.error}")
    return result.accuracy


def split_means(worker_name: str, overrides: dict, data: Dataset, k: int, seeds: int, n_jobs: int) -> np.ndarray:
    """Mean test accuracy of each split (one per fold scheme seed)."""
    worker = get_worker(worker_name)
    params = {key: p.default for key, p in worker.params.items()} | overrides
    jobs = [(fold, seed) for seed in range(seeds) for fold in compute_folds(data.y, FoldScheme(k=k, repeats=1, seed=seed))]
    out = Parallel(n_jobs=n_jobs)(delayed(fold_accuracy)(worker_name, params, data, f, s) for f, s in jobs)
    return np.asarray(out).reshape(seeds, k).mean(axis=1)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("dataset", help="a built-in dataset name (glass, pima, wine, ...)")
    parser.add_argument("--seeds", type=int, default=10, help="fold scheme seeds 0..N-1 (default 10)")
    parser.add_argument("--k", type=int, default=5, help="folds per split (default 5)")
    parser.add_argument("--params", default="{}", help="JSON overrides of fuzzy_rules parameters")
    parser.add_argument("--jobs", type=int, default=2, help="fold jobs at once (default 2)")
    args = parser.parse_args()
    data = load_dataset({"name": args.dataset, "builtin": args.dataset}, base_dir=Path("."),
                        where=f"builtin {args.dataset}")
    start = time.perf_counter()
    fuzzy = split_means("fuzzy_rules", json.loads(args.params), data, args.k, args.seeds, args.jobs)
    tree = split_means("decision_tree", {}, data, args.k, args.seeds, args.jobs)
    print(f"{args.dataset}, stratified {args.k}-fold, {args.seeds} splits, fuzzy_rules {args.params}")
    print(f"{'seed':>4} {'fuzzy %':>8} {'tree %':>8} {'fuzzy - tree':>13}")
    for seed, (f, t) in enumerate(zip(fuzzy, tree)):
        print(f"{seed:>4} {100 * f:8.1f} {100 * t:8.1f} {100 * (f - t):13.1f}")
    gap = fuzzy - tree
    print(f"mean {100 * fuzzy.mean():8.1f} {100 * tree.mean():8.1f} {100 * gap.mean():13.1f}"
          f"  (sd of the difference {100 * gap.std(ddof=1):.1f}; {time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
