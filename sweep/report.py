"""Reports on a sweep's results: cell summaries, winners, tables, comparisons, ranks, plots.

Everything here works on a results frame (one row per finished job) and
never touches the store; :func:`sweep.results.load_sweep_results` builds the
:class:`SweepResults` these functions take. Aggregation is vectorised with
``groupby``: a million job rows take about a second.

Vocabulary: a *cell* is (dataset, configuration); its score is the mean of
the metric over the cell's finished jobs (repeats x folds). A cell is
*complete* when it has as many results as planned jobs, and *missing* when
it is planned but has none. Tests over datasets exclude every dataset with a
missing cell and name it; they never impute.

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
import tempfile
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
    "write_text_atomic",
]

#: Metrics where a higher value is better.
HIGHER_IS_BETTER = frozenset({"accuracy", "balanced_accuracy", "kappa", "train_accuracy"})
#: Metrics where a lower value is better (plus every ``rules_*`` figure and ``*_seconds``).
LOWER_IS_BETTER = frozenset({"fit_seconds", "predict_seconds", "error"})

_JOB_COLUMNS = ("key", "dataset", "config_id", "worker", "label", "repeat", "fold", "worker_version", "host")
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

    @property
    def source(self) -> str:
        return str(self.spec_path) if self.spec_path else "results"


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
    """One row per configuration seen or planned: index config_id, columns worker + parameters."""
    cols = ["config_id", *_config_columns(res), *res.params]
    seen = res.frame.drop_duplicates("config_id")[cols].set_index("config_id")
    planned_only = pd.Index(res.planned["config_id"].unique()).difference(seen.index)
    if len(planned_only):
        seen = pd.concat([seen, pd.DataFrame(index=planned_only, columns=seen.columns)])
    return seen.sort_index()


def _config_columns(res: SweepResults) -> list[str]:
    return [c for c in _CONFIG_COLUMNS if c in res.frame.columns and c not in res.params]


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
    if "=" not in selector:
        ids = [selector] if selector in confs.index else [c for c in confs.index if c.startswith(selector)]
        if not ids:
            near = difflib.get_close_matches(selector, list(confs.index), n=3)
            hint = f"; nearest: {', '.join(near)}" if near else ""
            raise SelectionError(f"{res.source}: no configuration has id {selector!r}{hint}")
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
        shown = ", ".join(ids[:5]) + (", ..." if len(ids) > 5 else "")
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
    frame = res.frame
    if configs is not None:
        frame = frame[frame["config_id"].isin(configs)]
    grouped = frame.groupby(["dataset", "config_id"], sort=False, observed=True)[metric]
    cells = grouped.agg(["mean", "std", "count"]).rename(columns={"std": "sd", "count": "n"})
    planned = res.planned
    if configs is not None:
        planned = planned[planned["config_id"].isin(configs)]
    planned = planned.set_index(["dataset", "config_id"])["jobs"]
    cells = cells.join(planned.rename("planned"), how="outer")
    cells["n"] = cells["n"].fillna(0).astype(int)
    cells["complete"] = cells["planned"].notna() & (cells["n"] >= cells["planned"].fillna(np.inf))
    return cells.sort_index()


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
        metric. Ties follow the module's tie rule; ``margin`` is how much
        better the winner is than the runner-up (NaN without a runner-up).
        Datasets without any result have ``config_id`` None and folds 0.
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
    cols = ["dataset", "config_id", "worker", "params", "mean", "sd", "folds", "planned", "complete", "runner_up", "margin", "metric"]
    return out[cols]


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
) -> str:
    """Per-dataset table: rows datasets, columns configurations (or pivot values).

    Each cell is the mean over its finished jobs (optionally ``mean ± sd``);
    the best per row is bold (``**`` in Markdown, ``\\textbf`` in LaTeX);
    incomplete cells carry a ``*``; missing cells a dash. The "average" and
    "average rank" rows are computed over the datasets without missing cells.

    Parameters
    ----------
    fmt : {"markdown", "latex", "csv", "json"}, default="markdown"
    """
    if fmt not in ("markdown", "latex", "csv", "json"):
        raise SelectionError(f"{res.source}: table format {fmt!r} is not valid; allowed: markdown, latex, csv, json")
    up = _direction(metric, higher)
    parts = _table_parts(res, metric, up, pivot, where)
    means, sds, incomplete, avg, avg_rank, dropped = parts
    if fmt == "csv":
        return _table_csv(means, sds if sd else None, avg, avg_rank)
    if fmt == "json":
        return json.dumps(_table_json(metric, up, pivot, *parts), indent=2) + "\n"
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
    cols = [str(c) for c in means.columns]
    if fmt == "markdown":
        return _markdown(pivot or "configuration", cols, rows, body, footer, notes)
    return _latex(pivot or "configuration", cols, rows, body, footer, notes)


def _table_parts(res: SweepResults, metric: str, up: bool, pivot: str | None, where: str | None):
    means, cells = score_matrix(res, metric, configs=select(res, where) if where else None, pivot=pivot)
    sds = cells.pivot(index="dataset", columns="column", values="sd").reindex_like(means)
    complete = cells.pivot(index="dataset", columns="column", values="complete").reindex_like(means)
    incomplete = ~complete.fillna(False).astype(bool)
    full, dropped = _complete_rows(means)
    avg = full.mean(axis=0)
    ranks = stats.rank_rows(full.to_numpy(), higher_is_better=up).mean(axis=0) if len(full) else np.full(means.shape[1], np.nan)
    return means, sds, incomplete, avg, pd.Series(ranks, index=means.columns), dropped


def _table_json(metric, up, pivot, means, sds, incomplete, avg, avg_rank, dropped) -> dict[str, Any]:
    cols = [str(c) for c in means.columns]
    rows = [
        {"dataset": str(d), "cells": {c: {"mean": _plain(means.iat[i, j]), "sd": _plain(sds.iat[i, j]),
                                          "complete": not bool(incomplete.iat[i, j])} for j, c in enumerate(cols)}}
        for i, d in enumerate(means.index)
    ]
    return {"metric": metric, "higher_is_better": up, "columns": cols, "pivot": pivot, "rows": rows,
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
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
    "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
}


def latex_escape(text: str) -> str:
    """Escape LaTeX's special characters in a label."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)


def _latex(corner: str, cols, rows, body, footer, notes) -> str:
    lines = [
        "% " + " ".join(notes).replace("\n", " "),
        "\\begin{tabular}{l" + "r" * len(cols) + "}",
        "\\hline",
        "dataset & " + " & ".join(latex_escape(c) for c in cols) + " \\\\",
        "\\hline",
    ]
    lines += [latex_escape(r) + " & " + " & ".join(cells) + " \\\\" for r, cells in zip(rows, body)]
    lines.append("\\hline")
    lines += [f"\\emph{{{name}}} & " + " & ".join(cells) + " \\\\" for name, cells in footer]
    lines += ["\\hline", "\\end{tabular}"]
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


@dataclass(frozen=True)
class Comparison:
    """Paired comparison of two configurations over datasets."""

    metric: str
    higher_is_better: bool
    config_a: str
    config_b: str
    datasets: list[str]
    excluded: list[str]
    sign: stats.SignTestResult
    wilcoxon: stats.SignedRankResult | None

    def to_dict(self) -> dict[str, Any]:
        w = self.wilcoxon
        return {
            "metric": self.metric,
            "higher_is_better": self.higher_is_better,
            "config_a": self.config_a,
            "config_b": self.config_b,
            "n": len(self.datasets),
            "excluded": self.excluded,
            "wins": self.sign.wins,
            "ties": self.sign.ties,
            "losses": self.sign.losses,
            "sign_test_p": self.sign.p_value,
            "wilcoxon": None if w is None else {
                "r_plus": w.r_plus, "r_minus": w.r_minus, "T": w.statistic, "p_value": w.p_value,
                "n": w.n, "zero_method": w.zero_method, "method": w.method,
            },
        }

    def to_text(self) -> str:
        s, w = self.sign, self.wilcoxon
        lines = [
            f"{self.config_a} vs {self.config_b} on {self.metric} ({'higher' if self.higher_is_better else 'lower'} is better), {len(self.datasets)} datasets",
            f"wins/ties/losses of {self.config_a}: {s.wins}/{s.ties}/{s.losses}   sign test p = {s.p_value:.4g} (ties {s.ties_method})",
        ]
        if w is None:
            lines.append("Wilcoxon signed-rank: not computed (every difference is zero)")
        else:
            lines.append(
                f"Wilcoxon signed-rank: R+ = {w.r_plus:g}, R- = {w.r_minus:g}, T = {w.statistic:g}, "
                f"p = {w.p_value:.4g} ({w.method}, zeros: {w.zero_method}, n = {w.n})"
            )
        if self.excluded:
            lines.append(f"excluded (missing cells): {', '.join(self.excluded)}")
        return "\n".join(lines) + "\n"


def compare(
    res: SweepResults,
    a: str,
    b: str,
    metric: str = "accuracy",
    *,
    zero_method: str = "demsar",
    method: str = "auto",
    higher: bool | None = None,
) -> Comparison:
    """Wins/ties/losses, sign test and Wilcoxon signed-rank of configuration ``a`` against ``b``."""
    up = _direction(metric, higher)
    ida, idb = select_one(res, a), select_one(res, b)
    if ida == idb:
        raise SelectionError(f"{res.source}: {a!r} and {b!r} select the same configuration {ida}")
    means, _ = score_matrix(res, metric, configs=[ida, idb])
    means = means.reindex(columns=[ida, idb])
    full, dropped = _complete_rows(means)
    if len(full) == 0:
        raise SelectionError(f"{res.source}: {ida} and {idb} share no dataset with results on both")
    x, y = full[ida].to_numpy(), full[idb].to_numpy()
    sign = stats.sign_test(x, y, higher_is_better=up)
    diff = np.round(x - y, stats.DECIMALS)
    wil = None
    if (diff != 0).any():
        wil = stats.signed_rank(x, y, higher_is_better=up, zero_method=zero_method, method=method)  # type: ignore[arg-type]
    return Comparison(metric, up, ida, idb, [str(d) for d in full.index], dropped, sign, wil)


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
    excluded: list[str]
    friedman: stats.FriedmanResult
    cd: float
    alpha: float
    control: str | None
    posthoc: stats.PostHocResult | None

    def ranking(self) -> pd.DataFrame:
        """Configurations sorted by average rank (best first)."""
        df = pd.DataFrame({"config_id": self.configs, "average_rank": self.friedman.average_ranks})
        return df.sort_values(["average_rank", "config_id"], kind="stable").reset_index(drop=True)

    def posthoc_frame(self) -> pd.DataFrame:
        ph = self.posthoc
        if ph is None:
            return pd.DataFrame(columns=["config_a", "config_b", "z", "p_value", "adjusted", "reject"])
        idx = np.asarray(ph.pairs, dtype=np.intp).reshape(-1, 2)
        names = np.asarray(self.configs, dtype=object)
        df = pd.DataFrame({"config_a": names[idx[:, 0]], "config_b": names[idx[:, 1]], "z": ph.z,
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
            "average_ranks": records(_head(self.ranking(), limit)),
            "friedman": {"chi2": f.chi2, "p_value": f.p_value, "formula": f.formula, "tie_correction": f.tie_correction},
            "iman_davenport": {"F": _plain(f.iman_davenport), "p_value": f.p_value_iman_davenport,
                               "df": [f.k - 1, (f.k - 1) * (f.n - 1)]},
            "nemenyi_cd": self.cd,
            "alpha": self.alpha,
            "control": self.control,
            "posthoc": None if self.posthoc is None else {
                "method": self.posthoc.method, "rows": records(_head(self.posthoc_frame(), limit))},
        }

    def to_text(self, limit: int = 20) -> str:
        f = self.friedman
        rk = self.ranking()
        lines = [f"{self.metric} ({'higher' if self.higher_is_better else 'lower'} is better): {f.k} configurations over {f.n} datasets"]
        if self.excluded:
            lines.append(f"excluded (missing cells): {', '.join(self.excluded)}")
        lines.append("average ranks (1 = best):")
        lines += [f"  {r.average_rank:8.3f}  {r.config_id}" for r in rk.head(limit).itertuples()]
        if len(rk) > limit:
            lines.append(f"  ... {len(rk) - limit} more")
        lines.append(f"Friedman chi2_F = {f.chi2:.4f}, p = {f.p_value:.4g}  [{f.formula}]")
        lines.append(f"Iman-Davenport F_F = {f.iman_davenport:.4f}, p = {f.p_value_iman_davenport:.4g}  (df {f.k - 1}, {(f.k - 1) * (f.n - 1)})")
        lines.append(f"Nemenyi critical difference (alpha = {self.alpha}): {self.cd:.4f}")
        if self.posthoc is not None:
            ph = self.posthoc_frame()
            head = f"vs control {self.control}" if self.control else "all pairs"
            lines.append(f"post-hoc {head}, {self.posthoc.method} adjustment, {int(ph['reject'].sum())} of {len(ph)} rejected:")
            lines += [f"  {r.config_a} vs {r.config_b}: z = {r.z:+.3f}, p = {r.p_value:.4g}, adjusted = {r.adjusted:.4g}"
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
) -> RankReport:
    """Average ranks over datasets, Friedman and Iman-Davenport tests, Nemenyi CD, post-hoc.

    Parameters
    ----------
    posthoc : {"auto", "holm", "finner", "li", "bonferroni", "shaffer", "none"}
        With ``control``: one of holm (auto), finner, li, bonferroni. Without:
        all pairs with shaffer (auto, up to :data:`SHAFFER_MAX_K` configurations), holm or bonferroni.
    """
    up = _direction(metric, higher)
    ids = select(res, where) if where else None
    means, _ = score_matrix(res, metric, configs=ids)
    full, dropped = _complete_rows(means)
    configs = [str(c) for c in means.columns]
    if len(configs) < 2 or len(full) < 2:
        raise SelectionError(
            f"{res.source}: ranking needs at least 2 configurations and 2 datasets with every cell present, "
            f"got {len(configs)} configurations and {len(full)} datasets"
        )
    fr = stats.friedman(full.to_numpy(), higher_is_better=up, tie_correction=tie_correction)
    control_id = select_one(res, control) if control else None
    if control_id is not None and control_id not in configs:
        raise SelectionError(f"{res.source}: control {control_id} is not among the ranked configurations")
    ph = _posthoc(res, fr, configs, control_id, posthoc, alpha)
    return RankReport(metric, up, configs, [str(d) for d in full.index], dropped, fr,
                      stats.nemenyi_cd(fr.k, fr.n, alpha), alpha, control_id, ph)


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


def _atomic_target(path: str | os.PathLike) -> tuple[Path, str]:
    target = Path(path)
    if not target.parent.exists():
        raise SelectionError(f"{target}: output folder {target.parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    os.close(fd)
    return target, tmp


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` to a temporary file in the same folder, then move it into place."""
    target, tmp = _atomic_target(path)
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _save_figure(fig, path: str | os.PathLike) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    target = Path(path)
    fmt = target.suffix.lstrip(".").lower()
    if fmt not in ("png", "pdf", "svg"):
        raise SelectionError(f"{target}: plot file must end in .png, .pdf or .svg")
    FigureCanvasAgg(fig)
    target, tmp = _atomic_target(target)
    try:
        fig.savefig(tmp, format=fmt, bbox_inches="tight")
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


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
    """Critical-difference style diagram: average ranks on an axis, Nemenyi groups joined by bars.

    Only the ``limit`` best-ranked configurations are drawn; ranks and CD
    are those computed over all of them.
    """
    from matplotlib.figure import Figure

    rk = report.ranking().head(limit)
    ranks, names = rk["average_rank"].to_numpy(), rk["config_id"].tolist()
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
    ax.set_title(f"average ranks, {report.metric}, {report.friedman.n} datasets", fontsize=9)
    _save_figure(fig, path)


def plot_heatmap(
    res: SweepResults, path: str | os.PathLike, metric: str = "accuracy", *, where: str | None = None,
    pivot: str | None = None,
) -> None:
    """Dataset x configuration heatmap of cell means (missing cells blank)."""
    from matplotlib.figure import Figure

    means, _ = score_matrix(res, metric, configs=select(res, where) if where else None, pivot=pivot)
    n_rows, n_cols = means.shape
    fig = Figure(figsize=(min(2 + 0.45 * n_cols, 30), min(1.5 + 0.35 * n_rows, 30)))
    ax = fig.add_subplot()
    image = ax.imshow(np.ma.masked_invalid(means.to_numpy(dtype=float)), aspect="auto", cmap="viridis",
                      interpolation="nearest")
    fig.colorbar(image, ax=ax, label=metric)
    if n_rows <= 60:
        ax.set_yticks(range(n_rows), [str(d) for d in means.index], fontsize=7)
    if n_cols <= 60:
        ax.set_xticks(range(n_cols), [str(c) for c in means.columns], rotation=90, fontsize=7)
    ax.set_xlabel(pivot or "configuration")
    ax.set_ylabel("dataset")
    _save_figure(fig, path)
