"""End-to-end analyses: read, fit, summarize and write one output folder.

These functions sit between the library and the command line: they do the
file work the numerical core never does, so the CLI only parses and prints.
"""
from __future__ import annotations

import shlex
import sys
from dataclasses import dataclass, field
from pathlib import Path

from .datasets import split_holdout
from .io import Dataset, read_table, select, sha256_of
from .output import prepare_out_dir, write_csv, write_json
from .path import RidgePath, fit_path
from .summary import coefficient_table, path_table, summary_dict

__all__ = ["ExploreRun", "explore", "load_data"]


@dataclass(frozen=True)
class ExploreRun:
    """What :func:`explore` produced: the path, the summary record and the files written."""

    result: RidgePath
    summary: dict
    out_dir: Path
    files: list = field(default_factory=list)


def load_data(path, target, *, sep=None) -> tuple[Dataset, str]:
    """Read ``path`` and split off ``target``; returns the dataset and the file's SHA-256."""
    df = read_table(path, sep=sep)
    return select(df, target, source=str(path)), sha256_of(path)


def explore(
    data: Dataset,
    *,
    out_dir,
    test: Dataset | None = None,
    holdout: float | None = None,
    seed: int = 0,
    n_lambdas: int = 100,
    standardize: bool = True,
    solver: str = "auto",
    force: bool = False,
    input_sha256: dict | None = None,
    command_line: list[str] | None = None,
) -> ExploreRun:
    """Fit the whole path on ``data`` and write ``path.csv``, ``coefficients.csv``, ``summary.json``.

    Parameters
    ----------
    data : Dataset
        Training data (all rows, unless ``holdout`` splits some off).
    out_dir : path
        Output folder; refused if it exists and is not empty, unless ``force``.
    test : Dataset, optional
        A separate test set with the same features.
    holdout : float, optional
        Fraction of ``data``'s rows held out at random (seeded by ``seed``) as the
        test set; not with ``test``.
    """
    from ._validation import InputError

    if test is not None and holdout is not None:
        raise InputError("pass either --test or --holdout, not both")
    out = prepare_out_dir(out_dir, force=force)
    X, y = data.X, data.y
    X_test = y_test = None
    split = None
    if test is not None:
        missing = [c for c in data.feature_names if c not in test.feature_names]
        if missing:
            raise InputError(f"{test.source}: test file lacks feature column(s) "
                             f"{', '.join(missing[:5])}; give it the training columns")
        order = [test.feature_names.index(c) for c in data.feature_names]
        X_test, y_test = test.X[:, order], test.y
    elif holdout is not None:
        train, held = split_holdout(X.shape[0], holdout, seed)
        X, y, X_test, y_test = X[train], y[train], X[held], y[held]
        split = {"holdout": holdout, "seed": seed, "n_test": int(held.size)}
    import pandas as pd

    frame = pd.DataFrame(X, columns=data.feature_names)
    result = fit_path(frame, y, n_lambdas=n_lambdas, standardize=standardize, solver=solver,
                      X_test=X_test, y_test=y_test)
    summary = summary_dict(
        result,
        target=data.target_names[0] if len(data.target_names) == 1 else data.target_names,
        source=data.source,
        input_sha256=input_sha256 or {},
        split=split,
        command_line=shlex.join(command_line if command_line is not None else sys.argv),
    )
    files = [
        write_csv(out / "path.csv", *path_table(result)),
        write_csv(out / "coefficients.csv", *coefficient_table(result)),
        write_json(out / "summary.json", summary),
    ]
    return ExploreRun(result=result, summary=summary, out_dir=out, files=files)

