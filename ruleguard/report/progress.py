"""A progress bar on a terminal's standard error during long runs.

Only the command line creates one, and only when standard error is a
terminal, so machine formats on standard output are never touched.
"""

from __future__ import annotations

from typing import TextIO


class TerminalProgress:
    """Callable ``(done, total, loop_name)`` drawing a rich progress bar.

    The bar appears only once a run has more than ``min_loops`` loops, so a
    pre-commit hook on a couple of changed loops prints nothing extra.
    """

    def __init__(self, stream: TextIO, min_loops: int = 4) -> None:
        self._stream = stream
        self._min_loops = min_loops
        self._progress = None
        self._task = None

    def __call__(self, done: int, total: int, name: str) -> None:
        if total < self._min_loops:
            return
        if self._progress is None:
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn

            console = Console(file=self._stream, stderr=True)
            self._progress = Progress(
                TextColumn("analysing"),
                BarColumn(),
                TextColumn("{task.completed}/{task.total} loops"),
                TextColumn("{task.description}"),
                console=console,
                transient=True,
            )
            self._progress.start()
            self._task = self._progress.add_task(name, total=total)
        self._progress.update(self._task, completed=done, description=name)
        if done >= total:
            self._progress.stop()
