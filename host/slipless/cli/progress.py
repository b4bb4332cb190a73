"""A progress bar over the inputs being read (bytes), drawn with rich.

io.inputs.feed_all takes any object with `task(name, total) -> advance(n)`
and `close()`; this is the command line's. The bar appears only once the
first task starts, so small inputs print nothing.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from rich.console import Console
from rich.progress import BarColumn, DownloadColumn, Progress, TimeRemainingColumn


class BytesProgress:
    def __init__(self, console: Console) -> None:
        self.console = console
        self._bar: Progress | None = None

    def task(self, name: str, total: int) -> Callable[[int], None]:
        if self._bar is None:
            self._bar = Progress("[progress.description]{task.description}", BarColumn(),
                                 DownloadColumn(), TimeRemainingColumn(), console=self.console)
            self._bar.start()
        bar = self._bar
        task = bar.add_task(name, total=total)

        def advance(n: int) -> None:
            bar.advance(task, n)

        return advance

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()
            self._bar = None


def bytes_progress(console: Any) -> BytesProgress | None:
    """A bar on `console`, or None (no console: quiet)."""
    return None if console is None else BytesProgress(console)
