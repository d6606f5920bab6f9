"""``paths threshold``: test error across the interpolation threshold, written to a folder."""
from __future__ import annotations

import shlex
import sys
from enum import Enum
from pathlib import Path

import typer

from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from paths.workflows.analysis import load_data
from paths.data.synthetic import split_holdout
from paths.data.output import OutputFolder, write_csv, write_json
from paths.present.summary import versions
from paths.threshold.sweep import threshold_summary, threshold_sweep, threshold_table
from paths.cli.app import command, console, emit_summary
from paths.cli.explore import Solver


class Over(str, Enum):
    features = "features"
    samples = "samples"


class Order(str, Enum):
    given = "given"
    random = "random"
    screening = "screening"


class FeatureMap(str, Enum):
    relu = "relu"
    fourier = "fourier"


class Band(str, Enum):
    se = "se"
    quantile = "quantile"


def progress_bar(label: str) -> Progress:
    """The rich progress bar the sweeps report into (``callback(done, total)``)."""
    return Progress(TextColumn(f"[bold]{label}[/]"), BarColumn(), MofNCompleteColumn(),
                    TimeElapsedColumn(), console=console, transient=False)


def run_with_progress(label: str, fn):
    """Call ``fn(callback)`` with a rich progress bar behind ``callback(done, total)``."""
    with progress_bar(label) as bar:
        task = bar.add_task(label, total=None)

        def callback(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        return fn(callback)


def _fmt(v) -> str:
    return "n/a" if v is None else f"{float(v):.4g}"


def print_threshold(summary: dict, files, out_dir) -> None:
    """Compact console summary of a threshold record."""
    t = Table(title=f"interpolation threshold ({summary['over']}-wise sweep)",
              show_header=False, title_justify="left")
    t.add_column("quantity")
    t.add_column("value")
    t.add_row("training / test rows", f"{summary['n_train']} / {summary['n_test']}")
    t.add_row("points x repeats", f"{summary['points']} x {summary['repeats']} "
              f"(order {summary['order']}" + (f", {summary['feature_map']} random features"
                                              if summary.get("feature_map") else "") + ")")
    pk = summary["peak"]
    t.add_row("min-norm peak", f"test MSE {_fmt(pk['test_mse'])} at p/n = {pk['ratio']:.3g} "
              f"(p' = {pk['n_features']}, n' = {pk['n_train']})")
    br = summary["best_ridge"]
    t.add_row("best ridge (fixed or GCV)", f"test MSE {_fmt(br['test_mse'])} ({br['method']}, "
              f"p/n = {br['ratio']:.3g})")
    t.add_row("oracle ridge (best lambda on the test rows)",
              _fmt(summary["best_oracle_ridge_test_mse"]))
    t.add_row("noise / signal variance", f"{_fmt(summary['noise_variance'])} / "
              f"{_fmt(summary['signal_variance'])}")
    t.add_row("estimator", summary["noise_variance_estimator"])
    t.add_row("band", summary["band"])
    console.print(t)
    for note in summary.get("notes", []):
        console.print(f"note: {note}")
    console.print(f"wrote {', '.join(Path(f).name for f in files)} to {out_dir}")


@command("threshold")
def threshold_cmd(
    data: Path = typer.Argument(..., help="Data file (CSV or TSV, with a header row)."),
    target: str = typer.Option(..., "--target", "-t", help="Response column."),
    test: Path = typer.Option(None, "--test", help="Separate test file with the same columns."),
    holdout: float = typer.Option(None, "--holdout",
                                  help="Hold out this fraction of rows as test rows "
                                       "(default 0.25 without --test)."),
    over: Over = typer.Option(Over.features, "--over", help="Grow the features or the samples."),
    order: Order = typer.Option(Order.given, "--order",
                                help="Nesting order: given, random (per repeat) or screening "
                                     "(|correlation| on the training rows)."),
    repeats: int = typer.Option(1, "--repeats", help="Repeats (random orders / new random features)."),
    seed: int = typer.Option(0, "--seed", help="Seed for the holdout, orders and random features."),
    points: int = typer.Option(40, "--points", help="Grid points, dense around the threshold."),
    random_features: int = typer.Option(None, "--random-features",
                                        help="Map the inputs to this many random features."),
    feature_map: FeatureMap = typer.Option(FeatureMap.relu, "--feature-map",
                                           help="Random features: ReLU or random Fourier."),
    ridge_lambda: float = typer.Option(None, "--ridge-lambda",
                                       help="Fixed ridge penalty (package convention); "
                                            "default 0.1 x (n_train - 1)."),
    ridge_df_fraction: float = typer.Option(None, "--ridge-df-fraction",
                                            help="Instead: the penalty leaving this fraction of "
                                                 "the rank as df."),
    band: Band = typer.Option(Band.se, "--band", help="Band over repeats: se or quantile (10-90%)."),
    standardize: bool = typer.Option(True, "--standardize/--no-standardize",
                                     help="Scale columns to unit population SD."),
    solver: Solver = typer.Option(Solver.auto, "--solver", help="Factorization route."),
    out: Path = typer.Option(Path("paths-threshold"), "--out", "-o", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Write into a non-empty output folder."),
    fig_format: str = typer.Option("png,svg", "--format", help="Figure formats, comma-separated: "
                                   "png (300 dpi), pdf (TrueType fonts), svg; or none."),
    fig_width: str = typer.Option("single", "--width", help="Figure width: single (3.5 in) or "
                                  "double (7.2 in) journal column."),
    report: bool = typer.Option(True, "--report/--no-report",
                                help="Also write report.md and report.html (the figure follows --format)."),
):
    """Sweep the model size across p = n on DATA; write threshold.csv and threshold.json."""
    from paths.data.validation import InputError

    dataset, digest = load_data(data, target)
    digests = {str(data): digest}
    if dataset.y.ndim != 1:
        raise InputError("the threshold sweep takes one target; pass a single --target column")
    X, y = dataset.X, dataset.y
    split = None
    if test is not None:
        if holdout is not None:
            raise InputError("pass either --test or --holdout, not both")
        tset, tdigest = load_data(test, target)
        digests[str(test)] = tdigest
        missing = [c for c in dataset.feature_names if c not in tset.feature_names]
        if missing:
            raise InputError(f"{test}: test file lacks feature column(s) "
                             f"{', '.join(missing[:5])}; give it the training columns")
        idx = [tset.feature_names.index(c) for c in dataset.feature_names]
        X_test, y_test = tset.X[:, idx], tset.y
    else:
        frac = 0.25 if holdout is None else holdout
        train, held = split_holdout(X.shape[0], frac, seed)
        X, y, X_test, y_test = X[train], y[train], X[held], y[held]
        split = {"holdout": frac, "seed": seed, "n_test": int(held.size)}
    folder = OutputFolder(out, force=force, inputs=list(digests))
    with folder:
        out_dir = folder.stage
        result = run_with_progress("sweep", lambda cb: threshold_sweep(
            X, y, X_test, y_test, over=over.value, order=order.value, repeats=repeats, seed=seed,
            n_points=points, random_features=random_features, feature_map=feature_map.value,
            ridge_lambda=ridge_lambda, ridge_df_fraction=ridge_df_fraction, band=band.value,
            standardize=standardize, solver=solver.value, progress=cb))
        summary = threshold_summary(
            result, target=target, source=str(data), split=split, input_sha256=digests,
            command_line=shlex.join(["paths", *sys.argv[1:]]), versions=versions())
        files = [write_csv(out_dir / "threshold.csv", *threshold_table(result)),
                 write_json(out_dir / "threshold.json", summary)]
        from paths.present.figures import parse_formats, parse_width

        if report or fig_format.strip().lower() != "none":
            files += write_report(result, summary, out_dir, formats=parse_formats(fig_format),
                                  width=parse_width(fig_width), report=report)
    print_threshold(summary, folder.final_paths(files), folder.target)
    emit_summary(summary)


def write_report(result, summary: dict, out_dir, *, formats=("png", "svg"), width="single",
                 report: bool = True) -> list:
    """The threshold figure (in ``formats``, at ``width``) and, with ``report``, the report."""
    from paths.present.report import write_threshold_outputs

    return list(write_threshold_outputs(result, summary, out_dir, formats=formats, width=width,
                                        report=report))
