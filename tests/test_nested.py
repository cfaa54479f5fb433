"""Nested selection (sweep.nested): inner folds, the selection, ``best --nested``, inner jobs as jobs.

The reference implementation is scikit-learn: ``StratifiedKFold`` for the inner folds,
``GridSearchCV`` for the selection (its ``best_params_``, ties to the first candidate) and
``cross_val_score`` with that search as estimator for the nested estimate (scikit-learn's user
guide, "Nested versus non-nested cross-validation").
"""

from __future__ import annotations

import json
import os
import signal
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from sweep.errors import SpecError
from sweep.folds import compute_folds, stratified_kfold
from sweep.nested import (
    compute_inner_folds,
    inner_number,
    job_rows,
    nested_summary,
    select_configurations,
    split_number,
)
from sweep.spec import FoldScheme, parse_spec
from tests.conftest import run_foldsweep, start_foldsweep
from tests.test_cli import ok, query, run_json, wait_for_done, write_spec

GRID = [1, 3, 7, 15, 31]
SEED = 3

KNN_SPEC = f"""
name = "nested-knn"
[folds]
k = 5
seed = {SEED}
[selection]
inner_k = 3
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "wine"
builtin = "wine"
[[model]]
name = "knn"
worker = "knn"
grid = {{ n_neighbors = {GRID} }}
[[model]]
name = "knn7"
worker = "knn"
fixed = {{ n_neighbors = 7 }}
"""


# ---- inner folds ----------------------------------------------------------------------------

@pytest.mark.parametrize("k,seed", [(2, 0), (3, 5), (5, 11)])
def test_stratified_kfold_equals_scikit_learn(k: int, seed: int) -> None:
    # reference: scikit-learn's StratifiedKFold(shuffle=True, random_state=seed)
    from sklearn.model_selection import StratifiedKFold

    y = np.random.RandomState(seed).choice([4, 1, 9], size=61, p=[0.5, 0.3, 0.2])
    expected = [test for _, test in StratifiedKFold(k, shuffle=True, random_state=seed).split(y, y)]
    got = stratified_kfold(y, k, seed)
    assert len(got) == k and all(np.array_equal(a, b) for a, b in zip(got, expected))


def test_inner_folds_are_stratified_kfold_of_each_outer_training_part() -> None:
    # reference: StratifiedKFold(n_splits=inner_k, shuffle=True, random_state=SEED).split(T, y[T])
    from sklearn.datasets import load_wine
    from sklearn.model_selection import StratifiedKFold

    y = load_wine().target
    scheme = FoldScheme(k=4, repeats=2, seed=SEED)
    outer = compute_folds(y, scheme)
    stored = {(f.repeat, f.fold): f.test_index for f in outer}
    inner = {(f.repeat, f.fold): f.test_index for f in compute_inner_folds(y, stored, 3, SEED)}
    assert len(inner) == 4 * 2 * 3
    for o in outer:
        T = np.setdiff1d(np.arange(len(y)), o.test_index)
        splits = StratifiedKFold(3, shuffle=True, random_state=SEED).split(T, y[T])
        for i, (train, validation) in enumerate(splits):
            stored = inner[(o.repeat, inner_number(o.fold, i, 3))]
            assert np.array_equal(stored, T[validation])
            test, rows = job_rows({(o.repeat, o.fold): o.test_index}, inner, len(y), 3, True, o.repeat,
                                  inner_number(o.fold, i, 3))
            # the outer test rows are in neither part; training + validation = the outer training part
            assert np.array_equal(rows, T[train]) and np.array_equal(test, T[validation])
            assert not np.intersect1d(rows, o.test_index).size and not np.intersect1d(test, o.test_index).size
            assert split_number(inner_number(o.fold, i, 3), 3) == (o.fold, i)


# ---- the selection, pure --------------------------------------------------------------------

def inner_frame(scores: dict[str, list[float]], inner_k: int, fold: int = 0) -> pd.DataFrame:
    return pd.DataFrame([("d", c, 0, inner_number(fold, i, inner_k), s) for c, row in scores.items()
                         for i, s in enumerate(row)], columns=["dataset", "config_id", "repeat", "fold", "score"])


def test_ties_go_to_the_first_configuration_in_grid_order() -> None:
    # GridSearchCV's rule (scikit-learn: best_index_ is the first candidate ranked 1); dyadic scores, so
    # that both means are exactly 0.5 whatever the order of the sums (no rounding decides, as in GridSearchCV)
    scores = {"b": [0.75, 0.5, 0.25], "a": [0.25, 0.5, 0.75], "c": [0.5, 0.25, 0.25]}
    chosen = select_configurations(inner_frame(scores, 3), [("m", ["c", "b", "a"])], 3)
    assert list(chosen["config_id"]) == ["b"]
    chosen = select_configurations(inner_frame(scores, 3), [("m", ["a", "b", "c"])], 3)
    assert list(chosen["config_id"]) == ["a"] and chosen["inner_score"].iloc[0] == 0.5


def test_no_selection_until_every_configuration_has_every_inner_score() -> None:
    scores = {"a": [0.9, 0.8, 0.7], "b": [0.7, 0.8]}
    assert select_configurations(inner_frame(scores, 3), [("m", ["a", "b"])], 3).empty
    assert list(select_configurations(inner_frame(scores, 3), [("m", ["a"])], 3)["config_id"]) == ["a"]


def test_nested_can_exceed_naive_it_is_not_clamped() -> None:
    # nested <= naive is what selection bias makes usual (Cawley & Talbot, JMLR 11, 2010), not a theorem:
    # a procedure that picks, per fold, the configuration that wins that fold beats every fixed one
    inner = pd.concat([inner_frame({"a": [1.0, 1.0], "b": [0.0, 0.0]}, 2, fold=0),
                       inner_frame({"a": [0.0, 0.0], "b": [1.0, 1.0]}, 2, fold=1)])
    outer = pd.DataFrame([("d", "a", 0, 0, 1.0), ("d", "a", 0, 1, 0.0), ("d", "b", 0, 0, 0.0), ("d", "b", 0, 1, 1.0)],
                         columns=["dataset", "config_id", "repeat", "fold", "accuracy"])
    chosen = select_configurations(inner, [("m", ["a", "b"])], 2)
    [row] = nested_summary(chosen, outer, [("m", ["a", "b"])], ["d"], [(0, 0), (0, 1)], "accuracy")
    assert row["nested_accuracy"] == 1.0 and row["naive_accuracy"] == 0.5 and row["optimism"] == -0.5
    assert [c["config_id"] for c in row["choices"]] == ["a", "b"] == [c["config"] for c in row["choices"]]


# ---- end to end, against scikit-learn -------------------------------------------------------

@pytest.fixture(scope="module")
def knn_sweep(tmp_path_factory: pytest.TempPathFactory) -> Path:
    spec = write_spec(tmp_path_factory.mktemp("nested"), KNN_SPEC)
    summary = run_json(spec, "--workers", "2")
    assert summary["failed"] == 0 and summary["pending"] == 0
    # 2 datasets x 5 configurations (n_neighbors = 7 shared by both blocks) x 5 folds x (1 + 3 inner)
    assert summary["planned"] == 2 * 5 * 5 * 4 and summary["planned_inner"] == 2 * 5 * 5 * 3
    return spec


def nested_json(spec: Path) -> dict[tuple[str, str], dict[str, Any]]:
    rows = json.loads(ok(run_foldsweep("best", spec, "--nested", "--json")).stdout)
    return {(r["dataset"], r["model"]): r for r in rows}


@pytest.mark.parametrize("dataset", ["iris", "wine"])
def test_selection_and_nested_accuracy_equal_gridsearchcv(knn_sweep: Path, dataset: str) -> None:
    # reference: scikit-learn's GridSearchCV over the inner folds (best_params_) and cross_val_score with that
    # search as estimator over the sweep's outer folds (the nested estimate)
    from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_val_score
    from sklearn.neighbors import KNeighborsClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from sweep.run import load_inputs

    inputs = load_inputs(knn_sweep)
    data = inputs.datasets[dataset]
    X, y = data.X, data.y
    outer = compute_folds(y, inputs.spec.folds)
    cv = [(np.setdiff1d(np.arange(len(y)), f.test_index), f.test_index) for f in outer]
    search = GridSearchCV(make_pipeline(StandardScaler(), KNeighborsClassifier()),
                          {"kneighborsclassifier__n_neighbors": GRID},
                          cv=StratifiedKFold(3, shuffle=True, random_state=SEED))
    report = nested_json(knn_sweep)[(dataset, "knn")]
    configs = inputs.plan.by_config
    assert [(c["repeat"], c["fold"]) for c in report["choices"]] == [(0, f) for f in range(5)]
    compared = 0
    for (train, _), choice in zip(cv, report["choices"]):
        fitted = search.fit(X[train], y[train])
        means = fitted.cv_results_["mean_test_score"]
        assert choice["inner_score"] == pytest.approx(means.max(), abs=1e-12)
        if np.sum(means == means.max()) == 1:
            compared += 1
            assert configs[choice["config_id"]].params["n_neighbors"] == \
                fitted.best_params_["kneighborsclassifier__n_neighbors"]
    assert compared >= 3  # most outer folds have a unique best; the comparison must not be vacuous
    for choice in report["choices"]:  # shown by readable name (sweep.naming), the id beside it
        assert choice["config"] == f"knn · n_neighbors={configs[choice['config_id']].params['n_neighbors']}"
    reference = cross_val_score(search, X, y, cv=cv)
    assert report["nested_accuracy"] == pytest.approx(reference.mean(), abs=1e-12)
    assert [c["outer_score"] for c in report["choices"]] == pytest.approx(list(reference), abs=1e-12)


def test_nested_is_not_above_naive_and_equals_it_for_one_configuration(knn_sweep: Path) -> None:
    report = nested_json(knn_sweep)
    for dataset in ("iris", "wine"):
        tuned = report[(dataset, "knn")]
        assert tuned["nested_accuracy"] <= tuned["naive_accuracy"]
        assert tuned["optimism"] == pytest.approx(tuned["naive_accuracy"] - tuned["nested_accuracy"])
        single = report[(dataset, "knn7")]  # a one-configuration grid selects it everywhere
        assert single["nested_accuracy"] == pytest.approx(single["naive_accuracy"], abs=1e-15)
        assert single["optimism"] == pytest.approx(0.0, abs=1e-15)
        assert {c["config"] for c in single["choices"]} == {single["naive_config"]}
        # one configuration, shared with the knn block (same id): named once, after that block
        assert single["naive_config"] == "knn · n_neighbors=7"


def test_status_counts_inner_jobs_and_selections(knn_sweep: Path) -> None:
    counts = json.loads(ok(run_foldsweep("status", knn_sweep, "--json")).stdout)
    assert counts["total"] == 2 * 5 * 5 and counts["done"] == 2 * 5 * 5
    assert counts["inner"] == {"total": 150, "done": 150, "failed": 0, "pending": 0, "running": 0}
    assert counts["selections"] == {"done": 2 * 2 * 5, "total": 2 * 2 * 5}
    configs = json.loads(ok(run_foldsweep("configs", knn_sweep, "--json")).stdout)  # outer folds only
    assert {(c["done"], c["failed"], c["pending"]) for c in configs} == {(2 * 5, 0, 0)}
    text = ok(run_foldsweep("best", knn_sweep, "--nested")).stdout
    assert "iris · knn: nested accuracy" in text and "optimism" in text


def test_tuned_rows_take_part_in_table_and_compare(knn_sweep: Path) -> None:
    table = json.loads(ok(run_foldsweep("table", knn_sweep, "--tuned", "--json")).stdout)
    nested = nested_json(knn_sweep)
    for row in table["rows"]:  # the tuned cell is the nested estimate: the same outer scores, averaged
        for model in ("knn", "knn7"):
            cell = row["cells"][f"{model} (tuned)"]
            assert cell["complete"] and cell["mean"] == pytest.approx(nested[(row["dataset"], model)]["nested_accuracy"],
                                                                      abs=1e-12)
    compared = json.loads(ok(run_foldsweep("compare", knn_sweep, "knn (tuned)", "knn7 (tuned)", "--tuned",
                                           "--json")).stdout)
    assert (compared["config_a"], compared["config_b"], compared["n"]) == ("knn (tuned)", "knn7 (tuned)", 2)
    assert compared["wins"] + compared["ties"] + compared["losses"] == 2
    ranked = json.loads(ok(run_foldsweep("rank", knn_sweep, "--only-tuned", "--json")).stdout)
    assert sorted(r["config_id"] for r in ranked["average_ranks"]) == ["knn (tuned)", "knn7 (tuned)"]
    study = knn_sweep.parent / "tuned.html"
    ok(run_foldsweep("report", knn_sweep, "--only-tuned", "--out", study))
    assert "knn7 (tuned)" in study.read_text() and "n_neighbors=15" not in study.read_text()


# ---- inner jobs are ordinary jobs: resume, grow ---------------------------------------------

CENTROID = """
name = "nested-centroid"
[folds]
k = 3
seed = 2
[selection]
inner_k = 2
[[dataset]]
name = "iris"
builtin = "iris"
[[model]]
worker = "tests.plugin_workers:SLOW_CENTROID"
grid = {{ n_features = {grid} }}
"""


def inner_done(db: Path) -> dict[str, float]:
    return dict(query(db, "SELECT r.key, r.finished_at FROM results r WHERE r.scheme LIKE '%/inner-%'"))


@pytest.mark.slow
def test_resume_after_kill_runs_no_inner_job_twice(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, CENTROID.format(grid="[1, 2]"))
    db = spec.with_suffix(".sqlite")
    total = 2 * 3 * (1 + 2)
    proc = start_foldsweep("run", spec, "--workers", "2", "--progress", "none", env={"FOLDSWEEP_TEST_DELAY": "0.6"})
    try:
        wait_for_done(proc, db, 2 * 3 + 1)  # the outer jobs (planned first) and an inner one or more
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=30)
    before = inner_done(db)
    done_before = query(db, "SELECT count(*) FROM jobs WHERE state = 'done'")[0][0]
    assert 1 <= len(before) < 2 * 3 * 2 and done_before < total

    summary = run_json(spec, "--workers", "1")
    assert summary["done"] == total and summary["ran"] == total - done_before
    after = inner_done(db)
    assert len(after) == 2 * 3 * 2 and all(after[k] == t for k, t in before.items())  # none ran again
    assert query(db, "SELECT count(*), count(DISTINCT key) FROM results") == [(total, total)]


def test_growing_the_grid_adds_only_the_new_configurations_inner_and_outer_jobs(tmp_path: Path) -> None:
    spec = write_spec(tmp_path, CENTROID.format(grid="[1, 2]"))
    db = spec.with_suffix(".sqlite")
    assert run_json(spec, "--workers", "1")["ran"] == 2 * 3 * 3
    rows = "SELECT r.key, r.scheme, r.config_id, r.finished_at FROM results r"
    before = {key: rest for key, *rest in query(db, rows)}
    spec.write_text(CENTROID.format(grid="[1, 2, 3]"))
    summary = run_json(spec, "--workers", "1")
    assert summary["new"] == 3 * 3 and summary["ran"] == 3 * 3 and summary["planned_inner"] == 3 * 3 * 2
    after = {key: rest for key, *rest in query(db, rows)}
    added = [after[k] for k in set(after) - set(before)]
    assert len({config for _, config, _ in added}) == 1
    assert sum("/inner-k2" in scheme for scheme, _, _ in added) == 3 * 2
    assert all(after[k] == before[k] for k in before)
    best = json.loads(ok(run_foldsweep("best", spec, "--nested", "--json")).stdout)
    assert best[0]["folds_selected"] == 3


# ---- the spec -------------------------------------------------------------------------------

@pytest.mark.parametrize("section,message", [
    ({"inner_k": 1}, r"selection.inner_k must be an integer >= 2, got 1"),
    ({"inner_k": "3"}, r"selection.inner_k must be an integer >= 2"),
    ({"inner": 3}, r"unknown key 'selection.inner' \(did you mean 'inner_k'\?\)"),
    ({"metric": "acuracy"}, (r"selection.metric must be one of accuracy, balanced_accuracy, kappa, got 'acuracy' "
                             r"\(did you mean 'accuracy'\?\)")),
])
def test_selection_section_errors_name_the_key(section: dict[str, Any], message: str) -> None:
    doc = {"dataset": [{"name": "iris", "builtin": "iris"}], "model": [{"worker": "knn"}], "selection": section}
    with pytest.raises(SpecError, match=r"^spec.toml: " + message):
        parse_spec(doc, Path("spec.toml"))


def test_selection_defaults_and_a_class_too_small_for_the_inner_folds(tmp_path: Path) -> None:
    doc = {"dataset": [{"name": "iris", "builtin": "iris"}], "model": [{"worker": "knn"}], "selection": {}}
    spec = parse_spec(doc, Path("spec.toml"))
    assert (spec.selection.inner_k, spec.selection.metric) == (3, "accuracy")
    rows = ["a,b,cls"] + [f"{i},{i % 3},{'x' if i < 4 else 'y'}" for i in range(20)]
    (tmp_path / "small.csv").write_text("\n".join(rows) + "\n")
    path = write_spec(tmp_path, """
[folds]
k = 4
[selection]
inner_k = 4
[[dataset]]
name = "small"
file = "small.csv"
target = "cls"
[[model]]
worker = "knn"
""")
    proc = run_foldsweep("run", path)
    assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1
    assert "'x' has 3 rows, fewer than selection.inner_k = 4" in proc.stderr
    assert not path.with_suffix(".sqlite").exists()


def test_progress_counts_inner_jobs_apart() -> None:
    import io

    from sweep.progress import Progress

    progress = Progress(40, 10, 0, mode="none", stream=io.StringIO(), inner=(30, 4))
    progress.update(done=5, failed=1, inner=3)
    assert "16/40 jobs (40.0%) (inner 7/30), 1 failed" in progress.summary()
    assert "inner" not in Progress(10, 0, 0, mode="none", stream=io.StringIO()).summary()
