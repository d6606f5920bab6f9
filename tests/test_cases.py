"""Cases, ``paths run``, ``paths demo`` and the figure options of ``paths explore``.

Through ``typer.testing.CliRunner`` on ``paths.cli.app``.  External references:
the TOML files are parsed by the standard library's ``tomllib`` (Python ≥ 3.11)
here to compare with what the package reads; ``json`` parses the records; the
exit-status convention (2 for usage errors) is common practice for command-line
tools (no source).
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from paths.data.validation import InputError
from paths.workflows.cases import builtin_dir, list_cases, load_case, parse_case, run_case
from paths.cli import app

REPO = Path(__file__).resolve().parents[1]
runner = CliRunner()

# What `paths demo` promises to write (docs/figures.md, "What paths demo writes").
DEMO_FILES = ["summary.json", "path.csv", "coefficients.csv", "model.csv", "fit.npz",
              "fig-path.png", "fig-path.pdf", "fig-path.svg", "fig-path.csv",
              "fig-spectrum.png", "fig-spectrum.pdf", "fig-spectrum.svg", "fig-spectrum.csv",
              "report.md", "report.html", "threshold"]


def _one_line_error(result, *needles):
    assert result.exit_code == 2, result.output
    err = result.stderr if hasattr(result, "stderr") else result.output
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for n in needles:
        assert n in lines[0], lines[0]
    return lines[0]


def test_the_shipped_cases_are_the_repository_cases():
    """Package data (paths/_cases) holds exactly cases/*.toml, and tomllib parses each."""
    if sys.version_info < (3, 11):
        pytest.skip("tomllib is in the standard library from Python 3.11")
    import tomllib

    shipped = sorted(p.name for p in builtin_dir().glob("*.toml"))
    repo = sorted(p.name for p in (REPO / "cases").glob("*.toml"))
    assert shipped == repo and len(repo) >= 3
    for name in repo:
        doc = tomllib.loads((REPO / "cases" / name).read_text())
        case = load_case(REPO / "cases" / name)
        assert case.name == doc["case"]["name"]
        assert case.synthetic is True and doc["case"]["synthetic"] is True
        assert "Synthetic data." in case.description  # each case says so
        assert "SYNTHETIC DATA" in (REPO / "cases" / name).read_text()


def test_three_scenarios_wide_near_threshold_crossing():
    """Calibration: a few dozen rows, hundreds of channels; panel: p within 10% of the training
    n; isotropic: a sweep whose features run past the training rows."""
    cases = {c.name: c for c in (load_case(p) for _, _, p in list_cases())}
    cal = cases["calibration"].data.params
    assert 24 <= cal["n_samples"] <= 60 and cal["n_channels"] >= 200
    pan = cases["panel"].data
    n_train = round(pan.params["n_samples"] * (1 - pan.holdout))
    assert abs(pan.params["n_features"] / n_train - 1) <= 0.1
    iso = cases["isotropic"]
    assert iso.analysis == "simulate" and iso.truth.n_features > iso.simulate.n_train


def test_unknown_keys_are_named_with_the_valid_ones():
    text = '[case]\nname = "x"\ncolour = "red"\n[data]\ngenerator = "panel"\n'
    with pytest.raises(InputError) as exc:
        parse_case(text, source="x.toml")
    msg = str(exc.value)
    assert "\n" not in msg and "colour" in msg and "valid keys: name, title" in msg
    with pytest.raises(InputError, match=r"unknown table\(s\) plots; valid tables: case, data"):
        parse_case('[plots]\nx = 1\n')
    with pytest.raises(InputError, match=r"unknown key\(s\) in \[fit\]: lambdas; valid keys:.*n_lambdas"):
        parse_case('[data]\ngenerator = "panel"\n[fit]\nlambdas = 5\n')
    with pytest.raises(InputError, match="unknown generator parameter.*n_rows.*valid: n_samples"):
        parse_case('[data]\ngenerator = "panel"\nparams = { n_rows = 5 }\n')
    with pytest.raises(InputError, match="unknown figure format 'gif'"):
        parse_case('[data]\ngenerator = "panel"\n[figures]\nformats = ["gif"]\n')


def test_run_refuses_a_case_with_unknown_keys(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[data]\ngenerator = "calibration"\nsamples = 10\n')
    res = runner.invoke(app, ["run", str(bad), "--out", str(tmp_path / "o")])
    _one_line_error(res, "samples", "valid keys")
    assert not (tmp_path / "o").exists()


def test_demo_writes_every_promised_file_and_says_where_the_report_is(tmp_path):
    out = tmp_path / "paths-demo"
    res = runner.invoke(app, ["demo", "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == sorted(DEMO_FILES)
    assert f"report: {out / 'report.html'}" in res.output.replace("\n", "")
    s = json.loads((out / "summary.json").read_text())
    assert s["synthetic"] is True and s["case"] == "calibration"
    assert s["command_line"] == "paths demo"
    # the second half of the story: a sweep across p = n, with the spike and ridge beside it
    sweep = json.loads((out / "threshold" / "threshold.json").read_text())
    assert min(sweep["ratio"]) < 1 < max(sweep["ratio"])
    assert {"min_norm", "ridge_gcv"} <= set(sweep["methods"])
    assert (out / "threshold" / "report.html").exists()
    # a second run refuses the existing folder: one line, exit 2
    again = runner.invoke(app, ["demo", "--out", str(out)])
    _one_line_error(again, "exists", "--force")


def test_demo_list_shows_every_case():
    res = runner.invoke(app, ["demo", "--list"])
    assert res.exit_code == 0
    for name, _, _ in list_cases():
        assert name in res.output


@pytest.mark.parametrize("args, needle", [
    (["--format", "png,tiff"], "unknown figure format 'tiff'"),
    (["--width", "wide"], "unknown figure width 'wide'"),
])
def test_bad_format_or_width_is_refused_before_any_work(tmp_path, args, needle):
    for cmd in (["demo", "--out", str(tmp_path / "d")], ["run", "panel", "--out", str(tmp_path / "r")]):
        res = runner.invoke(app, cmd + args)
        _one_line_error(res, needle)
    assert not any(tmp_path.iterdir())


def test_explore_figure_options(tmp_path):
    """explore --format/--width/--figure-x: bad values exit 2 in one line; good ones write."""
    from paths.data.synthetic import make_panel

    data = tmp_path / "panel.csv"
    make_panel(40, 30, seed=1).to_csv(data, index=False)
    for args, needle in ((["--format", "bmp"], "bmp"), (["--width", "triple"], "triple"),
                         (["--figure-x", "alpha"], "--figure-x")):
        res = runner.invoke(app, ["explore", str(data), "--target", "demand",
                                  "--out", str(tmp_path / "bad")] + args)
        _one_line_error(res, needle)
    out = tmp_path / "good"
    res = runner.invoke(app, ["explore", str(data), "--target", "demand", "--out", str(out),
                              "--format", "pdf", "--width", "double", "--figure-x", "df"])
    assert res.exit_code == 0, res.output
    assert (out / "fig-path.pdf").exists() and not (out / "fig-path.png").exists()
    assert (out / "report.html").exists()
    assert (out / "fig-path.csv").read_text().count("effective df") > 0


def test_a_small_simulate_case_writes_threshold_outputs(tmp_path):
    """The isotropic case's code path at a smaller size: sweep tables, bias/variance, report."""
    text = (REPO / "cases" / "isotropic.toml").read_text()
    text = text.replace("p = 300", "p = 48").replace("n_train = 100", "n_train = 20") \
        .replace("n_points = 30", "n_points = 8").replace("n_test = 200", "n_test = 40") \
        .replace("repeats = 3", "repeats = 2")
    crun = run_case(parse_case(text), tmp_path / "iso", formats="svg", width="single")
    names = {p.name for p in (tmp_path / "iso").iterdir() if not p.name.startswith(".")}
    assert {"threshold.csv", "threshold.json", "bias_variance.csv", "fig-threshold.svg",
            "fig-threshold.csv", "report.md", "report.html"} <= names
    s = json.loads((tmp_path / "iso" / "threshold.json").read_text())
    assert s["synthetic"] is True and s["noise_variance"] == 1.0
    assert crun.report == tmp_path / "iso" / "report.html"
    md = (tmp_path / "iso" / "report.md").read_text()
    assert "peaks at p'/n" in md and "Methods paragraph" in md


def test_a_threshold_case_on_generated_data_and_its_report_numbers(tmp_path):
    """analysis = "threshold" on a generator; every number of the report's methods paragraph
    and diagnosis is a number (or part of a string) of threshold.json (parsed with json)."""
    import re

    from paths.present.report import fmt, threshold_diagnosis, threshold_methods

    text = """
[case]
name = "panel-sweep"
description = "Synthetic data. A small feature-wise sweep of the invented panel."
analysis = "threshold"
[data]
generator = "panel"
params = { n_samples = 60, n_features = 50, seed = 2 }
holdout = 0.5
[threshold]
order = "random"
repeats = 2
n_points = 8
[figures]
formats = ["svg"]
"""
    crun = run_case(parse_case(text), tmp_path / "sweep")
    s = json.loads((tmp_path / "sweep" / "threshold.json").read_text())
    assert {"threshold.csv", "threshold.json", "fig-threshold.svg", "report.html"} <= \
        {p.name for p in (tmp_path / "sweep").iterdir()
         if not p.name.startswith(".")}
    nums, strs = set(), []

    def walk(o):
        if isinstance(o, bool):
            return
        if isinstance(o, (int, float)):
            nums.add(fmt(o))
        elif isinstance(o, str):
            strs.append(o)
        elif isinstance(o, dict):
            for v in o.values():
                walk(v)
        elif isinstance(o, list):
            for v in o:
                walk(v)

    walk(s)
    blob = "\n".join(strs)
    prose = threshold_methods(s) + " " + " ".join(threshold_diagnosis(s))
    prose = prose.replace("||y - b0 - X beta||^2 + lambda ||beta||^2", " ")
    prose = re.sub(r"\((Hastie[^)]*|Dobriban[^)]*)\)", " ", prose)  # citations: fixed text
    tokens = re.findall(r"(?<![\w.])-?\d+(?:\.\d+)?(?:e[-+]?\d+)?(?![\w])", prose)
    assert tokens and [t for t in tokens if t not in nums and t not in blob] == []
    assert crun.report is not None and fmt(s["peak"]["test_mse"]) in crun.report.read_text()
