"""The ``fuzzy_rules`` worker: one FARC-HD fold job, its declared parameters and its report."""

from __future__ import annotations

from typing import Any

from workers.params import Param
from workers.registry import Worker

_PARAMS: dict[str, Param] = {
    "labels": Param("int", 5, low=2, high=15, doc="linguistic terms per numeric variable"),
    "min_support": Param("float", 0.05, low=0.0, high=1.0, low_open=True,
                         doc="minimum fuzzy support, scaled per class by its share"),
    "max_confidence": Param("float", 0.8, low=0.0, high=1.0, low_open=True,
                            doc="mining stops expanding a node whose confidence exceeds it"),
    "min_confidence": Param("float", 0.0, low=0.0, high=1.0,
                            doc="optional filter of the candidate rules (0: none); at most max_confidence"),
    "depth": Param("int", 3, low=1, high=10, doc="maximum antecedents per rule"),
    "cover_limit": Param("int", 2, low=1, high=100, doc="times a pattern is covered before removal (kt)"),
    "population": Param("int", 50, low=2, high=10_000, doc="CHC population size"),
    "evaluations": Param("int", 15000, low=0, high=10_000_000, doc="CHC fitness evaluations"),
    "penalty": Param("float", 0.15, low=0.0, high=10.0, doc="the delta of the fitness's rule count penalty"),
    "reasoning": Param("str", "additive",
                       choices=("winning_rule", "additive", "choquet", "sugeno_integral", "choquet_t"),
                       doc="fuzzy reasoning method"),
    "measure": Param("str", "power", choices=("cardinality", "power", "sugeno_lambda"),
                     doc="fuzzy measure of the integral reasoning methods"),
    "power_exponent": Param("float", None, low=0.0, high=100.0, low_open=True, nullable=True,
                            doc="exponent q of the power measure; none learns one per class"),
    "tnorm": Param("str", "product", choices=("product", "minimum", "lukasiewicz", "hamacher"),
                   doc="t-norm of choquet_t"),
    "rule_weight": Param("str", "certainty", choices=("certainty", "penalized_certainty"),
                         doc="rule weight: certainty factor or penalized certainty factor"),
    "tuning": Param("bool", True, doc="lateral tuning of the labels"),
    "random_state": Param("int", None, low=0, high=2**31 - 1, nullable=True,
                          doc="seed of the genetic stage; none (default): derived per fold (workers.job.derived_seed)"),
}


def build(params: dict[str, Any], data: Any) -> Any:
    """An unfitted :class:`~workers.fuzzy.FuzzyRuleClassifier` for one job on ``data``."""
    from workers.fuzzy.classifier import FuzzyRuleClassifier

    return FuzzyRuleClassifier(**{name: params[name] for name in _PARAMS},
                               nominal_features=tuple(data.nominal),
                               feature_names=tuple(data.feature_names),
                               class_names=tuple(data.classes),
                               category_names=tuple(data.categories))


def report(estimator: Any, X_test: Any) -> dict[str, Any]:
    """Rule counts per stage, mean antecedents, uncovered test examples, and the rule base text."""
    rules = estimator.rules_
    lengths = rules.lengths(estimator.partition_.pad)
    figures = {
        "rules_mined": int(estimator.n_rules_mined_),
        "rules_screened": int(estimator.n_rules_screened_),
        "rules_selected": int(estimator.n_rules_selected_),
        "mean_antecedents": float(lengths.mean()) if len(lengths) else 0.0,
        "uncovered_test": int(estimator.uncovered(X_test).sum()),
    }
    return {"figures": figures, "model_text": estimator.rule_text()}


def check(params: dict[str, Any]) -> list[str]:
    """Problems across parameters of one complete parameter set (defaults filled in)."""
    if params["min_confidence"] > params["max_confidence"]:
        return [(f"min_confidence ({params['min_confidence']!r}) must not exceed "
                 f"max_confidence ({params['max_confidence']!r})")]
    return []


# version 2: the published mining semantics (max_confidence stops expansion, no confidence filter by default)
# version 3: prescreening selects exactly as the straightforward computation (the incremental one of
# version 2 kept one rule fewer of one class on a glass fold)
FUZZY_RULES = Worker(name="fuzzy_rules", version="3", params=_PARAMS, build=build, report=report,
                     check=check)
