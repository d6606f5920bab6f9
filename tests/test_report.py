"""The report: every number in it is a number of summary.json (tested by parsing both).

References: the JSON record written by the same run (parsed with the standard
``json`` module) is the source of truth; the report text is parsed with ``re``
and the HTML with the standard ``html.parser``; derived numbers are recomputed
here from the record's raw arrays with plain Python (min, max, len, division).
"""
from __future__ import annotations

import json
import math
import re
from html.parser import HTMLParser

import numpy as np
from numpy.testing import assert_allclose
import pytest

from error_bounds import ridge_bounds
from paths.workflows.explore import explore_prepared
from paths.workflows.options import FigureOptions, FitOptions, OutputOptions
from paths.workflows.prepare import Prepared
from paths.data.synthetic import make_calibration
from paths.data.tables import select
from paths.present.report import (REFERENCES, RULE_NAMES, convention_formula, fmt,
                                  methods_paragraph)

NUM = re.compile(r"(?<![\w.])-?\d+(?:\.\d+)?(?:e[-+]?\d+)?(?![\w])")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One explore run with K-fold CV and a holdout on synthetic calibration data (seeded)."""
    frame = make_calibration(40, 120, seed=0)
    data = select(frame, "analyte", source="synthetic calibration (paths.data.synthetic)")
    out = tmp_path_factory.mktemp("report") / "out"
    r = explore_prepared(Prepared(train=data), FitOptions(seed=2, n_folds=5, n_lambdas=40),
                         FigureOptions(formats=("svg",)),
                         OutputOptions(out_dir=out, command_line=["paths", "explore", "x.csv",
                                                                  "--target", "analyte"]),
                         holdout=0.25)
    summary = json.loads((out / "summary.json").read_text())
    return r, summary, out


def _numbers_and_strings(obj, nums, strs):
    if isinstance(obj, bool):
        strs.add(str(obj))
    elif isinstance(obj, (int, float)):
        if math.isfinite(obj):
            nums.add(fmt(obj))
    elif isinstance(obj, str):
        strs.add(obj)
    elif isinstance(obj, dict):
        for k, v in obj.items():
            strs.add(str(k))
            _numbers_and_strings(v, nums, strs)
    elif isinstance(obj, list):
        for v in obj:
            _numbers_and_strings(v, nums, strs)
    return nums, strs


def _unaccounted(text, summary, fixed=()):
    """Numeric tokens of ``text`` that are neither a summary number (as the report formats it)
    nor part of a summary string (versions, command line, hashes, solver reason)."""
    # fixed text: rule names with their citations, the reference list, the formula
    fixed = (*fixed, "Hoerl & Kennard 1970", "Hastie et al. 2022", "λ → 0", "lambda -> 0",
             *(convention_formula(summary, f) for f in ("latex", "html", "text")))
    for phrase in (summary["penalty_convention"], *RULE_NAMES.values(), *REFERENCES.values(),
                   *fixed):
        text = text.replace(phrase, " ")
    nums, strs = _numbers_and_strings(summary, set(), set())
    blob = "\n".join(strs)
    return [t for t in NUM.findall(text) if t not in nums and t not in blob]


def _section(md, title):
    m = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", md, flags=re.S | re.M)
    return m.group(1)


def test_derived_numbers_match_the_raw_record(run):
    """summary["report"] against the record's own arrays (plain Python)."""
    _, s, _ = run
    rep = s["report"]
    assert rep["rule"] == s["reported"] == "cv"
    sel = s["selected"][rep["rule"]]
    assert rep["lambda"] == sel["lambda"] and rep["df"] == sel["df"]
    assert rep["fraction"] == sel["fraction"]
    assert rep["est_mse"] == sel["est_mse"] and rep["est_se"] == sel["est_se"]
    assert rep["n_lambdas"] == len(s["lambdas"]) == 40
    assert rep["lambda_min"] == min(s["lambdas"]) and rep["lambda_max"] == max(s["lambdas"])
    assert rep["df_min"] == min(s["df"]) and rep["df_max"] == max(s["df"])
    # the test error at the chosen penalty itself (not the nearest grid point)
    assert rep["test_at"] == "choice" and rep["test_kind"] == "held-out"
    assert rep["test_mse"] == sel["at_choice"]["test_mse"]
    assert rep["cv"]["n_folds"] == s["cv"]["n_folds"] == 5


def test_methods_paragraph_numbers_all_come_from_summary(run):
    _, s, out = run
    md = (out / "report.md").read_text()
    para = _section(md, "Methods paragraph").strip()
    assert para == methods_paragraph(s, "latex")
    assert _unaccounted(para, s) == []
    # and the key ones are there, formatted from the record
    rep = s["report"]
    for v in (s["n_samples"], s["n_features"], s["p_over_n"], s["rank"], s["condition_number"],
              rep["n_lambdas"], rep["lambda_min"], rep["lambda_max"], rep["lambda"], rep["df"],
              rep["fraction"], rep["est_mse"], rep["est_se"], s["n_test"], rep["test_mse"],
              s["cv"]["n_folds"], s["cv"]["seed"]):
        assert re.search(rf"(?<![\w.]){re.escape(fmt(v))}(?![\w])", para), (v, para)
    assert convention_formula(s, "latex") in para and r"\lambda\lVert\beta\rVert_2^2" in para
    assert "5-fold" in para


def test_every_number_in_the_markdown_report_comes_from_summary(run):
    _, s, out = run
    md = (out / "report.md").read_text()
    body = re.sub(r"## Figures.*?(?=## Methods)", "", md, flags=re.S)  # captions: fixed text
    bad = _unaccounted(body, s, fixed=("lambda -> 0+", "SHA-256", "| 0 |", "| 1 |"))
    assert bad == []


class _Text(HTMLParser):
    def __init__(self):
        super().__init__()
        self.parts, self.tags, self.skip = [], [], 0

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in ("svg", "style", "script"):
            self.skip += 1

    def handle_endtag(self, tag):
        if tag in ("svg", "style", "script"):
            self.skip -= 1

    def handle_data(self, data):
        if not self.skip:
            self.parts.append(data)


def test_html_report_is_self_contained_and_its_numbers_come_from_summary(run):
    _, s, out = run
    html = (out / "report.html").read_text()
    p = _Text()
    p.feed(html)
    tags = [t for t, _ in p.tags]
    assert "link" not in tags and "img" not in tags and "iframe" not in tags
    assert all("src" not in attrs for t, attrs in p.tags if t == "script")  # inline only
    assert tags.count("svg") >= 2  # both figures inlined
    assert not re.search(r"(src|href)\s*=\s*[\"']https?:", html)
    assert "url(http" not in html
    text = " ".join(p.parts)
    # fixed text: the explorer's labels (its numbers are computed in the browser, checked in
    # tests/test_report_browser.py) and the figure captions
    text = re.sub(r"Explore the penalty.*?(?=Cautions)", " ", text, flags=re.S)
    assert "Explore the penalty" in html and "Methods paragraph" in text
    assert _unaccounted(text, s, fixed=("lambda -> 0+", "SHA-256")) == []


def test_report_states_cautions_and_reproducibility(run):
    _, s, out = run
    md = (out / "report.md").read_text()
    caut = _section(md, "Cautions")
    assert "optimistic" in caut and "nested cross-validation" in caut
    assert "clinical, credit, safety" in caut
    rep = _section(md, "Reproducibility")
    assert s["command_line"] in rep
    for k, v in s["versions"].items():
        assert v in rep
    assert "holdout split: 2" in rep and f"cross-validation folds: {s['cv']['seed']}" in rep


def test_diagnosis_places_the_data_past_the_threshold(run):
    """p/n = 120/30 = 4 (> 3): 'far past'; the min-norm fit interpolates (rank = n - 1)."""
    _, s, out = run
    diag = _section((out / "report.md").read_text(), "Diagnosis")
    assert s["p_over_n"] > 3 and "far past the interpolation threshold" in diag
    assert s["rank"] == s["n_samples"] - 1 and "interpolates the training data" in diag


def test_explore_writes_figures_and_their_csv(run):
    r, _, out = run
    names = {f.name for f in r.files}
    assert {"fig-path.svg", "fig-path.csv", "fig-spectrum.svg", "fig-spectrum.csv", "report.md",
            "report.html", "summary.json", "path.csv", "coefficients.csv"} <= names
    assert not (out / "fig-path.png").exists()  # only the asked-for formats
    np.testing.assert_array_less(0, [f.stat().st_size for f in r.files])


def test_format_none_writes_no_figure_files_but_the_report_keeps_its_figures(tmp_path):
    """``--format none``: no fig-* files; report.html still inlines both figures (SVG)."""
    data = select(make_calibration(30, 60, seed=1), "analyte", source="synthetic calibration")
    run = explore_prepared(Prepared(train=data), FitOptions(n_lambdas=20),
                           FigureOptions(formats=()), OutputOptions(out_dir=tmp_path / "o"))
    names = {f.name for f in run.files}
    assert not any(n.startswith("fig-") for n in names)
    assert {"report.html", "report.md", "model.csv", "summary.json"} <= names
    assert (tmp_path / "o" / "report.html").read_text().count("<svg") >= 2


def test_training_file_given_as_test_is_never_called_held_out(tmp_path):
    """The training rows reused as the test set: counted (every test row is a training row),
    warned about in the cautions, and the words 'held-out test rows' never used."""
    data = select(make_calibration(30, 60, seed=1), "analyte", source="synthetic calibration")
    run = explore_prepared(Prepared(train=data, test=data), FitOptions(n_lambdas=20),
                           FigureOptions(formats=()), OutputOptions(out_dir=tmp_path / "o"))
    s = run.summary
    assert s["test_shared_rows"] == s["n_test"] == 30
    assert s["report"]["test_kind"] == "reused"
    for name in ("report.md", "report.html"):
        text = (tmp_path / "o" / name).read_text()
        assert "held-out test rows" not in text
        assert "NOT held out" in text and "WARNING" in text


def test_model_file_is_the_fit_at_the_reported_penalty(tmp_path):
    """model.csv: intercept first, original scale, equal to scikit-learn's Ridge on the
    standardized design at the reported lambda (mapped back to the original scale), and to
    the min-norm fit (numpy lstsq, minimum-norm solution) in its second column."""
    from sklearn.linear_model import Ridge

    frame = make_calibration(30, 60, seed=1)
    data = select(frame, "analyte", source="synthetic calibration")
    run = explore_prepared(Prepared(train=data), FitOptions(n_lambdas=20),
                           FigureOptions(formats=(), report=False),
                           OutputOptions(out_dir=tmp_path / "o"))
    lam = run.summary["report"]["lambda"]
    with open(tmp_path / "o" / "model.csv") as fh:
        rows = [line.rstrip("\n").split(",") for line in fh]
    assert rows[0][0] == "term" and rows[1][0] == "(intercept)"
    assert rows[0][1] == f"analyte at lambda={lam:.6g}"
    got = np.array([[float(v) for v in r[1:]] for r in rows[1:]])
    X, y = data.X, data.y
    mu, sd = X.mean(axis=0), X.std(axis=0)
    ref = Ridge(alpha=lam).fit((X - mu) / sd, y)
    coef = ref.coef_ / sd
    icpt = ref.intercept_ - mu @ coef
    # bound: both sides backward stable, ours possibly and Ridge's Cholesky certainly
    # through a Gram matrix: ridge_bounds with the Gram term (Higham 2002 Thm 20.1, 20.4)
    Z = (X - mu) / sd
    b = ridge_bounds(X, y, lam, gram=True)
    assert np.linalg.norm(got[1:, 0] - coef) <= b.coef * np.linalg.norm(coef)
    assert_allclose(got[0, 0], icpt, rtol=0, atol=b.intercept)
    b0 = np.linalg.lstsq(Z, y - y.mean(), rcond=None)[0] / sd
    # bound: the minimum-norm column against lstsq (ridge_bounds at lam = 0, two SVDs)
    assert np.linalg.norm(got[1:, 1] - b0) <= ridge_bounds(X, y, 0.0).coef * np.linalg.norm(b0)
