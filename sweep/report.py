"""Reports on a sweep's results: cell summaries, winners, tables, comparisons, ranks, plots.

Everything here works on a results frame (one row per finished job) and
never touches the store; :func:`sweep.results.load_sweep_results` builds the
:class:`SweepResults` these functions take. Aggregation is vectorised with
``groupby``: a million job rows take about a second.

Vocabulary: a *cell* is (dataset, configuration); its score is the mean of
the metric over the cell's finished jobs (repeats x folds). A cell is
*complete* when it has as many results as planned jobs, and *missing* when
it is planned but has none. Paired tests over datasets use, by default, only
the datasets where every compared cell is complete and name the others with
the reason (:func:`paired_means`); with ``partial`` they use the folds the
compared configurations share. They never impute. Configurations are shown
by their readable names (``SweepResults.names``, from :mod:`sweep.naming`);
JSON records carry the id beside the name.

Tie rule of :func:`best` (the README states it): the higher mean wins (the
lower for metrics where lower is better), then the smaller standard
deviation, then more finished folds, then the lexicographically smallest
``config_id``. Means and sds are compared after rounding to
:data:`sweep.stats.DECIMALS` places, so float noise never decides.
"""

from __future__ import annotations

import difflib
import json
import math
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from sweep import stats
from sweep.errors import SelectionError

__all__ = [
    "SweepResults",
    "HIGHER_IS_BETTER",
    "LOWER_IS_BETTER",
    "higher_is_better",
    "configurations",
    "select",
    "select_one",
    "cell_stats",
    "best",
    "score_matrix",
    "table",
    "Comparison",
    "compare",
    "RankReport",
    "rank",
    "plot_ranks",
    "plot_heatmap",
    "rank_figure",
    "heatmap_figure",
    "figure_bytes",
    "paired_means",
    "ROPE",
    "write_text_atomic",
]

#: Metrics where a higher value is better.
HIGHER_IS_BETTER = frozenset({"accuracy", "balanced_accuracy", "kappa", "train_accuracy"})
#: Metrics where a lower value is better (plus every ``rules_*`` figure and ``*_seconds``).
LOWER_IS_BETTER = frozenset({"fit_seconds", "predict_seconds", "error"})

_JOB_COLUMNS = ("key", "dataset", "config_id", "name", "worker", "label", "repeat", "fold", "worker_version", "host")
#: Columns describing a configuration besides its parameters (usable in filters).
_CONFIG_COLUMNS = ("worker", "label")


@dataclass(frozen=True)
class SweepResults:
    """A sweep's finished results, as the reports read them.

    Built by ``sweep.results.load_sweep_results(spec_path)``.
    """

    #: One row per finished job: key, dataset, config_id, worker, repeat, fold,
    #: the metrics, optional figure columns and one column per model parameter.
    frame: pd.DataFrame
    #: Which columns of ``frame`` are model parameters.
    params: list[str]
    #: Planned jobs per cell: columns dataset, config_id, jobs.
    planned: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=["dataset", "config_id", "jobs"]))
    #: The spec file the results belong to (named in error messages).
    spec_path: str | None = None
    #: config_id -> readable name (sweep.naming); an id without one is shown as itself.
    names: dict[str, str] = field(default_factory=dict)
    #: config_id -> {"model", "worker", "params"}: the parameters that apply, for legends.
    legend: dict[str, dict[str, Any]] = field(default_factory=dict)
    #: Folds per repeat and repeats of the fold scheme (None: inferred from the rows).
    k: int | None = None
    repeats: int | None = None
    #: What else the loader read (the tracker view, job counts, failures, dataset records).
    info: dict[str, Any] = field(default_factory=dict)
    #: Derived tables kept for the next report on the same results (cell statistics per metric, configurations).
    cache: dict[Any, Any] = field(default_factory=dict, compare=False, repr=False)

    @property
    def source(self) -> str:
        return str(self.spec_path) if self.spec_path else "results"

    def name_of(self, config_id: Any) -> Any:
        """The readable name of a configuration id (the id itself when it has none; None stays None)."""
        return None if config_id is None else self.names.get(config_id, config_id)

    @property
    def folds_k(self) -> int:
        """Folds per repeat (k of k-fold): from the plan, else from the rows."""
        if self.k:
            return int(self.k)
        return int(self.frame["fold"].max()) + 1 if len(self.frame) else 0


# --------------------------------------------------------------------------
# metrics and configurations
# --------------------------------------------------------------------------


def higher_is_better(metric: str) -> bool:
    """Direction of a metric: higher for accuracy-like scores, lower for everything else.

    Higher: :data:`HIGHER_IS_BETTER` and names containing accuracy, kappa,
    auc, f1, precision or recall. Lower: errors, times (``*_seconds``) and
    the model size figures workers report (``rules_*``, depth, leaves, ...).
    """
    if metric in HIGHER_IS_BETTER:
        return True
    if metric in LOWER_IS_BETTER or metric.startswith("rules_") or metric.endswith("_seconds"):
        return False
    return any(word in metric for word in _HIGHER_WORDS)


_HIGHER_WORDS = ("accuracy", "kappa", "auc", "f1", "precision", "recall")


def _check_metric(res: SweepResults, metric: str) -> None:
    frame = res.frame
    if metric in frame.columns and metric not in _JOB_COLUMNS and metric not in res.params:
        if pd.api.types.is_numeric_dtype(frame[metric]):
            return
    allowed = [c for c in frame.columns if c not in _JOB_COLUMNS and c not in res.params
               and pd.api.types.is_numeric_dtype(frame[c])]
    near = difflib.get_close_matches(metric, allowed, n=1)
    hint = f" (did you mean {near[0]!r}?)" if near else ""
    raise SelectionError(f"{res.source}: metric {metric!r} is not a result column{hint}; allowed: {', '.join(allowed)}")


def _direction(metric: str, override: bool | None) -> bool:
    return higher_is_better(metric) if override is None else override


def configurations(res: SweepResults) -> pd.DataFrame:
    """One row per configuration seen or planned: index config_id, columns worker (label) + parameters.

    With a legend (the loader's), parameters that do not apply to a configuration are None.
    """
    if "configurations" not in res.cache:
        res.cache["configurations"] = _configurations(res)
    return res.cache["configurations"].copy()


def _configurations(res: SweepResults) -> pd.DataFrame:
    cols = ["config_id", *_config_columns(res), *res.params]
    if res.legend:
        rows = [{"config_id": cid, "worker": e["worker"], "label": e["model"],
                 **{p: e["params"].get(p) for p in res.params}} for cid, e in res.legend.items()]
        return pd.DataFrame(rows, columns=cols).set_index("config_id").sort_index()
    seen = res.frame.drop_duplicates("config_id")[cols].set_index("config_id")
    planned_only = pd.Index(res.planned["config_id"].unique()).difference(seen.index)
    if len(planned_only):
        seen = pd.concat([seen, pd.DataFrame(index=planned_only, columns=seen.columns)])
    return seen.sort_index()


def _config_columns(res: SweepResults) -> list[str]:
    return [c for c in _CONFIG_COLUMNS if (res.legend or c in res.frame.columns) and c not in res.params]


def _parse_filter(res: SweepResults, text: str) -> dict[str, str]:
    keys = [*_config_columns(res), *res.params]
    out: dict[str, str] = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        name, sep, value = part.partition("=")
        name = name.strip()
        if not sep or not name:
            raise SelectionError(f"{res.source}: filter part {part!r} must be NAME=VALUE, e.g. reasoning=choquet")
        if name not in keys:
            near = difflib.get_close_matches(name, keys, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise SelectionError(f"{res.source}: filter key {name!r} is not a parameter{hint}; allowed: {', '.join(keys)}")
        out[name] = value.strip()
    return out


def _matches(column: pd.Series, value: str) -> pd.Series:
    """Compare a parameter column with a filter value as text, and numerically when both are numbers."""
    text = column.map(lambda v: "none" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v).lower())
    hit = text == value.lower()
    try:
        number = float(value)
    except ValueError:
        return hit
    numeric = pd.to_numeric(column, errors="coerce")
    return hit | np.isclose(numeric.to_numpy(dtype=float), number, equal_nan=False)


def select(res: SweepResults, selector: str | None) -> list[str]:
    """Configuration ids chosen by an id, a unique id prefix, or a filter ``a=x,b=y``.

    ``None`` or an empty string selects every configuration. Raises
    :class:`~sweep.errors.SelectionError` when nothing matches.
    """
    confs = configurations(res)
    if not selector:
        return list(confs.index)
    named = [cid for cid in confs.index if res.names.get(cid) == selector]
    if named:
        return named
    if "=" not in selector:
        ids = [selector] if selector in confs.index else [c for c in confs.index if c.startswith(selector)]
        if not ids:
            near = difflib.get_close_matches(selector, [*res.names.values(), *confs.index], n=3)
            hint = f"; nearest: {', '.join(near)}" if near else ""
            raise SelectionError(f"{res.source}: no configuration has the name or id {selector!r}{hint} "
                                 "(see `foldsweep configs`)")
        return ids
    mask = pd.Series(True, index=confs.index)
    for name, value in _parse_filter(res, selector).items():
        mask &= _matches(confs[name], value).to_numpy()
    if not mask.any():
        raise SelectionError(f"{res.source}: no configuration matches the filter {selector!r}")
    return list(confs.index[mask.to_numpy()])


def select_one(res: SweepResults, selector: str) -> str:
    """Exactly one configuration id for ``selector``; ambiguous selections raise SelectionError."""
    ids = select(res, selector)
    if len(ids) > 1:
        shown = ", ".join(f"{res.name_of(i)!r}" for i in ids[:5]) + (", ..." if len(ids) > 5 else "")
        raise SelectionError(
            f"{res.source}: {selector!r} matches {len(ids)} configurations ({shown}); add parameters to the filter or give an id"
        )
    return ids[0]


# --------------------------------------------------------------------------
# cells and winners
# --------------------------------------------------------------------------


def cell_stats(res: SweepResults, metric: str = "accuracy", *, configs: list[str] | None = None) -> pd.DataFrame:
    """Mean, sd (ddof=1), number of finished jobs and planned jobs of every cell.

    Returns a frame indexed by (dataset, config_id) with columns ``mean``,
    ``sd``, ``n``, ``planned`` (NaN when unknown) and ``complete``. Planned
    cells without any result appear with ``n = 0`` and NaN mean.
    """
    _check_metric(res, metric)
    key = ("cells", metric)
    if key not in res.cache:  # one pass over the job rows per metric; later calls select cells from it
        grouped = res.frame.groupby(["dataset", "config_id"], sort=False, observed=True)[metric]
        cells = grouped.agg(["mean", "std", "count"]).rename(columns={"std": "sd", "count": "n"})
        planned = res.planned.set_index(["dataset", "config_id"])["jobs"]
        cells = cells.join(planned.rename("planned"), how="outer")
        cells["n"] = cells["n"].fillna(0).astype(int)
        cells["complete"] = cells["planned"].notna() & (cells["n"] >= cells["planned"].fillna(np.inf))
        res.cache[key] = cells.sort_index()
    cells = res.cache[key]
    if configs is not None:
        cells = cells[cells.index.get_level_values("config_id").isin(configs)]
    return cells.copy()


def _rank_key(cells: pd.DataFrame, up: bool) -> pd.DataFrame:
    """Columns that sort cells best-first under the documented tie rule."""
    mean = cells["mean"].round(stats.DECIMALS)
    return pd.DataFrame(
        {
            "k_mean": -mean if up else mean,
            "k_sd": cells["sd"].round(stats.DECIMALS).fillna(np.inf),
            "k_n": -cells["n"],
        },
        index=cells.index,
    )


def best(
    res: SweepResults,
    metric: str = "accuracy",
    *,
    where: str | None = None,
    higher: bool | None = None,
) -> pd.DataFrame:
    """Per dataset, the winning configuration by the cell mean of ``metric``.

    Parameters
    ----------
    res : SweepResults
    metric : str, default="accuracy"
    where : str, optional
        Restrict the candidates: a configuration id or a filter ``a=x,b=y``.
    higher : bool, optional
        Override the metric's direction (see :func:`higher_is_better`).

    Returns
    -------
    pandas.DataFrame
        One row per dataset with columns dataset, config_id, worker, params
        (dict), mean, sd, folds, planned, complete, runner_up, margin,
        metric, plus ``name`` and ``runner_up_name`` (readable names) and the
        per-dataset test of winner against runner-up on the folds both have:
        ``test_p`` (Nadeau & Bengio's corrected resampled t, two-sided; NaN with
        fewer than 2 shared folds) and ``test_folds``. Ties follow the module's
        tie rule; ``margin`` is how much better the winner is than the runner-up
        (NaN without a runner-up). ``complete`` is False for a winner with fewer
        finished folds than planned. Datasets without any result have
        ``config_id`` None and folds 0.
    """
    up = _direction(metric, higher)
    cells = cell_stats(res, metric, configs=select(res, where) if where else None)
    done = cells[cells["n"] > 0].join(_rank_key(cells, up)).reset_index()
    done = done.sort_values(["dataset", "k_mean", "k_sd", "k_n", "config_id"], kind="stable")
    top = done.groupby("dataset", sort=False).head(2)
    first = top.groupby("dataset", sort=False).nth(0).set_index("dataset")
    second = top.groupby("dataset", sort=False).nth(1).set_index("dataset")
    out = first[["config_id", "mean", "sd", "n", "planned", "complete"]].rename(columns={"n": "folds"})
    out["runner_up"] = second["config_id"].reindex(out.index)
    gap = out["mean"] - second["mean"].reindex(out.index)
    out["margin"] = gap if up else -gap
    out = out.reindex(sorted(cells.index.get_level_values(0).unique()))
    out["folds"] = out["folds"].fillna(0).astype(int)
    out["complete"] = out["complete"].fillna(False).astype(bool)
    for col in ("config_id", "runner_up"):
        out[col] = out[col].astype(object).where(out[col].notna(), None)
    confs = configurations(res)
    out["worker"] = confs["worker"].reindex(out["config_id"]).to_numpy() if "worker" in confs else None
    out["params"] = _params_of(confs, out["config_id"], res.params)
    out["metric"] = metric
    out = out.reset_index().rename(columns={"index": "dataset"})
    out["name"] = [res.name_of(c) for c in out["config_id"]]
    out["runner_up_name"] = [res.name_of(c) for c in out["runner_up"]]
    pairs = {c for c in [*out["config_id"], *out["runner_up"]] if isinstance(c, str)}
    rows = res.frame[res.frame["config_id"].isin(pairs)]  # one pass over the job rows, then small frames
    tests = [_fold_test(res, metric, d, a, b, rows[rows["dataset"] == d])
             for d, a, b in zip(out["dataset"], out["config_id"], out["runner_up"])]
    out["test_p"] = [t[0] for t in tests]
    out["test_folds"] = [t[1] for t in tests]
    cols = ["dataset", "config_id", "name", "worker", "params", "mean", "sd", "folds", "planned", "complete",
            "runner_up", "runner_up_name", "margin", "test_p", "test_folds", "metric"]
    return out[cols]


def _test_train_ratio(res: SweepResults) -> float:
    """n_test / n_train of one fold of k-fold: 1 / (k - 1)."""
    k = res.folds_k
    return 1.0 / (k - 1) if k > 1 else float("nan")


def _paired_folds(frame: pd.DataFrame, metric: str, dataset: str, a: str,
                  b: str) -> tuple[np.ndarray, np.ndarray]:
    """Scores of ``a`` and ``b`` on the (repeat, fold)s of ``dataset`` both have finished (``frame``: job rows,
    best already narrowed to the configurations concerned)."""
    pairs = _paired_fold_table(frame, metric, a, b)
    return pairs.get(dataset, (np.empty(0), np.empty(0)))


def _paired_fold_table(frame: pd.DataFrame, metric: str, a: str, b: str) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """dataset -> (scores of ``a``, scores of ``b``) on the (repeat, fold)s both have, in (repeat, fold) order."""
    index = ["dataset", "repeat", "fold"]
    sides = [frame[frame["config_id"] == c].drop_duplicates(index).set_index(index)[metric] for c in (a, b)]
    both = pd.concat(sides, axis=1, keys=["a", "b"], join="inner").sort_index()
    out = {}
    for dataset, part in both.groupby(level="dataset", sort=False):
        out[str(dataset)] = (part["a"].to_numpy(dtype=float), part["b"].to_numpy(dtype=float))
    return out


def _fold_test(res: SweepResults, metric: str, dataset: str, a: Any, b: Any,
               frame: pd.DataFrame) -> tuple[float, int]:
    """(corrected resampled t p-value, shared folds) of ``a`` against ``b`` on one dataset."""
    if not isinstance(a, str) or not isinstance(b, str):
        return float("nan"), 0
    x, y = _paired_folds(frame, metric, dataset, a, b)
    ratio = _test_train_ratio(res)
    if x.size < 2 or not math.isfinite(ratio):
        return float("nan"), int(x.size)
    return stats.corrected_resampled_t(x, y, test_train_ratio=ratio).p_value, int(x.size)


def _params_of(confs: pd.DataFrame, ids: pd.Series, params: list[str]) -> list[dict[str, Any] | None]:
    """Each configuration's parameters as a dict, leaving out those it lacks (NaN/None)."""
    known = [isinstance(c, str) for c in ids]
    rows = confs.reindex([c for c, k in zip(ids, known) if k])[params].to_dict("records")
    it = iter(rows)
    return [{k: _param_value(v) for k, v in next(it).items() if _plain(v) is not None} if k else None for k in known]


def _param_value(value: Any) -> Any:
    """A parameter value as the spec wrote it: integral floats (an int column with NaN) back to int."""
    value = _plain(value)
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


def _plain(value: Any) -> Any:
    """A JSON-friendly Python scalar: numpy scalars unwrapped, NaN and infinities as None."""
    if value is None:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """Rows of a report frame as JSON-friendly dicts."""
    return [{k: (v if isinstance(v, dict) else _plain(v)) for k, v in row.items()} for row in frame.to_dict("records")]


# --------------------------------------------------------------------------
# dataset x configuration matrices
# --------------------------------------------------------------------------


def score_matrix(
    res: SweepResults, metric: str = "accuracy", *, configs: list[str] | None = None, pivot: str | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Cell means and cell stats as a datasets x columns matrix.

    Columns are configuration ids, or with ``pivot`` the values of that
    parameter (every other parameter must then be fixed, by ``configs``).
    Returns ``(means, cells)`` where ``cells`` is :func:`cell_stats` with a
    ``column`` label added. Missing cells are NaN.
    """
    cells = cell_stats(res, metric, configs=configs).reset_index()
    if pivot is None:
        cells["column"] = cells["config_id"]
    else:
        cells["column"] = _pivot_labels(res, cells["config_id"].unique(), pivot).reindex(cells["config_id"]).to_numpy()
    means = cells.pivot(index="dataset", columns="column", values="mean")
    if pivot is None and res.legend:  # the spec's order (model blocks, then grid order), not the ids' order
        order = {cid: i for i, cid in enumerate(res.legend)}
        means = means[sorted(means.columns, key=lambda c: (order.get(c, len(order)), c))]
    return means, cells


def _pivot_labels(res: SweepResults, ids, pivot: str) -> pd.Series:
    if pivot not in res.params:
        near = difflib.get_close_matches(pivot, res.params, n=1)
        hint = f" (did you mean {near[0]!r}?)" if near else ""
        raise SelectionError(f"{res.source}: pivot {pivot!r} is not a parameter{hint}; allowed: {', '.join(res.params)}")
    confs = configurations(res).loc[list(ids)]
    labels = confs[pivot].map(lambda v: "none" if _plain(v) is None else str(_param_value(v)))
    if labels.duplicated().any():
        others = [p for p in res.params if p != pivot and confs[p].astype(str).nunique() > 1]
        raise SelectionError(
            f"{res.source}: pivot {pivot!r} needs the other parameters fixed; still varying: {', '.join(others) or 'worker'}"
            " (fix them with a filter, e.g. --where " + (f"{others[0]}=..." if others else "worker=...") + ")"
        )
    return labels


def _complete_rows(means: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    keep = means.notna().all(axis=1)
    return means[keep], [str(d) for d in means.index[~keep]]


# --------------------------------------------------------------------------
# tables
# --------------------------------------------------------------------------


def table(
    res: SweepResults,
    metric: str = "accuracy",
    *,
    fmt: str = "markdown",
    sd: bool = False,
    pivot: str | None = None,
    where: str | None = None,
    decimals: int = 3,
    higher: bool | None = None,
    caption: str | None = None,
    label: str | None = None,
    legend: bool = False,
) -> str:
    """Per-dataset table: rows datasets, columns configurations by readable name (or pivot values).

    Each cell is the mean over its finished jobs (optionally ``mean ± sd``);
    the best per row is bold (``**`` in Markdown, ``\\textbf`` in LaTeX);
    incomplete cells carry a ``*``; missing cells a dash. The "average" and
    "average rank" rows are computed over the datasets without missing cells.

    Parameters
    ----------
    fmt : {"markdown", "latex", "csv", "json"}, default="markdown"
    caption, label : str, optional
        LaTeX only: the table's caption (default: the metric and what bold means) and
        ``\\label`` (default ``tab:<metric>``).
    legend : bool, default=False
        Columns headed C1, C2, ... with a legend mapping each to its configuration's name and
        parameters (for wide tables).
    """
    if fmt not in ("markdown", "latex", "csv", "json"):
        raise SelectionError(f"{res.source}: table format {fmt!r} is not valid; allowed: markdown, latex, csv, json")
    up = _direction(metric, higher)
    parts = _table_parts(res, metric, up, pivot, where)
    means, sds, incomplete, avg, avg_rank, dropped = parts
    if fmt == "csv":
        named = lambda f: f if pivot else f.rename(columns=res.name_of)  # noqa: E731
        return _table_csv(named(means), named(sds) if sd else None, avg.rename(index=res.name_of) if not pivot else avg,
                          avg_rank.rename(index=res.name_of) if not pivot else avg_rank)
    if fmt == "json":
        return json.dumps(_table_json(res, metric, up, pivot, *parts), indent=2, ensure_ascii=False) + "\n"
    best_mask = _best_mask(means, up)
    fmt_cell = _cell_formatter(fmt, decimals)
    m, v, part = means.to_numpy(dtype=float), sds.to_numpy(dtype=float), incomplete.to_numpy(dtype=bool)
    body = [[fmt_cell(m[i, j], v[i, j] if sd else None, best_mask[i, j], part[i, j])
             for j in range(m.shape[1])] for i in range(m.shape[0])]
    avg_best = _best_mask(avg.to_frame().T, up)[0]
    rank_best = _best_mask(avg_rank.to_frame().T, False)[0]
    footer = [
        ("average", [fmt_cell(v, None, b, False) for v, b in zip(avg, avg_best)]),
        ("average rank", [_rank_cell(fmt, v, b, decimals) for v, b in zip(avg_rank, rank_best)]),
    ]
    notes = _notes(metric, up, dropped, bool(incomplete.to_numpy().any()))
    rows = [str(d) for d in means.index]
    cols = [str(c) for c in means.columns] if pivot else [str(res.name_of(c)) for c in means.columns]
    keys: list[str] = []
    if legend:
        keys = [f"C{i + 1}" for i in range(len(cols))]
        described = [_describe(res, c) for c in means.columns] if not pivot else [f"{pivot} = {c}" for c in cols]
        keys, cols, legend_lines = cols, keys, [f"{k}: {d}" for k, d in zip(keys, described)]
    else:
        legend_lines = []
    if fmt == "markdown":
        return _markdown(pivot or "configuration", cols, rows, body, footer, notes + legend_lines)
    caption = caption or (f"Mean {metric} per dataset over the cross-validation folds "
                          f"({'higher' if up else 'lower'} is better); best per row in bold.")
    return _latex(cols, rows, body, footer, notes, caption=caption, label=label or f"tab:{metric}",
                  legend=legend_lines)


def _describe(res: SweepResults, cid: str) -> str:
    """A configuration's name, model and the parameters that apply, for legends."""
    entry = res.legend.get(cid)
    name = res.name_of(cid)
    if entry is None:
        return f"{name} ({cid})" if name != cid else str(cid)
    shown = entry.get("given", list(entry["params"]))  # the parameters the spec sets, else all
    params = ", ".join(f"{k}={_param_value(entry['params'][k])}" for k in shown if k in entry["params"])
    return f"{name}: {entry['worker']}, {params or 'default parameters'} [{cid}]"


def _table_parts(res: SweepResults, metric: str, up: bool, pivot: str | None, where: str | None):
    means, cells = score_matrix(res, metric, configs=select(res, where) if where else None, pivot=pivot)
    sds = cells.pivot(index="dataset", columns="column", values="sd").reindex_like(means)
    complete = cells.pivot(index="dataset", columns="column", values="complete").reindex_like(means)
    incomplete = ~complete.fillna(False).astype(bool)
    full, dropped = _complete_rows(means)
    avg = full.mean(axis=0)
    ranks = stats.rank_rows(full.to_numpy(), higher_is_better=up).mean(axis=0) if len(full) else np.full(means.shape[1], np.nan)
    return means, sds, incomplete, avg, pd.Series(ranks, index=means.columns), dropped


def _table_json(res, metric, up, pivot, means, sds, incomplete, avg, avg_rank, dropped) -> dict[str, Any]:
    ids = [str(c) for c in means.columns]
    cols = ids if pivot else [str(res.name_of(c)) for c in ids]
    rows = [
        {"dataset": str(d), "cells": {c: {"mean": _plain(means.iat[i, j]), "sd": _plain(sds.iat[i, j]),
                                          "complete": not bool(incomplete.iat[i, j])} for j, c in enumerate(cols)}}
        for i, d in enumerate(means.index)
    ]
    return {"metric": metric, "higher_is_better": up, "columns": cols, "pivot": pivot, "rows": rows,
            "config_ids": None if pivot else dict(zip(cols, ids)),
            "average": dict(zip(cols, map(_plain, avg))), "average_rank": dict(zip(cols, map(_plain, avg_rank))),
            "excluded_from_average": dropped}


def _best_mask(means: pd.DataFrame, up: bool) -> np.ndarray:
    x = np.round(means.to_numpy(dtype=float), stats.DECIMALS)
    with np.errstate(invalid="ignore"):
        target = np.nanmax(x, axis=1, keepdims=True) if up else np.nanmin(x, axis=1, keepdims=True)
    return (x == target) & np.isfinite(x) if x.size and np.isfinite(x).any() else np.zeros(x.shape, bool)


def _cell_formatter(fmt: str, decimals: int):
    bold = (lambda s: f"**{s}**") if fmt == "markdown" else (lambda s: f"\\textbf{{{s}}}")
    pm = " ± " if fmt == "markdown" else " $\\pm$ "
    dash = "—" if fmt == "markdown" else "--"

    def cell(mean: float, sd: float | None, is_best: bool, partial: bool) -> str:
        if not np.isfinite(mean):
            return dash
        text = f"{mean:.{decimals}f}"
        if sd is not None:
            text += pm + (f"{sd:.{decimals}f}" if np.isfinite(sd) else "?")
        text = bold(text) if is_best else text
        return text + ("*" if partial else "")

    return cell


def _rank_cell(fmt: str, value: float, is_best: bool, decimals: int) -> str:
    if not np.isfinite(value):
        return "—" if fmt == "markdown" else "--"
    text = f"{value:.{min(decimals, 2)}f}"
    if is_best:
        return f"**{text}**" if fmt == "markdown" else f"\\textbf{{{text}}}"
    return text


def _notes(metric: str, up: bool, dropped: list[str], partial: bool) -> list[str]:
    notes = [f"{metric} ({'higher' if up else 'lower'} is better), mean over finished folds; best per row in bold."]
    if partial:
        notes.append("* incomplete cell: fewer finished jobs than planned.")
    if dropped:
        notes.append(f"average and average rank over datasets without missing cells; excluded: {', '.join(dropped)}.")
    return notes


def _markdown(corner: str, cols, rows, body, footer, notes) -> str:
    esc = lambda s: s.replace("|", "\\|")  # noqa: E731
    lines = ["| dataset | " + " | ".join(esc(c) for c in cols) + " |", "|---|" + "---:|" * len(cols)]
    lines += [f"| {esc(r)} | " + " | ".join(cells) + " |" for r, cells in zip(rows, body)]
    lines += [f"| *{name}* | " + " | ".join(cells) + " |" for name, cells in footer]
    return "\n".join(lines + [""] + notes) + "\n"


_LATEX_SPECIAL = {
    "·": r"$\cdot$", "±": r"$\pm$", "—": "--", "λ": r"$\lambda$",
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
    "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
}


def latex_escape(text: str) -> str:
    """Escape LaTeX's special characters in a label."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)


def _latex(cols, rows, body, footer, notes, *, caption: str, label: str, legend: list[str]) -> str:
    """A ``table`` float with booktabs rules: compiles with ``\\documentclass{article}`` + ``\\usepackage{booktabs}``."""
    lines = [
        "% " + " ".join(notes).replace("\n", " "),
        "% needs \\usepackage{booktabs}",
        "\\begin{table}[htbp]",
        "\\centering",
        f"\\caption{{{latex_escape(caption)}}}",
        f"\\label{{{label}}}",
        "\\begin{tabular}{l" + "r" * len(cols) + "}",
        "\\toprule",
        "dataset & " + " & ".join(latex_escape(c) for c in cols) + " \\\\",
        "\\midrule",
    ]
    lines += [latex_escape(r) + " & " + " & ".join(cells) + " \\\\" for r, cells in zip(rows, body)]
    lines.append("\\midrule")
    lines += [f"\\emph{{{name}}} & " + " & ".join(cells) + " \\\\" for name, cells in footer]
    lines += ["\\bottomrule", "\\end{tabular}"]
    extra = [n for n in notes[1:]] + legend
    if extra:
        lines.append("\\par\\smallskip\\footnotesize")
        lines += [latex_escape(t) + "\\\\" for t in extra[:-1]] + [latex_escape(extra[-1])]
    lines.append("\\end{table}")
    return "\n".join(lines) + "\n"


def _table_csv(means: pd.DataFrame, sds: pd.DataFrame | None, avg: pd.Series, avg_rank: pd.Series) -> str:
    out = means.copy()
    out.loc["average"] = avg
    out.loc["average rank"] = avg_rank
    if sds is not None:
        sd_part = sds.copy()
        sd_part.columns = [f"{c} sd" for c in sds.columns]
        out = out.join(sd_part)
    out.index.name = "dataset"
    out.columns = [str(c) for c in out.columns]
    return out.to_csv(float_format="%.10g")


# --------------------------------------------------------------------------
# two configurations
# --------------------------------------------------------------------------


def paired_means(res: SweepResults, metric: str, ids: list[str], *,
                 partial: bool = False) -> tuple[pd.DataFrame, list[dict[str, str]], list[str]]:
    """Per-dataset means of ``ids`` for a paired test over datasets: (means, excluded, partial datasets).

    By default a dataset enters only when every one of ``ids`` has all its planned
    folds there (a cell whose plan is unknown counts as complete once it has results);
    each other dataset is in ``excluded`` with the reason. With ``partial`` a dataset
    enters with the (repeat, fold)s that every one of ``ids`` has finished, and is
    listed in the third item when those are fewer than planned.
    """
    cells = cell_stats(res, metric, configs=ids)
    datasets = sorted(cells.index.get_level_values(0).unique())
    n = cells["n"].unstack("config_id").reindex(index=datasets, columns=ids).fillna(0).astype(int)
    planned = cells["planned"].unstack("config_id").reindex(index=datasets, columns=ids)
    whole = (n > 0) & (planned.isna() | (n >= planned.fillna(0)))
    if not partial:
        keep = whole.all(axis=1)
        means = cells["mean"].unstack("config_id").reindex(index=datasets, columns=ids)[keep]
        excluded = [{"dataset": str(d), "reason": _why(res, n.loc[d], planned.loc[d])} for d in n.index[~keep]]
        return means, excluded, []
    f = res.frame[res.frame["config_id"].isin(ids)]
    f = f[["dataset", "config_id", "repeat", "fold", metric]].drop_duplicates(["dataset", "config_id", "repeat", "fold"])
    shared = f.groupby(["dataset", "repeat", "fold"], sort=False)["config_id"].transform("size") == len(ids)
    f = f[shared.to_numpy()]
    means = f.groupby(["dataset", "config_id"])[metric].mean().unstack("config_id")
    means = means.reindex(index=[d for d in datasets if d in means.index], columns=ids)
    folds = f.groupby("dataset")["fold"].size() // max(len(ids), 1)
    excluded = [{"dataset": str(d), "reason": "no fold finished by every compared configuration"}
                for d in datasets if d not in means.index]
    short = [str(d) for d in means.index if not whole.loc[d].all() or folds.get(d, 0) < planned.loc[d].max()]
    return means, excluded, short


def _why(res: SweepResults, n: pd.Series, planned: pd.Series) -> str:
    parts = []
    for cid, done in n.items():
        want = planned.get(cid)
        if done == 0:
            parts.append(f"{res.name_of(cid)} has no results")
        elif pd.notna(want) and done < want:
            parts.append(f"{res.name_of(cid)} has {done}/{int(want)} folds")
    more = f"; and {len(parts) - 3} more" if len(parts) > 3 else ""
    return "; ".join(parts[:3]) + more


def _excluded_text(excluded: list[dict[str, str]]) -> list[str]:
    if not excluded:
        return []
    return ["excluded (incomplete cells; --partial uses the folds they share):"] + [
        f"  {e['dataset']}: {e['reason']}" for e in excluded]


@dataclass(frozen=True)
class Comparison:
    """Paired comparison of two configurations over datasets, and on each dataset over its folds."""

    metric: str
    higher_is_better: bool
    config_a: str
    config_b: str
    datasets: list[str]
    excluded: list[dict[str, str]]
    sign: stats.SignTestResult
    wilcoxon: stats.SignedRankResult | None
    name_a: str = ""
    name_b: str = ""
    #: datasets entered with fewer folds than planned (``--partial``)
    partial: list[str] = field(default_factory=list)
    partial_mode: bool = False
    alpha: float = 0.05
    warnings: list[str] = field(default_factory=list)
    #: Bayesian signed-rank test across datasets (None with fewer than 2 datasets)
    bayes: stats.BayesResult | None = None
    #: per dataset: means, shared folds, corrected resampled t and Bayesian correlated t
    per_dataset: list[dict[str, Any]] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        w, bay = self.wilcoxon, self.bayes
        return {
            "metric": self.metric,
            "higher_is_better": self.higher_is_better,
            "config_a": self.config_a,
            "name_a": self.name_a or self.config_a,
            "config_b": self.config_b,
            "name_b": self.name_b or self.config_b,
            "n": len(self.datasets),
            "datasets": self.datasets,
            "excluded": self.excluded,
            "partial": self.partial_mode,
            "partial_datasets": self.partial,
            "alpha": self.alpha,
            "warnings": self.warnings,
            "wins": self.sign.wins,
            "ties": self.sign.ties,
            "losses": self.sign.losses,
            "sign_test_p": self.sign.p_value,
            "wilcoxon": None if w is None else {
                "r_plus": w.r_plus, "r_minus": w.r_minus, "T": w.statistic, "p_value": w.p_value,
                "n": w.n, "zero_method": w.zero_method, "method": w.method,
                "min_attainable_p": stats.min_signed_rank_p(w.n),
            },
            "bayes_signed_rank": None if bay is None else {
                "p_a_better": bay.p_a_better, "p_equivalent": bay.p_equivalent, "p_b_better": bay.p_b_better,
                "rope": bay.rope},
            "per_dataset": [{k: _plain(v) for k, v in row.items()} for row in self.per_dataset],
        }

    def to_text(self) -> str:
        s, w, bay = self.sign, self.wilcoxon, self.bayes
        a, b = self.name_a or self.config_a, self.name_b or self.config_b
        lines = [
            f"A = {a} [{self.config_a}]",
            f"B = {b} [{self.config_b}]",
            f"{self.metric} ({'higher' if self.higher_is_better else 'lower'} is better), N = {len(self.datasets)} datasets"
            + (" (--partial: folds both have)" if self.partial_mode else " (complete cells only)"),
            f"wins/ties/losses of A: {s.wins}/{s.ties}/{s.losses}   sign test p = {s.p_value:.4g} (ties {s.ties_method})",
        ]
        if w is None:
            lines.append("Wilcoxon signed-rank: not computed (every difference is zero)")
        else:
            lines.append(
                f"Wilcoxon signed-rank: R+ = {w.r_plus:g}, R- = {w.r_minus:g}, T = {w.statistic:g}, "
                f"p = {w.p_value:.4g} ({w.method}, zeros: {w.zero_method}, N = {w.n})"
            )
        if bay is not None:
            lines.append(f"Bayesian signed-rank (rope ±{bay.rope:g}): P(A better) = {bay.p_a_better:.3f}, "
                         f"P(equivalent) = {bay.p_equivalent:.3f}, P(B better) = {bay.p_b_better:.3f}")
        lines += [f"warning: {text}" for text in self.warnings]
        if self.per_dataset:
            lines.append("per dataset over paired folds (corrected resampled t, Nadeau & Bengio; Bayesian correlated t):")
            for r in self.per_dataset:
                t = "" if r["t_p"] is None or r["t_p"] != r["t_p"] else f"t = {r['t']:+.3f}, p = {r['t_p']:.4g}"
                bt = "" if r["p_a_better"] != r["p_a_better"] else (
                    f"; P(A better) = {r['p_a_better']:.3f}, P(eq.) = {r['p_equivalent']:.3f}, "
                    f"P(B better) = {r['p_b_better']:.3f}")
                lines.append(f"  {r['dataset']}: A {r['mean_a']:.4f}, B {r['mean_b']:.4f}, {r['folds']} folds"
                             + (f"; {t}{bt}" if t else "; too few shared folds for a test"))
        if self.partial:
            lines.append(f"with fewer folds than planned (--partial): {', '.join(self.partial)}")
        lines += _excluded_text(self.excluded)
        return "\n".join(lines) + "\n"


#: Default half-width of the region of practical equivalence, in the metric's units (one point of accuracy).
ROPE = 0.01


def compare(
    res: SweepResults,
    a: str,
    b: str,
    metric: str = "accuracy",
    *,
    zero_method: stats.ZeroMethod = "demsar",
    method: stats.PMethod = "auto",
    higher: bool | None = None,
    partial: bool = False,
    alpha: float = 0.05,
    rope: float = ROPE,
    random_state: int | None = 0,
) -> Comparison:
    """Wins/ties/losses, sign test, Wilcoxon signed-rank and the Bayesian signed-rank test of
    configuration ``a`` against ``b`` over datasets, and per dataset the corrected resampled t-test and
    the Bayesian correlated t-test over their paired folds.

    Datasets enter as :func:`paired_means` says (complete cells only, unless ``partial``).
    """
    up = _direction(metric, higher)
    ida, idb = select_one(res, a), select_one(res, b)
    if ida == idb:
        raise SelectionError(f"{res.source}: {a!r} and {b!r} select the same configuration {res.name_of(ida)!r}")
    means, excluded, short = paired_means(res, metric, [ida, idb], partial=partial)
    if len(means) == 0:
        why = "; ".join(f"{e['dataset']}: {e['reason']}" for e in excluded[:3])
        raise SelectionError(f"{res.source}: {res.name_of(ida)!r} and {res.name_of(idb)!r} share no dataset where "
                             f"both have every planned fold ({why}); --partial uses the folds they share")
    x, y = means[ida].to_numpy(), means[idb].to_numpy()
    sign = stats.sign_test(x, y, higher_is_better=up)
    diff = np.round(x - y, stats.DECIMALS)
    wil = None
    if (diff != 0).any():
        wil = stats.signed_rank(x, y, higher_is_better=up, zero_method=zero_method, method=method)
    warnings = stats.small_n_warnings(wil.n if wil else len(x), alpha, method=wil.method if wil else None)
    bay = stats.bayes_signed_rank(x, y, rope=rope, higher_is_better=up, random_state=random_state) if len(x) >= 2 else None
    rows = res.frame[res.frame["config_id"].isin([ida, idb])]  # one pass over the job rows, then small frames
    folds = _paired_fold_table(rows, metric, ida, idb)
    empty = (np.empty(0), np.empty(0))
    per_dataset = [_per_dataset(res, folds.get(str(d), empty), str(d), up, rope) for d in means.index]
    return Comparison(metric, up, ida, idb, [str(d) for d in means.index], excluded, sign, wil,
                      name_a=res.name_of(ida), name_b=res.name_of(idb), partial=short, partial_mode=partial,
                      alpha=alpha, warnings=warnings, bayes=bay, per_dataset=per_dataset)


def _per_dataset(res: SweepResults, paired: tuple[np.ndarray, np.ndarray], dataset: str, up: bool,
                 rope: float) -> dict[str, Any]:
    x, y = paired
    ratio = _test_train_ratio(res)
    row: dict[str, Any] = {"dataset": dataset, "mean_a": float(x.mean()) if x.size else float("nan"),
                           "mean_b": float(y.mean()) if y.size else float("nan"), "folds": int(x.size),
                           "t": float("nan"), "t_p": float("nan"), "df": None, "p_a_better": float("nan"),
                           "p_equivalent": float("nan"), "p_b_better": float("nan")}
    if x.size >= 2 and math.isfinite(ratio):
        t = stats.corrected_resampled_t(x, y, test_train_ratio=ratio)
        bt = stats.bayes_correlated_t(x, y, rope=rope, test_train_ratio=ratio, higher_is_better=up)
        row.update(t=t.statistic, t_p=t.p_value, df=t.df, p_a_better=bt.p_a_better, p_equivalent=bt.p_equivalent,
                   p_b_better=bt.p_b_better)
    return row


# --------------------------------------------------------------------------
# many configurations
# --------------------------------------------------------------------------

#: Largest number of configurations for Shaffer's static procedure (its
#: hypothesis-count sets grow as k^4); beyond it "auto" falls back to none.
SHAFFER_MAX_K = 60


@dataclass(frozen=True)
class RankReport:
    """Average ranks, Friedman/Iman-Davenport, Nemenyi CD and a post-hoc test."""

    metric: str
    higher_is_better: bool
    configs: list[str]
    datasets: list[str]
    excluded: list[dict[str, str]]
    friedman: stats.FriedmanResult
    cd: float
    alpha: float
    control: str | None
    posthoc: stats.PostHocResult | None
    #: config_id -> readable name
    names: dict[str, str] = field(default_factory=dict)
    partial: list[str] = field(default_factory=list)
    partial_mode: bool = False
    warnings: list[str] = field(default_factory=list)

    def name_of(self, cid: str) -> str:
        return self.names.get(cid, cid)

    def ranking(self) -> pd.DataFrame:
        """Configurations sorted by average rank (best first): config_id, name, average_rank."""
        df = pd.DataFrame({"config_id": self.configs, "name": [self.name_of(c) for c in self.configs],
                           "average_rank": self.friedman.average_ranks})
        return df.sort_values(["average_rank", "config_id"], kind="stable").reset_index(drop=True)

    def posthoc_frame(self) -> pd.DataFrame:
        ph = self.posthoc
        if ph is None:
            return pd.DataFrame(columns=["config_a", "config_b", "name_a", "name_b", "z", "p_value", "adjusted", "reject"])
        idx = np.asarray(ph.pairs, dtype=np.intp).reshape(-1, 2)
        names = np.asarray(self.configs, dtype=object)
        df = pd.DataFrame({"config_a": names[idx[:, 0]], "config_b": names[idx[:, 1]],
                           "name_a": [self.name_of(c) for c in names[idx[:, 0]]],
                           "name_b": [self.name_of(c) for c in names[idx[:, 1]]], "z": ph.z,
                           "p_value": ph.p_values, "adjusted": ph.adjusted, "reject": ph.reject})
        return df.sort_values(["p_value", "config_a"], kind="stable").reset_index(drop=True)

    def to_dict(self, limit: int | None = None) -> dict[str, Any]:
        f = self.friedman
        return {
            "metric": self.metric,
            "higher_is_better": self.higher_is_better,
            "n": f.n,
            "k": f.k,
            "excluded": self.excluded,
            "partial": self.partial_mode,
            "partial_datasets": self.partial,
            "warnings": self.warnings,
            "average_ranks": records(_head(self.ranking(), limit)),
            "friedman": {"chi2": f.chi2, "p_value": f.p_value, "formula": f.formula, "tie_correction": f.tie_correction},
            "iman_davenport": {"F": _plain(f.iman_davenport), "p_value": f.p_value_iman_davenport,
                               "df": [f.k - 1, (f.k - 1) * (f.n - 1)]},
            "nemenyi_cd": self.cd,
            "alpha": self.alpha,
            "control": self.control,
            "control_name": None if self.control is None else self.name_of(self.control),
            "posthoc": None if self.posthoc is None else {
                "method": self.posthoc.method, "rows": records(_head(self.posthoc_frame(), limit))},
        }

    def to_text(self, limit: int = 20) -> str:
        f = self.friedman
        rk = self.ranking()
        lines = [f"{self.metric} ({'higher' if self.higher_is_better else 'lower'} is better): {f.k} configurations "
                 f"over N = {f.n} datasets" + (" (--partial: folds all have)" if self.partial_mode else " (complete cells only)")]
        lines += _excluded_text(self.excluded)
        if self.partial:
            lines.append(f"with fewer folds than planned (--partial): {', '.join(self.partial)}")
        lines += [f"warning: {text}" for text in self.warnings]
        lines.append("average ranks (1 = best):")
        lines += [f"  {r.average_rank:8.3f}  {r.name}" + (f"  [{r.config_id}]" if r.name != r.config_id else "")
                  for r in rk.head(limit).itertuples()]
        if len(rk) > limit:
            lines.append(f"  ... {len(rk) - limit} more")
        lines.append(f"Friedman chi2_F = {f.chi2:.4f}, p = {f.p_value:.4g}  [{f.formula}]")
        lines.append(f"Iman-Davenport F_F = {f.iman_davenport:.4f}, p = {f.p_value_iman_davenport:.4g}  (df {f.k - 1}, {(f.k - 1) * (f.n - 1)})")
        lines.append(f"Nemenyi critical difference (alpha = {self.alpha}): {self.cd:.4f}")
        if self.posthoc is not None:
            ph = self.posthoc_frame()
            head = f"vs control {self.name_of(self.control)}" if self.control else "all pairs"
            lines.append(f"post-hoc {head}, {self.posthoc.method} adjustment, {int(ph['reject'].sum())} of {len(ph)} rejected:")
            lines += [f"  {r.name_a} vs {r.name_b}: z = {r.z:+.3f}, p = {r.p_value:.4g}, adjusted = {r.adjusted:.4g}"
                      f"{'  reject' if r.reject else ''}" for r in ph.head(limit).itertuples()]
            if len(ph) > limit:
                lines.append(f"  ... {len(ph) - limit} more")
        return "\n".join(lines) + "\n"


def _head(frame: pd.DataFrame, limit: int | None) -> pd.DataFrame:
    return frame if limit is None else frame.head(limit)


def rank(
    res: SweepResults,
    metric: str = "accuracy",
    *,
    where: str | None = None,
    control: str | None = None,
    posthoc: str = "auto",
    alpha: float = 0.05,
    tie_correction: bool = False,
    higher: bool | None = None,
    partial: bool = False,
) -> RankReport:
    """Average ranks over datasets, Friedman and Iman-Davenport tests, Nemenyi CD, post-hoc.

    Parameters
    ----------
    posthoc : {"auto", "holm", "finner", "li", "bonferroni", "shaffer", "none"}
        With ``control``: one of holm (auto), finner, li, bonferroni. Without:
        all pairs with shaffer (auto, up to :data:`SHAFFER_MAX_K` configurations), holm or bonferroni.
    """
    up = _direction(metric, higher)
    ids = select(res, where) if where else sorted(configurations(res).index)
    # a configuration without a single result (every job failed, or none ran yet) would leave no
    # dataset complete: it is left out and named, the others are ranked
    seen = set(res.frame["config_id"].unique())
    left_out = [res.name_of(c) for c in ids if c not in seen]
    ids = [c for c in ids if c in seen]
    full, dropped, short = paired_means(res, metric, list(ids), partial=partial)
    configs = [str(c) for c in full.columns]
    if len(configs) < 2 or len(full) < 2:
        raise SelectionError(
            f"{res.source}: ranking needs at least 2 configurations and 2 datasets where every cell is "
            f"{'present' if partial else 'complete'}, got {len(configs)} configurations and {len(full)} datasets"
            + ("" if partial else " (--partial uses the folds they share)")
        )
    fr = stats.friedman(full.to_numpy(), higher_is_better=up, tie_correction=tie_correction)
    control_id = select_one(res, control) if control else None
    if control_id is not None and control_id not in configs:
        raise SelectionError(f"{res.source}: control {control_id} is not among the ranked configurations")
    ph = _posthoc(res, fr, configs, control_id, posthoc, alpha)
    warnings = []
    if left_out:
        warnings.append(f"left out, no results yet: {', '.join(map(str, left_out[:10]))}"
                        + (f" and {len(left_out) - 10} more" if len(left_out) > 10 else ""))
    if fr.n <= 10 or fr.k <= 5:
        # Demšar (2006), Sec. 3.2.2 (from memory): the chi-square approximation of Friedman's statistic is
        # good "when N and k are big enough (as a rule of a thumb, N > 10 and k > 5)"; else exact tables.
        warnings.append(f"N = {fr.n} datasets, k = {fr.k} configurations: Friedman's chi-square approximation "
                        "wants N > 10 and k > 5 (Demšar 2006); read its p-value as rough")
    return RankReport(metric, up, configs, [str(d) for d in full.index], dropped, fr,
                      stats.nemenyi_cd(fr.k, fr.n, alpha), alpha, control_id, ph,
                      names={c: res.name_of(c) for c in configs}, partial=short, partial_mode=partial,
                      warnings=warnings)


def _posthoc(res, fr, configs, control_id, method, alpha):
    if method == "none":
        return None
    if control_id is not None:
        method = "holm" if method == "auto" else method
        if method not in ("holm", "finner", "li", "bonferroni"):
            raise SelectionError(f"{res.source}: post-hoc {method!r} against a control is not valid; allowed: holm, finner, li, bonferroni")
        return stats.vs_control(fr.average_ranks, fr.n, configs.index(control_id), method=method, alpha=alpha)
    if method == "auto":
        if fr.k > SHAFFER_MAX_K:
            return None
        method = "shaffer"
    if method not in ("shaffer", "holm", "bonferroni"):
        raise SelectionError(f"{res.source}: post-hoc {method!r} over all pairs is not valid; allowed: shaffer, holm, bonferroni (or give --control)")
    if method == "shaffer" and fr.k > SHAFFER_MAX_K:
        raise SelectionError(f"{res.source}: Shaffer's procedure supports at most {SHAFFER_MAX_K} configurations, got {fr.k}; use holm or narrow with --where")
    return stats.all_pairs(fr.average_ranks, fr.n, method=method, alpha=alpha)


# --------------------------------------------------------------------------
# files and plots
# --------------------------------------------------------------------------


def _check_folder(path: str | os.PathLike) -> Path:
    target = Path(path)
    if not target.parent.exists():
        raise SelectionError(f"{target}: output folder {target.parent} does not exist")
    return target


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` (UTF-8) through the project's one atomic write (:func:`sweep.writing.atomic_write`)."""
    from sweep.writing import atomic_write

    data = text.encode("utf-8")
    atomic_write(_check_folder(path), lambda handle: handle.write(data))


def figure_bytes(fig, fmt: str) -> bytes:
    """A matplotlib figure rendered to ``fmt`` (png, pdf, svg)."""
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buffer = io.BytesIO()
    fig.savefig(buffer, format=fmt, bbox_inches="tight", dpi=110)
    return buffer.getvalue()


def _save_figure(fig, path: str | os.PathLike) -> None:
    from sweep.writing import atomic_write

    target = _check_folder(path)
    fmt = target.suffix.lstrip(".").lower()
    if fmt not in ("png", "pdf", "svg"):
        raise SelectionError(f"{target}: plot file must end in .png, .pdf or .svg")
    data = figure_bytes(fig, fmt)
    atomic_write(target, lambda handle: handle.write(data))


def _cd_groups(ranks: np.ndarray, cd: float) -> list[tuple[int, int]]:
    """Maximal runs (i, j) of rank-sorted configurations whose spread is below CD."""
    groups: list[tuple[int, int]] = []
    j = 0
    for i in range(ranks.size):
        j = max(j, i)
        while j + 1 < ranks.size and ranks[j + 1] - ranks[i] < cd:
            j += 1
        if j > i and not (groups and groups[-1][1] >= j):
            groups.append((i, j))
    return groups


def plot_ranks(report: RankReport, path: str | os.PathLike, *, limit: int = 20) -> None:
    """Critical-difference style diagram written to ``path`` (see :func:`rank_figure`)."""
    _save_figure(rank_figure(report, limit=limit), path)


def rank_figure(report: RankReport, *, limit: int = 20):
    """Critical-difference style diagram: average ranks on an axis, configurations by readable name,
    Nemenyi groups joined by bars.

    Only the ``limit`` best-ranked configurations are drawn; ranks and CD
    are those computed over all of them.
    """
    from matplotlib.figure import Figure

    rk = report.ranking().head(limit)
    ranks, names = rk["average_rank"].to_numpy(), rk["name"].astype(str).tolist()
    k = report.friedman.k
    half = (len(names) + 1) // 2
    fig = Figure(figsize=(8, 1.8 + 0.28 * half))
    ax = fig.add_axes((0.05, 0.05, 0.9, 0.9))
    ax.set_xlim(k + 0.2, 0.8)  # rank 1 on the right, as in Demšar's figures
    ax.set_ylim(-(half + 2.5), 2)
    ax.axis("off")
    ax.hlines(0, 1, k, color="black", lw=1)
    for t in np.unique(np.linspace(1, k, min(k, 11)).round()):
        ax.vlines(t, 0, 0.15, color="black", lw=1)
        ax.text(t, 0.3, f"{t:g}", ha="center", va="bottom", fontsize=8)
    for idx, (r, name) in enumerate(zip(ranks, names)):
        right = idx < half
        y = -(idx if right else idx - half) - 1.5
        x_text = 0.9 if right else k + 0.1
        ax.plot([r, r, x_text], [0, y, y], color="black", lw=0.7)
        ax.text(x_text, y, f" {name} ({r:.2f}) ", ha="left" if right else "right", va="center", fontsize=8)
    for g, (i, j) in enumerate(_cd_groups(ranks, report.cd)):
        y = -0.5 - 0.25 * (g % 4)
        ax.hlines(y, ranks[i] - 0.03, ranks[j] + 0.03, color="tab:red", lw=2.5)
    ax.hlines(1.2, 1, 1 + report.cd, color="tab:red", lw=1.5)
    ax.text(1 + report.cd / 2, 1.35, f"CD = {report.cd:.3f}", ha="center", va="bottom", fontsize=8)
    ax.set_title(f"average ranks, {report.metric}, N = {report.friedman.n} datasets", fontsize=9)
    return fig


def plot_heatmap(
    res: SweepResults, path: str | os.PathLike, metric: str = "accuracy", *, where: str | None = None,
    pivot: str | None = None, higher: bool | None = None, relative: str = "difference",
) -> None:
    """Dataset x configuration heatmap written to ``path`` (see :func:`heatmap_figure`)."""
    _save_figure(heatmap_figure(res, metric, where=where, pivot=pivot, higher=higher, relative=relative), path)


#: Largest heatmap (cells) whose values are written in the cells.
HEATMAP_VALUES_MAX = 600


def heatmap_figure(res: SweepResults, metric: str = "accuracy", *, where: str | None = None,
                   pivot: str | None = None, higher: bool | None = None, relative: str = "difference"):
    """Dataset x configuration heatmap, coloured relative to each dataset so that easy and hard
    datasets do not swamp the differences: ``relative="difference"`` colours by how far a cell is
    from its dataset's best (0 = best), ``"rank"`` by its rank within the dataset (1 = best),
    ``"none"`` by the raw mean. Cell means are written in the cells (up to
    :data:`HEATMAP_VALUES_MAX` cells); missing cells are blank; columns carry readable names.
    """
    from matplotlib.figure import Figure

    if relative not in ("difference", "rank", "none"):
        raise SelectionError(f"{res.source}: relative {relative!r} is not valid; allowed: difference, rank, none")
    up = _direction(metric, higher)
    means, _ = score_matrix(res, metric, configs=select(res, where) if where else None, pivot=pivot)
    values = means.to_numpy(dtype=float)
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-missing row: NaN is the answer
        best_row = np.nanmax(values, axis=1, keepdims=True) if up else np.nanmin(values, axis=1, keepdims=True)
    if relative == "difference":
        colour, label, cmap = np.abs(best_row - values), f"{metric}: distance to the dataset's best", "viridis_r"
    elif relative == "rank":
        colour = means.rank(axis=1, ascending=not up).to_numpy(dtype=float)
        label, cmap = "rank within the dataset (1 = best)", "viridis_r"
    else:
        colour, label, cmap = values, metric, "viridis" if up else "viridis_r"
    n_rows, n_cols = means.shape
    cols = [str(c) for c in means.columns] if pivot else [str(res.name_of(c)) for c in means.columns]
    fig = Figure(figsize=(min(3 + 0.55 * n_cols, 40), min(2 + 0.4 * n_rows, 40)))
    ax = fig.add_subplot()
    image = ax.imshow(np.ma.masked_invalid(colour), aspect="auto", cmap=cmap, interpolation="nearest")
    fig.colorbar(image, ax=ax, label=label)
    if n_rows * n_cols <= HEATMAP_VALUES_MAX:
        finite = colour[np.isfinite(colour)]
        middle = (finite.min() + finite.max()) / 2 if finite.size else 0.0
        for i in range(n_rows):
            for j in range(n_cols):
                if np.isfinite(values[i, j]):
                    dark = (colour[i, j] > middle) if cmap.endswith("_r") else (colour[i, j] < middle)
                    ax.text(j, i, f"{values[i, j]:.3f}", ha="center", va="center", fontsize=6,
                            color="white" if dark else "black")
    if n_rows <= 80:
        ax.set_yticks(range(n_rows), [str(d) for d in means.index], fontsize=7)
    if n_cols <= 80:
        ax.set_xticks(range(n_cols), cols, rotation=60, ha="right", fontsize=7)
    ax.set_xlabel(pivot or "configuration")
    ax.set_ylabel("dataset")
    ax.set_title(f"{metric} per dataset ({'higher' if up else 'lower'} is better); colour relative to each dataset"
                 if relative != "none" else f"{metric} per dataset", fontsize=9)
    return fig
