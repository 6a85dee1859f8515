"""The HTML report: one self-contained page (no scripts, no links, the figure as inline SVG)."""

from __future__ import annotations

import html

from .cells import cell_text
from .content import Content, Section, Table

__all__ = ["render_html", "render_html_fragment"]

# Our own plain style, scoped to the report so that a notebook showing it keeps its own look.
_STYLE = """
.cw-report { font-family: system-ui, sans-serif; font-size: 14px; line-height: 1.45;
  max-width: 60em; color: #1d2327; }
.cw-report h1 { font-size: 1.5em; margin: 0.4em 0; }
.cw-report h2 { font-size: 1.15em; margin: 1.2em 0 0.4em; border-bottom: 1px solid #c9d1d6; }
.cw-report .cw-table { overflow-x: auto; }
.cw-report table { border-collapse: collapse; margin: 0.4em 0 0.8em; }
.cw-report caption { text-align: left; font-style: italic; padding-bottom: 0.2em; }
.cw-report th, .cw-report td { padding: 0.15em 0.7em; border-bottom: 1px solid #e3e8eb;
  text-align: left; vertical-align: top; }
.cw-report td.num { text-align: right; font-variant-numeric: tabular-nums; }
.cw-report .cw-figure svg { max-width: 100%; height: auto; }
.cw-report section.cw-caution { font-size: 0.92em; border-left: 3px solid #8a6d1f;
  padding-left: 0.8em; }
"""


def _table(t: Table) -> str:
    e = html.escape
    head = "".join(f"<th>{e(c)}</th>" for c in t.columns)
    body = []
    for row in t.rows:
        cells = []
        for v in row:
            if isinstance(v, (int, float)) and not isinstance(v, bool):
                cells.append(f'<td class="num" data-value="{e(repr(v))}">{e(cell_text(v))}</td>')
            else:
                cells.append(f"<td>{e(cell_text(v))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    caption = f"<caption>{e(t.caption)}</caption>" if t.caption else ""
    return (
        f'<div class="cw-table"><table>{caption}<thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>"
    )


def _section(s: Section) -> str:
    e = html.escape
    parts = [f'<section class="cw-{e(s.key)}" data-section="{e(s.key)}">', f"<h2>{e(s.title)}</h2>"]
    parts += [f"<p>{e(p)}</p>" for p in s.paragraphs]
    parts += [_table(t) for t in s.tables]
    if s.items:
        parts.append("<ul>" + "".join(f"<li>{e(i)}</li>" for i in s.items) + "</ul>")
    if s.svg is not None:
        # The SVG is our own drawing of the result (figure.figure_to_svg), kept as markup.
        parts.append(f'<div class="cw-figure">{s.svg}</div>')
    parts.append("</section>")
    return "\n".join(parts)


def render_html_fragment(content: Content) -> str:
    """The report as one ``<div>`` with its own scoped style (for a notebook cell)."""
    body = "\n".join(_section(s) for s in content.sections)
    return (
        f'<div class="cw-report">\n<style>{_STYLE}</style>\n'
        f"<h1>{html.escape(content.title)}</h1>\n{body}\n</div>"
    )


def render_html(content: Content) -> str:
    """The report as a whole HTML page, self-contained."""
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f"<title>{html.escape(content.title)}</title>\n</head>\n<body>\n"
        f"{render_html_fragment(content)}\n</body>\n</html>\n"
    )
