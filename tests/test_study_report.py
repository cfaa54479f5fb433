"""Readable names, the configs and failures commands, reports read from the tracker alone, and the
HTML study report (rendered in a real headless Chromium when it is installed).

The end-to-end fixture runs a real sweep of scikit-learn's datasets (iris from a CSV file that is
deleted afterwards, wine, breast_cancer) with three model blocks, one of which fails on purpose.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import stat
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sweep import report, stats
from sweep.errors import SpecError
from sweep.naming import name_configurations
from sweep.plan import make_plan
from sweep.spec import parse_spec
from tests.conftest import ROOT, run_foldsweep

# ----------------------------------------------------------------------- naming (pure)

TWO_BLOCKS = {
    "name": "naming",
    "dataset": [{"name": "iris", "builtin": "iris"}],
    "model": [
        {"name": "fuzzy", "worker": "fuzzy_rules",
         "grid": {"reasoning": ["additive", "choquet"], "measure": ["power", "sugeno_lambda"], "labels": [3, 5]},
         "applies": {"measure": {"reasoning": ["choquet"]}}},
        {"name": "tree", "worker": "decision_tree", "grid": {"max_depth": [1, 3]}},
    ],
}


def _names(doc):
    from workers.registry import get_worker

    spec = parse_spec(doc, Path("naming.toml"))
    plan = make_plan(spec, {d["name"]: "f" for d in doc["dataset"]}, {m.worker: get_worker(m.worker) for m in spec.models})
    return spec, plan, name_configurations(spec, plan)


def test_names_from_two_model_blocks():
    _, plan, names = _names(TWO_BLOCKS)
    got = sorted(n.name for n in names.values())
    # measure does not apply under additive reasoning (the spec's applies): not in those names
    assert got == sorted([
        "fuzzy · additive · labels=3", "fuzzy · additive · labels=5",
        "fuzzy · choquet · power · labels=3", "fuzzy · choquet · power · labels=5",
        "fuzzy · choquet · sugeno_lambda · labels=3", "fuzzy · choquet · sugeno_lambda · labels=5",
        "tree · max_depth=1", "tree · max_depth=3"])
    assert len(set(got)) == len(plan.configurations)
    additive = next(n for n in names.values() if n.name == "fuzzy · additive · labels=3")
    assert "measure" in additive.inapplicable and "measure" not in additive.params
    assert additive.model == "fuzzy" and additive.worker == "fuzzy_rules"


def test_label_template_and_given_names():
    doc = json.loads(json.dumps(TWO_BLOCKS))
    doc["model"][0]["label"] = "FRM {reasoning} {measure} L{labels}"
    doc["model"][1]["names"] = [{"name": "stump", "max_depth": 1}]
    _, _, names = _names(doc)
    got = {n.name for n in names.values()}
    assert "FRM additive L3" in got and "FRM choquet sugeno_lambda L5" in got  # an inapplicable field is empty
    assert "stump" in got and "tree · max_depth=3" in got


@pytest.mark.parametrize("change, message", [
    ({"label": "{reasonning}"}, "did you mean 'reasoning'"),
    ({"label": "{reasoning"}, "not a valid template"),
    ({"names": [{"reasoning": "additive"}]}, "names[0] must be a table with a non-empty name"),
    ({"names": [{"name": "x", "reasonin": "additive"}]}, "unknown parameter"),
    ({"label": "{labels}"}, "are both named"),
])
def test_naming_spec_errors(change, message):
    doc = json.loads(json.dumps(TWO_BLOCKS))
    doc["model"][0].update(change)
    with pytest.raises(SpecError, match=re.escape(message)):
        _names(doc)


def _legend_results(names):
    legend = {cid: {"model": n.model, "worker": n.worker, "params": dict(n.params)} for cid, n in names.items()}
    params = sorted({p for n in names.values() for p in n.params} | {p for n in names.values() for p in n.inapplicable})
    frame = pd.DataFrame(columns=["dataset", "config_id", "repeat", "fold", "accuracy"])
    return report.SweepResults(frame, params, pd.DataFrame(columns=["dataset", "config_id", "jobs"]), "naming.toml",
                               names={cid: n.name for cid, n in names.items()}, legend=legend)


def test_filters_ignore_parameters_that_do_not_apply():
    _, _, names = _names(TWO_BLOCKS)
    res = _legend_results(names)
    by_name = {n.name: cid for cid, n in names.items()}
    # measure=power matches only the Choquet configurations: additive holds measure at a default it ignores
    assert sorted(report.select(res, "measure=power")) == sorted(
        by_name[f"fuzzy · choquet · power · labels={n}"] for n in (3, 5))
    assert report.select_one(res, "reasoning=additive,labels=5") == by_name["fuzzy · additive · labels=5"]
    # names and ids are both references
    assert report.select_one(res, "tree · max_depth=3") == by_name["tree · max_depth=3"]
    assert report.select_one(res, by_name["tree · max_depth=3"]) == by_name["tree · max_depth=3"]


def test_readme_examples_select_one_configuration_on_the_demo():
    # The README's report examples must run as written on the demo: every CONFIG they name selects
    # exactly one configuration of sweeps/demo.toml.
    from sweep.spec import load_spec
    from workers.registry import get_worker

    spec = load_spec(ROOT / "sweeps" / "demo.toml")
    plan = make_plan(spec, {d["name"]: "f" for d in spec.datasets}, {m.worker: get_worker(m.worker) for m in spec.models})
    res = _legend_results(name_configurations(spec, plan))
    readme = (ROOT / "README.md").read_text()
    commands = re.findall(r"^foldsweep (compare|rank|model|table|best|plot) sweeps/demo\.toml (.*?)(?:\s+#.*)?$",
                          readme, flags=re.M)
    selectors = []
    for command, rest in commands:
        words = re.findall(r'"[^"]*"|\S+', rest)
        if command == "compare":
            selectors += [w.strip('"') for w in words if not w.startswith("-")][:2]
        for flag in ("--control", "--config", "--where"):
            if flag in words:
                selectors.append(words[words.index(flag) + 1].strip('"'))
    assert len(selectors) >= 3, commands
    for selector in selectors:
        if selector.startswith("--where"):
            continue
        report.select(res, selector) if "where" in selector else report.select_one(res, selector)


# ---------------------------------------------------------- a real sweep, end to end

SPEC = """
name = "study"
[folds]
k = 3
[[dataset]]
name = "iris"
file = "iris.csv"
target = "species"
[[dataset]]
name = "wine"
builtin = "wine"
[[dataset]]
name = "breast_cancer"
builtin = "breast_cancer"
[[model]]
name = "centroid"
worker = "tests.plugin_workers:SLOW_CENTROID"
grid = {{ n_features = [2, 4] }}
[[model]]
name = "broken"
worker = "tests.plugin_workers:SLOW_CENTROID"
fixed = {{ fail_if_exists = "{flag}" }}
[[model]]
name = "tree"
worker = "decision_tree"
grid = {{ max_depth = [1, 3] }}
"""


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    from sklearn.datasets import load_iris

    folder = tmp_path_factory.mktemp("study")
    iris = load_iris(as_frame=True).frame.rename(columns={"target": "species"})
    iris.to_csv(folder / "iris.csv", index=False)
    flag = folder / "fail.flag"
    flag.write_text("x")
    spec = folder / "study.toml"
    spec.write_text(SPEC.format(flag=flag))
    before = run_foldsweep("configs", spec, "--json")
    ran = run_foldsweep("run", spec, "--workers", "1", "--progress", "none", timeout=300)
    (folder / "iris.csv").unlink()  # reports read the tracker alone: no dataset file needed from here on
    return {"spec": spec, "folder": folder, "ran": ran, "before": before}


@pytest.mark.slow
def test_run_exits_1_when_jobs_failed(study):
    # documented in sweep.cli and the README: 1 = jobs failed (2 is bad input)
    assert study["ran"].returncode == 1, study["ran"].stderr
    assert "9 failed" in study["ran"].stdout


@pytest.mark.slow
def test_configs_command(study):
    before = json.loads(study["before"].stdout)  # before the first run: everything pending, no store created
    assert study["before"].returncode == 0 and all(r["pending"] == 9 and r["done"] == 0 for r in before)
    out = run_foldsweep("configs", study["spec"], "--json")
    rows = json.loads(out.stdout)
    assert all(set(r) == {"id", "name", "model", "params", "done", "failed", "pending"} for r in rows)
    by_name = {r["name"]: r for r in rows}
    assert set(by_name) == {"centroid · n_features=2", "centroid · n_features=4", "broken", "tree · max_depth=1",
                            "tree · max_depth=3"}
    assert by_name["broken"]["failed"] == 9 and by_name["broken"]["done"] == 0
    assert by_name["tree · max_depth=3"]["done"] == 9 and by_name["tree · max_depth=3"]["params"]["max_depth"] == 3
    text = run_foldsweep("configs", study["spec"]).stdout
    assert "tree · max_depth=3" in text and "9 done, 0 failed, 0 pending" in text


@pytest.mark.slow
def test_failures_command(study):
    import sqlite3

    out = run_foldsweep("failures", study["spec"], "--json")
    rows = json.loads(out.stdout)
    assert len(rows) == 9 and all(set(r) >= {"key", "dataset", "config", "repeat", "fold", "attempts", "error"}
                                  for r in rows)
    assert {r["config"] for r in rows} == {"broken"} and {r["dataset"] for r in rows} == {"iris", "wine", "breast_cancer"}
    from tests.plugin_workers import FAILURE_MESSAGE

    assert all(r["error"] == f"RuntimeError: {FAILURE_MESSAGE}" for r in rows)
    text = run_foldsweep("failures", study["spec"]).stdout
    assert f"9 x RuntimeError: {FAILURE_MESSAGE}" in text
    tb = run_foldsweep("failures", study["spec"], "--traceback", rows[0]["key"][:12])
    assert tb.returncode == 0 and "Traceback" in tb.stdout and FAILURE_MESSAGE in tb.stdout
    # a stored message with terminal control sequences (colour codes, a bell, a title change) prints clean
    con = sqlite3.connect(study["folder"] / "study.sqlite")
    con.execute("UPDATE jobs SET error = ? WHERE key = ?",
                ("Traceback\n\x1b[31mValueError: \x1b]0;pwned\x07bad\x1b[0m value\x07\r\n", rows[0]["key"]))
    con.commit()
    con.close()
    again = run_foldsweep("failures", study["spec"])
    assert "ValueError: bad value" in again.stdout and "\x1b" not in again.stdout and "\x07" not in again.stdout
    assert "\x1b" not in run_foldsweep("failures", study["spec"], "--traceback", rows[0]["key"]).stdout


@pytest.mark.slow
def test_reports_need_no_dataset_file_nor_the_run_module(study):
    code = ("import sys; from sweep.results import load_sweep_results; "
            f"res = load_sweep_results({str(study['spec'])!r}, details=True); "
            "assert 'sweep.run' not in sys.modules, 'sweep.run imported'; print(len(res.frame))")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == 0, out.stderr
    assert int(out.stdout) == 4 * 3 * 3  # 4 working configurations x 3 datasets x 3 folds (iris.csv is gone)


@pytest.mark.slow
def test_best_compare_use_names_and_tests(study):
    best = json.loads(run_foldsweep("best", study["spec"], "--json").stdout)
    assert all(" · " in r["name"] and r["config_id"] for r in best)
    comp = run_foldsweep("compare", study["spec"], "tree · max_depth=3", "n_features=4", "--json")
    data = json.loads(comp.stdout)
    assert data["name_a"] == "tree · max_depth=3" and data["name_b"] == "centroid · n_features=4"
    assert data["n"] == 3 and data["wilcoxon"]["min_attainable_p"] == 0.25
    assert any("never be significant" in w for w in data["warnings"])
    assert set(data["bayes_signed_rank"]) == {"p_a_better", "p_equivalent", "p_b_better", "rope"}
    assert [r["folds"] for r in data["per_dataset"]] == [3, 3, 3]


@pytest.mark.slow
def test_out_files_get_umask_permissions(study):
    out = study["folder"] / "t.tex"
    assert run_foldsweep("table", study["spec"], "--format", "latex", "--out", out).returncode == 0
    mask = os.umask(0o022)
    os.umask(mask)
    # common practice: a new file is 0666 minus the umask (the subprocess inherits this process's umask)
    assert stat.S_IMODE(out.stat().st_mode) == 0o666 & ~mask


class _Text(HTMLParser):
    def __init__(self):
        super().__init__()
        self.parts, self.sources, self.scripts = [], [], 0

    def handle_starttag(self, tag, attrs):
        self.scripts += tag == "script"
        self.sources += [v for k, v in attrs if k in ("src", "href") and v]

    def handle_data(self, data):
        self.parts.append(data)


def _rendered(path: Path, tmp: Path) -> str | None:
    chromium = shutil.which("chromium") or ("/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None)
    if chromium is None:
        if os.environ.get("FOLDSWEEP_REQUIRE_BROWSER") == "1":
            pytest.fail("FOLDSWEEP_REQUIRE_BROWSER=1 but chromium is not installed (apt-get install chromium)")
        pytest.skip("chromium is not installed (Debian: apt-get install chromium); .ci/run installs it")
    run = subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                          "--disable-background-networking", "--disable-component-update", "--disable-sync",
                          f"--user-data-dir={tmp / 'chromium-profile'}", "--dump-dom", path.resolve().as_uri()],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr[-2000:]
    return run.stdout


@pytest.mark.slow
def test_html_report_renders_in_a_headless_browser(study, tmp_path):
    out = study["folder"] / "study.html"
    made = run_foldsweep("report", study["spec"], "--out", out)
    assert made.returncode == 0, made.stderr
    source = out.read_text()
    parsed = _Text()
    parsed.feed(source)
    # self-contained: no script at all, every image a data: URI, nothing fetched from elsewhere
    assert parsed.scripts == 0 and parsed.sources and all(s.startswith("data:image/png;base64,") for s in parsed.sources)
    dom = _rendered(out, tmp_path)
    text = _Text()
    text.feed(dom)
    rendered = " ".join(" ".join(text.parts).split())
    best = json.loads(run_foldsweep("best", study["spec"], "--json").stdout)
    for row in best:  # the winners, by name, beside their dataset
        assert f"{row['dataset']} {row['name']} {row['mean']:.4f}" in rendered
    assert "Per-dataset table" in rendered and "average rank" in rendered
    assert "9 failed" in rendered and "RuntimeError" in rendered  # completeness and failures
    assert "Friedman" in rendered and "P(A better)" in rendered  # frequentist and Bayesian comparisons
    assert "fingerprint" in rendered and "stratified 3-fold" in rendered and "numpy" in rendered


def test_html_report_while_a_sweep_runs():
    # a sweep half done: one dataset has every cell, the other only some folds; the report is built,
    # says what is pending and marks the incomplete cells
    from sweep.study_report import build_report

    rows = [{"dataset": d, "config_id": c, "repeat": 0, "fold": f, "accuracy": 0.5 + 0.1 * (c == "a") + 0.01 * f}
            for d in ("d1", "d2") for c in ("a", "b") for f in range(3) if not (d == "d2" and f == 2)]
    frame = pd.DataFrame(rows)
    planned = pd.DataFrame({"dataset": ["d1", "d1", "d2", "d2"], "config_id": ["a", "b", "a", "b"], "jobs": 3})
    res = report.SweepResults(frame, [], planned, "running.toml", names={"a": "model · a", "b": "model · b"},
                              info={"cell_counts": [("d1", "a", "done", 3), ("d1", "b", "done", 3),
                                                    ("d2", "a", "done", 2), ("d2", "b", "done", 2),
                                                    ("d2", "a", "running", 1), ("d2", "b", "pending", 1)]})
    page = build_report(res)
    assert "12 jobs planned" in page and "1 running, 1 pending" in page and "not finished" in page
    assert "0.7000 *" in page or "0.6050 *" in page  # an incomplete cell is marked


# ------------------------------------------------------------- statistics in the reports


def _fold_results(drop=()):
    rng = np.random.default_rng(3)
    rows = []
    for d in range(8):
        for c, skill in (("a", 0.02), ("b", 0.0), ("c", -0.01)):
            for r in range(2):
                for f in range(5):
                    if (d, c, r, f) not in drop:
                        rows.append({"dataset": f"d{d}", "config_id": c, "repeat": r, "fold": f,
                                     "accuracy": 0.7 + 0.02 * d + skill + rng.normal(0, 0.02)})
    frame = pd.DataFrame(rows)
    planned = pd.DataFrame([(f"d{d}", c, 10) for d in range(8) for c in "abc"], columns=["dataset", "config_id", "jobs"])
    return report.SweepResults(frame, [], planned, "folds.toml", names={"a": "A", "b": "B", "c": "C"}, k=5, repeats=2)


def test_compare_complete_cells_by_default_and_partial_on_shared_folds():
    res = _fold_results(drop={(0, "a", 0, 0), (1, "b", 1, 4)})
    comp = report.compare(res, "A", "B")
    assert comp.datasets == [f"d{d}" for d in range(2, 8)]
    assert comp.excluded == [{"dataset": "d0", "reason": "A has 9/10 folds"},
                             {"dataset": "d1", "reason": "B has 9/10 folds"}]
    part = report.compare(res, "A", "B", partial=True)
    assert part.datasets == [f"d{d}" for d in range(8)] and part.partial == ["d0", "d1"]
    # independent computation: pandas means over the (repeat, fold)s both have
    f = res.frame[res.frame["dataset"] == "d0"].pivot_table(index=["repeat", "fold"], columns="config_id",
                                                             values="accuracy").dropna()
    x = np.array([r["mean_a"] for r in part.per_dataset if r["dataset"] == "d0"])
    assert x[0] == pytest.approx(f["a"].mean()) and len(f) == 9
    # the per-dataset tests: corrected resampled t (J = 10, n_test/n_train = 1/4) and the Bayesian correlated t
    row = next(r for r in comp.per_dataset if r["dataset"] == "d5")
    g = res.frame[res.frame["dataset"] == "d5"].pivot_table(index=["repeat", "fold"], columns="config_id",
                                                            values="accuracy")
    ref = stats.corrected_resampled_t(g["a"], g["b"], test_train_ratio=0.25)
    assert row["t"] == pytest.approx(ref.statistic) and row["t_p"] == pytest.approx(ref.p_value) and row["df"] == 9
    assert comp.bayes is not None and comp.bayes.p_a_better + comp.bayes.p_equivalent + comp.bayes.p_b_better == pytest.approx(1)


def test_best_marks_incomplete_and_tests_winner_against_runner_up():
    res = _fold_results(drop={(3, "a", 0, 1)})
    b = report.best(res).set_index("dataset")
    assert not b.loc["d3", "complete"] and b.loc["d3", "folds"] == 9 and b.drop("d3")["complete"].all()
    g = res.frame[res.frame["dataset"] == "d4"].pivot_table(index=["repeat", "fold"], columns="config_id",
                                                            values="accuracy")
    w, r = b.loc["d4", "config_id"], b.loc["d4", "runner_up"]
    assert b.loc["d4", "test_p"] == pytest.approx(
        stats.corrected_resampled_t(g[w], g[r], test_train_ratio=0.25).p_value)
    assert b.loc["d4", "name"] == res.names[w]


def test_rank_warns_on_small_n_and_names_configurations():
    rr = report.rank(_fold_results())
    assert rr.friedman.n == 8 and any("N > 10" in w for w in rr.warnings)
    assert set(rr.ranking()["name"]) == {"A", "B", "C"} and "A" in rr.to_text()


def test_heatmap_colours_relative_to_each_dataset():
    res = _fold_results()
    fig = report.heatmap_figure(res, relative="difference")
    shown = np.ma.filled(fig.axes[0].images[0].get_array(), np.nan)
    means = res.frame.groupby(["dataset", "config_id"])["accuracy"].mean().unstack()
    # independent computation: distance of each cell to its dataset's best mean
    np.testing.assert_allclose(shown, (means.max(axis=1).to_numpy()[:, None] - means.to_numpy()), atol=1e-12)
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert labels == ["A", "B", "C"]
    values = {t.get_text() for t in fig.axes[0].texts}
    assert f"{means.iloc[0, 0]:.3f}" in values  # the mean is written in its cell
    ranks = np.ma.filled(report.heatmap_figure(res, relative="rank").axes[0].images[0].get_array(), np.nan)
    assert (ranks[:, 0] == 1).all()  # A is best everywhere in this fixture


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex is not installed")
def test_latex_with_names_and_legend_compiles(tmp_path):
    res = _fold_results()
    res.names.update({"a": "fuzzy · choquet · sugeno_lambda", "b": "tree · max_depth=3", "c": "knn_7 & 50%"})
    for legend in (False, True):
        tex = report.table(res, fmt="latex", sd=True, legend=legend, caption="Accuracy per dataset", label="tab:acc")
        assert "\\toprule" in tex and "\\caption{Accuracy per dataset}" in tex and "\\label{tab:acc}" in tex
        doc = "\\documentclass{article}\n\\usepackage{booktabs}\n\\begin{document}\n" + tex + "\\end{document}\n"
        (tmp_path / "t.tex").write_text(doc)
        run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "t.tex"], cwd=tmp_path,
                             capture_output=True, timeout=120)
        assert run.returncode == 0, run.stdout[-2000:]


def test_written_files_get_the_permissions_of_a_new_file(tmp_path):
    # common practice: a new file is created 0666 minus the umask (tempfile.mkstemp's 0600 must not leak)
    from sweep.writing import atomic_write

    old = os.umask(0o022)
    try:
        report.write_text_atomic(tmp_path / "a.tex", "x")
        atomic_write(tmp_path / "b.bin", lambda handle: handle.write(b"y"))
        os.umask(0o027)
        report.write_text_atomic(tmp_path / "c.tex", "z")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "a.tex").stat().st_mode) == 0o644
    assert stat.S_IMODE((tmp_path / "b.bin").stat().st_mode) == 0o644
    assert stat.S_IMODE((tmp_path / "c.tex").stat().st_mode) == 0o640
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.tex", "b.bin", "c.tex"]  # no temporary left


def test_clean_text_strips_terminal_control():
    # ECMA-48 (common practice): CSI sequences ESC [ ... final byte, OSC ESC ] ... BEL, C0/C1 controls
    from sweep.text import printable

    assert printable("\x1b[1;31mKeyError\x1b[0m: 'x'\x07") == "KeyError: 'x'"
    assert printable("a\x1b]0;title\x07b\r\nc\td\x9b") == "ab\nc\td"
