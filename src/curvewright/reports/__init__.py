"""Reports and tables of results: HTML and Markdown reports, methods text, Excel workbooks.

The view layer over the results. Importing it registers the functions behind
``FitResult.report``/``methods``/``to_excel`` (and those of GlobalResult and BatchResult) with
the result module, which cannot import this package (it sits below it).

Modules: ``content`` gathers a report's facts as data; ``methods`` writes the methods
paragraph; ``html`` and ``markdown`` render the facts; ``cells`` formats one cell; ``figure``
embeds the figure as SVG; ``tables`` makes the four tables and ``excel`` writes them;
``versions`` lists the software; ``output`` checks and writes paths; ``document`` holds the
:class:`Report` string.
"""

from __future__ import annotations

from typing import Any

from ..errors import ParameterError
from ..result import register_reports
from .content import content_for
from .document import Report
from .excel import to_excel
from .figure import figure_to_svg
from .html import render_html, render_html_fragment
from .markdown import render_markdown
from .methods import methods_text
from .tables import tables_for

__all__ = ["Report", "figure_to_svg", "methods", "report", "tables_for", "to_excel"]


def report(
    obj: Any,
    format: str = "html",
    *,
    level: float = 0.95,
    figure: bool = True,
    path: Any = None,
    comparison: Any = None,
    intervals: str = "wald",
) -> Report:
    """A self-contained report of a FitResult, GlobalResult or BatchResult.

    Sections: the model and its formula, the data, parameters with standard errors and
    intervals, derived quantities (extrapolations flagged), goodness of fit, diagnostics with
    what each means, the comparison (when given), the figure, a methods paragraph, the
    software versions and the research-use caution. A batch report lists its failed and
    flagged groups with their reasons.

    Parameters
    ----------
    obj : FitResult, GlobalResult or BatchResult
    format : {"html", "markdown"}
        HTML: one page with no scripts and nothing to fetch, the figure as inline SVG.
    level : float
        Coverage of the intervals (a batch report uses the batch's own level).
    figure : bool
        Include the figure.
    path : str or Path, optional
        Also write the report there (the folder must exist).
    comparison : Comparison, optional
        The outcome of :func:`curvewright.compare` to include.
    intervals : {"wald", "profile"}
        The parameters' intervals: Wald (estimate plus or minus t times SE, as ``ci()``)
        or, for a single least-squares fit, profile likelihood (as ``profile_ci()``, which
        refits).

    Returns
    -------
    Report
        A ``str`` that notebooks show rendered.

    Raises
    ------
    ParameterError
        Unknown format, a level outside (0, 1), a comparison that is not a Comparison.
    OutputError
        ``path`` cannot be written.
    """
    if format not in ("html", "markdown"):
        raise ParameterError(f"format must be 'html' or 'markdown', got {format!r}.")
    if path is not None:
        from ..output import output_path

        output_path(path)  # a bad path fails before the work, not after
    content = content_for(
        obj, level=level, figure=figure, comparison=comparison, intervals=intervals
    )
    if format == "html":
        out = Report(render_html(content), "html", render_html_fragment(content))
    else:
        out = Report(render_markdown(content), "markdown")
    if path is not None:
        out.save(path)
    return out


def methods(obj: Any, *, level: float = 0.95, intervals: str = "wald") -> str:
    """The methods paragraph of a result (see :func:`curvewright.reports.methods.methods_text`)."""
    return methods_text(obj, level=level, intervals=intervals)


register_reports(report=report, methods=methods, to_excel=to_excel)
