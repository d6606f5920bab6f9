"""``paths plan``: how many samples until least squares nears optimally tuned ridge."""
from __future__ import annotations

import shlex
import sys
from pathlib import Path

import numpy as np
import typer
from rich.table import Table

from paths.data.output import OutputFolder, write_csv, write_json
from paths.threshold.plan import plan, plan_summary, plan_table
from paths.present.summary import versions
from paths.cli.app import command, console


def _read_spectrum(path: Path) -> np.ndarray:
    from paths.data.validation import InputError

    if not path.exists():
        raise InputError(f"{path}: no such file; check the --spectrum path")
    try:
        vals = np.loadtxt(path, delimiter=None, ndmin=1, comments="#")
    except ValueError as exc:
        raise InputError(f"{path} is not a list of numbers ({exc}); give one eigenvalue "
                         "per line") from None
    return np.asarray(vals, dtype=float).ravel()


@command("plan")
def plan_cmd(
    features: int = typer.Option(None, "--features", "-p",
                                 help="Number of features p (default: the pilot's)."),
    snr: float = typer.Option(None, "--snr", help="Signal-to-noise ratio r^2 / sigma^2."),
    noise_variance: float = typer.Option(None, "--noise-variance", help="sigma^2."),
    signal_variance: float = typer.Option(None, "--signal-variance", help="r^2."),
    pilot: Path = typer.Option(None, "--pilot", help="Pilot data file: estimate sigma^2 and r^2."),
    target: str = typer.Option(None, "--target", "-t", help="Response column of the pilot."),
    spectrum: Path = typer.Option(None, "--spectrum",
                                  help="File of covariance eigenvalues, one per line."),
    within: float = typer.Option(5.0, "--within",
                                 help="Percent: least squares within this of optimal ridge."),
    out: Path = typer.Option(Path("paths-plan"), "--out", "-o", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Write into a non-empty output folder."),
):
    """Predict test MSE against n; report the n at which least squares nears optimal ridge."""
    from paths.data.validation import InputError

    source = None
    digests = {}
    if pilot is not None:
        from paths.workflows.analysis import load_data
        from paths.threshold.sweep import estimate_variances

        if target is None:
            raise InputError("--pilot needs --target (the response column)")
        if snr is not None or signal_variance is not None or noise_variance is not None:
            raise InputError("give either --pilot or --snr / the variances, not both")
        ds, digest = load_data(pilot, target)
        digests[str(pilot)] = digest
        est = estimate_variances(ds.X, ds.y)
        noise_variance, signal_variance = est.noise_variance, est.signal_variance
        source = f"estimated from the pilot {pilot}: {est.noise_estimator}"
        if features is None:
            features = ds.X.shape[1]
    if features is None:
        raise InputError("give the number of features (--features P) or a --pilot file")
    spec = _read_spectrum(spectrum) if spectrum is not None else None
    inputs = [p for p in (pilot, spectrum) if p is not None]
    folder = OutputFolder(out, force=force, inputs=inputs)
    with folder:
        out_dir = folder.stage
        res = plan(features, snr=snr, noise_variance=noise_variance,
                   signal_variance=signal_variance, spectrum=spec, tolerance=within / 100.0,
                   source=source)
        summary = plan_summary(res, input_sha256=digests, versions=versions(),
                               command_line=shlex.join(["paths", *sys.argv[1:]]))
        files = [write_csv(out_dir / "plan.csv", *plan_table(res)),
                 write_json(out_dir / "plan.json", summary)]
    files, out_dir = folder.final_paths(files), folder.target
    t = Table(title="sample-size plan (predicted from the risk formulas)", show_header=False,
              title_justify="left")
    t.add_column("quantity")
    t.add_column("value")
    t.add_row("features p", str(res.n_features))
    t.add_row("noise / signal variance", f"{res.noise_variance:.4g} / {res.signal_variance:.4g}"
              f"  ({res.source})")
    t.add_row("spectrum", summary["spectrum"])
    at = summary["at_n_within"]
    t.add_row(f"n with least squares within {within:g}% of optimal ridge",
              f"{res.n_within}  (test MSE {at['min_norm_test_mse']:.4g} vs "
              f"{at['ridge_optimal_test_mse']:.4g})")
    console.print(t)
    console.print(f"caution: {summary['caution']}")
    console.print(f"wrote {', '.join(f.name for f in files)} to {out_dir}")
