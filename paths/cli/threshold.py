"""``paths threshold``: test error across the interpolation threshold, written to a folder."""
from __future__ import annotations

import sys
from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console, emit_summary, stdin_file
from paths.workflows.options import ThresholdOptions

def _fmt(v) -> str:
    return "n/a" if v is None else f"{float(v):.4g}"


def print_threshold(summary: dict, files, out_dir) -> None:
    """Compact console summary of a threshold record."""
    from rich.table import Table

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
    data: Path = typer.Argument(..., help=f.DATA_HELP),
    target: list[str] = f.TARGET,
    sep: str = f.SEP,
    features: list[str] = f.FEATURES,
    exclude: list[str] = f.EXCLUDE,
    id_column: str = f.ID_COLUMN,
    encode: f.Encode = f.ENCODE,
    drop_missing: f.DropMissing = f.DROP_MISSING,
    test_file: Path = f.TEST_FILE,
    holdout: float = f.HOLDOUT,
    over: f.Over = f.OVER,
    order: f.Order = f.ORDER,
    repeats: int = f.REPEATS,
    seed: int = f.SEED,
    n_points: int = f.N_POINTS,
    random_features: int = typer.Option(None, "--random-features",
                                        help="Map the inputs to this many random features."),
    feature_map: f.FeatureMap = typer.Option(f.FeatureMap(ThresholdOptions.feature_map),
                                             "--feature-map",
                                             help="Random features: ReLU or random Fourier."),
    ridge_lambda: float = f.RIDGE_LAMBDA,
    ridge_df_fraction: float = f.RIDGE_DF_FRACTION,
    band: f.Band = f.BAND,
    standardize: bool = f.STANDARDIZE,
    solver: f.Solver = f.SOLVER,
    formats: str = f.FORMATS,
    width: str = f.WIDTH,
    report: bool = f.REPORT,
    out_dir: Path = f.out_dir("threshold"),
    force: bool = f.FORCE,
):
    """Sweep the model size across p = n on DATA; write threshold.csv and threshold.json."""
    from paths.cli.progress import ProgressBar
    from paths.workflows import options as o
    from paths.workflows.threshold import run_threshold

    data = stdin_file(data)  # "-": standard input
    given = locals()
    with ProgressBar() as bar:
        run = run_threshold(
            f.build(o.DataOptions, given, file=data), f.build(o.ThresholdOptions, given),
            f.build(o.FigureOptions, given),
            f.build(o.OutputOptions, given, command_line=["paths", *sys.argv[1:]]),
            progress=bar)
    print_threshold(run.summary, run.files, run.out_dir)
    emit_summary(run.summary)
