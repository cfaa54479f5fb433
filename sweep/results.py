"""Results out of the tracker as pandas frames: one row per job.

``results_frame`` is what ``foldsweep results`` writes and what the
reports read: the job's key, dataset, configuration id, worker, every
parameter as its own column, repeat, fold, and the metrics under plain
names; model size figures become columns of their own too.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Sequence

from sweep.run import Inputs, load_inputs, open_store

METRICS = ("accuracy", "balanced_accuracy", "kappa", "train_accuracy", "fit_seconds", "predict_seconds")
ID_COLUMNS = ("key", "dataset", "config_id", "worker", "label", "repeat", "fold")


def results_frame(inputs: Inputs, store: Any, *, figures: bool = True, keys: bool = True,
                  hosts: bool = True, metrics: Sequence[str] = METRICS) -> tuple[Any, list[str]]:
    """(frame of the plan's finished jobs, parameter column names).

    A job is the plan's when its dataset fingerprint, fold scheme, repeat,
    fold, configuration and worker version are the plan's: what its key
    hashes, so no key needs expanding. ``keys``, ``hosts`` (worker version and
    host) and ``figures`` columns, and metrics not in ``metrics``, can be left out to read faster. Parameter
    columns keep their declared types (object dtype), so an integer stays an integer.
    """
    import pandas as pd

    plan = inputs.plan
    configs = plan.configurations
    version = {c.config_id: c.worker_version for c in configs}
    where = dict(scheme=plan.scheme, fingerprints=[fp for _, fp in plan.datasets], repeats=plan.repeats, k=plan.k)
    # results of a configuration under another worker version need the per-row version to be told apart
    mixed = any(c in version and v != version[c] for c, v in store.versions(**where))
    rows, columns = store.done_results(**where, figures=figures, keys=keys, hosts=hosts or mixed,
                                       metrics=list(metrics))
    frame = pd.DataFrame.from_records(rows, columns=columns)
    in_plan = frame["config_id"].map(version)
    frame = frame[(in_plan == frame["worker_version"]) if mixed else in_plan.notna()]
    if mixed and not hosts:
        frame = frame.drop(columns=["worker_version", "host"])
    params = sorted({name for c in configs for name in c.params})
    table = pd.DataFrame({"config_id": [c.config_id for c in configs], "worker": [c.worker for c in configs],
                          "label": [c.label for c in configs],
                          **{name: pd.Series([c.params.get(name) for c in configs], dtype=object)
                             for name in params}})
    frame = frame.merge(table, on="config_id", how="left")
    extra: list[str] = []
    if figures:
        frame, extra = _expand_figures(frame, taken={*ID_COLUMNS, *params, *METRICS, "worker_version", "host"})
    ordered = ([c for c in ID_COLUMNS if keys or c != "key"] + [*params, *metrics, *extra]
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


def load_sweep_results(spec_path: str | Path, metrics: Sequence[str] | None = None) -> Any:
    """The finished results of a sweep with its plan, for the report commands.

    ``metrics`` names the metrics the report needs; model size figures are
    read only when one of them is a figure (or when ``metrics`` is None).
    """
    import pandas as pd

    from sweep.report import SweepResults

    inputs = load_inputs(spec_path)
    store = open_store(inputs.spec, create=False)
    try:
        figures = metrics is None or any(m not in METRICS for m in metrics)
        wanted = METRICS if metrics is None else [m for m in METRICS if m in metrics]
        frame, params = results_frame(inputs, store, keys=False, hosts=False, figures=figures, metrics=wanted)
    finally:
        store.close()
    plan = inputs.plan
    planned = pd.DataFrame([(name, c.config_id, plan.jobs_per_cell) for name, _ in plan.datasets
                            for c in plan.configurations], columns=["dataset", "config_id", "jobs"])
    return SweepResults(frame=frame, params=params, planned=planned, spec_path=str(spec_path))
