"""``paths demo``: the built-in synthetic case, end to end."""
from __future__ import annotations

from pathlib import Path

import typer

from ..analysis import explore
from ..datasets import make_calibration
from ..io import select
from .app import command, console
from .explore import print_summary


@command("demo")
def demo_cmd(
    out: Path = typer.Option(Path("paths-demo"), "--out", "-o", help="Output folder."),
    force: bool = typer.Option(False, "--force", help="Write into a non-empty output folder."),
):
    """Run the built-in synthetic calibration case (60 samples x 300 channels) into ./paths-demo/."""
    frame = make_calibration()
    console.print(f"[bold]demo:[/] {frame.attrs['description']}")
    data = select(frame, "analyte", source="built-in synthetic calibration (paths.datasets)")
    run = explore(data, out_dir=out, holdout=0.25, seed=0, force=force,
                  command_line=["paths", "demo"])
    print_summary(run)
