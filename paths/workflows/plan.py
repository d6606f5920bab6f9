"""The planning workflow: sample sizes from the risk formulas, variances given or from a pilot.

A pilot table is read and prepared exactly like any other table
(:func:`paths.workflows.prepare.prepare`), then its noise and signal variances
are estimated (:func:`paths.threshold.sweep.estimate_variances`).
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from paths.data.validation import InputError
from paths.workflows.explore import command_text
from paths.workflows.options import DataOptions, OutputOptions, PlanOptions
from paths.workflows.prepare import prepare
from paths.workflows.stages import PLAN, READ, TABLES, stage

__all__ = ["PlanRun", "run_plan", "read_spectrum"]


@dataclass(frozen=True)
class PlanRun:
    """What a planning run produced: the plan, its record and the files written."""

    result: object  # PlanResult
    summary: dict
    out_dir: Path
    files: list = field(default_factory=list)


def read_spectrum(path) -> np.ndarray:
    """Covariance eigenvalues from a text file, one per line (``#`` comments allowed)."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file; check the spectrum path")
    try:
        vals = np.loadtxt(path, delimiter=None, ndmin=1, comments="#")
    except ValueError as exc:
        raise InputError(f"{path} is not a list of numbers ({exc}); give one eigenvalue "
                         "per line") from None
    return np.asarray(vals, dtype=float).ravel()


def _from_pilot(options: PlanOptions, pilot: DataOptions, progress=None) -> tuple:
    """(options with the pilot's variances and feature count, source text, digests)."""
    from paths.threshold.sweep import estimate_variances

    if not pilot.target:
        raise InputError("pilot needs target (the response column)")
    if any(v is not None for v in (options.snr, options.signal_variance,
                                   options.noise_variance)):
        raise InputError("give either pilot or snr / the variances, not both")
    with stage(progress, READ):
        prepared = prepare(pilot)
    if prepared.train.y.ndim != 1:
        raise InputError("the plan takes one target; name a single target column")
    est = estimate_variances(prepared.train.X, prepared.train.y)
    options = replace(options, noise_variance=est.noise_variance,
                      signal_variance=est.signal_variance,
                      n_features=options.n_features or prepared.train.X.shape[1])
    return options, f"estimated from the pilot {pilot.file}: {est.noise_estimator}", \
        dict(prepared.digests)


def run_plan(options: PlanOptions = PlanOptions(), output: OutputOptions = OutputOptions(), *,
             pilot: DataOptions | None = None, progress=None) -> PlanRun:
    """Predict test MSE against n and write plan.csv and plan.json;
    ``progress(stage, done, total)`` hears the stages (:mod:`paths.workflows.stages`)."""
    from paths.data.output import write_csv, write_json
    from paths.present.summary import versions
    from paths.threshold.plan import plan, plan_summary, plan_table

    source, digests = None, {}
    if pilot is not None:
        options, source, digests = _from_pilot(options, pilot, progress)
    if options.n_features is None:
        raise InputError("give the number of features (n_features) or a pilot data file")
    spectrum = read_spectrum(options.spectrum) if options.spectrum is not None else None
    inputs = [*digests, *([] if options.spectrum is None else [options.spectrum])]
    with output.folder(inputs) as folder:
        with stage(progress, PLAN):
            res = plan(options.n_features, snr=options.snr,
                       noise_variance=options.noise_variance,
                       signal_variance=options.signal_variance, spectrum=spectrum,
                       tolerance=options.tolerance, source=source)
        with stage(progress, TABLES):
            summary = plan_summary(res, input_sha256=digests, versions=versions(),
                                   command_line=command_text(output))
            files = [write_csv(folder.stage / "plan.csv", *plan_table(res)),
                     write_json(folder.stage / "plan.json", summary)]
    return PlanRun(result=res, summary=summary, out_dir=folder.target,
                   files=folder.final_paths(files))
