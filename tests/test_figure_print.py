"""Figures for print, read back from the saved PDF files: text sizes, text boxes, the page.

The outside references: the PDF itself (ISO 32000-1: content streams compressed
with zlib, text drawn by ``Tf`` (font, size), ``cm`` (matrix) and ``TJ`` (glyphs
with kerning in thousandths of an em), ``/MediaBox`` the page), parsed here with
``zlib`` and ``re``; glyph advances from FreeType (matplotlib's ``ft2font``) on
the embedded font families.  The thresholds are print practice (no source beyond
common journal guidance): every text at least 7 pt at the saved width, no two
texts overlapping, nothing outside the page.
"""
from __future__ import annotations

import re
import zlib
from itertools import combinations

import numpy as np
import pytest
from matplotlib import font_manager, ft2font

from paths import fit_path
from paths.data.synthetic import make_calibration, split_holdout
from paths.present import figures
from paths.selection.cv import cross_validate
from paths.selection.rules import select_penalty

RUN = re.compile(rb"q\s+([-\d.eE]+) ([-\d.eE]+) ([-\d.eE]+) ([-\d.eE]+) ([-\d.eE]+) ([-\d.eE]+)"
                 rb" cm\s+BT\s(.*?)\sET", re.S)
OPS = re.compile(rb"/(\w+) ([\d.]+) Tf|([-\d.]+) ([-\d.]+) Td|\[((?:\\.|\((?:\\.|[^\\)])*\)|[^\]])*)\]\s*TJ",
                 re.S)
ITEM = re.compile(rb"\(((?:\\.|[^\\)])*)\)|(-?[\d.]+)")
MIN_PT = 7.0
#: text boxes: baseline - 0.2 em to baseline + 0.72 em (DejaVu descender/cap height), shrunk by
#: this margin so that touching neighbours (a label and its superscript) do not count
SHRINK = 0.4


def _unescape(raw: bytes) -> bytes:
    out, i = bytearray(), 0
    while i < len(raw):
        c = raw[i]
        if c == 0x5C and i + 1 < len(raw):
            n = raw[i + 1]
            if 0x30 <= n <= 0x37:
                m = re.match(rb"[0-7]{1,3}", raw[i + 1:i + 4])
                out.append(int(m.group(0), 8))
                i += 1 + len(m.group(0))
                continue
            out.append({0x6E: 10, 0x72: 13, 0x74: 9}.get(n, n))
            i += 2
            continue
        out.append(c)
        i += 1
    return bytes(out)


def _to_unicode(obj: bytes, objs: dict) -> dict:
    """The font's ToUnicode CMap (ISO 32000-1, 9.10.3): code -> text (ligatures as letters)."""
    ref = re.search(rb"/ToUnicode (\d+) 0 R", obj)
    if ref is None:
        return {}
    body = objs.get(ref.group(1), b"")
    m = re.search(rb"stream\r?\n(.*?)endstream", body, re.S)
    try:
        cmap = zlib.decompress(m.group(1)) if m else b""
    except zlib.error:
        cmap = m.group(1)
    out = {}
    def text(hexa):
        return bytes.fromhex(hexa.decode()).decode("utf-16-be")

    for block in re.findall(rb"beginbfchar(.*?)endbfchar", cmap, re.S):
        for src, dst in re.findall(rb"<([0-9A-Fa-f]+)>\s*<([0-9A-Fa-f]+)>", block):
            out[int(src, 16)] = text(dst)
    for block in re.findall(rb"beginbfrange(.*?)endbfrange", cmap, re.S):
        for lo, hi, dst in re.findall(rb"<([0-9A-Fa-f]+)>\s*<([0-9A-Fa-f]+)>\s*(\[[^\]]*\]|<[0-9A-Fa-f]+>)",
                                      block):
            lo, hi = int(lo, 16), int(hi, 16)
            if dst.startswith(b"["):
                for k, h in enumerate(re.findall(rb"<([0-9A-Fa-f]+)>", dst)):
                    out[lo + k] = text(h)
            else:
                start = int(dst[1:-1], 16)
                for k in range(hi - lo + 1):
                    out[lo + k] = chr(start + k)
    return out


def _fonts(pdf: bytes) -> dict:
    """Resource name -> (FT2Font of the embedded family, ToUnicode map)."""
    objs = {m.group(1): m.group(2) for m in re.finditer(rb"(\d+) 0 obj\s*(.*?)endobj", pdf, re.S)}
    out = {}
    for name, ref in re.findall(rb"/(F\d+) (\d+) 0 R", pdf):
        obj = objs.get(ref, b"")
        desc = re.search(rb"/DescendantFonts\s*\[\s*(\d+) 0 R", obj)
        base = re.search(rb"/BaseFont\s*/\w+\+([\w-]+)", obj)
        family = base.group(1).decode() if base else "DejaVuSans"
        weight = "bold" if "Bold" in family else "normal"
        style = "oblique" if "Oblique" in family else "normal"
        path = font_manager.findfont(font_manager.FontProperties(
            family="DejaVu Sans", weight=weight, style=style))
        cmap = _to_unicode(obj, objs)
        if desc is not None and not cmap:
            cmap = _to_unicode(objs.get(desc.group(1), b""), objs)
        out[name.decode()] = (ft2font.FT2Font(path), cmap)
    return out


def text_runs(pdf: bytes) -> list:
    """Every text run of the page: (text, size in pt, axis-aligned box (x0, y0, x1, y1))."""
    fonts = _fonts(pdf)
    runs = []
    for m in re.finditer(rb"stream\r?\n(.*?)endstream", pdf, re.S):
        try:
            content = zlib.decompress(m.group(1))
        except zlib.error:
            continue
        for r in RUN.finditer(content):
            a, b, c, d, e, f = map(float, r.groups()[:6])
            font, size, tx, ty = None, 0.0, 0.0, 0.0
            text, width = "", 0.0
            for op in OPS.finditer(r.group(7)):
                if op.group(1):
                    font, size = op.group(1).decode(), float(op.group(2))
                elif op.group(3):
                    tx, ty = float(op.group(3)), float(op.group(4))
                else:
                    piece, adjust = "", 0.0
                    for s_, num in ITEM.findall(op.group(5)):
                        if num:
                            adjust += float(num)
                        else:
                            raw = _unescape(s_)
                            codes = [int.from_bytes(raw[k:k + 2], "big")
                                     for k in range(0, len(raw), 2)]
                            piece += "".join(fonts[font][1].get(k, chr(k)) for k in codes)
                    ft = fonts[font][0]
                    ft.set_size(size, 72)
                    ft.set_text(piece, 0.0)
                    width += ft.get_width_height()[0] / 64.0 - adjust / 1000.0 * size
                    text += piece
            scale = np.sqrt(abs(a * d - b * c))
            corners = [(tx + SHRINK, ty - 0.2 * size + SHRINK),
                       (tx + width - SHRINK, ty + 0.72 * size - SHRINK)]
            pts = np.array([[a * x + c * y + e, b * x + d * y + f]
                            for x in (corners[0][0], corners[1][0])
                            for y in (corners[0][1], corners[1][1])])
            runs.append((text, size * scale, (*pts.min(axis=0), *pts.max(axis=0))))
    return runs


def _page(pdf: bytes):
    box = re.search(rb"/MediaBox\s*\[\s*([-\d.]+) ([-\d.]+) ([-\d.]+) ([-\d.]+)\s*\]", pdf)
    return tuple(map(float, box.groups()))


@pytest.fixture(scope="module")
def wide():
    """The demo's kind of data: synthetic calibration spectra (seeded), p/n = 11, with every
    rule of the selection report and 8-fold CV."""
    frame = make_calibration(48, 400, noise=0.001, seed=0)
    X, y = frame.drop(columns="analyte"), frame["analyte"].to_numpy()
    train, test = split_holdout(len(y), 0.25, seed=0)
    path = fit_path(X.iloc[train], y[train], X_test=X.iloc[test], y_test=y[test], n_lambdas=60)
    cv = cross_validate(X.iloc[train], y[train], path=path, n_folds=8, seed=0)
    rules = select_penalty(path, cv, reported="cv")
    selected = {k: v.as_dict() for k, v in rules.rules.items() if v.lam is not None}
    return path, cv, selected


def _panels(wide):
    path, cv, selected = wide
    ratio = np.repeat([0.25, 0.5, 0.9, 1.0, 1.1, 2.0, 4.0, 8.0], 2)
    tab = {"ratio": ratio, "method": np.array(["min_norm", "ridge_gcv"] * 8),
           "repeat": np.zeros(16), "n_train": np.full(16, 40),
           "test_mse": np.array([1.3, 1.2, 2.0, 1.5, 9.0, 1.7, 40.0, 1.8, 12.0, 1.8, 3.0, 1.6,
                                 2.0, 1.5, 1.6, 1.4]),
           "train_mse": np.array([0.7, 0.8, 0.5, 0.6, 0.1, 0.5, 0.0, 0.5, 0.0, 0.4, 0.0, 0.4,
                                  0.0, 0.3, 0.0, 0.3])}
    for width in ("single", "double"):
        for x in ("df", "log_lambda"):
            yield f"path-{width}-{x}", figures.path_figure(path, selected=selected, cv=cv,
                                                            reported="cv", x=x, width=width)
        yield f"spectrum-{width}", figures.spectrum_figure(path, selected={"cv": selected["cv"]},
                                                           width=width)
        yield f"threshold-{width}", figures.threshold_figure(tab, noise_variance=1.0,
                                                             width=width)
        yield f"reml-{width}", figures.reml_figure(path, width=width)
        yield f"targets-{width}", figures.targets_figure(_many_choices(), reported="loo",
                                                         width=width)


def _many_choices():
    """Invented per-target penalties of 3000 targets (seeded, log-normal), some at 0."""
    rng = np.random.default_rng(5)
    base = 10.0 ** rng.normal(2.0, 1.0, 3000)
    loo = base * 10.0 ** rng.normal(0.0, 0.1, 3000)
    loo[:40] = 0.0
    return {"gcv": base, "loo": loo, "reml": base * 10.0 ** rng.normal(0.2, 0.3, 3000)}


@pytest.fixture(scope="module")
def saved(wide, tmp_path_factory):
    out = tmp_path_factory.mktemp("print")
    pdfs = {}
    for name, panel in _panels(wide):
        files = figures.save_figure(panel, out, name=name, formats="pdf", close=True)
        pdfs[name] = files[0].read_bytes()
    return pdfs


NAMES = [f"{k}-{w}{x}" for w in ("single", "double")
         for k, x in (("path", "-df"), ("path", "-log_lambda"), ("spectrum", ""),
                      ("threshold", ""), ("reml", ""), ("targets", ""))]


@pytest.mark.parametrize("name", NAMES)
def test_every_text_is_at_least_7_pt(saved, name):
    runs = text_runs(saved[name])
    # the parser found the figure's texts (the one-panel REML profile has fewer)
    assert len(runs) > (10 if name.startswith("reml") else 20)
    small = [(t, round(s, 2)) for t, s, _ in runs if s < MIN_PT - 1e-6]
    assert small == []
    assert max(s for _, s, _ in runs) >= 8.0  # axis labels at 8 pt


@pytest.mark.parametrize("name", NAMES)
def test_no_text_outside_the_page(saved, name):
    x0, y0, x1, y1 = _page(saved[name])
    out = [t for t, _, b in text_runs(saved[name])
           if b[0] < x0 - 0.5 or b[1] < y0 - 0.5 or b[2] > x1 + 0.5 or b[3] > y1 + 0.5]
    assert out == []


@pytest.mark.parametrize("name", NAMES)
def test_no_two_texts_overlap(saved, name):
    runs = [r for r in text_runs(saved[name]) if r[0].strip()]
    clash = [(p[0], q[0]) for p, q in combinations(runs, 2)
             if min(p[2][2], q[2][2]) > max(p[2][0], q[2][0])
             and min(p[2][3], q[2][3]) > max(p[2][1], q[2][1])]
    assert clash == []
