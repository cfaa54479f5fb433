"""Seeds of a study's fold jobs: derived per fold (common random numbers), an explicit value wins."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest

from sweep.cli import main
from sweep.results import load_sweep_results
from workers.baselines import DECISION_TREE, LOGISTIC_REGRESSION, RANDOM_FOREST
from workers.fuzzy.worker import FUZZY_RULES
from workers.job import Job, derived_seed, job_params
from workers.registry import get_worker

SPEC = """
name = "seeds"
store = "seeds.sqlite"

[folds]
k = 3
repeats = 2
seed = {seed}

[[dataset]]
name = "iris"
builtin = "iris"

[[dataset]]
name = "wine"
builtin = "wine"

[[model]]
name = "derived"
worker = "tests.plugin_workers:SEED_ECHO"
grid = {{ label = ["a", "b"] }}

[[model]]
name = "explicit"
worker = "tests.plugin_workers:SEED_ECHO"
fixed = {{ label = "c" }}
grid = {{ random_state = [7, 8] }}
"""


def seeds_of(tmp_path: Path, seed: int) -> Any:
    spec = tmp_path / f"seeds{seed}.toml"
    spec.write_text(SPEC.format(seed=seed))
    assert main(["run", str(spec), "--workers", "1"]) == 0
    return load_sweep_results(spec).frame


def test_derived_seeds_differ_across_folds_and_repeats_and_are_shared_across_configurations(tmp_path: Path) -> None:
    frame = seeds_of(tmp_path, seed=3)
    derived = frame[frame["random_state"].isna()]
    assert len(derived) == 2 * 2 * 2 * 3  # datasets x configurations x repeats x folds
    # common random numbers: every configuration (and dataset) on a fold runs with the same seed
    per_fold = derived.groupby(["repeat", "fold"])["seed"].agg(["nunique", "first"])
    assert (per_fold["nunique"] == 1).all()
    # ... and the six folds of the two repeats run with six different seeds
    assert per_fold["first"].nunique() == 6
    expected = {(r, f): derived_seed(3, r, f) for r in range(2) for f in range(3)}
    assert {k: int(v) for k, v in per_fold["first"].items()} == expected


def test_an_explicit_seed_wins(tmp_path: Path) -> None:
    frame = seeds_of(tmp_path, seed=3)
    explicit = frame[frame["random_state"].notna()]
    assert len(explicit) == 2 * 2 * 2 * 3
    assert (explicit["seed"] == explicit["random_state"]).all()
    assert set(explicit["seed"]) == {7, 8}


def test_derived_seeds_follow_the_fold_schemes_seed() -> None:
    a = {derived_seed(0, r, f) for r in range(3) for f in range(10)}
    b = {derived_seed(1, r, f) for r in range(3) for f in range(10)}
    assert len(a) == len(b) == 30 and not a & b
    assert derived_seed(0, 1, 2) == derived_seed(0, 1, 2)  # deterministic
    assert all(0 <= s <= 2**31 - 1 for s in a | b)


@pytest.mark.parametrize("worker", [FUZZY_RULES, DECISION_TREE, RANDOM_FOREST, LOGISTIC_REGRESSION],
                         ids=lambda w: w.name)
def test_every_seeded_builtin_worker_derives_by_default(worker) -> None:
    assert worker.params["random_state"].default is None
    params = {name: p.default for name, p in worker.params.items()}
    job = Job(key="k", worker=worker.name, params=params, dataset="d", fingerprint="f", repeat=1, fold=4,
              test_index=np.arange(3), folds_seed=5)
    assert job_params(worker, job)["random_state"] == derived_seed(5, 1, 4)
    fixed = Job(key="k", worker=worker.name, params={**params, "random_state": 11}, dataset="d", fingerprint="f",
                repeat=1, fold=4, test_index=np.arange(3), folds_seed=5)
    assert job_params(worker, fixed)["random_state"] == 11


def test_a_worker_without_random_state_is_left_alone() -> None:
    knn = get_worker("knn")
    job = Job(key="k", worker="knn", params={"n_neighbors": 5, "weights": "uniform"}, dataset="d",
              fingerprint="f", repeat=0, fold=0, test_index=np.arange(3))
    assert job_params(knn, job) == {"n_neighbors": 5, "weights": "uniform"}


def test_inner_jobs_seeds_never_repeat_an_outer_folds_seed() -> None:
    # an inner job's packed fold number f*K+i is also an outer fold number; its own spawn key keeps the
    # streams apart (numpy's SeedSequence spawn keys: common practice for independent streams)
    outer = {derived_seed(0, r, f) for r in range(3) for f in range(10)}
    inner = {derived_seed(0, r, f * 3 + i, inner=True) for r in range(3) for f in range(10) for i in range(3)}
    assert len(inner) == 90 and not outer & inner
