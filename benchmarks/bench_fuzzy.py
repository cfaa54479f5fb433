"""One FARC-HD fold job at default parameters, timed per reasoning method, beside scikit-learn.

Run: ``python benchmarks/bench_fuzzy.py [--all] [--evaluations N] [--profile] [--accuracy]``

The problem: ``make_classification(n_samples=1000, n_features=8,
n_informative=5, n_redundant=2, n_classes=3, random_state=0)``, the first
fold of a stratified 5-fold split (800 training rows). Printed per
configuration: fit seconds (and per stage), fitness evaluations per second
of the genetic stage, rule counts, test accuracy; then the fit times of a
decision tree and a random forest (100 trees) on the same fold, the ratios
asked for (Sugeno lambda over additive), and the process's peak resident
memory (an upper bound on every job's).

Times are printed as wall and cpu seconds (one thread: BLAS threads are
set to 1); ratios use cpu seconds, which a shared machine disturbs less.

Targets (issue 4): every reasoning method <= 20 s per fold job on one core;
``choquet`` + ``sugeno_lambda`` <= 3x ``additive``; peak memory <= 1 GiB.
``--profile`` writes a pyinstrument profile of each fuzzy fit as text.
``--accuracy`` prints instead the accuracy table of the issue: mean
stratified 5-fold accuracy (``StratifiedKFold(5, shuffle=True,
random_state=0)``, the same folds for every row) of each reasoning method
at default parameters on iris, wine and breast_cancer, beside
``DecisionTreeClassifier(random_state=0)`` and a standardised 5-NN.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
# one core, as a fold job gets: no BLAS threads (set before numpy loads)
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
from sklearn.datasets import make_classification  # noqa: E402
from sklearn.ensemble import RandomForestClassifier  # noqa: E402
from sklearn.model_selection import StratifiedKFold  # noqa: E402
from sklearn.tree import DecisionTreeClassifier  # noqa: E402

from workers.fuzzy import FuzzyRuleClassifier  # noqa: E402

CORE = [("additive", {}), ("choquet+power", {"reasoning": "choquet", "measure": "power"}),
        ("choquet+sugeno_lambda", {"reasoning": "choquet", "measure": "sugeno_lambda"})]
EXTRA = [("winning_rule", {"reasoning": "winning_rule"}),
         ("choquet+cardinality", {"reasoning": "choquet", "measure": "cardinality"}),
         ("sugeno_integral+power", {"reasoning": "sugeno_integral", "measure": "power"}),
         ("sugeno_integral+sugeno_lambda", {"reasoning": "sugeno_integral", "measure": "sugeno_lambda"}),
         ("choquet_t(hamacher)+power", {"reasoning": "choquet_t", "measure": "power", "tnorm": "hamacher"}),
         ("choquet_t(minimum)+sugeno_lambda", {"reasoning": "choquet_t", "measure": "sugeno_lambda",
                                               "tnorm": "minimum"})]


def fold() -> tuple[np.ndarray, ...]:
    """The benchmark problem's first stratified fold: X_train, y_train, X_test, y_test."""
    X, y = make_classification(n_samples=1000, n_features=8, n_informative=5, n_redundant=2,
                               n_classes=3, random_state=0)
    train, test = next(StratifiedKFold(5, shuffle=True, random_state=0).split(X, y))
    return X[train], y[train], X[test], y[test]


def time_fuzzy(name: str, params: dict, data: tuple, evaluations: int, profile: bool) -> float:
    Xtr, ytr, Xte, yte = data
    est = FuzzyRuleClassifier(random_state=0, evaluations=evaluations, **params)
    profiler = None
    if profile:
        from pyinstrument import Profiler
        profiler = Profiler()
        profiler.start()
    start, cpu = time.perf_counter(), time.process_time()
    est.fit(Xtr, ytr)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    if profiler is not None:
        profiler.stop()
        out = Path(f"bench_fuzzy_profile_{name.replace('+', '_')}.txt")
        out.write_text(profiler.output_text(unicode=False, color=False))
    st = est.stage_seconds_
    rate = est.n_evaluations_ / st["genetic"] if st["genetic"] > 0 else float("nan")
    print(f"{name:34s} fit {seconds:6.2f} s wall, {cpu:6.2f} s cpu  (mining {st['mining']:.2f}, prescreening {st['prescreening']:.2f}, "
          f"genetic {st['genetic']:.2f})  {rate:7.0f} evaluations/s  rules {est.n_rules_mined_}/"
          f"{est.n_rules_screened_}/{est.n_rules_selected_}  test accuracy {est.score(Xte, yte):.3f}")
    return cpu


def time_sklearn(name: str, est, data: tuple) -> float:
    Xtr, ytr, Xte, yte = data
    start, cpu = time.perf_counter(), time.process_time()
    est.fit(Xtr, ytr)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    print(f"{name:34s} fit {seconds:6.2f} s wall, {cpu:6.2f} s cpu  test accuracy {est.score(Xte, yte):.3f}")
    return cpu


ACCURACY_ROWS = [("winning_rule", {"reasoning": "winning_rule"}), ("additive", {}),
                 ("choquet+power", {"reasoning": "choquet"}),
                 ("sugeno_integral+power", {"reasoning": "sugeno_integral"}),
                 ("choquet_t(product)+power", {"reasoning": "choquet_t"}),
                 ("choquet+sugeno_lambda", {"reasoning": "choquet", "measure": "sugeno_lambda"}),
                 ("choquet+cardinality", {"reasoning": "choquet", "measure": "cardinality"})]


def accuracy_table(evaluations: int) -> None:
    """Print mean 5-fold accuracy per configuration and dataset (same folds for every row)."""
    from sklearn.datasets import load_breast_cancer, load_iris, load_wine
    from sklearn.model_selection import cross_val_score
    from sklearn.neighbors import KNeighborsClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    sets = {"iris": load_iris, "wine": load_wine, "breast_cancer": load_breast_cancer}
    data = {name: load(return_X_y=True) for name, load in sets.items()}
    cv = StratifiedKFold(5, shuffle=True, random_state=0)
    rows = [(name, FuzzyRuleClassifier(random_state=0, evaluations=evaluations, **p)) for name, p in ACCURACY_ROWS]
    rows += [("DecisionTreeClassifier(random_state=0)", DecisionTreeClassifier(random_state=0)),
             ("5-NN (standardised)", make_pipeline(StandardScaler(), KNeighborsClassifier()))]
    print(f"{'configuration':40s}" + "".join(f"{name:>15s}" for name in sets) + "   seconds")
    for label, est in rows:
        start = time.perf_counter()
        means = [cross_val_score(est, *data[name], cv=cv).mean() for name in sets]
        print(f"{label:40s}" + "".join(f"{m:15.4f}" for m in means) + f"   {time.perf_counter() - start:7.1f}",
              flush=True)


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--all", action="store_true", help="also time the other reasoning methods")
    ap.add_argument("--evaluations", type=int, default=15000)
    ap.add_argument("--profile", action="store_true", help="write a pyinstrument profile per fuzzy fit")
    ap.add_argument("--accuracy", action="store_true", help="print the accuracy table on iris, wine, breast_cancer")
    args = ap.parse_args(argv)
    if args.accuracy:
        accuracy_table(args.evaluations)
        return
    data = fold()
    # the measures module is imported on first use; import it now so that no fit pays for it
    import workers.fuzzy.measures  # noqa: F401
    print(f"synthetic 1000 x 8, 3 classes; fold job: {len(data[1])} training rows; "
          f"evaluations={args.evaluations}, population=50; pid {os.getpid()}")
    times = {name: time_fuzzy(name, p, data, args.evaluations, args.profile)
             for name, p in CORE + (EXTRA if args.all else [])}
    tree = time_sklearn("DecisionTreeClassifier", DecisionTreeClassifier(random_state=0), data)
    forest = time_sklearn("RandomForestClassifier(100)", RandomForestClassifier(100, random_state=0, n_jobs=1), data)
    base = times["additive"]
    print("ratios and totals below use cpu seconds (the machine may be shared)")
    print(f"ratio choquet+sugeno_lambda / additive: {times['choquet+sugeno_lambda'] / base:.2f} (target <= 3)")
    print(f"ratio choquet+power / additive:         {times['choquet+power'] / base:.2f}")
    print(f"slowest fuzzy fold job: {max(times.values()):.2f} s (target <= 20 s); "
          f"additive / random forest: {base / forest:.1f}x, additive / tree: {base / tree:.0f}x")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak resident memory of this process: {peak:.0f} MiB (target <= 1024 MiB per job)")


if __name__ == "__main__":
    main()
