"""The explore workflow: read → prepare → factor → path → select → record → draw → report.

:func:`run_explore` is what ``paths explore`` and an ``analysis = "explore"``
case file call; both hand over the same options
(:mod:`paths.workflows.options`), so the same options give the same numbers and
the same files.  The steps are functions of their own: :func:`fit_and_select`
(factor, path, K-fold CV, selection rules), :func:`explore_record` (the
``summary.json`` record) and :func:`write_explore` (tables, figures, report).
"""
from __future__ import annotations

import shlex
import sys
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from paths.data.validation import InputError
from paths.workflows.options import (DataOptions, EngineOptions, FigureOptions, FitOptions,
                                     OutputOptions)
from paths.workflows.prepare import Prepared, TrainTest, prepare, train_test
from paths.workflows.stages import (FACTOR, INTERVALS, READ, RECORD, SAVE_FIT, SELECT, TABLES,
                                    stage)

__all__ = ["ExploreRun", "Fitted", "run_explore", "explore_prepared", "fit_and_select",
           "explore_record", "write_explore", "write_saved_fit", "prediction_intervals_step",
           "per_target", "command_text", "folds_for",
           "check_figures"]


@dataclass(frozen=True)
class ExploreRun:
    """What an explore run produced: the path, the summary record and the files written."""

    result: object  # RidgePath (or an engine's path)
    summary: dict
    out_dir: Path
    files: list = field(default_factory=list)
    selection: object = None  # SelectionReport: every rule side by side
    cv: object = None  # CVResult, when K-fold CV was asked for


@dataclass(frozen=True)
class Fitted:
    """The fitted path, every selection rule, and K-fold CV (record and result) when asked."""

    result: object
    selection: object
    cv_record: dict | None
    cv: object
    data: TrainTest


def command_text(output: OutputOptions) -> str:
    """The command line recorded in the outputs (this process's, when none was given)."""
    return shlex.join(output.command_line or ["paths", *sys.argv[1:]])


def check_figures(figures: FigureOptions) -> tuple:
    """Validate the figure options before any work; returns ``(formats, width)``."""
    from paths.present.figures import parse_formats, parse_width

    formats = parse_formats(figures.formats) if figures.formats else ()
    width = parse_width(figures.width)
    if figures.figure_x not in ("log_lambda", "df"):
        raise InputError(f"figure_x must be log_lambda or df (the axis of the path figures); "
                         f"got {figures.figure_x!r}")
    return formats, width


def run_explore(data: DataOptions, fit: FitOptions = FitOptions(),
                figures: FigureOptions = FigureOptions(),
                output: OutputOptions = OutputOptions(), *,
                engine: EngineOptions = EngineOptions(), base_dir=None, extra: dict | None = None,
                progress=None) -> ExploreRun:
    """The whole explore workflow from options: prepare the data, fit, select, write.

    ``engine`` other than in-memory runs :func:`paths.workflows.engines.explore_engine`
    (the file is not read into memory); ``base_dir`` is the folder relative
    data paths are read from; ``extra`` keys are added to ``summary.json``;
    ``progress(stage, done, total)`` hears every stage (:mod:`paths.workflows.stages`) and
    the out-of-memory engines' passes.
    """
    from paths.workflows.choose_engine import choose_engine

    check_figures(figures)
    here = data
    if engine.engine == "auto" and base_dir is not None:  # files as the streaming engine sees them
        here = replace(data, **{k: Path(base_dir) / getattr(data, k)
                                for k in ("file", "test_file") if getattr(data, k) is not None})
    choice = choose_engine(here, fit, engine)
    extra = {**(extra or {}), **choice.extra}
    if choice.options.name != "memory":
        from paths.workflows.engines import explore_engine

        return explore_engine(here, fit, figures, output, engine=choice.options,
                              progress=progress, extra=extra)
    with stage(progress, READ):
        prepared = prepare(data, base_dir=base_dir)
    return explore_prepared(prepared, fit, figures, output, holdout=data.holdout, extra=extra,
                            progress=progress)


def explore_prepared(prepared: Prepared, fit: FitOptions = FitOptions(),
                     figures: FigureOptions = FigureOptions(),
                     output: OutputOptions = OutputOptions(), *, holdout: float | None = None,
                     extra: dict | None = None, progress=None) -> ExploreRun:
    """Fit, select, record and write on prepared data (the steps after :func:`prepare`);
    ``progress(stage, done, total)`` as in :func:`run_explore`."""
    from paths.data.validation import check_rows_for_cv

    check_figures(figures)
    check_rows_for_cv(prepared.train.X.shape[0], fit.n_folds, prepared.train.source)
    if fit.intervals is not None and prepared.test is None and holdout is None:
        raise InputError("intervals needs test rows: pass test_file FILE or holdout FRACTION")
    targets = prepared.train.target_names
    with output.folder(prepared.digests) as folder:
        fitted = fit_and_select(prepared, fit, holdout=holdout, progress=progress)
        with stage(progress if fit.intervals is not None else None, INTERVALS):
            record, table = prediction_intervals_step(fitted, fit, targets)
        with stage(progress, RECORD):
            summary = explore_record(prepared, fitted, fit, command_line=command_text(output),
                                     extra=extra, intervals=record)
        files = write_explore(fitted, summary, folder.stage, targets, figures,
                              progress=progress)
        with stage(progress, SAVE_FIT):
            if table is not None:
                from paths.data.output import write_csv

                files.append(write_csv(folder.stage / "intervals.csv", *table))
            files.append(write_saved_fit(folder.stage / "fit.npz", fitted.result,
                                         fitted.selection, prepared.train, prepared.digests))
    return ExploreRun(result=fitted.result, summary=summary, out_dir=folder.target,
                      files=folder.final_paths(files), selection=fitted.selection, cv=fitted.cv)


def fit_and_select(prepared: Prepared, fit: FitOptions, *, holdout=None,
                   progress=None) -> Fitted:
    """Factor and fit the whole path, run K-fold CV when asked, apply every selection rule."""
    import pandas as pd

    from paths.core.path import fit_path

    data = train_test(prepared, holdout=holdout, seed=fit.seed)
    frame = pd.DataFrame(data.X, columns=prepared.train.feature_names, copy=False)  # a view
    with stage(progress, FACTOR):
        result = fit_path(frame, data.y, n_lambdas=fit.n_lambdas, standardize=fit.standardize,
                          solver=fit.solver, X_test=data.X_test, y_test=data.y_test,
                          sample_weight=data.weights,
                          test_weight=data.test_weights if data.X_test is not None else None,
                          unpenalized=fit.unpenalized, relative_penalty=fit.relative_penalty)
    selection, record, cv_res = select_rules(result, data, fit, progress=progress)
    return Fitted(result=result, selection=selection, cv_record=record, cv=cv_res, data=data)


def folds_for(groups, n_rows: int, fit: FitOptions):
    """The number of folds: the option, or min(10, number of groups) with groups only."""
    if groups is not None:
        if groups.shape[0] != n_rows:
            raise InputError(f"the group column has {groups.shape[0]} values for {n_rows} "
                             "rows (rows were dropped?); give every row a group")
        return fit.n_folds if fit.n_folds is not None else min(10, np.unique(groups).size)
    if fit.n_folds is None and fit.repeats != 1:
        raise InputError("repeats needs n_folds (K-fold cross-validation)")
    return fit.n_folds


def prediction_intervals_step(fitted: Fitted, fit: FitOptions, targets) -> tuple:
    """Prediction intervals for the test rows at the reported penalty of each target:
    ``(summary record, (header, rows) of intervals.csv)``, or ``(None, None)``."""
    if fit.intervals is None:
        return None, None
    from paths.present.summary import interval_record, interval_table
    from paths.selection.intervals import prediction_intervals

    data, cv_res = fitted.data, fitted.cv
    folds = cv_res.labels[0] if cv_res is not None and fit.interval_method == "cv+" else None
    pi = prediction_intervals(fitted.result, data.X_test, fitted.selection.chosen_lambdas(),
                              level=fit.intervals, method=fit.interval_method, folds=folds,
                              seed=fit.seed)
    return (interval_record(pi, data.y_test),
            interval_table(pi, [int(r) for r in data.test_rows], targets))


def cv_record(cv_res) -> dict:
    """The ``cv`` record of ``summary.json`` from a :class:`~paths.selection.cv.CVResult`."""
    def lst(a):
        return None if a is None else np.asarray(a, dtype=float).tolist()

    return {"n_folds": cv_res.n_folds, "repeats": cv_res.repeats, "scheme": cv_res.scheme,
            "seed": cv_res.seed, "scaling": cv_res.scaling, "method": cv_res.method,
            "form": cv_res.form, "method_reason": cv_res.method_reason,
            "fold_sizes": cv_res.fold_sizes.tolist(), "mse": lst(cv_res.mse),
            "se": lst(cv_res.se), "se_repeats": lst(cv_res.se_repeats)}


def select_rules(result, data: TrainTest, fit: FitOptions, *, progress=None):
    """K-fold CV (when asked) and every selection rule; ``(report, cv record, CVResult)``."""
    from paths.selection.cv import cross_validate
    from paths.selection.rules import select_penalty

    groups = None if data.groups is None else np.asarray(data.groups)
    n_folds = folds_for(groups, data.X.shape[0], fit)
    cv_res = None
    if n_folds is not None:  # the K-fold stage (KFOLD), counted per fold by cross_validate
        cv_res = cross_validate(data.X, data.y, path=result, n_folds=n_folds,
                                scheme=fit.fold_scheme, seed=fit.seed, repeats=fit.repeats,
                                groups=groups, scaling=fit.cv_scaling, progress=progress)
    with stage(progress, SELECT):
        report = select_penalty(result, cv_res, reported=fit.rule)
    return report, None if cv_res is None else cv_record(cv_res), cv_res


def by_target_record(summary: dict, result, selection, targets) -> dict:
    from paths.present.summary import selections

    mn = summary["min_norm"]
    return {name: {"selected": {**selections(result, j), **selection.as_dict(j)},
                   "min_norm": {k: mn[k][j] if isinstance(mn[k], list) else mn[k] for k in mn}}
            for j, name in enumerate(targets)}


def penalty_record(result, relative_penalty) -> dict:
    """summary.json keys for row weights, unpenalized columns and relative penalties."""
    return {"weighted": bool(result.weighted), "unpenalized": list(result.unpenalized),
            "relative_penalty": {str(k): float(v) for k, v in (relative_penalty or {}).items()}}


def explore_record(prepared: Prepared, fitted: Fitted, fit: FitOptions, *, command_line: str,
                   extra: dict | None = None, intervals: dict | None = None) -> dict:
    """The ``summary.json`` record of an in-memory explore run."""
    from paths.present.report import report_numbers
    from paths.present.summary import add_choice_errors, summary_dict

    train, result, selection = prepared.train, fitted.result, fitted.selection
    targets = list(train.target_names)
    summary = summary_dict(
        result, target=targets[0] if len(targets) == 1 else targets, source=train.source,
        input_sha256=dict(prepared.digests), split=fitted.data.split,
        command_line=command_line, data_notes=prepared.notes,
        data_preparation=train.record(),
        noise_variance=selection.noise.as_dict(None if result.multi_target else 0),
        reported=selection.reported, cv=fitted.cv_record)
    summary["selected"] = {**summary["selected"], **selection.as_dict(0)}
    summary.update(penalty_record(result, fit.relative_penalty))
    if len(targets) > 1:
        summary["targets"] = targets
        summary["by_target"] = by_target_record(summary, result, selection, targets)
    if prepared.generator is not None:
        summary["generator"] = prepared.generator
    if intervals is not None:
        summary["intervals"] = intervals
    summary.update(extra or {})
    data = fitted.data
    add_choice_errors(summary, result, X_train=data.X, X_test=data.X_test, y_test=data.y_test)
    summary["report"] = report_numbers(summary)
    return summary


def write_saved_fit(dest: Path, result, selection, data, input_sha256: dict | None = None,
                    **header_kw) -> Path:
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
                    preparation=prep, input_sha256=input_sha256, **header_kw)


def per_target(table, result, targets) -> tuple[list, list]:
    """One table for one target; for several, each target's rows under a ``target`` column."""
    if len(targets) == 1:
        return table(result)
    header, rows = None, []
    for j, name in enumerate(targets):
        h, r = table(result, j)
        header = ["target", *h]
        rows.extend([name, *row] for row in r)
    return header, rows


def write_explore(fitted, summary: dict, out: Path, targets, figures: FigureOptions, *,
                  progress=None) -> list:
    """path.csv, coefficients.csv, model.csv, summary.json, then the figures and the report."""
    from paths.data.output import write_csv, write_json
    from paths.present.report import write_explore_outputs
    from paths.present.summary import (coefficient_table, model_table, path_table,
                                       reported_lambdas, targets_table, write_coefficients)

    formats, width = check_figures(figures)
    result = fitted.result
    with stage(progress, TABLES):
        files = [write_csv(out / "path.csv", *per_target(path_table, result, targets)),
                 write_coefficients(out, *per_target(coefficient_table, result, targets)),
                 write_csv(out / "model.csv",
                           *model_table(result, reported_lambdas(summary), targets)),
                 write_json(out / "summary.json", summary)]
        if len(targets) > 1:  # one row per target: every target's choice in one table
            files.append(write_csv(out / "targets.csv", *targets_table(summary)))
    if formats or figures.report:
        files += write_explore_outputs(result, summary, out, cv=fitted.cv, formats=formats,
                                       width=width, x=figures.figure_x, report=figures.report,
                                       progress=progress)
    return files
