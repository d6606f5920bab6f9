"""The explore workflow's wide branch: data with more feature columns than rows, in column blocks.

:func:`fit_wide` is what :func:`paths.workflows.engines.explore_engine` runs
for a wide file (Parquet or CSV/TSV): the options mean what they mean in memory
(:func:`paths.workflows.explore.fit_and_select`) — the same holdout rows
(:func:`paths.data.folds.holdout_mask`), the same folds
(:func:`paths.selection.cv.fold_partitions`, groups included), the same
preparation of each column (:func:`paths.core.design.prepare`, one block of
whole columns at a time) — so the errors are the in-memory engine's.

The engine (:func:`paths.engines.wide.wide_path`) produces the factor state
(it holds the n × r left factor); K-fold CV is the in-memory exact route on it
(:class:`paths.selection.cv.StateFolds`), or, with per-fold scaling, per-fold
refits in the dual form from one more pass over the columns
(:func:`paths.engines.wide.fold_refits`, :class:`paths.selection.cv.RefitFolds`).
"""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from paths.data.validation import InputError
from paths.workflows.options import DataOptions, EngineOptions, FitOptions

__all__ = ["fit_wide", "WIDE_REFUSALS"]

#: Options the wide engine refuses, with the reason and what to use instead.
WIDE_REFUSALS = {
    "weights": ("weights with wide data: the column-blocked Gram is unweighted; use engine "
                "memory"),
    "unpenalized": ("unpenalized with wide data: the column blocks would have to be projected "
                    "off the unpenalized columns' span first; use engine memory"),
    "relative_penalty": ("relative_penalty with wide data: the column-blocked Gram penalizes "
                         "every column alike; use engine memory"),
    "intervals": ("intervals with wide data: the leave-out predictions need the right "
                  "factors, which the column-blocked engine never forms; use engine memory"),
}


def _refuse(data: DataOptions, fit: FitOptions, path: Path, engine: EngineOptions, rows,
            n_feats) -> None:
    """One-line refusals of what the wide engine cannot do, with the reason."""
    if engine.name == "dask":
        raise InputError(f"{path} is wide ({rows} rows x {n_feats} features): use engine "
                         "stream (column blocks); the dask engine splits rows")
    if path.is_dir():
        raise InputError(f"{path}: wide data must be one file (columns are read "
                         "selectively); combine the parts")
    defaults = {DataOptions: DataOptions(), FitOptions: FitOptions()}
    for name, why in WIDE_REFUSALS.items():
        opts = data if hasattr(data, name) else fit
        if getattr(opts, name) != getattr(defaults[type(opts)], name):
            raise InputError(why)
    if data.test_file is not None and data.holdout is not None:
        raise InputError("pass either test_file or holdout, not both")
    if data.test_file is not None and (data.encode or data.drop_missing):
        raise InputError("test_file with encode or drop_missing on wide data: the test file "
                         "would need the training file's levels and rows block by block; use "
                         "holdout, or engine memory")


def _raw_columns(path: Path, src, names) -> dict:
    """The target and side columns (groups, identifiers) as read, one value per row."""
    if hasattr(src, "raw"):
        return {c: src.raw[c] for c in names}
    import pyarrow.parquet as pq

    frame = pq.read_table(path, columns=list(dict.fromkeys(names))).to_pandas()
    return {c: frame[c].to_numpy() for c in names}


def _open(path: Path, data: DataOptions, targets, feats, engine: EngineOptions, progress):
    """``(design source, response, group labels or None, notes)`` of a wide file, under the
    in-memory reader's rules (:func:`paths.data.wide_select.select_wide`)."""
    import pandas as pd

    from paths.data.chunks import DEFAULT_BLOCK_COLUMNS, CSVColumns, is_text_path
    from paths.data.wide_select import ParquetFrames, SelectedColumns, select_wide
    from paths.workflows.prepare import group_labels

    block = engine.chunk_rows or DEFAULT_BLOCK_COLUMNS
    side = [c for c in (data.groups, data.id_column) if c is not None]
    if is_text_path(path):
        frames = CSVColumns(path, targets, features=feats, sep=data.sep, side=side,
                            block_columns=block, progress=progress)
    else:
        frames = ParquetFrames(path, feats)
    raw = _raw_columns(path, frames, [*targets, *side])
    groups = None
    if data.groups is not None:  # refused when missing, before the rows are selected
        groups = group_labels(pd.DataFrame({data.groups: raw[data.groups]}), data.groups,
                              str(path))
    sel = select_wide(frames, raw, targets, id_column=data.id_column, encode=data.encode,
                      drop_missing=data.drop_missing, block_columns=block)
    if groups is not None and sel.rows is not None:
        groups = groups[sel.rows]
    notes = [*getattr(frames, "notes", ()), *sel.notes,
             "pass 0: the in-memory reader's rules over every column block"]
    return SelectedColumns(frames, sel, block_columns=block), sel.y, groups, notes


def _kfold_stats(result, src, y, groups, holdout_rows, fit: FitOptions, n_folds, progress):
    """The fold statistics of the wide fit: the exact route on its factor state, or
    per-fold refits (per-fold scaling); ``(stats, plan)``."""
    from paths.engines.stream import FoldPlan
    from paths.engines.wide import fold_refits
    from paths.selection.cv import RefitFolds, StateFolds, fold_partitions

    labels = fold_partitions(result.n_samples, n_folds, scheme=fit.fold_scheme, seed=fit.seed,
                             repeats=fit.repeats, groups=groups,
                             fit_intercept=result.fit_intercept)
    if fit.cv_scaling == "per-fold":
        passes: list = []
        folds = fold_refits(src, y, labels, test_rows=holdout_rows,
                            fit_intercept=result.fit_intercept, standardize=result.standardize,
                            progress=progress, passes=passes)
        stats = RefitFolds(folds=folds, labels=labels)
        result = dataclasses.replace(result, passes=result.passes + tuple(passes))
    elif fit.cv_scaling == "global":
        stats = StateFolds(state=result.state, labels=labels)
    else:
        raise InputError(f"cv_scaling must be global or per-fold; got {fit.cv_scaling!r}")
    plan = FoldPlan(n_folds=int(labels.max()) + 1, n_rows=result.n_samples,
                    scheme="grouped" if groups is not None else fit.fold_scheme,
                    seed=fit.seed, repeats=int(fit.repeats))
    note = (f"{plan.n_folds}-fold CV" + (f" x {plan.repeats} repeats" if plan.repeats > 1
                                         else "") + f" on the wide engine: {stats.reason}")
    return dataclasses.replace(result, fold_stats=stats, fold_plan=plan,
                               n_folds=plan.n_folds, notes=result.notes + (note,))


def fit_wide(data: DataOptions, fit: FitOptions, engine: EngineOptions, *, path: Path,
             targets, feats, rows, progress=None):
    """The wide path of ``data.file`` with the explore options: holdout or test file, K-fold
    CV (any scheme, groups, repeats, global or per-fold scaling); a
    :class:`paths.engines.wide.WidePath` whose ``fold_stats`` give the CV errors."""
    from paths.data.folds import holdout_mask
    from paths.engines.stream import solver_route
    from paths.engines.wide import wide_path
    from paths.workflows.explore import folds_for

    _refuse(data, fit, path, engine, rows, len(feats))
    accurate = solver_route(fit.solver, engine.accurate)  # svd: QR of the blocks; gram: Gram
    src, y, groups, notes = _open(path, data, targets, feats, engine, progress)
    held = None
    if data.holdout is not None:
        held = holdout_mask(np.arange(src.n_rows), src.n_rows, data.holdout, seed=fit.seed)
        groups = None if groups is None else groups[~held]
    n_train = src.n_rows - (0 if held is None else int(held.sum()))
    n_folds = folds_for(groups, n_train, fit)
    result = wide_path(src, y, target=targets if len(targets) > 1 else targets[0],
                       X_test=data.test_file, test_rows=held, sep=data.sep,
                       accurate=accurate, rank=engine.rank, n_lambdas=fit.n_lambdas,
                       standardize=fit.standardize, progress=progress)
    reason = result.solver_reason if fit.solver == "auto" else \
        f"requested (solver {fit.solver}): {result.solver_reason}"
    result = dataclasses.replace(result, notes=tuple(notes) + result.notes, solver_reason=reason)
    if n_folds is None:
        return result
    return _kfold_stats(result, src, y, groups, held, fit, n_folds, progress)
