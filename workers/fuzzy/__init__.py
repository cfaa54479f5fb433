"""The fuzzy association rule-based classifier (FARC-HD) and its parts.

``FuzzyRuleClassifier`` is the estimator; the stages live in
``partitions``, ``mining``, ``prescreen``, ``genetic`` and ``reasoning``.
The estimator is imported on first use (PEP 562): the ``fuzzy_rules``
worker's declarations (``workers.fuzzy.worker``) are read at every planning
step, and planning must not pay for importing scikit-learn.
"""

from typing import Any

__all__ = [
    # the estimator
    "FuzzyRuleClassifier",
]


def __getattr__(name: str) -> Any:
    if name == "FuzzyRuleClassifier":
        from workers.fuzzy.classifier import FuzzyRuleClassifier

        return FuzzyRuleClassifier
    raise AttributeError(f"module 'workers.fuzzy' has no attribute {name!r}")
