"""Lint: every tolerance in the suite carries its reason beside it.

A *tolerance site* is a line of code (strings and comments aside, found with
:mod:`tokenize`) in a ``tests/test_*.py`` file that calls a closeness check
(``assert_allclose``, ``allclose``, ``isclose``, ``approx``), passes ``rtol=`` /
``atol=``, or compares against a float literal written with a negative exponent
(``< 1e-9``).  Each site needs one of the reason tags below in a comment of its
paragraph (the consecutive non-blank lines around it, up to the end of its
statement) or in its test's docstring:

``bound:``
    an error bound, computed in the test or named (a helper of
    ``tests/error_bounds.py``, which cites its theorem);
``exact:``
    an identity that holds bit for bit, with the reason (the same operations in
    the same order, a copy, an exactly representable value);
``sampling:``
    a Monte-Carlo / statistical check: the number of standard errors and the
    false-failure probability;
``spec:``
    the tolerance is the documented accuracy of the method under test (its
    docs or a cited paper state it), not a rounding allowance.

Common practice, no source: a lint run as a test, so that a tolerance without a
reason cannot land (DEVELOPERS.md, "Tolerances").
"""
from __future__ import annotations

import io
import re
import tokenize
from pathlib import Path

import pytest

TESTS = Path(__file__).parent
TAGS = ("bound:", "exact:", "sampling:", "spec:")
CALL = re.compile(r"\b(assert_allclose|assert_within|allclose|isclose|approx|assert_array_almost_equal"
                  r"|assert_almost_equal)\s*\(|\b[ra]tol\s*=")
SMALL = re.compile(r"[<>]=?[^<>]*\b\d+(\.\d*)?e-\d+")


def _lines(source: str):
    """Per line: the code text (strings blanked), the comment text, and the
    line where each statement ends (continuations joined)."""
    code: dict[int, str] = {}
    comment: dict[int, str] = {}
    ends: dict[int, int] = {}
    start = None
    depth = 0
    for tok in tokenize.generate_tokens(io.StringIO(source).readline):
        row = tok.start[0]
        if start is None and tok.type not in (tokenize.NL, tokenize.NEWLINE, tokenize.COMMENT,
                                              tokenize.INDENT, tokenize.DEDENT):
            start = row
        if tok.type == tokenize.COMMENT:
            comment[row] = comment.get(row, "") + tok.string
        elif tok.type == tokenize.STRING:
            code[row] = code.get(row, "") + ' "" '
        elif tok.type not in (tokenize.NL, tokenize.NEWLINE, tokenize.INDENT, tokenize.DEDENT):
            code[row] = code.get(row, "") + " " + tok.string
        if tok.type == tokenize.OP and tok.string in "([{":
            depth += 1
        elif tok.type == tokenize.OP and tok.string in ")]}":
            depth -= 1
        if tok.type == tokenize.NEWLINE and start is not None:
            for r in range(start, tok.end[0] + 1):
                ends[r] = tok.end[0]
            start = None
    return code, comment, ends


def _docstring_of(lines: list[str], row: int) -> str:
    """The text from the enclosing ``def`` line down to ``row``."""
    for r in range(row, 0, -1):
        if re.match(r"\s*def \w", lines[r - 1]):
            return "\n".join(lines[r - 1:row])
    return ""


def unexplained(path: Path) -> list[str]:
    """The tolerance sites of one file without a reason tag, as ``file:line``."""
    source = path.read_text()
    lines = source.splitlines()
    code, comment, ends = _lines(source)
    # module-level constants whose own paragraph states a reason (``TOL = ...``)
    named = set()
    for row in code:
        if row > len(lines):
            continue
        m = re.match(r"\s*([A-Z][A-Z0-9_]*)\s*=", lines[row - 1])
        if m and not lines[row - 1].startswith((" ", "\t")):
            first = row
            while first > 1 and lines[first - 2].strip():
                first -= 1
            if any(t in comment.get(r, "") for r in range(first, ends.get(row, row) + 1)
                   for t in TAGS):
                named.add(m.group(1))
    out = []
    for row, text in sorted(code.items()):
        if not (CALL.search(text) or ("assert" in text and SMALL.search(text))):
            continue
        first = row
        while first > 1 and lines[first - 2].strip():
            first -= 1
        last = ends.get(row, row)
        near = " ".join(comment.get(r, "") for r in range(first, last + 1))
        doc = _docstring_of(lines, row)
        if any(re.search(rf"\b{k}\b", text) for k in named):
            continue
        if not any(t in near or t in doc for t in TAGS):
            out.append(f"{path.name}:{row}: {lines[row - 1].strip()[:70]}")
    return out


FILES = sorted(p for p in TESTS.glob("test_*.py") if p.name != Path(__file__).name)


@pytest.mark.parametrize("path", FILES, ids=[p.name for p in FILES])
def test_every_tolerance_has_a_reason(path):
    """Each tolerance site names its reason (bound / exact / sampling / spec)."""
    missing = unexplained(path)
    assert not missing, "tolerance without a reason tag:\n" + "\n".join(missing)


def test_the_lint_finds_an_unexplained_tolerance(tmp_path):
    """The lint can fail: a bare rtol literal is reported, a tagged one is not."""
    bad = tmp_path / "test_bad.py"
    bad.write_text("def test_x():\n    assert_allclose(1.0, 1.0, rtol=1e-9)\n\n"
                   "def test_y():\n    # bound: two roundings (Higham 2002 2.2)\n"
                   "    assert_allclose(1.0, 1.0, rtol=4.4e-16)\n\n"
                   "def test_z():\n    assert abs(a - b) < 1e-12\n")
    assert [m.split(":")[1] for m in unexplained(bad)] == ["2", "9"]
