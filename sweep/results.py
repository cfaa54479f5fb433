"""Results out of the tracker as pandas frames: one row per job.

``results_frame`` is what ``foldsweep results`` writes and what the
reports read: the job's key, dataset, configuration id, worker, every
parameter as its own column, repeat, fold, and the metrics under plain
names; model size figures become columns of their own too.

Reports read the tracker alone: :func:`open_tracker` plans the spec with the
dataset fingerprints the tracker recorded for this spec's sweep (its active
jobs), so no dataset file is read and the run loop is not imported. A dataset
of the spec that the tracker has no jobs for yet is planned with an empty
fingerprint: its cells are planned and have no results.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

from sweep.errors import NoStoreYet

METRICS = ("accuracy", "balanced_accuracy", "kappa", "train_accuracy", "fit_seconds", "predict_seconds")
ID_COLUMNS = ("key", "dataset", "config_id", "worker", "label", "repeat", "fold")


@dataclass(frozen=True)
class TrackerView:
    """A spec planned with what the tracker recorded: no dataset file read."""

    spec: Any
    plan: Any
    #: config_id -> sweep.naming.ConfigName
    names: Mapping[str, Any]
    #: dataset name -> fingerprint recorded for this sweep (None: no jobs recorded yet)
    fingerprints: Mapping[str, str | None]


def open_tracker(spec_path: str | Path, *, store_needed: bool = True) -> tuple[TrackerView, Any]:
    """(view, open store) for the spec at ``spec_path``; the store is None when it does not exist yet
    and ``store_needed`` is False (else :class:`~sweep.errors.NoStoreYet`). The caller closes the store."""
    from sweep.cluster import refuse_network_sqlite
    from sweep.naming import name_configurations
    from sweep.plan import make_plan
    from sweep.spec import load_spec
    from sweep.store import Store
    from workers.registry import get_worker

    spec = load_spec(spec_path)
    refuse_network_sqlite(spec.store_url)
    try:
        store = Store.open(spec.store_url, create=False)
    except NoStoreYet:
        if store_needed:
            raise
        store = None
    recorded = store.sweep_datasets(spec.name) if store is not None else {}
    fingerprints = {e["name"]: recorded.get(e["name"]) for e in spec.datasets}
    workers = {m.worker: get_worker(m.worker) for m in spec.models}
    try:
        plan = make_plan(spec, {n: fp or "" for n, fp in fingerprints.items()}, workers)
        names = name_configurations(spec, plan)
    except BaseException:
        if store is not None:
            store.close()
        raise
    return TrackerView(spec, plan, names, fingerprints), store


def results_frame(inputs: Any, store: Any, *, figures: bool = True, keys: bool = True,
                  hosts: bool = True, metrics: Sequence[str] = METRICS,
                  names: Mapping[str, Any] | None = None) -> tuple[Any, list[str]]:
    """(frame of the plan's finished jobs, parameter column names).

    A job is the plan's when its dataset fingerprint, fold scheme, repeat,
    fold, configuration and worker version are the plan's: what its key
    hashes, so no key needs expanding. ``keys``, ``hosts`` (worker version and
    host) and ``figures`` columns, and metrics not in ``metrics``, can be left out to read faster. Parameter
    columns keep their declared types (object dtype), so an integer stays an integer. ``inputs`` is
    anything with a ``plan`` (a :class:`TrackerView`). With ``names`` (sweep.naming) a ``name`` column is
    added after ``config_id`` and parameters that do not apply to a configuration are None.
    """
    import pandas as pd

    plan = inputs.plan
    configs = plan.configurations
    version = {c.config_id: c.worker_version for c in configs}
    where = dict(scheme=plan.scheme, fingerprints=[fp for _, fp in plan.datasets], repeats=plan.repeats, k=plan.k)
    rows, columns = store.done_results(**where, figures=figures, keys=keys, hosts=hosts,
                                       metrics=list(metrics), names={fp: name for name, fp in plan.datasets})
    frame = pd.DataFrame.from_records(rows, columns=columns)
    # a configuration's results under another worker version are not the plan's (one scan tells them apart)
    frame = frame[frame["config_id"].map(version) == frame["worker_version"]]
    if not hosts:
        frame = frame.drop(columns=["worker_version"])
    params = sorted({name for c in configs for name in c.params})
    shown = {c.config_id: (names[c.config_id].params if names else c.params) for c in configs}
    table = pd.DataFrame({"config_id": [c.config_id for c in configs], "worker": [c.worker for c in configs],
                          "label": [c.label for c in configs],
                          **({"name": [names[c.config_id].name for c in configs]} if names else {}),
                          **{name: pd.Series([shown[c.config_id].get(name) for c in configs], dtype=object)
                             for name in params}})
    frame = frame.merge(table, on="config_id", how="left")
    extra: list[str] = []
    if figures:
        frame, extra = _expand_figures(frame, taken={*ID_COLUMNS, *params, *METRICS, "worker_version", "host"})
    ids = [c for c in ID_COLUMNS if keys or c != "key"]
    if names:
        ids.insert(ids.index("config_id") + 1, "name")
    ordered = (ids + [*params, *metrics, *extra]
               + (["worker_version", "host"] if hosts else []))
    frame = frame[ordered].sort_values(["dataset", "config_id", "repeat", "fold"], kind="stable")
    return frame.reset_index(drop=True), params


def _expand_figures(frame: Any, taken: set[str]) -> tuple[Any, list[str]]:
    """Turn the JSON ``figures`` column into one column per figure (parsing each distinct text once).

    A figure named like a parameter or a metric (a tree's ``depth`` beside the fuzzy worker's ``depth``
    parameter) becomes ``figure_<name>``.
    """
    import pandas as pd

    codes, texts = pd.factorize(frame.pop("figures"))
    parsed = pd.DataFrame([json.loads(t) if t else {} for t in texts])
    if parsed.empty or not len(parsed.columns):
        return frame, []
    parsed = parsed.rename(columns={c: f"figure_{c}" for c in parsed.columns if c in taken})
    names = sorted(parsed.columns)
    expanded = parsed[names].take(codes).reset_index(drop=True)
    return pd.concat([frame.reset_index(drop=True), expanded], axis=1), names


def load_sweep_results(spec_path: str | Path, metrics: Sequence[str] | None = None, *,
                       details: bool = False) -> Any:
    """The finished results of a sweep with its plan and names, for the report commands.

    ``metrics`` names the metrics the report needs; model size figures are
    read only when one of them is a figure (or when ``metrics`` is None).
    ``details`` also reads the job counts per cell and state, the failed jobs and
    the datasets' records (for the study report).
    """
    import pandas as pd

    from sweep.report import SweepResults

    view, store = open_tracker(spec_path)
    try:
        figures = metrics is None or any(m not in METRICS for m in metrics)
        wanted = METRICS if metrics is None else [m for m in METRICS if m in metrics]
        frame, params = results_frame(view, store, keys=False, hosts=False, figures=figures, metrics=wanted,
                                      names=view.names)
        extra = _details(view, store) if details else {}
    finally:
        store.close()
    plan = view.plan
    given = {b.label: {*b.fixed, *b.grid} for b in view.spec.models}  # the parameters the spec sets
    planned = pd.DataFrame([(name, c.config_id, plan.jobs_per_cell) for name, _ in plan.datasets
                            for c in plan.configurations], columns=["dataset", "config_id", "jobs"])
    return SweepResults(frame=frame, params=params, planned=planned, spec_path=str(spec_path),
                        names={cid: n.name for cid, n in view.names.items()},
                        legend={cid: {"model": n.model, "worker": n.worker, "params": dict(n.params),
                                      "given": sorted(given.get(n.model, set()) & set(n.params))}
                                for cid, n in view.names.items()},
                        k=plan.k, repeats=plan.repeats, info={"view": view, **extra})


def _details(view: TrackerView, store: Any) -> dict[str, Any]:
    # done jobs are counted from the results frame (the report's cells); the tracker adds the others
    return {"cell_counts": store.cell_counts(view.spec.name, ("pending", "running", "failed"), scheme=view.plan.scheme),
            "failed": store.failed_jobs(view.spec.name),
            "datasets": store.dataset_records([fp for fp in view.fingerprints.values() if fp])}
