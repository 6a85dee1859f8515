"""The Markdown report: headings, pipe tables and lists; the figure as an inline data image."""

from __future__ import annotations

import base64

from .cells import cell_text
from .content import Content, Section, Table

__all__ = ["render_markdown"]


def _escape(text: str) -> str:
    # A pipe would end a table cell; a newline would end the row.
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _table(t: Table) -> list[str]:
    lines = [f"*{t.caption}*", ""] if t.caption else []
    lines.append("| " + " | ".join(_escape(c) for c in t.columns) + " |")
    lines.append(
        "|"
        + "|".join(
            "---:"
            if any(isinstance(r[i], (int, float)) and not isinstance(r[i], bool) for r in t.rows)
            else "---"
            for i in range(len(t.columns))
        )
        + "|"
    )
    lines += ["| " + " | ".join(_escape(cell_text(v)) for v in row) + " |" for row in t.rows]
    return [*lines, ""]


def _section(s: Section) -> list[str]:
    lines = [f"## {s.title}", ""]
    for p in s.paragraphs:
        lines += [p, ""]
    for t in s.tables:
        lines += _table(t)
    if s.items:
        lines += [*(f"- {i}" for i in s.items), ""]
    if s.svg is not None:
        # A data URI keeps the report one file with nothing to fetch.
        data = base64.b64encode(s.svg.encode("utf-8")).decode("ascii")
        lines += [f"![{s.title}](data:image/svg+xml;base64,{data})", ""]
    return lines


def render_markdown(content: Content) -> str:
    """The report as Markdown text."""
    lines = [f"# {content.title}", ""]
    for s in content.sections:
        lines += _section(s)
    return "\n".join(lines).rstrip() + "\n"
