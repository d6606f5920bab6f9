"""Apply a saved fit (``fit.npz``) to new rows and write the predictions.

The new table goes through the same reader and the same preparation as the
training data (:func:`paths.io.read_table`, :func:`paths.io.select_like`):
columns matched by name in any order, one-hot levels of the training data,
missing values refused (or dropped if the training data dropped rows), extra
columns ignored with a note, missing ones named.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from paths.data.stdin import source_name
from paths.data.validation import InputError, as_lambdas
from paths.present.fitfile import SavedFit, load_fit
from paths.workflows.stages import INTERVALS, PREDICT, READ, TABLES, stage

__all__ = ["PredictRun", "predict_file", "prediction_columns"]

_SHOW = 6


@dataclass(frozen=True)
class PredictRun:
    """What :func:`predict_file` did.

    Attributes
    ----------
    out : Path
        The CSV written.
    n_rows : int
    lam : ndarray, shape (t,)
        The penalty used for each target.
    choice : str
        Where the penalty came from (``"lambda"``, a rule, or the reported rule).
    notes : list of str
    intervals : dict or None
        ``{"level", "method"}`` when intervals were written.
    """

    out: Path
    n_rows: int
    lam: np.ndarray
    choice: str
    notes: list = field(default_factory=list)
    intervals: dict | None = None


def _choose(saved: SavedFit, lam, rule) -> tuple[np.ndarray, str]:
    if lam is not None and rule is not None:
        raise InputError("pass either lam= or rule=, not both")
    t = saved.reported_lambda.size
    if lam is not None:
        return np.full(t, float(as_lambdas(lam)[0])), "lambda"
    if rule is not None:
        return saved.lambda_for(rule), f"rule {rule}"
    return np.array(saved.reported_lambda), f"reported rule {saved.header['reported']['rule']}"


def _check_out(out: Path, inputs, force: bool) -> None:
    from paths.data.output import OutputError, input_at

    if out.is_dir():
        raise OutputError(f"out={out} is a folder; give a file name such as predictions.csv")
    src = input_at(out, inputs)  # resolved path or inode: the one check of every command
    if src is not None:
        raise OutputError(f"out={out} is the input file {src}; choose another out=")
    if out.exists() and not force:
        raise OutputError(f"{out} exists; choose another out= or pass force=True to overwrite it")
    if not out.parent.is_dir():
        raise OutputError(f"the folder of out={out} does not exist; create it first")


def _ids(frame, rows, id_column, saved: SavedFit):
    """(column name, values) of the identifier carried through, or ("row", 1-based positions)."""
    if id_column is not None:
        if id_column in saved.feature_names or id_column in (
                saved.preparation.get("source_columns") or []):
            raise InputError(f"id_column={id_column!r} is a feature of the fit; name a column that is "
                             "not used as a feature")
        if id_column not in frame.columns:
            raise InputError(f"id_column={id_column!r} not found in the data; columns are: "
                             f"{', '.join(map(str, list(frame.columns)[:8]))}")
        return id_column, frame[id_column].to_numpy()[rows]
    saved_id = saved.preparation.get("id_column")
    if saved_id and saved_id in frame.columns:
        return saved_id, frame[saved_id].to_numpy()[rows]
    return "row", rows + 1


def prediction_columns(saved: SavedFit, id_name: str, intervals: bool) -> list:
    """Header of the predictions CSV: the id, the target (several targets), the prediction."""
    cols = [id_name] + (["target"] if len(saved.target_names) > 1 else []) + ["prediction"]
    return cols + (["lower", "upper"] if intervals else [])


def _intervals(saved: SavedFit, X, lams, level):
    if saved.path is None:
        raise InputError("intervals= needs the full fit; this fit.npz is predict-only (written "
                         "by an out-of-memory engine, which keeps no left factors): refit in "
                         "memory (paths explore --engine memory) or predict without intervals=")
    if saved.path.design.span is not None:
        raise InputError("intervals= is not available for a fit with row weights, unpenalized "
                         "columns or relative penalties (the conformal intervals assume the "
                         "plain intercept); predict without intervals=")
    import paths

    try:
        pi = getattr(paths, "prediction_intervals")
    except AttributeError:
        raise InputError("intervals= needs prediction intervals (paths.prediction_intervals), "
                         "which this version of paths does not have; predict without "
                         "intervals=") from None
    lower, upper = [], []
    for j, lam in enumerate(lams):
        res = pi(saved.path, X, float(lam), level=level)
        lo, hi = np.asarray(res.lower), np.asarray(res.upper)
        lower.append(lo[:, j] if lo.ndim == 2 else lo)
        upper.append(hi[:, j] if hi.ndim == 2 else hi)
        method = res.method
    return np.column_stack(lower), np.column_stack(upper), method


def predict_file(fit, data, *, out, lam=None, rule=None, intervals: float | None = None,
                 id_column: str | None = None, sep=None, force: bool = False,
                 progress=None) -> PredictRun:
    """Predict the rows of the table ``data`` with the saved fit ``fit``; write ``out`` (CSV).

    Parameters
    ----------
    fit : path
        A ``fit.npz`` written by ``paths explore``.
    data : path
        A table with (at least) the fit's feature columns, in any order.
    out : path
        The predictions CSV; never written over an input, nor over an existing
        file without ``force``.
    lam : float, optional
        The penalty; default the fit's reported one.
    rule : str, optional
        A selection rule (saved with the fit, or ``df=VALUE`` / ``fraction=VALUE``).
    intervals : float, optional
        Also write prediction intervals at this level (``paths.prediction_intervals``).
    id_column : str, optional
        A column carried through to the output (default: the fit's identifier
        column if the data have it, else the 1-based row number).
    progress : callable, optional
        ``progress(stage, done, total)`` (:mod:`paths.workflows.stages`).
    """
    from paths.data.output import write_columns
    from paths.data.tables import read_table

    out = Path(out)
    _check_out(out, (fit, data), force)
    if intervals is not None and not 0.0 < float(intervals) < 1.0:
        raise InputError(f"intervals= is a level in (0, 1), e.g. intervals=0.9; got {intervals}")
    with stage(progress, READ):
        saved = load_fit(fit)
        lams, choice = _choose(saved, lam, rule)
        frame = read_table(data, sep=sep)
        rows = saved.prepare_rows(frame, source=source_name(data))
    used = set(rows.source_columns) | {id_column, saved.preparation.get("id_column")}
    extra = [str(c) for c in frame.columns if str(c) not in used]
    notes = list(rows.notes)
    if extra:
        more = "" if len(extra) <= _SHOW else f" and {len(extra) - _SHOW} more"
        notes.append(f"ignored {len(extra)} column(s) the fit does not use: "
                     f"{', '.join(extra[:_SHOW])}{more}")
    id_name, ids = _ids(frame, rows.rows, id_column, saved)
    n = rows.X.shape[0]
    with stage(progress, PREDICT):  # (n, t): each target at its penalty
        pred = np.column_stack([saved.predict(rows.X, float(v)).reshape(n, -1)[:, j]
                                for j, v in enumerate(lams)])
    lo = hi = record = None
    if intervals is not None:
        with stage(progress, INTERVALS):
            lo, hi, method = _intervals(saved, rows.X, lams, float(intervals))
        record = {"level": float(intervals), "method": method}
    with stage(progress, TABLES):  # target-major: every row of target 1, then of target 2, ...
        names = saved.target_names
        cols = [np.tile(np.asarray(ids), len(names))]
        cols += [np.repeat(np.asarray(names, dtype=object), n)] if len(names) > 1 else []
        cols += [a.T.ravel() for a in ((pred,) if lo is None else (pred, lo, hi))]
        write_columns(out, prediction_columns(saved, id_name, lo is not None), cols)
    return PredictRun(out=out, n_rows=int(pred.shape[0]), lam=lams, choice=choice, notes=notes,
                      intervals=record)
