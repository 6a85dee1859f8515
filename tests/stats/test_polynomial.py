"""Polynomial regression statistics checked against statsmodels, NIST StRD and simulation."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm  # type: ignore[import-untyped]  # statsmodels ships no stubs
import statsmodels.formula.api as smf  # type: ignore[import-untyped]
from numpy.typing import NDArray
from statsmodels.stats.anova import anova_lm  # type: ignore[import-untyped]
from statsmodels.tools import eval_measures  # type: ignore[import-untyped]

from curvewright.errors import DataError, ModelError, ParameterError
from curvewright.linear import polynomial_design
from curvewright.stats import aic, aicc, bic, polynomial_fit, select_degree

DATA = Path(__file__).resolve().parent.parent / "data"
EXTENDED = bool(np.finfo(np.longdouble).eps < np.finfo(np.float64).eps)


def cars() -> pd.DataFrame:
    # R's `cars` data (open dataset; see tests/data/r_datasets/SOURCES.md).
    return pd.read_csv(DATA / "r_datasets" / "cars.csv")


def formula(degree: int) -> str:
    terms = ["speed"] + [f"I(speed**{j})" for j in range(2, degree + 1)]
    return "dist ~ " + (" + ".join(terms) if degree else "1")


def cell(frame: pd.DataFrame, row: object, column: str) -> float:
    """One value of a table as a float (keeps mypy's view of pandas scalars simple)."""
    return float(np.asarray(frame[column], dtype=np.float64)[list(frame.index).index(row)])


def lre(estimate: object, certified: object) -> float:
    """Smallest log relative error, capped at 15 (common practice for NIST StRD)."""
    est = np.atleast_1d(np.asarray(estimate, dtype=np.float64))
    cert = np.atleast_1d(np.asarray(certified, dtype=np.float64))
    rel = np.abs(est - cert) / np.abs(cert)
    with np.errstate(divide="ignore"):
        digits = np.where(rel > 0.0, -np.log10(np.where(rel > 0.0, rel, 1.0)), 15.0)
    return float(np.min(np.minimum(digits, 15.0)))


# ---------------------------------------------------------------------------------------------
# one polynomial fit


@pytest.mark.parametrize("degree", [1, 2, 3, 4])
def test_polynomial_fit_matches_statsmodels_ols_on_cars(degree: int) -> None:
    df = cars()
    ref = smf.ols(formula(degree), df).fit()  # statsmodels OLS reference
    fit = polynomial_fit(df["speed"], df["dist"], degree)
    tab = fit.coef_table
    assert list(tab.index) == [f"c{j}" for j in range(degree + 1)]
    np.testing.assert_allclose(tab["estimate"], ref.params, rtol=1e-8)
    np.testing.assert_allclose(tab["stderr"], ref.bse, rtol=1e-8)
    np.testing.assert_allclose(tab["t"], ref.tvalues, rtol=1e-8)
    np.testing.assert_allclose(tab["p"], ref.pvalues, rtol=1e-7)
    assert fit.f_overall == pytest.approx(ref.fvalue, rel=1e-9)
    assert fit.f_overall_p == pytest.approx(ref.f_pvalue, rel=1e-7)
    assert fit.r2 == pytest.approx(ref.rsquared, rel=1e-12)
    assert fit.r2_adj == pytest.approx(ref.rsquared_adj, rel=1e-12)
    assert fit.df_model == int(ref.df_model) and fit.df_resid == int(ref.df_resid)
    # Information criteria: ours drop the constant n (1 + ln 2 pi) and count the variance
    # (K = n_coef + 1); statsmodels' eval_measures takes K explicitly, so the two agree up to
    # that constant (statsmodels.tools.eval_measures reference).
    n, k = 50, degree + 2
    const = n * (1.0 + math.log(2.0 * math.pi))
    assert fit.aicc == pytest.approx(eval_measures.aicc(ref.llf, n, k) - const, rel=1e-12)
    assert fit.bic == pytest.approx(eval_measures.bic(ref.llf, n, k) - const, rel=1e-12)
    # ...and statsmodels' own aic/bic count only the coefficients.
    assert aic(fit.ssr, n, k) == pytest.approx(ref.aic - const + 2.0, rel=1e-12)
    assert fit.bic == pytest.approx(ref.bic - const + math.log(n), rel=1e-12)


def test_weighted_polynomial_fit_matches_statsmodels_wls() -> None:
    df = cars()
    x = df["speed"].to_numpy(float)
    y = df["dist"].to_numpy(float)
    w = 1.0 / (1.0 + 0.1 * x) ** 2  # an invented variance model, for the comparison only
    ref = sm.WLS(y, polynomial_design(x, 2), weights=w).fit()  # statsmodels WLS reference
    fit = polynomial_fit(x, y, 2, weights=w)
    np.testing.assert_allclose(fit.coef_table["estimate"], ref.params, rtol=1e-8)
    np.testing.assert_allclose(fit.coef_table["stderr"], ref.bse, rtol=1e-8)
    np.testing.assert_allclose(fit.coef_table["p"], ref.pvalues, rtol=1e-7)
    assert fit.f_overall == pytest.approx(ref.fvalue, rel=1e-9)
    assert fit.f_overall_p == pytest.approx(ref.f_pvalue, rel=1e-7)
    assert fit.r2 == pytest.approx(ref.rsquared, rel=1e-12)
    assert fit.r2_adj == pytest.approx(ref.rsquared_adj, rel=1e-12)


def _pontius() -> tuple[NDArray[np.float64], NDArray[np.float64], dict[str, float]]:
    """Pontius data and certified values, read from the NIST StRD file (format in its header)."""
    text = (DATA / "nist_linear" / "Pontius.dat").read_text().replace("\r", "")
    lines = text.split("\n")
    rows = np.array([[float(v) for v in line.split()] for line in lines[60:100]])
    cert: dict[str, float] = {}
    for line in lines[30:47]:
        m = re.match(r"\s*B(\d)\s+(\S+)\s+(\S+)\s*$", line)
        if m:
            cert[f"B{m.group(1)}"], cert[f"SD{m.group(1)}"] = float(m.group(2)), float(m.group(3))
    r2 = re.search(r"R-Squared\s+(\S+)", text)
    reg = re.search(r"Regression\s+(\d+)\s+(\S+)\s+(\S+)\s+(\S+)", text)
    res = re.search(r"\nResidual\s+(\d+)\s+(\S+)\s+(\S+)", text)
    assert r2 and reg and res
    cert.update(
        r2=float(r2.group(1)),
        df_model=float(reg.group(1)),
        F=float(reg.group(4)),
        df_resid=float(res.group(1)),
        ssr=float(res.group(2)),
    )
    return rows[:, 1], rows[:, 0], cert


def test_pontius_against_nist_certified_values() -> None:
    """NIST StRD Pontius (quadratic): certified estimates, SDs, R-squared and ANOVA F.

    Achieved on x86-64 Linux: estimates 13.5 digits, SDs 13.8, R-squared 15, F 13.
    """
    x, y, cert = _pontius()
    assert x.size == 40
    fit = polynomial_fit(x, y, 2)
    need_coef, need_sd = (12.0, 10.0) if EXTENDED else (9.0, 6.0)
    tab = fit.coef_table
    assert lre(tab["estimate"], [cert["B0"], cert["B1"], cert["B2"]]) >= need_coef  # NIST
    assert lre(tab["stderr"], [cert["SD0"], cert["SD1"], cert["SD2"]]) >= need_sd  # NIST
    assert lre(fit.r2, cert["r2"]) >= need_sd  # NIST certified R-squared
    assert lre(fit.f_overall, cert["F"]) >= need_sd  # NIST certified ANOVA F statistic
    assert lre(fit.ssr, cert["ssr"]) >= need_sd  # NIST certified residual sum of squares
    assert fit.df_model == cert["df_model"] and fit.df_resid == cert["df_resid"]


def test_pontius_sequential_anova_against_statsmodels() -> None:
    x, y, _ = _pontius()
    df = pd.DataFrame({"x": x, "y": y})
    ref = anova_lm(smf.ols("y ~ x + I(x**2)", df).fit(), typ=1)  # statsmodels type-I ANOVA
    sel = select_degree(x, y, max_degree=2)
    np.testing.assert_allclose(sel.sequential_anova["sum_sq"], ref["sum_sq"], rtol=1e-8)
    np.testing.assert_allclose(sel.sequential_anova["F"].iloc[:2], ref["F"].iloc[:2], rtol=1e-7)


# ---------------------------------------------------------------------------------------------
# degree selection


def test_sequential_anova_matches_anova_lm_typ1() -> None:
    df = cars()
    largest = smf.ols(formula(4), df).fit()
    ref = anova_lm(largest, typ=1)  # statsmodels type-I (sequential) ANOVA reference
    sel = select_degree(df["speed"], df["dist"], max_degree=4)
    seq = sel.sequential_anova
    assert list(seq.index) == ["x^1", "x^2", "x^3", "x^4", "Residual"]
    np.testing.assert_allclose(seq["df"], ref["df"], rtol=0)
    np.testing.assert_allclose(seq["sum_sq"], ref["sum_sq"], rtol=1e-9)
    np.testing.assert_allclose(seq["mean_sq"], ref["mean_sq"], rtol=1e-9)
    np.testing.assert_allclose(seq["F"].iloc[:4], ref["F"].iloc[:4], rtol=1e-8)
    np.testing.assert_allclose(seq["p"].iloc[:4], ref["PR(>F)"].iloc[:4], rtol=1e-7)
    assert math.isnan(cell(seq, "Residual", "F"))


def test_pairwise_f_tests_match_anova_lm_on_each_pair() -> None:
    """Each row of .table is anova_lm(model[d-1], model[d]) (statsmodels reference).

    Pairs are compared one call at a time on purpose: anova_lm with several models in one call
    divides every F by the residual mean square of the LARGEST model, which is the sequential
    table's convention, not the pairwise test's. The second half of this test shows it.
    """
    df = cars()
    models = [smf.ols(formula(d), df).fit() for d in range(5)]
    sel = select_degree(df["speed"], df["dist"], max_degree=4)
    tab = sel.table
    assert list(tab.index) == [1, 2, 3, 4]
    assert list(tab.columns) == [
        "ssr", "df_resid", "F", "df_num", "df_den", "p", "aicc", "bic", "r2", "r2_adj",
    ]  # fmt: skip
    for d in range(1, 5):
        ref = anova_lm(models[d - 1], models[d])  # one pair per call
        assert cell(tab, d, "F") == pytest.approx(ref["F"].iloc[1], rel=1e-8)
        assert cell(tab, d, "p") == pytest.approx(ref["Pr(>F)"].iloc[1], rel=1e-7)
        assert cell(tab, d, "df_num") == ref["df_diff"].iloc[1]
        assert cell(tab, d, "df_den") == ref["df_resid"].iloc[1]
        assert cell(tab, d, "ssr") == pytest.approx(models[d].ssr, rel=1e-10)
        assert cell(tab, d, "r2") == pytest.approx(models[d].rsquared, rel=1e-12)
    many = anova_lm(*models)  # all five at once: largest model's residual mean square
    np.testing.assert_allclose(many["F"].iloc[1:], sel.sequential_anova["F"].iloc[:4], rtol=1e-8)
    assert not np.allclose(many["F"].iloc[1:4], tab["F"].iloc[:3], rtol=1e-3)


def _rule_from_statsmodels(x: NDArray[np.float64], y: NDArray[np.float64], kmax: int) -> int:
    """The stopping rule applied to statsmodels' pairwise anova_lm p values."""
    design = [polynomial_design(x, d) for d in range(kmax + 1)]
    models = [sm.OLS(y, X).fit() for X in design]
    for d in range(1, kmax + 1):
        p = anova_lm(models[d - 1], models[d])["Pr(>F)"].iloc[1]
        if not p < 0.05:
            return d - 1
    return kmax


@pytest.mark.parametrize("truth", ["line", "cubic", "noise", "cars"])
def test_suggested_degree_follows_the_stopping_rule(truth: str) -> None:
    rng = np.random.default_rng({"line": 1, "cubic": 2, "noise": 3, "cars": 0}[truth])
    if truth == "cars":
        x, y = cars()["speed"].to_numpy(float), cars()["dist"].to_numpy(float)
    else:
        x = np.linspace(-2.0, 3.0, 30)
        mean = {"line": 1.0 + 2.0 * x, "cubic": x**3 - x, "noise": np.zeros_like(x)}[truth]
        y = mean + rng.normal(0.0, 0.3, x.size)
    sel = select_degree(x, y, max_degree=4)
    assert sel.suggested == _rule_from_statsmodels(x, y, 4)  # statsmodels anova_lm pairs
    expected = {"line": 1, "cubic": 3, "noise": 0, "cars": 1}[truth]
    assert sel.suggested == expected  # what the simulated truth (or the data) should give
    assert f"degree {expected}" in sel.reasoning
    assert sel.suggested_fit is sel.fits[expected]
    if expected < 4:
        assert f"x^{expected + 1}: F = " in sel.reasoning and "not significant" in sel.reasoning


def test_every_term_significant_says_so() -> None:
    x = np.linspace(0.0, 4.0, 25)
    y = 1.0 + 2.0 * x + x**2 + 0.5 * x**3 + np.random.default_rng(5).normal(0.0, 0.05, 25)
    sel = select_degree(x, y, max_degree=3)
    assert sel.suggested == 3 == _rule_from_statsmodels(x, y, 3)
    assert "Every added term up to degree 3 is significant" in sel.reasoning


def test_rule_stops_early_and_points_at_later_significant_terms() -> None:
    # A cubic whose best straight line on [0, 4] is nearly flat: the slope test fails, so the
    # rule stops at degree 0, but x^3 is significant, and the reasoning must say so.
    x = np.linspace(0.0, 4.0, 25)
    y = 1.0 + x - 2.0 * x**2 + 0.5 * x**3 + np.random.default_rng(5).normal(0.0, 0.05, 25)
    sel = select_degree(x, y, max_degree=3)
    assert sel.suggested == 0 == _rule_from_statsmodels(x, y, 3)
    assert cell(sel.table, 1, "p") >= 0.05 and cell(sel.table, 3, "p") < 0.05
    assert "higher terms were significant again: x^2" in sel.reasoning
    assert "x^3 (p = " in sel.reasoning and "fit_for(degree)" in sel.reasoning
    assert "no trend at this level" not in sel.reasoning
    assert "AICc and BIC are both lowest at degree 3 instead" in sel.reasoning


def test_override_and_unknown_degree() -> None:
    df = cars()
    sel = select_degree(df["speed"], df["dist"], max_degree=3)
    assert set(sel.fits) == {0, 1, 2, 3}
    two = sel.fit_for(2)
    assert two.degree == 2 and two.coef_table.shape == (3, 4)
    with pytest.raises(ModelError, match=r"no fit of degree 7.*from 0 to 3"):
        sel.fit_for(7)
    with pytest.raises(TypeError):
        sel.fits[9] = two  # type: ignore[index]  # read-only mapping


# ---------------------------------------------------------------------------------------------
# bad input


def test_select_degree_bad_input() -> None:
    x = np.arange(6.0)
    y = x**2
    with pytest.raises(ModelError, match="max_degree must be >= 1"):
        select_degree(x, y, max_degree=0)
    with pytest.raises(ModelError, match="whole number"):
        select_degree(x, y, max_degree=2.0)  # type: ignore[arg-type]
    with pytest.raises(ParameterError, match=r"alpha must be a significance level in \(0, 1\)"):
        select_degree(x, y, alpha=1.5)
    with pytest.raises(DataError, match=r"needs at least 7 points.*Lower max_degree to 4"):
        select_degree(x, y, max_degree=5)
    with pytest.raises(DataError, match=r"3 distinct x values.*Lower max_degree to 2"):
        select_degree(np.repeat([1.0, 2.0, 3.0], 3), np.arange(9.0), max_degree=3)
    with pytest.raises(DataError, match="same length"):
        select_degree(x, y[:4], max_degree=1)


def test_information_criteria_edges_and_errors() -> None:
    assert aicc(10.0, 4, 3) == math.inf  # n - K - 1 = 0: undefined, never preferred
    assert bic(0.0, 10, 3) == -math.inf  # perfect fit
    # AICc = AIC + 2K(K+1)/(n-K-1) (common practice; Burnham & Anderson, from memory).
    assert aicc(5.0, 20, 3) == pytest.approx(aic(5.0, 20, 3) + 24.0 / 16.0, rel=1e-15)
    with pytest.raises(DataError, match="ssr must be a finite"):
        aicc(-1.0, 10, 2)
    with pytest.raises(DataError, match="k must count"):
        bic(1.0, 10, 0)
    with pytest.raises(DataError, match="n must be the number of points"):
        aic(1.0, 0, 2)


# ---------------------------------------------------------------------------------------------
# property: p values are uniform under H0


def test_quadratic_term_p_value_uniform_under_h0() -> None:
    """Statistical test with a fixed seed: under H0 (true model a line, Gaussian noise) the p
    value of the quadratic term is Uniform(0, 1). 600 simulated data sets; Kolmogorov-Smirnov
    against the uniform distribution (scipy.stats.kstest) with the lenient threshold
    p_ks > 0.001, plus the rejection rate at alpha = 0.05 within a binomial 99.9% band.
    The pairwise F test of x^2 equals the square of the c2 t test (common practice), checked on
    the first replicates.
    """
    rng = np.random.default_rng(20240611)
    x = np.linspace(0.0, 10.0, 15)
    reps = 600
    pvals = np.empty(reps)
    for i in range(reps):
        y = 2.0 + 0.7 * x + rng.normal(0.0, 1.5, x.size)
        fit = polynomial_fit(x, y, 2)
        pvals[i] = cell(fit.coef_table, "c2", "p")
        if i < 5:
            sel = select_degree(x, y, max_degree=2)
            assert cell(sel.table, 2, "p") == pytest.approx(pvals[i], rel=1e-9)
            t = cell(fit.coef_table, "c2", "t")
            assert cell(sel.table, 2, "F") == pytest.approx(t * t, rel=1e-9)
    assert scipy.stats.kstest(pvals, "uniform").pvalue > 0.001  # scipy.stats reference
    rejections = int((pvals < 0.05).sum())
    band = np.asarray(scipy.stats.binom.ppf([0.0005, 0.9995], reps, 0.05), dtype=np.float64)
    assert band[0] <= rejections <= band[1]
