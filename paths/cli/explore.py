"""``paths explore``: the whole path of one dataset, printed and written to a folder."""
from __future__ import annotations

import sys
from enum import Enum
from pathlib import Path

import typer
from rich.table import Table

from paths.workflows.analysis import (explore, load_data, parse_relative_penalties, read_groups,
                                      read_weights)
from paths.data.validation import check_rows_for_cv
from paths.cli.app import command, console, emit_summary, stdin_file


class Solver(str, Enum):
    auto = "auto"
    svd = "svd"
    gram = "gram"


class Encode(str, Enum):
    none = "none"
    onehot = "onehot"


class DropMissing(str, Enum):
    rows = "rows"
    columns = "columns"


class Folds(str, Enum):
    shuffled = "shuffled"
    blocked = "blocked"


class CVScaling(str, Enum):
    global_ = "global"
    per_fold = "per-fold"


class IntervalMethod(str, Enum):
    jackknife_plus = "jackknife+"
    cv_plus = "cv+"
    split = "split"


class Engine(str, Enum):
    memory = "memory"
    stream = "stream"
    dask = "dask"


def _fmt_or(v, fmt="{:.4g}") -> str:
    return "n/a" if v is None else fmt.format(float(v))


def print_rules(run) -> None:
    """The selection rules side by side; the reported choice is marked with ``*``."""
    s = run.summary
    targets = s.get("targets") or [None]
    for name in targets:
        sel_all = s["selected"] if name is None else s["by_target"][name]["selected"]
        title = "penalty choice, every rule (* = reported)" + (
            "" if name is None else f" (target {name})")
        t = Table(title=title, title_justify="left")
        for col in ("rule", "lambda", "df", "fraction", "est. MSE", "SE", "from"):
            t.add_column(col, justify="left" if col in ("rule", "from") else "right",
                         no_wrap=True)
        notes = []
        for rule, sel in sel_all.items():
            if rule == "test" or "fraction" not in sel:
                continue
            mark = "* " if rule == s.get("reported") else "  "
            t.add_row(mark + rule, _fmt_or(sel["lambda"]), _fmt_or(sel["df"], "{:.2f}"),
                      _fmt_or(sel["fraction"], "{:.3f}"), _fmt_or(sel["est_mse"]),
                      _fmt_or(sel["est_se"]), sel.get("est_source") or "")
            if sel.get("note"):
                notes.append(f"  {rule}: {sel['note']}")
        console.print(t)
        for line in notes:
            console.print(line, markup=False, soft_wrap=True)
    nv = s.get("noise_variance")
    if nv:
        val = nv["value"]
        shown = ", ".join(f"{v:.4g}" for v in val) if isinstance(val, list) else f"{val:.4g}"
        console.print(f"noise variance {shown}  ({nv['formula']}; {nv['reference']})",
                      markup=False)


def print_intervals(run) -> None:
    """One line per target: the prediction intervals' level, method, coverage and width."""
    rec = run.summary.get("intervals")
    if not rec:
        return
    cov, wid = rec["coverage"], rec["mean_width"]
    cov, wid = (cov, wid) if isinstance(cov, list) else ([cov], [wid])
    for j, name in enumerate(run.summary.get("targets") or [None]):
        console.print(f"prediction intervals{'' if name is None else f' ({name})'}: level "
                      f"{rec['level']:g}, {rec['method']}, coverage on {rec['n_test']} test rows "
                      f"{cov[j]:.3f}, mean width {wid[j]:.4g}; {rec['guarantee']}", markup=False)


def _fmt(v) -> str:
    return "n/a" if v is None else f"{float(v):.4g}"


def print_summary(run) -> None:
    """The compact console summary of an explore run."""
    r, s = run.result, run.summary
    t = Table(title="ridge path (minimize ||y - b0 - X beta||^2 + lambda ||beta||^2)",
              show_header=False, title_justify="left")
    t.add_column("quantity")
    t.add_column("value")
    t.add_row("samples x features", f"{r.n_samples} x {r.n_features}  (p/n = {s['p_over_n']:.3g})")
    if r.n_test:
        t.add_row("test rows", str(r.n_test))
    t.add_row("rank / condition number", f"{r.rank} / {r.condition_number:.3g}")
    t.add_row("solver", f"{r.solver} ({r.solver_reason})")
    t.add_row("scaling", "standardized (population SD)" if r.standardize else "centered only")
    console.print(t)
    targets = s.get("targets") or [None]
    for j, name in enumerate(targets):  # one table per target (several with --target a --target b)
        sel_all = s["selected"] if name is None else s["by_target"][name]["selected"]
        mn = s["min_norm"] if name is None else s["by_target"][name]["min_norm"]

        def at(vals, i=None):
            if vals is None:
                return None
            v = vals if i is None else vals[i]
            return v if name is None or not isinstance(v, list) else v[j]

        title = "choices and errors" + ("" if name is None else f" (target {name})")
        c = Table(title=title, title_justify="left")
        for col in ("fit", "lambda", "df", "train MSE", "GCV", "LOO MSE", "test MSE"):
            c.add_column(col, justify="right" if col != "fit" else "left")
        for rule, sel in sel_all.items():
            if rule not in ("gcv", "loo", "test"):
                continue  # the other rules: print_rules
            i = sel["index"]
            row = [f"min {rule.upper()}", _fmt(sel["lambda"]), f"{sel['df']:.2f}"]
            for key in ("train_mse", "gcv", "loo_mse", "test_mse"):
                row.append(_fmt(at(s[key], i)))
            c.add_row(*row)
        c.add_row("min-norm (lambda -> 0+)", "0", f"{mn['df']:.0f}", _fmt(at(mn["train_mse"])),
                  _fmt(at(mn["gcv"])), _fmt(at(mn["loo_mse"])), _fmt(at(mn["test_mse"])))
        console.print(c)
    for note in s.get("data_notes", []):
        console.print(f"note: {note}", markup=False)
    console.print(f"wrote {', '.join(f.name for f in run.files)} to {run.out_dir}")


@command("explore")
def explore_cmd(
    data: Path = typer.Argument(..., help="Data file: CSV/TSV (delimiter and header detected), "
                                "Parquet, or NumPy .npy/.npz."),
    target: list[str] = typer.Option(..., "--target", "-t",
                                     help="Response column; repeat (or comma-separate) for several."),
    sep: str = typer.Option(None, "--sep", help="Delimiter of a text file (e.g. ',', ';', tab); "
                            "detected by default."),
    features: list[str] = typer.Option(None, "--features", help="Feature columns: names or glob "
                                       "patterns (repeat or comma-separate); default all others."),
    exclude: list[str] = typer.Option(None, "--exclude", help="Columns (names or glob patterns) "
                                      "left out of the features."),
    id_column: str = typer.Option(None, "--id", help="Identifier column, kept out of the design."),
    encode: Encode = typer.Option(Encode.none, "--encode", help="Categorical (text) columns: "
                                  "refused (none) or one-hot encoded, reference level dropped."),
    drop_missing: DropMissing = typer.Option(None, "--drop-missing", help="Missing values: "
                                             "refused by default; drop the rows or the columns."),
    test: Path = typer.Option(None, "--test", help="Separate test file with the same columns."),
    holdout: float = typer.Option(None, "--holdout", help="Hold out this fraction of rows as a test set."),
    seed: int = typer.Option(0, "--seed", help="Seed for --holdout."),
    lambdas: int = typer.Option(100, "--lambdas", help="Number of penalties on the default grid."),
    standardize: bool = typer.Option(True, "--standardize/--no-standardize",
                                     help="Scale columns to unit population SD before penalizing."),
    solver: Solver = typer.Option(Solver.auto, "--solver", help="Factorization route."),
    out: Path = typer.Option(Path("paths-out"), "--out", "-o", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Write into a non-empty output folder."),
    cv: int = typer.Option(None, "--cv", help="K-fold cross-validation with K folds (exact, "
                           "from the one factorization)."),
    repeats: int = typer.Option(1, "--repeats", help="Repeat the seeded K-fold partition R "
                                "times (mean and standard error per penalty); seed --seed."),
    groups: str = typer.Option(None, "--groups", help="Column of group labels (subjects, sites, "
                               "batches): whole groups are held out together; not a feature."),
    weights: str = typer.Option(None, "--weights", help="Column of positive row weights "
                                "(survey weights, counts, precisions); not a feature. Every "
                                "error is then weighted."),
    unpenalized: list[str] = typer.Option(None, "--unpenalized", help="Columns (names or glob "
                                          "patterns, repeatable) fitted without penalty, like "
                                          "the intercept (e.g. age, sex, batch)."),
    relative_penalty: list[str] = typer.Option(None, "--relative-penalty", help="PATTERN=W: "
                                               "penalize those columns by W x lambda (W > 0; "
                                               "repeatable)."),
    folds: Folds = typer.Option(Folds.shuffled, "--folds", help="Fold scheme: seeded shuffle, "
                                "or contiguous blocks for ordered rows."),
    cv_scaling: CVScaling = typer.Option(CVScaling.global_, "--cv-scaling", help="Column scales "
                                         "learned on all rows (fast, slightly optimistic) or "
                                         "inside each fold (exact, refits)."),
    rule: str = typer.Option(None, "--rule", help="Reported choice: gcv, loo, cv, one-se, "
                             "df=VALUE, fraction=VALUE, hkb, lw, isotropic or reml (default: cv with "
                             "--cv, else gcv)."),
    engine: Engine = typer.Option(Engine.memory, "--engine", help="memory: read everything; "
                                  "stream: row chunks (tall) or column blocks (wide Parquet) in "
                                  "bounded memory; dask: a dask cluster (see docs/scaling.md)."),
    scheduler: str = typer.Option(None, "--scheduler", help="Address of a running dask "
                                  "scheduler, e.g. tcp://10.0.0.5:8786 (--engine dask)."),
    scheduler_timeout: float = typer.Option(10.0, "--scheduler-timeout",
                                            help="Seconds to wait for --scheduler to answer."),
    chunk_rows: int = typer.Option(None, "--chunk-rows", help="Rows per chunk (stream/dask; "
                                   "columns per block for wide data). Default 65536 / 4096."),
    accurate: bool = typer.Option(False, "--accurate", help="Chunked TSQR instead of the Gram "
                                  "matrix (stream/dask): backward stable, ~2x the arithmetic."),
    rank: int = typer.Option(None, "--rank", help="Keep the top K principal components "
                             "(randomized SVD for wide data): approximate, see the warning."),
    fig_format: str = typer.Option("png,svg", "--format", help="Figure formats, comma-separated: "
                                   "png (300 dpi), pdf (TrueType fonts), svg; or none."),
    fig_width: str = typer.Option("single", "--width", help="Figure width: single (3.5 in) or "
                                  "double (7.2 in) journal column."),
    fig_x: str = typer.Option("df", "--figure-x", help="Path figures against log_lambda "
                              "or df (effective degrees of freedom)."),
    report: bool = typer.Option(True, "--report/--no-report", help="Write report.md and a "
                                "self-contained report.html."),
    intervals: float = typer.Option(None, "--intervals", help="Prediction intervals at this "
                                    "level (e.g. 0.9) for the test rows (--test or --holdout), "
                                    "at the reported penalty: intervals.csv."),
    interval_method: IntervalMethod = typer.Option(
        IntervalMethod.jackknife_plus, "--interval-method", help="jackknife+ (coverage >= "
        "1 - 2 alpha), cv+ (the --cv folds) or split (half the training rows calibrate)."),
):
    """Fit the whole ridge path of DATA and write path.csv, coefficients.csv, summary.json."""
    from paths.present.figures import parse_formats, parse_width

    fig_formats, fig_width = parse_formats(fig_format), parse_width(fig_width)
    if fig_x not in ("log_lambda", "df"):
        from paths.data.validation import InputError

        raise InputError(f"--figure-x must be log_lambda or df; got {fig_x!r}")
    if engine is not Engine.memory or rank is not None or scheduler is not None:
        from paths.cli._engines import run_engine

        if intervals is not None:
            from paths.data.validation import InputError

            raise InputError("--intervals needs the in-memory engine (the leave-out fits use "
                             "the left singular vectors); drop --engine/--rank/--scheduler")

        run = run_engine(
            engine="dask" if scheduler is not None and engine is Engine.memory else (
                "stream" if engine is Engine.memory else engine.value),
            options=dict(holdout=holdout, groups=groups, id_column=id_column, encode=encode,
                         drop_missing=drop_missing, repeats=repeats, cv_scaling=cv_scaling,
                         rule=rule, solver=solver, folds=folds, seed=seed, weights=weights,
                         unpenalized=unpenalized or None,
                         relative_penalty=relative_penalty or None),
            data=data, target=target, out_dir=out, test=test, features=features or None,
            exclude=exclude or None, sep=sep, n_lambdas=lambdas, standardize=standardize,
            force=force, chunk_rows=chunk_rows, accurate=accurate, rank=rank,
            scheduler=scheduler, timeout=scheduler_timeout, cv=cv,
            command_line=["paths", *sys.argv[1:]], formats=fig_formats, width=fig_width,
            x_axis=fig_x, report=report)
        print_summary(run)
        if (run.out_dir / "report.html").exists():
            console.print(f"[bold]report:[/] {run.out_dir / 'report.html'}")
        emit_summary(run.summary)
        return
    data = stdin_file(data)
    group_labels = row_weights = test_weights = None
    penalties = parse_relative_penalties(relative_penalty)
    if groups is not None:
        group_labels = read_groups(data, groups, sep=sep)
        exclude = [*(exclude or []), groups]
    if weights is not None:
        row_weights = read_weights(data, weights, sep=sep)
        exclude = [*(exclude or []), weights]
    dataset, digest = load_data(
        data, target, sep=sep, features=features or None, exclude=exclude or None,
        id_column=id_column, encode=None if encode is Encode.none else encode.value,
        drop_missing=None if drop_missing is None else drop_missing.value)
    check_rows_for_cv(dataset.X.shape[0], cv, str(data))
    if group_labels is not None and dataset.rows is not None:  # rows dropped (--drop-missing)
        group_labels = group_labels[dataset.rows]
    if row_weights is not None and dataset.rows is not None:
        row_weights = row_weights[dataset.rows]
    digests = {str(data): digest}
    test_set = None
    if test is not None:
        test_set, tdigest = load_data(test, target, sep=sep, like=dataset)
        digests[str(test)] = tdigest
        if weights is not None:  # the test file's own weights, if it has the column
            test_weights = read_weights(test, weights, sep=sep, required=False)
    with console.status("fitting the path, choosing the penalty, writing figures and report"):
        run = explore(dataset, out_dir=out, test=test_set, holdout=holdout, seed=seed,
                      n_lambdas=lambdas, standardize=standardize, solver=solver.value, force=force,
                      input_sha256=digests, command_line=["paths", *sys.argv[1:]],
                      cv=cv, repeats=repeats, groups=group_labels, folds=folds.value,
                      cv_scaling=cv_scaling.value, rule=rule, formats=fig_formats,
                      width=fig_width, x_axis=fig_x, report=report, weights=row_weights,
                      test_weights=test_weights, unpenalized=unpenalized or None,
                      relative_penalty=penalties, intervals=intervals,
                      interval_method=interval_method.value)
    print_summary(run)
    print_rules(run)
    print_intervals(run)
    if (run.out_dir / "report.html").exists():
        console.print(f"[bold]report:[/] {run.out_dir / 'report.html'}")
    emit_summary(run.summary)
