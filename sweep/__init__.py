"""foldsweep's scheduler: spec, plan, tracker, run loop, reports and statistics.

Public names are listed in ``__all__``; modules not listed here are internal.
"""

from sweep.errors import DatasetError, FoldsweepError, SchemaVersionError, SelectionError, SpecError, StoreError
from sweep.plan import Configuration, Plan, PlannedJob, make_plan
from sweep.run import RunOptions, RunSummary, load_inputs, run_sweep
from sweep.spec import FoldScheme, ModelBlock, Spec, load_spec

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
