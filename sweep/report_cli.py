"""The report subcommands of ``foldsweep``: best, table, compare, rank, plot, report.

::

    foldsweep best SPEC [--metric M] [--where FILTER] [--json] [--out FILE]
    foldsweep table SPEC [--metric M] [--format markdown|latex|csv] [--sd] [--pivot PARAM] [--legend]
                         [--caption TEXT] [--label KEY] [--where FILTER] [--out FILE] [--json]
    foldsweep compare SPEC CONFIG_A CONFIG_B [--metric M] [--partial] [--alpha A] [--rope R]
                         [--zero-method demsar|wilcox|pratt] [--json] [--out FILE]
    foldsweep rank SPEC [--metric M] [--partial] [--control CONFIG] [--posthoc ...] [--alpha A] [--tie-correction] [--json] [--out FILE]
    foldsweep plot SPEC --kind ranks|heatmap --out FILE.png|.pdf|.svg [--relative difference|rank|none] [--metric M] [--json]
    foldsweep report SPEC --out study.html [--metric M] [--alpha A] [--rope R] [--partial]
    foldsweep best SPEC --nested [--json] [--out FILE]   (nested selection: sweep.nested)

``table``, ``compare``, ``rank`` and ``report`` take ``--tuned`` (one more configuration per model block, ``NAME
(tuned)``: per outer fold the configuration its inner folds selected; sweep.nested) or ``--only-tuned``.

A CONFIG is a configuration's name (as ``foldsweep configs`` lists it), its id
(or a unique prefix of one) or a parameter filter such as
``reasoning=choquet,measure=power``. Every handler returns an
exit code and raises :class:`~sweep.errors.FoldsweepError` subclasses for
bad input; ``sweep.cli.main`` prints those on one line (exit code 2).
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from sweep.cli import _positive, number_between, out_file

__all__ = ["add_commands", "cmd_best", "cmd_table", "cmd_compare", "cmd_rank", "cmd_plot", "cmd_report"]

#: a significance level: strictly between 0 and 1
ALPHA = number_between(0, 1, open_ends=True)


def add_commands(subparsers: Any) -> None:
    """Add the report subcommands to an ``argparse`` subparsers object."""
    best = _command(subparsers, "best", "per dataset: the winning configuration, mean ± sd, margin to the runner-up")
    best.add_argument("--nested", action="store_true",
                      help="per dataset and model block: the nested estimate (inner-fold selection, the spec's "
                           "[selection]) beside the naive best, and each outer fold's choice")
    best.set_defaults(func=cmd_best)

    table = _command(subparsers, "table", "datasets x configurations table of cell means")
    table.add_argument("--format", choices=("markdown", "latex", "csv"), default="markdown")
    table.add_argument("--sd", action="store_true", help="show mean ± standard deviation")
    table.add_argument("--pivot", default=None, metavar="PARAM",
                       help="columns are this parameter's values (fix the others with --where)")
    table.add_argument("--decimals", type=number_between(0, 15, integer=True), default=3)
    table.add_argument("--legend", action="store_true",
                       help="columns headed C1, C2, ... with a legend of names and parameters (wide tables)")
    table.add_argument("--caption", default=None, help="LaTeX caption (default: the metric and what bold means)")
    table.add_argument("--label", default=None, help="LaTeX \\label key (default tab:METRIC)")
    _tuned_option(table)
    table.set_defaults(func=cmd_table)

    compare = _command(subparsers, "compare", "two configurations paired over datasets: wins/ties/losses, sign test, Wilcoxon",
                       where=False)
    compare.add_argument("config_a", metavar="CONFIG_A")
    compare.add_argument("config_b", metavar="CONFIG_B")
    compare.add_argument("--zero-method", choices=("demsar", "wilcox", "pratt"), default="demsar",
                         help="zero differences: split between R+ and R- (Demšar), dropped (wilcox) or ranked then dropped (pratt)")
    compare.add_argument("--method", choices=("auto", "exact", "approx"), default="auto", help="Wilcoxon p-value")
    compare.add_argument("--alpha", type=ALPHA, default=0.05, help="level the warnings about N refer to")
    compare.add_argument("--partial", action="store_true",
                         help="use the folds both have on datasets with incomplete cells (default: complete cells only)")
    _bayes_options(compare)
    _tuned_option(compare)
    compare.set_defaults(func=cmd_compare)

    rank = _command(subparsers, "rank", "average ranks, Friedman, Iman-Davenport, Nemenyi CD and post-hoc tests")
    _rank_options(rank)
    rank.add_argument("--limit", type=_positive, default=20, help="rows shown of rankings and post-hoc tables")
    _tuned_option(rank)
    rank.set_defaults(func=cmd_rank)

    plot = _command(subparsers, "plot", "critical-difference rank plot or dataset x configuration heatmap", out=False)
    plot.add_argument("--kind", choices=("ranks", "heatmap"), default="ranks")
    plot.add_argument("--out", type=out_file, required=True, metavar="FILE", help="image to write: .png, .pdf or .svg")
    plot.add_argument("--pivot", default=None, metavar="PARAM", help="heatmap columns are this parameter's values")
    plot.add_argument("--limit", type=_positive, default=20, help="configurations drawn in the rank plot (best first)")
    plot.add_argument("--relative", choices=("difference", "rank", "none"), default="difference",
                      help="heatmap colour: distance to each dataset's best (default), rank within it, or raw")
    _rank_options(plot)
    plot.set_defaults(func=cmd_plot)

    study = _command(subparsers, "report", "one self-contained HTML study report: completeness, failures, table, "
                     "winners, tests, plots, legend, reproducibility", out=False)
    study.add_argument("--out", type=out_file, required=True, metavar="FILE", help="HTML file to write")
    study.add_argument("--alpha", type=ALPHA, default=0.05)
    study.add_argument("--partial", action="store_true",
                       help="paired tests over the folds the configurations share (default: complete cells only)")
    study.add_argument("--limit", type=_positive, default=10,
                       help="best-ranked configurations in the rank plot and the pairwise tests (default 10)")
    _bayes_options(study)
    _tuned_option(study)
    study.set_defaults(func=cmd_report)


def _bayes_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--rope", type=number_between(0, float("inf")), default=0.01,
                        help="region of practical equivalence of the Bayesian tests, in the metric's units (default 0.01)")


def _command(subparsers: Any, name: str, text: str, *, where: bool = True, out: bool = True) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(name, help=text, description=text)
    parser.add_argument("spec", metavar="SPEC", help="the sweep's TOML spec")
    parser.add_argument("--metric", default="accuracy",
                        help="result column (default accuracy); direction: higher for accuracy-like, lower for times and rule counts")
    direction = parser.add_mutually_exclusive_group()
    direction.add_argument("--higher-is-better", dest="higher", action="store_const", const=True, default=None,
                           help="override the metric's direction")
    direction.add_argument("--lower-is-better", dest="higher", action="store_const", const=False)
    if where:
        parser.add_argument("--where", default=None, metavar="FILTER",
                            help="only configurations matching an id or a filter such as reasoning=choquet,measure=power")
    if out:
        parser.add_argument("--out", type=out_file, default=None, metavar="FILE",
                            help="write to FILE (atomically) instead of standard output")
    parser.add_argument("--json", action="store_true", help="machine-readable output")
    return parser


def _tuned_option(parser: argparse.ArgumentParser) -> None:
    tuned = parser.add_mutually_exclusive_group()
    tuned.add_argument("--tuned", action="store_true",
                       help="add one row per model block, 'NAME (tuned)': per outer fold the configuration its "
                            "inner folds selected (needs [selection] in the spec)")
    tuned.add_argument("--only-tuned", action="store_true", help="the tuned rows alone, one per model block")


def _rank_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--control", default=None, metavar="CONFIG", help="compare every configuration with this one")
    parser.add_argument("--posthoc", choices=("auto", "holm", "finner", "li", "bonferroni", "shaffer", "none"),
                        default="auto", help="adjustment: holm against a control, shaffer over all pairs (auto)")
    parser.add_argument("--alpha", type=ALPHA, default=0.05)
    parser.add_argument("--partial", action="store_true",
                        help="rank over the folds every configuration has (default: datasets with every cell complete)")
    parser.add_argument("--tie-correction", action="store_true",
                        help="divide chi2_F by the tie correction, as scipy.stats.friedmanchisquare (default: Demšar's formula)")


def _load(args: argparse.Namespace):
    from sweep.results import load_sweep_results

    metric = getattr(args, "metric", None)
    res = load_sweep_results(args.spec, metrics=[metric] if metric else None)
    if getattr(args, "tuned", False) or getattr(args, "only_tuned", False):
        from sweep.nested import add_tuned

        res = add_tuned(res, only=args.only_tuned)
    return res


def _emit(args: argparse.Namespace, text: str) -> None:
    from sweep.report import write_text_atomic

    if getattr(args, "out", None):
        write_text_atomic(args.out, text)
    else:
        sys.stdout.write(text)
        sys.stdout.flush()


def _dumps(data: Any) -> str:
    return json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False, default=str) + "\n"


def cmd_best(args: argparse.Namespace) -> int:
    from sweep import report

    if args.nested:
        return _best_nested(args)
    res = _load(args)
    frame = report.best(res, args.metric, where=args.where, higher=args.higher)
    if args.json:
        _emit(args, _dumps(report.records(frame)))
    else:
        _emit(args, _best_text(frame))
    return 0


def _best_text(frame) -> str:
    lines = []
    for r in frame.itertuples():
        if r.config_id is None or r.folds == 0:
            lines.append(f"{r.dataset}: no finished jobs yet")
            continue
        sd = "?" if r.sd != r.sd else f"{r.sd:.4f}"
        planned = "?" if r.planned != r.planned else f"{int(r.planned)}"
        state = "" if r.complete else "  [incomplete]"
        if r.margin != r.margin:
            margin = "no runner-up"
        else:
            test = ("" if r.test_p != r.test_p else
                    f"; corrected resampled t over {r.test_folds} shared folds: p = {r.test_p:.3g}")
            margin = f"margin {r.margin:.4f} over {r.runner_up_name}{test}"
        lines.append(f"{r.dataset}: {r.name} {r.metric} {r.mean:.4f} ± {sd}, {r.folds}/{planned} folds, "
                     f"{margin}{state}")
    if any(not c for c, n in zip(frame["complete"], frame["folds"]) if n):
        lines.append("[incomplete]: the winner has fewer finished folds than planned (the sweep is running or jobs failed)")
    return "\n".join(lines) + "\n"


def _best_nested(args: argparse.Namespace) -> int:
    from sweep.errors import SelectionError
    from sweep.nested import load_nested

    view, summary = load_nested(args.spec)
    metric = view.spec.selection.metric
    if args.metric not in (metric, "accuracy") or args.where:
        raise SelectionError(f"{args.spec}: best --nested scores in the spec's selection.metric ({metric!r}) over "
                             "every configuration of each block; leave out --metric and --where")
    _emit(args, _dumps(summary) if args.json else _nested_text(summary))
    return 0


def _nested_text(summary: list[dict[str, Any]]) -> str:
    def number(value: float | None) -> str:
        return "?" if value is None else f"{value:.4f}"

    lines = []
    for s in summary:
        optimism = "" if s["optimism"] is None else f", optimism {s['optimism']:+.4f}"
        lines.append(f"{s['dataset']} · {s['model']}: nested {s['metric']} {number(s['nested_accuracy'])} "
                     f"({s['folds_selected']}/{s['folds']} outer folds selected), naive best "
                     f"{number(s['naive_accuracy'])} [{s['naive_config'] or '?'}]{optimism}")
        for c in s["choices"]:
            lines.append(f"  repeat {c['repeat']} fold {c['fold']}: {c['config']}: "
                         f"inner {c['inner_score']:.4f}, outer {number(c['outer_score'])}")
    return "\n".join(lines) + "\n"


def cmd_table(args: argparse.Namespace) -> int:
    from sweep import report

    res = _load(args)
    fmt = "json" if args.json else args.format
    _emit(args, report.table(res, args.metric, fmt=fmt, sd=args.sd, pivot=args.pivot, where=args.where,
                             decimals=args.decimals, higher=args.higher, caption=args.caption, label=args.label,
                             legend=args.legend))
    return 0


def cmd_compare(args: argparse.Namespace) -> int:
    from sweep import report

    res = _load(args)
    comp = report.compare(res, args.config_a, args.config_b, args.metric, zero_method=args.zero_method,
                          method=args.method, higher=args.higher, partial=args.partial, alpha=args.alpha,
                          rope=args.rope)
    _emit(args, _dumps(comp.to_dict()) if args.json else comp.to_text())
    return 0


def _rank_report(args: argparse.Namespace, res):
    from sweep import report

    return report.rank(res, args.metric, where=args.where, control=args.control, posthoc=args.posthoc,
                       alpha=args.alpha, tie_correction=args.tie_correction, higher=args.higher,
                       partial=args.partial)


def cmd_rank(args: argparse.Namespace) -> int:
    rr = _rank_report(args, _load(args))
    _emit(args, _dumps(rr.to_dict()) if args.json else rr.to_text(limit=args.limit))
    return 0


def cmd_plot(args: argparse.Namespace) -> int:
    from sweep import report

    res = _load(args)
    if args.kind == "ranks":
        report.plot_ranks(_rank_report(args, res), args.out, limit=args.limit)
    else:
        report.plot_heatmap(res, args.out, args.metric, where=args.where, pivot=args.pivot, higher=args.higher,
                            relative=args.relative)
    if args.json:
        sys.stdout.write(_dumps({"kind": args.kind, "out": str(args.out), "metric": args.metric}))
    else:
        sys.stdout.write(f"wrote {args.out}\n")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from sweep.results import load_sweep_results
    from sweep.study_report import build_report

    res = load_sweep_results(args.spec, metrics=[args.metric], details=True)
    if args.tuned or args.only_tuned:
        from sweep.nested import add_tuned

        res = add_tuned(res, only=args.only_tuned)
    html = build_report(res, args.metric, higher=args.higher, alpha=args.alpha, rope=args.rope,
                        partial=args.partial, where=args.where, limit=args.limit)
    from sweep.report import write_text_atomic

    write_text_atomic(args.out, html)
    if args.json:
        sys.stdout.write(_dumps({"out": str(args.out), "metric": args.metric, "bytes": len(html.encode())}))
    else:
        sys.stdout.write(f"wrote {args.out}\n")
    return 0
