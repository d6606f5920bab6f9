"""The explore workflow for data that need not fit in memory: row-streamed, wide, dask.

:func:`explore_engine` is :func:`paths.workflows.explore.run_explore` with
``EngineOptions(engine="stream" | "dask")``: tall files (rows >= features) go to
:func:`paths.engines.stream.stream_path` (or
:func:`paths.engines.dask_cluster.dask_path`), wide Parquet files (more
feature columns than rows) to :func:`paths.engines.wide.wide_path`.  It
writes what the in-memory workflow writes (``path.csv``, ``coefficients.csv``,
``summary.json`` with an ``engine`` record, the figures and the report).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from paths.data.stdin import source_name
from paths.data.validation import InputError
from paths.workflows.explore import ExploreRun, check_figures, command_text, per_target
from paths.workflows.options import (DataOptions, EngineOptions, FigureOptions, FitOptions,
                                     OutputOptions)
from paths.workflows.stages import SELECT, TABLES, stage

__all__ = ["explore_engine", "unsupported_options", "write_engine_fit", "ENGINES"]

ENGINES = ("memory", "stream", "dask")
_HASH_LIMIT = 2 << 30  # files above 2 GiB are recorded by size, not hashed (another full read)
# options the out-of-memory engines do not offer (they keep their defaults)
_DATA_ONLY_IN_MEMORY = ("weights",)
_FIT_ONLY_IN_MEMORY = ("unpenalized", "relative_penalty", "intervals")
_WHY = {**{name: " (its one-pass moments are unweighted and penalize every column)"
           for name in ("weights", "unpenalized", "relative_penalty")},
        "intervals": " (the leave-out fits use the left singular vectors)"}


def unsupported_options(data: DataOptions, fit: FitOptions, *, wide: bool = False) -> list:
    """The options set away from their defaults that the out-of-memory engines do not offer
    (none with ``wide``: the column-blocked engine refuses what it cannot do itself, with
    its reasons, :data:`paths.workflows.wide.WIDE_REFUSALS`)."""
    defaults = {DataOptions: DataOptions(), FitOptions: FitOptions()}
    out = []
    for opts, names in ((data, _DATA_ONLY_IN_MEMORY), (fit, _FIT_ONLY_IN_MEMORY)):
        default = defaults[type(opts)]
        out += [n for n in names if getattr(opts, n) != getattr(default, n)]
    return [] if wide else out


def _file_digests(path: Path) -> tuple[dict, list]:
    from paths.data.tables import sha256_of

    files = sorted(f for f in path.rglob("*") if f.is_file()) if path.is_dir() else [path]
    out, notes = {}, []
    for f in files:
        size = f.stat().st_size
        if size <= _HASH_LIMIT:
            out[source_name(f)] = sha256_of(f)  # "standard input" for '-'
        else:
            out[source_name(f)] = None
            notes.append(f"{f}: {size} bytes, not hashed (over 2 GiB; another full read)")
    return out, notes


def _columns_and_shape(path: Path, sep=None):
    """Column names and (rows or None) of a data file, from metadata or the header only."""
    suffix = path.suffix.lower()
    if path.is_dir() or suffix in (".parquet", ".pq", ".parq"):
        import pyarrow.parquet as pq

        from paths.data.chunks import parquet_files

        files = parquet_files(path)
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
                         "(sep) and that it is UTF-8 text") from None
    with open(path, "rb") as fh:  # a header without data rows: refused here, not mid-pass
        fh.readline()
        if not any(line.strip() for line in fh):
            raise InputError(f"{path} has a header row but no data rows; add data rows")
    return names, None


def _resolve_features(names, targets, features, exclude):
    from fnmatch import fnmatchcase

    pool = [c for c in names if c not in targets]
    if features:
        chosen = [c for c in pool if any(fnmatchcase(c, pt) for pt in features)]
        if not chosen:
            raise InputError(f"features {', '.join(features)} match no column; check the names")
        pool = chosen
    if exclude:
        pool = [c for c in pool if not any(fnmatchcase(c, pt) for pt in exclude)]
    if not pool:
        raise InputError("no feature columns left after features/exclude; keep some")
    return pool


def _plan(data: DataOptions):
    """(path, targets, feature columns or None, wide?) from the file's metadata."""
    path = Path(data.file)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder; check the path")
    if not (path.is_file() or path.is_dir()):  # a FIFO or device would block the reader
        raise InputError(f"{path} is not a regular file (a pipe or a device); save the data "
                         "to a file and pass that")
    targets = list(data.target)
    names, rows = _columns_and_shape(path, data.sep)
    feats = None
    if names is not None:
        missing = [t for t in targets if t not in names]
        if missing:
            shown = ", ".join(names[:8]) + (" ..." if len(names) > 8 else "")
            raise InputError(f"{path}: target column {missing[0]!r} not found; columns are: {shown}")
        for col, flag in ((data.id_column, "id_column"), (data.groups, "groups")):
            if col is not None and col not in names:
                raise InputError(f"{path}: {flag} column {col!r} not found; columns are: "
                                 f"{', '.join(names[:8])}")
        keep_out = [c for c in (data.id_column, data.groups) if c is not None]
        feats = _resolve_features([c for c in names if c not in keep_out], targets,
                                  data.features, data.exclude)
    elif data.features or data.exclude or data.id_column or data.groups:
        raise InputError(f"{path}: features/exclude/id_column/groups need named columns "
                         "(CSV or Parquet)")
    if rows is None and feats is not None and names is not None:  # delimited text
        rows = _text_rows_below(path, data.sep, len(feats))
    wide = rows is not None and feats is not None and len(feats) > rows
    return path, targets, feats, wide, rows


def _text_rows_below(path: Path, sep, limit: int):
    """The data lines of a text file when fewer than ``limit`` (it is wide), else None;
    counted from the first data line the in-memory reader finds, stopping at ``limit``."""
    from paths.data.tables import text_layout

    layout = text_layout(path, sep=sep)
    count = 0
    with open(path, "rb") as fh:
        for i, line in enumerate(fh, start=1):
            if i >= layout.data_line and line.strip():
                count += 1
                if count >= limit:
                    return None
    return count


def _fit(data: DataOptions, fit: FitOptions, engine: EngineOptions, progress):
    """Run the engine; returns its path result."""
    path, targets, feats, wide, rows = _plan(data)
    if wide:  # more feature columns than rows: column blocks (paths.workflows.wide)
        from paths.workflows.wide import fit_wide

        return fit_wide(data, fit, engine, path=path, targets=targets, feats=feats, rows=rows,
                        progress=progress)
    return _tall(path, targets, feats, data, fit, engine, progress)


def _tall(path, targets, feats, data: DataOptions, fit: FitOptions, engine: EngineOptions,
          progress):
    """Tall data on the row-streamed or the dask engine."""
    from paths.data.chunks import DEFAULT_CHUNK_ROWS

    test = data.test_file
    common = dict(target=targets, features=feats, accurate=engine.accurate, solver=fit.solver,
                  standardize=fit.standardize, n_lambdas=fit.n_lambdas, n_folds=fit.n_folds,
                  fold_scheme=fit.fold_scheme, cv_scaling=fit.cv_scaling, repeats=fit.repeats,
                  holdout=data.holdout, seed=fit.seed, rank=engine.rank, encode=data.encode,
                  drop_missing=data.drop_missing, progress=progress)
    if engine.name == "stream":
        from paths.engines.stream import stream_path

        return stream_path(path, sep=data.sep, test=test, groups=data.groups,
                           chunk_rows=engine.chunk_rows or DEFAULT_CHUNK_ROWS, **common)
    from paths.engines.dask_cluster import dask_path

    if data.groups is not None:
        raise InputError("groups with engine dask: the group labels of every row would have to "
                         "be gathered on the client; use engine stream (it reads them in "
                         "chunks) or engine memory")
    if engine.scheduler is not None:  # a remote scheduler's workers do not share our folder
        path = path.resolve()
        test = None if test is None else Path(test).resolve()
    return dask_path(path, test=test, chunk_rows=engine.chunk_rows, scheduler=engine.scheduler,
                     timeout=engine.scheduler_timeout, **common)


def _kfold(result, progress):
    """K-fold CV from the engine's per-fold factors, or None.  The folds are counted
    (the K-fold stage) where their errors are computed: the row engines already did on
    their pass (:meth:`paths.engines.stream.HatPass.kfold`), the wide engine does here."""
    from paths.selection.cv import cv_from_fold_stats

    if result.fold_stats is None:
        return None
    return cv_from_fold_stats(result.fold_stats, result.fold_plan, result.lambdas,
                              multi_target=result.multi_target, progress=progress)


def explore_engine(data: DataOptions, fit: FitOptions = FitOptions(),
                   figures: FigureOptions = FigureOptions(),
                   output: OutputOptions = OutputOptions(), *,
                   engine: EngineOptions = EngineOptions(engine="stream"),
                   progress=None, extra: dict | None = None) -> ExploreRun:
    """The explore workflow on the ``stream`` or ``dask`` engine (see the module docstring).

    Every selection rule is refined between grid points on the engine's own
    path, as in memory (GCV from the factor state, K-fold at any penalty from
    the per-fold factors, leave-one-out at a new penalty by one more pass over
    the rows, counted in the data notes).  ``progress(stage, done, total)``
    reports each pass, the K-fold stage fold by fold, and the workflow's stages.
    ``extra`` keys are added to ``summary.json`` (the note of an ``engine_choice``
    also to its data notes).
    """
    if engine.name not in ("stream", "dask"):
        raise InputError(f"engine must be one of {', '.join(ENGINES)}; got {engine.engine!r}")
    bad = unsupported_options(data, fit, wide=data.file is not None and _plan(data)[3])
    if bad:
        raise InputError(f"{bad[0]} is not available with engine {engine.name}"
                         f"{_WHY.get(bad[0], '')}; drop it or use engine memory")
    check_figures(figures)
    if data.file is None:
        raise InputError(f"the {engine.name} engine reads a data file; give one")
    inputs = [Path(data.file), *([] if data.test_file is None else [Path(data.test_file)])]
    from paths.selection.rules import select_penalty

    with output.folder(inputs) as folder:
        result = _fit(data, fit, engine, progress)
        cv_res = _kfold(result, progress)
        with stage(progress, SELECT):  # every rule, refined between grid points on the
            selection = select_penalty(result, cv_res, reported=fit.rule)  # engine's own path
        digests, hash_notes = {}, []
        for f in inputs:
            dig, notes = _file_digests(f)
            digests.update(dig)
            hash_notes += notes
        loo_passes = 0 if result.loo_at is None else result.loo_at.passes
        if loo_passes:
            hash_notes.append(f"{loo_passes} extra pass(es) over the rows for leave-one-out "
                              "between grid points (selection refinement and error estimates)")
        note = (extra or {}).get("engine_choice", {}).get("note")
        summary = _engine_summary(result, data, fit, output, digests,
                                  hash_notes + ([note] if note else []), cv_res, selection)
        summary.update(extra or {})
        files = _write_engine(result, summary, folder.stage, list(data.target), figures,
                              source=source_name(data.file), digests=digests, selection=selection,
                              progress=progress)
    return ExploreRun(result=result, summary=summary, out_dir=folder.target,
                      files=folder.final_paths(files))


def _engine_summary(result, data, fit, output, digests, hash_notes, cv_res, selection) -> dict:
    from paths.present.summary import summary_dict
    from paths.workflows.explore import by_target_record, cv_record

    targets = list(data.target)
    split = None
    if data.holdout is not None:
        split = {"holdout": data.holdout, "seed": fit.seed, "n_test": int(result.n_test)}
    summary = summary_dict(
        result, target=targets[0] if len(targets) == 1 else targets, source=source_name(data.file),
        input_sha256=digests, split=split, command_line=command_text(output),
        data_notes=list(result.notes) + hash_notes, engine=result.engine_record(),
        noise_variance=selection.noise.as_dict(None if result.multi_target else 0),
        reported=selection.reported, cv=None if cv_res is None else cv_record(cv_res))
    summary["selected"] = {**summary["selected"], **selection.as_dict(0)}
    if len(targets) > 1:
        summary["targets"] = targets
        summary["by_target"] = by_target_record(summary, result, selection, targets)
    return summary


def write_engine_fit(dest: Path, result, targets, source: str, input_sha256=None, *,
                     selection) -> Path:
    """A predict-only ``fit.npz`` of an out-of-memory engine's path, at every rule's
    refined choice (the reported rule's, else GCV's)."""
    from paths.present.fitfile import save_fit

    rules = {}
    for rule in selection.per_target[0]:
        lams = [sel[rule].lam for sel in selection.per_target]
        rules[rule] = None if any(v is None for v in lams) else [float(v) for v in lams]
    reported, rule = selection.chosen_lambdas(), selection.reported
    if not np.all(np.isfinite(reported)):  # the reported rule gave no penalty: GCV's instead
        reported, rule = np.array(rules["gcv"], dtype=float), f"gcv (rule {rule} gave none)"
    prep = {"source_columns": list(result.feature_names), "encoding": {}, "drop_missing": None,
            **(getattr(result, "preparation", None) or {}),
            "id_column": None, "target_names": list(targets), "source": source}
    return save_fit(dest, result, reported=reported, reported_rule=rule, rules=rules,
                    preparation=prep, input_sha256=input_sha256)


def _write_engine(result, summary: dict, out: Path, targets, figures: FigureOptions, *,
                  source: str, digests: dict, selection, progress=None) -> list:
    """path.csv, coefficients.csv and fit.npz (when the engine kept coefficients),
    summary.json, figures, report."""
    from paths.data.output import write_csv, write_json
    from paths.present.summary import coefficient_table, path_table

    formats, width = check_figures(figures)
    drawable = result.coef is not None and (formats or figures.report)
    with stage(progress, TABLES):
        files = [write_csv(out / "path.csv", *per_target(path_table, result, targets))]
        if result.coef is not None:
            files.append(write_csv(out / "coefficients.csv",
                                   *per_target(coefficient_table, result, targets)))
        if drawable:
            from paths.present.report import report_numbers, write_explore_outputs

            summary["report"] = report_numbers(summary)
        files.append(write_json(out / "summary.json", summary))
        if result.coef is not None and result.engine != "wide":  # wide: no right factors kept
            files.append(write_engine_fit(out / "fit.npz", result, targets, source, digests,
                                          selection=selection))
    if drawable:
        files += write_explore_outputs(result, summary, out, formats=formats, width=width,
                                       x=figures.figure_x, report=figures.report, progress=progress)
    return files

