"""Results out of the tracker as pandas frames: one row per job.

``results_frame`` is what ``foldsweep results`` writes and what the
reports read: the job's key, dataset, configuration id, worker, every
parameter as its own column, repeat, fold, and the metrics under plain
names; model size figures become columns of their own too.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from sweep.run import Inputs, load_inputs, open_store

METRICS = ("accuracy", "balanced_accuracy", "kappa", "train_accuracy", "fit_seconds", "predict_seconds")
ID_COLUMNS = ("key", "dataset", "config_id", "worker", "label", "repeat", "fold")


def results_frame(inputs: Inputs, store: Any, *, include_unfinished: bool = False) -> tuple[Any, list[str]]:
    """(frame of the plan's done jobs, parameter column names)."""
    import pandas as pd

    planned = {j.key for j in inputs.plan.jobs}
    configs = inputs.plan.by_config
    params = sorted({name for c in configs.values() for name in c.params})
    rows = []
    for r in store.job_rows(inputs.spec.name):
        if r.key not in planned or (r.state != "done" and not include_unfinished):
            continue
        config = configs[r.config_id]
        row: dict[str, Any] = dict(key=r.key, dataset=r.dataset, config_id=r.config_id, worker=config.worker,
                                   label=config.label, repeat=r.repeat, fold=r.fold)
        row.update({name: config.params.get(name) for name in params})
        row.update({m: getattr(r, m) for m in METRICS})
        if include_unfinished:
            row.update(state=r.state, error=r.error)
        row.update(json.loads(r.figures) if r.figures else {})
        row.update(worker_version=r.worker_version, host=r.host)
        rows.append(row)
    columns = [*ID_COLUMNS, *params, *METRICS]
    frame = pd.DataFrame(rows)
    if frame.empty:
        frame = pd.DataFrame(columns=columns)
    extra = [c for c in frame.columns if c not in columns]
    frame = frame[columns + extra].sort_values(["dataset", "config_id", "repeat", "fold"], kind="stable")
    return frame.reset_index(drop=True), params


def load_sweep_results(spec_path: str | Path) -> Any:
    """The finished results of a sweep with its plan, for the report commands."""
    import pandas as pd

    from sweep.report import SweepResults

    inputs = load_inputs(spec_path)
    store = open_store(inputs.spec, create=False)
    try:
        frame, params = results_frame(inputs, store)
    finally:
        store.close()
    planned = (pd.DataFrame([(j.dataset, j.config_id) for j in inputs.plan.jobs], columns=["dataset", "config_id"])
               .groupby(["dataset", "config_id"]).size().rename("jobs").reset_index())
    return SweepResults(frame=frame, params=params, planned=planned, spec_path=Path(spec_path))
