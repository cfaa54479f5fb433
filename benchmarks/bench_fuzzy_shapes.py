"""Per-stage times of one default FARC-HD fold job on high-dimensional and large problems, beside a forest.

Run: ``python benchmarks/bench_fuzzy_shapes.py [--quick] [--evaluations N] [--problems digits,5000x40]``

Problems (the first fold of ``StratifiedKFold(5, shuffle=True, random_state=0)``):
scikit-learn's digits (1,797 x 64, 10 classes), ``make_classification(5000,
40, n_informative=10, n_classes=3, random_state=0)`` and
``make_classification(20000, 10, n_informative=6, n_classes=3,
random_state=0)``. For each, one fold job at default parameters per
reasoning method (additive, Choquet + power, Choquet + Sugeno lambda)
prints CPU seconds of mining (with the partitions), prescreening, the
genetic stage and the whole fit, the share of mining + prescreening, and
the ratio of the fit to a ``RandomForestClassifier(random_state=0)`` fit on
the same fold. One thread (BLAS threads set to 1, as a fold job gets); CPU
seconds, which a shared machine disturbs less than wall seconds.

Targets (issue 11): digits <= 20 s per fold job for every method; mining +
prescreening <= 25 % of a fit on every shape. ``--quick``: digits only,
additive only.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

from sklearn.datasets import load_digits, make_classification  # noqa: E402
from sklearn.ensemble import RandomForestClassifier  # noqa: E402
from sklearn.model_selection import StratifiedKFold  # noqa: E402

from workers.fuzzy import FuzzyRuleClassifier  # noqa: E402

METHODS = [("additive", {}), ("choquet+power", {"reasoning": "choquet", "measure": "power"}),
           ("choquet+sugeno_lambda", {"reasoning": "choquet", "measure": "sugeno_lambda"})]


def problems(quick: bool):
    yield "digits 1797x64", load_digits(return_X_y=True)
    if not quick:
        yield "synthetic 5000x40", make_classification(5000, 40, n_informative=10, n_classes=3, random_state=0)
        yield "synthetic 20000x10", make_classification(20000, 10, n_informative=6, n_classes=3, random_state=0)


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="digits and additive only")
    ap.add_argument("--evaluations", type=int, default=15000)
    ap.add_argument("--problems", default="digits,5000x40,20000x10",
                    help="which problems, by a part of their names (comma-separated)")
    args = ap.parse_args(argv)
    methods = METHODS[:1] if args.quick else METHODS
    print(f"{'problem':20s} {'model':22s} {'mining':>7s} {'prescr':>7s} {'genetic':>8s} {'fit':>7s} "
          f"{'mine+pre':>8s} {'x forest':>8s} {'accuracy':>8s}   rules mined/screened/selected")
    wanted = args.problems.split(",")
    for name, (X, y) in problems(args.quick):
        if not any(w in name for w in wanted):
            continue
        train, test = next(StratifiedKFold(5, shuffle=True, random_state=0).split(X, y))
        forest = RandomForestClassifier(random_state=0)
        cpu = time.process_time()
        forest.fit(X[train], y[train])
        t_forest = time.process_time() - cpu
        print(f"{name:20s} {'random_forest':22s} {'':>7s} {'':>7s} {'':>8s} {t_forest:7.2f} {'':>8s} "
              f"{1.0:8.2f} {forest.score(X[test], y[test]):8.3f}", flush=True)
        for label, params in methods:
            est = FuzzyRuleClassifier(random_state=0, evaluations=args.evaluations, **params)
            cpu = time.process_time()
            est.fit(X[train], y[train])
            total = time.process_time() - cpu
            st = est.stage_cpu_seconds_
            share = (st["mining"] + st["prescreening"]) / total
            print(f"{name:20s} {label:22s} {st['mining']:7.2f} {st['prescreening']:7.2f} {st['genetic']:8.2f} "
                  f"{total:7.2f} {share:8.0%} {total / t_forest:8.1f} {est.score(X[test], y[test]):8.3f}   "
                  f"{est.n_rules_mined_}/{est.n_rules_screened_}/{est.n_rules_selected_}", flush=True)
    print("CPU seconds, one thread; targets: digits fit <= 20 s, mining + prescreening <= 25 % of a fit")


if __name__ == "__main__":
    main()
