"""Generate the demo data, deterministically: ``python sweeps/make_demo_data.py [--out DIR]``.

The scenario is invented: seedling trays in the fictional Brackenfold
research glasshouse, each grown under one of three made-up growth regimes
(``regime_a``, ``regime_b``, ``regime_c``). From what was measured on a tray
(leaf span, stem height, chlorophyll index, root mass, days to the first true
leaf, and the bench it stood on) a classifier predicts the regime. No real
people, products or measurements are involved.

The class-dependent distributions overlap on purpose, so that a fuzzy rule
classifier lands at roughly 75-90% accuracy rather than at 100%. The file is
written with fixed decimals by the csv module (not by pandas), so its bytes
depend only on this script and numpy's default generator; a test regenerates
it and compares bytes with the shipped copy in ``sweeps/data/``.
"""

from __future__ import annotations

import argparse
import csv
import io
from pathlib import Path

import numpy as np

SEED = 20261202
REGIMES = ("regime_a", "regime_b", "regime_c")
ROWS_PER_REGIME = (126, 120, 114)  # 360 trays, mildly unbalanced
BENCHES = ("north", "south", "centre")
#: per regime: how likely a tray stood on the north, south, centre bench
BENCH_PROBABILITIES = {
    "regime_a": (0.45, 0.25, 0.30),
    "regime_b": (0.30, 0.40, 0.30),
    "regime_c": (0.25, 0.30, 0.45),
}
#: per regime: (mean, standard deviation) of each normal measurement
MEANS = {
    #            leaf_span_mm  stem_height_mm  chlorophyll_index  log root_mass_g
    "regime_a": ((41.0, 6.0), (84.0, 12.0), (31.5, 3.6), (0.30, 0.22)),
    "regime_b": ((49.0, 6.5), (94.0, 13.0), (37.0, 3.8), (0.08, 0.22)),
    "regime_c": ((46.0, 6.0), (108.0, 13.0), (30.0, 3.8), (0.55, 0.24)),
}
#: per regime: mean days to the first true leaf beyond the first 4
DAYS_MEAN = {"regime_a": 5.0, "regime_b": 3.0, "regime_c": 4.0}
#: the south bench is warmer: stems grow taller there
SOUTH_STEM_BONUS_MM = 5.0
COLUMNS = ("tray_id", "bench", "leaf_span_mm", "stem_height_mm", "chlorophyll_index",
           "root_mass_g", "days_to_true_leaf", "regime")


def generate_rows(seed: int = SEED) -> list[tuple]:
    """Return the rows (without header) of the glasshouse table, in a shuffled order."""
    rng = np.random.default_rng(seed)
    rows = []
    for regime, count in zip(REGIMES, ROWS_PER_REGIME):
        bench = rng.choice(len(BENCHES), size=count, p=BENCH_PROBABILITIES[regime])
        (leaf, stem, chlorophyll, log_root) = (rng.normal(m, s, size=count) for m, s in MEANS[regime])
        stem = stem + SOUTH_STEM_BONUS_MM * (bench == BENCHES.index("south"))
        days = 4 + rng.poisson(DAYS_MEAN[regime], size=count)
        for i in range(count):
            rows.append((BENCHES[bench[i]], leaf[i], stem[i], chlorophyll[i],
                         np.exp(log_root[i]), days[i], regime))
    order = rng.permutation(len(rows))
    return [(f"BF-T{k + 1:04d}", *rows[j]) for k, j in enumerate(order)]


def glasshouse_csv(seed: int = SEED) -> bytes:
    """Return the CSV file's bytes (UTF-8, ``\\n`` line ends, fixed decimals)."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(COLUMNS)
    for tray, bench, leaf, stem, chlorophyll, root, days, regime in generate_rows(seed):
        writer.writerow((tray, bench, f"{leaf:.1f}", f"{stem:.1f}", f"{chlorophyll:.2f}",
                         f"{root:.3f}", int(days), regime))
    return out.getvalue().encode("utf-8")


def write_demo_data(out_dir: Path) -> Path:
    """Write ``glasshouse.csv`` into ``out_dir`` (via a temporary name) and return its path."""
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / "glasshouse.csv"
    tmp = out_dir / ".glasshouse.csv.tmp"
    tmp.write_bytes(glasshouse_csv())
    tmp.replace(path)
    return path


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent / "data",
                        help="folder to write glasshouse.csv into (default: sweeps/data)")
    args = parser.parse_args(argv)
    print(write_demo_data(args.out))


if __name__ == "__main__":
    main()
