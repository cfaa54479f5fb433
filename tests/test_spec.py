"""Tests of sweep.spec: the bad-input catalogue (SpecError naming file and key) and canonical identity."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from sweep.errors import SpecError
from sweep.plan import make_plan
from sweep.spec import load_spec
from workers.registry import get_worker

HEAD = """
name = "t"
[folds]
k = 3
[[dataset]]
name = "iris"
builtin = "iris"
"""


def write_spec(tmp_path: Path, text: str, name: str = "sweep.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def model(body: str, worker: str = "decision_tree") -> str:
    return HEAD + f'[[model]]\nworker = "{worker}"\n' + body + "\n"


def spec_error(tmp_path: Path, text: str) -> str:
    path = write_spec(tmp_path, text)
    with pytest.raises(SpecError) as info:
        load_spec(path)
    message = str(info.value)
    assert str(path) in message, "the message names the file"
    assert "\n" not in message, "one line"
    return message


# ---- the bad-input catalogue --------------------------------------------------------------------

def test_unreadable_toml(tmp_path: Path) -> None:
    message = spec_error(tmp_path, 'name = "unterminated\n')
    assert "not valid TOML" in message


def test_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "sweep.toml"
    path.write_bytes(b'name = "caf\xe9"\n')
    with pytest.raises(SpecError, match=re.escape(str(path))):
        load_spec(path)


def test_missing_file(tmp_path: Path) -> None:
    path = tmp_path / "absent.toml"
    with pytest.raises(SpecError, match=re.escape(str(path)) + ".*cannot read"):
        load_spec(path)


def test_unknown_top_level_key_names_the_nearest(tmp_path: Path) -> None:
    message = spec_error(tmp_path, 'stor = "x.sqlite"\n' + model(""))
    assert "'stor'" in message and "did you mean 'store'" in message


def test_unknown_folds_key(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("").replace("k = 3", "k = 3\nrepeat = 2"))
    assert "'folds.repeat'" in message and "did you mean 'repeats'" in message


def test_misspelt_parameter_names_the_nearest(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("fixed = { n_neigbors = 3 }", worker="knn"))
    assert "fixed.n_neigbors" in message and "did you mean 'n_neighbors'" in message


def test_misspelt_grid_parameter(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("grid = { max_dept = [2, 3] }"))
    assert "grid.max_dept" in message and "did you mean 'max_depth'" in message


@pytest.mark.parametrize("body, key", [
    ("fixed = { min_samples_leaf = 0 }", "fixed.min_samples_leaf"),
    ("grid = { max_depth = [2, 5000] }", "grid.max_depth"),
])
def test_value_out_of_range(tmp_path: Path, body: str, key: str) -> None:
    message = spec_error(tmp_path, model(body))
    assert key in message and "in [1, " in message


def test_value_not_a_choice(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model('fixed = { criterion = "ginny" }'))
    assert "fixed.criterion" in message and "'gini'" in message


@pytest.mark.parametrize("body, key", [
    ('fixed = { max_depth = "deep" }', "fixed.max_depth"),
    ("fixed = { min_samples_leaf = 1.5 }", "fixed.min_samples_leaf"),
    ("fixed = { min_samples_leaf = true }", "fixed.min_samples_leaf"),
    ("grid = { criterion = [1, 2] }", "grid.criterion"),
])
def test_wrong_type(tmp_path: Path, body: str, key: str) -> None:
    message = spec_error(tmp_path, model(body))
    assert key in message and "must be" in message


def test_wrong_type_of_top_level_value(tmp_path: Path) -> None:
    message = spec_error(tmp_path, 'time_limit = "ten"\n' + model(""))
    assert "time_limit" in message


def test_fold_count_below_two(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("").replace("k = 3", "k = 1"))
    assert "folds.k" in message and ">= 2" in message


def test_empty_grid(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("grid = { max_depth = [] }"))
    assert "grid.max_depth" in message and "empty" in message


def test_grid_empty_after_exclude(tmp_path: Path) -> None:
    spec = load_spec(write_spec(tmp_path, model('grid = { criterion = ["gini"] }\n'
                                                'exclude = [ { criterion = "gini" } ]')))
    with pytest.raises(SpecError, match=r"model\[0\].*empty after its exclude"):
        plan(spec)


def test_unknown_worker_names_the_nearest(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("", worker="decision_tre"))
    assert "worker" in message and "did you mean 'decision_tree'" in message


def test_unimportable_plugin_worker(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("", worker="tests.no_such_module:WORKER"))
    assert "cannot be imported" in message


def test_param_both_fixed_and_grid(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("fixed = { max_depth = 3 }\ngrid = { max_depth = [2, 4] }"))
    assert "'max_depth'" in message and "both in fixed and in grid" in message


def test_no_model_block(tmp_path: Path) -> None:
    message = spec_error(tmp_path, HEAD)
    assert "[[model]]" in message


def test_unknown_dataset_key(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model("").replace('builtin = "iris"', 'builtin = "iris"\ntarger = "y"'))
    assert "'targer'" in message and "dataset[0]" in message


def test_unknown_exclude_parameter(tmp_path: Path) -> None:
    message = spec_error(tmp_path, model('grid = { max_depth = [2, 3] }\nexclude = [ { max_dpth = 2 } ]'))
    assert "exclude[0].max_dpth" in message and "did you mean 'max_depth'" in message


# ---- canonical identity (through sweep.plan) ---------------------------------------------------

def plan(spec):
    workers = {m.worker: get_worker(m.worker) for m in spec.models}
    return make_plan(spec, {d["name"]: "0123456789abcdef" for d in spec.datasets}, workers)


def config_ids(tmp_path: Path, body: str, name: str) -> list[str]:
    return sorted(c.config_id for c in plan(load_spec(write_spec(tmp_path, model(body), name))).configurations)


def test_parameter_order_does_not_change_identity(tmp_path: Path) -> None:
    a = config_ids(tmp_path, 'fixed = { criterion = "entropy", max_depth = 3 }\n'
                             'grid = { min_samples_leaf = [1, 2], random_state = [0, 1] }', "a.toml")
    b = config_ids(tmp_path, 'fixed = { max_depth = 3, criterion = "entropy" }\n'
                             'grid = { random_state = [1, 0], min_samples_leaf = [2, 1] }', "b.toml")
    assert len(a) == 4 and a == b


def test_default_written_out_equals_default_left_out(tmp_path: Path) -> None:
    implicit = config_ids(tmp_path, "grid = { max_depth = [2, 3] }", "a.toml")
    explicit = config_ids(tmp_path, 'fixed = { criterion = "gini", min_samples_leaf = 1, random_state = "none" }\n'
                                    "grid = { max_depth = [2, 3] }", "b.toml")
    assert implicit == explicit


def test_integral_float_is_the_same_integer(tmp_path: Path) -> None:
    assert config_ids(tmp_path, "fixed = { max_depth = 3 }", "a.toml") == \
        config_ids(tmp_path, "fixed = { max_depth = 3.0 }", "b.toml")


def test_other_value_is_another_configuration(tmp_path: Path) -> None:
    assert config_ids(tmp_path, "fixed = { max_depth = 3 }", "a.toml") != \
        config_ids(tmp_path, "fixed = { max_depth = 4 }", "b.toml")
