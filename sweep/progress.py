"""Progress of a long run: a live bar on a terminal, plain periodic lines otherwise.

Both show done/total, jobs per second, the estimated time left and the
failures so far. ``FOLDSWEEP_PROGRESS_SECONDS`` sets the interval of the
plain lines (default 10 s).
"""

from __future__ import annotations

import os
import sys
import time
from typing import Any, TextIO


def format_duration(seconds: float) -> str:
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}h{minutes:02d}m" if hours else f"{minutes}m{secs:02d}s"


class Progress:
    """Counts jobs as they finish; ``mode`` is "auto", "bar", "lines" or "none"."""

    def __init__(self, total: int, done: int, failed: int, *, mode: str = "auto",
                 stream: TextIO | None = None, inner: tuple[int, int] | None = None) -> None:
        self.stream = stream or sys.stderr
        self.total, self.done, self.failed = total, done, failed
        #: (total, finished) of the inner jobs of nested selection among the jobs, counted apart; None without
        self.inner = list(inner) if inner is not None else None
        self.start_done = done + failed
        self.started = time.monotonic()
        self.interval = float(os.environ.get("FOLDSWEEP_PROGRESS_SECONDS", "10"))
        self.last_line = self.started
        if mode == "auto":
            mode = "bar" if self.stream.isatty() else "lines"
        self.mode = mode
        self._bar: Any = None
        if mode == "bar":
            self._start_bar()

    def _start_bar(self) -> None:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress as Bar, TextColumn, TimeRemainingColumn

        self._bar = Bar(TextColumn("[bold]jobs"), BarColumn(), MofNCompleteColumn(),
                        TextColumn("{task.fields[rate]}"), TextColumn("ETA"), TimeRemainingColumn(),
                        TextColumn("[red]{task.fields[failed]} failed"), TextColumn("{task.fields[inner]}"),
                        console=Console(file=self.stream))
        self._task = self._bar.add_task("jobs", total=self.total, completed=self.done + self.failed,
                                        rate="", failed=self.failed, inner=self._inner_text())
        self._bar.start()

    def rate(self) -> float:
        elapsed = time.monotonic() - self.started
        return (self.done + self.failed - self.start_done) / elapsed if elapsed > 0 else 0.0

    def summary(self) -> str:
        finished = self.done + self.failed
        rate = self.rate()
        left = self.total - finished
        eta = format_duration(left / rate) if rate > 0 and left else ("0m00s" if not left else "?")
        pct = 100.0 * finished / self.total if self.total else 100.0
        inner = f" ({self._inner_text()})" if self.inner is not None else ""
        return (f"{finished}/{self.total} jobs ({pct:.1f}%){inner}, {self.failed} failed, "
                f"{rate:.2f} jobs/s, ETA {eta}")

    def update(self, done: int = 0, failed: int = 0, inner: int = 0) -> None:
        """Count finished jobs; ``inner`` of them (done or failed) are inner jobs."""
        self.done += done
        self.failed += failed
        if self.inner is not None:
            self.inner[1] += inner
        now = time.monotonic()
        if self._bar is not None:
            self._bar.update(self._task, completed=self.done + self.failed, failed=self.failed, inner=self._inner_text(),
                             rate=f"{self.rate():.2f}/s")
        elif self.mode == "lines" and now - self.last_line >= self.interval:
            self.last_line = now
            print(f"progress: {self.summary()}", file=self.stream, flush=True)

    def _inner_text(self) -> str:
        return f"inner {self.inner[1]}/{self.inner[0]}" if self.inner is not None else ""

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()
