"""The threshold workflows: a sweep across p = n on data, or on draws from a known truth.

read → prepare → sweep (factor and path at every point) → record → draw → report.
:func:`run_threshold` is what ``paths threshold`` and an ``analysis =
"threshold"`` case file call; :func:`run_simulate` what ``paths simulate`` and an
``analysis = "simulate"`` case file call.  Both write ``threshold.csv``,
``threshold.json`` (and for simulations ``bias_variance.csv``), the threshold
figure and the report.  Without a test file, ``DEFAULT_THRESHOLD_HOLDOUT`` of
the rows are held out (seeded by the sweep's seed).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from paths.data.validation import InputError
from paths.workflows.explore import check_figures, command_text
from paths.workflows.options import (DEFAULT_THRESHOLD_HOLDOUT, DataOptions, DrawOptions,
                                     FigureOptions, OutputOptions, ThresholdOptions,
                                     TruthOptions)
from paths.workflows.prepare import prepare, train_test
from paths.workflows.stages import READ, TABLES, stage

__all__ = ["ThresholdRun", "run_threshold", "run_simulate", "write_threshold", "simulate_truth"]


@dataclass(frozen=True)
class ThresholdRun:
    """What a threshold (or simulation) run produced: the result, its record, the files."""

    result: object  # ThresholdResult, or SimulationResult for simulations
    summary: dict
    out_dir: Path
    files: list = field(default_factory=list)

    @property
    def report(self) -> Path | None:
        """``report.html`` when it was written."""
        rep = self.out_dir / "report.html"
        return rep if rep.exists() else None


def run_threshold(data: DataOptions, threshold: ThresholdOptions = ThresholdOptions(),
                  figures: FigureOptions = FigureOptions(),
                  output: OutputOptions = OutputOptions(), *, base_dir=None,
                  extra: dict | None = None, progress=None) -> ThresholdRun:
    """Sweep the model size across the interpolation threshold on a table (or a generator).

    The test rows are the test file's (aligned to the training columns by
    name) or a seeded holdout (``data.holdout``, default
    ``DEFAULT_THRESHOLD_HOLDOUT``).  ``progress(stage, done, total)``.
    """
    from paths.threshold.sweep import threshold_sweep

    check_figures(figures)
    with stage(progress, READ):
        prepared = prepare(data, base_dir=base_dir)
    if prepared.train.y.ndim != 1:
        raise InputError("the threshold sweep takes one target; name a single target column")
    holdout = data.holdout
    if prepared.test is None and holdout is None:
        holdout = DEFAULT_THRESHOLD_HOLDOUT
    tt = train_test(prepared, holdout=holdout, seed=threshold.seed)
    record = {"target": prepared.train.target_names[0], "source": prepared.train.source,
              "split": tt.split, "input_sha256": dict(prepared.digests),
              "data_notes": prepared.notes, "data_preparation": prepared.train.record()}
    if prepared.generator is not None:
        record["generator"] = prepared.generator
    with output.folder(prepared.digests) as folder:
        result = threshold_sweep(tt.X, tt.y, tt.X_test, tt.y_test, **threshold.sweep_keywords(),
                                 progress=progress)
        summary, files = write_threshold(result, folder.stage, figures, output,
                                         {**record, **(extra or {})}, progress=progress)
    return ThresholdRun(result=result, summary=summary, out_dir=folder.target,
                        files=folder.final_paths(files))


def simulate_truth(truth: TruthOptions):
    """The :class:`~paths.threshold.simulate.Truth` the options describe."""
    from paths.threshold.simulate import make_truth

    return make_truth(truth.n_features, covariance=truth.covariance, rho=truth.rho,
                      n_spikes=truth.n_spikes, spike_strength=truth.spike_strength,
                      coefficients=truth.coefficients, sparsity=truth.sparsity, snr=truth.snr,
                      noise_variance=truth.noise_variance, seed=truth.seed)


def _exact_record(sim) -> dict:
    def rows(a):
        return [[None if v != v else float(v) for v in row] for row in a.mean(axis=0).T]

    return {"methods": list(sim.sweep.methods), "bias2_mean": rows(sim.bias2),
            "variance_mean": rows(sim.variance), "exact_test_mse_mean": rows(sim.exact_test_mse),
            "note": "exact bias^2 and variance conditional on each training design, over "
                    "the noise and a new observation; rows follow methods, columns the "
                    "points; GCV/oracle penalties held fixed"}


def run_simulate(truth: TruthOptions = TruthOptions(), draws: DrawOptions = DrawOptions(),
                 threshold: ThresholdOptions = ThresholdOptions(),
                 figures: FigureOptions = FigureOptions(),
                 output: OutputOptions = OutputOptions(), *, extra: dict | None = None,
                 progress=None) -> ThresholdRun:
    """The threshold sweep on ``threshold.repeats`` draws from a known truth, with exact bias²."""
    from paths.threshold.simulate import simulate

    check_figures(figures)
    for name in ("random_features", "solver", "feature_map"):
        if getattr(threshold, name) != getattr(ThresholdOptions(), name):
            raise InputError(f"{name} is not available in simulations (the truth's features "
                             "are used as drawn); drop it")
    the_truth = simulate_truth(truth)
    kw = threshold.sweep_keywords()
    for name in ("random_features", "feature_map", "solver"):
        kw.pop(name)
    with output.folder() as folder:
        sim = simulate(draws.n_train, the_truth, n_test=draws.n_test, **kw,
                       progress=progress)
        summary, files = write_threshold(sim, folder.stage, figures, output,
                                         {**_truth_record(truth, the_truth, sim),
                                          **(extra or {})}, progress=progress)
    return ThresholdRun(result=sim, summary=summary, out_dir=folder.target,
                        files=folder.final_paths(files))


def _truth_record(truth: TruthOptions, the_truth, sim) -> dict:
    """The simulation's keys of threshold.json: the truth, its generator, the exact bias²."""
    desc = the_truth.description
    return {
        "source": desc if "synthetic" in desc else f"synthetic: {desc}", "synthetic": True,
        "generator": {"name": "paths.threshold.simulate.make_truth",
                      "params": {**vars(truth)}, "seed": truth.seed},
        "truth": {"covariance": the_truth.covariance_kind,
                  "coefficients": the_truth.coefficient_kind, "snr": the_truth.snr,
                  "noise_variance": the_truth.noise_variance,
                  "signal_variance": the_truth.signal_variance,
                  "n_features": the_truth.n_features, "description": desc},
        "exact": _exact_record(sim), "input_sha256": {}}


def write_threshold(result, out: Path, figures: FigureOptions, output: OutputOptions,
                    record: dict, *, progress=None) -> tuple[dict, list]:
    """threshold.csv, threshold.json (and bias_variance.csv), the figure and the report.

    Returns the ``threshold.json`` record and the files written; ``progress(stage, done,
    total)`` hears the writing stages.
    """
    from paths.data.output import write_csv, write_json
    from paths.present.report import write_threshold_outputs
    from paths.present.summary import versions
    from paths.threshold.simulate import bias_variance_table
    from paths.threshold.sweep import threshold_summary, threshold_table

    formats, width = check_figures(figures)
    sweep = getattr(result, "sweep", result)
    with stage(progress, TABLES):
        summary = threshold_summary(sweep, **record, command_line=command_text(output),
                                    versions=versions())
        files = [write_csv(out / "threshold.csv", *threshold_table(sweep)),
                 write_json(out / "threshold.json", summary)]
        if sweep is not result:
            files.append(write_csv(out / "bias_variance.csv", *bias_variance_table(result)))
    if formats or figures.report:
        files += write_threshold_outputs(result, summary, out, formats=formats, width=width,
                                         report=figures.report, progress=progress)
    return summary, files
