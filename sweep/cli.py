"""The ``foldsweep`` command.

::

    foldsweep run SPEC [--workers N] [--backend joblib|dask] [--scheduler ADDR] [--retry-failed] [--claim N]
    foldsweep status SPEC [--json]
    foldsweep configs SPEC [--json]
    foldsweep failures SPEC [--json] [--traceback KEY]
    foldsweep results SPEC [--format csv|parquet|json] [--out FILE]
    foldsweep best | table | compare | rank | plot | report SPEC ...      (see sweep.report_cli)

Exit codes: 0 done; 1 ``run`` finished but jobs of the sweep are failed
(see ``foldsweep failures``); 2 bad input of any kind (one line on standard
error, argument errors too: :class:`OneLineParser`, with any password in a URL
masked); for a run stopped by a signal 128 + its number: 130 SIGINT (Ctrl-C),
143 SIGTERM, 129 SIGHUP (what finished is committed, the rest is pending again;
a second signal exits at once with the same code).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
from pathlib import Path
from typing import Any, NoReturn, Sequence

from sweep.errors import FoldsweepError, NoStoreYet, SelectionError, UsageError
from sweep.text import last_line, mask_passwords, printable

EXIT_JOBS_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130
#: local worker processes at most, per core (beyond that, memory runs out long before any gain)
WORKERS_PER_CORE = 8
#: a dask scheduler address: [scheme://]host:port
SCHEDULER_ADDRESS = re.compile(r"((?P<scheme>tcp|tls|ws|wss)://)?(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.\-]+)"
                               r":(?P<port>\d{1,5})/?")


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose errors are one line on standard error and exit code 2 (argparse's own
    print the usage first); subcommand parsers are made of the same class."""

    def error(self, message: str) -> NoReturn:
        print(f"foldsweep: error: {self.prog.removeprefix('foldsweep ')}: {' '.join(message.split())}; "
              f"see `{self.prog} --help`", file=sys.stderr)
        sys.exit(EXIT_BAD_INPUT)


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(prog="foldsweep", description="Cross-validation sweeps of fuzzy rule-based "
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

    configs = sub.add_parser("configs", help="one line per configuration: id, name, model, parameters, folds "
                             "done/failed/pending")
    configs.add_argument("spec")
    configs.add_argument("--json", action="store_true")
    configs.set_defaults(func=cmd_configs)

    failures = sub.add_parser("failures", help="one line per failed job, grouped by error message")
    failures.add_argument("spec")
    failures.add_argument("--json", action="store_true")
    failures.add_argument("--traceback", default=None, metavar="KEY",
                          help="print the stored traceback of one job (its key or a unique prefix)")
    failures.set_defaults(func=cmd_failures)

    results = sub.add_parser("results", help="one row per finished job")
    results.add_argument("spec")
    results.add_argument("--format", choices=("csv", "parquet", "json"), default="csv")
    results.add_argument("--out", type=out_file, default=None, help="file to write (default: standard output)")
    results.set_defaults(func=cmd_results)

    model = sub.add_parser("model", help="the model one fold job trained (a fuzzy rule base as text)",
                           description="Print the model one fold job trained, e.g. the rule base of a "
                           "configuration that won: name the job by its key (or a unique prefix of "
                           "it, as in the results' key column), or by dataset, configuration, repeat "
                           "and fold.")
    model.add_argument("spec")
    model.add_argument("key", nargs="?", default=None, help="the job's key, or a unique prefix of it")
    model.add_argument("--dataset", default=None)
    model.add_argument("--config", default=None, help="configuration name, id or a unique id prefix")
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


def out_file(text: str) -> str:
    """An ``--out`` file: not a folder, in a folder that exists (checked before any work is done)."""
    path = Path(text)
    if path.is_dir():
        raise argparse.ArgumentTypeError(f"{text!r} is a folder; give a file name")
    if not path.parent.is_dir():
        raise argparse.ArgumentTypeError(f"{text!r}: the folder {str(path.parent)!r} does not exist; create it first")
    return text


def number_between(low: float, high: float, *, integer: bool = False, open_ends: bool = False) -> Any:
    """An argparse type: a finite number (an integer if ``integer``) within [low, high] (or (low, high))."""
    words = f"an integer from {low} to {high}" if integer else (
        f"a number above {low} and below {high}" if open_ends else f"a number from {low} to {high}")

    def check(text: str) -> float | int:
        try:
            value = int(text) if integer else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be {words}, got {text!r}") from None
        inside = low < value < high if open_ends else low <= value <= high
        if not math.isfinite(value) or not inside:
            raise argparse.ArgumentTypeError(f"must be {words}, got {text!r}")
        return value
    return check


def _check_run_arguments(args: argparse.Namespace) -> None:
    """Refuse, before anything starts, arguments no run can use."""
    if args.scheduler is not None:
        _check_scheduler(args.scheduler)
    cores = os.cpu_count() or 1
    if args.scheduler is None and args.workers is not None and args.workers > WORKERS_PER_CORE * cores:
        raise UsageError(f"--workers {args.workers}: at most {WORKERS_PER_CORE * cores} worker processes on this "
                             f"machine ({WORKERS_PER_CORE} per core, {cores} cores); for more jobs at once, run them "
                             "on a dask cluster (--scheduler ADDRESS) or start drivers on other hosts")


def _check_scheduler(address: str) -> None:
    """A dask scheduler address that is well formed and answers (before any job is planned)."""
    import socket

    found = SCHEDULER_ADDRESS.fullmatch(address)
    if not found or not 0 < int(found["port"]) < 65536:
        raise UsageError(f"--scheduler {address!r} is not a dask scheduler address; give tcp://HOST:PORT "
                         "(or tls://, ws://, wss://), the address the scheduler printed when it started")
    try:
        socket.create_connection((found["host"].strip("[]"), int(found["port"])), timeout=10).close()
    except OSError as exc:
        raise UsageError(f"--scheduler {address!r}: cannot reach the dask scheduler ({exc.strerror or exc}); "
                         "start it first, or check the address") from None


def cmd_run(args: argparse.Namespace) -> int:
    _check_run_arguments(args)
    from sweep.run import RunOptions, run_sweep

    options = RunOptions(workers=args.workers, backend=args.backend, scheduler=args.scheduler,
                         retry_failed=args.retry_failed, claim=args.claim,
                         accept_changed_data=args.accept_changed_data, progress=args.progress)
    summary = run_sweep(args.spec, options)
    if args.json:
        print(json.dumps(summary.__dict__))
    else:
        print(_describe_run(summary))
    if summary.interrupted:
        return 128 + (summary.signal or 2)
    return EXIT_JOBS_FAILED if summary.failed else 0


def _describe_run(s: Any) -> str:
    inner = f"{s.planned_inner} of them inner jobs of nested selection, " if s.planned_inner else ""
    head = f"sweep {s.sweep!r}: {s.planned} jobs planned ({inner}{s.new} new), planning took {s.planning_seconds:.2f} s"
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
    states: dict[str, Any] = {}
    if store is not None:
        try:  # every job the spec plans, whichever sweep planned or ran it first
            states = store.job_states([job.key for job in inputs.plan.all_jobs])
            gone = store.held_by_gone([j.key for j in inputs.plan.all_jobs])
        finally:
            store.close()
        for job in inputs.plan.all_jobs:
            state, error, timed_out = states.get(job.key, ("pending", None, False))
            if not job.scheme:  # an inner job (nested selection) is counted apart, below
                counts["gone" if job.key in gone else state] += 1
            if state == "failed":
                message = "timed out" if timed_out else last_line(error)
                failures[message] = failures.get(message, 0) + 1
    else:
        counts["pending"] = counts["total"]
    nested = _nested_status(inputs.plan, states)
    if args.json:
        print(json.dumps({**counts, **nested, "failures": failures}))
        return 0
    print(f"sweep {inputs.spec.name!r}: {counts['done']}/{counts['total']} done, {counts['failed']} failed, "
          f"{counts['running']} running, {counts['pending']} pending"
          + (f", {counts['gone']} held by a driver that is gone (pending again at the next run)"
             if counts["gone"] else ""))
    if nested:
        inner, (selected, total) = nested["inner"], nested["selections"].values()
        print(f"  inner jobs (nested selection): {inner['done']}/{inner['total']} done, {inner['failed']} failed, "
              f"{inner['running']} running, {inner['pending']} pending; {selected}/{total} outer folds "
              "(dataset x model block x repeat x fold) have a selection")
    for message, n in sorted(failures.items(), key=lambda kv: -kv[1]):
        print(f"  {n} failed: {message}")
    return 0


def _nested_status(plan: Any, states: dict[str, Any]) -> dict[str, Any]:
    """``inner`` (inner jobs per state) and ``selections`` (outer folds with a selection / to select for),
    or nothing for a sweep without nested selection."""
    if not plan.inner_k:
        return {}
    from sweep.nested import inner_counts, selection_progress

    state = {key: rest[0] for key, rest in states.items()}
    selected, total = selection_progress(plan, {key for key, s in state.items() if s == "done"})
    return {"inner": inner_counts(plan, state), "selections": {"done": selected, "total": total}}


def cmd_configs(args: argparse.Namespace) -> int:
    from sweep.results import open_tracker

    view, store = open_tracker(args.spec, store_needed=False)  # before a first run: everything pending
    try:
        counts = store.cell_counts(view.spec.name, scheme=view.plan.scheme) if store is not None else []
    finally:
        if store is not None:
            store.close()
    done: dict[str, int] = {}
    failed: dict[str, int] = {}
    for _, cid, state, n in counts:
        if state in ("done", "failed"):
            (done if state == "done" else failed)[cid] = (done if state == "done" else failed).get(cid, 0) + n
    per_config = len(view.plan.datasets) * view.plan.jobs_per_cell
    given = {b.label: {*b.fixed, *b.grid} for b in view.spec.models}
    rows = []
    for c in view.plan.configurations:
        n = view.names[c.config_id]
        d, f = done.get(c.config_id, 0), failed.get(c.config_id, 0)
        rows.append({"id": c.config_id, "name": n.name, "model": n.model, "params": dict(n.params),
                     "done": d, "failed": f, "pending": per_config - d - f, "_given": given.get(n.model, set())})
    if args.json:
        print(json.dumps([{k: v for k, v in r.items() if k != "_given"} for r in rows], ensure_ascii=False))
        return 0
    width = max(len(r["name"]) for r in rows)
    for r in rows:
        params = ", ".join(f"{k}={v}" for k, v in r["params"].items() if k in r["_given"]) or "defaults"
        print(f"{r['id']}  {r['name']:<{width}}  {r['model']}: {params}  "
              f"(folds: {r['done']} done, {r['failed']} failed, {r['pending']} pending of {per_config})")
    return 0


def cmd_failures(args: argparse.Namespace) -> int:
    from sweep.results import open_tracker

    view, store = open_tracker(args.spec)
    try:
        failed = store.failed_jobs(view.spec.name)
    finally:
        store.close()
    if args.traceback is not None:
        found = [f for f in failed if f["key"].startswith(args.traceback.lower())]
        if len(found) != 1:
            what = "no failed job has" if not found else f"{len(found)} failed jobs have"
            raise SelectionError(f"{args.spec}: {what} a key starting with {args.traceback!r} "
                                 "(keys: foldsweep failures SPEC --json)")
        job = found[0]
        print(printable(job["error"] or ("timed out" if job["timed_out"] else "no traceback stored")).rstrip())
        return 0
    rows = [{"key": f["key"], "dataset": f["dataset"], "config": view.names[f["config_id"]].name
             if f["config_id"] in view.names else f["config_id"], "config_id": f["config_id"],
             "repeat": f["repeat"], "fold": f["fold"], "attempts": f["attempts"],
             "error": "timed out" if f["timed_out"] else last_line(f["error"])} for f in failed]
    if view.plan.inner_k:  # an inner job of nested selection: its outer fold, and which inner fold
        from sweep.nested import split_number

        inner = {j.key for j in view.plan.inner_jobs}
        for r in rows:
            if r["key"] in inner:
                r["fold"], r["inner_fold"] = split_number(r["fold"], view.plan.inner_k)
    if args.json:
        print(json.dumps(rows, ensure_ascii=False))
        return 0
    if not rows:
        print(f"sweep {view.spec.name!r}: no failed jobs")
        return 0
    groups: dict[str, list[dict[str, Any]]] = {}
    for r in rows:
        groups.setdefault(r["error"], []).append(r)
    print(f"sweep {view.spec.name!r}: {len(rows)} failed jobs, {len(groups)} distinct errors")
    for message, members in sorted(groups.items(), key=lambda kv: -len(kv[1])):
        print(f"{len(members)} x {message}")
        for r in members:
            inner_fold = f" inner fold {r['inner_fold']}" if "inner_fold" in r else ""
            print(f"    {r['dataset']}  {r['config']}  repeat {r['repeat']} fold {r['fold']}{inner_fold}  "
                  f"attempts {r['attempts']}  key {r['key']}")
    return 0


#: the project's one stripping of terminal control from stored text (a library's colour codes, or anything a
#: worker printed), under the name the report modules use


def cmd_results(args: argparse.Namespace) -> int:
    from sweep.results import open_tracker, results_frame
    from sweep.writing import write_frame

    inputs, store = open_tracker(args.spec)
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
    from sweep.naming import name_configurations

    name = name_configurations(inputs.spec, inputs.plan)[job.config_id].name
    where = (f"job {job.key[:12]} (dataset {job.dataset!r}, configuration {name!r} [{job.config_id}], "
             f"repeat {job.repeat}, fold {job.fold})")
    if stored is None:
        raise SelectionError(f"{args.spec}: {where} has no result yet (see `foldsweep status`)")
    if stored["model_text"] is None:
        raise SelectionError(f"{args.spec}: {where}: worker {config.worker!r} stores no model text")
    if args.json:
        print(json.dumps({"key": job.key, "dataset": job.dataset, "config_id": job.config_id, "name": name,
                          "label": config.label, "repeat": job.repeat, "fold": job.fold, **stored}))
        return 0
    print(f"{where}: test accuracy {stored['accuracy']:.4f}, training accuracy {stored['train_accuracy']:.4f}")
    print(stored["model_text"])
    return 0


def _select_job(args: argparse.Namespace, inputs: Any) -> Any:
    """The planned job named by ``args``: a key prefix, or dataset + configuration + repeat + fold."""
    jobs = inputs.plan.jobs
    if args.key is not None:  # an inner job of nested selection too
        found = [j for j in inputs.plan.all_jobs if j.key.startswith(args.key.lower())]
        what = f"key {args.key!r}"
    elif args.dataset is None or args.config is None:
        raise SelectionError(f"{args.spec}: name a job by its key, or by --dataset and --config "
                             "(with --repeat and --fold, default 0)")
    else:
        from sweep.naming import name_configurations

        named = [cid for cid, n in name_configurations(inputs.spec, inputs.plan).items() if n.name == args.config]
        config = named[0] if named else args.config  # a configuration's name, its id or an id prefix
        found = [j for j in jobs if j.dataset == args.dataset and j.config_id.startswith(config)
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
        print(f"foldsweep: error: {' '.join(printable(mask_passwords(str(exc))).split())}", file=sys.stderr)
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
