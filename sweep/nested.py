"""Nested selection: inner folds inside each outer training part, and the honest winner.

The configuration with the best mean over the very folds that are reported
wins partly by luck, so its mean is optimistically biased (Cawley and
Talbot, JMLR 11, 2010). A spec with a ``[selection]`` section gets, for
every outer (repeat, fold) and configuration, ``inner_k`` more jobs that
train and score inside the outer training part alone; the configuration
chosen on them is then scored on the outer test part, which took no part
in choosing it. Over the outer folds that is the accuracy of the tuning
procedure itself (nested cross-validation)::

    outer (repeat r, fold f): training rows T ───────────────────────┬─ test rows (never in an inner job)
      inner fold i of T: train on T \\ V_i, score on V_i (inner job)  │
      per model block: the configuration with the best mean          │
      inner score (ties: the first in the block's grid order) ───────┴─► its outer job's score

**Inner folds, exactly:** for outer training rows ``T`` (ascending), the
inner folds are scikit-learn's ``StratifiedKFold(n_splits=inner_k,
shuffle=True, random_state=seed).split(T, y[T])``, ``seed`` the
``[folds]`` seed (computed with :func:`sweep.folds.stratified_kfold`, the
project's numpy port, which the tests check against scikit-learn). They are
stored like the outer folds and are the same for every configuration.

**Inner jobs are ordinary jobs** of the fold scheme
``inner_scheme(scheme, inner_k)`` (``"<outer scheme>/inner-k<K>"``): keys,
tracker, resume, growing a grid, every executor work for them unchanged.
Their fold number packs (outer fold f, inner fold i) as ``f * inner_k + i``
(:func:`inner_number`, :func:`split_number`); the folds table holds each
inner fold's validation rows as dataset row indices. The reports, which read
the plan's own scheme, never see an inner result.

**Selection** (:func:`select_configurations`, pure): per dataset, model
block and outer fold, once every configuration of the block has all its
inner scores, the highest mean inner score wins; ties go to the first
configuration in the block's grid order, as scikit-learn's ``GridSearchCV``
breaks them (its ``best_index_`` is the first candidate ranked 1; note that
its ``ParameterGrid`` orders several parameters by name, our grid order is
the spec's). Means are plain float means of the inner scores in fold order,
as ``GridSearchCV`` computes them, with no rounding.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from sweep.errors import DatasetError

__all__ = ["inner_scheme", "inner_number", "split_number", "check_inner_feasible", "compute_inner_folds",
           "job_rows", "JobRows", "record_inner_folds", "inner_progress", "select_configurations", "nested_summary", "tuned_rows", "tuned_name",
           "selection_progress", "load_selection", "inner_counts"]


def inner_scheme(scheme: str, inner_k: int) -> str:
    """The fold scheme of the inner jobs of outer scheme ``scheme``."""
    return f"{scheme}/inner-k{inner_k}"


def inner_number(fold: int, inner: int, inner_k: int) -> int:
    """The stored fold number of inner fold ``inner`` of outer fold ``fold``."""
    return fold * inner_k + inner


def split_number(number: int, inner_k: int) -> tuple[int, int]:
    """(outer fold, inner fold) of a stored inner fold number."""
    return divmod(number, inner_k)


def tuned_name(block: str) -> str:
    """The name of a tuned block's row in the reports, e.g. ``fuzzy (tuned)``."""
    return f"{block} (tuned)"


# ---- folds ------------------------------------------------------------------------------------

def check_inner_feasible(y: np.ndarray, classes: Sequence[str], k: int, inner_k: int, where: str) -> None:
    """Refuse a dataset with a class that some outer training part holds fewer than ``inner_k`` times.

    The stratified outer folds give each fold ⌊n/k⌋ or ⌈n/k⌉ rows of a class of n rows, so its
    smallest share of an outer training part is n − ⌈n/k⌉.
    """
    counts = np.bincount(y, minlength=len(classes))
    small = [(classes[c], int(n - -(-n // k))) for c, n in enumerate(counts) if n - -(-n // k) < inner_k]
    if small:
        listed = ", ".join(f"{name!r} has {n}" for name, n in small)
        raise DatasetError(f"{where}: in the smallest outer training part {listed} rows, fewer than "
                           f"selection.inner_k = {inner_k}; lower selection.inner_k or drop the class")


def compute_inner_folds(y: np.ndarray, outer: Mapping[tuple[int, int], np.ndarray], inner_k: int,
                        seed: int) -> list[Any]:
    """The inner folds of every outer fold, given as (repeat, fold) -> test rows (as the store holds them):
    :class:`sweep.folds.Fold` objects (repeat, inner fold number, validation rows as dataset row
    indices, classes absent from the inner training part)."""
    from sweep.folds import Fold, stratified_kfold

    y = np.asarray(y)
    classes = np.unique(y)
    folds = []
    for (repeat, fold), test in sorted(outer.items()):
        train = np.setdiff1d(np.arange(len(y)), test)  # ascending
        for i, part in enumerate(stratified_kfold(y[train], inner_k, seed)):
            rest = np.delete(train, part)
            missing = tuple(int(c) for c in np.setdiff1d(classes, np.unique(y[rest])))
            folds.append(Fold(repeat, inner_number(fold, i, inner_k), train[part].astype(np.int32), missing))
    return folds


def job_rows(outer: Mapping[tuple[int, int], np.ndarray], inner: Mapping[tuple[int, int], np.ndarray],
             n_rows: int, inner_k: int, is_inner: bool, repeat: int, fold: int) -> tuple[np.ndarray, np.ndarray | None]:
    """(test rows, training rows or None for "every other row") of one job, from the stored folds."""
    if not is_inner:
        return outer[(repeat, fold)], None
    outer_fold, _ = split_number(fold, inner_k)
    validation = inner[(repeat, fold)]
    keep = np.ones(n_rows, dtype=bool)
    keep[outer[(repeat, outer_fold)]] = False
    keep[validation] = False
    return validation, np.flatnonzero(keep)


class JobRows:
    """(test rows, training rows or None for "every other row") of the claimed jobs of ``plan``, from the
    folds ``store`` holds (read once per dataset): what the run loop puts in each :class:`workers.job.Job`."""

    def __init__(self, store: Any, plan: Any, datasets: Mapping[str, Any]) -> None:
        self.store, self.plan, self.datasets = store, plan, datasets
        self.outer: dict[str, Mapping[tuple[int, int], np.ndarray]] = {}
        self.inner: dict[str, Mapping[tuple[int, int], np.ndarray]] = {}

    def __call__(self, claimed: Any) -> tuple[np.ndarray, np.ndarray | None]:
        fp, plan = claimed.fingerprint, self.plan
        if fp not in self.outer:
            self.outer[fp] = self.store.load_folds(plan.scheme, fp)
            if plan.inner_k:
                self.inner[fp] = self.store.load_folds(inner_scheme(plan.scheme, plan.inner_k), fp)
        is_inner = claimed.scheme not in ("", plan.scheme)
        return job_rows(self.outer[fp], self.inner.get(fp, {}), len(self.datasets[claimed.dataset].y),
                        plan.inner_k, is_inner, claimed.repeat, claimed.fold)


def record_inner_folds(store: Any, plan: Any, data: Any, seed: int) -> None:
    """Store the inner folds of ``data`` (derived from its outer folds as stored), unless already there."""
    if plan.inner_k and not store.has_folds(inner_scheme(plan.scheme, plan.inner_k), data.fingerprint):
        outer = store.load_folds(plan.scheme, data.fingerprint)
        store.record_folds(inner_scheme(plan.scheme, plan.inner_k), data.fingerprint,
                           compute_inner_folds(data.y, outer, plan.inner_k, seed))


def inner_progress(store: Any, plan: Any, sweep: str) -> tuple[tuple[int, int] | None, set[str]]:
    """For the progress line: (inner jobs, of them finished) or None without nested selection, and the
    inner jobs' keys (to count finished ones apart)."""
    if not plan.inner_k:
        return None, set()
    counts = store.counts(sweep, inner_scheme(plan.scheme, plan.inner_k))
    return (sum(counts.values()), counts["done"] + counts["failed"]), {j.key for j in plan.inner_jobs}


# ---- selection (pure) -------------------------------------------------------------------------

def select_configurations(inner: Any, blocks: Sequence[tuple[str, Sequence[str]]], inner_k: int) -> Any:
    """The configuration each model block selects per dataset and outer fold.

    ``inner``: a frame of inner results with columns dataset, config_id, repeat, fold (the stored inner
    fold number) and score. Returns a frame with columns dataset, model, repeat, fold, config_id,
    inner_score: one row per (dataset, block, repeat, outer fold) whose every configuration has all
    ``inner_k`` inner scores (NaN counts as missing).
    """
    import pandas as pd

    columns = ["dataset", "model", "repeat", "fold", "config_id", "inner_score"]
    inner = inner.dropna(subset=["score"])
    if inner.empty:
        return pd.DataFrame(columns=columns)
    outer_fold, inner_fold = split_number(inner["fold"].to_numpy(), inner_k)
    wide = (inner.assign(fold=outer_fold, inner=inner_fold)
            .pivot_table(index=["dataset", "repeat", "fold"], columns=["config_id", "inner"], values="score",
                         aggfunc="first"))
    found = []
    for label, ids in blocks:
        wanted = pd.MultiIndex.from_product([list(ids), range(inner_k)])
        scores = wide.reindex(columns=wanted).to_numpy(dtype=float).reshape(len(wide), len(ids), inner_k)
        complete = ~np.isnan(scores).any(axis=(1, 2))
        # a C-contiguous (rows, configurations, inner folds) array reduced over its last axis: the same
        # float sums as GridSearchCV's mean over its (candidates, splits) array
        means = np.ascontiguousarray(scores[complete]).mean(axis=-1)
        chosen = np.argmax(means, axis=1)  # the first of equal maxima: grid order breaks ties
        rows = wide.index[complete]
        found.append(pd.DataFrame({
            "dataset": rows.get_level_values(0), "model": label, "repeat": rows.get_level_values(1),
            "fold": rows.get_level_values(2), "config_id": np.asarray(ids, dtype=object)[chosen],
            "inner_score": means[np.arange(len(chosen)), chosen]}))
    frame = pd.concat(found, ignore_index=True) if found else pd.DataFrame(columns=columns)
    return frame[columns].astype({"repeat": int, "fold": int})


def nested_summary(selected: Any, outer: Any, blocks: Sequence[tuple[str, Sequence[str]]],
                   datasets: Sequence[str], folds: Sequence[tuple[int, int]], metric: str,
                   names: Mapping[str, str] | None = None) -> list[dict[str, Any]]:
    """Per dataset and model block: the nested estimate beside the naive best.

    ``selected``: :func:`select_configurations`' frame; ``outer``: the outer results (columns dataset,
    config_id, repeat, fold and ``metric``); ``folds``: the planned outer (repeat, fold) pairs.
    ``nested_accuracy`` is the mean over the outer folds of the selected configurations' outer scores
    (None until every outer fold has a selection and its outer score); ``naive_accuracy`` the highest
    mean outer score of a configuration of the block over every outer fold (None until one has them
    all); ``optimism`` = naive − nested. Scores are in ``metric``, the selection's metric. A configuration
    is shown by its readable name (``names``, sweep.naming; its id without one), beside its id.
    """
    names = names or {}
    score = {(r.dataset, r.config_id, r.repeat, r.fold): float(getattr(r, metric))
             for r in outer[["dataset", "config_id", "repeat", "fold", metric]].itertuples(index=False)}
    chosen = {(r.dataset, r.model, r.repeat, r.fold): (r.config_id, float(r.inner_score))
              for r in selected.itertuples(index=False)}
    out = []
    for dataset in datasets:
        for label, ids in blocks:
            choices = []
            for repeat, fold in folds:
                if (dataset, label, repeat, fold) in chosen:
                    config, inner_score = chosen[(dataset, label, repeat, fold)]
                    choices.append(dict(repeat=repeat, fold=fold, config=names.get(config, config), config_id=config,
                                        inner_score=inner_score, outer_score=score.get((dataset, config, repeat, fold))))
            outer_scores = [c["outer_score"] for c in choices if c["outer_score"] is not None]
            nested = float(np.mean(outer_scores)) if len(outer_scores) == len(folds) else None
            means = {c: float(np.mean([score[(dataset, c, r, f)] for r, f in folds])) for c in ids
                     if all((dataset, c, r, f) in score for r, f in folds)}
            naive_config = max(means, key=lambda c: means[c]) if means else None  # first of equals
            naive = means[naive_config] if naive_config is not None else None
            out.append(dict(dataset=dataset, model=label, metric=metric, nested_accuracy=nested,
                            naive_accuracy=naive, optimism=None if nested is None or naive is None else naive - nested,
                            naive_config=names.get(naive_config or "", naive_config), naive_config_id=naive_config,
                            folds=len(folds), folds_selected=len(choices), choices=choices))
    return out


def tuned_rows(selected: Any, outer: Any, params: Sequence[str] = ()) -> Any:
    """The outer results of each block's selected configurations, one row per (dataset, block, repeat,
    fold), named as one configuration :func:`tuned_name` (``config_id`` and ``label``; the ``params``
    columns emptied): per-fold results of the tuned block that any report takes like a configuration's."""
    picked = selected[["dataset", "model", "repeat", "fold", "config_id"]]
    rows = outer.merge(picked, on=["dataset", "config_id", "repeat", "fold"], how="inner")
    names = rows.pop("model").map(tuned_name).to_numpy(dtype=object)
    rows["config_id"] = names
    for column in ("label", "name"):  # the block's label; a readable name column where the reports have one
        if column in rows.columns:
            rows[column] = names
    for name in params:
        rows[name] = None
    return rows[list(outer.columns)].reset_index(drop=True)


def selection_progress(plan: Any, done: set[str]) -> tuple[int, int]:
    """(outer folds with a selection, outer folds to select for) over datasets × blocks × (repeat, fold),
    given the keys of the done jobs (pure: the plan names every inner job)."""
    if not plan.inner_k:
        return 0, 0
    finished: dict[tuple[str, str, int, int], int] = {}
    for job in plan.inner_jobs:
        if job.key in done:
            fold, _ = split_number(job.fold, plan.inner_k)
            cell = (job.dataset, job.config_id, job.repeat, fold)
            finished[cell] = finished.get(cell, 0) + 1
    total = selected = 0
    for name, _ in plan.datasets:
        for _, ids in plan.blocks:
            for repeat in range(plan.repeats):
                for fold in range(plan.k):
                    total += 1
                    selected += all(finished.get((name, c, repeat, fold), 0) == plan.inner_k for c in ids)
    return selected, total


def inner_counts(plan: Any, states: Mapping[str, str]) -> dict[str, int]:
    """Inner jobs per state (pending when the tracker has no row for one yet), and their total."""
    counts = {"total": len(plan.inner_jobs), "done": 0, "failed": 0, "pending": 0, "running": 0}
    for job in plan.inner_jobs:
        counts[states.get(job.key, "pending")] += 1
    return counts


# ---- reading the tracker (the edge) -----------------------------------------------------------

def load_selection(inputs: Any, store: Any, metric: str) -> Any:
    """:func:`select_configurations` over the tracker's inner results of ``inputs``' plan (results of
    another worker version than the plan's are left out, as the reports do)."""
    import pandas as pd

    plan = inputs.plan
    version = {c.config_id: c.worker_version for c in plan.configurations}
    rows, columns = store.done_results(scheme=inner_scheme(plan.scheme, plan.inner_k),
                                       fingerprints=[fp for _, fp in plan.datasets], repeats=plan.repeats,
                                       k=plan.k * plan.inner_k, figures=False, keys=False, hosts=False,
                                       metrics=[metric])
    frame = pd.DataFrame.from_records(rows, columns=columns)
    frame = frame[frame["config_id"].map(version) == frame["worker_version"]]
    inner = frame.rename(columns={metric: "score"})[["dataset", "config_id", "repeat", "fold", "score"]]
    return select_configurations(inner, plan.blocks, plan.inner_k)


def _open_selection(spec_path: Any) -> tuple[Any, Any]:
    """(tracker view, open store) of a spec with a [selection] section (sweep.results.open_tracker: no
    dataset file is read); the caller closes the store."""
    from sweep.errors import SelectionError
    from sweep.results import open_tracker

    view, store = open_tracker(spec_path)
    if view.spec.selection is None:
        store.close()
        raise SelectionError(f"{spec_path}: the spec has no [selection] section, so no inner jobs were planned; "
                             "add one (e.g. [selection] inner_k = 3) and run the sweep again")
    return view, store


def load_nested(spec_path: Any) -> tuple[Any, list[dict[str, Any]]]:
    """(tracker view, :func:`nested_summary` with readable names) of the sweep at ``spec_path``: what
    ``foldsweep best SPEC --nested`` prints."""
    from sweep.results import results_frame

    view, store = _open_selection(spec_path)
    plan, metric = view.plan, view.spec.selection.metric
    try:
        selected = load_selection(view, store, metric)
        outer, _ = results_frame(view, store, figures=False, keys=False, hosts=False, metrics=[metric])
    finally:
        store.close()
    folds = [(r, f) for r in range(plan.repeats) for f in range(plan.k)]
    names = {cid: n.name for cid, n in view.names.items()}
    return view, nested_summary(selected, outer, plan.blocks, [name for name, _ in plan.datasets], folds, metric,
                                names=names)


def add_tuned(res: Any, *, only: bool = False) -> Any:
    """``res`` (:class:`sweep.report.SweepResults`) with one more configuration per model block, its
    tuned row (:func:`tuned_rows`), planned like any configuration's cell, for table, compare and rank;
    ``only``: the tuned rows alone (e.g. to rank 'fuzzy (tuned)' against 'tree (tuned)')."""
    from dataclasses import replace

    import pandas as pd

    view, store = _open_selection(res.spec_path)
    plan = view.plan
    try:
        selected = load_selection(view, store, view.spec.selection.metric)
    finally:
        store.close()
    rows = tuned_rows(selected, res.frame, res.params)
    planned = pd.DataFrame([(name, tuned_name(label), plan.jobs_per_cell) for name, _ in plan.datasets
                            for label, _ in plan.blocks], columns=["dataset", "config_id", "jobs"])
    # a tuned row's id is its name; its parameters change from fold to fold: its legend says how they are chosen
    workers = {block.label: block.worker for block in view.spec.models}
    how = {"selected": f"per outer fold, best mean {view.spec.selection.metric} on {plan.inner_k} inner folds"}
    names = {tuned_name(label): tuned_name(label) for label, _ in plan.blocks}
    legend = {tuned_name(label): {"model": label, "worker": workers[label], "params": how, "given": ["selected"]}
              for label, _ in plan.blocks}
    if only:
        return replace(res, frame=rows, planned=planned, names=names, legend=legend if res.legend else {}, cache={})
    frame = pd.concat([res.frame, rows], ignore_index=True) if len(rows) else res.frame
    return replace(res, frame=frame, planned=pd.concat([res.planned, planned], ignore_index=True),
                   names={**res.names, **names}, legend={**res.legend, **legend} if res.legend else {}, cache={})
