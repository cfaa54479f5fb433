"""scikit-learn estimators as reference rows of a sweep.

Each baseline is a :class:`workers.registry.Worker`. Nominal features are
one-hot encoded and, for the distance- and gradient-based models, numeric
features standardised, inside a pipeline fitted on the training part only.
"""

from __future__ import annotations

from typing import Any, Callable

from workers.params import Param
from workers.registry import Worker

_SEED = Param("int", None, low=0, high=2**31 - 1, nullable=True,
               doc="random seed of the estimator; none (default): derived per fold (workers.job.derived_seed)")


def _preprocessed(estimator: Any, data: Any, *, scale: bool) -> Any:
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    nominal = [i for i, is_nominal in enumerate(data.nominal) if is_nominal]
    numeric = [i for i, is_nominal in enumerate(data.nominal) if not is_nominal]
    if not nominal and not scale:
        return estimator
    parts = [("numeric", StandardScaler() if scale else "passthrough", numeric)]
    if nominal:
        categories = [list(range(len(data.categories[i]))) for i in nominal]
        parts.append(("nominal", OneHotEncoder(categories=categories, handle_unknown="ignore"), nominal))
    return make_pipeline(ColumnTransformer(parts), estimator)


def _tree_figures(estimator: Any, X_test: Any) -> dict[str, Any]:
    tree = estimator[-1] if hasattr(estimator, "steps") else estimator
    return {"figures": {"tree_leaves": tree.get_n_leaves(), "tree_depth": tree.get_depth()}, "model_text": None}


def _build(factory: Callable[[dict[str, Any]], Any], scale: bool) -> Callable[[dict[str, Any], Any], Any]:
    def build(params: dict[str, Any], data: Any) -> Any:
        return _preprocessed(factory(params), data, scale=scale)
    return build


def _tree(p: dict[str, Any]) -> Any:
    from sklearn.tree import DecisionTreeClassifier

    return DecisionTreeClassifier(criterion=p["criterion"], max_depth=p["max_depth"],
                                  min_samples_leaf=p["min_samples_leaf"], random_state=p["random_state"])


def _knn(p: dict[str, Any]) -> Any:
    from sklearn.neighbors import KNeighborsClassifier

    return KNeighborsClassifier(n_neighbors=p["n_neighbors"], weights=p["weights"])


def _logistic(p: dict[str, Any]) -> Any:
    from sklearn.linear_model import LogisticRegression

    return LogisticRegression(C=p["C"], max_iter=p["max_iter"], random_state=p["random_state"])


def _forest(p: dict[str, Any]) -> Any:
    from sklearn.ensemble import RandomForestClassifier

    return RandomForestClassifier(n_estimators=p["n_estimators"], max_depth=p["max_depth"],
                                  random_state=p["random_state"], n_jobs=1)


DECISION_TREE = Worker(
    name="decision_tree", version="1", build=_build(_tree, scale=False), report=_tree_figures,
    params={
        "criterion": Param("str", "gini", choices=("gini", "entropy", "log_loss"), doc="split quality"),
        "max_depth": Param("int", None, low=1, high=1000, nullable=True, doc="maximum depth, none for unlimited"),
        "min_samples_leaf": Param("int", 1, low=1, high=10_000, doc="minimum rows per leaf"),
        "random_state": _SEED,
    },
)

KNN = Worker(
    name="knn", version="1", build=_build(_knn, scale=True),
    params={
        "n_neighbors": Param("int", 5, low=1, high=1000, doc="neighbours that vote"),
        "weights": Param("str", "uniform", choices=("uniform", "distance"), doc="vote weighting"),
    },
)

LOGISTIC_REGRESSION = Worker(
    name="logistic_regression", version="1", build=_build(_logistic, scale=True),
    params={
        "C": Param("float", 1.0, low=0.0, low_open=True, high=1e6, doc="inverse regularisation strength"),
        "max_iter": Param("int", 1000, low=10, high=100_000, doc="solver iterations"),
        "random_state": _SEED,
    },
)

RANDOM_FOREST = Worker(
    name="random_forest", version="1", build=_build(_forest, scale=False),
    params={
        "n_estimators": Param("int", 100, low=1, high=10_000, doc="trees in the forest"),
        "max_depth": Param("int", None, low=1, high=1000, nullable=True, doc="maximum depth, none for unlimited"),
        "random_state": _SEED,
    },
)
