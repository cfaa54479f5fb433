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


def test_workers_do_not_import_the_tracker_or_the_run_loop() -> None:
    # DESIGN.md: workers.* never import sweep.store or sweep.run (checked in a fresh interpreter)
    import subprocess
    import sys

    code = ("import sys, workers, workers.job, workers.baselines, workers.fuzzy, workers.fuzzy.worker, "
            "workers.fuzzy.measures; "
            "print(sorted(m for m in ('sweep.store', 'sweep.run', 'sqlalchemy') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_planning_does_not_import_scikit_learn_or_pandas() -> None:
    # the "nothing left to do in well under a second of planning": reading a spec's worker
    # declarations must not import the estimator libraries (checked in a fresh interpreter)
    import subprocess
    import sys

    code = ("import sys, workers.registry as r; [r.get_worker(n) for n in r.worker_names()]; "
            "import sweep.spec, sweep.plan, sweep.folds, sweep.store, sweep.run; "
            "print(sorted(m for m in ('sklearn', 'pandas', 'scipy') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
