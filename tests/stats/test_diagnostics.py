"""Residual diagnostics checked against statsmodels (influence, outliers, anova_lm) and scipy."""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
import statsmodels.formula.api as smf
from statsmodels.sandbox.stats.runs import runstest_1samp
from statsmodels.stats.anova import anova_lm

import curvewright as cw
from curvewright.errors import DataError
from curvewright.stats.diagnostics import (
    cooks_distance,
    diagnose_arrays,
    lack_of_fit_test,
    leverage,
    normality_test,
    outlier_flags,
    residual_diagnostics,
    runs_pmf,
    runs_test,
    studentized_residuals,
)

DATA = Path(__file__).resolve().parent.parent / "data"


def cars() -> pd.DataFrame:
    # R's cars data, tests/data/r_datasets/SOURCES.md
    return pd.read_csv(DATA / "r_datasets" / "cars.csv")


def dnase_run1() -> pd.DataFrame:
    # R's DNase data, run 1 (duplicates at 8 concentrations), tests/data/stats/SOURCES.md
    d = pd.read_csv(DATA / "stats" / "DNase.csv")
    return d[d["Run"] == 1].reset_index(drop=True)


# ---------------------------------------------------------------------- influence measures
def test_influence_matches_statsmodels_ols() -> None:
    df = cars()
    X = sm.add_constant(df["speed"].to_numpy(float))
    y = df["dist"].to_numpy(float)
    res = sm.OLS(y, X).fit()
    infl = res.get_influence()
    h = leverage(X)
    # Reference: statsmodels OLSInfluence on the same OLS fit.
    np.testing.assert_allclose(h, infl.hat_matrix_diag, rtol=1e-10)
    internal, external = studentized_residuals(res.resid, h, int(res.df_resid))
    np.testing.assert_allclose(internal, infl.resid_studentized_internal, rtol=1e-10)
    np.testing.assert_allclose(external, infl.resid_studentized_external, rtol=1e-10)
    np.testing.assert_allclose(cooks_distance(internal, h, 2), infl.cooks_distance[0], rtol=1e-10)
    # Reference: statsmodels OLSResults.outlier_test(method="bonf").
    # With plain arrays it returns columns (student_resid, unadj_p, bonf(p)).
    ot = np.asarray(res.outlier_test(method="bonf"))
    p, p_bonf, flag = outlier_flags(external, int(res.df_resid))
    np.testing.assert_allclose(external, ot[:, 0], rtol=1e-10)
    np.testing.assert_allclose(p, ot[:, 1], rtol=1e-10)
    np.testing.assert_allclose(p_bonf, ot[:, 2], rtol=1e-10)
    assert flag.tolist() == (ot[:, 2] < 0.05).tolist()


def test_influence_matches_statsmodels_wls() -> None:
    df = cars()
    x = df["speed"].to_numpy(float)
    y = df["dist"].to_numpy(float)
    w = 1.0 / x  # an arbitrary positive weighting, variance growing with speed
    X = sm.add_constant(x)
    res = sm.WLS(y, X, weights=w).fit()
    # Reference: statsmodels OLSInfluence of the whitened problem (sqrt(w) times design and y),
    # which is how weighted least squares reduces to ordinary least squares.
    sw = np.sqrt(w)
    infl = sm.OLS(sw * y, X * sw[:, None]).fit().get_influence()
    d = diagnose_arrays(x, y, res.fittedvalues, X, int(res.df_resid), weights=w, linear=True)
    np.testing.assert_allclose(d.points["leverage"], infl.hat_matrix_diag, rtol=1e-9)
    np.testing.assert_allclose(d.points["studentized"], infl.resid_studentized_internal, rtol=1e-9)
    np.testing.assert_allclose(d.points["cooks_distance"], infl.cooks_distance[0], rtol=1e-9)


def test_leverage_sums_to_rank_and_ignores_dependent_column() -> None:
    rng = np.random.default_rng(1)
    X = np.column_stack([np.ones(20), rng.normal(size=20)])
    X3 = np.column_stack([X, 2 * X[:, 1]])  # third column is dependent on the second
    # Common practice: the trace of a projection is its rank.
    assert leverage(X).sum() == pytest.approx(2.0)
    np.testing.assert_allclose(leverage(X3), leverage(X), atol=1e-12)


def test_one_clear_outlier_is_flagged() -> None:
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 30)
    y = 1.0 + 2.0 * x + rng.normal(0, 0.5, x.size)
    y[12] += 6.0
    X = sm.add_constant(x)
    res = sm.OLS(y, X).fit()
    d = diagnose_arrays(x, y, res.fittedvalues, X, int(res.df_resid), linear=True)
    assert d.points["outlier"].tolist() == [i == 12 for i in range(30)]
    assert "input rows 12" in d.summary
    assert d.outliers["row"].tolist() == [12]


# ------------------------------------------------------------------------------ normality
def test_normality_uses_shapiro_then_dagostino() -> None:
    rng = np.random.default_rng(3)
    small = rng.normal(size=30)
    large = rng.normal(size=200)
    a = normality_test(small)
    b = normality_test(large)
    # Reference: scipy.stats.shapiro and scipy.stats.normaltest.
    sw = scipy.stats.shapiro(small)
    dp = scipy.stats.normaltest(large)
    assert a.method == "Shapiro-Wilk"
    assert (a.statistic, a.p_value) == pytest.approx((sw.statistic, sw.pvalue), rel=1e-12)
    assert b.method == "D'Agostino-Pearson"
    assert (b.statistic, b.p_value) == pytest.approx((dp.statistic, dp.pvalue), rel=1e-12)


def test_normality_boundaries_and_too_few() -> None:
    r = np.random.default_rng(4).normal(size=51)
    assert normality_test(r[:50]).method == "Shapiro-Wilk"
    assert normality_test(r).method == "D'Agostino-Pearson"
    few = normality_test(r[:7])
    assert few.method == "none"
    assert math.isnan(few.p_value)
    assert "Too few residuals (7)" in few.note
    assert normality_test(r[:8]).method == "Shapiro-Wilk"


def test_normality_rejects_skewed_residuals() -> None:
    r = np.random.default_rng(5).exponential(size=40)
    assert normality_test(r).p_value < 0.01


# ----------------------------------------------------------------------------------- runs
def _brute_force_runs_cdf(runs: int, n1: int, n2: int) -> float:
    """P(R <= runs) by enumerating every placement of the positive signs."""
    n = n1 + n2
    hits = 0
    total = 0
    for pos in itertools.combinations(range(n), n1):
        s = np.full(n, -1)
        s[list(pos)] = 1
        r = 1 + int(np.count_nonzero(np.diff(s)))
        hits += r <= runs
        total += 1
    return hits / total


@pytest.mark.parametrize(("n1", "n2"), [(3, 4), (5, 5), (6, 2), (7, 6)])
def test_runs_exact_distribution_matches_enumeration(n1: int, n2: int) -> None:
    # Oracle: the definition, by enumerating all C(n1+n2, n1) equally likely sign orders.
    total = sum(runs_pmf(k, n1, n2) for k in range(2, n1 + n2 + 1))
    assert total == pytest.approx(1.0, abs=1e-12)
    for r in range(2, n1 + n2 + 1):
        ours = sum(runs_pmf(k, n1, n2) for k in range(2, r + 1))
        assert ours == pytest.approx(_brute_force_runs_cdf(r, n1, n2), abs=1e-12)


def test_runs_test_on_a_sequence() -> None:
    res = np.array([1.0, 2.0, 0.5, -1.0, -2.0, -0.1, 0.3, 0.4, 0.2, -0.5, -0.7, -0.2])
    rt = runs_test(res)
    assert (rt.n_positive, rt.n_negative, rt.runs) == (6, 6, 4)
    assert rt.method == "exact"
    assert rt.p_value == pytest.approx(_brute_force_runs_cdf(4, 6, 6), abs=1e-12)
    assert rt.expected == pytest.approx(7.0)  # 1 + 2*6*6/12


def test_runs_normal_approximation_matches_statsmodels() -> None:
    rng = np.random.default_rng(11)
    r = rng.normal(size=400)
    r = r + 0.8 * np.sin(np.arange(400) / 15.0)  # a slow wave: too few runs
    ours = runs_test(r, exact_max=100)
    # Reference: statsmodels runstest_1samp with cutoff 0 (signs), no continuity correction;
    # it reports a two-sided p value from the same z.
    z, p2 = runstest_1samp(r, cutoff=0.0, correction=False)
    assert ours.method == "normal"
    assert ours.z == pytest.approx(z, rel=1e-12)
    assert ours.p_value == pytest.approx(p2 / 2, rel=1e-9)
    assert ours.p_value < 1e-3
    # The exact distribution agrees with the approximation at this size.
    exact = runs_test(r)
    assert exact.method == "exact"
    assert exact.p_value == pytest.approx(ours.p_value, rel=0.5)


def test_runs_all_one_sign() -> None:
    rt = runs_test(np.array([1.0, 2.0, 3.0]))
    assert rt.method == "none"
    assert "same sign" in rt.note


# ---------------------------------------------------------------------------- lack of fit
def test_lack_of_fit_matches_anova_lm_against_saturated_model() -> None:
    d = dnase_run1()
    d["lc"] = np.log(d["conc"])
    line = smf.ols("density ~ lc", data=d).fit()
    cell_means = smf.ols("density ~ C(conc)", data=d).fit()
    # Reference: statsmodels anova_lm of the straight line against the one-mean-per-x model
    # (the classical lack-of-fit F test; with two models the largest's residual mean square is
    # the pure-error mean square).
    ref = anova_lm(line, cell_means)
    lof = lack_of_fit_test(d["lc"], d["density"], line.ssr, int(line.df_resid))
    assert lof.groups == 8
    assert lof.df_pure_error == 8
    assert lof.df_lack_of_fit == 6
    assert lof.ss_pure_error == pytest.approx(cell_means.ssr, rel=1e-10)
    assert pytest.approx(ref["F"].iloc[1], rel=1e-9) == lof.F
    assert lof.p_value == pytest.approx(ref["Pr(>F)"].iloc[1], rel=1e-8)
    assert lof.p_value < 1e-6  # density is not a straight line in log concentration


def test_weighted_lack_of_fit_matches_wls_anova() -> None:
    d = dnase_run1()
    d["lc"] = np.log(d["conc"])
    w = 1.0 / (0.01 + d["density"].to_numpy()) ** 2
    line = smf.wls("density ~ lc", data=d, weights=w).fit()
    cell_means = smf.wls("density ~ C(conc)", data=d, weights=w).fit()
    ref = anova_lm(line, cell_means)  # reference: statsmodels anova_lm on WLS fits
    lof = lack_of_fit_test(d["lc"], d["density"], line.ssr, int(line.df_resid), weights=w)
    assert pytest.approx(ref["F"].iloc[1], rel=1e-8) == lof.F
    assert lof.p_value == pytest.approx(ref["Pr(>F)"].iloc[1], rel=1e-7)


def test_lack_of_fit_without_replicates() -> None:
    x = np.arange(10.0)
    lof = lack_of_fit_test(x, x**2, 3.0, 8)
    assert math.isnan(lof.F)
    assert "No replicated x values" in lof.note


def test_lack_of_fit_saturated_model() -> None:
    x = np.array([1.0, 1.0, 2.0, 2.0])
    lof = lack_of_fit_test(x, np.array([1.0, 1.1, 2.0, 2.2]), 0.025, 2)
    assert math.isnan(lof.F)
    assert "cannot be tested" in lof.note


# ------------------------------------------------------------------------------ bad input
def test_bad_input_raises_our_errors() -> None:
    with pytest.raises(DataError, match="non-finite"):
        normality_test(np.array([1.0, np.nan, 2.0]))
    with pytest.raises(DataError, match="same length"):
        lack_of_fit_test(np.arange(3.0), np.arange(4.0), 1.0, 1)
    with pytest.raises(DataError, match="two-dimensional"):
        leverage(np.arange(3.0))
    with pytest.raises(DataError, match="dof must be at least 1"):
        studentized_residuals(np.ones(3), np.zeros(3), 0)


# --------------------------------------------------------------------- on a FitResult
def test_residual_diagnostics_of_weighted_fit_match_statsmodels_wls() -> None:
    # A weighted straight line fitted by curvewright.fit (FitResult.weights holds 1/sigma);
    # reference: statsmodels OLSInfluence of the whitened problem, as in the array-level test.
    df = cars()
    x = df["speed"].to_numpy(float)
    y = df["dist"].to_numpy(float)
    sigma = np.sqrt(x)
    r = cw.fit("straight_line", x, y, sigma=sigma)
    d = residual_diagnostics(r)
    sw = 1.0 / sigma
    X = sm.add_constant(x)
    infl = sm.OLS(sw * y, X * sw[:, None]).fit().get_influence()
    np.testing.assert_allclose(d.points["leverage"], infl.hat_matrix_diag, rtol=1e-8)
    np.testing.assert_allclose(d.points["studentized"], infl.resid_studentized_internal, rtol=1e-8)
    np.testing.assert_allclose(d.points["cooks_distance"], infl.cooks_distance[0], rtol=1e-8)
    assert d.linear


def test_residual_diagnostics_of_a_nonlinear_fit_lack_of_fit() -> None:
    # DNase run 1 with the 3-parameter logistic (duplicates at 8 concentrations): the lack-of-fit
    # F test from the FitResult equals the classical one computed here with statsmodels' cell
    # means (pure error) and scipy's F distribution.
    d = dnase_run1()
    r = cw.fit("stimulation_3pl", d["conc"], d["density"])
    diag = r.residual_diagnostics()
    cell_means = smf.ols("density ~ C(conc)", data=d).fit()
    ss_pe, df_pe = cell_means.ssr, int(cell_means.df_resid)
    df_lof = r.dof - df_pe
    f_ref = ((r.ssr - ss_pe) / df_lof) / (ss_pe / df_pe)
    assert pytest.approx(f_ref, rel=1e-9) == diag.lack_of_fit.F
    p_ref = scipy.stats.f.sf(f_ref, df_lof, df_pe)
    assert diag.lack_of_fit.p_value == pytest.approx(p_ref, rel=1e-8)
    assert not diag.linear
    assert diag.points["row"].tolist() == list(range(len(d)))
