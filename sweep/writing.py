"""Files that must be safe: written to a temporary name in the same folder, then renamed."""

from __future__ import annotations

import io
import os
import sys
import tempfile
from pathlib import Path
from typing import Any, Callable


def atomic_write(path: str | Path, write: Callable[[Any], None], *, binary: bool = True) -> None:
    """Call ``write(handle)`` on a temporary file beside ``path``, then move it into place."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent or ".")
    try:
        # mkstemp creates the file 0600; a written file gets what any new file would: 0666 minus the umask
        os.fchmod(fd, 0o666 & ~_umask())
        with os.fdopen(fd, "wb" if binary else "w") as handle:
            write(handle)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def _umask() -> int:
    mask = os.umask(0)  # the only way to read it; set straight back (the process is single-threaded here)
    os.umask(mask)
    return mask


def write_frame(frame: Any, fmt: str, out: str | None) -> None:
    """Write ``frame`` as csv, parquet or json lines to ``out`` or standard output."""
    if fmt == "parquet":
        data = _parquet_bytes(frame)
    elif fmt == "csv":
        data = frame.to_csv(index=False).encode()
    else:
        data = frame.to_json(orient="records", lines=True, double_precision=15).encode()
    if out is None:
        sys.stdout.flush()
        sys.stdout.buffer.write(data)
        sys.stdout.buffer.flush()
    else:
        atomic_write(out, lambda handle: handle.write(data))


def _parquet_bytes(frame: Any) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        table = pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowTypeError, pa.ArrowInvalid):
        # a parameter name shared by workers with different value types: write that column as text
        mixed = [c for c in frame.columns if frame[c].dtype == object
                 and len({type(v) for v in frame[c].dropna()}) > 1]
        frame = frame.assign(**{c: frame[c].map(lambda v: None if v is None else str(v)) for c in mixed})
        table = pa.Table.from_pandas(frame, preserve_index=False)
    # pandas >= 3 hands strings over as large_string; results.arrow.json publishes them as string
    table = table.cast(pa.schema([f.with_type(pa.string()) if f.type == pa.large_string() else f
                                  for f in table.schema], metadata=table.schema.metadata))
    buffer = io.BytesIO()
    pq.write_table(table, buffer)
    return buffer.getvalue()
