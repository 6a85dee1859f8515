"""The facts of a report, gathered as data from a result: sections of paragraphs and tables.

Every number here is the result's own (no rounding: the renderers format them), so the HTML,
the Markdown and the tests all read the same record. A section has a stable ``key`` (``model``,
``data``, ``parameters``, ``derived``, ``fit``, ``diagnostics``, ``comparison``, ``figure``,
``methods``, ``software``, ``caution``; batch reports have ``groups`` and ``attention``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..batch_result import BatchResult
from ..errors import CurvewrightError, ParameterError
from ..global_result import GlobalResult
from ..result import Diagnostic, FitResult
from ..stats.compare import Comparison
from ..thresholds import CAUTION
from .figure import figure_svg
from .methods import methods_text
from .versions import software_versions

__all__ = ["Cell", "Content", "Section", "Table", "content_for"]

Cell = str | float | int | bool | None

#: What each residual test asks, in plain words (shown beside its outcome).
TEST_MEANING = {
    "normality": (
        "Are the residuals consistent with a normal distribution? The intervals assume so; "
        "with few points the test has little power."
    ),
    "runs": (
        "Do the residuals change sign along x as often as chance would have them? Too few "
        "runs mean the curve runs above, then below the data: its shape misses theirs."
    ),
    "lack of fit": (
        "Where x values are replicated: is the scatter about the curve larger than the "
        "scatter between replicates? If so, the model does not describe the data."
    ),
}

#: Headers of the comparison's columns, in words.
_COMPARISON_HEADERS = {
    "free_params": "free parameters",
    "ssr": "SSR",
    "r2": "R²",
    "aicc": "AICc",
    "delta_aicc": "ΔAICc",
    "akaike_weight": "Akaike weight",
    "bic": "BIC",
    "df_num": "df (numerator)",
    "df_den": "df (denominator)",
    "p": "p value",
}

#: Largest number of group rows a batch report lists in its per-group table.
MAX_GROUP_ROWS = 500


@dataclass(frozen=True)
class Table:
    """A table: column headers and rows of cells (numbers unformatted)."""

    columns: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    caption: str = ""


@dataclass(frozen=True)
class Section:
    """One part of a report: a title, paragraphs, tables, a bullet list, an inline SVG."""

    key: str
    title: str
    paragraphs: tuple[str, ...] = ()
    tables: tuple[Table, ...] = ()
    items: tuple[str, ...] = ()
    svg: str | None = None


@dataclass(frozen=True)
class Content:
    """A whole report: a title and its sections in order."""

    title: str
    sections: tuple[Section, ...]

    def section(self, key: str) -> Section:
        """The section with ``key``."""
        for s in self.sections:
            if s.key == key:
                return s
        raise KeyError(key)


# ---------------------------------------------------------------------------- pieces
def _pct(level: float) -> str:
    return f"{100 * level:g}%"


def _check_level(level: float) -> float:
    if not (isinstance(level, (int, float)) and 0 < float(level) < 1):
        raise ParameterError(f"level must be a number between 0 and 1 (e.g. 0.95), got {level!r}.")
    return float(level)


def _model_section(model: Any) -> Section:
    paras = [
        f"y = {model.formula}" if model.formula else "A Python function (no formula).",
    ]
    if model.description:
        paras.append(str(model.description))
    rows = tuple((p.name, p.unit, p.description) for p in model.params)
    return Section(
        "model",
        f"Model: {model.name}",
        paragraphs=tuple(paras),
        tables=(Table(("parameter", "unit", "meaning"), rows),),
    )


def _data_rows(datasets: Sequence[Any]) -> list[tuple[Cell, ...]]:
    x = np.concatenate([d.x_used for d in datasets]) if datasets else np.zeros(0)
    y = np.concatenate([d.y_used for d in datasets]) if datasets else np.zeros(0)
    excluded = sum(int((~d.include).sum()) for d in datasets)
    dropped = sum(int(d.n_dropped) for d in datasets)
    rows: list[tuple[Cell, ...]] = [
        ("points used", int(x.size)),
        ("points excluded", excluded),
        ("rows dropped (missing values)", dropped),
        ("distinct x values", int(np.unique(x).size)),
    ]
    if x.size:
        xl, yl = datasets[0].x_label, datasets[0].y_label
        xn = "x" if xl == "x" else f"x ({xl})"
        yn = "y" if yl == "y" else f"y ({yl})"
        rows += [
            (f"{xn} from", float(np.min(x))),
            (f"{xn} to", float(np.max(x))),
            (f"{yn} from", float(np.min(y))),
            (f"{yn} to", float(np.max(y))),
        ]
    rows.append(("sigma given", any(d.sigma is not None for d in datasets)))
    return rows


def _param_rows(r: FitResult, level: float, intervals: str) -> tuple[tuple[Cell, ...], ...]:
    frame = r.to_frame(level)
    # Profile intervals replace the Wald ones of the free parameters (linked ones keep Wald).
    profile: dict[str, dict[Any, Any]] | None = None
    if intervals == "profile" and r.free:
        profile = {str(k): v for k, v in r.profile_ci(level=level).to_dict("index").items()}
    rows = []
    for name, row in frame.iterrows():
        notes = []
        if row["status"] == "fixed":
            notes.append("held fixed")
        if row["status"] == "linked":
            notes.append(f"= {row['link']}")
        if row["at_lower"]:
            notes.append("at its lower bound")
        if row["at_upper"]:
            notes.append("at its upper bound")
        if row["not_identified"]:
            notes.append("not identified by the data")
        fixed = row["status"] == "fixed"
        lo, hi = float(row["ci_low"]), float(row["ci_high"])
        key = str(name)
        if profile is not None and key in profile:
            lo, hi = float(profile[key]["lower"]), float(profile[key]["upper"])
            if profile[key]["note"]:
                notes.append(str(profile[key]["note"]))
        elif profile is not None and row["status"] == "linked":
            notes.append("Wald interval (linked)")
        rows.append(
            (
                str(name),
                float(row["value"]),
                None if fixed else float(row["stderr"]),
                None if fixed else lo,
                None if fixed else hi,
                str(row["unit"]),
                "; ".join(notes),
            )
        )
    return tuple(rows)


def _range_note(inside: Any) -> str:
    if inside is False:
        return "EXTRAPOLATED: outside the range of x in the data"
    if inside is True:
        return "within the data's x range"
    return ""


def _derived_rows(r: FitResult, level: float) -> tuple[tuple[Cell, ...], ...]:
    df = r.derived(level)
    return tuple(
        (
            str(name),
            float(row["value"]),
            float(row["stderr"]),
            float(row["lower"]),
            float(row["upper"]),
            str(row["unit"]),
            _range_note(row["in_data_range"]),
        )
        for name, row in df.iterrows()
    )


def _extrapolated(r: FitResult, level: float) -> list[str]:
    df = r.derived(level)
    return [
        f"{name} = {float(row['value']):.6g} lies outside the range of x in the data "
        "(extrapolated): treat it with extra care."
        for name, row in df.iterrows()
        if row["in_data_range"] is False
    ]


def _fit_rows(r: Any) -> tuple[tuple[Cell, ...], ...]:
    ss = (
        "weighted sum of squared residuals" if r.weights is not None else "sum of squared residuals"
    )
    return (
        (ss, float(r.ssr)),
        ("residual standard deviation", float(r.sigma_resid)),
        ("R²", float(r.r2)),
        ("points used (n)", int(r.n)),
        ("free parameters", int(r.nfree)),
        ("degrees of freedom", int(r.dof)),
        ("AICc", float(r.aicc)),
        ("BIC", float(r.bic)),
        ("condition number (scaled Jacobian)", float(r.condition)),
    )


def _finding(d: Diagnostic) -> str:
    return f"{d.severity}: {d.text}"


def _residual_tests(r: FitResult) -> tuple[Table | None, list[str]]:
    try:
        diag = r.residual_diagnostics()
    except CurvewrightError as exc:
        return None, [f"Residual tests could not be run: {exc}"]
    rows = []
    for _, t in diag.tests.iterrows():
        name = str(t["test"])
        key = next((k for k in TEST_MEANING if name.startswith(k)), "")
        rows.append(
            (
                name,
                float(t["statistic"]),
                float(t["p_value"]),
                TEST_MEANING.get(key, ""),
                str(t["note"]),
            )
        )
    # The outlier and leverage sentences follow the three tests' notes in the summary.
    extra = [s for s in diag.summary.split("\n")[3:] if s]
    table = Table(("test", "statistic", "p value", "what it asks", "finding"), tuple(rows))
    return table, extra


def _diagnostics_section(r: FitResult) -> Section:
    findings = [_finding(d) for d in r.diagnostics]
    table, extra = _residual_tests(r)
    paras = (
        ("Findings of the fit itself (convergence, bounds, identifiability, correlation):",)
        if findings
        else ("The fit raised no findings (convergence, bounds, identifiability, correlation).",)
    )
    return Section(
        "diagnostics",
        "Diagnostics",
        paragraphs=paras,
        tables=(table,) if table is not None else (),
        items=tuple([*findings, *extra]),
    )


def _comparison_section(c: Any) -> Section:
    if not isinstance(c, Comparison):
        raise ParameterError(
            "comparison= takes the result of curvewright.compare(...) (a Comparison), got "
            f"{type(c).__name__}."
        )
    t = c.table
    cols = ("fit", *[_COMPARISON_HEADERS.get(str(k), str(k)) for k in t.columns])
    rows = tuple(
        (str(i), *(_cell(v) for v in row)) for i, row in zip(t.index, t.to_numpy(), strict=True)
    )
    tables = [Table(cols, rows, caption="Fits compared (same data, same weights)")]
    if len(c.f_tests):
        f = c.f_tests
        frows = tuple(tuple(_cell(v) for v in row) for row in f.to_numpy())
        tables.append(
            Table(
                tuple(_COMPARISON_HEADERS.get(str(k), str(k)) for k in f.columns),
                frows,
                caption=f"Extra-sum-of-squares F tests (alpha = {c.alpha:g})",
            )
        )
    return Section(
        "comparison",
        "Model comparison",
        paragraphs=(c.recommendation,),
        tables=tuple(tables),
        items=tuple(c.reasoning),
    )


def _cell(v: Any) -> Cell:
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return float(v)
    return None if v is None else str(v)


def _figure_section(obj: Any, level: float, figure: bool) -> Section:
    if not figure:
        return Section("figure", "Figure", paragraphs=("Figure left out (figure=False).",))
    try:
        svg = figure_svg(obj, level=level)
    except CurvewrightError as exc:
        # A result the figure cannot be drawn for still gets its report, saying why.
        return Section("figure", "Figure", paragraphs=(f"No figure could be drawn: {exc}",))
    return Section("figure", "Figure", svg=svg)


def _tail(
    obj: Any, level: float, extra_cautions: Sequence[str], intervals: str = "wald"
) -> list[Section]:
    versions = software_versions()
    return [
        Section(
            "methods", "Methods", paragraphs=(methods_text(obj, level=level, intervals=intervals),)
        ),
        Section(
            "software",
            "Software",
            tables=(Table(("software", "version"), tuple(versions.items())),),
        ),
        Section("caution", "Caution", paragraphs=(CAUTION,), items=tuple(extra_cautions)),
    ]


def _outcome(success: bool, code: str, message: str) -> str:
    if success:
        return f"Outcome: {message}."
    verdict = "degenerate" if code == "degenerate_stop" else "not converged"
    return (
        f"Outcome: {verdict}. {message[:1].upper()}{message[1:]}; the numbers are where it stopped."
    )


# ---------------------------------------------------------------------------- reports
def fit_content(
    r: FitResult,
    *,
    level: float = 0.95,
    figure: bool = True,
    comparison: Any = None,
    intervals: str = "wald",
) -> Content:
    """The facts of a single fit's report (``intervals``: "wald" or "profile")."""
    level = _check_level(level)
    if intervals not in ("wald", "profile"):
        raise ParameterError(f"intervals must be 'wald' or 'profile', got {intervals!r}.")
    pct = _pct(level)
    sections = [
        _model_section(r.model),
        Section(
            "data",
            "Data",
            tables=(Table(("quantity", "value"), tuple(_data_rows(r.datasets))),),
        ),
        Section(
            "parameters",
            "Parameters",
            paragraphs=(_outcome(r.success, r.code, r.message),),
            tables=(
                Table(
                    (
                        "parameter",
                        "value",
                        "std. error",
                        f"lower {pct}",
                        f"upper {pct}",
                        "unit",
                        "note",
                    ),
                    _param_rows(r, level, intervals),
                ),
            ),
        ),
        Section(
            "derived",
            "Derived quantities",
            paragraphs=() if r.model.derived else ("This model defines no derived quantities.",),
            tables=(
                Table(
                    (
                        "quantity",
                        "value",
                        "std. error",
                        f"lower {pct}",
                        f"upper {pct}",
                        "unit",
                        "range",
                    ),
                    _derived_rows(r, level),
                ),
            )
            if r.model.derived
            else (),
        ),
        Section("fit", "Goodness of fit", tables=(Table(("statistic", "value"), _fit_rows(r)),)),
        _diagnostics_section(r),
    ]
    if comparison is not None:
        sections.append(_comparison_section(comparison))
    sections.append(_figure_section(r, level, figure))
    sections += _tail(r, level, _extrapolated(r, level), intervals)
    return Content(f"Fit report: {r.model.name}", tuple(sections))


def global_content(
    g: GlobalResult, *, level: float = 0.95, figure: bool = True, comparison: Any = None
) -> Content:
    """The facts of a global fit's report (parameters per group, shared ones marked)."""
    level = _check_level(level)
    pct = _pct(level)
    design = [
        f"Groups by {', '.join(g.by)}: {', '.join(g.labels)}.",
        f"Shared by all groups: {', '.join(g.shared) or 'none'}. "
        f"Estimated per group: {', '.join(g.per_group) or 'none'}.",
    ]
    if g.constants:
        design.append(f"Taken from the data, per group: {', '.join(g.constants)}.")
    if g.fixed:
        design.append(f"Held fixed: {', '.join(g.fixed)}.")
    model = _model_section(g.model)
    model = Section(model.key, model.title, (*model.paragraphs, *design), model.tables)
    data_rows = tuple(
        (lab, len(gf.x), float(np.min(gf.x)), float(np.max(gf.x)))
        for lab, gf in zip(g.labels, g.groups, strict=True)
    )
    frame = g.to_frame(level)
    prow = tuple(
        (
            str(row["group"]),
            str(row["parameter"]),
            str(row["scope"]),
            float(row["value"]),
            None if math.isnan(float(row["stderr"])) else float(row["stderr"]),
            None if math.isnan(float(row["ci_low"])) else float(row["ci_low"]),
            None if math.isnan(float(row["ci_high"])) else float(row["ci_high"]),
        )
        for _, row in frame.iterrows()
    )
    drows: list[tuple[Cell, ...]] = []
    cautions: list[str] = []
    for lab, gf in zip(g.labels, g.groups, strict=True):
        drows += [(lab, *row) for row in _derived_rows(gf, level)]
        cautions += [f"{lab}: {c}" for c in _extrapolated(gf, level)]
    findings = [_finding(d) for d in g.diagnostics]
    sections = [
        model,
        Section(
            "data",
            "Data",
            tables=(Table(("group", "points used", "x from", "x to"), data_rows),),
        ),
        Section(
            "parameters",
            "Parameters",
            paragraphs=(_outcome(g.success, g.code, g.message),),
            tables=(
                Table(
                    (
                        "group",
                        "parameter",
                        "scope",
                        "value",
                        "std. error",
                        f"lower {pct}",
                        f"upper {pct}",
                    ),
                    prow,
                ),
            ),
        ),
        Section(
            "derived",
            "Derived quantities",
            paragraphs=() if g.model.derived else ("This model defines no derived quantities.",),
            tables=(
                Table(
                    (
                        "group",
                        "quantity",
                        "value",
                        "std. error",
                        f"lower {pct}",
                        f"upper {pct}",
                        "unit",
                        "range",
                    ),
                    tuple(drows),
                ),
            )
            if g.model.derived
            else (),
        ),
        Section(
            "fit",
            "Goodness of fit (all groups together)",
            tables=(Table(("statistic", "value"), _fit_rows(g)),),
        ),
        Section(
            "diagnostics",
            "Diagnostics",
            paragraphs=(
                "Findings of the joint fit:" if findings else "The joint fit raised no findings.",
            ),
            items=tuple(findings),
        ),
    ]
    if comparison is not None:
        sections.append(_comparison_section(comparison))
    sections.append(_figure_section(g, level, figure))
    sections += _tail(g, level, cautions)
    return Content(f"Global fit report: {g.model.name}", tuple(sections))


def batch_content(b: BatchResult, *, figure: bool = True) -> Content:
    """The facts of a batch report: status counts, groups that need a look, per-group table."""
    level = b.level
    pct = _pct(level)
    c = b.counts
    names = [n for n in b.model.param_names if n not in b.parameters.fixed]
    fitted = [i for i, s in enumerate(b.statuses) if s != "failed"]
    srows = []
    for n in names:
        j = b.model.param_names.index(n)
        v = b.value_array[fitted, j]
        v = v[np.isfinite(v)]
        if v.size:
            srows.append((n, int(v.size), float(np.median(v)), float(v.min()), float(v.max())))
    bad = [i for i, s in enumerate(b.statuses) if s != "ok"]
    attention = tuple((b.labels[i], b.statuses[i], b.reasons[i]) for i in bad)
    shown = list(range(min(len(b), MAX_GROUP_ROWS)))
    cols: list[str] = ["group", "status", "n"]
    for n in names:
        cols += [n, f"{n} std. error", f"{n} lower {pct}", f"{n} upper {pct}"]
    grows = []
    for i in shown:
        row: list[Cell] = [b.labels[i], b.statuses[i], int(b.n_used[i])]
        for n in names:
            j = b.model.param_names.index(n)
            row += [
                _finite(b.value_array[i, j]),
                _finite(b.stderr_array[i, j]),
                _finite(b.lower_array[i, j]),
                _finite(b.upper_array[i, j]),
            ]
        grows.append(tuple(row))
    dcols = ["group", "quantity", "value", "std. error", f"lower {pct}", f"upper {pct}"]
    drows = [
        (b.labels[i], q, *(_finite(b.derived_array[i, k, t]) for t in range(4)))
        for i in shown
        for k, q in enumerate(b.derived_names)
    ]
    more = (
        (f"The first {MAX_GROUP_ROWS} of {len(b)} groups; the whole table is BatchResult.table.",)
        if len(b) > MAX_GROUP_ROWS
        else ()
    )
    sections = [
        _model_section(b.model),
        Section(
            "groups",
            "Groups",
            paragraphs=(
                f"{len(b)} groups by {', '.join(b.by)}: {c['ok']} ok, {c['flagged']} flagged, "
                f"{c['failed']} failed.",
            ),
            tables=(
                Table(
                    ("parameter", "groups fitted", "median", "smallest", "largest"),
                    tuple(srows),
                    caption="Parameters over the fitted groups",
                ),
            ),
        ),
        Section(
            "attention",
            "Groups that need a look",
            paragraphs=(
                (
                    "Failed groups were not fitted; flagged groups were fitted with a finding "
                    "that needs a person.",
                )
                if bad
                else ("Every group was fitted with nothing to report.",)
            ),
            tables=(Table(("group", "status", "reason"), attention),) if bad else (),
        ),
        Section(
            "parameters",
            "Parameters by group",
            paragraphs=more,
            tables=(Table(tuple(cols), tuple(grows)),),
        ),
        Section(
            "derived",
            "Derived quantities by group",
            paragraphs=() if b.derived_names else ("This model defines no derived quantities.",),
            tables=(Table(tuple(dcols), tuple(drows)),) if b.derived_names else (),
        ),
        _figure_section(b, level, figure),
        *_tail(b, level, []),
    ]
    return Content(f"Batch fit report: {b.model.name}", tuple(sections))


def _finite(v: Any) -> float | None:
    f = float(v)
    return f if math.isfinite(f) else None


def content_for(
    obj: Any,
    *,
    level: float = 0.95,
    figure: bool = True,
    comparison: Any = None,
    intervals: str = "wald",
) -> Content:
    """The facts of the report of a FitResult, GlobalResult or BatchResult."""
    if isinstance(obj, FitResult):
        return fit_content(
            obj, level=level, figure=figure, comparison=comparison, intervals=intervals
        )
    if intervals != "wald":
        raise ParameterError(
            "profile intervals are reported for single fits only; use intervals='wald' here, "
            "or report a group's fit (result[group].report(intervals='profile'))."
        )
    if isinstance(obj, GlobalResult):
        return global_content(obj, level=level, figure=figure, comparison=comparison)
    if isinstance(obj, BatchResult):
        if comparison is not None:
            raise ParameterError("a batch report takes no comparison= (compare single fits).")
        return batch_content(obj, figure=figure)
    raise ParameterError(
        f"a report is made from a FitResult, GlobalResult or BatchResult, got {type(obj).__name__}."
    )
