"""Start-up: ``import paths`` and ``paths --help`` load none of the heavy libraries.

Checked in a fresh interpreter (``subprocess``) by reading ``sys.modules``
after the import and after rendering the help of the program and of every
command: scikit-learn, pandas, pyarrow, matplotlib and dask are imported by the
functions that need them, never up front (issue 10 item 7).  Time is measured in
``benchmarks/bench_e2e.py``, not here (no timed asserts).
"""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
HEAVY = ("sklearn", "pandas", "pyarrow", "matplotlib", "dask", "scipy")


def _loaded_after(code: str) -> list:
    probe = (f"{code}\nimport json, sys\n"
             f"print(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}} & {set(HEAVY)!r})))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         cwd=REPO, timeout=300)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_import_paths_is_light():
    assert _loaded_after("import paths") == []


def test_public_names_resolve_lazily():
    """Touching a light public name does not pull in the heavy libraries either."""
    assert _loaded_after("import paths; paths.InputError; paths.DataOptions") == []


@pytest.mark.parametrize("command", [None, "explore", "threshold", "simulate", "plan", "run",
                                     "demo"])
def test_cli_help_is_light(command):
    args = ["--help"] if command is None else [command, "--help"]
    code = ("import io, contextlib\n"
            "from paths.cli import app\n"
            "from typer.testing import CliRunner\n"
            f"r = CliRunner().invoke(app, {args!r})\n"
            "assert r.exit_code == 0, r.output")
    assert _loaded_after(code) == []
