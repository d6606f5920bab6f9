"""Escaping user text (column, file, case names) for the Markdown report.

A name read from a data file is data, never markup: ``<script>`` or
``<img onerror=...>`` in a column name must not become live HTML once a Markdown
viewer renders ``report.md``, and ``[x](javascript:...)`` must not become a link.
CommonMark (https://spec.commonmark.org, sections "Entity and numeric character
references" and "Backslash escapes") renders ``&lt;`` as ``<`` and ``\\[`` as
``[``, so escaped text reads the same.  The HTML report escapes with
:func:`html.escape` at each insertion.
"""
from __future__ import annotations

__all__ = ["md_escape", "md_safe"]

_MD = {"&": "&amp;", "<": "&lt;", ">": "&gt;", "`": "&#96;", "[": "\\[", "]": "\\]",
       "\n": " ", "\r": " "}  # pipes: escaped in table cells only (report._md)


def md_escape(text) -> str:
    """``text`` as inert Markdown: no HTML tags, no links, no code spans, one line.

    Examples
    --------
    >>> md_escape("<img src=x onerror=alert(1)>")
    '&lt;img src=x onerror=alert(1)&gt;'
    >>> md_escape("[a](javascript:x)")
    '\\\\[a\\\\](javascript:x)'
    """
    return "".join(_MD.get(ch, ch) for ch in str(text))


def md_safe(obj):
    """A copy of a summary record with every string :func:`md_escape`-d (keys kept)."""
    if isinstance(obj, str):
        return md_escape(obj)
    if isinstance(obj, dict):
        return {k: md_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return type(obj)(md_safe(v) for v in obj)
    return obj
