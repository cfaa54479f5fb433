"""Cluster helpers: refusing SQLite on network file systems.

SQLite's locking is unreliable on network file systems (NFS, Lustre, SMB
and the like; see SQLite's own documentation, "SQLite Over a Network"):
several hosts sharing one SQLite file can corrupt it. For many hosts use a
PostgreSQL store; this module refuses an SQLite store on such a mount when
``/proc/mounts`` shows one.
"""

from __future__ import annotations

import os
from pathlib import Path

from sweep.errors import StoreError

NETWORK_FILE_SYSTEMS = frozenset({"nfs", "nfs4", "lustre", "cifs", "smbfs", "smb3", "fuse.sshfs",
                                  "gpfs", "beegfs", "ceph", "glusterfs", "fuse.glusterfs", "9p"})


def mount_type(path: str | Path, mounts: str = "/proc/mounts") -> str | None:
    """The file system type of the mount holding ``path``, or None when it cannot be told."""
    try:
        with open(mounts) as handle:
            table = [line.split()[:3] for line in handle if len(line.split()) >= 3]
    except OSError:
        return None
    target = os.path.realpath(path)
    best, kind = "", None
    for _, point, fstype in table:
        point = point.replace("\\040", " ")
        if (target == point or target.startswith(point.rstrip("/") + "/")) and len(point) >= len(best):
            best, kind = point, fstype
    return kind


def refuse_network_sqlite(url: str, mounts: str = "/proc/mounts") -> None:
    """Raise :class:`StoreError` for an SQLite store on a network file system."""
    if not url.startswith("sqlite:///"):
        return
    path = Path(url[len("sqlite:///"):])
    kind = mount_type(path.parent if not path.exists() else path, mounts)
    if kind in NETWORK_FILE_SYSTEMS:
        raise StoreError(f"{path}: an SQLite store on a network file system ({kind}) can be corrupted by "
                         "concurrent access; use a local path, or a PostgreSQL URL for several hosts")
