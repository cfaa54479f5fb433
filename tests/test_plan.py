"""Tests of sweep.plan: job counts, stable keys, growing a grid, exclude and applies rules."""

from __future__ import annotations

import hashlib
from pathlib import Path

from hypothesis import given, settings, strategies as st

from sweep.plan import config_id, job_key, make_plan
from sweep.spec import load_spec
from workers.registry import get_worker

FINGERPRINTS = {"iris": "00112233445566ff", "syn": "aabbccddeeff0011"}


def spec_text(model_body: str, *, k: int = 3, repeats: int = 2, seed: int = 7) -> str:
    return f"""
name = "plan-test"
[folds]
k = {k}
repeats = {repeats}
seed = {seed}
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "syn"
synthetic = {{ n_samples = 60 }}
{model_body}
"""


def plan_of(tmp_path: Path, text: str, name: str = "s.toml"):
    path = tmp_path / name
    path.write_text(text)
    spec = load_spec(path)
    workers = {m.worker: get_worker(m.worker) for m in spec.models}
    return make_plan(spec, FINGERPRINTS, workers)


TREE_KNN = """
[[model]]
worker = "decision_tree"
grid = { max_depth = [2, 3, 4], criterion = ["gini", "entropy"] }
[[model]]
worker = "knn"
grid = { n_neighbors = [1, 5] }
"""


def test_job_count_is_datasets_configs_repeats_folds(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text(TREE_KNN, k=3, repeats=2))
    assert len(plan.configurations) == 3 * 2 + 2
    assert len(plan.jobs) == 2 * 8 * 2 * 3
    assert len({j.key for j in plan.jobs}) == len(plan.jobs), "every job has its own key"
    cells = {(j.dataset, j.config_id) for j in plan.jobs}
    assert len(cells) == 2 * 8
    for cell in cells:
        assert sorted((j.repeat, j.fold) for j in plan.jobs if (j.dataset, j.config_id) == cell) == \
            [(r, f) for r in range(2) for f in range(3)]


def test_same_spec_twice_gives_the_same_keys(tmp_path: Path) -> None:
    first = plan_of(tmp_path, spec_text(TREE_KNN), "a.toml")
    second = plan_of(tmp_path, spec_text(TREE_KNN), "b.toml")
    assert [j.key for j in first.jobs] == [j.key for j in second.jobs]


def test_keys_change_with_the_fold_scheme(tmp_path: Path) -> None:
    base = {j.key for j in plan_of(tmp_path, spec_text(TREE_KNN, seed=7), "a.toml").jobs}
    reseeded = {j.key for j in plan_of(tmp_path, spec_text(TREE_KNN, seed=8), "b.toml").jobs}
    assert not base & reseeded


def test_hand_computed_keys(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\nfixed = { max_depth = 3 }',
                                       k=3, repeats=2, seed=7))
    (config,) = plan.configurations
    # the canonical text written out by hand: every declared parameter, sorted, compact JSON
    text = 'decision_tree|{"criterion":"gini","max_depth":3,"min_samples_leaf":1,"random_state":null}'
    assert config.config_id == hashlib.sha256(text.encode()).hexdigest()[:10]
    assert config_id("decision_tree", dict(config.params)) == config.config_id
    job = next(j for j in plan.jobs if j.dataset == "syn" and j.repeat == 1 and j.fold == 2)
    # the documented key text: fingerprint|scheme|repeat|fold|config id|worker version
    key_text = f"aabbccddeeff0011|stratified-k3-r2-s7|1|2|{config.config_id}|1"
    assert job.key == hashlib.sha256(key_text.encode()).hexdigest()[:20]
    assert job.key == job_key("aabbccddeeff0011", "stratified-k3-r2-s7", 1, 2, config.config_id, "1")


def test_growing_a_grid_keeps_old_keys_and_adds_only_the_new_cells(tmp_path: Path) -> None:
    small = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                        'grid = { max_depth = [2, 3], criterion = ["gini", "entropy"] }'), "a.toml")
    grown = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                        'grid = { max_depth = [2, 3, 4], criterion = ["gini", "entropy"] }'), "b.toml")
    old, new = {j.key for j in small.jobs}, {j.key for j in grown.jobs}
    assert old <= new
    added = [j for j in grown.jobs if j.key not in old]
    added_configs = {c.config_id for c in grown.configurations} - {c.config_id for c in small.configurations}
    assert len(added_configs) == 2  # max_depth = 4 with each criterion
    assert {j.config_id for j in added} == added_configs
    assert len(added) == 2 * 2 * 2 * 3  # datasets x new configs x repeats x folds
    assert all(grown.by_config[c].params["max_depth"] == 4 for c in added_configs)


def test_exclude_drops_combinations(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                       'grid = { max_depth = [2, 3], criterion = ["gini", "entropy"] }\n'
                                       'exclude = [ { criterion = "entropy", max_depth = 3 } ]'))
    points = sorted((c.params["criterion"], c.params["max_depth"]) for c in plan.configurations)
    assert points == [("entropy", 2), ("gini", 2), ("gini", 3)]
    assert len(plan.jobs) == 2 * 3 * 2 * 3


def test_exclude_with_a_list_of_values(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                       'grid = { max_depth = [2, 3, 4], criterion = ["gini", "entropy"] }\n'
                                       'exclude = [ { criterion = "entropy", max_depth = [3, 4] } ]'))
    points = sorted((c.params["criterion"], c.params["max_depth"]) for c in plan.configurations)
    assert points == [("entropy", 2), ("gini", 2), ("gini", 3), ("gini", 4)]


def test_applies_varies_a_parameter_only_where_its_condition_holds(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                       'grid = { max_depth = [2, 3], criterion = ["gini", "entropy"] }\n'
                                       'applies = { max_depth = { criterion = ["gini"] } }'))
    points = sorted((c.params["criterion"], str(c.params["max_depth"])) for c in plan.configurations)
    # where criterion is entropy, max_depth stays at its default (None): the two entropy points are one
    assert points == [("entropy", "None"), ("gini", "2"), ("gini", "3")]
    assert len(plan.jobs) == 2 * 3 * 2 * 3


def test_applies_falls_back_to_the_fixed_value(tmp_path: Path) -> None:
    plan = plan_of(tmp_path, spec_text('[[model]]\nworker = "decision_tree"\n'
                                       'fixed = { min_samples_leaf = 4 }\n'
                                       'grid = { criterion = ["gini", "entropy"] }\n'
                                       'applies = { min_samples_leaf = { criterion = ["gini"] } }'))
    assert all(c.params["min_samples_leaf"] == 4 for c in plan.configurations)
    assert len(plan.configurations) == 2


def test_identical_blocks_share_configurations(tmp_path: Path) -> None:
    # the same point reached from two model blocks is one configuration (its jobs are planned once)
    plan = plan_of(tmp_path, spec_text('[[model]]\nname = "a"\nworker = "knn"\ngrid = { n_neighbors = [3, 5] }\n'
                                       '[[model]]\nname = "b"\nworker = "knn"\ngrid = { n_neighbors = [5, 7] }'))
    assert sorted(c.params["n_neighbors"] for c in plan.configurations) == [3, 5, 7]
    assert len(plan.jobs) == 2 * 3 * 2 * 3


@settings(max_examples=25, deadline=None)
@given(depths=st.lists(st.integers(1, 30), min_size=1, max_size=4, unique=True),
       leaves=st.lists(st.integers(1, 50), min_size=1, max_size=3, unique=True),
       k=st.integers(2, 6), repeats=st.integers(1, 3))
def test_count_and_growth_hold_for_any_grid(tmp_path_factory, depths, leaves, k, repeats) -> None:
    # property: jobs = datasets x configurations x repeats x k, all keys distinct, and adding one value
    # to a grid keeps every key and adds exactly the new cells' jobs (the issue's "done means")
    folder = tmp_path_factory.mktemp("prop")
    block = '[[model]]\nworker = "decision_tree"\ngrid = {{ max_depth = {}, min_samples_leaf = {} }}'
    small = plan_of(folder, spec_text(block.format(depths, leaves), k=k, repeats=repeats), "a.toml")
    assert len(small.jobs) == 2 * len(depths) * len(leaves) * repeats * k
    assert len({j.key for j in small.jobs}) == len(small.jobs)
    extra = max(depths) + 1
    grown = plan_of(folder, spec_text(block.format(depths + [extra], leaves), k=k, repeats=repeats), "b.toml")
    old = {j.key for j in small.jobs}
    added = [j for j in grown.jobs if j.key not in old]
    assert old <= {j.key for j in grown.jobs}
    assert len(added) == 2 * len(leaves) * repeats * k
    assert all(grown.by_config[j.config_id].params["max_depth"] == extra for j in added)
