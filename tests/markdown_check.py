"""Parse a Markdown report with a real CommonMark parser (markdown-it-py, GFM tables on) and
count what renders: a table whose header and delimiter rows disagree (e.g. a raw ``|`` in a
header cell) is not a table at all, so counting tables catches it."""

from __future__ import annotations

from collections import Counter

from markdown_it import MarkdownIt


def rendered_structure(text: str) -> dict:
    """``{"tables": k, "h1": a, "h2": b, ...}`` as markdown-it renders ``text``."""
    tokens = MarkdownIt("commonmark").enable("table").parse(text)
    counts = Counter(t.tag for t in tokens if t.type == "heading_open")
    out = {level: counts.get(level, 0) for level in ("h1", "h2", "h3")}
    out["tables"] = sum(t.type == "table_open" for t in tokens)
    out["images"] = sum(1 for t in tokens if t.type == "inline"
                        for c in (t.children or []) if c.type == "image")
    return out
