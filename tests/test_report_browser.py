"""The HTML report in a real headless browser (Debian's ``chromium``).

The browser is the outside reference: it parses the page, lays out the inline
SVG figures, and renders a screenshot.  Checks: the screenshot is not blank
(Pillow reads it; a share of non-white pixels and a spread of grey levels), and
every inlined figure loaded (a probe script, added to a COPY of the report, reads
each ``svg[data-figure]``'s rendered size and element count into the title,
which ``--dump-dom`` returns).  The report itself carries no script.

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
from PIL import Image

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
def report(tmp_path_factory):
    """A report from a small synthetic calibration run (seeded), figures inlined as SVG."""
    out = tmp_path_factory.mktemp("browser") / "run"
    data = select(make_calibration(36, 150, seed=0), "analyte", source="synthetic calibration")
    explore_prepared(Prepared(train=data), FitOptions(n_lambdas=30), FigureOptions(formats=("svg",)),
                     OutputOptions(out_dir=out), holdout=0.25)
    return out / "report.html"


def test_every_figure_loads(report, tmp_path):
    html = report.read_text()
    assert "<script" not in html  # the report itself is script-free
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
    assert np.mean(chroma > 60) > 1e-4
