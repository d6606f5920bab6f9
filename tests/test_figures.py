"""Publication panels and the one save function.

Checked against things outside the project: the PDF file structure (ISO 32000:
``%PDF-`` header, ``%%EOF`` trailer, font dictionaries ``/Subtype /TrueType`` or
``/CIDFontType2`` for TrueType, never ``/Type3``), SVG parsed by the standard
library's ``xml.etree``, PNG pixel size read by Pillow (width × 300 dpi), the CSV
parsed by the standard ``csv`` module against the drawn Line2D data.  The column
widths 3.5 and 7.2 inches are common journal practice (no source).
"""
from __future__ import annotations

import csv
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from numpy.testing import assert_allclose
from PIL import Image

from paths import fit_path
from paths.present import figures
from paths.data.validation import InputError


@pytest.fixture(scope="module")
def path():
    """Synthetic problem (seeded), p > n, with a test set."""
    rng = np.random.default_rng(11)
    X = rng.standard_normal((50, 70))
    y = X[:, :4] @ np.array([2.0, -1.0, 1.0, 0.5]) + rng.standard_normal(50)
    return fit_path(X[:35], y[:35], X_test=X[35:], y_test=y[35:], n_lambdas=30)


@pytest.fixture(scope="module")
def saved(path, tmp_path_factory):
    out = tmp_path_factory.mktemp("figs")
    panel = figures.path_figure(path, width="double")
    files = figures.save_figure(panel, out, formats="png,pdf,svg")
    return panel, files


def test_save_writes_every_format_and_the_csv(saved):
    panel, files = saved
    assert [f.name for f in files] == ["fig-path.png", "fig-path.pdf", "fig-path.svg",
                                       "fig-path.csv"]
    assert all(f.stat().st_size > 0 for f in files)


def test_pdf_structure_and_truetype_fonts(saved):
    """PDF header/trailer (ISO 32000) and TrueType (Type 42) fonts, no Type 3 bitmaps."""
    data = saved[1][1].read_bytes()
    assert data.startswith(b"%PDF-1.")
    assert data.rstrip().endswith(b"%%EOF")
    assert b"startxref" in data[-200:]
    subtypes = set(re.findall(rb"/Subtype\s*/(\w+)", data))
    assert subtypes & {b"TrueType", b"CIDFontType2"}, subtypes
    assert b"Type3" not in subtypes
    assert b"/FontFile2" in data  # the embedded TrueType program


def test_svg_parses_and_has_the_figure_size(saved):
    """xml.etree parses it; width attribute is 7.2 in = 518.4 pt (double column)."""
    root = ET.parse(saved[1][2]).getroot()
    assert root.tag.endswith("svg")
    # spec: matplotlib writes the SVG size with 6 significant digits ("518.4pt")
    assert_allclose(float(root.get("width").rstrip("pt")), 7.2 * 72, rtol=1e-6)


def test_png_is_300_dpi_at_the_column_width(saved):
    """Pillow reads the PNG: 7.2 in × 300 dpi = 2160 px wide."""
    with Image.open(saved[1][0]) as im:
        assert im.size[0] == 2160
        dpi = im.info.get("dpi")
        assert dpi is not None and round(dpi[0]) == 300


@pytest.mark.parametrize("width, inches", [("single", 3.5), ("double", 7.2)])
def test_width_sets_the_figure_width(path, width, inches):
    panel = figures.spectrum_figure(path, width=width)
    # exact: the width is stored as given (a float literal, no arithmetic)
    assert_allclose(panel.figure.get_figwidth(), inches, rtol=0)
    assert set(panel.artists) == {"a", "b", "c"}


def test_csv_holds_exactly_what_is_drawn(path, saved):
    """Rows of panel (b) series gcv equal the drawn line (and the path's GCV); every Line2D of
    the error panel that carries data appears in the CSV."""
    panel, files = saved
    with open(files[3], newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == figures.CSV_HEADER
    gcv = [r for r in rows if r["panel"] == "a" and r["series"] == "gcv" and r["kind"] == "line"]
    line = panel.artists["a"].lines["gcv"]
    # exact: repr() of floats round-trips exactly (Python float repr)
    assert_allclose([float(r["x"]) for r in gcv], line.get_xdata(), rtol=0)
    assert_allclose([float(r["y"]) for r in gcv], path.gcv, rtol=0)
    assert "df" in gcv[0]["x_quantity"] and "$" not in gcv[0]["x_quantity"]
    # bounded: the named coefficient lines and one envelope, not a line per feature
    coef_series = {r["series"] for r in rows if r["panel"] == "c" and r["kind"] == "line"}
    assert coef_series == set(panel.artists["c"].lines) and len(coef_series) == 5
    assert len(rows) < 15 * len(path.lambdas) + 50


def test_axes_are_labelled_with_quantity_and_convention(path):
    panel = figures.path_figure(path, x="log_lambda")
    for key in ("b", "c"):
        assert panel.artists[key].ax.get_xlabel()
    for key in ("a", "c"):
        assert panel.artists[key].ax.get_ylabel()
    assert "λ" in panel.artists["c"].ax.get_xlabel()
    assert "β" in panel.artists["c"].ax.get_xlabel()  # the loss, written out
    assert "minimize ‖y − b0 − Xβ‖² + λ‖β‖²" in panel.caption


def test_rc_settings_are_publication_settings():
    rc = figures._rc("single", "x")
    assert rc["pdf.fonttype"] == 42 and rc["ps.fonttype"] == 42
    assert rc["savefig.dpi"] == 300


@pytest.mark.parametrize("spec", ["png,gif", "jpeg", "", " , "])
def test_bad_format_is_a_one_line_error(spec):
    with pytest.raises(InputError) as exc:
        figures.parse_formats(spec)
    assert "\n" not in str(exc.value) and "png, pdf, svg" in str(exc.value)


def test_formats_normalized():
    assert figures.parse_formats("PNG, .svg,png") == ("png", "svg")


@pytest.mark.parametrize("spec", ["wide", "3.5", ""])
def test_bad_width_is_a_one_line_error(spec):
    with pytest.raises(InputError) as exc:
        figures.parse_width(spec)
    assert "\n" not in str(exc.value) and "single" in str(exc.value)


def test_threshold_figure_from_a_table(tmp_path):
    """A plain threshold.csv-like table is enough; the bias/variance panel appears when given."""
    ratio = np.repeat([0.5, 1.0, 2.0], 2)
    tab = {"ratio": ratio, "method": np.array(["min_norm", "ridge_gcv"] * 3),
           "repeat": np.zeros(6), "test_mse": np.array([2.0, 1.5, 40.0, 1.6, 3.0, 1.7]),
           "train_mse": np.array([0.5, 0.6, 0.0, 0.3, 0.0, 0.4]), "n_train": np.full(6, 40)}
    bv = {"ratio": np.array([0.5, 2.0]), "method": np.array(["min_norm"] * 2),
          "bias2": np.array([0.01, 0.5]), "variance": np.array([1.0, 2.0])}
    panel = figures.threshold_figure(tab, noise_variance=1.0, bias_variance=bv)
    assert set(panel.artists) == {"a", "b", "c"}
    files = figures.save_figure(panel, tmp_path, formats=["svg"])
    ET.parse(files[0])
