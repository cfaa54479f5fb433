"""Worker processes end with their driver, however it ends.

A worker process (loky's, the embedded dask cluster's) watches its parent, the
driver: when the parent is gone the worker is re-parented, its parent pid
changes, and it exits within :data:`INTERVAL` seconds (even a SIGKILLed driver
leaves no worker running on, holding the terminal's output). Ctrl-C is the
driver's to handle (it stops the workers once it has given their jobs back):
a worker ignores SIGINT, which a terminal sends to the whole process group.
Installed as
loky's worker initializer (:func:`watch_parent`) and as a dask worker preload
(:func:`dask_setup`).
"""

from __future__ import annotations

import os
import signal
import threading
import time
from typing import Any

#: seconds between two looks at the parent
INTERVAL = 0.5


def watch_parent(interval: float = INTERVAL) -> None:
    """Exit this process (at once, code 1) as soon as its parent process is gone; ignore SIGINT."""
    parent = os.getppid()
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGINT, signal.SIG_IGN)

    def watch() -> None:
        while True:
            time.sleep(interval)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="foldsweep-lifeline", daemon=True).start()


def dask_setup(worker: Any) -> None:
    """dask's preload hook: the worker process watches the driver."""
    watch_parent()
