"""Model comparison: the F test against statsmodels, AICc and Akaike weights against their
formulas (Burnham and Anderson 2002), nesting detection, recommendations and refusals."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.formula.api as smf  # type: ignore[import-untyped]  # no stubs
from statsmodels.stats.anova import anova_lm  # type: ignore[import-untyped]

import curvewright as cw
from curvewright.errors import ComparisonError, ParameterError
from curvewright.stats import akaike_weights, compare, extra_ss_f_test

DATA = Path(__file__).resolve().parent.parent / "data"


def cars() -> pd.DataFrame:
    # R's cars (tests/data/r_datasets/SOURCES.md).
    return pd.read_csv(DATA / "r_datasets" / "cars.csv")


def puromycin() -> pd.DataFrame:
    # R's Puromycin, treated cells (tests/data/stats/SOURCES.md).
    df = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    return df[df["state"] == "treated"].reset_index(drop=True)


def row(frame: pd.DataFrame, simpler: str, larger: str) -> pd.Series:
    sel = frame[(frame["simpler"] == simpler) & (frame["larger"] == larger)]
    assert len(sel) == 1, frame
    return sel.iloc[0]


# ---------------------------------------------------------------------------------------------
# F test against statsmodels


def test_f_tests_match_statsmodels_on_nested_polynomials() -> None:
    # statsmodels OLS compare_f_test and anova_lm (pairwise: two models per call, so the
    # residual mean square is the larger model's own) on R's cars, fits made by curvewright.fit.
    df = cars()
    terms = ["speed", "I(speed**2)", "I(speed**3)"]
    ref = [smf.ols("dist ~ " + " + ".join(terms[:k]), df).fit() for k in (1, 2, 3)]
    fits = [
        cw.fit("straight_line", "speed", "dist", data=df),
        cw.fit(cw.polynomial(2), "speed", "dist", data=df),
        cw.fit(cw.polynomial(3), "speed", "dist", data=df),
    ]
    c = compare(*fits)
    labels = list(c.table.index)
    assert labels == ["straight_line", "polynomial_2", "polynomial_3"]
    assert len(c.f_tests) == 3 and set(c.f_tests["how"]) == {"detected"}
    for i, j in ((0, 1), (0, 2), (1, 2)):
        F, p, df_diff = ref[j].compare_f_test(ref[i])
        got = row(c.f_tests, labels[i], labels[j])
        assert float(got["F"]) == pytest.approx(F, rel=1e-9)
        assert float(got["p"]) == pytest.approx(p, rel=1e-8)
        assert int(got["df_num"]) == int(df_diff)
        assert int(got["df_den"]) == int(ref[j].df_resid)
        a = anova_lm(ref[i], ref[j])
        assert float(got["F"]) == pytest.approx(float(a["F"].iloc[1]), rel=1e-9)
    # cars: the quadratic term is not significant (p = 0.136 by statsmodels above)
    assert not bool(row(c.f_tests, "straight_line", "polynomial_2")["significant"])


def test_f_test_function_matches_scipy_f_distribution() -> None:
    # scipy.stats.f reference; values from a made-up pair of fits.
    f_stat, dn, dd, p = extra_ss_f_test(120.0, 20, 80.0, 18)
    assert (dn, dd) == (2, 18)
    assert f_stat == pytest.approx((40.0 / 2) / (80.0 / 18))
    assert p == pytest.approx(scipy.stats.f.sf(f_stat, 2, 18))
    F2, _, _, p2 = extra_ss_f_test(80.0, 20, 90.0, 18)  # larger fits worse: not valid
    assert math.isnan(F2) and math.isnan(p2)
    with pytest.raises(ComparisonError, match="more free parameters"):
        extra_ss_f_test(1.0, 10, 1.0, 10)
    with pytest.raises(ComparisonError, match="no residual degrees of freedom"):
        extra_ss_f_test(2.0, 2, 1.0, 0)


# ---------------------------------------------------------------------------------------------
# AICc and Akaike weights against the formula


def test_aicc_and_akaike_weights_follow_the_formula() -> None:
    # AICc = n ln(SSR/n) + 2K + 2K(K+1)/(n-K-1), K = free parameters + 1 (the variance);
    # w_i = exp(-D_i/2) / sum exp(-D_j/2)  (Burnham and Anderson 2002, sections 2.4 and 2.9;
    # common practice). Computed here from each fit's SSR, n and number of free parameters.
    df = puromycin()
    fits = [
        cw.fit("michaelis_menten", "conc", "rate", data=df),
        cw.fit("hill", "conc", "rate", data=df),
        cw.fit("straight_line", "conc", "rate", data=df),
    ]
    c = compare(*fits)
    aicc = []
    for r in fits:
        n, K = r.n, r.nfree + 1
        aicc.append(n * math.log(r.ssr / n) + 2 * K + 2 * K * (K + 1) / (n - K - 1))
    aicc_a = np.array(aicc)
    delta = aicc_a - aicc_a.min()
    w = np.exp(-delta / 2) / np.exp(-delta / 2).sum()
    np.testing.assert_allclose(np.asarray(c.table["aicc"], dtype=float), aicc_a, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(c.table["delta_aicc"], dtype=float), delta, atol=1e-9)
    np.testing.assert_allclose(np.asarray(c.table["akaike_weight"], dtype=float), w, rtol=1e-9)
    assert float(c.table["akaike_weight"].sum()) == pytest.approx(1.0)
    # the straight line is far worse on saturating data
    assert float(c.table.loc["straight_line", "akaike_weight"]) < 1e-3
    # the evidence ratio of the best fit over the next best is w_best / w_second (Burnham and
    # Anderson 2002, section 2.10), said in the reasoning
    order = np.argsort(-w)
    ratio = w[order[0]] / w[order[1]]
    assert (
        f"its evidence ratio over the next best, {c.table.index[order[1]]!r}, is {ratio:.3g}"
        in (c.reasoning[0])
    )
    # Michaelis-Menten is nested in Hill (n_h = 1); the line is nested in neither.
    assert list(zip(c.f_tests["simpler"], c.f_tests["larger"], strict=True)) == [
        ("michaelis_menten", "hill")
    ]


def test_akaike_weights_with_an_infinite_aicc() -> None:
    delta, w = akaike_weights([10.0, math.inf, 12.0])
    assert w[1] == 0.0 and math.isinf(delta[1])
    assert w[0] == pytest.approx(1 / (1 + math.exp(-1)))
    with pytest.raises(ComparisonError, match="no fit has a finite AICc"):
        akaike_weights([math.inf, math.inf])


# ---------------------------------------------------------------------------------------------
# nesting detection and recommendations


def test_same_model_with_a_parameter_fixed_is_detected_as_nested() -> None:
    # F computed by hand from the two fits' SSR and degrees of freedom (formula in the module).
    rng = np.random.default_rng(21)
    x = np.linspace(0, 10, 30)
    y = 5.0 + 40.0 * np.exp(-0.4 * x) + rng.normal(0, 1.0, x.size)
    full = cw.fit("exponential_decay", x, y)
    held = cw.fit("exponential_decay", x, y, fixed={"baseline": 0.0})
    c = compare(held, full)
    assert len(c.f_tests) == 1
    got = c.f_tests.iloc[0]
    assert got["simpler"] == "exponential_decay (baseline=0)"
    F = (held.ssr - full.ssr) / 1 / (full.ssr / full.dof)
    assert float(got["F"]) == pytest.approx(F, rel=1e-10)
    assert float(got["p"]) == pytest.approx(scipy.stats.f.sf(F, 1, full.dof), rel=1e-10)
    # the true baseline is 5, far from 0: the F test rejects the simpler model
    assert bool(got["significant"])
    assert c.preferred == "exponential_decay" and c.criterion == "F test"
    assert "support the larger model" in " ".join(c.reasoning)
    assert c.recommendation == "Use 'exponential_decay' (decided by the F test)."


def test_simpler_model_recommended_when_extra_term_is_not_needed() -> None:
    df = cars()
    line = cw.fit("straight_line", "speed", "dist", data=df)
    quad = cw.fit(cw.polynomial(2), "speed", "dist", data=df)
    c = compare(line, quad, names=["line", "quadratic"])
    assert c.preferred == "line" and c.criterion == "F test"
    text = c.summary()
    assert "keep the simpler model" in text
    assert "not for clinical or dosing decisions" in text
    assert "<table" in c._repr_html_()
    d = json.loads(json.dumps(c.to_dict(), allow_nan=False))
    assert d["preferred"] == "line" and d["table"][0]["fit"] == "line"
    assert d["f_tests"][0]["p"] == pytest.approx(float(c.f_tests["p"].iloc[0]))
    # AICc alone (cars: the two are within 0.02 of each other) and a note that they disagree
    a = compare(line, quad, names=["line", "quadratic"], prefer="aicc")
    assert a.criterion == "AICc" and a.preferred == "quadratic"
    assert any("criteria disagree" in r for r in a.reasoning)
    assert any("hardly distinguish" in r for r in a.reasoning)


def test_different_models_not_nested_and_declared_nesting() -> None:
    df = puromycin()
    mm = cw.fit("michaelis_menten", "conc", "rate", data=df)
    rise = cw.fit("exponential_rise", "conc", "rate", data=df, fixed={"baseline": 0.0})
    c = compare(mm, rise)
    assert len(c.f_tests) == 0 and c.criterion == "AICc"
    # a declared nesting is used as declared (and labelled so)
    hill = cw.fit("hill", "conc", "rate", data=df)
    d = compare(mm, hill, nested=[("michaelis_menten", "hill")])
    assert list(d.f_tests["how"]) == ["declared"]
    e = compare(mm, hill, nested=False)
    assert len(e.f_tests) == 0
    chain = compare(hill, mm, nested=True)
    assert list(zip(chain.f_tests["simpler"], chain.f_tests["larger"], strict=True)) == [
        ("michaelis_menten", "hill")
    ]


def test_catalog_nestings_detected_on_dnase() -> None:
    # R's DNase run 2 (tests/data/r_datasets/SOURCES.md): 3PL (zero_dose 0) inside 4PL inside
    # 5PL (g = 1), fitted with relative weights on all three (same weights: comparable).
    # Run 2, because on run 1 the 5PL's asymmetry g runs off to infinity (standard error 1e13
    # times anything plausible): a degenerate stop, which compare refuses (checked below).
    df = pd.read_csv(DATA / "r_datasets" / "DNase.csv")
    run1 = df[df["Run"] == 1]
    five = cw.fit("stimulation_5pl", run1["conc"], run1["density"], weights="relative")
    four = cw.fit("stimulation_4pl", run1["conc"], run1["density"], weights="relative")
    assert five.code == "degenerate_stop" and four.success
    with pytest.raises(ComparisonError, match="degenerate point"):
        compare(four, five)
    d1 = df[df["Run"] == 2]
    fits = [
        cw.fit(m, d1["conc"], d1["density"], weights="relative")
        for m in ("stimulation_3pl", "stimulation_4pl", "stimulation_5pl")
    ]
    c = compare(*fits)
    pairs = set(zip(c.f_tests["simpler"], c.f_tests["larger"], strict=True))
    assert pairs == {
        ("stimulation_3pl", "stimulation_4pl"),
        ("stimulation_3pl", "stimulation_5pl"),
        ("stimulation_4pl", "stimulation_5pl"),
    }
    for _, t in c.f_tests.iterrows():
        s, b = (
            fits[list(c.table.index).index(t["simpler"])],
            fits[list(c.table.index).index(t["larger"])],
        )
        f_ref = ((s.ssr - b.ssr) / (s.dof - b.dof)) / (b.ssr / b.dof)
        assert float(t["F"]) == pytest.approx(f_ref, rel=1e-10)
    assert c.criterion == "AICc"  # three fits: the recommendation rests on AICc


# ---------------------------------------------------------------------------------------------
# refusals


def test_compare_refuses_different_data_weights_and_bad_fits() -> None:
    df = puromycin()
    a = cw.fit("michaelis_menten", "conc", "rate", data=df)
    with pytest.raises(ComparisonError, match="at least two fits"):
        compare(a)
    with pytest.raises(ComparisonError, match="not a FitResult"):
        compare(a, "hill")  # type: ignore[arg-type]
    other = df.assign(rate=df["rate"] * 1.01)
    b = cw.fit("hill", "conc", "rate", data=other)
    with pytest.raises(ComparisonError, match="different data"):
        compare(a, b)
    c = cw.fit("hill", "conc", "rate", data=df, exclude=[0])
    with pytest.raises(ComparisonError, match=r"11 points.*12"):
        compare(a, c)
    d = cw.fit("hill", "conc", "rate", data=df, weights="relative")
    with pytest.raises(ComparisonError, match="weighting 'relative'"):
        compare(a, d)
    sig = cw.fit("hill", "conc", "rate", data=df, sigma=np.full(len(df), 5.0))
    with pytest.raises(ComparisonError, match="weighting 'sigma'"):
        compare(a, sig)
    robust = cw.fit("hill", "conc", "rate", data=df, loss="huber")
    with pytest.raises(ComparisonError, match="robust 'huber' loss"):
        compare(a, robust)
    hill = cw.fit("hill", "conc", "rate", data=df)
    with pytest.raises(ComparisonError, match="declared nested"):
        compare(a, hill, nested=[(1, 0)])
    with pytest.raises(ComparisonError, match="same number of free parameters"):
        compare(a, cw.fit("power_law", "conc", "rate", data=df), nested=True)
    with pytest.raises(ParameterError, match="one label per fit"):
        compare(a, hill, names=["x"])
    with pytest.raises(ParameterError, match="distinct"):
        compare(a, hill, names=["x", "x"])
    with pytest.raises(ParameterError, match="alpha must be between 0 and 1"):
        compare(a, hill, alpha=5)
    with pytest.raises(ParameterError, match="prefer must be"):
        compare(a, hill, prefer="bic")
    with pytest.raises(ParameterError, match="unknown fit 'Hill'"):
        compare(a, hill, nested=[("michaelis_menten", "Hill")])


# ---------------------------------------------------------------------------------------------
# global fits nested by a fixed parameter


def test_global_fit_with_a_parameter_fixed_is_nested_in_the_free_one() -> None:
    # Source: R's Puromycin, both states (tests/data/stats/SOURCES.md), with an indicator
    # column for the treated cells used as a per-group constant. Michaelis-Menten with the
    # treated cells' Vmax and Km shifted by dV and dK; with dK fixed at 0 (one Km for both
    # states) the model is nested in the one with dK free. Reference: both fits redone with
    # scipy.optimize.least_squares on the stacked data, and the extra-sum-of-squares F test
    # (common practice) computed from their SSR with scipy.stats.f.
    from scipy.optimize import least_squares

    df = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    df["treated"] = (df["state"] == "treated").astype(float)
    formula = "(Vmax + dV*treated)*x/(Km + dK*treated + x)"
    start = {"Vmax": 160.0, "dV": 50.0, "Km": 0.05}

    def fit(shared: list[str], fixed: dict[str, float]) -> cw.GlobalResult:
        return cw.fit_global(
            formula,
            data=df,
            x="conc",
            y="rate",
            by="state",
            shared=shared,
            constants=["treated"],
            start={k: v for k, v in start.items() if k not in fixed},
            fixed=fixed,
        )

    one_km = fit(["Vmax", "dV", "Km"], {"dK": 0.0})
    two_km = fit(["Vmax", "dV", "Km", "dK"], {})

    x, y, t = (df[c].to_numpy(dtype=float) for c in ("conc", "rate", "treated"))

    def ssr(free_dk: bool) -> float:
        def resid(p: np.ndarray) -> np.ndarray:
            vmax, dv, km = p[:3]
            dk = p[3] if free_dk else 0.0
            return y - (vmax + dv * t) * x / (km + dk * t + x)

        x0 = [160.0, 50.0, 0.05] + ([0.0] if free_dk else [])
        sol = least_squares(resid, x0, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
        return float(sol.fun @ sol.fun)

    ssr_s, ssr_l = ssr(False), ssr(True)
    assert one_km.ssr == pytest.approx(ssr_s, rel=1e-7)
    assert two_km.ssr == pytest.approx(ssr_l, rel=1e-7)
    n = len(df)
    df_s, df_l = n - 3, n - 4
    F = ((ssr_s - ssr_l) / (df_s - df_l)) / (ssr_l / df_l)
    p = float(scipy.stats.f.sf(F, df_s - df_l, df_l))

    c = compare(two_km, one_km)  # order does not matter: the nesting is detected
    assert len(c.f_tests) == 1
    got = c.f_tests.iloc[0]
    assert got["simpler"] == "custom (shared: Vmax, dV, Km; fixed: dK=0)"
    assert got["larger"] == "custom (shared: Vmax, dV, Km, dK)"
    assert (int(got["df_num"]), int(got["df_den"])) == (1, df_l)
    assert float(got["F"]) == pytest.approx(F, rel=1e-5)
    assert float(got["p"]) == pytest.approx(p, rel=1e-4)
    assert bool(got["significant"]) == (p < 0.05)

    # Fixed at different values in each: neither is the other with more held; nested=True
    # then says so instead of testing a pair that is not nested.
    dv_held = fit(["Vmax", "Km", "dK"], {"dV": 50.0})
    assert len(compare(one_km, dv_held).f_tests) == 0
    with pytest.raises(ComparisonError, match="are not nested"):
        compare(one_km, dv_held, nested=True)
    # ... but both are nested in the fit that estimates everything
    both = compare(one_km, dv_held, two_km)
    assert sorted(zip(both.f_tests["simpler"], both.f_tests["larger"], strict=True)) == [
        ("custom (shared: Vmax, Km, dK; fixed: dV=50)", "custom (shared: Vmax, dV, Km, dK)"),
        ("custom (shared: Vmax, dV, Km; fixed: dK=0)", "custom (shared: Vmax, dV, Km, dK)"),
    ]
