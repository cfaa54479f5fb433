"""The ``fuzzy_rules`` worker: declared parameters, build from a dataset, report."""

from __future__ import annotations

import inspect

import numpy as np
import pytest

from sweep.datasets import Dataset
from workers.fuzzy import FuzzyRuleClassifier
from workers.fuzzy.worker import FUZZY_RULES
from workers.registry import get_worker

DATA_ONLY = {"nominal_features", "feature_names", "class_names", "category_names"}


def _dataset() -> Dataset:
    rng = np.random.default_rng(3)
    width = rng.random(90) * 3
    colour = rng.integers(0, 3, 90)
    y = np.where(colour == 1, 0, np.where(width > 1.5, 1, 2))
    return Dataset.from_arrays("toy", np.c_[width, colour], y, feature_names=["petal_width", "colour"],
                               classes=["green", "large", "small"], nominal=[False, True],
                               categories=[None, ["blue", "green", "red"]])


def test_registered_under_its_name():
    assert get_worker("fuzzy_rules") is FUZZY_RULES
    assert FUZZY_RULES.name == "fuzzy_rules" and FUZZY_RULES.version


def test_every_estimator_parameter_declared_with_its_default():
    signature = inspect.signature(FuzzyRuleClassifier.__init__).parameters
    declared = set(FUZZY_RULES.params)
    assert declared == set(signature) - {"self"} - DATA_ONLY
    for name, param in FUZZY_RULES.params.items():
        assert param.check(param.default) == param.default
        assert param.default == signature[name].default, name
    # None: the job fills in the fold's derived seed (workers.job.derived_seed), so every job is reproducible
    assert FUZZY_RULES.params["random_state"].default is None


def test_declared_ranges_and_choices():
    p = FUZZY_RULES.params
    assert p["power_exponent"].check("none") is None
    assert p["power_exponent"].check(100) == 100.0
    for bad in (0, 101):
        with pytest.raises(ValueError):
            p["power_exponent"].check(bad)
    assert p["tnorm"].choices == ("product", "minimum", "lukasiewicz", "hamacher")
    assert set(p["reasoning"].choices) == {"winning_rule", "additive", "choquet", "sugeno_integral", "choquet_t"}
    with pytest.raises(ValueError):
        p["labels"].check(1)


def test_build_fit_and_report():
    data = _dataset()
    params = {name: param.default for name, param in FUZZY_RULES.params.items()}
    params.update(evaluations=300, population=20)
    est = FUZZY_RULES.build(params, data)
    assert isinstance(est, FuzzyRuleClassifier) and not hasattr(est, "rules_")
    assert est.evaluations == 300 and est.random_state is None  # the job fills it (workers.job.job_params)
    est.fit(data.X[:70], data.y[:70])
    out = FUZZY_RULES.report(est, data.X[70:])
    figures = out["figures"]
    assert set(figures) == {"rules_mined", "rules_screened", "rules_selected", "mean_antecedents", "uncovered_test"}
    assert figures["rules_mined"] >= figures["rules_screened"] >= figures["rules_selected"] >= 1
    assert 1 <= figures["mean_antecedents"] <= params["depth"]
    assert figures["uncovered_test"] == int(est.uncovered(data.X[70:]).sum())
    text = out["model_text"]
    assert "colour IS green" in text and "THEN green" in text  # names from the dataset's categories and classes
    assert "petal_width IS" in text


def test_one_fold_job_through_run_job():
    # the worker as the pipeline runs it: registry name, canonical parameters, one fold of the dataset
    from workers.job import Job, run_job

    data = _dataset()
    params = {name: param.default for name, param in FUZZY_RULES.params.items()}
    params.update(evaluations=300, population=20, reasoning="choquet", measure="sugeno_lambda")
    job = Job(key="k", worker="fuzzy_rules", params=params, dataset="toy", fingerprint=data.fingerprint,
              repeat=0, fold=0, test_index=np.arange(70, 90))
    result = run_job(job, data)
    assert result.ok, result.error
    assert result.accuracy > 0.7 and result.figures["rules_selected"] >= 1
    assert result.model_text.startswith("IF ")


def test_min_confidence_above_max_confidence_is_a_spec_error(tmp_path):
    from sweep.errors import SpecError
    from sweep.spec import load_spec

    head = '[folds]\nk = 3\n[[dataset]]\nname = "iris"\nbuiltin = "iris"\n[[model]]\nworker = "fuzzy_rules"\n'
    path = tmp_path / "s.toml"
    path.write_text(head + "fixed = { min_confidence = 0.9 }\n")  # above the default max_confidence 0.8
    with pytest.raises(SpecError, match=r"s\.toml.*min_confidence \(0\.9\) must not exceed max_confidence"):
        load_spec(path)
    path.write_text(head + "grid = { min_confidence = [0.0, 0.5], max_confidence = [0.6, 0.4] }\n")
    with pytest.raises(SpecError, match=r"min_confidence \(0\.5\) must not exceed max_confidence \(0\.4\)"):
        load_spec(path)
    path.write_text(head + "grid = { min_confidence = [0.0, 0.5], max_confidence = [0.6, 0.9] }\n")
    assert load_spec(path).models[0].grid["max_confidence"] == (0.6, 0.9)
