"""The fuzzy association rule-based classifier (FARC-HD) and its parts.

``FuzzyRuleClassifier`` is the estimator; the stages live in
``partitions``, ``mining``, ``prescreen``, ``genetic`` and ``reasoning``.
"""

from workers.fuzzy.classifier import FuzzyRuleClassifier

__all__ = [
    # the estimator
    "FuzzyRuleClassifier",
]
