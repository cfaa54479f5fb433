"""The sweep spec: one TOML file that says what to run.

::

    name = "glasshouse-demo"          # the sweep's name (default: the file's stem)
    store = "demo.sqlite"             # optional: a path beside the spec, or any SQLAlchemy URL
    time_limit = 600                  # optional: seconds per fold job
    max_attempts = 3                  # optional: tries for a job whose worker process died
    memory_limit = "4GiB"             # optional: per dask worker (default: the machine's memory split evenly)

    [folds]                           # stratified k-fold, repeated, seeded
    k = 5
    repeats = 1
    seed = 0

    [selection]                       # optional: nested selection (sweep.nested)
    inner_k = 3                       # stratified inner folds inside each outer training part
    metric = "accuracy"               # what the inner folds maximise: accuracy | balanced_accuracy | kappa

    [[dataset]]                       # see sweep.datasets for the dataset keys
    name = "iris"
    builtin = "iris"

    [[model]]                         # one or more model blocks
    name = "fuzzy"                    # optional label
    worker = "fuzzy_rules"            # a registered worker, or "package.module:attribute"
    fixed = { evaluations = 2000 }    # parameters held fixed
    grid = { reasoning = ["additive", "choquet"], measure = ["power", "sugeno_lambda"] }
    exclude = [ { reasoning = "additive", measure = "sugeno_lambda" } ]  # combinations to skip
    applies = { measure = { reasoning = ["choquet"] } }  # measure varies only where reasoning is choquet
    label = "FRM {reasoning} {measure}"   # optional: how reports name this block's configurations
    names = [ { name = "WR", reasoning = "winning_rule" } ]  # optional: names of single configurations

Everything is checked against the workers' parameter declarations before
anything runs; nothing else in foldsweep parses a spec. Names (the sweep's,
datasets', model blocks', workers') are 1 to :data:`NAME_LIMIT` characters on
every backend (the tracker's columns); a spec plans at most
:data:`MAX_CONFIGURATIONS` configurations and :data:`MAX_JOBS` jobs, counted
from the grids before their exclude rules (split a larger sweep into several
specs on one store: they share the jobs they have in common).

A ``worker = "package.module:attribute"`` names any importable module:
importing it to read its parameters runs its code, with the user's rights.
"""

from __future__ import annotations

import difflib
import hashlib
import itertools
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from sweep.errors import SpecError

TOP_KEYS = ("name", "description", "store", "time_limit", "max_attempts", "memory_limit", "folds", "selection",
            "dataset", "model")
FOLD_KEYS = ("k", "repeats", "seed")
SELECTION_KEYS = ("inner_k", "metric")
#: what the inner folds of a nested selection may maximise (result columns where higher is better)
SELECTION_METRICS = ("accuracy", "balanced_accuracy", "kappa")
MODEL_KEYS = ("name", "worker", "fixed", "grid", "exclude", "applies", "label", "names")

#: longest sweep, dataset, model block and worker name: the tracker's String(200) columns
NAME_LIMIT = 200
#: longest worker version (the tracker's String(64) column)
VERSION_LIMIT = 64
#: the largest seed numpy's generators take
MAX_SEED = 2**32 - 1
#: a year: the longest time_limit (a timer's wait must stay finite)
MAX_TIME_LIMIT = 365 * 24 * 3600.0
MAX_ATTEMPTS = 1000
#: configurations of one spec, counted before exclude rules (each is held in memory while planning)
MAX_CONFIGURATIONS = 100_000
#: jobs of one spec (configurations x datasets x repeats x folds), counted before exclude rules
MAX_JOBS = 2_000_000


@dataclass(frozen=True)
class FoldScheme:
    """Stratified k-fold, repeated ``repeats`` times, shuffled with ``seed``."""

    k: int = 5
    repeats: int = 1
    seed: int = 0

    @property
    def key(self) -> str:
        """The scheme's identity, part of every job key."""
        return f"stratified-k{self.k}-r{self.repeats}-s{self.seed}"


@dataclass(frozen=True)
class Selection:
    """Nested selection: ``inner_k`` stratified inner folds in each outer training part, maximising ``metric``."""

    inner_k: int = 3
    metric: str = "accuracy"


@dataclass(frozen=True)
class ModelBlock:
    """One model block: a worker, fixed parameters, a grid, and its rules."""

    label: str
    worker: str
    fixed: Mapping[str, Any]
    grid: Mapping[str, tuple[Any, ...]]
    exclude: tuple[Mapping[str, tuple[Any, ...]], ...]
    applies: Mapping[str, Mapping[str, tuple[Any, ...]]]
    #: the block's ``label`` template for readable configuration names (sweep.naming), None: derived
    name_template: str | None = None
    #: the block's ``names``: (name, rule) pairs, the first matching rule names a configuration
    names: tuple[tuple[str, Mapping[str, tuple[Any, ...]]], ...] = ()


@dataclass(frozen=True)
class Spec:
    """A parsed and validated sweep spec."""

    path: Path
    name: str
    store_url: str
    folds: FoldScheme
    datasets: tuple[Mapping[str, Any], ...]
    models: tuple[ModelBlock, ...]
    time_limit: float | None
    max_attempts: int
    #: per-worker memory limit for the dask backend ("4GiB"), None for the machine's share
    memory_limit: str | None
    #: sha256 of the file's bytes (recorded with the sweep)
    digest: str
    #: the [selection] section (nested selection), None without one
    selection: Selection | None = None


def load_spec(path: str | Path) -> Spec:
    """Read and validate a spec file, or raise :class:`SpecError` naming the file and key."""
    path = Path(path)
    doc, digest = _read(path)
    return parse_spec(doc, path, digest)


def _read(path: Path) -> tuple[dict[str, Any], str]:
    """The TOML document at ``path`` and the sha256 of its bytes."""
    try:
        raw_bytes = path.read_bytes()
    except OSError as exc:
        raise SpecError(f"{path}: cannot read the spec: {exc.strerror or exc}") from None
    try:
        doc = tomllib.loads(raw_bytes.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise SpecError(f"{path}: not valid TOML: {exc}") from None
    return doc, hashlib.sha256(raw_bytes).hexdigest()


def parse_spec(doc: Mapping[str, Any], path: Path, digest: str = "") -> Spec:
    """Validate an already-parsed TOML document as a spec."""
    where = str(path)
    _check_keys(doc, TOP_KEYS, where, "")
    name = _name(doc.get("name", path.stem), where, "name")
    spec = Spec(
        path=path,
        name=name,
        store_url=_store_url(doc.get("store"), path),
        folds=_folds(doc.get("folds", {}), where),
        datasets=_datasets(doc.get("dataset"), where),
        models=_models(doc.get("model"), where),
        time_limit=_time_limit(doc.get("time_limit"), where),
        max_attempts=_int_between(doc.get("max_attempts", 3), 1, MAX_ATTEMPTS, where, "max_attempts"),
        memory_limit=_memory_limit(doc.get("memory_limit"), where),
        digest=digest,
        selection=_selection(doc.get("selection"), where),
    )
    _check_size(spec, where)
    return spec


def nearest(name: str, valid: Any) -> str:
    """' (did you mean 'x'?)' for the closest valid name, or ''."""
    near = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.6)
    return f" (did you mean {near[0]!r}?)" if near else ""


def _check_keys(table: Any, allowed: tuple[str, ...], where: str, prefix: str) -> None:
    if not isinstance(table, Mapping):
        raise SpecError(f"{where}: {prefix.rstrip('.') or 'the spec'} must be a table")
    for key in table:
        if key not in allowed:
            raise SpecError(f"{where}: unknown key {prefix + str(key)!r}{nearest(key, allowed)}; "
                            f"allowed: {', '.join(allowed)}")


def _typed(value: Any, kind: type, where: str, key: str, words: str) -> Any:
    if not isinstance(value, kind) or isinstance(value, bool) and kind is not bool:
        raise SpecError(f"{where}: {key} must be {words}, got {value!r}")
    return value


def _name(value: Any, where: str, key: str) -> str:
    """A name stored in the tracker: a non-empty string of at most NAME_LIMIT characters."""
    if not isinstance(value, str) or not value.strip() or len(value) > NAME_LIMIT:
        got = f"{len(value)} characters" if isinstance(value, str) and value.strip() else repr(value)
        raise SpecError(f"{where}: {key} must be a non-empty string of at most {NAME_LIMIT} characters, got {got}")
    return value


def _int_between(value: Any, low: int, high: int, where: str, key: str) -> int:
    _typed(value, int, where, key, f"an integer from {low} to {high}")
    if not low <= value <= high:
        raise SpecError(f"{where}: {key} must be an integer from {low} to {high}, got {value!r}")
    return int(value)


def _int_at_least(value: Any, low: int, where: str, key: str) -> int:
    _typed(value, int, where, key, f"an integer >= {low}")
    if value < low:
        raise SpecError(f"{where}: {key} must be an integer >= {low}, got {value!r}")
    return int(value)


def _store_url(value: Any, path: Path) -> str:
    if value is None:
        return f"sqlite:///{_url_path(path.resolve().with_suffix('.sqlite'))}"
    _typed(value, str, str(path), "store", "a path or an SQLAlchemy URL")
    if "://" in value:
        return value
    return f"sqlite:///{_url_path((path.resolve().parent / value).resolve())}"


def _url_path(path: Path) -> str:
    """A file path as the path part of a URL: "%", "?" and "#" of a folder's name stay part of the path."""
    return str(path).replace("%", "%25").replace("?", "%3F").replace("#", "%23")


def _time_limit(value: Any, where: str) -> float | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value <= MAX_TIME_LIMIT:
        raise SpecError(f"{where}: time_limit must be a number of seconds > 0 and at most {MAX_TIME_LIMIT:.0f} "
                        f"(a year), got {value!r}")
    return float(value)


def _memory_limit(value: Any, where: str) -> str | None:
    import re

    if value is None:
        return None
    if not isinstance(value, str) or not re.fullmatch(r"\s*\d+(\.\d+)?\s*(B|kB|KiB|MB|MiB|GB|GiB|TB|TiB)\s*", value):
        raise SpecError(f"{where}: memory_limit must be a size such as \"4GiB\" or \"1500MB\", got {value!r}")
    return value.replace(" ", "")


def _check_size(spec: Spec, where: str) -> None:
    """Refuse at once a spec too large to plan (before any grid is expanded)."""
    configurations = sum(math.prod(len(v) for v in m.grid.values()) for m in spec.models)
    if configurations > MAX_CONFIGURATIONS:
        raise SpecError(f"{where}: the grids make {configurations:,} configurations (before exclude rules); the "
                        f"limit is {MAX_CONFIGURATIONS:,} per spec; split the grid over several specs that share "
                        "one store")
    jobs = configurations * len(spec.datasets) * spec.folds.repeats * spec.folds.k
    if jobs > MAX_JOBS:
        raise SpecError(f"{where}: the spec plans {jobs:,} jobs ({configurations:,} configurations x "
                        f"{len(spec.datasets)} datasets x {spec.folds.repeats} repeats x {spec.folds.k} folds, "
                        f"before exclude rules); the limit is {MAX_JOBS:,} per spec; split it over several specs "
                        "that share one store")


def _folds(table: Any, where: str) -> FoldScheme:
    _check_keys(table, FOLD_KEYS, where, "folds.")
    return FoldScheme(
        k=_int_at_least(table.get("k", 5), 2, where, "folds.k"),
        repeats=_int_at_least(table.get("repeats", 1), 1, where, "folds.repeats"),
        seed=_int_between(table.get("seed", 0), 0, MAX_SEED, where, "folds.seed"),
    )


def _selection(table: Any, where: str) -> Selection | None:
    if table is None:
        return None
    _check_keys(table, SELECTION_KEYS, where, "selection.")
    metric = table.get("metric", "accuracy")
    if metric not in SELECTION_METRICS:
        raise SpecError(f"{where}: selection.metric must be one of {', '.join(SELECTION_METRICS)}, got {metric!r}"
                        f"{nearest(str(metric), SELECTION_METRICS)}")
    return Selection(inner_k=_int_at_least(table.get("inner_k", 3), 2, where, "selection.inner_k"), metric=metric)


def _datasets(entries: Any, where: str) -> tuple[Mapping[str, Any], ...]:
    from sweep.datasets import validate_entry

    if not entries:
        raise SpecError(f"{where}: no [[dataset]] given; a sweep needs at least one dataset")
    if not isinstance(entries, list):
        raise SpecError(f"{where}: dataset must be an array of tables ([[dataset]])")
    seen: set[str] = set()
    for i, entry in enumerate(entries):
        label = f"{where}: dataset[{i}]"
        if not isinstance(entry, Mapping) or not isinstance(entry.get("name"), str) or not entry["name"].strip():
            raise SpecError(f"{label}: every dataset needs a name (a non-empty string)")
        _name(entry["name"], label, "name")
        if entry["name"] in seen:
            raise SpecError(f"{label}: dataset name {entry['name']!r} is used twice")
        seen.add(entry["name"])
        validate_entry(entry, f"{label} {entry['name']!r}")
    return tuple(entries)


def _models(blocks: Any, where: str) -> tuple[ModelBlock, ...]:
    if not blocks:
        raise SpecError(f"{where}: no [[model]] given; a sweep needs at least one model block")
    if not isinstance(blocks, list):
        raise SpecError(f"{where}: model must be an array of tables ([[model]])")
    models = tuple(_model(block, f"{where}: model[{i}]") for i, block in enumerate(blocks))
    labels = [m.label for m in models]
    for label in labels:
        if labels.count(label) > 1:
            raise SpecError(f"{where}: model name {label!r} is used twice; give each block its own name")
    return models


def _model(block: Any, where: str) -> ModelBlock:
    from workers.registry import get_worker

    _check_keys(block, MODEL_KEYS, where, "")
    if "worker" not in block:
        raise SpecError(f"{where}: missing key 'worker' (the kind of fold job, e.g. 'fuzzy_rules')")
    name = _name(block["worker"], where, "worker")
    if ":" in name and not re.fullmatch(r"[A-Za-z_]\w*(\.[A-Za-z_]\w*)*:[A-Za-z_]\w*", name):
        raise SpecError(f"{where}: worker {name!r} is not of the form \"package.module:attribute\" "
                        "(dotted Python names, no relative import)")
    try:
        worker = get_worker(name)
        declared = worker.params
    except KeyError as exc:
        raise SpecError(f"{where}: worker: {exc.args[0]}") from None
    except Exception as exc:  # noqa: BLE001 - importing a plug-in runs its code: whatever it raises
        detail = " ".join(f"{type(exc).__name__}: {exc}".split())[:200]
        raise SpecError(f"{where}: worker {name!r}: importing its module failed ({detail})") from None
    if not isinstance(worker.version, str) or not 0 < len(worker.version) <= VERSION_LIMIT:
        raise SpecError(f"{where}: worker {name!r} declares version {worker.version!r}; a worker version is a "
                        f"string of 1 to {VERSION_LIMIT} characters (the tracker's column)")
    where = f"{where} {block.get('name', name)!r}"
    fixed = _table(block.get("fixed", {}), where, "fixed")
    grid = _table(block.get("grid", {}), where, "grid")
    fixed_checked = {k: _param(declared, name, k, v, where, f"fixed.{k}") for k, v in fixed.items()}
    grid_checked = {k: _grid_values(declared, name, k, v, where) for k, v in grid.items()}
    for key in fixed_checked.keys() & grid_checked.keys():
        raise SpecError(f"{where}: {key!r} is both in fixed and in grid; keep it in one of them")
    _cross_check(worker, fixed_checked, grid_checked, where)
    return ModelBlock(
        label=_name(block.get("name", name), where, "name"),
        worker=name,
        fixed=fixed_checked,
        grid=grid_checked,
        exclude=tuple(_rule(declared, name, r, where, f"exclude[{i}]")
                      for i, r in enumerate(_list(block.get("exclude", []), where, "exclude"))),
        applies={k: _rule(declared, name, cond, where, f"applies.{k}", target=k)
                 for k, cond in _table(block.get("applies", {}), where, "applies").items()},
        name_template=_name_template(block.get("label"), declared, where),
        names=tuple(_named_rule(declared, name, entry, where, f"names[{i}]")
                    for i, entry in enumerate(_list(block.get("names", []), where, "names"))),
    )


def _cross_check(worker: Any, fixed: Mapping[str, Any], grid: Mapping[str, tuple[Any, ...]], where: str) -> None:
    """The worker's own check across parameters, on every grid combination (defaults filled in)."""
    if worker.check is None:
        return
    base = {k: p.default for k, p in worker.params.items()} | dict(fixed)
    for values in itertools.product(*grid.values()):
        problems = worker.check(base | dict(zip(grid, values)))
        if problems:
            at = "fixed/grid" if grid else "fixed"
            raise SpecError(f"{where}: {at}: {problems[0]}")


def _name_template(value: Any, declared: Mapping[str, Any], where: str) -> str | None:
    """A ``label`` template: text with {parameter} fields naming the worker's parameters."""
    import string

    if value is None:
        return None
    _typed(value, str, where, "label", "a string such as \"FRM {reasoning}\"")
    try:
        fields = [f for _, f, spec, conv in string.Formatter().parse(value) if f is not None]
    except ValueError as exc:
        raise SpecError(f"{where}: label {value!r} is not a valid template ({exc}); "
                        "write parameters as {name}, braces as {{ }}") from None
    for f in fields:
        if f not in declared:
            raise SpecError(f"{where}: label: {{{f}}} is not a parameter{nearest(f, declared)}; "
                            f"parameters: {', '.join(sorted(declared))}")
    return value


def _named_rule(declared: Mapping[str, Any], worker: str, entry: Any, where: str,
                at: str) -> tuple[str, Mapping[str, tuple[Any, ...]]]:
    if not isinstance(entry, Mapping) or not isinstance(entry.get("name"), str) or not entry["name"].strip():
        raise SpecError(f"{where}: {at} must be a table with a non-empty name and parameter = value pairs, "
                        "e.g. { name = \"WR\", reasoning = \"winning_rule\" }")
    rule = {k: v for k, v in entry.items() if k != "name"}
    return entry["name"].strip(), (_rule(declared, worker, rule, where, at) if rule else {})


def _table(value: Any, where: str, key: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise SpecError(f"{where}: {key} must be a table of parameter = value")
    return value


def _list(value: Any, where: str, key: str) -> list[Any]:
    if not isinstance(value, list):
        raise SpecError(f"{where}: {key} must be an array of tables")
    return value


def _param(declared: Mapping[str, Any], worker: str, key: str, value: Any, where: str, at: str) -> Any:
    if key not in declared:
        raise SpecError(f"{where}: {at}: unknown parameter of worker {worker!r}{nearest(key, declared)}; "
                        f"parameters: {', '.join(sorted(declared))}")
    try:
        return declared[key].check(value)
    except ValueError as exc:
        raise SpecError(f"{where}: {at} {exc}") from None


def _grid_values(declared: Mapping[str, Any], worker: str, key: str, values: Any, where: str) -> tuple[Any, ...]:
    if not isinstance(values, list):
        values = [values]
    if not values:
        raise SpecError(f"{where}: grid.{key} is empty; give at least one value "
                        f"({declared[key].allowed() if key in declared else 'a list'})")
    checked = tuple(_param(declared, worker, key, v, where, f"grid.{key}") for v in values)
    if len(set(map(repr, checked))) != len(checked):
        raise SpecError(f"{where}: grid.{key} lists a value twice: {values!r}")
    return checked


def _rule(declared: Mapping[str, Any], worker: str, rule: Any, where: str, at: str,
          target: str | None = None) -> Mapping[str, tuple[Any, ...]]:
    if target is not None and target not in declared:
        raise SpecError(f"{where}: {at}: unknown parameter of worker {worker!r}{nearest(target, declared)}; "
                        f"parameters: {', '.join(sorted(declared))}")
    if not isinstance(rule, Mapping) or not rule:
        raise SpecError(f"{where}: {at} must be a non-empty table of parameter = value or [values]")
    return {k: tuple(_param(declared, worker, k, v, where, f"{at}.{k}")
                     for v in (vs if isinstance(vs, list) else [vs])) for k, vs in rule.items()}
