"""A progress bar on the terminal for anything that takes more than a second (and nothing for what doesn't)."""

from __future__ import annotations

import sys
import time
from types import TracebackType

from rich.console import Console
from rich.progress import BarColumn, Progress, TaskProgressColumn, TextColumn, TimeRemainingColumn

SHOW_AFTER_S = 1.0


class Bar:
    """Call it with (done, total) as work goes on; a bar appears on stderr once a second has passed, if stderr
    is a terminal, and goes away when the work is done."""

    def __init__(self, label: str) -> None:
        self.label = label
        self._started = time.monotonic()
        self._bar: Progress | None = None
        self._task = None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None:
            if time.monotonic() - self._started < SHOW_AFTER_S or not sys.stderr.isatty():
                return
            self._bar = Progress(TextColumn("{task.description}"), BarColumn(), TaskProgressColumn(),
                                 TimeRemainingColumn(), console=Console(stderr=True), transient=True)
            self._bar.start()
            self._task = self._bar.add_task(self.label, total=total or None)
        self._bar.update(self._task, completed=done, total=total or None)

    def __enter__(self) -> Bar:
        return self

    def __exit__(self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None:
        if self._bar is not None:
            self._bar.stop()
