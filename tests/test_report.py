"""sweep.report and sweep.report_cli on results of a small real cross-validation sweep.

The fixture runs scikit-learn estimators on datasets scikit-learn ships, one
row per (dataset, configuration, fold) as the lead's loader produces; every
number a report prints is checked against an independent pandas groupby or
scipy computation done in the test.
"""

from __future__ import annotations

import argparse
import json
import re
import shutil
import subprocess
import sys
import types

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sst
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine, make_classification
from sklearn.metrics import accuracy_score
from sklearn.model_selection import StratifiedKFold
from sklearn.neighbors import KNeighborsClassifier
from sklearn.tree import DecisionTreeClassifier

from sweep import report, report_cli
from sweep.errors import SelectionError
from sweep.report import SweepResults

CONFIGS = {
    "t1": ("tree", {"max_depth": 1}),
    "t3": ("tree", {"max_depth": 3}),
    "tfull": ("tree", {"max_depth": None}),
    "k1": ("knn", {"n_neighbors": 1}),
    "k7": ("knn", {"n_neighbors": 7}),
}
PARAMS = ["max_depth", "n_neighbors"]


def _datasets():
    yield "iris", load_iris(return_X_y=True)
    yield "wine", load_wine(return_X_y=True)
    yield "breast_cancer", load_breast_cancer(return_X_y=True)
    x, y = load_digits(return_X_y=True)
    yield "digits_500", (x[:500], y[:500])
    for seed in (1, 2):
        yield f"synthetic_{seed}", make_classification(200, 8, n_informative=4, random_state=seed)


def _estimator(worker, params):
    if worker == "tree":
        return DecisionTreeClassifier(max_depth=params["max_depth"], random_state=0)
    return KNeighborsClassifier(n_neighbors=params["n_neighbors"])


@pytest.fixture(scope="module")
def sweep_results() -> SweepResults:
    rows = []
    for name, (x, y) in _datasets():
        for fold, (tr, te) in enumerate(StratifiedKFold(3, shuffle=True, random_state=0).split(x, y)):
            for cid, (worker, params) in CONFIGS.items():
                model = _estimator(worker, params).fit(x[tr], y[tr])
                acc = accuracy_score(y[te], model.predict(x[te]))
                row = {"key": f"{name}/{cid}/0/{fold}", "dataset": name, "config_id": cid, "worker": worker,
                       "repeat": 0, "fold": fold, "accuracy": acc, "balanced_accuracy": acc, "kappa": acc,
                       "train_accuracy": accuracy_score(y[tr], model.predict(x[tr])),
                       "fit_seconds": 0.001 * (1 + fold) * len(cid), "predict_seconds": 0.001,
                       "max_depth": params.get("max_depth", np.nan), "n_neighbors": params.get("n_neighbors", np.nan)}
                rows.append(row)
    frame = pd.DataFrame(rows)
    planned = frame.groupby(["dataset", "config_id"]).size().rename("jobs").reset_index()
    return SweepResults(frame, PARAMS, planned, "sweeps/test.toml")


def _partial(res: SweepResults, drop) -> SweepResults:
    return SweepResults(res.frame[~drop(res.frame)].reset_index(drop=True), res.params, res.planned, res.spec_path)


def _groupby_means(res):
    # independent computation for the checks: plain pandas groupby of the job rows.
    return res.frame.groupby(["dataset", "config_id"])["accuracy"].mean().unstack()


# ----------------------------------------------------------------- cells, best


def test_cell_stats_equal_pandas_groupby(sweep_results):
    cells = report.cell_stats(sweep_results)
    g = sweep_results.frame.groupby(["dataset", "config_id"])["accuracy"]
    ref = pd.DataFrame({"mean": g.mean(), "sd": g.std(ddof=1), "n": g.size()})
    pd.testing.assert_frame_equal(cells[["mean", "sd", "n"]], ref.sort_index(), check_dtype=False)
    assert cells["complete"].all()


def test_best_equals_groupby_argmax(sweep_results):
    b = report.best(sweep_results).set_index("dataset")
    means = _groupby_means(sweep_results)
    np.testing.assert_allclose(b["mean"], means.max(axis=1).reindex(b.index))
    for ds, row in b.iterrows():
        ordered = means.loc[ds].sort_values(ascending=False)
        assert row["mean"] == pytest.approx(ordered.iloc[0])
        assert row["margin"] == pytest.approx(ordered.iloc[0] - ordered.iloc[1])
        assert row["folds"] == 3 and row["planned"] == 3 and row["complete"]
        assert row["params"] == {k: v for k, v in CONFIGS[row["config_id"]][1].items() if v is not None}


def _tie_frame(cells):
    rows = []
    for cid, values in cells.items():
        for fold, v in enumerate(values):
            rows.append({"key": f"{cid}{fold}", "dataset": "d", "config_id": cid, "worker": "w", "repeat": 0,
                         "fold": fold, "accuracy": v, "p": 1})
    frame = pd.DataFrame(rows)
    return SweepResults(frame, ["p"], pd.DataFrame({"dataset": ["d"] * len(cells), "config_id": list(cells), "jobs": 3}))


@pytest.mark.parametrize(
    "cells, winner",
    [
        # The tie rule this module documents (and the README states): higher mean, then smaller sd,
        # then more folds, then the smallest config_id.
        ({"b": [0.8, 0.8, 0.8], "a": [0.7, 0.9, 0.8]}, "b"),
        ({"b": [0.8, 0.9, 0.7], "a": [0.9, 0.7]}, "b"),  # a: mean 0.8 with sd 0.14 on 2 folds
        ({"b": [0.8, 0.8, 0.8], "a": [0.8, 0.8]}, "b"),
        ({"b": [0.8, 0.8, 0.8], "a": [0.8, 0.8, 0.8]}, "a"),
        # floating-point noise must not decide: 0.1 + 0.2 and 0.3 are equal means.
        ({"b": [0.3, 0.3, 0.3], "a": [0.1 + 0.2, 0.3, 0.3]}, "a"),
    ],
)
def test_best_tie_rule(cells, winner):
    b = report.best(_tie_frame(cells))
    assert b.loc[0, "config_id"] == winner


def test_best_on_partial_results(sweep_results):
    res = _partial(sweep_results, lambda f: (f["dataset"] == "wine") & (f["fold"] == 2))
    b = report.best(res).set_index("dataset")
    assert b.loc["wine", "folds"] == 2 and not b.loc["wine", "complete"] and b.loc["wine", "planned"] == 3
    assert b.drop("wine")["complete"].all()
    gone = report.best(_partial(sweep_results, lambda f: f["dataset"] == "iris")).set_index("dataset")
    assert gone.loc["iris", "folds"] == 0 and gone.loc["iris", "config_id"] is None


def test_best_lower_is_better_for_time(sweep_results):
    # fit_seconds: lower is better (common practice); the fixture's fastest config is a 2-letter id.
    b = report.best(sweep_results, "fit_seconds")
    means = sweep_results.frame.groupby(["dataset", "config_id"])["fit_seconds"].mean().unstack()
    np.testing.assert_allclose(b.set_index("dataset")["mean"], means.min(axis=1).reindex(b["dataset"]))
    assert (b["margin"] >= 0).all()


# ------------------------------------------------------------------ selection


def test_select_by_id_prefix_and_filter(sweep_results):
    assert report.select_one(sweep_results, "tfull") == "tfull"
    assert report.select_one(sweep_results, "tf") == "tfull"
    assert report.select_one(sweep_results, "worker=tree,max_depth=3") == "t3"
    assert report.select_one(sweep_results, "n_neighbors=7") == "k7"
    assert sorted(report.select(sweep_results, "worker=knn")) == ["k1", "k7"]
    assert report.select_one(sweep_results, "worker=tree,max_depth=none") == "tfull"


@pytest.mark.parametrize(
    "selector, message",
    [
        ("zz", "no configuration has the name or id 'zz'"),
        ("worker=svm", "no configuration matches"),
        ("max_dept=3", "did you mean 'max_depth'"),
        ("worker=tree", "matches 3 configurations"),
        ("max_depth", "no configuration has the name or id"),
        ("t", "matches 3 configurations"),
    ],
)
def test_select_errors(sweep_results, selector, message):
    with pytest.raises(SelectionError, match=re.escape(message)):
        report.select_one(sweep_results, selector)


def test_unknown_metric(sweep_results):
    with pytest.raises(SelectionError, match="did you mean 'accuracy'"):
        report.best(sweep_results, "acuracy")


# --------------------------------------------------------------------- tables


def test_table_csv_equals_groupby(sweep_results):
    from io import StringIO

    out = pd.read_csv(StringIO(report.table(sweep_results, fmt="csv")), index_col=0)
    means = _groupby_means(sweep_results)
    np.testing.assert_allclose(out.loc[means.index, means.columns].to_numpy(), means.to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(out.loc["average", means.columns], means.mean(), rtol=1e-9)
    # average rank: pandas' rank with ties averaged (method="average"), 1 = best.
    ranks = means.round(12).rank(axis=1, ascending=False, method="average").mean()
    np.testing.assert_allclose(out.loc["average rank", means.columns], ranks, rtol=1e-9)


def test_table_markdown_bold_best_per_row(sweep_results):
    text = report.table(sweep_results, sd=True)
    means = _groupby_means(sweep_results)
    for ds in means.index:
        line = next(l for l in text.splitlines() if l.startswith(f"| {ds} |"))
        bold = re.findall(r"\*\*([0-9.]+) ± [0-9.]+\*\*", line)
        assert bold and float(bold[0]) == pytest.approx(means.loc[ds].max(), abs=5e-4)
    assert "| *average* |" in text and "| *average rank* |" in text


def test_table_pivot_needs_other_parameters_fixed(sweep_results):
    with pytest.raises(SelectionError, match="still varying"):
        report.table(sweep_results, pivot="max_depth")
    text = report.table(sweep_results, fmt="csv", pivot="n_neighbors", where="worker=knn")
    assert text.splitlines()[0] == "dataset,1,7"


def _latex_table(res):
    return report.table(res, fmt="latex", sd=True)


def test_table_latex_structure(sweep_results):
    # LaTeX structure (common practice): one tabular, a column spec of l + one r per configuration,
    # one \textbf per data row at least, underscores escaped, rows ended by \\.
    tex = _latex_table(_partial(sweep_results, lambda f: (f["dataset"] == "wine") & (f["fold"] == 2)))
    assert tex.count("\\begin{tabular}{lrrrrr}") == 1 and tex.count("\\end{tabular}") == 1
    body = [l for l in tex.splitlines() if l.endswith("\\\\") and not l.startswith("dataset")]
    assert len(body) == 6 + 2
    assert all(l.count("&") == 5 for l in body)
    assert all("\\textbf{" in l for l in body[:6])
    assert "breast\\_cancer" in tex and "breast_cancer" not in tex.replace("breast\\_cancer", "")
    assert "$\\pm$" in tex and "*" in tex  # an incomplete cell is marked


def test_latex_escape():
    assert report.latex_escape("a_b & 50% #1 {x} $y$ ~^\\") == (
        "a\\_b \\& 50\\% \\#1 \\{x\\} \\$y\\$ \\textasciitilde{}\\textasciicircum{}\\textbackslash{}"
    )


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex is not installed")
def test_table_latex_compiles(sweep_results, tmp_path):
    # issue 12: compiles with a plain article preamble plus booktabs
    doc = ("\\documentclass{article}\n\\usepackage{booktabs}\n\\begin{document}\n" + _latex_table(sweep_results)
           + "\\end{document}\n")
    (tmp_path / "t.tex").write_text(doc)
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "t.tex"], cwd=tmp_path,
                         capture_output=True, timeout=120)
    assert run.returncode == 0, run.stdout[-2000:]


# -------------------------------------------------------- compare and rank


def test_compare_equals_scipy(sweep_results):
    means = _groupby_means(sweep_results)
    comp = report.compare(sweep_results, "tfull", "k7", zero_method="wilcox")
    d = (means["tfull"] - means["k7"]).round(12)
    assert (comp.sign.wins, comp.sign.ties, comp.sign.losses) == ((d > 0).sum(), (d == 0).sum(), (d < 0).sum())
    # Reference implementation: scipy.stats.wilcoxon on the per-dataset means.
    ref = sst.wilcoxon(means["tfull"], means["k7"], zero_method="wilcox")
    assert comp.wilcoxon.statistic == pytest.approx(ref.statistic)
    assert comp.wilcoxon.p_value == pytest.approx(ref.pvalue)
    assert comp.excluded == []


def test_compare_excludes_and_names_missing_datasets(sweep_results):
    res = _partial(sweep_results, lambda f: (f["dataset"] == "wine") & (f["config_id"] == "k7"))
    comp = report.compare(res, "tfull", "k7")
    assert comp.excluded == [{"dataset": "wine", "reason": "k7 has no results"}] and "wine" not in comp.datasets
    assert "  wine: k7 has no results" in comp.to_text()
    with pytest.raises(SelectionError, match="same configuration"):
        report.compare(res, "tfull", "worker=tree,max_depth=none")


def test_rank_equals_pandas_and_scipy(sweep_results):
    rr = report.rank(sweep_results, tie_correction=True)
    means = _groupby_means(sweep_results)
    ranks = means.round(12).rank(axis=1, ascending=False).mean()
    np.testing.assert_allclose(rr.friedman.average_ranks, ranks[rr.configs])
    # Reference implementation: scipy.stats.friedmanchisquare (tie-corrected).
    assert rr.friedman.chi2 == pytest.approx(sst.friedmanchisquare(*means.to_numpy().T).statistic)
    assert rr.posthoc.method == "shaffer" and len(rr.posthoc.pairs) == 10
    assert "tie-corrected" in rr.to_text()


def _demsar_results():
    from tests.test_stats import DEMSAR_AUC

    names = ["C4.5", "C4.5+m", "C4.5+cf", "C4.5+m+cf"]
    rows = [{"key": f"{i}{j}", "dataset": f"d{i:02d}", "config_id": names[j], "worker": "c45", "repeat": 0,
             "fold": 0, "accuracy": DEMSAR_AUC[i, j], "m": "m" in names[j][4:], "cf": "cf" in names[j]}
            for i in range(14) for j in range(4)]
    frame = pd.DataFrame(rows)
    return SweepResults(frame, ["m", "cf"], frame[["dataset", "config_id"]].assign(jobs=1))


def test_rank_and_compare_reproduce_demsar_2006():
    # Demšar (2006), Table 6 and Sec. 3.2.2: ranks 3.143, 2.000, 2.893, 1.964, chi2_F = 9.28, F_F = 3.69,
    # CD = 1.25; Holm with C4.5 as control rejects C4.5+m and C4.5+m+cf, keeps C4.5+cf.
    res = _demsar_results()
    rr = report.rank(res, control="C4.5")
    ranking = rr.ranking().set_index("config_id")["average_rank"]
    np.testing.assert_allclose(ranking[["C4.5", "C4.5+m", "C4.5+cf", "C4.5+m+cf"]], [3.143, 2.0, 2.893, 1.964], atol=5e-4)
    assert rr.friedman.chi2 == pytest.approx(9.28, abs=5e-3) and rr.cd == pytest.approx(1.25, abs=5e-3)
    ph = rr.posthoc_frame().set_index("config_a")["reject"]
    assert ph.to_dict() == {"C4.5+m+cf": True, "C4.5+m": True, "C4.5+cf": False}
    # Demšar (2006), Table 2: C4.5+m vs C4.5, R+ = 93, R- = 12.
    w = report.compare(res, "C4.5+m", "C4.5").wilcoxon
    assert (w.r_plus, w.r_minus) == (93.0, 12.0)


# ------------------------------------------------------------------ plots


def test_plots_write_images(sweep_results, tmp_path):
    import matplotlib.image

    png = tmp_path / "ranks.png"
    report.plot_ranks(report.rank(sweep_results), png)
    assert matplotlib.image.imread(png).shape[0] > 50
    pdf = tmp_path / "heat.pdf"
    report.plot_heatmap(sweep_results, pdf)
    assert pdf.read_bytes().startswith(b"%PDF")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["heat.pdf", "ranks.png"]  # no temp file left


def test_cd_groups():
    # Nemenyi groups (Demšar 2006, Fig. 1 style): maximal runs of sorted ranks spanning less than CD.
    assert report._cd_groups(np.array([1.0, 1.5, 2.0, 3.5, 3.9]), 1.1) == [(0, 2), (3, 4)]
    assert report._cd_groups(np.array([1.0, 2.0, 3.0]), 0.5) == []


# --------------------------------------------------------------------- CLI


@pytest.fixture()
def cli(sweep_results, monkeypatch):
    fake = types.ModuleType("sweep.results")
    fake.load_sweep_results = lambda spec, metrics=None: sweep_results
    monkeypatch.setitem(sys.modules, "sweep.results", fake)
    parser = argparse.ArgumentParser(prog="foldsweep")
    report_cli.add_commands(parser.add_subparsers(dest="command", required=True))

    def run(*argv):
        args = parser.parse_args(list(argv))
        return args.func(args)

    return run


def test_cli_best_json(cli, capsys, sweep_results):
    assert cli("best", "sweeps/test.toml", "--json") == 0
    rows = json.loads(capsys.readouterr().out)
    assert {r["dataset"] for r in rows} == set(sweep_results.frame["dataset"])
    keys = {"dataset", "config_id", "name", "worker", "params", "mean", "sd", "folds", "planned", "complete",
            "runner_up", "runner_up_name", "margin", "test_p", "test_folds", "metric"}
    assert all(set(r) == keys for r in rows)
    means = _groupby_means(sweep_results)
    for r in rows:
        assert r["mean"] == pytest.approx(means.loc[r["dataset"]].max()) and r["metric"] == "accuracy"


def test_cli_commands_write_files(cli, capsys, tmp_path):
    out = tmp_path / "t.tex"
    assert cli("table", "s.toml", "--format", "latex", "--out", str(out)) == 0
    assert out.read_text().startswith("%") and "\\begin{tabular}" in out.read_text()
    assert cli("compare", "s.toml", "tfull", "worker=knn,n_neighbors=7", "--json") == 0
    assert json.loads(capsys.readouterr().out)["config_b"] == "k7"
    assert cli("rank", "s.toml", "--control", "k1", "--posthoc", "finner", "--json") == 0
    data = json.loads(capsys.readouterr().out)
    assert data["control"] == "k1" and data["posthoc"]["method"] == "finner" and len(data["posthoc"]["rows"]) == 4
    assert cli("plot", "s.toml", "--kind", "heatmap", "--out", str(tmp_path / "h.png"), "--json") == 0
    assert json.loads(capsys.readouterr().out)["kind"] == "heatmap" and (tmp_path / "h.png").stat().st_size > 0
    assert cli("best", "s.toml", "--metric", "fit_seconds") == 0
    assert "margin" in capsys.readouterr().out


def test_cli_bad_selection_is_exit_2(sweep_results, monkeypatch, capsys):
    fake = types.ModuleType("sweep.results")
    fake.load_sweep_results = lambda spec, metrics=None: sweep_results
    monkeypatch.setitem(sys.modules, "sweep.results", fake)
    from sweep.cli import main

    assert main(["compare", "sweeps/test.toml", "tfull", "worker=tree"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "sweeps/test.toml" in err[0] and "matches 3 configurations" in err[0]


@pytest.mark.parametrize(
    "metric, up",
    # Directions (issue 5; common practice): accuracy-like scores higher, errors, times, rule counts lower.
    [("accuracy", True), ("balanced_accuracy", True), ("kappa", True), ("train_accuracy", True),
     ("fit_seconds", False), ("predict_seconds", False), ("rules_selected", False), ("error", False),
     ("leaves", False)],
)
def test_metric_direction(metric, up):
    assert report.higher_is_better(metric) is up


# ------------------------------------------------------------ end to end

E2E_SPEC = """
name = "report-e2e"
[folds]
k = 3
[[dataset]]
name = "iris"
builtin = "iris"
[[dataset]]
name = "wine"
builtin = "wine"
[[dataset]]
name = "breast_cancer"
builtin = "breast_cancer"
[[model]]
worker = "decision_tree"
grid = { max_depth = [1, 3] }
[[model]]
worker = "knn"
grid = { n_neighbors = [1, 7] }
"""


@pytest.mark.slow
def test_end_to_end_reports_on_a_real_sweep(tmp_path):
    from tests.conftest import run_foldsweep

    spec = tmp_path / "e2e.toml"
    spec.write_text(E2E_SPEC)
    ran = run_foldsweep("run", spec, "--workers", "1", "--progress", "none", timeout=300)
    assert ran.returncode == 0, ran.stderr
    dump = run_foldsweep("results", spec, "--format", "csv")
    assert dump.returncode == 0, dump.stderr
    from io import StringIO

    jobs = pd.read_csv(StringIO(dump.stdout))
    # independent computation: pandas groupby of the job rows the store exported.
    means = jobs.groupby(["dataset", "config_id"])["accuracy"].mean().unstack()

    table = run_foldsweep("table", spec, "--format", "csv")
    assert table.returncode == 0, table.stderr
    out = pd.read_csv(StringIO(table.stdout), index_col=0)
    # the table's columns are the configurations' readable names (foldsweep configs maps them to ids)
    names = {r["id"]: r["name"] for r in json.loads(run_foldsweep("configs", spec, "--json").stdout)}
    assert names[means.columns[0]] in out.columns
    means = means.rename(columns=names)
    np.testing.assert_allclose(out.loc[means.index, means.columns].to_numpy(), means.to_numpy(), rtol=1e-9)

    best = run_foldsweep("best", spec, "--json")
    rows = {r["dataset"]: r for r in json.loads(best.stdout)}
    for ds in means.index:
        assert rows[ds]["mean"] == pytest.approx(means.loc[ds].max()) and rows[ds]["folds"] == 3

    latex = run_foldsweep("table", spec, "--format", "latex", "--out", tmp_path / "t.tex")
    assert latex.returncode == 0 and "\\begin{tabular}" in (tmp_path / "t.tex").read_text()
    compare = run_foldsweep("compare", spec, "worker=knn,n_neighbors=7", "max_depth=3", "--json")
    assert compare.returncode == 0, compare.stderr
    assert json.loads(compare.stdout)["n"] == 3
    rank = run_foldsweep("rank", spec, "--json")
    assert rank.returncode == 0 and json.loads(rank.stdout)["k"] == 4
    png = tmp_path / "ranks.png"
    plot = run_foldsweep("plot", spec, "--kind", "ranks", "--out", png)
    assert plot.returncode == 0, plot.stderr
    import matplotlib.image

    assert png.stat().st_size > 0 and matplotlib.image.imread(png).ndim == 3
    bad = run_foldsweep("compare", spec, "worker=knn", "max_depth=3")
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1 and "Traceback" not in bad.stderr
