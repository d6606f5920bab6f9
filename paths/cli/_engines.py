"""``paths explore --engine stream|dask``: progress bar, the call, the throughput lines.

Helper of :mod:`paths.cli.explore` (not a command module: the leading underscore
keeps it out of the auto-import).  It only parses, calls
:func:`paths.analysis.explore_engine`, and prints.
"""
from __future__ import annotations

import warnings

from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                           TimeElapsedColumn)

from paths.data.validation import InputError
from paths.cli.app import console, err_console

# explore options the out-of-memory engines do not offer, with their defaults
_UNSUPPORTED = {"holdout": None, "groups": None, "id_column": None, "encode": "none",
                "drop_missing": None, "repeats": 1, "cv_scaling": "global", "rule": None,
                "solver": "auto", "weights": None, "unpenalized": None, "relative_penalty": None}
_FLAGS = {"holdout": "--holdout", "groups": "--groups", "id_column": "--id", "encode": "--encode",
          "drop_missing": "--drop-missing", "repeats": "--repeats", "cv_scaling": "--cv-scaling",
          "rule": "--rule", "solver": "--solver", "weights": "--weights",
          "unpenalized": "--unpenalized", "relative_penalty": "--relative-penalty"}


class _Bar:
    """A rich progress bar with one line per pass; rows (or columns) per second shown."""

    def __init__(self):
        self.progress = Progress(TextColumn("{task.description}"), BarColumn(),
                                 MofNCompleteColumn(), TextColumn("{task.fields[rate]}"),
                                 TimeElapsedColumn(), console=err_console, transient=False)
        self.tasks = {}

    def __enter__(self):
        self.progress.__enter__()
        return self

    def __exit__(self, *exc):
        return self.progress.__exit__(*exc)

    def __call__(self, label, done, total):
        if label not in self.tasks:
            self.tasks[label] = self.progress.add_task(label, total=total, rate="")
        tid = self.tasks[label]
        task = self.progress.tasks[tid]
        elapsed = task.elapsed or 0.0
        unit = "columns" if "column" in label else "rows"
        rate = f"{done / elapsed:,.0f} {unit}/s" if elapsed > 0 and done else ""
        self.progress.update(tid, completed=done, total=total, rate=rate)


def run_engine(*, engine: str, options: dict, **kwargs):
    """Check the options, run the engine with a progress bar, print the throughput."""
    from paths.workflows.analysis import explore_engine

    for key, default in _UNSUPPORTED.items():
        value = options.get(key)
        value = getattr(value, "value", value)
        if value is not None and value != default:
            why = (" (its one-pass moments are unweighted and penalize every column)"
                   if key in ("weights", "unpenalized", "relative_penalty") else "")
            raise InputError(f"{_FLAGS[key]} is not available with --engine {engine}{why}; "
                             "drop it or use --engine memory")
    folds = getattr(options.get("folds"), "value", options.get("folds"))
    cv_seed = options.get("seed", 0) if folds == "shuffled" else None
    with _Bar() as bar, warnings.catch_warnings():
        # the approximation warning of --rank is printed as a note with the summary
        warnings.simplefilter("ignore", UserWarning)
        run = explore_engine(engine=engine, progress=bar, cv_seed=cv_seed, **kwargs)
    for p in run.result.passes:
        unit = "columns" if "column" in p.label else "rows"
        console.print(f"{p.label}: {p.rows:,} {unit} in {p.seconds:.2f} s "
                      f"({p.rows_per_second:,.0f} {unit}/s, {p.mb_per_second:,.0f} MB/s)",
                      markup=False, highlight=False)
    sel = run.summary["selected"].get("cv")
    if sel is not None:
        console.print(f"min {run.result.n_folds}-fold CV: lambda {sel['lambda']:.4g}, "
                      f"df {sel['df']:.2f}, CV MSE {sel['value']:.4g}", markup=False,
                      highlight=False)
    return run
