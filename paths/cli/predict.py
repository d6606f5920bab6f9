"""``paths predict FIT DATA --out PREDICTIONS.csv``: apply a saved fit to new rows."""
from __future__ import annotations

from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console, emit_summary, stdin_file


@command("predict")
def predict_cmd(
    fit: Path = typer.Argument(..., help="The fit.npz written by paths explore."),
    data: Path = typer.Argument(..., help="New rows: a table with the fit's feature columns "
                                "(any order; extra columns are ignored); - reads CSV from "
                                "standard input."),
    out: Path = typer.Option(..., "--out", "-o", help="Predictions CSV to write."),
    lam: float = typer.Option(None, "--lambda", help="Predict at this penalty (default: the "
                              "fit's reported one)."),
    rule: str = typer.Option(None, "--rule", help="Predict at a rule's penalty: one saved with "
                             "the fit (gcv, loo, cv, one-se, hkb, lw, isotropic) or df=VALUE, "
                             "fraction=VALUE."),
    intervals: float = f.INTERVALS,
    id_column: str = typer.Option(None, "--id", help="Identifier column carried through to "
                                  "the output (default: the fit's, if present; else row)."),
    sep: str = f.SEP,
    force: bool = f.FORCE,
):
    """Predict the rows of DATA with the saved fit FIT and write them to --out."""
    from paths.cli.progress import ProgressBar
    from paths.workflows.predict import predict_file

    with ProgressBar() as bar:
        run = predict_file(fit, stdin_file(data), out=out, lam=lam, rule=rule,
                           intervals=intervals, id_column=id_column, sep=sep, force=force,
                           progress=bar)
    lams = ", ".join(f"{v:.4g}" for v in run.lam)
    console.print(f"predicted {run.n_rows} row(s) at lambda {lams} ({run.choice})", markup=False)
    if run.intervals:
        console.print(f"intervals: {run.intervals['method']} at level {run.intervals['level']:g}",
                      markup=False)
    for note in run.notes:
        console.print(f"note: {note}", markup=False)
    console.print(f"wrote {run.out}", markup=False)
    emit_summary({"out": str(run.out), "n_rows": run.n_rows, "lambda": [float(v) for v in run.lam],
                  "choice": run.choice, "intervals": run.intervals, "notes": list(run.notes)})
