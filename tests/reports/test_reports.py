"""Reports and tables (curvewright.reports) on fits of published reference data.

Sources: R's Puromycin data (tests/data/stats/SOURCES.md) for Michaelis-Menten fits, single,
global and batch; NIST StRD Misra1a (tests/data/nist_nonlinear/SOURCES.md), whose certified
values the report must show to its six digits. Every number a report shows is checked against
the result's own value (the HTML keeps the full value in ``data-value``; the shown text is that
value to six significant digits).
"""

from __future__ import annotations

import html
import math
import sys
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

import curvewright as cw
from curvewright import catalog
from curvewright.errors import DependencyError, OutputError, ParameterError
from curvewright.reports import Report, figure_to_svg
from nist_nonlinear import read

#: Relative precision of a number read back from an .xlsx file (15 significant digits).
XLSX = 1e-14
DATA = Path(__file__).resolve().parents[1] / "data"
FIT_SECTIONS = [
    "model",
    "data",
    "parameters",
    "derived",
    "fit",
    "diagnostics",
    "figure",
    "methods",
    "software",
    "caution",
]


# ------------------------------------------------------------------------- helpers
class _Page(HTMLParser):
    """Sections of a report page: their tables (cells as text and data-value) and text."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: dict[str, dict[str, Any]] = {}
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self._sec: str | None = None
        self._row: list[tuple[str, str | None]] | None = None
        self._cell: list[str] | None = None
        self._value: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "section":
            self._sec = str(a["data-section"])
            self.sections[self._sec] = {"tables": [], "text": []}
        elif tag == "table" and self._sec:
            self.sections[self._sec]["tables"].append([])
        elif tag == "tr" and self._sec:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell, self._value = [], a.get("data-value")

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append(("".join(self._cell), self._value))
            self._cell = None
        elif tag == "tr" and self._row is not None and self._sec:
            self.sections[self._sec]["tables"][-1].append(self._row)
            self._row = None
        elif tag == "section":
            self._sec = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)
        elif self._sec:
            self.sections[self._sec]["text"].append(data)


def _page(text: str) -> _Page:
    p = _Page()
    p.feed(text)
    return p


def _rows(page: _Page, section: str, table: int = 0) -> dict[str, list[tuple[str, str | None]]]:
    """A table's body rows by their first cell."""
    t = page.sections[section]["tables"][table]
    return {row[0][0]: row[1:] for row in t[1:]}


def _same(cell: tuple[str, str | None], value: float) -> None:
    # The full value is the result's, bit for bit; the text is it to six significant digits.
    text, full = cell
    assert full is not None and float(full) == value
    assert text == f"{value:.6g}"


def _puromycin(state: str = "treated") -> tuple[np.ndarray, np.ndarray]:
    d = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    d = d[d["state"] == state]
    return d["conc"].to_numpy(float), d["rate"].to_numpy(float)


@pytest.fixture(scope="module")
def mm() -> cw.FitResult:
    # R's Puromycin, treated cells: Bates & Watts (1988) give Vmax = 212.7, Km = 0.06412
    # (from memory; tests/test_catalog.py checks the fit against them).
    x, y = _puromycin()
    return cw.fit(catalog()["michaelis_menten"], x, y)


def _no_network(text: str) -> None:
    low = text.lower()
    assert "<script" not in low
    assert "<link" not in low and "<iframe" not in low and "@import" not in low
    page = _page(text)
    for tag, attrs in page.tags:
        for k in ("src", "href", "xlink:href", "action"):
            v = attrs.get(k)
            assert v is None or not v.lower().startswith(("http:", "https:", "//")), (tag, k, v)
    assert "url(http" not in low


# ------------------------------------------------------------------------- single fit
def test_html_report_numbers_are_the_results_own(mm: cw.FitResult) -> None:
    rep = mm.report()
    assert isinstance(rep, Report) and isinstance(rep, str) and rep.kind == "html"
    page = _page(rep)
    assert list(page.sections) == FIT_SECTIONS
    params = _rows(page, "parameters")
    ci = mm.ci(0.95)
    for name in ("Vmax", "Km"):
        value, se, lo, hi = params[name][:4]
        _same(value, mm.values[name])
        _same(se, mm.stderr[name])
        _same(lo, float(ci.loc[name, "lower"]))
        _same(hi, float(ci.loc[name, "upper"]))
    derived = _rows(page, "derived")
    d = mm.derived(0.95)
    for col, cell in zip(
        ["value", "stderr", "lower", "upper"], derived["efficiency"], strict=False
    ):
        _same(cell, float(d.loc["efficiency", col]))
    fit = _rows(page, "fit")
    _same(fit["sum of squared residuals"][0], mm.ssr)
    _same(fit["residual standard deviation"][0], mm.sigma_resid)
    _same(fit["R²"][0], mm.r2)
    _same(fit["AICc"][0], mm.aicc)
    _same(fit["BIC"][0], mm.bic)
    assert fit["degrees of freedom"][0][0] == str(mm.dof) == "10"
    data = _rows(page, "data")
    assert data["points used"][0][0] == "12"
    _same(data["x from"][0], 0.02)
    _same(data["x to"][0], 1.1)
    # The residual tests are the result's own (stats.diagnostics).
    tests = _rows(page, "diagnostics")
    diag = mm.residual_diagnostics().tests.set_index("test")
    for name, cells in tests.items():
        _same(cells[0], float(diag.loc[name, "statistic"]))
        _same(cells[1], float(diag.loc[name, "p_value"]))
        assert cells[2][0]  # what the test asks, in words
    _no_network(rep)
    assert cw.CAUTION in "".join(page.sections["caution"]["text"])
    assert rep._repr_html_() is not None and "<html" not in rep._repr_html_()


def test_nist_certified_values_shown_to_six_digits() -> None:
    # NIST StRD Misra1a: y = b1*(1-exp(-b2*x)), certified b1 = 2.3894212918E+02,
    # b2 = 5.5015643181E-04 (tests/data/nist_nonlinear/Misra1a.dat); that is the catalog's
    # exponential rise with the baseline held at 0 (amplitude = b1, k = b2).
    p = read("Misra1a")
    m = catalog()["exponential_rise"]
    r = cw.fit(m, p.x, p.y, start={"amplitude": 500.0, "k": 1e-4}, fixed={"baseline": 0.0})
    page = _page(r.report(figure=False))
    params = _rows(page, "parameters")
    assert params["amplitude"][0][0] == f"{p.certified[0]:.6g}"
    assert params["k"][0][0] == f"{p.certified[1]:.6g}"
    assert params["amplitude"][1][0] == f"{p.certified_sd[0]:.6g}"
    assert params["k"][1][0] == f"{p.certified_sd[1]:.6g}"
    assert "held fixed" in params["baseline"][-1][0]
    assert params["baseline"][1] == ("", None)  # no standard error for a fixed parameter
    # The half-life ln 2 / b2 = 1260 lies beyond the largest x (790.4): flagged, twice.
    derived = _rows(page, "derived")
    assert r.derived().loc["half_life", "in_data_range"] is False
    assert derived["half_life"][-1][0].startswith("EXTRAPOLATED")
    caution = "".join(page.sections["caution"]["text"])
    assert "half_life" in caution and "extrapolated" in caution
    assert "within the data" not in derived["half_life"][-1][0]
    # ... and the fit's own extrapolation finding is listed with the diagnostics.
    codes = [d.code for d in r.diagnostics]
    assert "extrapolation" in codes
    found = [d.text for d in r.diagnostics if d.code == "extrapolation"]
    listed = "".join(page.sections["diagnostics"]["text"])
    assert all(t in listed for t in found)


def test_markdown_report_tables_hold_the_same_numbers(mm: cw.FitResult) -> None:
    md = mm.report("markdown")
    assert md.kind == "markdown" and md._repr_markdown_() == str(md)
    for title in ("## Parameters", "## Derived quantities", "## Goodness of fit", "## Methods"):
        assert title in md
    rows = {
        cells[0]: cells[1:]
        for line in md.splitlines()
        if line.startswith("| ") and (cells := [c.strip() for c in line.strip("|").split("|")])
    }
    assert rows["Vmax"][:2] == [f"{mm.values['Vmax']:.6g}", f"{mm.stderr['Vmax']:.6g}"]
    assert rows["Km"][:2] == [f"{mm.values['Km']:.6g}", f"{mm.stderr['Km']:.6g}"]
    assert rows["AICc"] == [f"{mm.aicc:.6g}"]
    assert cw.CAUTION in md
    assert "<script" not in md and "http://" not in md and "https://" not in md


def test_methods_paragraph_says_what_was_done(mm: cw.FitResult) -> None:
    text = mm.methods()
    assert "y = Vmax*x/(Km + x)" in text  # the model's equation
    assert "weighted equally" in text  # weighting
    assert "sum of squared residuals was minimised" in text  # loss
    assert "Levenberg-Marquardt" in text and "MINPACK" in text  # method, from the attempts
    assert "Wald intervals" in text and "Student t quantile on 10 degrees" in text
    assert "delta method" in text  # the derived quantity's error
    assert f"curvewright {cw.__version__}" in text
    import scipy

    assert f"SciPy {scipy.__version__}" in text
    # the report carries the same paragraph
    assert text in "".join(_page(mm.report(figure=False)).sections["methods"]["text"])


def test_methods_follow_the_fit_options() -> None:
    # A robust trust-region fit with relative weights: the paragraph must say so.
    x, y = _puromycin()
    r = cw.fit(catalog()["michaelis_menten"], x, y, weights="relative", loss="huber")
    assert r.method == "trust_region"
    text = r.methods(level=0.9)
    assert "1/y^2" in text and "Huber loss" in text and "trust-region reflective" in text
    assert "approximate" in text  # standard errors under a robust loss
    assert "90% confidence intervals" in text
    assert "Levenberg-Marquardt" not in text


def test_comparison_is_included(mm: cw.FitResult) -> None:
    # Michaelis-Menten is the Hill equation with n_h = 1 (stats/compare.py, a known nesting).
    x, y = _puromycin()
    hill = cw.fit(catalog()["hill"], x, y)
    comp = cw.compare(mm, hill)
    assert len(comp.f_tests) == 1
    page = _page(mm.report(comparison=comp, figure=False))
    assert "comparison" in page.sections
    rows = _rows(page, "comparison")
    for label, row in comp.table.iterrows():
        cells = rows[str(label)]
        _same(cells[list(comp.table.columns).index("aicc")], float(row["aicc"]))
        _same(cells[list(comp.table.columns).index("ssr")], float(row["ssr"]))
    assert comp.recommendation in "".join(page.sections["comparison"]["text"])
    with pytest.raises(ParameterError, match="Comparison"):
        mm.report(comparison="not one")


# ------------------------------------------------------------------------- figure
def _figure() -> Figure:
    fig = Figure(figsize=(3, 2))
    ax = fig.add_subplot()
    x, y = _puromycin()
    ax.plot(x, y, "o")
    ax.set_xlabel("substrate")
    return fig


def test_svg_is_inline_and_deterministic() -> None:
    a, b = figure_to_svg(_figure()), figure_to_svg(_figure())
    assert a == b
    assert a.startswith("<svg") and a.endswith("</svg>")
    assert "<?xml" not in a and "DOCTYPE" not in a and "<dc:date>" not in a
    assert "<script" not in a


def test_report_embeds_the_figure_from_figures(mm: cw.FitResult) -> None:
    # The report's figure is the figures package's own drawing of the fit, at the report's level.
    from curvewright.figures import figure_for

    rep = mm.report(level=0.9)
    section = rep[rep.index('data-section="figure"') :].split("</section>")[0]
    assert figure_to_svg(figure_for(mm, level=0.9, bands="confidence")) in section
    # A different level draws a different band, so the level really reaches the figure.
    assert figure_to_svg(figure_for(mm, level=0.5, bands="confidence")) not in section
    _no_network(
        rep.replace('xmlns="http://www.w3.org/2000/svg"', "").replace(
            'xmlns:xlink="http://www.w3.org/1999/xlink"', ""
        )
    )
    md = mm.report("markdown")
    assert "data:image/svg+xml;base64," in md


def test_a_figure_that_cannot_be_drawn_is_said_so(
    mm: cw.FitResult, monkeypatch: pytest.MonkeyPatch
) -> None:
    import curvewright.reports.figure as report_figure

    def refuses(obj: Any, **kwargs: Any) -> Figure:
        raise cw.DataError("nothing to draw")

    monkeypatch.setattr(report_figure, "figure_for", refuses)
    text = "".join(_page(mm.report()).sections["figure"]["text"])
    assert "No figure could be drawn: nothing to draw" in text


# ------------------------------------------------------------------------- files
def test_excel_round_trip(mm: cw.FitResult, tmp_path: Path) -> None:
    path = mm.to_excel(tmp_path / "fit.xlsx")
    sheets = pd.read_excel(path, sheet_name=None)
    assert list(sheets) == ["parameters", "derived", "diagnostics", "data"]
    # An .xlsx cell keeps 15 significant digits (openpyxl writes them so; Excel's own limit,
    # common practice), so numbers come back to 1e-14, not to the last bit.
    p = sheets["parameters"].set_index("parameter")
    assert p.loc["Vmax", "value"] == pytest.approx(mm.values["Vmax"], rel=XLSX)
    assert p.loc["Km", "stderr"] == pytest.approx(mm.stderr["Km"], rel=XLSX)
    assert p.loc["Km", "ci_high"] == pytest.approx(float(mm.ci().loc["Km", "upper"]), rel=XLSX)
    d = sheets["derived"].set_index("name")
    want = float(mm.derived().loc["efficiency", "value"])
    assert d.loc["efficiency", "value"] == pytest.approx(want, rel=XLSX)
    data = sheets["data"]
    np.testing.assert_array_equal(data["y"].to_numpy(), mm.y)
    np.testing.assert_allclose(data["fitted"].to_numpy(), mm.fitted, rtol=XLSX)
    tests = sheets["diagnostics"]
    assert set(tests["kind"]) == {"test"}
    assert len(tests) == 3
    import openpyxl

    assert openpyxl.load_workbook(path).properties.description == cw.CAUTION


def test_missing_openpyxl_is_our_error(
    mm: cw.FitResult, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setitem(sys.modules, "openpyxl", None)
    with pytest.raises(DependencyError, match=r'pip install "curvewright\[excel\]"'):
        mm.to_excel(tmp_path / "fit.xlsx")
    assert not (tmp_path / "fit.xlsx").exists()


def test_bad_paths_are_our_error(mm: cw.FitResult, tmp_path: Path) -> None:
    with pytest.raises(OutputError, match="does not exist"):
        mm.to_excel(tmp_path / "no" / "fit.xlsx")
    with pytest.raises(OutputError, match=r"\.xlsx"):
        mm.to_excel(tmp_path / "fit.csv")
    with pytest.raises(OutputError, match="does not exist"):
        mm.report(path=tmp_path / "no" / "report.html")
    with pytest.raises(OutputError, match="is a folder"):
        mm.report(path=tmp_path)
    rep = mm.report("markdown", path=tmp_path / "report.md", figure=False)
    assert (tmp_path / "report.md").read_text(encoding="utf-8") == rep
    assert rep.path == tmp_path / "report.md"
    with pytest.raises(ParameterError, match="format"):
        mm.report("pdf")  # type: ignore[arg-type]
    with pytest.raises(ParameterError, match="level"):
        mm.report(level=95)


# ------------------------------------------------------------------------- global, batch
def _long() -> pd.DataFrame:
    d = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    return d.rename(columns={"conc": "x", "rate": "y"})


def test_global_report_and_tables(tmp_path: Path) -> None:
    # Both Puromycin states with Km shared (Bates & Watts' treatment comparison asks this).
    g = cw.fit_global("michaelis_menten", data=_long(), x="x", y="y", by="state", shared=["Km"])
    page = _page(g.report(figure=False))
    assert list(page.sections) == FIT_SECTIONS
    frame = g.to_frame()
    table = page.sections["parameters"]["tables"][0]
    assert len(table) - 1 == len(frame)
    for row, (_, want) in zip(table[1:], frame.iterrows(), strict=True):
        assert row[0][0] == want["group"] and row[1][0] == want["parameter"]
        _same(row[3], float(want["value"]))
        _same(row[4], float(want["stderr"]))
    assert "Km" in g.methods() and "shared by all groups" in g.methods()
    sheets = pd.read_excel(g.to_excel(tmp_path / "global.xlsx"), sheet_name=None)
    assert list(sheets) == ["parameters", "derived", "diagnostics", "data"]
    np.testing.assert_allclose(sheets["parameters"]["value"], frame["value"], rtol=XLSX)


def test_batch_report_lists_failed_groups_with_reasons(tmp_path: Path) -> None:
    # The two Puromycin states, plus a flat group (no curve to find) and one of two points.
    d = _long()
    flat = pd.DataFrame({"state": "flat", "x": d["x"][:8].to_numpy(), "y": 100.0})
    tiny = pd.DataFrame({"state": "tiny", "x": [0.02, 0.06], "y": [76.0, 97.0]})
    b = cw.fit_groups("michaelis_menten", data=pd.concat([d, flat, tiny]), x="x", y="y", by="state")
    not_ok = b.reason
    assert "tiny" in not_ok.index
    rep = b.report(figure=False)
    page = _page(rep)
    for key in ("model", "groups", "attention", "parameters", "methods", "software", "caution"):
        assert key in page.sections, key
    attention = _rows(page, "attention")
    assert set(attention) == set(not_ok.index)
    for group, reason in not_ok.items():
        assert attention[str(group)][0][0] == b.status[group]
        assert attention[str(group)][1][0] == reason
    params = _rows(page, "parameters")
    j = b.model.param_names.index("Vmax")
    i = b.index_of("treated")
    _same(params["treated"][2 + 0], float(b.value_array[i, j]))
    assert b.to_frame().equals(b.table)
    md = b.report("markdown", figure=False)
    for group, reason in not_ok.items():
        assert f"| {group} | {b.status[group]} | {reason} |" in md.replace("\\|", "|")
    sheets = pd.read_excel(b.to_excel(tmp_path / "batch.xlsx"), sheet_name=None)
    assert list(sheets) == ["parameters", "derived", "diagnostics", "data"]
    diag = sheets["diagnostics"].set_index("group")
    for group, reason in not_ok.items():
        assert diag.loc[group, "reason"] == reason
    assert "fitted separately to each of 4 groups" in b.methods()
    assert cw.CAUTION in html.unescape(rep)


def test_every_report_method_of_the_results_finds_its_function() -> None:
    # The results reach the reports through a registry (they sit below them); every name they
    # ask for must be registered once curvewright is imported.
    import ast

    from curvewright import result

    src = Path(cw.__file__).parent
    asked = {
        node.args[0].value
        for name in ("result.py", "global_result.py", "batch_result.py")
        for node in ast.walk(ast.parse((src / name).read_text(encoding="utf-8")))
        if isinstance(node, ast.Call)
        and isinstance(node.func, ast.Name)
        and node.func.id == "report_function"
        and isinstance(node.args[0], ast.Constant)
    }
    assert asked == {"report", "methods", "to_excel"}
    assert asked <= set(result._REGISTRY["curvewright.reports"])


def test_a_group_of_a_global_fit_says_so_in_its_methods() -> None:
    g = cw.fit_global("michaelis_menten", data=_long(), x="x", y="y", by="state", shared=["Km"])
    text = g["treated"].methods()
    assert "one group (treated) of a joint fit" in text
    assert f"Student t quantile on {g.dof} degrees" in text
    assert "group (treated)" not in cw.fit("michaelis_menten", *_puromycin()).methods()


def test_a_python_function_and_an_unfinished_fit_are_reported_as_they_are() -> None:
    # The Michaelis-Menten curve as a Python callable on Puromycin (treated): no formula, so
    # the report says so and the methods name finite differences.
    def rate(x: np.ndarray, Vmax: float, Km: float) -> np.ndarray:
        return Vmax * x / (Km + x)

    x, y = _puromycin()
    r = cw.fit(rate, x, y, start={"Vmax": 200.0, "Km": 0.1})
    page = _page(r.report(figure=False))
    assert "A Python function" in "".join(page.sections["model"]["text"])
    assert "finite differences" in r.methods()
    _same(_rows(page, "parameters")["Vmax"][0], r.values["Vmax"])
    # Stopped after a few evaluations: the report says it did not converge.
    cut = cw.fit("michaelis_menten", x, y, start={"Vmax": 1.0, "Km": 5.0}, max_evaluations=3)
    assert not cut.success
    text = "".join(_page(cut.report(figure=False)).sections["parameters"]["text"])
    assert "not converged" in text
    with pytest.raises(ParameterError, match="level"):
        cut.methods(level=95)


def test_profile_intervals_when_asked(mm: cw.FitResult) -> None:
    # Profile-likelihood intervals (stats.uncertainty.profile_intervals, checked there against
    # lmfit's conf_interval) in place of the Wald ones; the methods say which.
    page = _page(mm.report(intervals="profile", figure=False))
    prof = mm.profile_ci(level=0.95)
    params = _rows(page, "parameters")
    for name in ("Vmax", "Km"):
        _same(params[name][2], float(prof.loc[name, "lower"]))
        _same(params[name][3], float(prof.loc[name, "upper"]))
        _same(params[name][1], mm.stderr[name])
    # Km's profile interval is asymmetric about the estimate (the curvature Wald ignores).
    lo, hi = float(prof.loc["Km", "lower"]), float(prof.loc["Km", "upper"])
    assert not math.isclose(mm.values["Km"] - lo, hi - mm.values["Km"], rel_tol=1e-3)
    text = "".join(page.sections["methods"]["text"])
    assert "profile-likelihood intervals" in text and "Wald" not in text
    assert "profile-likelihood" in mm.methods(intervals="profile")
    g = cw.fit_global("michaelis_menten", data=_long(), x="x", y="y", by="state", shared=["Km"])
    with pytest.raises(ParameterError, match="single fits"):
        cw.reports.report(g, intervals="profile")
    with pytest.raises(ParameterError, match="intervals"):
        mm.report(intervals="bootstrap")  # type: ignore[arg-type]
