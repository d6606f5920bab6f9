"""The stages every workflow reports to ``progress(stage, done, total)``.

A workflow takes ``progress=None`` or a callable ``progress(stage, done, total)``
(``total`` may be ``None`` while unknown).  A stage that runs as one step
reports ``(stage, 0, 1)`` when it starts and ``(stage, 1, 1)`` when it ends; a
stage of countable steps (figures, sweep points, passes over the rows, the
folds of K-fold CV) reports each step.  The out-of-memory engines report their passes under their
own labels ("pass 1: ...") with rows or columns as the count.  The command line
draws these as progress lines on standard error (:mod:`paths.cli.progress`).
"""
from __future__ import annotations

import contextlib

from paths.data.folds import KFOLD_STAGE

__all__ = ["READ", "FACTOR", "KFOLD", "SELECT", "INTERVALS", "RECORD", "TABLES", "FIGURES",
           "REPORT", "SAVE_FIT", "PLAN", "PREDICT", "stage"]

READ = "reading and preparing the data"
FACTOR = "factoring the design, the whole path"
#: counted per fold (times the repeats) by every engine (:class:`paths.data.folds.FoldCount`)
KFOLD = KFOLD_STAGE
SELECT = "selection rules (refined between grid points)"
INTERVALS = "prediction intervals"
RECORD = "errors at each rule's choice (summary record)"
TABLES = "writing tables"
#: counted per figure by :mod:`paths.present.report`
FIGURES = "figures"
REPORT = "report"
SAVE_FIT = "writing fit.npz"
PLAN = "risk curves against n"
PREDICT = "predicting the new rows"


def _nothing(done: int) -> None:
    return None


@contextlib.contextmanager
def stage(progress, name: str, total: int = 1):
    """Report stage ``name``: ``(name, 0, total)`` on entry, ``(name, total, total)`` on exit.

    Yields a function ``step(done)`` for the steps in between.  With
    ``progress=None`` nothing is reported.

    >>> seen = []
    >>> with stage(lambda *a: seen.append(a), "figures", 2) as step:
    ...     step(1)
    >>> seen
    [('figures', 0, 2), ('figures', 1, 2), ('figures', 2, 2)]
    """
    if progress is None:
        yield _nothing
        return
    progress(name, 0, total)
    yield lambda done: progress(name, done, total)
    progress(name, total, total)
