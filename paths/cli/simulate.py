"""``paths simulate``: the threshold sweep on synthetic data with a known truth."""
from __future__ import annotations

import sys
from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console, emit_summary
from paths.cli.threshold import print_threshold
from paths.workflows.options import DrawOptions as D, TruthOptions as T


@command("simulate")
def simulate_cmd(
    n_train: int = typer.Option(D.n_train, "--n-train", help="Training rows per draw."),
    n_test: int = typer.Option(D.n_test, "--n-test", help="Test rows per draw."),
    n_features: int = typer.Option(T.n_features, "--n-features", "-p", help="Features."),
    covariance: f.Covariance = typer.Option(f.Covariance(T.covariance), "--covariance",
                                            help="Feature covariance."),
    rho: float = typer.Option(T.rho, "--rho", help="AR(1) correlation."),
    n_spikes: int = typer.Option(T.n_spikes, "--n-spikes", help="Number of spikes (spiked covariance; "
                                                       "aligned coefficients)."),
    spike_strength: float = typer.Option(T.spike_strength, "--spike-strength", help="Spike strength."),
    coefficients: f.Coefficients = typer.Option(f.Coefficients(T.coefficients), "--coefficients",
                                                help="Coefficient pattern."),
    sparsity: int = typer.Option(T.sparsity, "--sparsity", help="Non-zero coefficients (sparse)."),
    snr: float = typer.Option(T.snr, "--snr", help="Signal-to-noise ratio beta' Sigma beta / "
                                                 "sigma^2."),
    noise_variance: float = typer.Option(T.noise_variance, "--noise-variance", help="sigma^2."),
    over: f.Over = f.OVER,
    order: f.Order = f.ORDER,
    repeats: int = f.REPEATS,
    n_points: int = f.N_POINTS,
    ridge_lambda: float = f.RIDGE_LAMBDA,
    ridge_df_fraction: float = f.RIDGE_DF_FRACTION,
    band: f.Band = f.BAND,
    standardize: bool = f.STANDARDIZE,
    seed: int = f.SEED,
    formats: str = f.FORMATS,
    width: str = f.WIDTH,
    report: bool = f.REPORT,
    out_dir: Path = f.out_dir("simulate"),
    force: bool = f.FORCE,
):
    """Simulate synthetic data, run the sweep; write threshold.csv/.json and bias_variance.csv."""
    from paths.cli.progress import ProgressBar
    from paths.workflows import options as o
    from paths.workflows.threshold import run_simulate

    given = locals()
    with ProgressBar() as bar:
        run = run_simulate(
            f.build(o.TruthOptions, given), f.build(o.DrawOptions, given),
            f.build(o.ThresholdOptions, given),
            f.build(o.FigureOptions, given),
            f.build(o.OutputOptions, given, command_line=["paths", *sys.argv[1:]]),
            progress=bar)
    console.print(f"[bold]simulate:[/] {run.summary['truth']['description']}")
    print_threshold(run.summary, run.files, run.out_dir)
    emit_summary(run.summary)
