"""Markdown keys read by a CommonMark renderer (markdown-it-py): input text never becomes markup.
Skipped, alone, where markdown-it-py is not installed."""
from __future__ import annotations

import pytest

from specpar.teaching import render_html, render_markdown, worked_solutions

from teaching_cases import invented_table

MarkdownIt = pytest.importorskip("markdown_it").MarkdownIt


def test_markdown_key_neutralises_markup_from_input_text():
    """A CommonMark renderer (markdown-it-py, the reference Python port) makes no element out of
    input ids or types: they show as text."""
    t = invented_table().iloc[:2].copy()
    t.loc[0, "id"] = "<img src=x onerror=alert(1)>"
    t.loc[1, "id"] = "[click](javascript:alert(2))"
    t.loc[1, "sptype"] = "K1 III <script>alert(3)</script>"
    ws = worked_solutions(t)
    md = render_markdown(ws)
    page = MarkdownIt("commonmark").render(md)
    assert "<img" not in page and "<script" not in page and 'href="javascript' not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page  # shown as text
    assert "[click](javascript:alert(2))" in page
    assert "<img" not in render_html(ws) and "<script>" not in render_html(ws)
