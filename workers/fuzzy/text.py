"""The fitted rule base as readable text (stored with each job).

One line per rule, ``IF petal_width IS high AND ... THEN class_2 (weight 0.91)``,
then comment lines (``#``) with the tuned label centres of each numeric
variable and, for the power measure, the exponent q per class.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from workers.fuzzy.partitions import label_names


def rule_base_text(est: Any) -> str:
    """Text of a fitted :class:`~workers.fuzzy.FuzzyRuleClassifier`."""
    p = est.partition_
    names = label_names(p.labels)
    lines = []
    for items, cls, weight in zip(est.rules_.items, est.rules_.classes, est.rules_.weight):
        terms = [f"{_feature(est, p.item_var[i])} IS {_term(est, p, names, i)}" for i in items if i != p.pad]
        lines.append(f"IF {' AND '.join(terms)} THEN {class_name(est, cls)} (weight {weight:.2f})")
    if not lines:
        lines.append(f"# no rule: every example gets {class_name(est, est.default_class_)}")
    centres = p.centres(est.displacement_)
    for k, var in enumerate(p.numeric):
        pairs = " ".join(f"{n}={c:.4g}" for n, c in zip(names, centres[k]))
        lines.append(f"# {_feature(est, var)}: {pairs}")
    if est.power_exponents_ is not None:
        qs = " ".join(f"{class_name(est, c)}={q:.4g}" for c, q in enumerate(est.power_exponents_))
        lines.append(f"# power measure exponent q: {qs}")
    return "\n".join(lines) + "\n"


def class_name(est: Any, index: int) -> str:
    """Name of class index ``index`` (position in ``classes_``)."""
    label = est.classes_[index]
    if est.class_names is not None and _is_int(label):
        return str(est.class_names[int(label)])
    return f"class_{label}"


def _feature(est: Any, var: int) -> str:
    names = est.feature_names
    return str(names[var]) if names is not None else f"x{var}"


def _term(est: Any, p: Any, names: tuple[str, ...], item: int) -> str:
    code = int(p.item_label[item])
    if item < p.n_numeric_items:
        return names[code]
    cats = est.category_names[p.item_var[item]] if est.category_names is not None else None
    return str(cats[code]) if cats is not None and 0 <= code < len(cats) else str(code)


def _is_int(label: Any) -> bool:
    return isinstance(label, (int, np.integer)) or (isinstance(label, (float, np.floating))
                                                     and float(label).is_integer())
