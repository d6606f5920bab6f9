"""Issue 12 items 1, 3, 5, 7: outputs never land on inputs, one run per folder, no leftovers.

Each test reproduces a defect of the hostile-input campaign through the command line
(or :class:`paths.data.output.OutputFolder`) and checks the contract of the house rules:
an input's bytes (SHA-256) are unchanged by any run, even with ``--force``; a second
run into a claimed folder is refused in one line (exit 2); an interrupted or refused
run leaves no file and no folder behind.  Spreadsheet formula neutralisation follows
the OWASP "CSV Injection" recommendation (prefix a cell starting with ``= + - @``, tab
or CR with an apostrophe); a fact of the trade, no other source.
"""
from __future__ import annotations

import csv
import hashlib
import json
import os
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

from paths.cli import app
from paths.data.output import (JOURNAL, LOCK, OutputError, OutputFolder, confined_name,
                               safe_cell, write_csv, write_text)

runner = CliRunner()


def _data(path, names=("a", "b", "y"), n=12, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, len(names) - 1))
    y = X @ np.arange(1, len(names)) + 0.1 * rng.standard_normal(n)
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(names)
        for row, t in zip(X, y):
            w.writerow([repr(float(v)) for v in (*row, t)])
    return path


def _sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _refused(args, *needles):
    res = runner.invoke(app, [str(a) for a in args])
    assert res.exit_code == 2, (res.exit_code, res.output)
    err = res.stderr.strip()
    assert err.startswith("error: ") and "\n" not in err, err
    for n in needles:
        assert n in err, (n, err)
    return err


def _visible(folder):
    return sorted(p.name for p in folder.iterdir() if not p.name.startswith("."))


# ----------------------------------------------------------------- item 1: inputs are safe
@pytest.mark.parametrize("name", ["report.md", "fig-path.csv", "report.html"])
def test_explore_never_overwrites_its_input(tmp_path, monkeypatch, name):
    """``paths explore NAME -t y --out . --force`` with NAME an output name: refused, input intact."""
    monkeypatch.chdir(tmp_path)
    src = _data(tmp_path / name)  # CSV text under an output's name (the reader sniffs it)
    before = _sha(src)
    _refused(["explore", name, "-t", "y", "--out", ".", "--force", "--format", "svg"],
             "would overwrite the input file", name)
    assert _sha(src) == before
    assert _visible(tmp_path) == [name]


def test_explore_input_through_a_hard_link_is_safe(tmp_path):
    """Inode identity: the output folder holds a hard link to the input under an output name."""
    src = _data(tmp_path / "data.csv")
    out = tmp_path / "o"
    out.mkdir()
    os.link(src, out / "path.csv")
    before = _sha(src)
    _refused(["explore", src, "-t", "y", "--out", out, "--force", "--no-report", "--format", "svg"],
             "would overwrite the input file")
    assert _sha(src) == before


def test_threshold_never_overwrites_its_input(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    src = _data(tmp_path / "threshold.csv", names=[f"x{j}" for j in range(40)] + ["y"], n=30)
    before = _sha(src)
    _refused(["threshold", "threshold.csv", "-t", "y", "--out", ".", "--force", "--n-points", "4",
              "--no-report"], "would overwrite the input file")
    assert _sha(src) == before


def test_plan_never_overwrites_its_pilot(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    src = _data(tmp_path / "plan.csv", n=30)
    before = _sha(src)
    _refused(["plan", "--pilot", "plan.csv", "-t", "y", "--out", ".", "--force"],
             "would overwrite the input file")
    assert _sha(src) == before


def test_run_never_overwrites_its_case_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _data(tmp_path / "d.csv")
    case = tmp_path / "report.md"  # a case file named like an output (any suffix)
    case.write_text('[case]\nname = "c"\n[data]\nfile = "d.csv"\ntarget = "y"\n'
                    '[figures]\nformats = ["svg"]\n')
    before = _sha(case)
    runner.invoke(app, ["run", "report.md", "--out", ".", "--force"])
    assert _sha(case) == before


def test_out_is_the_input_file(tmp_path):
    src = _data(tmp_path / "d.csv")
    _refused(["explore", src, "-t", "y", "--out", src], "not a folder", "input")


# ----------------------------------------------------------------- item 3: names confined
@pytest.mark.parametrize("name", ["x/../../../../tmp/elsewhere", "../up", "/abs", "a\\b", ".hidden",
                                  "", "x\x00y"])
def test_case_name_is_not_a_path(tmp_path, name):
    from paths.workflows.cases import parse_case

    text = f'[case]\nname = {json.dumps(name)}\n[data]\ngenerator = "isotropic"\n'
    with pytest.raises(ValueError) as info:
        parse_case(text)
    assert "plain name" in str(info.value) and "\n" not in str(info.value)


def test_case_name_traversal_writes_nothing_elsewhere(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "c.toml").write_text('[case]\nname = "x/../../elsewhere"\n'
                                     '[data]\ngenerator = "isotropic"\n')
    _refused(["run", "c.toml"], "plain name")
    assert not (tmp_path.parent / "elsewhere").exists()
    assert _visible(tmp_path) == ["c.toml"]


@pytest.mark.parametrize("bad", ["../x.csv", "/etc/x", "a/../../b", "..", "a\\..\\b", "C:x"])
def test_output_names_are_confined(tmp_path, bad):
    with pytest.raises(OutputError):
        confined_name(bad)
    with OutputFolder(tmp_path / "o") as folder:
        with pytest.raises(OutputError):
            folder.path(bad)
        write_text(folder.path("sub/ok.txt"), "1")
    assert (tmp_path / "o" / "sub" / "ok.txt").read_text() == "1"


# ----------------------------------------------------------------- item 5: formula injection
@pytest.mark.parametrize("cell", ['=HYPERLINK("http://example.invalid","x")', "+SUM(1+1)",
                                  "@SUM(1)", "-2+3", "\tx", "\rx", "=1"])
def test_formula_cells_neutralised(cell):
    assert safe_cell(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-1.5", "+2", "1e-3", "-inf", "abc", "a=b", 3, -2.5])
def test_plain_cells_kept(cell):
    assert safe_cell(cell) == cell


def test_formula_column_names_neutralised_in_every_csv(tmp_path):
    """``coefficients.csv`` and the figure CSVs: a column named ``=HYPERLINK(...)`` is text."""
    names = ['=HYPERLINK("http://example.invalid")', "+SUM(1+1)", "@SUM(1)", "-2+3", "y"]
    src = _data(tmp_path / "d.csv", names=names, n=20)
    out = tmp_path / "o"
    res = runner.invoke(app, ["explore", str(src), "-t", "y", "--out", str(out),
                              "--format", "svg"])
    assert res.exit_code == 0, res.output
    csvs = sorted(out.glob("*.csv"))
    assert len(csvs) >= 3
    for f in csvs:
        with open(f, newline="") as fh:
            for row in csv.reader(fh):
                for cell in row:
                    if cell.startswith(("=", "+", "@", "-", "\t", "\r")):
                        float(cell)  # only numbers may start like a formula
    text = (out / "coefficients.csv").read_text()
    assert "'=HYPERLINK" in text and "'+SUM(1+1)" in text and "'@SUM(1)" in text
    assert "'-2+3" in text


def test_write_csv_numbers_stay_numbers(tmp_path):
    write_csv(tmp_path / "t.csv", ["-a", "b"], [[-1.5, "-x"], [2, "=1"]])
    assert (tmp_path / "t.csv").read_text() == "'-a,b\n-1.5,'-x\n2,'=1\n"


# ----------------------------------------------------------------- item 7: one run per folder
def test_second_run_into_a_claimed_folder_is_refused(tmp_path):
    out = tmp_path / "o"
    with OutputFolder(out):
        code = ("import sys; from paths.cli import main; sys.argv = ['paths'] + sys.argv[1:]; "
                "main()")
        src = _data(tmp_path / "d.csv")
        proc = subprocess.run([sys.executable, "-c", code, "explore", str(src), "-t", "y",
                               "--out", str(out)], capture_output=True, text=True, timeout=300,
                              env={**os.environ, "PYTHONPATH": os.getcwd()})
        assert proc.returncode == 2, proc.stderr
        lines = proc.stderr.strip().splitlines()
        assert len(lines) == 1 and "in use by another paths run" in lines[0], proc.stderr
    assert _visible(out) == []  # the refused run wrote nothing


def test_force_rewrite_replaces_the_previous_set(tmp_path):
    """A --force rerun with fewer outputs leaves exactly the new run's set (no stale figures)."""
    src = _data(tmp_path / "d.csv")
    out = tmp_path / "o"
    res = runner.invoke(app, ["explore", str(src), "-t", "y", "--out", str(out),
                              "--format", "svg,png"])
    assert res.exit_code == 0, res.output
    assert {"fig-path.png", "report.html"} <= set(_visible(out))
    (out / "notes.txt").write_text("mine")  # a file of the user's: kept
    res = runner.invoke(app, ["explore", str(src), "-t", "y", "--out", str(out), "--force",
                              "--format", "svg", "--no-report"])
    assert res.exit_code == 0, res.output
    left = _visible(out)
    assert "notes.txt" in left and not [n for n in left if n.endswith(".png")]
    assert "report.html" not in left and "fig-path.svg" in left


def test_interrupted_swap_is_finished_by_the_next_run(tmp_path, monkeypatch):
    """A kill during the swap leaves the journal; the next claim completes the swap first."""
    import paths.data.output as po

    out = tmp_path / "o"
    with OutputFolder(out) as f:
        write_text(f.path("a.txt"), "old a")
        write_text(f.path("b.txt"), "old b")
    real = po.os.replace
    calls = {"n": 0}

    def killed(src, dst):
        calls["n"] += 1
        if str(dst).endswith("b.txt") and "staging" not in str(dst):
            raise KeyboardInterrupt  # killed between the two renames of the swap
        return real(src, dst)

    monkeypatch.setattr(po.os, "replace", killed)
    with pytest.raises(KeyboardInterrupt):
        with OutputFolder(out, force=True) as f:
            write_text(f.path("a.txt"), "new a")
            write_text(f.path("b.txt"), "new b")
    monkeypatch.setattr(po.os, "replace", real)
    # a mix on disk, but marked by the journal
    assert (out / "a.txt").read_text() == "new a" and (out / "b.txt").read_text() == "old b"
    assert (out / JOURNAL).exists()
    with OutputFolder(out, force=True):
        assert (out / "b.txt").read_text() == "new b"  # finished at claim
        assert not (out / JOURNAL).exists()


def test_leftovers_of_killed_runs_are_cleaned_and_do_not_block(tmp_path):
    """Hidden temporaries of a killed run (a staging folder, an atomic-write temporary, a
    stale lock) neither block a rerun without --force nor survive it."""
    out = tmp_path / "o"
    out.mkdir()
    (out / ".paths-staging-abc123").mkdir()
    (out / ".paths-staging-abc123" / "big.csv").write_bytes(b"0" * 4096)
    (out / ".path.csv.k2j4h5g6.tmp").write_bytes(b"partial")
    (out / LOCK).write_text("pid 1")  # nobody holds the flock: stale
    src = _data(tmp_path / "d.csv")
    res = runner.invoke(app, ["explore", str(src), "-t", "y", "--out", str(out), "--format",
                              "svg", "--no-report"])
    assert res.exit_code == 0, res.output
    hidden = sorted(p.name for p in out.iterdir() if p.name.startswith("."))
    assert hidden == [".paths-manifest.json"]


def test_input_error_leaves_no_output_folder(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b,y\n1,2\n3,4,5\n")
    for engine in ("memory", "stream"):
        out = tmp_path / f"o-{engine}"
        res = runner.invoke(app, ["explore", str(bad), "-t", "y", "--out", str(out),
                                  "--engine", engine])
        assert res.exit_code == 2, res.output
        assert not out.exists()


# ----------------------------------------------------------------- item 6: report.md escapes
def test_report_md_carries_no_raw_html_from_names(tmp_path):
    """Column and file names with HTML and Markdown links stay text in report.md
    (CommonMark: entity references and backslash escapes render as the characters)."""
    names = ["<script>alert(1)</script>", "<img src=x onerror=alert(2)>",
             "[x](javascript:alert(3))", "`code`", "y"]
    src = _data(tmp_path / "<b onclick=x>data.csv", names=names, n=20)
    out = tmp_path / "o"
    res = runner.invoke(app, ["explore", str(src), "-t", "y", "--out", str(out),
                              "--format", "svg"])
    assert res.exit_code == 0, res.output
    md = (out / "report.md").read_text()
    for raw in ("<script", "<img", "<b>", "](javascript:"):
        assert raw not in md, raw
    assert "&lt;b onclick=x&gt;data.csv" in md
