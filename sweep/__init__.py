"""foldsweep's scheduler: spec, plan, tracker, run loop, reports and statistics.

Public names are listed in ``__all__``; modules not listed here are internal.
"""

from typing import Any

from sweep.errors import DatasetError, FoldsweepError, SchemaVersionError, SelectionError, SpecError, StoreError

# The rest is imported on first use (PEP 562), so that ``import sweep.errors`` (which workers may do)
# does not bring in the tracker and SQLAlchemy.
_LAZY = {
    "Configuration": "sweep.plan", "Plan": "sweep.plan", "PlannedJob": "sweep.plan", "make_plan": "sweep.plan",
    "RunOptions": "sweep.run", "RunSummary": "sweep.run", "load_inputs": "sweep.run", "run_sweep": "sweep.run",
    "FoldScheme": "sweep.spec", "ModelBlock": "sweep.spec", "Spec": "sweep.spec", "load_spec": "sweep.spec",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'sweep' has no attribute {name!r}")


__all__ = [
    # reading a spec and planning it
    "Spec",
    "FoldScheme",
    "ModelBlock",
    "load_spec",
    "Configuration",
    "PlannedJob",
    "Plan",
    "make_plan",
    "load_inputs",
    # running
    "RunOptions",
    "RunSummary",
    "run_sweep",
    # errors
    "FoldsweepError",
    "SpecError",
    "DatasetError",
    "StoreError",
    "SchemaVersionError",
    "SelectionError",
]
