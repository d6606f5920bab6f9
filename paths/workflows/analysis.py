"""End-to-end analyses: read, fit, summarize and write one output folder.

These functions sit between the library and the command line: they do the
file work the numerical core never does, so the CLI only parses and prints.
"""
from __future__ import annotations

import shlex
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from paths.data.synthetic import split_holdout
from paths.data.tables import Dataset, load_dataset, sha256_of
from paths.data.output import OutputFolder, write_csv, write_json
from paths.core.path import RidgePath, fit_path
from paths.present.summary import (add_choice_errors, coefficient_table, model_table, path_table,
                                   reported_lambdas, selections, summary_dict,
                                   write_coefficients)

__all__ = ["ExploreRun", "explore", "load_data", "read_groups", "read_weights",
           "parse_relative_penalties", "explore_engine", "ENGINES",
           "write_saved_fit"]


@dataclass(frozen=True)
class ExploreRun:
    """What :func:`explore` produced: the path, the summary record and the files written."""

    result: RidgePath
    summary: dict
    out_dir: Path
    files: list = field(default_factory=list)
    selection: object = None  # SelectionReport: every rule side by side
    cv: object = None  # CVResult, when K-fold CV was asked for


def load_data(path, target, *, sep=None, features=None, exclude=None, id_column=None,
              encode=None, drop_missing=None, like: Dataset | None = None
              ) -> tuple[Dataset, str]:
    """Read ``path`` and split off ``target``; returns the dataset and the file's SHA-256.

    The options are those of :func:`paths.io.select`; with ``like`` (the training
    Dataset) the file is read as a test set aligned to its columns
    (:func:`paths.io.select_like`).  The file is opened read-only.
    """
    data = load_dataset(path, target, sep=sep, features=features, exclude=exclude,
                        id_column=id_column, encode=encode, drop_missing=drop_missing, like=like)
    return data, sha256_of(path)


def read_groups(path, column: str, *, sep=None) -> np.ndarray:
    """The values of the group column ``column`` of a data file, one per row (``--groups``).

    The column must also be left out of the features (``exclude=[column]``).
    """
    from paths.data.validation import InputError
    from paths.data.tables import read_table

    frame = read_table(path, sep=sep)
    if column not in frame.columns:
        raise InputError(f"{path}: --groups column {column!r} not found; columns are: "
                         f"{', '.join(map(str, list(frame.columns)[:8]))}")
    values = frame[column]
    if values.isna().any():
        raise InputError(f"{path}: --groups column {column!r} has {int(values.isna().sum())} "
                         "missing value(s); give every row a group")
    return values.to_numpy()


def read_weights(path, column: str, *, sep=None, required: bool = True):
    """The row weights in column ``column`` of a data file (``--weights``), or None.

    Refused in one line: a missing column (when ``required``), missing,
    non-numeric, infinite, zero or negative values.  The column must also be
    left out of the features (``exclude=[column]``).
    """
    from paths.data.validation import InputError, as_weights
    from paths.data.tables import read_table

    frame = read_table(path, sep=sep)
    if column not in frame.columns:
        if not required:
            return None
        raise InputError(f"{path}: --weights column {column!r} not found; columns are: "
                         f"{', '.join(map(str, list(frame.columns)[:8]))}")
    import pandas as pd

    values = pd.to_numeric(frame[column], errors="coerce")
    if values.isna().any():
        i = int(np.flatnonzero(values.isna().to_numpy())[0])
        raise InputError(f"{path}: --weights column {column!r} has a missing or non-numeric "
                         f"value ({frame[column].iloc[i]!r}, data row {i + 1}); give every row "
                         "a positive weight")
    return as_weights(values.to_numpy(dtype=float), len(values), f"{path}: --weights {column!r}")


def parse_relative_penalties(specs) -> dict | None:
    """``["gene_*=2", "age=0.5"]`` → ``{"gene_*": 2.0, "age": 0.5}`` (``--relative-penalty``)."""
    from paths.data.validation import InputError

    if not specs:
        return None
    out = {}
    for spec in specs:
        pattern, eq, value = str(spec).rpartition("=")
        try:
            w = float(value)
        except ValueError:
            w = None
        if not eq or not pattern or w is None or not (np.isfinite(w) and w > 0):
            raise InputError(f"--relative-penalty takes PATTERN=W with W a number > 0 (e.g. "
                             f"'gene_*=2'); got {spec!r}")
        out[pattern] = w
    return out


def _per_target(table, result: RidgePath, targets) -> tuple[list, list]:
    """One table for one target; for several, the rows of each stacked under a ``target`` column."""
    if len(targets) == 1:
        return table(result)
    header, rows = None, []
    for j, name in enumerate(targets):
        h, r = table(result, j)
        header = ["target", *h]
        rows.extend([name, *row] for row in r)
    return header, rows


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
    cv: int | None = None,
    repeats: int = 1,
    groups=None,
    folds: str = "shuffled",
    cv_scaling: str = "global",
    rule: str | None = None,
    formats=("png", "svg"),
    width: str = "single",
    x_axis: str = "df",
    report: bool = True,
    extra: dict | None = None,
    inputs=(),
    intervals: float | None = None,
    interval_method: str = "jackknife+",
    weights=None,
    test_weights=None,
    unpenalized=None,
    relative_penalty=None,
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
    cv, repeats, groups, folds, cv_scaling
        K-fold cross-validation (:func:`paths.cv.cross_validate`): K folds,
        ``repeats`` seeded repetitions (seed ``seed``), group labels per row of
        ``data`` (grouped folds), ``"shuffled"`` or ``"blocked"`` folds, and the
        scaling (``"global"`` or ``"per-fold"``).  ``groups`` without ``cv``
        uses min(10, number of groups) folds.
    rule : str, optional
        The reported selection rule (:func:`paths.select.select`); default
        ``"cv"`` with cross-validation, else ``"gcv"``.
    formats, width, x_axis, report
        Figures (:mod:`paths.figures`; ``formats`` empty or None: no figures) in these
        formats and width against ``"log_lambda"`` or ``"df"``, and ``report.md`` /
        ``report.html`` (:mod:`paths.report`) when ``report``.
    extra : dict, optional
        Keys added verbatim to ``summary.json`` (e.g. a case's name and description).
    inputs : iterable of paths, optional
        Files the run read besides those in ``input_sha256`` (e.g. a case file): no
        output may overwrite them (:class:`paths.data.output.OutputFolder`).
    intervals : float, optional
        Prediction intervals at this level for the test rows
        (:func:`paths.selection.intervals.prediction_intervals`, at the reported
        rule's penalty): ``intervals.csv`` and ``summary.json["intervals"]``.
        Needs ``test`` or ``holdout``.
    interval_method : {"jackknife+", "cv+", "split"}
        CV+ uses the K-fold partition of ``cv`` when given (else 10 seeded folds).
    weights, test_weights : array_like, optional
        Row weights of ``data`` (split with ``holdout``) and of ``test``
        (:func:`paths.path.fit_path` ``sample_weight`` / ``test_weight``).
    unpenalized, relative_penalty
        Columns left unpenalized, relative penalties (:func:`paths.path.fit_path`).
    """
    from paths.data.validation import InputError
    from paths.present.figures import parse_formats, parse_width
    from paths.present.report import report_numbers, write_explore_outputs

    formats = parse_formats(formats) if formats else ()
    width = parse_width(width)
    if x_axis not in ("log_lambda", "df"):
        raise InputError(f"x_axis must be log_lambda or df; got {x_axis!r}")

    if test is not None and holdout is not None:
        raise InputError("pass either --test or --holdout, not both")
    if intervals is not None and test is None and holdout is None:
        raise InputError("--intervals needs test rows: pass --test FILE or --holdout FRACTION")
    folder = OutputFolder(out_dir, force=force, inputs=[*(input_sha256 or {}), *inputs])
    with folder:
        out = folder.stage
        X, y = data.X, data.y
        X_test = y_test = test_rows = None
        split = None
        if test is not None:
            missing = [c for c in data.feature_names if c not in test.feature_names]
            if missing:
                raise InputError(f"{test.source}: test file lacks feature column(s) "
                                 f"{', '.join(missing[:5])}; give it the training columns")
            order = [test.feature_names.index(c) for c in data.feature_names]
            X_test, y_test = test.X[:, order], test.y
            test_rows = test.rows if test.rows is not None else np.arange(test.X.shape[0])
        elif holdout is not None:
            train, held = split_holdout(X.shape[0], holdout, seed)
            test_rows = held if data.rows is None else data.rows[held]
            X, y, X_test, y_test = X[train], y[train], X[held], y[held]
            split = {"holdout": holdout, "seed": seed, "n_test": int(held.size)}
            if weights is not None:
                weights, test_weights = np.asarray(weights)[train], np.asarray(weights)[held]
            if groups is not None and len(groups) == data.X.shape[0]:
                groups = np.asarray(groups)[train]
        import pandas as pd

        frame = pd.DataFrame(X, columns=data.feature_names)
        result = fit_path(frame, y, n_lambdas=n_lambdas, standardize=standardize, solver=solver,
                          X_test=X_test, y_test=y_test, sample_weight=weights,
                          test_weight=test_weights if X_test is not None else None,
                          unpenalized=unpenalized, relative_penalty=relative_penalty)
        selection, cv_record, cv_res = _selection(result, X, y, cv=cv, repeats=repeats, groups=groups,
                                                  folds=folds, cv_scaling=cv_scaling, seed=seed,
                                                  rule=rule)
        summary_extra = _penalty_record(result, relative_penalty)
        summary = summary_dict(
            result,
            target=data.target_names[0] if len(data.target_names) == 1 else data.target_names,
            source=data.source,
            input_sha256=input_sha256 or {},
            split=split,
            command_line=shlex.join(command_line if command_line is not None else sys.argv),
            data_notes=list(data.notes) + [f"test data: {n}" for n in (test.notes if test else [])],
            data_preparation=data.record(),
            noise_variance=selection.noise.as_dict(None if result.multi_target else 0),
            reported=selection.reported,
            cv=cv_record,
        )
        summary["selected"] = {**summary["selected"], **selection.as_dict(0)}
        summary.update(summary_extra)
        if len(data.target_names) > 1:
            summary["targets"] = list(data.target_names)
            summary["by_target"] = {
                name: {"selected": {**selections(result, j), **selection.as_dict(j)},
                       "min_norm": {k: summary["min_norm"][k][j] if isinstance(
                           summary["min_norm"][k], list) else summary["min_norm"][k]
                           for k in summary["min_norm"]}}
                for j, name in enumerate(data.target_names)
            }
        interval_file = None
        if intervals is not None:
            summary["intervals"], interval_file = _intervals(
                result, selection, cv_res, X_test, y_test, test_rows, data.target_names,
                level=intervals, method=interval_method, seed=seed)
        summary.update(extra or {})
        add_choice_errors(summary, result, X_train=X, X_test=X_test, y_test=y_test)
        summary["report"] = report_numbers(summary)
        files = [
            write_csv(out / "path.csv", *_per_target(path_table, result, data.target_names)),
            write_coefficients(out, *_per_target(coefficient_table, result, data.target_names)),
            write_csv(out / "model.csv", *model_table(result, reported_lambdas(summary),
                                                     data.target_names)),
            write_json(out / "summary.json", summary),
            write_saved_fit(out / "fit.npz", result, selection, data, input_sha256),
        ]
        if interval_file is not None:
            files.append(write_csv(out / "intervals.csv", *interval_file))
        if formats or report:
            files += write_explore_outputs(result, summary, out, cv=cv_res, formats=formats or (),
                                           width=width, x=x_axis, report=report)
    return ExploreRun(result=result, summary=summary, out_dir=folder.target,
                      files=folder.final_paths(files), selection=selection, cv=cv_res)


def _intervals(result, selection, cv_res, X_test, y_test, test_rows, targets, *, level, method,
               seed):
    """Prediction intervals for the test rows at the reported penalty of each target:
    ``(summary record, (header, rows) of intervals.csv)``."""
    from paths.present.summary import interval_record, interval_table
    from paths.selection.intervals import prediction_intervals

    pi = prediction_intervals(
        result, X_test, selection.chosen_lambdas(), level=level, method=method,
        folds=cv_res.labels[0] if cv_res is not None and method == "cv+" else None, seed=seed)
    return interval_record(pi, y_test), interval_table(pi, [int(r) for r in test_rows], targets)


def _penalty_record(result: RidgePath, relative_penalty) -> dict:
    """summary.json keys for row weights, unpenalized columns and relative penalties."""
    return {"weighted": bool(result.weighted), "unpenalized": list(result.unpenalized),
            "relative_penalty": {str(k): float(v) for k, v in (
                relative_penalty.items() if isinstance(relative_penalty, dict) else [])}}


def write_saved_fit(dest: Path, result: RidgePath, selection, data: Dataset,
                    input_sha256: dict | None = None, **header_kw) -> Path:
    """Write ``fit.npz`` (:mod:`paths.present.fitfile`) at the reported rule's penalties."""
    from paths.present.fitfile import save_fit

    rules = {}
    for rule in selection.per_target[0]:
        lams = [sel[rule].lam for sel in selection.per_target]
        rules[rule] = None if any(v is None for v in lams) else [float(v) for v in lams]
    prep = {"source_columns": list(data.source_columns or data.feature_names),
            "encoding": {k: list(v) for k, v in data.encoding.items()},
            "id_column": data.id_column, "drop_missing": data.drop_missing,
            "target_names": list(data.target_names), "source": str(data.source)}
    reported, rule = selection.chosen_lambdas(), selection.reported
    if not np.all(np.isfinite(reported)):  # the reported rule gave no penalty: GCV's instead
        reported, rule = np.array(rules["gcv"], dtype=float), f"gcv (rule {rule} gave none)"
    return save_fit(dest, result, reported=reported, reported_rule=rule, rules=rules,
                    preparation=prep,
                    input_sha256=input_sha256, **header_kw)


def write_engine_fit(dest: Path, result, targets, source: str, input_sha256=None) -> Path:
    """A predict-only ``fit.npz`` of an out-of-memory engine's path (its grid minima as rules;
    the reported one: K-fold CV when computed, else GCV)."""
    from paths.present.fitfile import save_fit

    def grid_min(values):
        if values is None:
            return None
        v = np.asarray(values, dtype=float).reshape(result.lambdas.size, -1)
        return [float(result.lambdas[int(np.argmin(v[:, j]))]) for j in range(v.shape[1])]

    rules = {"gcv": grid_min(result.gcv), "loo": grid_min(result.loo_mse),
             "cv": grid_min(result.cv_mse)}
    rule = "cv" if rules["cv"] is not None else "gcv"
    prep = {"source_columns": list(result.feature_names), "encoding": {}, "id_column": None,
            "drop_missing": None, "target_names": list(targets), "source": source}
    return save_fit(dest, result, reported=np.array(rules[rule]),
                    reported_rule=f"{rule} (grid minimum)", rules=rules, preparation=prep,
                    input_sha256=input_sha256)


def _selection(result, X, y, *, cv, repeats, groups, folds, cv_scaling, seed, rule):
    """K-fold CV (when asked) and every selection rule; ``(report, cv record, CVResult)``."""
    from paths.data.validation import InputError
    from paths.selection.cv import cross_validate
    from paths.selection.rules import select_penalty

    cv_res = None
    if groups is not None:
        groups = np.asarray(groups)
        if groups.shape[0] != X.shape[0]:
            raise InputError(f"the group column has {groups.shape[0]} values for {X.shape[0]} "
                             "rows (rows were dropped?); give every row a group")
        if cv is None:
            cv = min(10, np.unique(groups).size)
    elif cv is None and repeats != 1:
        raise InputError("--repeats needs --cv K")
    if cv is not None:
        cv_res = cross_validate(X, y, path=result, n_folds=cv, scheme=folds, seed=seed,
                                repeats=repeats, groups=groups, scaling=cv_scaling)
    report = select_penalty(result, cv_res, reported=rule)
    record = None
    if cv_res is not None:
        def lst(a):
            return None if a is None else np.asarray(a, dtype=float).tolist()
        record = {"n_folds": cv_res.n_folds, "repeats": cv_res.repeats, "scheme": cv_res.scheme,
                  "seed": cv_res.seed, "scaling": cv_res.scaling, "method": cv_res.method,
                  "form": cv_res.form, "method_reason": cv_res.method_reason,
                  "fold_sizes": cv_res.fold_sizes.tolist(), "mse": lst(cv_res.mse),
                  "se": lst(cv_res.se), "se_repeats": lst(cv_res.se_repeats)}
    return report, record, cv_res



# ------------------------------------------------------------------ out-of-memory engines
ENGINES = ("memory", "stream", "dask")
_HASH_LIMIT = 2 << 30  # files above 2 GiB are recorded by size, not hashed (another full read)


def _file_digests(path: Path) -> tuple[dict, list]:
    files = sorted(f for f in path.rglob("*") if f.is_file()) if path.is_dir() else [path]
    out, notes = {}, []
    for f in files:
        size = f.stat().st_size
        if size <= _HASH_LIMIT:
            out[str(f)] = sha256_of(f)
        else:
            out[str(f)] = None
            notes.append(f"{f}: {size} bytes, not hashed (over 2 GiB; another full read)")
    return out, notes


def _columns_and_shape(path: Path, sep=None):
    """Column names and (rows or None) of a data file, from metadata or the header only."""
    from paths.data.validation import InputError

    suffix = path.suffix.lower()
    if path.is_dir() or suffix in (".parquet", ".pq", ".parq"):
        import pyarrow.parquet as pq

        from paths.data.chunks import _parquet_files

        files = _parquet_files(path)
        try:
            names = list(pq.read_schema(files[0]).names)
            rows = sum(pq.read_metadata(f).num_rows for f in files)
        except Exception as exc:  # noqa: BLE001 - pyarrow error types vary
            raise InputError(f"{path}: not a readable Parquet file ({exc}); check the file") from None
        return names, rows
    if suffix == ".npy":
        try:
            arr = np.load(path, mmap_mode="r", allow_pickle=False)
        except (ValueError, OSError, EOFError) as exc:  # object (pickled), truncated, not .npy
            msg = " ".join(str(exc).split())[:160] or type(exc).__name__
            raise InputError(f"{path} is not a readable NumPy file ({msg}); save it with "
                             "numpy.save, without object arrays") from None
        if arr.ndim != 2:
            raise InputError(f"{path}: the array has shape {arr.shape}; the streaming engines "
                             "read a 2-D array (rows x columns)")
        return None, int(arr.shape[0])
    import pandas as pd

    if sep is None:
        sep = "\t" if suffix in (".tsv", ".tab") else ","
    try:
        names = [str(c) for c in pd.read_csv(path, sep=sep, nrows=0).columns]
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{path} could not be read ({type(exc).__name__}); check the delimiter "
                         "(--sep) and that it is UTF-8 text") from None
    with open(path, "rb") as fh:  # a header without data rows: refused here, not mid-pass
        fh.readline()
        if not any(line.strip() for line in fh):
            raise InputError(f"{path} has a header row but no data rows; add data rows")
    return names, None


def _resolve_features(names, targets, features, exclude):
    from fnmatch import fnmatchcase

    from paths.data.validation import InputError

    pool = [c for c in names if c not in targets]
    if features:
        pats = [x for f in features for x in str(f).split(",") if x]
        chosen = [c for c in pool if any(fnmatchcase(c, pt) for pt in pats)]
        if not chosen:
            raise InputError(f"--features {', '.join(pats)} matches no column; check the names")
        pool = chosen
    if exclude:
        pats = [x for f in exclude for x in str(f).split(",") if x]
        pool = [c for c in pool if not any(fnmatchcase(c, pt) for pt in pats)]
    if not pool:
        raise InputError("no feature columns left after --features/--exclude; keep some")
    return pool


def explore_engine(
    data,
    target,
    *,
    engine: str,
    out_dir,
    test=None,
    features=None,
    exclude=None,
    sep=None,
    n_lambdas: int = 100,
    standardize: bool = True,
    force: bool = False,
    chunk_rows: int | None = None,
    accurate: bool = False,
    rank: int | None = None,
    scheduler: str | None = None,
    timeout: float = 10.0,
    cv: int | None = None,
    cv_seed: int | None = None,
    progress=None,
    command_line: list[str] | None = None,
    formats=(),
    width: str = "single",
    x_axis: str = "df",
    report: bool = False,
) -> ExploreRun:
    """:func:`explore` for data that need not fit in memory: ``engine`` "stream" or "dask".

    Tall files (rows >= features) go to :func:`paths.stream.stream_path` (or
    :func:`paths.dask_engine.dask_path`); wide Parquet files (more feature
    columns than rows) to :func:`paths.wide.wide_path`, read a column group at a
    time.  Writes ``path.csv``, ``coefficients.csv`` and ``summary.json`` (with
    an ``engine`` record: passes, rows, throughput, notes).  Selections are the
    grid minima of GCV, LOO, test error and (with ``cv``) K-fold CV.  With
    ``formats`` and/or ``report``, the path and spectrum figures and the report
    are written as by :func:`explore` (not for a wide fit without coefficients).
    """
    from paths.data.validation import InputError

    if engine not in ("stream", "dask"):
        raise InputError(f"engine must be one of {', '.join(ENGINES)}; got {engine!r}")
    path = Path(data)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder; check the path")
    if not (path.is_file() or path.is_dir()):  # a FIFO or device would block the reader
        raise InputError(f"{path} is not a regular file (a pipe or a device); save the data "
                         "to a file and pass that")
    targets = [x for t in ([target] if isinstance(target, str) else list(target))
               for x in str(t).split(",") if x]
    folder = OutputFolder(out_dir, force=force, inputs=[path, *([] if test is None else [test])])
    with folder:
        out = folder.stage
        names, rows = _columns_and_shape(path, sep)
        feats = None
        if names is not None:
            missing = [t for t in targets if t not in names]
            if missing:
                shown = ", ".join(names[:8]) + (" ..." if len(names) > 8 else "")
                raise InputError(f"{path}: target column {missing[0]!r} not found; columns are: {shown}")
            feats = _resolve_features(names, targets, features, exclude)
        elif features or exclude:
            raise InputError(f"{path}: --features/--exclude need named columns (CSV or Parquet)")
        wide = rows is not None and feats is not None and len(feats) > rows
        digests, hash_notes = _file_digests(path)
        if test is not None:
            tdig, tnotes = _file_digests(Path(test))
            digests.update(tdig)
            hash_notes += tnotes
        if wide:
            from paths.data.chunks import DEFAULT_BLOCK_COLUMNS
            from paths.engines.wide import wide_path

            if engine == "dask":
                raise InputError(f"{path} is wide ({rows} rows x {len(feats)} features): use "
                                 "--engine stream (column blocks); the dask engine splits rows")
            if cv is not None:
                raise InputError("--cv with wide data needs the in-memory engine (--engine memory)")
            if path.is_dir():
                raise InputError(f"{path}: wide data must be one Parquet file (columns are read "
                                 "selectively); combine the parts")
            result = wide_path(path, target=targets if len(targets) > 1 else targets[0],
                               features=feats, X_test=test, accurate=accurate, rank=rank,
                               block_columns=chunk_rows or DEFAULT_BLOCK_COLUMNS,
                               n_lambdas=n_lambdas, standardize=standardize, progress=progress)
        elif engine == "stream":
            from paths.data.chunks import DEFAULT_CHUNK_ROWS
            from paths.engines.stream import stream_path

            result = stream_path(path, target=targets, features=feats, sep=sep,
                                 chunk_rows=chunk_rows or DEFAULT_CHUNK_ROWS, accurate=accurate,
                                 standardize=standardize, test=test, n_lambdas=n_lambdas, cv=cv,
                                 cv_seed=cv_seed, rank=rank, progress=progress)
        else:
            from paths.engines.dask_cluster import dask_path

            # a remote scheduler's workers do not share our working folder: absolute paths
            remote = scheduler is not None
            result = dask_path(path.resolve() if remote else path, target=targets,
                               features=feats, chunk_rows=chunk_rows,
                               accurate=accurate, scheduler=scheduler, timeout=timeout,
                               standardize=standardize,
                               test=Path(test).resolve() if remote and test is not None else test,
                               n_lambdas=n_lambdas, cv=cv,
                               cv_seed=cv_seed, rank=rank, progress=progress)
        cv_record = None
        if result.cv_mse is not None:
            cv_record = {"n_folds": result.n_folds, "repeats": 1,
                         "scheme": "blocked" if cv_seed is None else "shuffled-hash",
                         "seed": cv_seed, "scaling": "global", "method": "hat-diagonal blocks",
                         "form": "woodbury", "mse": np.asarray(result.cv_mse).tolist(),
                         "se": np.asarray(result.cv_se).tolist()}
        summary = summary_dict(
            result,
            target=targets[0] if len(targets) == 1 else targets,
            source=str(path),
            input_sha256=digests,
            split=None,
            command_line=shlex.join(command_line if command_line is not None else sys.argv),
            data_notes=list(result.notes) + hash_notes,
            engine=result.engine_record(),
            cv=cv_record,
        )
        if result.cv_mse is not None:
            cvm = result.cv_mse if result.cv_mse.ndim == 1 else result.cv_mse[:, 0]
            i = int(np.argmin(cvm))
            summary["selected"]["cv"] = {"lambda": float(result.lambdas[i]),
                                         "df": float(result.df[i]), "index": i,
                                         "value": float(cvm[i])}
        files = [write_csv(out / "path.csv", *_per_target(path_table, result, targets))]
        if result.coef is not None:
            files.append(write_csv(out / "coefficients.csv",
                                   *_per_target(coefficient_table, result, targets)))
        drawable = result.coef is not None and (formats or report)
        if drawable:
            from paths.present.report import report_numbers, write_explore_outputs

            summary["report"] = report_numbers(summary)
        files.append(write_json(out / "summary.json", summary))
        if result.coef is not None and result.engine != "wide":  # wide: no right factors kept
            files.append(write_engine_fit(out / "fit.npz", result, targets, str(path), digests))
        if drawable:
            files += write_explore_outputs(result, summary, out, formats=formats or (),
                                           width=width, x=x_axis, report=report)
    return ExploreRun(result=result, summary=summary, out_dir=folder.target,
                      files=folder.final_paths(files))
