"""One self-contained HTML study report: ``foldsweep report SPEC --out study.html``.

Sections, in order: completeness and failures; winners per dataset with
margins and the per-dataset test of winner against runner-up; the per-dataset
table; pairwise comparisons of the best-ranked configuration with the next ones
(Wilcoxon with Holm's adjustment, the Bayesian signed-rank test, sign test);
multiple comparisons (Friedman, Iman-Davenport, Nemenyi CD, Holm against the
best-ranked); the rank plot and the heatmap (PNG, embedded as base64 data
URIs); the configuration legend; what is needed to reproduce the study (the
spec's text and digest, dataset fingerprints, fold scheme, package and
worker versions). No script, no stylesheet or image from the network: the
file opens anywhere.

Works on a sweep that is still running: it reports what has finished, says
how much is pending, and a section that cannot be computed yet says why.
Built from a :class:`sweep.report.SweepResults` loaded with ``details=True``.
"""

from __future__ import annotations

import base64
import functools
import html
import math
import platform
import time
from importlib import metadata
from typing import Any, Callable

import numpy as np

from sweep import report, stats
from sweep.errors import SelectionError

#: Most configurations shown as columns of the per-dataset table and of the heatmap (the best-ranked).
MAX_COLUMNS = 40
#: Packages whose versions the reproducibility section lists.
PACKAGES = ("foldsweep", "numpy", "scipy", "pandas", "scikit-learn", "matplotlib", "sqlalchemy", "pyarrow")

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:2em auto;max-width:78em;color:#222;padding:0 1em}
h1{font-size:1.6em} h2{font-size:1.25em;border-bottom:1px solid #ccc;margin-top:2em}
table{border-collapse:collapse;margin:.6em 0;font-size:.86em} th,td{padding:.2em .6em;border-bottom:1px solid #e3e3e3}
th{background:#f3f3f3;text-align:left} td.n{text-align:right;font-variant-numeric:tabular-nums}
td.best{font-weight:bold;background:#eaf5e4} .warn{color:#8a4b00} .muted{color:#666}
pre{background:#f7f7f7;padding:.8em;overflow:auto;font-size:.8em} img{max-width:100%}
"""


def build_report(res: report.SweepResults, metric: str = "accuracy", *, higher: bool | None = None,
                 alpha: float = 0.05, rope: float = report.ROPE, partial: bool = False, where: str | None = None,
                 limit: int = 10) -> str:
    """The study report of ``res`` as one HTML document (a string)."""
    up = report.higher_is_better(metric) if higher is None else higher
    ids = report.select(res, where) if where else None
    title = f"foldsweep study report: {res.info['view'].spec.name}" if "view" in res.info else "foldsweep study report"
    rank = _attempt(lambda: report.rank(res, metric, where=where, alpha=alpha, higher=up, partial=partial,
                                        posthoc="none"))
    order = (list(rank.ranking()["config_id"]) if isinstance(rank, report.RankReport)
             else sorted(ids or report.configurations(res).index))
    shown = order[:MAX_COLUMNS]
    parts = [
        f"<h1>{_e(title)}</h1>",
        f"<p class='muted'>{_e(metric)} ({'higher' if up else 'lower'} is better); built "
        f"{_e(time.strftime('%Y-%m-%d %H:%M:%S %Z'))}; paired tests over "
        f"{'the folds the configurations share (--partial)' if partial else 'datasets whose compared cells are complete'}"
        f"; alpha = {alpha:g}; region of practical equivalence ±{rope:g}.</p>",
        _section("Completeness and failures", _completeness(res, metric)),
        _section("Winners per dataset", _winners(res, metric, up, where)),
        _section("Per-dataset table", _table(res, metric, up, shown, len(order))),
        _section("Pairwise comparisons", _pairwise(res, metric, up, order[:limit], alpha, rope, partial)),
        _section("Multiple comparisons", _multiple(res, rank, order, metric, up, where, alpha, partial)),
        _section("Rank plot", _rank_plot(rank, limit)),
        _section("Heatmap", _heatmap(res, metric, up, shown)),
        _section("Configurations", _legend(res, order)),
        _section("Reproducibility", _reproducibility(res)),
    ]
    return ("<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
            f"<title>{_e(title)}</title><style>{_STYLE}</style></head><body>\n" + "\n".join(parts) + "\n</body></html>\n")


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _section(title: str, body: str) -> str:
    anchor = title.lower().replace(" ", "-")
    return f"<section id='{_e(anchor)}'><h2>{_e(title)}</h2>\n{body}\n</section>"


def _attempt(build: Callable[[], Any]) -> Any:
    """The built value, or the reason it cannot be built yet (a string)."""
    try:
        return build()
    except (SelectionError, ValueError) as exc:
        return str(exc)


def _note(text: str, cls: str = "muted") -> str:
    return f"<p class='{cls}'>{_e(text)}</p>"


def _html_table(head: list[str], rows: list[list[Any]], classes: list[list[str]] | None = None) -> str:
    out = ["<table><thead><tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr></thead><tbody>"]
    for i, row in enumerate(rows):
        cells = []
        for j, value in enumerate(row):
            cls = classes[i][j] if classes else ("n" if isinstance(value, (int, float, np.number)) else "")
            cells.append(f"<td class='{cls}'>{_e(_fmt(value))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    return "\n".join(out) + "</tbody></table>"


def _fmt(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if isinstance(value, (float, np.floating)):
        number = float(value)
        return f"{number:.4g}" if abs(number) < 1e-3 and number != 0 else f"{number:.4f}"
    return str(value)


# ------------------------------------------------------------------ sections


def _completeness(res: report.SweepResults, metric: str) -> str:
    counts = res.info.get("cell_counts", [])
    states = {"done": len(res.frame), "failed": 0, "running": 0, "pending": 0}
    for _, _, state, n in counts:
        if state != "done":  # done jobs are the results' rows
            states[state] = states.get(state, 0) + n
    planned = int(res.planned["jobs"].sum()) if len(res.planned) else sum(states.values())
    recorded = sum(states.values())
    states["pending"] += max(planned - recorded, 0)  # planned but not synced yet: the spec grew since the last run
    running = states["running"] + states["pending"]
    parts = [f"<p>{planned} jobs planned: <b>{states['done']} done</b>, {states['failed']} failed, "
             f"{states['running']} running, {states['pending']} pending.</p>"]
    if running:
        parts.append(_note("The sweep is not finished: the figures below are over what has finished so far; "
                           "incomplete cells are marked * and left out of the paired tests "
                           "(unless --partial).", "warn"))
    cells = report.cell_stats(res, metric)
    per_ds = cells.groupby(level="dataset").agg(done=("n", "sum"), planned=("planned", "sum"),
                                                complete=("complete", "sum"), cells=("complete", "size"))
    parts.append(_html_table(["dataset", "jobs done", "jobs planned", "complete cells", "cells"],
                             [[d, int(r.done), int(r.planned), int(r.complete), int(r.cells)]
                              for d, r in per_ds.iterrows()]))
    failed = res.info.get("failed", [])
    if failed:
        from sweep.text import last_line

        groups: dict[str, list[dict[str, Any]]] = {}
        for f in failed:
            message = "timed out" if f["timed_out"] else last_line(f["error"])
            groups.setdefault(message, []).append(f)
        parts.append(f"<p>{len(failed)} failed jobs, {len(groups)} distinct errors "
                     "(<code>foldsweep failures SPEC --traceback KEY</code> shows one traceback):</p>")
        rows = []
        for message, members in sorted(groups.items(), key=lambda kv: -len(kv[1])):
            where = ", ".join(sorted({f"{m['dataset']} / {res.name_of(m['config_id'])}" for m in members})[:5])
            rows.append([len(members), message, where])
        parts.append(_html_table(["jobs", "error", "where (first 5 cells)"], rows))
    else:
        parts.append(_note("No failed jobs."))
    return "\n".join(parts)


def _winners(res: report.SweepResults, metric: str, up: bool, where: str | None) -> str:
    frame = report.best(res, metric, where=where, higher=up)
    rows, classes = [], []
    for r in frame.itertuples():
        if r.config_id is None:
            rows.append([r.dataset, "no finished jobs yet", None, None, "0", None, None, None])
        else:
            folds = f"{r.folds}/{int(r.planned) if r.planned == r.planned else '?'}" + ("" if r.complete else " *")
            rows.append([r.dataset, r.name, r.mean, r.sd, folds, r.runner_up_name, r.margin, r.test_p])
        classes.append(["", "", "n", "n", "n", "", "n", "n"])
    return (_html_table(["dataset", "winner", "mean", "sd", "folds", "runner-up", "margin",
                         "p (corrected resampled t, winner vs runner-up)"], rows, classes)
            + _note("Ties: higher mean, then smaller sd, then more folds, then the smaller id. * incomplete cell. "
                    "The per-dataset test is Nadeau & Bengio's corrected resampled t-test over the folds both "
                    "configurations have (variance inflated by 1/J + n_test/n_train)."))


def _table(res: report.SweepResults, metric: str, up: bool, shown: list[str], total: int) -> str:
    means, cells = report.score_matrix(res, metric, configs=shown)
    means = means.reindex(columns=[c for c in shown if c in means.columns])
    complete = cells.pivot(index="dataset", columns="column", values="complete").reindex_like(means)
    best = report._best_mask(means, up)  # noqa: SLF001 - this package's own helper
    full = means.dropna()
    rows, classes = [], []
    for i, d in enumerate(means.index):
        row, cls = [d], [""]
        for j, c in enumerate(means.columns):
            v = means.iat[i, j]
            mark = "" if bool(complete.iat[i, j]) or not np.isfinite(v) else " *"
            row.append("—" if not np.isfinite(v) else f"{v:.4f}{mark}")
            cls.append("n best" if best[i, j] else "n")
        rows.append(row)
        classes.append(cls)
    if len(full):
        avg_rank = stats.rank_rows(full.to_numpy(), higher_is_better=up).mean(axis=0)
        rows.append(["average"] + [f"{v:.4f}" for v in full.mean(axis=0)])
        rows.append(["average rank"] + [f"{v:.2f}" for v in avg_rank])
        classes += [["n"] * (len(shown) + 1)] * 2
    head = ["dataset"] + [str(res.name_of(c)) for c in means.columns]
    note = f"Mean {metric} over the finished folds; best per row in bold; * incomplete cell; — no result yet."
    if len(full) < len(means):
        note += " Average and average rank over the datasets without missing cells."
    if total > len(shown):
        note += f" The {len(shown)} best-ranked of {total} configurations are shown (foldsweep table has them all)."
    return _html_table(head, rows, classes) + _note(note)


def _pairwise(res, metric, up, order, alpha, rope, partial) -> str:
    if len(order) < 2:
        return _note("Needs at least two configurations with results.")
    control = order[0]
    rows, ps = [], []
    for other in order[1:]:
        comp = _attempt(functools.partial(report.compare, res, control, other, metric, higher=up, partial=partial,
                                          alpha=alpha, rope=rope))
        if isinstance(comp, str):
            rows.append([res.name_of(other), 0, None, None, None, None, None, None, comp])
            ps.append(np.nan)
            continue
        w, b = comp.wilcoxon, comp.bayes
        ps.append(w.p_value if w else 1.0)
        rows.append([res.name_of(other), len(comp.datasets), f"{comp.sign.wins}/{comp.sign.ties}/{comp.sign.losses}",
                     w.p_value if w else 1.0, None, b.p_a_better if b else None, b.p_equivalent if b else None,
                     b.p_b_better if b else None, "; ".join(comp.warnings[:1])])
    p = np.asarray(ps, dtype=float)
    finite = np.isfinite(p)
    if finite.any():
        adjusted = np.full(p.shape, np.nan)
        adjusted[finite] = stats.holm(p[finite])
        for row, adj in zip(rows, adjusted):
            row[4] = adj
    head = ["B", "N", "A wins/ties/losses", "Wilcoxon p", "Holm-adjusted p", "P(A better)", "P(equivalent)",
            "P(B better)", "warning"]
    intro = (f"<p>A = the best-ranked configuration, <b>{_e(res.name_of(control))}</b>, against the next "
             f"{len(order) - 1} by average rank, over datasets. Wilcoxon signed-rank (Demšar 2006) and the "
             f"Bayesian signed-rank test with rope ±{rope:g} (Benavoli et al. 2017).</p>")
    return intro + _html_table(head, rows)


def _multiple(res, rank, order, metric, up, where, alpha, partial) -> str:
    if isinstance(rank, str):
        return _note(f"Not computed yet: {rank}", "warn")
    full = _attempt(lambda: report.rank(res, metric, where=where, alpha=alpha, higher=up, partial=partial,
                                        control=order[0], posthoc="holm"))
    if isinstance(full, str):
        return _note(full, "warn")
    f = full.friedman
    parts = [f"<p>{f.k} configurations over N = {f.n} datasets. Friedman χ²<sub>F</sub> = {f.chi2:.4f}, "
             f"p = {f.p_value:.4g} ({_e(f.formula)}); Iman–Davenport F<sub>F</sub> = {f.iman_davenport:.4f}, "
             f"p = {f.p_value_iman_davenport:.4g}; Nemenyi critical difference (alpha = {alpha:g}) = {full.cd:.4f}.</p>"]
    parts += [_note(w, "warn") for w in full.warnings]
    if full.excluded:
        parts.append(_note("Excluded: " + "; ".join(f"{e['dataset']} ({e['reason']})" for e in full.excluded), "warn"))
    ph = full.posthoc_frame()
    rows = [[r.name_a, r.z, r.p_value, r.adjusted, "yes" if r.reject else "no"] for r in ph.head(40).itertuples()]
    parts.append(f"<p>Post-hoc against the best-ranked, {_e(full.name_of(full.control))}, Holm's adjustment "
                 "(z test on average ranks):</p>")
    parts.append(_html_table(["configuration", "z", "p", "adjusted p", f"rejected at {alpha:g}"], rows))
    return "\n".join(parts)


def _png(fig) -> str:
    data = base64.b64encode(report.figure_bytes(fig, "png")).decode("ascii")
    return f"<img alt='figure' src='data:image/png;base64,{data}'>"


def _rank_plot(rank, limit: int) -> str:
    if isinstance(rank, str):
        return _note(f"Not drawn yet: {rank}", "warn")
    return (_png(report.rank_figure(rank, limit=limit))
            + _note("Average ranks (1 = best); configurations joined by a bar are not significantly different "
                    "by the Nemenyi test (Demšar 2006)."))


def _heatmap(res, metric, up, shown) -> str:
    fig = _attempt(lambda: report.heatmap_figure(res, metric, where=None, higher=up, relative="difference")
                   if not shown else _heatmap_of(res, metric, up, shown))
    if isinstance(fig, str):
        return _note(fig, "warn")
    return _png(fig) + _note("Colour: distance to the dataset's best (0 = best), so that easy and hard datasets "
                             "do not swamp the differences; the cell means are written in the cells.")


def _heatmap_of(res, metric, up, shown):
    subset = report.SweepResults(res.frame[res.frame["config_id"].isin(shown)], res.params,
                                 res.planned[res.planned["config_id"].isin(shown)], res.spec_path,
                                 res.names, {c: res.legend[c] for c in shown if c in res.legend}, res.k, res.repeats)
    return report.heatmap_figure(subset, metric, higher=up, relative="difference")


def _legend(res: report.SweepResults, order: list[str]) -> str:
    ids = list(dict.fromkeys([*order, *sorted(res.legend)]))
    rows = []
    for cid in ids:
        entry = res.legend.get(cid, {})
        params = ", ".join(f"{k}={v}" for k, v in entry.get("params", {}).items())
        rows.append([res.name_of(cid), cid, entry.get("model", ""), entry.get("worker", ""), params])
    return _html_table(["name", "id", "model", "worker", "parameters (those that apply)"], rows)


def _reproducibility(res: report.SweepResults) -> str:
    view = res.info.get("view")
    parts = []
    if view is not None:
        spec = view.spec
        try:
            text = spec.path.read_text(encoding="utf-8")
        except OSError as exc:
            text = f"(cannot read {spec.path}: {exc.strerror})"
        parts.append(f"<p>Spec <code>{_e(spec.path)}</code>, sha256 <code>{_e(spec.digest)}</code>; folds: "
                     f"stratified {spec.folds.k}-fold × {spec.folds.repeats} repeats, seed {spec.folds.seed} "
                     f"(scheme <code>{_e(view.plan.scheme)}</code>).</p>")
        records = {r["fingerprint"]: r for r in res.info.get("datasets", [])}
        rows = []
        for name, fp in view.fingerprints.items():
            r = records.get(fp or "", {})
            rows.append([name, fp or "not recorded yet", r.get("source", ""), r.get("n_samples"), r.get("n_features"),
                         r.get("class_counts", "")])
        parts.append(_html_table(["dataset", "fingerprint", "source", "samples", "features", "class counts"], rows))
        versions = sorted({(c.worker, c.worker_version) for c in view.plan.configurations})
        parts.append(_note("Worker versions: " + ", ".join(f"{w} {v}" for w, v in versions)))
        parts.append(f"<pre>{_e(text)}</pre>")
    rows = [["python", platform.python_version()]]
    for package in PACKAGES:
        try:
            rows.append([package, metadata.version(package)])
        except metadata.PackageNotFoundError:
            rows.append([package, "not installed"])
    parts.append(_html_table(["package", "version"], rows))
    return "\n".join(parts)


__all__ = ["build_report", "MAX_COLUMNS"]
