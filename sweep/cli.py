"""The ``foldsweep`` command.

::

    foldsweep run SPEC [--workers N] [--backend joblib|dask] [--scheduler ADDR] [--retry-failed] [--claim N]
    foldsweep status SPEC [--json]
    foldsweep results SPEC [--format csv|parquet|json] [--out FILE]
    foldsweep best | table | compare | rank | plot SPEC ...      (see sweep.report_cli)

Bad input of any kind ends with one line on standard error and exit code 2.

Exit codes: 0 done (failed jobs included: see ``status``), 2 bad input, and for a run stopped by a
signal 128 + its number: 130 SIGINT (Ctrl-C), 143 SIGTERM, 129 SIGHUP (what finished is committed,
the rest is pending again; a second signal exits at once with the same code).
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any, Sequence

from sweep.errors import FoldsweepError, NoStoreYet, SelectionError

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="foldsweep", description="Cross-validation sweeps of fuzzy rule-based "
                                     "classifiers: plan, run, resume, compare.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    run = sub.add_parser("run", help="run every pending job of a sweep (resumes where it stopped)")
    run.add_argument("spec", help="the sweep's TOML spec")
    run.add_argument("--workers", type=_positive, default=None, help="jobs at once (default: all cores)")
    run.add_argument("--backend", choices=("joblib", "dask"), default="joblib", help="where jobs run")
    run.add_argument("--scheduler", default=None, help="address of an existing dask scheduler (tcp://HOST:PORT)")
    run.add_argument("--retry-failed", action="store_true", help="run failed jobs again")
    run.add_argument("--claim", type=_positive, default=None, help="jobs taken from the tracker at a time")
    run.add_argument("--accept-changed-data", action="store_true",
                     help="plan new jobs for a dataset whose content changed since earlier runs")
    run.add_argument("--progress", choices=("auto", "bar", "lines", "none"), default="auto")
    run.add_argument("--json", action="store_true", help="print the summary as JSON")
    run.set_defaults(func=cmd_run)

    status = sub.add_parser("status", help="jobs per state, and failures grouped by message")
    status.add_argument("spec")
    status.add_argument("--json", action="store_true")
    status.set_defaults(func=cmd_status)

    results = sub.add_parser("results", help="one row per finished job")
    results.add_argument("spec")
    results.add_argument("--format", choices=("csv", "parquet", "json"), default="csv")
    results.add_argument("--out", default=None, help="file to write (default: standard output)")
    results.set_defaults(func=cmd_results)

    model = sub.add_parser("model", help="the model one fold job trained (a fuzzy rule base as text)",
                           description="Print the model one fold job trained, e.g. the rule base of a "
                           "configuration that won: name the job by its key (or a unique prefix of "
                           "it, as in the results' key column), or by dataset, configuration, repeat "
                           "and fold.")
    model.add_argument("spec")
    model.add_argument("key", nargs="?", default=None, help="the job's key, or a unique prefix of it")
    model.add_argument("--dataset", default=None)
    model.add_argument("--config", default=None, help="configuration id (or a unique prefix)")
    model.add_argument("--repeat", type=int, default=0)
    model.add_argument("--fold", type=int, default=0)
    model.add_argument("--json", action="store_true")
    model.set_defaults(func=cmd_model)

    try:
        from sweep import report_cli
    except ImportError:  # pragma: no cover - the report commands are optional while being built
        report_cli = None  # type: ignore[assignment]
    if report_cli is not None:
        report_cli.add_commands(sub)
    return parser


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a positive integer, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a positive integer, got {text!r}")
    return value


def cmd_run(args: argparse.Namespace) -> int:
    from sweep.run import RunOptions, run_sweep

    options = RunOptions(workers=args.workers, backend=args.backend, scheduler=args.scheduler,
                         retry_failed=args.retry_failed, claim=args.claim,
                         accept_changed_data=args.accept_changed_data, progress=args.progress)
    summary = run_sweep(args.spec, options)
    if args.json:
        print(json.dumps(summary.__dict__))
    else:
        print(_describe_run(summary))
    return 128 + (summary.signal or 2) if summary.interrupted else 0


def _describe_run(s: Any) -> str:
    head = f"sweep {s.sweep!r}: {s.planned} jobs planned ({s.new} new), planning took {s.planning_seconds:.2f} s"
    if s.ran == 0 and s.pending == 0 and not s.interrupted:
        return f"{head}; nothing left to do: {s.done} done, {s.failed} failed"
    state = "interrupted" if s.interrupted else "finished"
    return (f"{head}; {state} after {s.seconds:.1f} s: ran {s.ran} jobs; now {s.done} done, {s.failed} failed, "
            f"{s.pending} pending" + (f"; {s.requeued} re-queued from an earlier run" if s.requeued else ""))


def cmd_status(args: argparse.Namespace) -> int:
    from sweep.run import load_inputs, open_store

    inputs = load_inputs(args.spec)
    # "gone": running jobs whose driver is gone (dead, or its lease expired); the next run re-queues them
    counts = {"total": len(inputs.plan.jobs), "done": 0, "failed": 0, "pending": 0, "running": 0, "gone": 0}
    failures: dict[str, int] = {}
    try:
        store = open_store(inputs.spec, create=False)
    except NoStoreYet:
        store = None  # not run yet: everything is pending (and no file is created by asking)
    if store is not None:
        try:
            states = {key: (state, error, timed_out) for key, state, error, timed_out in store.job_states(inputs.spec.name)}
            gone = store.held_by_gone([j.key for j in inputs.plan.jobs])
        finally:
            store.close()
        for job in inputs.plan.jobs:
            state, error, timed_out = states.get(job.key, ("pending", None, False))
            counts["gone" if job.key in gone else state] += 1
            if state == "failed":
                message = "timed out" if timed_out else _last_line(error)
                failures[message] = failures.get(message, 0) + 1
    else:
        counts["pending"] = counts["total"]
    if args.json:
        print(json.dumps({**counts, "failures": failures}))
        return 0
    print(f"sweep {inputs.spec.name!r}: {counts['done']}/{counts['total']} done, {counts['failed']} failed, "
          f"{counts['running']} running, {counts['pending']} pending"
          + (f", {counts['gone']} held by a driver that is gone (pending again at the next run)"
             if counts["gone"] else ""))
    for message, n in sorted(failures.items(), key=lambda kv: -kv[1]):
        print(f"  {n} failed: {message}")
    return 0


def _last_line(error: str | None) -> str:
    lines = [line.strip() for line in (error or "").strip().splitlines() if line.strip()]
    return lines[-1] if lines else "unknown error"


def cmd_results(args: argparse.Namespace) -> int:
    from sweep.results import results_frame
    from sweep.run import load_inputs, open_store
    from sweep.writing import write_frame

    inputs = load_inputs(args.spec)
    store = open_store(inputs.spec, create=False)
    try:
        frame, _ = results_frame(inputs, store)
    finally:
        store.close()
    write_frame(frame, args.format, args.out)
    return 0


def cmd_model(args: argparse.Namespace) -> int:
    from sweep.run import load_inputs, open_store

    inputs = load_inputs(args.spec)
    job = _select_job(args, inputs)
    config = inputs.plan.by_config[job.config_id]
    store = open_store(inputs.spec, create=False)
    try:
        stored = store.stored_model(job.key)
    finally:
        store.close()
    where = (f"job {job.key[:12]} (dataset {job.dataset!r}, configuration {job.config_id} {config.label!r}, "
             f"repeat {job.repeat}, fold {job.fold})")
    if stored is None:
        raise SelectionError(f"{args.spec}: {where} has no result yet (see `foldsweep status`)")
    if stored["model_text"] is None:
        raise SelectionError(f"{args.spec}: {where}: worker {config.worker!r} stores no model text")
    if args.json:
        print(json.dumps({"key": job.key, "dataset": job.dataset, "config_id": job.config_id,
                          "label": config.label, "repeat": job.repeat, "fold": job.fold, **stored}))
        return 0
    print(f"{where}: test accuracy {stored['accuracy']:.4f}, training accuracy {stored['train_accuracy']:.4f}")
    print(stored["model_text"])
    return 0


def _select_job(args: argparse.Namespace, inputs: Any) -> Any:
    """The planned job named by ``args``: a key prefix, or dataset + configuration + repeat + fold."""
    jobs = inputs.plan.jobs
    if args.key is not None:
        found = [j for j in jobs if j.key.startswith(args.key.lower())]
        what = f"key {args.key!r}"
    elif args.dataset is None or args.config is None:
        raise SelectionError(f"{args.spec}: name a job by its key, or by --dataset and --config "
                             "(with --repeat and --fold, default 0)")
    else:
        found = [j for j in jobs if j.dataset == args.dataset and j.config_id.startswith(args.config)
                 and j.repeat == args.repeat and j.fold == args.fold]
        what = (f"dataset {args.dataset!r}, configuration {args.config!r}, repeat {args.repeat}, "
                f"fold {args.fold}")
        if not found:
            datasets = sorted({j.dataset for j in jobs})
            if args.dataset not in datasets:
                raise SelectionError(f"{args.spec}: no dataset {args.dataset!r}; the spec has {', '.join(datasets)}")
    if not found:
        raise SelectionError(f"{args.spec}: no planned job matches {what}")
    if len({j.key for j in found}) > 1:
        raise SelectionError(f"{args.spec}: {what} matches {len(found)} jobs; give more of it")
    return found[0]


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except FoldsweepError as exc:
        print(f"foldsweep: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:  # before the run loop started (sweep.run.Interrupted) or elsewhere
        print("foldsweep: interrupted", file=sys.stderr)
        return 128 + int(getattr(exc, "signum", 2))
    except BrokenPipeError:
        return 0


def console() -> None:
    """The ``foldsweep`` command: :func:`main`, then exit without the interpreter's last garbage
    collection (see :mod:`sweep._quick_exit`)."""
    import sweep._quick_exit  # noqa: F401

    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    console()
