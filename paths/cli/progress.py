"""The progress display of every command: one line per running stage, on standard error.

Workflows report progress as ``progress(stage, done, total)`` (``total`` may be
``None`` while unknown; the stage names are :mod:`paths.workflows.stages` and the
engines' pass labels); :class:`ProgressBar` is such a callable.  It draws only
when standard error is a terminal and ``--quiet`` was not given (``--json`` keeps
it: the JSON goes to standard output); otherwise it draws nothing at all, not
even a blank line, so logs and pipes stay clean.  A finished stage leaves the
display; the display is cleared when the command ends.
"""
from __future__ import annotations

__all__ = ["ProgressBar", "shows_progress"]


def shows_progress() -> bool:
    """Whether progress is drawn: standard error is a terminal and ``--quiet`` is off."""
    from paths.cli.app import err_console, is_quiet

    return err_console.is_terminal and not is_quiet()


def _unit(stage: str) -> str | None:
    """Rows or columns for an engine's pass over the data; None for a workflow stage."""
    if "column" in stage:
        return "columns"
    if "pass" in stage or "rows" in stage:
        return "rows"
    return None


class ProgressBar:
    """A rich progress display on stderr, one line per running stage; a context manager.

    ``rates``: show rows (or columns) per second for the engines' passes.
    """

    def __init__(self, *, rates: bool = False):
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

        from paths.cli.app import err_console

        self.rates = rates
        self.enabled = shows_progress()
        self.progress = Progress(TextColumn("{task.description}"), BarColumn(),
                                 TextColumn("{task.fields[count]}"),
                                 TextColumn("{task.fields[rate]}"), TimeElapsedColumn(),
                                 console=err_console, transient=True,
                                 disable=not self.enabled)
        self.tasks = {}
        self.started = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.started:  # nothing is drawn (not even a blank line) for a run without progress
            self.progress.stop()
        return False

    def __call__(self, stage: str, done: int, total) -> None:
        if not self.enabled:
            return
        if not self.started:
            self.progress.start()
            self.started = True
        counted = total is None or total > 1  # a one-step stage: a running bar, no count
        fresh = stage not in self.tasks
        if fresh:
            self.tasks[stage] = self.progress.add_task(stage, total=total if counted else None,
                                                       rate="", count="")
        tid = self.tasks[stage]
        finished = total is not None and done >= total
        elapsed = self.progress.tasks[tid].elapsed or 0.0
        unit = _unit(stage)
        rate = f"{done / elapsed:,.0f} {unit}/s" if (self.rates and unit and elapsed > 0
                                                      and done) else ""
        count = (f"{done:,}" if total is None else f"{done:,}/{total:,}") if counted else ""
        self.progress.update(tid, completed=done, total=total if counted else None, rate=rate,
                             count=count, visible=not finished)
        if fresh or finished:
            self.progress.refresh()
