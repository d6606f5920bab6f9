"""``paths plan``: how many samples until least squares nears optimally tuned ridge."""
from __future__ import annotations

import sys
from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console, emit_summary
from paths.workflows.options import PlanOptions


def print_plan(run, tolerance: float) -> None:
    """The plan's headline numbers."""
    from rich.table import Table

    res, summary = run.result, run.summary
    t = Table(title="sample-size plan (predicted from the risk formulas)", show_header=False,
              title_justify="left")
    t.add_column("quantity")
    t.add_column("value")
    t.add_row("features p", str(res.n_features))
    t.add_row("noise / signal variance", f"{res.noise_variance:.4g} / {res.signal_variance:.4g}"
              f"  ({res.source})")
    t.add_row("spectrum", summary["spectrum"])
    at = summary["at_n_within"]
    t.add_row(f"n with least squares within {100 * tolerance:g}% of optimal ridge",
              f"{res.n_within}  (test MSE {at['min_norm_test_mse']:.4g} vs "
              f"{at['ridge_optimal_test_mse']:.4g})")
    console.print(t)
    console.print(f"caution: {summary['caution']}")
    console.print(f"wrote {', '.join(p.name for p in run.files)} to {run.out_dir}")


@command("plan")
def plan_cmd(
    n_features: int = typer.Option(None, "--n-features", "-p",
                                   help="Number of features p (default: the pilot's)."),
    snr: float = typer.Option(None, "--snr", help="Signal-to-noise ratio r^2 / sigma^2."),
    noise_variance: float = typer.Option(None, "--noise-variance", help="sigma^2."),
    signal_variance: float = typer.Option(None, "--signal-variance", help="r^2."),
    spectrum: Path = typer.Option(None, "--spectrum",
                                  help="File of covariance eigenvalues, one per line."),
    tolerance: float = typer.Option(PlanOptions.tolerance, "--tolerance", help="Least squares within this "
                                    "fraction of optimal ridge (0.05: 5%)."),
    pilot: Path = typer.Option(None, "--pilot", help="Pilot data file: estimate sigma^2 and "
                               "r^2 (read and prepared like any table)."),
    target: list[str] = typer.Option(None, "--target", "-t", help="Response column of the pilot."),
    sep: str = f.SEP,
    features: list[str] = f.FEATURES,
    exclude: list[str] = f.EXCLUDE,
    id_column: str = f.ID_COLUMN,
    encode: f.Encode = f.ENCODE,
    drop_missing: f.DropMissing = f.DROP_MISSING,
    out_dir: Path = f.out_dir("plan"),
    force: bool = f.FORCE,
):
    """Predict test MSE against n; report the n at which least squares nears optimal ridge."""
    from paths.workflows import options as o
    from paths.workflows.plan import run_plan

    from paths.cli.progress import ProgressBar

    given = locals()
    pilot_options = None if pilot is None else f.build(o.DataOptions, given, file=pilot)
    with ProgressBar() as bar:
        run = run_plan(f.build(o.PlanOptions, given),
                       f.build(o.OutputOptions, given, command_line=["paths", *sys.argv[1:]]),
                       pilot=pilot_options, progress=bar)
    print_plan(run, tolerance)
    emit_summary(run.summary)
