"""``paths simulate``: the threshold sweep on synthetic data with a known truth."""
from __future__ import annotations

import shlex
import sys
from enum import Enum
from pathlib import Path

import typer


from paths.data.output import OutputFolder, write_csv, write_json
from paths.threshold.simulate import bias_variance_table, make_truth, simulate
from paths.present.summary import versions
from paths.threshold.sweep import threshold_summary, threshold_table
from paths.cli.app import command, console, emit_summary
from paths.cli.threshold import Band, Order, Over, print_threshold, run_with_progress, write_report


class Covariance(str, Enum):
    isotropic = "isotropic"
    ar1 = "ar1"
    spiked = "spiked"


class Coefficients(str, Enum):
    dense = "dense"
    sparse = "sparse"
    aligned = "aligned"


@command("simulate")
def simulate_cmd(
    n: int = typer.Option(200, "--n", help="Training rows per draw."),
    p: int = typer.Option(600, "--p", help="Features."),
    n_test: int = typer.Option(1000, "--n-test", help="Test rows per draw."),
    covariance: Covariance = typer.Option(Covariance.isotropic, "--covariance",
                                          help="Feature covariance."),
    rho: float = typer.Option(0.5, "--rho", help="AR(1) correlation."),
    spikes: int = typer.Option(3, "--spikes", help="Number of spikes (spiked covariance; "
                                                   "aligned coefficients)."),
    spike_strength: float = typer.Option(20.0, "--spike-strength", help="Spike strength."),
    coefficients: Coefficients = typer.Option(Coefficients.dense, "--coefficients",
                                              help="Coefficient pattern."),
    sparsity: int = typer.Option(10, "--sparsity", help="Non-zero coefficients (sparse)."),
    snr: float = typer.Option(1.0, "--snr", help="Signal-to-noise ratio beta' Sigma beta / sigma^2."),
    noise_variance: float = typer.Option(1.0, "--noise-variance", help="sigma^2."),
    over: Over = typer.Option(Over.features, "--over", help="Grow the features or the samples."),
    order: Order = typer.Option(Order.given, "--order", help="Nesting order."),
    repeats: int = typer.Option(5, "--repeats", help="Independent draws."),
    points: int = typer.Option(40, "--points", help="Grid points."),
    ridge_lambda: float = typer.Option(None, "--ridge-lambda", help="Fixed ridge penalty."),
    ridge_df_fraction: float = typer.Option(None, "--ridge-df-fraction",
                                            help="Or: df fraction of the rank."),
    band: Band = typer.Option(Band.se, "--band", help="Band over repeats."),
    seed: int = typer.Option(0, "--seed", help="Seed."),
    out: Path = typer.Option(Path("paths-simulate"), "--out", "-o", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Write into a non-empty output folder."),
    fig_format: str = typer.Option("png,svg", "--format", help="Figure formats, comma-separated: "
                                   "png (300 dpi), pdf (TrueType fonts), svg; or none."),
    fig_width: str = typer.Option("single", "--width", help="Figure width: single (3.5 in) or "
                                  "double (7.2 in) journal column."),
    report: bool = typer.Option(True, "--report/--no-report",
                                help="Also write report.md and report.html (the figure follows --format)."),
):
    """Simulate synthetic data, run the sweep; write threshold.csv/.json and bias_variance.csv."""
    truth = make_truth(p, covariance=covariance.value, rho=rho, n_spikes=spikes,
                       spike_strength=spike_strength, coefficients=coefficients.value,
                       sparsity=sparsity, snr=snr, noise_variance=noise_variance, seed=seed)
    console.print(f"[bold]simulate:[/] {truth.description}")
    folder = OutputFolder(out, force=force)
    with folder:
        out_dir = folder.stage
        sim = run_with_progress("simulate", lambda cb: simulate(
            n, truth, n_test=n_test, over=over.value, order=order.value, repeats=repeats, seed=seed,
            n_points=points, ridge_lambda=ridge_lambda, ridge_df_fraction=ridge_df_fraction,
            band=band.value, progress=cb))
        summary = threshold_summary(
            sim.sweep, source=truth.description, synthetic=True,
            truth={"covariance": truth.covariance_kind, "coefficients": truth.coefficient_kind,
                   "snr": truth.snr, "noise_variance": truth.noise_variance,
                   "signal_variance": truth.signal_variance, "p": truth.n_features},
            exact={"methods": list(sim.sweep.methods),
                   "bias2_mean": [[None if v != v else float(v) for v in row]
                                  for row in sim.bias2.mean(axis=0).T],
                   "variance_mean": [[None if v != v else float(v) for v in row]
                                     for row in sim.variance.mean(axis=0).T],
                   "exact_test_mse_mean": [[None if v != v else float(v) for v in row]
                                           for row in sim.exact_test_mse.mean(axis=0).T],
                   "note": "exact bias^2 and variance conditional on each training design, over "
                           "the noise and a new observation; rows follow methods, columns the "
                           "points; GCV/oracle penalties held fixed"},
            command_line=shlex.join(["paths", *sys.argv[1:]]), versions=versions())
        files = [write_csv(out_dir / "threshold.csv", *threshold_table(sim.sweep)),
                 write_json(out_dir / "threshold.json", summary),
                 write_csv(out_dir / "bias_variance.csv", *bias_variance_table(sim))]
        from paths.present.figures import parse_formats, parse_width

        if report or fig_format.strip().lower() != "none":
            files += write_report(sim, summary, out_dir, formats=parse_formats(fig_format),
                                  width=parse_width(fig_width), report=report)
    print_threshold(summary, folder.final_paths(files), folder.target)
    emit_summary(summary)
