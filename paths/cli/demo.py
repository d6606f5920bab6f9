"""``paths demo``: the built-in synthetic case, end to end."""
from __future__ import annotations

from pathlib import Path

import typer

from paths.cli import flags as f
from paths.cli.app import command, console
from paths.cli.run import run_and_print
from paths.workflows.options import DEMO_CASE



def print_cases() -> None:
    """The table of built-in cases."""
    from rich.table import Table

    from paths.workflows.cases import list_cases

    t = Table(title="built-in cases (all data synthetic)", title_justify="left")
    t.add_column("name")
    t.add_column("title")
    t.add_column("file")
    for name, title, path in list_cases():
        t.add_row(name + (" (demo)" if name == DEMO_CASE else ""), title, str(path))
    console.print(t)
    console.print("run one with: paths run NAME  (or paths run path/to/case.toml)")


@command("demo")
def demo_cmd(
    out_dir: Path = f.out_dir("demo"),
    force: bool = f.FORCE,
    list_: bool = typer.Option(False, "--list", help="List the built-in cases and exit."),
    case: str = typer.Option(DEMO_CASE, "--case", help="Which built-in case to run."),
    formats: str = f.FORMATS_OF_CASE,
    width: str = f.WIDTH_OF_CASE,
):
    """Run the built-in demo into ./paths-demo/: the penalty choice on wide synthetic data, then
    a sweep across p = n (the interpolation spike and what shrinkage does) into threshold/."""
    from paths.workflows.cases import DEMO_SWEEP, find_case

    if list_:
        print_cases()
        return
    run_and_print(find_case(case), out_dir, force=force, formats=formats, width=width,
                  command_line=["paths", "demo"] + ([] if case == DEMO_CASE else ["--case", case]))
    if case == DEMO_CASE:  # the whole story: then a sweep across p = n, into OUT/threshold
        run_and_print(find_case(DEMO_SWEEP), out_dir / "threshold", force=force,
                      formats=formats, width=width, command_line=["paths", "demo"])
