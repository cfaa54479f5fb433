"""The public surface is exactly what the packages' __all__ lists (a guard against accidental API)."""

from __future__ import annotations

import sweep
import workers


def test_sweep_exports() -> None:
    assert set(sweep.__all__) == {
        "Spec", "FoldScheme", "ModelBlock", "load_spec", "Configuration", "PlannedJob", "Plan", "make_plan",
        "load_inputs", "RunOptions", "RunSummary", "run_sweep", "FoldsweepError", "SpecError", "DatasetError",
        "StoreError", "SchemaVersionError", "SelectionError",
    }
    assert all(hasattr(sweep, name) for name in sweep.__all__)


def test_workers_exports() -> None:
    assert set(workers.__all__) == {"Job", "JobResult", "run_job", "Param", "Worker", "get_worker", "worker_names"}
    assert all(hasattr(workers, name) for name in workers.__all__)
