"""The HTML report in a real headless browser (Debian's ``chromium``).

The browser is the outside reference: it parses the page, lays out the inline
SVG figures, and renders a screenshot.  Checks: the screenshot is not blank
(Pillow reads it; a share of non-white pixels and a spread of grey levels), and
every inlined figure loaded (a probe script, added to a COPY of the report, reads
each ``svg[data-figure]``'s rendered size and element count into the title,
which ``--dump-dom`` returns).  The explorer section: a URL fragment selects the
penalty, the page recomputes the model in the browser, and ``--dump-dom`` returns
the read-outs (each with its full-precision ``data-value``).

Skips, with the reason, only where no chromium can be found (``.ci/run``
installs it with apt-get before the tests run).
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from PIL import Image

from error_bounds import gamma, reorder_bound
from paths.workflows.explore import explore_prepared
from paths.workflows.options import FigureOptions, FitOptions, OutputOptions
from paths.workflows.prepare import Prepared
from paths.data.synthetic import make_calibration
from paths.data.tables import select

BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(
    BROWSER is None, reason="no chromium on PATH (Debian package 'chromium'; .ci/run installs "
                            "it with apt-get when it can) - the browser test cannot run here")

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--virtual-time-budget=5000"]

PROBE = """<script>
(function () {
  var figs = document.querySelectorAll('svg[data-figure]');
  var ok = 0;
  figs.forEach(function (s) {
    var r = s.getBoundingClientRect();
    if (r.width > 100 && r.height > 100 && s.querySelectorAll('path').length > 10) ok += 1;
  });
  document.title = 'FIGURES ' + ok + '/' + figs.length;
})();
</script>"""


def _chromium(tmp_path, *args):
    profile = tmp_path / f"profile-{len(list(tmp_path.iterdir()))}"
    profile.mkdir()
    cmd = [BROWSER, *FLAGS, f"--user-data-dir={profile}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="module")
def explored(tmp_path_factory):
    """A report from a small synthetic calibration run (seeded), figures inlined as SVG."""
    out = tmp_path_factory.mktemp("browser") / "run"
    data = select(make_calibration(36, 150, seed=0), "analyte", source="synthetic calibration")
    run = explore_prepared(Prepared(train=data), FitOptions(n_lambdas=30),
                           FigureOptions(formats=("svg",)), OutputOptions(out_dir=out),
                           holdout=0.25)
    return run, out / "report.html"


@pytest.fixture(scope="module")
def report(explored):
    return explored[1]


def test_every_figure_loads(report, tmp_path):
    html = report.read_text()
    assert not re.search(r"<script[^>]*\ssrc=", html)  # inline scripts only, nothing fetched
    probe = tmp_path / "probe.html"
    probe.write_text(html.replace("</body>", PROBE + "</body>"))
    res = _chromium(tmp_path, "--dump-dom", probe.as_uri())
    m = re.search(r"<title>FIGURES (\d+)/(\d+)</title>", res.stdout)
    assert m, (res.returncode, res.stderr[-2000:])
    loaded, total = int(m.group(1)), int(m.group(2))
    assert total == 2 and loaded == total


def test_screenshot_is_not_blank(report, tmp_path):
    shot = tmp_path / "shot.png"
    res = _chromium(tmp_path, f"--screenshot={shot}", "--window-size=1200,3000", report.as_uri())
    assert shot.exists(), (res.returncode, res.stderr[-2000:])
    with Image.open(shot) as im:
        grey = np.asarray(im.convert("L"), dtype=float)
    assert grey.shape == (3000, 1200)
    dark = np.mean(grey < 200)
    assert dark > 0.01, dark  # text, tables and figures drawn
    assert grey.std() > 20
    # the figures region has colour: the Okabe-Ito lines are not grey
    with Image.open(shot) as im:
        rgb = np.asarray(im.convert("RGB"), dtype=float)
    chroma = rgb.max(axis=2) - rgb.min(axis=2)
    # spec: a threshold on the picture (at least one pixel in 10^4 coloured), not a
    # rounding allowance
    assert np.mean(chroma > 60) > 1e-4


# ------------------------------------------------------------------ the explorer
EXPLORER_FLAGS = ["--virtual-time-budget=8000"]


def _dump(tmp_path, url):
    res = _chromium(tmp_path, "--dump-dom", url)
    assert "data-explorer=\"ready\"" in res.stdout, (res.returncode, res.stderr[-2000:])
    return res.stdout


def _value(dom, element_id):
    m = re.search(rf'id="{element_id}"[^>]*data-value="([^"]*)"', dom) or \
        re.search(rf'data-value="([^"]*)"[^>]*id="{element_id}"', dom)
    assert m, element_id
    return float(m.group(1)) if m.group(1) else None


def _page_rtol(r):
    """The page and numpy evaluate the same closed forms on the same floats: sums of r
    positive terms of up to 10 operations each, in another order, and a quotient of two such
    sums (GCV, the fraction): twice reorder_bound(r, ops=10) (Higham 2002 section 3.1)."""
    return 2 * reorder_bound(r, ops=10)


def _coef_atol(path, beta):
    """A coefficient is sum_j V_kj (g_j c_j) / s_k: r mixed-sign terms, each row of V of norm
    <= 1, so another summation order moves it by gamma_{r+3} ||g c|| / s_k (Cauchy-Schwarz),
    on each side; ||g c|| is the norm of the scaled coefficients."""
    s = np.asarray(path.design.x_scale, dtype=float)
    return 2 * gamma(path.rank + 3) * np.linalg.norm(beta * s) / s.min()


def test_fragment_selects_the_penalty_and_the_page_recomputes_the_model(explored, tmp_path):
    """``#lambda=V``: the browser's read-outs equal the closed forms at V — df = 1 + Σ d²/(d²+λ)
    (HTF 2009 eq. 3.50, from the record's singular values), training MSE and GCV from
    RidgePath.criteria_at, the coefficients from RidgePath.coef_at (both checked against
    scikit-learn's Ridge in tests/test_path.py)."""
    run, report = explored
    lam = 0.37  # off the grid
    dom = _dump(tmp_path, report.as_uri() + f"#lambda={lam}")
    d = np.asarray(run.summary["singular_values"])
    crit = run.result.criteria_at(lam)
    # bound: the page computes in double precision with the same formulas from the record's
    # repr() floats: sums of r same-sign terms in another order (reorder_bound, a few
    # operations per term); the lambda read-out is the fragment's number (exact)
    tol = _page_rtol(d.size)
    assert_allclose(_value(dom, "ix-lambda"), lam, rtol=0)
    assert_allclose(_value(dom, "ix-df"), 1 + np.sum(d**2 / (d**2 + lam)), rtol=tol)
    assert_allclose(_value(dom, "ix-train"), float(crit.train_mse[0]), rtol=tol)
    assert_allclose(_value(dom, "ix-gcv"), float(crit.gcv[0]), rtol=tol)
    coefs = re.findall(r'<tr><td>([^<]+)</td><td class="num" data-value="([^"]+)"', dom)
    assert len(coefs) == 12
    names = list(run.result.feature_names)
    beta = run.result.coef_at(lam)
    atol = _coef_atol(run.result, beta)
    for name, v in coefs:
        assert_allclose(float(v), beta[names.index(name)], rtol=0, atol=atol)  # bound: _coef_atol
    # errors the page cannot recompute are the grid's, at the grid penalty nearest lam;
    # exact: the recorded number is shown
    i = int(np.argmin(np.abs(np.log(run.result.lambdas) - np.log(lam))))
    assert_allclose(_value(dom, "ix-loo"), run.summary["loo_mse"][i], rtol=0)


def test_fragment_rule_shows_that_rules_choice(explored, tmp_path):
    run, report = explored
    dom = _dump(tmp_path, report.as_uri() + "#rule=loo")
    sel = run.summary["selected"]["loo"]
    assert _value(dom, "ix-lambda") == sel["lambda"]
    # bound: _page_rtol (the same sum in another order)
    assert_allclose(_value(dom, "ix-df"), sel["df"],
                    rtol=_page_rtol(len(run.summary["singular_values"])))
    assert _value(dom, "ix-test") == sel["at_choice"]["test_mse"]
    assert "LOO choice" in dom


def test_fragment_lambda_zero_is_the_min_norm_fit(explored, tmp_path):
    run, report = explored
    dom = _dump(tmp_path, report.as_uri() + "#lambda=0")
    mn = run.summary["min_norm"]
    # bound: _page_rtol (d^2 / d^2 terms summed, a norm ratio of one-rounding-apart gains)
    tol = _page_rtol(len(run.summary["singular_values"]))
    assert_allclose(_value(dom, "ix-df"), mn["df"], rtol=tol)
    assert_allclose(_value(dom, "ix-fraction"), 1.0, rtol=tol)
    assert _value(dom, "ix-test") == mn["test_mse"]


# ------------------------------------------------------------------ the explorer, several targets
@pytest.fixture(scope="module")
def explored_two(tmp_path_factory):
    """A two-target run (invented, seeded): the explorer covers both targets."""
    import pandas as pd

    rng = np.random.default_rng(11)
    X = rng.standard_normal((36, 150))
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(150)])
    frame["first"] = X[:, :5].sum(axis=1) + rng.standard_normal(36)
    frame["second"] = 10 * X[:, 20:22].sum(axis=1) + 0.1 * rng.standard_normal(36)
    out = tmp_path_factory.mktemp("browser-two") / "run"
    data = select(frame, ["first", "second"], source="synthetic two targets")
    run = explore_prepared(Prepared(train=data), FitOptions(n_lambdas=30),
                           FigureOptions(formats=()), OutputOptions(out_dir=out), holdout=0.25)
    return run, out / "report.html"


def test_fragment_selects_the_target_and_the_page_recomputes_its_model(explored_two, tmp_path):
    """``#target=second&lambda=V``: the second target's training MSE, GCV and coefficients
    (RidgePath.criteria_at / coef_at, column 1; both checked against scikit-learn's Ridge in
    tests/test_path.py); df is the design's (HTF 2009 eq. 3.50)."""
    run, report = explored_two
    lam = 0.37
    dom = _dump(tmp_path, report.as_uri() + f"#target=second&lambda={lam}")
    assert 'data-explorer-target="second"' in dom
    d = np.asarray(run.summary["singular_values"])
    crit = run.result.criteria_at(lam)
    tol = _page_rtol(d.size)  # bound: as above
    assert_allclose(_value(dom, "ix-df"), 1 + np.sum(d**2 / (d**2 + lam)), rtol=tol)
    assert_allclose(_value(dom, "ix-train"), float(crit.train_mse[0, 1]), rtol=tol)
    assert_allclose(_value(dom, "ix-gcv"), float(crit.gcv[0, 1]), rtol=tol)
    coefs = re.findall(r'<tr><td>([^<]+)</td><td class="num" data-value="([^"]+)"', dom)
    assert len(coefs) == 12
    names = list(run.result.feature_names)
    beta = run.result.coef_at(lam)[:, 1]
    atol = _coef_atol(run.result, beta)
    for name, v in coefs:
        assert_allclose(float(v), beta[names.index(name)], rtol=0, atol=atol)  # bound: _coef_atol
    assert {"x20", "x21"} <= {name for name, _ in coefs}  # the second target's own features


def test_fragment_target_and_rule_shows_that_targets_choice(explored_two, tmp_path):
    run, report = explored_two
    dom = _dump(tmp_path, report.as_uri() + "#target=second&rule=loo")
    sel = run.summary["by_target"]["second"]["selected"]["loo"]
    assert _value(dom, "ix-lambda") == sel["lambda"]
    # bound: _page_rtol
    assert_allclose(_value(dom, "ix-df"), sel["df"],
                    rtol=_page_rtol(len(run.summary["singular_values"])))
    assert "target second, LOO choice" in dom


def test_without_a_target_the_explorer_opens_on_the_first(explored_two, tmp_path):
    run, report = explored_two
    dom = _dump(tmp_path, report.as_uri() + "#rule=gcv")
    assert 'data-explorer-target="first"' in dom
    assert _value(dom, "ix-lambda") == run.summary["by_target"]["first"]["selected"]["gcv"]["lambda"]
    assert re.search(r'<select id="ix-target">.*first.*second.*</select>', dom, re.S)


SWITCH = """<script>
(function () {
  var pick = document.getElementById('ix-target');
  pick.value = '1';
  pick.dispatchEvent(new Event('change'));
  document.title = 'SWITCHED ' + document.body.getAttribute('data-explorer-target') + ' ' +
    document.getElementById('ix-lambda').getAttribute('data-value') + ' ' +
    document.querySelectorAll('#ix-coef tbody tr').length;
})();
</script>"""


def test_choosing_a_target_in_the_selector_shows_its_reported_choice(explored_two, tmp_path):
    """The selector (a change event, as a reader's click sends) switches to the target's own
    reported penalty, rules and largest coefficients."""
    run, report = explored_two
    probe = tmp_path / "switch.html"
    probe.write_text(report.read_text().replace("</body>", SWITCH + "</body>"))
    res = _chromium(tmp_path, "--dump-dom", probe.as_uri())
    m = re.search(r"<title>SWITCHED (\S+) (\S+) (\d+)</title>", res.stdout)
    assert m, (res.returncode, res.stderr[-2000:])
    rule = run.summary["reported"]
    assert m.group(1) == "second"
    assert float(m.group(2)) == run.summary["by_target"]["second"]["selected"][rule]["lambda"]
    assert int(m.group(3)) == 12
