"""The progress display of every command: one bar per stage, rows (or columns) per second.

Workflows report progress as ``progress(stage, done, total)`` (``total`` may be
``None`` while unknown); :class:`ProgressBar` is such a callable.
"""
from __future__ import annotations

__all__ = ["ProgressBar"]


class ProgressBar:
    """A rich progress display on stderr, one line per stage, cleared when done; a context manager."""

    def __init__(self, *, rates: bool = False):
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn)

        from paths.cli.app import err_console

        self.rates = rates
        self.progress = Progress(TextColumn("{task.description}"), BarColumn(),
                                 MofNCompleteColumn(), TextColumn("{task.fields[rate]}"),
                                 TimeElapsedColumn(), console=err_console, transient=True)
        self.tasks = {}
        self.started = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.started:  # nothing is drawn (not even a blank line) for a run without progress
            self.progress.stop()
        return False

    def __call__(self, stage: str, done: int, total) -> None:
        if not self.started:
            self.progress.start()
            self.started = True
        if stage not in self.tasks:
            self.tasks[stage] = self.progress.add_task(stage, total=total, rate="")
        tid = self.tasks[stage]
        elapsed = self.progress.tasks[tid].elapsed or 0.0
        rate = ""
        if self.rates and elapsed > 0 and done:
            unit = "columns" if "column" in stage else "rows"
            rate = f"{done / elapsed:,.0f} {unit}/s"
        self.progress.update(tid, completed=done, total=total, rate=rate)
