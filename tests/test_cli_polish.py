"""Command-line niceties: help at 80 columns, --version, --quiet, --json, '-' for stdin.

References: click's own help formatter (the layout under test is click's plain
one), the standard ``json`` module (the --json output parses), and the package
metadata (importlib.metadata) for the version.
"""
from __future__ import annotations

import json
import re
from importlib.metadata import version

import pytest
from typer.testing import CliRunner

from paths.cli import app

runner = CliRunner()
COMMANDS = ["explore", "threshold", "simulate", "plan", "run", "demo", "predict"]


def _option_names(cmd):
    import typer.main

    click_cmd = typer.main.get_command(app).commands[cmd]
    return [n for p in click_cmd.params for n in p.opts + p.secondary_opts if n.startswith("--")]


@pytest.mark.parametrize("cmd", COMMANDS)
def test_help_at_80_columns_keeps_every_option_name_whole(cmd):
    res = runner.invoke(app, [cmd, "--help"], env={"COLUMNS": "80"}, terminal_width=80)
    assert res.exit_code == 0, res.output
    assert max(len(line) for line in res.output.splitlines()) <= 80
    words = set(re.findall(r"--[\w-]+", res.output))
    missing = [n for n in _option_names(cmd) if n not in words]
    assert missing == []
    assert "…" not in res.output


def test_version_is_the_installed_distribution_version():
    res = runner.invoke(app, ["--version"])
    assert res.exit_code == 0 and res.output.strip() == f"paths {version('ridgepaths')}"


@pytest.fixture()
def csv_text():
    """A small invented table (seeded numbers), as CSV text."""
    import numpy as np

    rng = np.random.default_rng(4)
    X = rng.standard_normal((20, 3))
    y = X @ np.array([1.0, -0.5, 0.2]) + 0.1 * rng.standard_normal(20)
    lines = ["a,b,c,y"] + [",".join(f"{v:.6f}" for v in (*row, t)) for row, t in zip(X, y)]
    return "\n".join(lines) + "\n"


def test_json_prints_the_summary_and_nothing_else(tmp_path, csv_text):
    data = tmp_path / "d.csv"
    data.write_text(csv_text)
    res = runner.invoke(app, ["--json", "explore", str(data), "--target", "y", "--out",
                              str(tmp_path / "o"), "--format", "none", "--no-report"])
    assert res.exit_code == 0, res.output
    record = json.loads(res.stdout)
    assert record == json.loads((tmp_path / "o" / "summary.json").read_text())


def test_quiet_prints_nothing_and_dash_reads_standard_input(tmp_path, csv_text):
    res = runner.invoke(app, ["--quiet", "explore", "-", "--target", "y", "--out",
                              str(tmp_path / "o"), "--format", "none", "--no-report"],
                        input=csv_text)
    assert res.exit_code == 0, res.output
    assert res.stdout == ""
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["n_samples"] == 20 and s["n_features"] == 3


def test_simulate_takes_the_same_figure_options_and_json(tmp_path):
    """--format/--width as in explore (none: no figure file), --json the threshold record."""
    out = tmp_path / "s"
    res = runner.invoke(app, ["--json", "simulate", "--n-train", "20", "--n-features", "40",
                              "--n-test", "40", "--repeats", "1", "--n-points", "8", "--out", str(out),
                              "--format", "none", "--width", "double"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout) == json.loads((out / "threshold.json").read_text())
    assert not any(p.name.startswith("fig-") for p in out.iterdir())
    assert (out / "report.html").read_text().count("<svg") >= 1  # the report still shows it


@pytest.mark.parametrize("engine", ["memory", "stream"])
def test_standard_input_is_named_standard_input_with_its_digest(tmp_path, csv_text, engine):
    """'-': summary.json, the report and the methods paragraph name "standard input" (never
    the temporary copy), and the recorded digest is the SHA-256 of the bytes piped in
    (hashlib, the outside reference)."""
    import hashlib

    out = tmp_path / "o"
    res = runner.invoke(app, ["explore", "-", "--target", "y", "--out", str(out), "--format",
                              "none", "--engine", engine], input=csv_text)
    assert res.exit_code == 0, res.output
    s = json.loads((out / "summary.json").read_text())
    assert s["source"] == "standard input"
    assert s["input_sha256"] == {"standard input":
                                 hashlib.sha256(csv_text.encode()).hexdigest()}
    for name in ("report.md", "report.html"):
        text = (out / name).read_text()
        assert "standard input" in text and "paths-stdin-" not in text
    assert "paths-stdin-" not in json.dumps(s)


def test_standard_input_in_an_error_message_is_named_standard_input(tmp_path):
    res = runner.invoke(app, ["explore", "-", "--target", "nope", "--out", str(tmp_path / "o")],
                        input="a,b,y\n1,2,3\n4,5,6\n7,8,9\n")
    assert res.exit_code == 2
    assert "standard input" in res.stderr and "paths-stdin-" not in res.stderr


def test_plan_and_predict_print_json_and_predict_reads_standard_input(tmp_path, csv_text):
    """--json on plan (its plan.json record) and predict (what it wrote); '-' as predict's
    rows: the predictions equal those from the same rows read from a file (the file is the
    reference)."""
    res = runner.invoke(app, ["--json", "plan", "--n-features", "50", "--snr", "1", "--out",
                              str(tmp_path / "p")])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout) == json.loads((tmp_path / "p" / "plan.json").read_text())
    data = tmp_path / "d.csv"
    data.write_text(csv_text)
    res = runner.invoke(app, ["--quiet", "explore", str(data), "--target", "y", "--out",
                              str(tmp_path / "o"), "--format", "none", "--no-report"])
    assert res.exit_code == 0, res.output
    fit = str(tmp_path / "o" / "fit.npz")
    res = runner.invoke(app, ["--json", "predict", fit, "-", "--out", str(tmp_path / "a.csv")],
                        input=csv_text)
    assert res.exit_code == 0, res.output
    record = json.loads(res.stdout)
    assert record["n_rows"] == 20 and record["out"] == str(tmp_path / "a.csv")
    res = runner.invoke(app, ["predict", fit, str(data), "--out", str(tmp_path / "b.csv")])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "a.csv").read_text() == (tmp_path / "b.csv").read_text()
