"""``paths explore``: the whole path of one dataset, printed and written to a folder."""
from __future__ import annotations

import sys
from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console, emit_summary, stdin_file

def _fmt_or(v, fmt="{:.4g}") -> str:
    return "n/a" if v is None else fmt.format(float(v))


def print_rules(run) -> None:
    """The selection rules side by side; the reported choice is marked with ``*``."""
    from rich.table import Table

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
    from rich.table import Table

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
    groups: str = f.GROUPS,
    weights: str = f.WEIGHTS,
    unpenalized: list[str] = f.UNPENALIZED,
    relative_penalty: list[str] = f.RELATIVE_PENALTY,
    intervals: float = f.INTERVALS,
    interval_method: f.IntervalMethod = f.INTERVAL_METHOD,
    seed: int = f.SEED,
    n_lambdas: int = f.N_LAMBDAS,
    standardize: bool = f.STANDARDIZE,
    solver: f.Solver = f.SOLVER,
    n_folds: int = f.N_FOLDS,
    repeats: int = f.REPEATS,
    fold_scheme: f.FoldScheme = f.FOLD_SCHEME,
    cv_scaling: f.CVScaling = f.CV_SCALING,
    rule: str = f.RULE,
    engine: f.Engine = f.ENGINE,
    scheduler: str = f.SCHEDULER,
    scheduler_timeout: float = f.SCHEDULER_TIMEOUT,
    chunk_rows: int = f.CHUNK_ROWS,
    accurate: bool = f.ACCURATE,
    rank: int = f.RANK,
    formats: str = f.FORMATS,
    width: str = f.WIDTH,
    figure_x: str = f.FIGURE_X,
    report: bool = f.REPORT,
    out_dir: Path = f.out_dir("explore"),
    force: bool = f.FORCE,
):
    """Fit the whole ridge path of DATA and write path.csv, coefficients.csv, summary.json."""
    from paths.workflows import options as o
    from paths.workflows.choose_engine import choose_engine
    from paths.workflows.explore import run_explore

    data = stdin_file(data)  # "-": standard input
    given = locals()
    engine_options = f.build(o.EngineOptions, given)
    options = dict(data=f.build(o.DataOptions, given, file=data),
                   fit=f.build(o.FitOptions, given),
                   figures=f.build(o.FigureOptions, given),
                   output=f.build(o.OutputOptions, given, command_line=["paths", *sys.argv[1:]]),
                   engine=engine_options)
    choice = choose_engine(options["data"], options["fit"], engine_options)
    if choice.note:
        console.print(f"note: {choice.note}", markup=False, highlight=False)
    options.update(engine=choice.options, extra=choice.extra)
    if choice.options.name == "memory":
        from paths.cli.progress import ProgressBar

        with ProgressBar() as bar:
            run = run_explore(**options, progress=bar)
    else:
        run = _run_engine(options)
    print_summary(run)
    if run.selection is not None:
        print_rules(run)
    print_intervals(run)
    if (run.out_dir / "report.html").exists():
        console.print(f"[bold]report:[/] {run.out_dir / 'report.html'}")
    emit_summary(run.summary)


def _run_engine(options: dict):
    """An out-of-memory run with a progress bar, then the throughput of each pass."""
    import warnings

    from paths.cli.progress import ProgressBar
    from paths.workflows.explore import run_explore

    with ProgressBar(rates=True) as bar, warnings.catch_warnings():
        # the approximation warning of --rank is printed as a note with the summary
        warnings.simplefilter("ignore", UserWarning)
        run = run_explore(**options, progress=bar)
    for p in run.result.passes:
        unit = "columns" if "column" in p.label else "rows"
        console.print(f"{p.label}: {p.rows:,} {unit} in {p.seconds:.2f} s "
                      f"({p.rows_per_second:,.0f} {unit}/s, {p.mb_per_second:,.0f} MB/s)",
                      markup=False, highlight=False)
    sel = run.summary["selected"].get("cv")
    if sel is not None and sel.get("lambda") is not None:
        console.print(f"{run.result.n_folds}-fold CV choice: lambda {sel['lambda']:.4g}, "
                      f"df {sel['df']:.2f}, CV MSE {sel['est_mse']:.4g}", markup=False,
                      highlight=False)
    return run
