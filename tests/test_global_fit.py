"""Global fits (fit_global): values, errors, comparisons and bad input, against outside references.

The references are independent of curvewright's engine: each check builds the stacked residual
of the global model by hand and minimises it with ``scipy.optimize.least_squares`` (standard
errors from ``s**2 (J'J)^-1`` with scipy's own 3-point Jacobian at its solution), or uses
statsmodels' ANCOVA F test. Data are R's open datasets (tests/data/r_datasets, SOURCES.md)
where one fits; the simulated sets say so and are checked only against scipy.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import least_squares

import curvewright as cw
from curvewright.errors import ComparisonError, DataError, ParameterError
from curvewright.stats.groups import adjust_p

DATA = Path(__file__).resolve().parent / "data" / "r_datasets"
ORANGE = pd.read_csv(DATA / "Orange.csv")
DNASE = pd.read_csv(DATA / "DNase.csv")
CHICKS = pd.read_csv(DATA / "ChickWeight.csv")

LOGISTIC = "Asym/(1 + exp((xmid - x)/scal))"
FPL_LOG = "floor + (ceiling - floor)/(1 + exp((log_mid - log(x))/width))"


# ------------------------------------------------------------------ independent reference
def stacked_reference(
    f: Callable[..., Any],
    groups: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray | None, dict[str, float]]],
    shared: Sequence[str],
    own: Sequence[str],
    x0: dict[str, float],
    *,
    loss: str = "linear",
    f_scale: float = 1.0,
) -> tuple[dict[str, float], dict[str, float], float, int, np.ndarray]:
    """Hand-built stacked residual minimised by scipy; values and SEs by expanded name.

    ``groups`` holds (x, y, sigma or None, constants) per group; parameters are laid out as
    ``[shared..., own of group 0..., own of group 1..., ...]``; f(x, **params) is the model.
    """
    ns, no, G = len(shared), len(own), len(groups)

    def unpack(th: np.ndarray, g: int) -> dict[str, float]:
        p = dict(zip(shared, th[:ns], strict=True))
        p.update(zip(own, th[ns + g * no : ns + (g + 1) * no], strict=True))
        p.update(groups[g][3])
        return p

    def resid(th: np.ndarray) -> np.ndarray:
        out = []
        for g, (x, y, s, _) in enumerate(groups):
            r = y - f(x, **unpack(th, g))
            out.append(r if s is None else r / s)
        return np.concatenate(out)

    th0 = np.array([x0[n] for n in shared] + [x0[n] for _ in range(G) for n in own])
    kw: dict[str, Any] = {"xtol": 1e-15, "ftol": 1e-15, "gtol": 1e-15, "max_nfev": 20000}
    if loss == "linear":
        sol = least_squares(resid, th0, method="lm", **kw)
    else:
        sol = least_squares(resid, th0, method="trf", loss=loss, f_scale=f_scale, **kw)
    r = resid(sol.x)
    # Central differences by hand (common practice: step eps**(1/3) relative).
    J = np.empty((r.size, th0.size))
    for j in range(th0.size):
        h = np.finfo(float).eps ** (1 / 3) * max(abs(sol.x[j]), 1.0)
        up, dn = sol.x.copy(), sol.x.copy()
        up[j] += h
        dn[j] -= h
        J[:, j] = (resid(up) - resid(dn)) / (2 * h)
    n, p = r.size, th0.size
    ssr = float(r @ r)
    cov = ssr / (n - p) * np.linalg.inv(J.T @ J)
    names = list(shared) + [f"{m}[{lab}]" for lab in range(G) for m in own]
    se = np.sqrt(np.diag(cov))
    return (
        dict(zip(names, sol.x.tolist(), strict=True)),
        dict(zip(names, se.tolist(), strict=True)),
        ssr,
        n - p,
        cov,
    )


def by_position(result: cw.GlobalResult, names: Sequence[str]) -> list[str]:
    """Our expanded names with the group label replaced by its position (0, 1, ...)."""
    out = []
    for n in names:
        if "[" in n:
            base, lab = n[:-1].split("[", 1)
            out.append(f"{base}[{result.labels.index(lab)}]")
        else:
            out.append(n)
    return out


def agree(
    result: cw.GlobalResult,
    ref_v: dict[str, float],
    ref_se: dict[str, float] | None,
    rtol: float = 1e-6,
) -> None:
    for ours, pos in zip(result.free, by_position(result, result.free), strict=True):
        assert result.estimates[ours] == pytest.approx(ref_v[pos], rel=rtol, abs=1e-12), ours
        if ref_se is not None:
            i = result.free.index(ours)
            assert math.sqrt(result.cov[i, i]) == pytest.approx(ref_se[pos], rel=rtol), ours


def _logistic(x: np.ndarray, Asym: float, xmid: float, scal: float) -> np.ndarray:
    return Asym / (1 + np.exp((xmid - x) / scal))


def _fpl(x: np.ndarray, floor: float, ceiling: float, log_mid: float, width: float) -> np.ndarray:
    return floor + (ceiling - floor) / (1 + np.exp((log_mid - np.log(x)) / width))


def _groups(
    df: pd.DataFrame, by: str, x: str, y: str, sigma: str | None = None, const: Sequence[str] = ()
) -> list[Any]:
    out = []
    for _, sub in df.groupby(by, sort=True):
        out.append(
            (
                sub[x].to_numpy(float),
                sub[y].to_numpy(float),
                None if sigma is None else sub[sigma].to_numpy(float),
                {c: float(sub[c].iloc[0]) for c in const},
            )
        )
    return out


# ------------------------------------------------------------------ R's Orange trees
@pytest.fixture(scope="module")
def orange() -> cw.GlobalResult:
    return cw.fit_global(
        LOGISTIC, data=ORANGE, x="age", y="circumference", by="Tree", shared=["xmid", "scal"]
    )


def test_orange_shared_xmid_scal_matches_scipy_stacked_fit(orange: cw.GlobalResult) -> None:
    # Source: R datasets::Orange; reference: scipy least_squares on the hand-built stacked
    # residual (Asym per tree, xmid and scal shared). Starting values from memory of R's
    # logistic fit of all trees (Asym ~ 190, xmid ~ 730, scal ~ 350), used only as a start.
    ref_v, ref_se, ssr, dof, _ = stacked_reference(
        _logistic,
        _groups(ORANGE, "Tree", "age", "circumference"),
        ["xmid", "scal"],
        ["Asym"],
        {"Asym": 190.0, "xmid": 730.0, "scal": 350.0},
    )
    assert orange.success
    agree(orange, ref_v, ref_se)
    assert orange.ssr == pytest.approx(ssr, rel=1e-9)
    assert orange.dof == dof == 35 - 7
    assert orange.free == ("Asym[1]", "Asym[2]", "Asym[3]", "Asym[4]", "Asym[5]", "xmid", "scal")
    assert orange.per_group == ("Asym",) and orange.shared == ("xmid", "scal")
    assert list(orange.values.index) == ["1", "2", "3", "4", "5"]
    # shared values repeat in every row; the per-group views carry the joint estimates
    assert orange.values["xmid"].nunique() == 1
    assert orange[3].values["Asym"] == orange.estimates["Asym[3]"]
    assert [orange[3].parameters[n].scope for n in ("Asym", "xmid", "scal")] == [
        "per_group",
        "shared",
        "shared",
    ]


def test_orange_against_all_per_tree_f_test(orange: cw.GlobalResult) -> None:
    # Source: R datasets::Orange. All per tree = five separate logistic fits (scipy, one per
    # tree); F = ((SSR_s - SSR_l)/(df_s - df_l)) / (SSR_l/df_l) (extra sum of squares,
    # common practice), p from scipy.stats.f.
    separate = cw.fit_global(LOGISTIC, data=ORANGE, x="age", y="circumference", by="Tree")
    ssr_l = 0.0
    for x, y, _, _ in _groups(ORANGE, "Tree", "age", "circumference"):
        sol = least_squares(
            lambda t, x=x, y=y: y - _logistic(x, *t),
            [190.0, 730.0, 350.0],
            method="lm",
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        ssr_l += float(sol.fun @ sol.fun)
    assert separate.ssr == pytest.approx(ssr_l, rel=1e-8)
    _, _, ssr_s, df_s, _ = stacked_reference(
        _logistic,
        _groups(ORANGE, "Tree", "age", "circumference"),
        ["xmid", "scal"],
        ["Asym"],
        {"Asym": 190.0, "xmid": 730.0, "scal": 350.0},
    )
    df_l = 35 - 15
    F = ((ssr_s - ssr_l) / (df_s - df_l)) / (ssr_l / df_l)
    c = cw.compare(orange, separate)
    row = c.f_tests.iloc[0]
    assert (int(row["df_num"]), int(row["df_den"])) == (8, 20)
    assert float(row["F"]) == pytest.approx(F, rel=1e-6)
    assert float(row["p"]) == pytest.approx(float(scipy.stats.f.sf(F, 8, 20)), rel=1e-5)
    assert "aicc" in c.table.columns and np.all(np.isfinite(c.table["aicc"]))


def test_orange_group_view_band_and_interval_use_joint_covariance(
    orange: cw.GlobalResult,
) -> None:
    # Source: R datasets::Orange. The band of tree 2 from scipy's covariance of the stacked
    # fit: var f(x) = g' C g over all joint parameters (g zero for other trees' Asym), with
    # the t quantile on the joint 28 degrees of freedom (common practice: Wald band).
    ref_v, _, _, dof, cov = stacked_reference(
        _logistic,
        _groups(ORANGE, "Tree", "age", "circumference"),
        ["xmid", "scal"],
        ["Asym"],
        {"Asym": 190.0, "xmid": 730.0, "scal": 350.0},
    )
    xs = np.array([200.0, 800.0, 1500.0])
    a, m, s = ref_v["Asym[1]"], ref_v["xmid"], ref_v["scal"]  # tree "2" is position 1
    e = np.exp((m - xs) / s)
    d_a = 1 / (1 + e)
    d_m = -a * e / s / (1 + e) ** 2
    d_s = a * e * (m - xs) / s**2 / (1 + e) ** 2
    G = np.zeros((xs.size, 7))  # scipy's layout: [xmid, scal, Asym of trees 1..5]
    G[:, 0], G[:, 1], G[:, 3] = d_m, d_s, d_a
    var = np.einsum("ij,jk,ik->i", G, cov, G)
    half = scipy.stats.t.ppf(0.975, dof) * np.sqrt(var)
    band = orange[2].confidence_band(xs)
    assert band["fit"].to_numpy() == pytest.approx(_logistic(xs, a, m, s), rel=1e-7)
    assert (band["upper"] - band["fit"]).to_numpy() == pytest.approx(half, rel=1e-5)
    ci = orange[2].ci(0.95)
    se_ref = math.sqrt(cov[3, 3])
    assert float(ci.loc["Asym", "upper"] - ci.loc["Asym", "value"]) == pytest.approx(
        scipy.stats.t.ppf(0.975, 28) * se_ref, rel=1e-5
    )
    pred = orange[2].prediction_band(xs)
    s2 = orange.ssr / orange.dof
    assert (pred["upper"] - pred["fit"]).to_numpy() == pytest.approx(
        scipy.stats.t.ppf(0.975, dof) * np.sqrt(var + s2), rel=1e-5
    )


def test_orange_summary_html_frame_and_exact_json(orange: cw.GlobalResult) -> None:
    text = orange.summary()
    assert cw.CAUTION in text and "xmid" in text and "Tree" in text
    assert "research use" in orange._repr_html_()
    assert cw.CAUTION in orange[1].summary() and "joint fit" in orange[1].summary()
    fr = orange.to_frame()
    assert len(fr) == 5 * 3 and set(fr["scope"]) == {"shared", "per_group"}
    back = cw.GlobalResult.from_json(orange.to_json())
    assert back.to_json() == orange.to_json()
    assert back.values.equals(orange.values)
    assert np.array_equal(back.cov, orange.cov)
    assert isinstance(back[4], cw.GroupFit)
    assert back[4].confidence_band([500.0]).equals(orange[4].confidence_band([500.0]))
    assert orange.covariance.loc["xmid", "scal"] == orange.cov[5, 6]
    import pickle

    again = pickle.loads(pickle.dumps(orange))
    assert again.to_json() == orange.to_json()
    view = pickle.loads(pickle.dumps(orange[2]))
    assert isinstance(view, cw.GroupFit) and view.group == "2"
    with pytest.raises(ParameterError, match="no group 9"):
        orange[9]
    with pytest.raises(cw.FitError, match=r"not available for group '1'.*ci\(\)"):
        orange[1].profile_ci()
    # a group's residual diagnostics are its own points (tree 4's ages, its residuals)
    pts = orange[4].residual_diagnostics().points
    tree4 = ORANGE[ORANGE["Tree"] == 4]
    assert sorted(pts["x"]) == sorted(tree4["age"].astype(float))
    assert sorted(pts["residual"]) == pytest.approx(sorted(orange[4].residuals), rel=1e-12)


def test_orange_test_shared_and_pairwise(orange: cw.GlobalResult) -> None:
    # Source: R datasets::Orange. The trees' asymptotes differ plainly (the F test of one
    # Asym against five is the comparison of two stacked scipy fits).
    t = orange.test_shared("Asym")
    _, _, ssr_one, df_one, _ = stacked_reference(
        _logistic,
        _groups(ORANGE, "Tree", "age", "circumference"),
        ["Asym", "xmid", "scal"],
        [],
        {"Asym": 190.0, "xmid": 730.0, "scal": 350.0},
    )
    F = ((ssr_one - orange.ssr) / (df_one - orange.dof)) / (orange.ssr / orange.dof)
    assert pytest.approx(F, rel=1e-6) == t.F
    assert t.differ and "differ in Asym" in t.conclusion
    assert t.separate_fit is orange and t.aicc_separate < t.aicc_shared
    pw = orange.compare_groups("Asym")
    assert len(pw.table) == 10 and pw.correction == "holm" and "Holm" in pw.summary()
    # the Wald statistic of tree 1 vs 2 from the joint covariance by hand
    i, j = orange.free.index("Asym[1]"), orange.free.index("Asym[2]")
    c = orange.cov
    t12 = (orange.estimates["Asym[1]"] - orange.estimates["Asym[2]"]) / math.sqrt(
        c[i, i] + c[j, j] - 2 * c[i, j]
    )
    assert float(pw.table.iloc[0]["t"]) == pytest.approx(t12, rel=1e-12)
    with pytest.raises(ParameterError, match="not fitted per group"):
        orange.compare_groups("xmid")


def test_holm_matches_statsmodels() -> None:
    # Reference: statsmodels.stats.multitest.multipletests (Holm and Bonferroni).
    from statsmodels.stats.multitest import multipletests

    p = np.array([0.01, 0.04, 0.03, 0.005, 0.2, 0.5])
    for ours, theirs in (("holm", "holm"), ("bonferroni", "bonferroni")):
        assert adjust_p(p, ours) == pytest.approx(multipletests(p, method=theirs)[1], rel=1e-12)


# ------------------------------------------------------------------ R's DNase assay
def test_dnase_shared_vs_per_run_matches_scipy() -> None:
    # Source: R datasets::DNase (11 runs of an ELISA). A 4-parameter logistic in log
    # concentration: floor, ceiling and width shared, the midpoint per run; against every
    # parameter per run (11 separate scipy fits). Start from memory of R's four-parameter
    # logistic fit of run 1 (floor ~ 0, ceiling ~ 2.4, mid ~ 1.5, width ~ 1.06).
    x0 = {"floor": 0.0, "ceiling": 2.4, "log_mid": 1.5, "width": 1.06}
    grp = _groups(DNASE, "Run", "conc", "density")
    shared = cw.fit_global(
        FPL_LOG, data=DNASE, x="conc", y="density", by="Run", shared=["floor", "ceiling", "width"]
    )
    ref_v, ref_se, ssr_s, df_s, _ = stacked_reference(
        _fpl, grp, ["floor", "ceiling", "width"], ["log_mid"], x0
    )
    # scipy's layout puts shared first; ours follows the model's parameter order
    agree(shared, ref_v, ref_se)
    separate = cw.fit_global(FPL_LOG, data=DNASE, x="conc", y="density", by="Run")
    ssr_l = 0.0
    for x, y, _, _ in grp:
        sol = least_squares(
            lambda t, x=x, y=y: y - _fpl(x, *t),
            list(x0.values()),
            method="lm",
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        ssr_l += float(sol.fun @ sol.fun)
    assert separate.ssr == pytest.approx(ssr_l, rel=1e-7)
    df_l = DNASE.shape[0] - 44
    F = ((ssr_s - ssr_l) / (df_s - df_l)) / (ssr_l / df_l)
    row = cw.compare(shared, separate).f_tests.iloc[0]
    assert float(row["F"]) == pytest.approx(F, rel=1e-5)
    assert int(row["df_num"]) == 30


# ------------------------------------------------------------------ linear: ANCOVA
def test_two_lines_shared_slope_f_equals_statsmodels_ancova() -> None:
    # Source: R datasets::ChickWeight (weight against Time, by Diet). Reference: statsmodels
    # anova_lm of y ~ x + C(g) against y ~ x * C(g) (the interaction F test of ANCOVA).
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    df = CHICKS.rename(columns={"weight": "y", "Time": "x", "Diet": "g"})
    common = cw.fit_global("a + b*x", data=df, x="x", y="y", by="g", shared=["b"])
    apart = cw.fit_global("a + b*x", data=df, x="x", y="y", by="g")
    c = cw.compare(common, apart)
    small = smf.ols("y ~ x + C(g)", data=df).fit()
    large = smf.ols("y ~ x * C(g)", data=df).fit()
    tab = anova_lm(small, large)
    assert float(c.f_tests.iloc[0]["F"]) == pytest.approx(float(tab["F"].iloc[1]), rel=1e-8)
    assert float(c.f_tests.iloc[0]["p"]) == pytest.approx(float(tab["Pr(>F)"].iloc[1]), rel=1e-6)
    assert common.estimates["b"] == pytest.approx(float(small.params["x"]), rel=1e-8)
    # separate slopes: diet 3's slope is the base slope plus its interaction term
    assert apart.estimates["b[3]"] == pytest.approx(
        float(large.params["x"] + large.params["x:C(g)[T.3]"]), rel=1e-8
    )
    se_a1 = math.sqrt(apart.cov[apart.free.index("a[1]"), apart.free.index("a[1]")])
    assert se_a1 == pytest.approx(float(large.bse["Intercept"]), rel=1e-6)


# ------------------------------------------------------------------ simulated sets vs scipy
def _simulated_dose_response() -> pd.DataFrame:
    # Simulated (seeded) data; the check is against scipy only.
    rng = np.random.default_rng(11)
    rows = []
    for comp, (lic, nh) in {"cpd-a": (-1.0, 1.0), "cpd-b": (0.0, 1.4), "cpd-c": (0.7, 0.8)}.items():
        for c in np.repeat(10.0 ** np.linspace(-3, 2, 9), 2):
            mu = 5 + (100 - 5) / (1 + (c / 10**lic) ** nh)
            rows.append({"compound": comp, "conc": c, "resp": mu + rng.normal(0, 3)})
    return pd.DataFrame(rows)


def test_shared_plateaus_dose_response_matches_scipy() -> None:
    df = _simulated_dose_response()

    def f(
        x: np.ndarray, zero_dose: float, full_effect: float, log_ic50: float, n_h: float
    ) -> np.ndarray:  # the textbook 4PL written out here, not taken from ours
        return full_effect + (zero_dose - full_effect) / (1 + (x / 10**log_ic50) ** n_h)

    r = cw.fit_global(
        "inhibition_4pl",
        data=df,
        x="conc",
        y="resp",
        by="compound",
        shared=["zero_dose", "full_effect"],
    )
    ref_v, ref_se, ssr, _, cov = stacked_reference(
        f,
        _groups(df, "compound", "conc", "resp"),
        ["zero_dose", "full_effect"],
        ["log_ic50", "n_h"],
        {"zero_dose": 100, "full_effect": 5, "log_ic50": 0, "n_h": 1},
    )
    agree(r, ref_v, ref_se)
    assert r.ssr == pytest.approx(ssr, rel=1e-9)
    # derived IC50 of compound b: the interval is 10**(log_ic50 +- t se), se from scipy
    d = r["cpd-b"].derived().loc["ic50"]
    q = scipy.stats.t.ppf(0.975, r.dof)
    lo = 10 ** (ref_v["log_ic50[1]"] - q * ref_se["log_ic50[1]"])
    assert float(d["lower"]) == pytest.approx(lo, rel=1e-6)
    # the amplitude (zero_dose - full_effect) has the delta-method SE from the joint cov
    amp_se = math.sqrt(cov[0, 0] + cov[1, 1] - 2 * cov[0, 1])
    assert float(r["cpd-c"].derived().loc["amplitude", "stderr"]) == pytest.approx(amp_se, rel=1e-6)


def _simulated_inhibition() -> pd.DataFrame:
    # Simulated (seeded) competitive inhibition at four inhibitor levels; scipy is the check.
    rng = np.random.default_rng(5)
    rows = []
    for inh in (0.0, 2.0, 5.0, 10.0):
        for s in (0.5, 1, 2, 4, 8, 16, 32, 64):
            v = 10 * s / (3 * (1 + inh / 2.5) + s)
            rows.append({"I": inh, "S": s, "v": v + rng.normal(0, 0.15), "plate": f"I={inh:g}"})
    return pd.DataFrame(rows)


def test_competitive_inhibition_with_constant_matches_scipy() -> None:
    df = _simulated_inhibition()
    r = cw.fit_global(
        "Vmax*x/(Km*(1 + I/Ki) + x)",
        data=df,
        x="S",
        y="v",
        by="plate",
        shared=["Vmax", "Km", "Ki"],
        constants=["I"],
    )

    def f(x: np.ndarray, Vmax: float, Km: float, Ki: float, I: float) -> np.ndarray:  # noqa: E741
        return Vmax * x / (Km * (1 + I / Ki) + x)

    ref_v, ref_se, _, _, _ = stacked_reference(
        f,
        _groups(df, "plate", "S", "v", const=["I"]),
        ["Vmax", "Km", "Ki"],
        [],
        {"Vmax": 8.0, "Km": 2.0, "Ki": 2.0},
    )
    agree(r, ref_v, ref_se)
    assert r.constants == ("I",)
    recs = r["I=5"].parameters  # the parameter records carry each one's scope
    assert recs["I"].fixed and recs["I"].value == 5.0 and recs["I"].scope == "per_group"
    assert recs["Ki"].scope == "shared" and not recs["Ki"].fixed
    assert sorted(r.values["I"].tolist()) == [0.0, 2.0, 5.0, 10.0]
    assert r.stderr["I"].isna().all()


def _simulated_decay() -> pd.DataFrame:
    # Simulated (seeded) decays with a known sigma per point; scipy is the check.
    rng = np.random.default_rng(8)
    rows = []
    for strain, amp in (("s1", 50.0), ("s2", 80.0), ("s3", 65.0)):
        for t in np.linspace(0, 10, 12):
            mu = 4 + amp * np.exp(-0.35 * t)
            sd = 0.05 * mu + 0.2
            rows.append({"strain": strain, "t": t, "y": mu + rng.normal(0, sd), "sd": sd})
    return pd.DataFrame(rows)


def test_weighted_global_fit_matches_scipy() -> None:
    df = _simulated_decay()
    r = cw.fit_global(
        "exponential_decay",
        data=df,
        x="t",
        y="y",
        by="strain",
        sigma="sd",
        shared=["baseline", "k"],
    )

    def f(x: np.ndarray, baseline: float, amplitude: float, k: float) -> np.ndarray:
        return baseline + amplitude * np.exp(-k * x)

    ref_v, ref_se, ssr, _, _ = stacked_reference(
        f,
        _groups(df, "strain", "t", "y", sigma="sd"),
        ["baseline", "k"],
        ["amplitude"],
        {"baseline": 3.0, "k": 0.3, "amplitude": 60.0},
    )
    assert r.weighting == "sigma"
    agree(r, ref_v, ref_se)
    assert r.ssr == pytest.approx(ssr, rel=1e-9)
    # sigma taken as exact: the covariance is (J'WJ)^-1 without the residual variance
    exact = cw.fit_global(
        "exponential_decay",
        data=df,
        x="t",
        y="y",
        by="strain",
        sigma="sd",
        shared=["baseline", "k"],
        absolute_sigma=True,
    )
    s = math.sqrt(ssr / r.dof)
    agree(exact, ref_v, {k: v / s for k, v in ref_se.items()})
    assert exact.compare_groups("amplitude").dof == r.dof


def test_robust_global_fit_matches_scipy_soft_l1() -> None:
    # scipy's "soft_l1" loss is the pseudo-Huber loss 2*(sqrt(1 + z) - 1) (scipy docs).
    df = _simulated_decay()
    df.loc[5, "y"] += 40.0  # one gross outlier
    r = cw.fit_global(
        "exponential_decay",
        data=df,
        x="t",
        y="y",
        by="strain",
        shared=["baseline", "k"],
        loss="pseudo_huber",
        loss_scale=2.0,
    )

    def f(x: np.ndarray, baseline: float, amplitude: float, k: float) -> np.ndarray:
        return baseline + amplitude * np.exp(-k * x)

    ref_v, _, _, _, _ = stacked_reference(
        f,
        _groups(df, "strain", "t", "y"),
        ["baseline", "k"],
        ["amplitude"],
        {"baseline": 3.0, "k": 0.3, "amplitude": 60.0},
        loss="soft_l1",
        f_scale=2.0,
    )
    agree(r, ref_v, None, rtol=1e-6)
    assert any(d.code == "robust_loss" for d in r.diagnostics)
    with pytest.raises(ComparisonError, match="robust"):
        cw.compare(r, r)


# ------------------------------------------------------------------ the options of fit
def test_options_exclude_fixed_bounds_links_start_frame() -> None:
    full = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid", "scal"],
        exclude=[0, 7],
    )
    dropped = cw.fit_global(
        LOGISTIC,
        data=ORANGE.drop(index=[0, 7]),
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid", "scal"],
    )
    assert full.n == 33
    assert full.values.to_numpy() == pytest.approx(dropped.values.to_numpy(), rel=1e-8)
    fx = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid"],
        fixed={"scal": 350.0},
    )
    assert (fx.values["scal"] == 350.0).all() and fx.stderr["scal"].isna().all()
    assert fx.fixed == ("scal",) and "scal" not in fx.per_group
    bd = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid", "scal"],
        bounds={"Asym": (0, 180)},
    )
    assert (bd.values["Asym"] <= 180 + 1e-9).all()
    assert any(d.code == "at_bound" and d.extra.get("group") for d in bd.diagnostics)
    ln = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid"],
        links={"scal": "xmid/2"},
    )
    assert ln.values["scal"].to_numpy() == pytest.approx(ln.values["xmid"].to_numpy() / 2)
    assert np.isfinite(ln.stderr["scal"]).all()
    starts = pd.DataFrame(
        {"Asym": [160.0, 220, 150, 230, 185], "xmid": 700.0, "scal": 340.0}, index=[1, 2, 3, 4, 5]
    )
    st_fit = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid", "scal"],
        start=starts,
    )
    assert st_fit.values.to_numpy() == pytest.approx(
        cw.fit_global(
            LOGISTIC, data=ORANGE, x="age", y="circumference", by="Tree", shared=["xmid", "scal"]
        ).values.to_numpy(),
        rel=1e-7,
    )


def test_limits_cancel_progress_and_method() -> None:
    kw: dict[str, Any] = dict(
        data=ORANGE, x="age", y="circumference", by="Tree", shared=["xmid", "scal"]
    )
    ev = threading.Event()
    ev.set()
    stopped = cw.fit_global(LOGISTIC, cancel=ev, **kw)
    assert not stopped.success and stopped.code == "cancelled"
    few = cw.fit_global(LOGISTIC, max_evaluations=3, **kw)
    assert not few.success
    seen: list[tuple[int, float]] = []
    tr = cw.fit_global(
        LOGISTIC, method="trust_region", progress=lambda n, s: seen.append((n, s)), timeout=60, **kw
    )
    assert tr.success and seen and seen[-1][0] >= tr.evaluations
    assert tr.attempts[0].method == "trust_region"


def test_two_grouping_columns_and_callable_model() -> None:
    df = DNASE[DNASE["Run"] <= 4].copy()
    df["half"] = np.where(df["Run"] <= 2, "early", "late")

    def fpl(
        x: np.ndarray, floor: float, ceiling: float, log_mid: float, width: float
    ) -> np.ndarray:
        return floor + (ceiling - floor) / (1 + np.exp((log_mid - np.log(x)) / width))

    r = cw.fit_global(
        fpl,
        data=df,
        x="conc",
        y="density",
        by=["half", "Run"],
        shared=["floor", "ceiling", "width"],
        start={"floor": 0.0, "ceiling": 2.4, "log_mid": 1.5, "width": 1.0},
    )
    assert r.keys == (("early", 1), ("early", 2), ("late", 3), ("late", 4))
    assert r.labels[0] == "early / 1" and "log_mid[late / 3]" in r.free
    assert r[("late", 4)] is r["late / 4"]
    # A Python function: the Jacobian by differences per group; same answer as scipy.
    ref_v, ref_se, _, _, _ = stacked_reference(
        fpl,
        _groups(df, "Run", "conc", "density"),  # runs 1-4: the same order as r.keys
        ["floor", "ceiling", "width"],
        ["log_mid"],
        {"floor": 0.0, "ceiling": 2.4, "log_mid": 1.5, "width": 1.0},
    )
    agree(r, ref_v, ref_se, rtol=1e-5)
    back = cw.GlobalResult.from_json(r.to_json(), model=fpl)
    assert back.keys == r.keys and back.to_json() == r.to_json()


# ------------------------------------------------------------------ bad input
def test_bad_input_is_our_error_with_advice() -> None:
    kw: dict[str, Any] = dict(data=ORANGE, x="age", y="circumference")
    with pytest.raises(DataError, match=r"by= names column 'tree'.*columns are"):
        cw.fit_global(LOGISTIC, by="tree", **kw)
    small = ORANGE[~((ORANGE["Tree"] == 3) & (ORANGE["age"] > 118))]
    with pytest.raises(DataError, match=r"group '3' has 1 point.*2 parameter"):
        cw.fit_global(LOGISTIC, data=small, x="age", y="circumference", by="Tree", shared=["xmid"])
    with pytest.raises(ParameterError, match=r"xmidd.*shared"):
        cw.fit_global(LOGISTIC, by="Tree", shared=["xmidd"], **kw)
    df = _simulated_inhibition()
    df.loc[3, "I"] = 1.0
    with pytest.raises(DataError, match="constant column 'I' varies within group 'I=0'"):
        cw.fit_global(
            "Vmax*x/(Km*(1 + I/Ki) + x)",
            data=df,
            x="S",
            y="v",
            by="plate",
            shared=["Vmax", "Km", "Ki"],
            constants=["I"],
        )
    nan = ORANGE.astype({"Tree": float})
    nan.loc[4, "Tree"] = np.nan
    with pytest.raises(DataError, match=r"group column 'Tree' is empty.*rows \[4\]"):
        cw.fit_global(LOGISTIC, data=nan, x="age", y="circumference", by="Tree")
    neg = ORANGE.assign(age=ORANGE["age"] - 200.0)
    with pytest.raises(cw.DomainError, match="group '1'"):
        cw.fit_global(FPL_LOG, data=neg, x="age", y="circumference", by="Tree")
    with pytest.raises(ParameterError, match="both shared and fixed"):
        cw.fit_global(LOGISTIC, by="Tree", shared=["xmid"], fixed={"xmid": 700}, **kw)
    with pytest.raises(DataError, match="DataFrame"):
        cw.fit_global(LOGISTIC, data={"age": [1, 2]}, x="age", y="c", by="t")  # type: ignore[arg-type]
    with pytest.raises(ParameterError, match="method must be one of"):
        cw.fit_global(LOGISTIC, by="Tree", method="fast", **kw)  # type: ignore[arg-type]


def test_compare_refuses_mixed_or_different_data(orange: cw.GlobalResult) -> None:
    single = cw.fit(
        LOGISTIC, "age", "circumference", data=ORANGE, start={"Asym": 190, "xmid": 730, "scal": 350}
    )
    with pytest.raises(ComparisonError, match="only with other global fits"):
        cw.compare(orange, single)
    other = cw.fit_global(
        LOGISTIC,
        data=ORANGE.iloc[:-1],
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid", "scal"],
    )
    with pytest.raises(ComparisonError, match="different groups or data"):
        cw.compare(orange, other)


# ------------------------------------------------------------------ several datasets in fit()
def test_residual_diagnostics_of_several_datasets_use_every_dataset() -> None:
    # Regression: the diagnostics paired the first dataset's x with every residual. A fit of
    # two datasets with every parameter shared is the fit of their union (same stacked
    # residual), so its diagnostics must be the union fit's.
    d1 = ORANGE[ORANGE["Tree"] == 1]
    d2 = ORANGE[ORANGE["Tree"] == 2]
    start = {"Asym": 190, "xmid": 730, "scal": 350}
    two = cw.fit(
        LOGISTIC,
        dataset=[
            cw.make_dataset("age", "circumference", data=d1),
            cw.make_dataset("age", "circumference", data=d2),
        ],
        start=start,
    )
    union = cw.fit(LOGISTIC, "age", "circumference", data=pd.concat([d1, d2]), start=start)
    a, b = two.residual_diagnostics().points, union.residual_diagnostics().points
    assert len(a) == 14
    for col in ("x", "residual", "leverage"):
        assert sorted(a[col].to_numpy()) == pytest.approx(sorted(b[col].to_numpy()), rel=1e-7)
    # bands with a given sigma interpolate it over every dataset's x, as the union fit does
    s1, s2 = 0.05 * d1["circumference"] + 1, 0.05 * d2["circumference"] + 1
    two_w = cw.fit(
        LOGISTIC,
        dataset=[
            cw.make_dataset("age", "circumference", data=d1.assign(s=s1), sigma="s"),
            cw.make_dataset("age", "circumference", data=d2.assign(s=s2), sigma="s"),
        ],
        start=start,
    )
    union_w = cw.fit(
        LOGISTIC,
        "age",
        "circumference",
        sigma="s",
        start=start,
        data=pd.concat([d1.assign(s=s1), d2.assign(s=s2)]),
    )
    xs = np.array([300.0, 900.0, 1400.0])
    assert two_w.prediction_band(xs).to_numpy() == pytest.approx(
        union_w.prediction_band(xs).to_numpy(), rel=1e-6
    )


# ------------------------------------------------------------------ properties
@settings(max_examples=12)
@given(
    n_groups=st.integers(2, 4),
    shared_mask=st.lists(st.booleans(), min_size=3, max_size=3),
    seed=st.integers(0, 10_000),
)
def test_expanded_parameters_map_back_to_every_group(
    n_groups: int, shared_mask: list[bool], seed: int
) -> None:
    # A quadratic is linear in its parameters, so each fit is exact and fast; the property
    # is the bookkeeping: every group's view holds the joint estimate under its expanded name,
    # and the saved form reads back to the same result.
    rng = np.random.default_rng(seed)
    names = ["c0", "c1", "c2"]
    shared = [n for n, s in zip(names, shared_mask, strict=True) if s]
    rows = []
    for g in range(n_groups):
        for xv in np.linspace(-1, 1, 6):
            rows.append({"g": f"grp{g}", "x": xv, "y": 1 + g + 2 * xv - xv**2 + rng.normal()})
    r = cw.fit_global(
        "c0 + c1*x + c2*x**2", data=pd.DataFrame(rows), x="x", y="y", by="g", shared=shared
    )
    assert r.nfree == len(shared) + n_groups * (3 - len(shared))
    for lab in r.labels:
        for n in names:
            key = n if n in shared else f"{n}[{lab}]"
            assert r[lab].values[n] == r.estimates[key]
            i = r.free.index(key)
            assert r[lab].stderr[n] == pytest.approx(math.sqrt(r.cov[i, i]), rel=1e-12)
    assert cw.GlobalResult.from_json(r.to_json()).to_json() == r.to_json()


# ------------------------------------------------------------------ simulations
def _sim_decay(rng: np.random.Generator, ks: Sequence[float]) -> pd.DataFrame:
    t = np.linspace(0, 8, 10)
    rows = []
    for g, k in enumerate(ks):
        y = 20 * np.exp(-k * t) + rng.normal(0, 0.5, t.size)
        rows += [{"g": g, "t": a, "y": b} for a, b in zip(t, y, strict=True)]
    return pd.DataFrame(rows)


@pytest.mark.slow
def test_f_test_p_values_are_uniform_under_the_null() -> None:
    # Under H0 (same k in both groups) the extra-sum-of-squares p values are close to uniform
    # (exact for linear models; common practice for well-determined nonlinear ones). KS test
    # against U(0, 1) with a fixed seed and a loose level.
    rng = np.random.default_rng(2026)
    ps = []
    for _ in range(120):
        df = _sim_decay(rng, [0.4, 0.4])
        a = cw.fit_global(
            "amplitude*exp(-k*x)",
            data=df,
            x="t",
            y="y",
            by="g",
            shared=["k"],
            start={"amplitude": 20, "k": 0.4},
        )
        b = cw.fit_global(
            "amplitude*exp(-k*x)", data=df, x="t", y="y", by="g", start={"amplitude": 20, "k": 0.4}
        )
        ps.append(float(cw.compare(a, b).f_tests.iloc[0]["p"]))
    assert scipy.stats.kstest(ps, "uniform").pvalue > 0.001


@pytest.mark.slow
def test_interval_of_a_shared_parameter_covers_near_nominal() -> None:
    # 95% Wald intervals of the shared k: coverage within 3 binomial standard errors of 0.95.
    rng = np.random.default_rng(7)
    reps, hits = 200, 0
    for _ in range(reps):
        df = _sim_decay(rng, [0.4, 0.4, 0.4])
        r = cw.fit_global(
            "amplitude*exp(-k*x)",
            data=df,
            x="t",
            y="y",
            by="g",
            shared=["k"],
            start={"amplitude": 20, "k": 0.4},
        )
        ci = r[0].ci(0.95)
        hits += bool(ci.loc["k", "lower"] <= 0.4 <= ci.loc["k", "upper"])
    assert abs(hits / reps - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / reps)


def test_link_and_zero_dose_controls_match_scipy() -> None:
    # A link inside each group (scal = xmid/2, xmid shared) is the logistic with xmid/2 written
    # in: scipy on that stacked residual is the reference (R datasets::Orange).
    ln = cw.fit_global(
        LOGISTIC,
        data=ORANGE,
        x="age",
        y="circumference",
        by="Tree",
        shared=["xmid"],
        links={"scal": "xmid/2"},
    )
    ref_v, ref_se, _, _, _ = stacked_reference(
        lambda x, Asym, xmid: _logistic(x, Asym, xmid, xmid / 2),
        _groups(ORANGE, "Tree", "age", "circumference"),
        ["xmid"],
        ["Asym"],
        {"Asym": 190.0, "xmid": 730.0},
    )
    agree(ln, ref_v, ref_se)
    # Zero-dose controls: the 4PL's derivative in n_h is 0 * log(0) there (NaN analytically,
    # 0 in the limit); the fit takes the limit by differences. Simulated data, scipy reference.
    df = _simulated_dose_response()
    zeros = pd.DataFrame(
        {
            "compound": ["cpd-a", "cpd-b", "cpd-c"] * 2,
            "conc": 0.0,
            "resp": [99.0, 101.0, 98.5, 100.5, 102.0, 97.0],
        }
    )
    df = pd.concat([df, zeros], ignore_index=True)

    def f(
        x: np.ndarray, zero_dose: float, full_effect: float, log_ic50: float, n_h: float
    ) -> np.ndarray:
        return full_effect + (zero_dose - full_effect) / (1 + (x / 10**log_ic50) ** n_h)

    r = cw.fit_global(
        "inhibition_4pl",
        data=df,
        x="conc",
        y="resp",
        by="compound",
        shared=["zero_dose", "full_effect"],
    )
    ref_v, ref_se, _, _, _ = stacked_reference(
        f,
        _groups(df, "compound", "conc", "resp"),
        ["zero_dose", "full_effect"],
        ["log_ic50", "n_h"],
        {"zero_dose": 100, "full_effect": 5, "log_ic50": 0, "n_h": 1},
    )
    agree(r, ref_v, ref_se)


@pytest.fixture(scope="module")
def inhibition_problem() -> Any:
    """The stacked problem of a global fit with a constant, a fixed value and a link."""
    from curvewright.fitting import global_fit

    seen: list[Any] = []
    real = global_fit._assemble

    def grab(prob: Any, *args: Any, **kw: Any) -> Any:
        seen.append(prob)
        return real(prob, *args, **kw)

    df = _simulated_inhibition()
    mp = pytest.MonkeyPatch()
    mp.setattr(global_fit, "_assemble", grab)
    try:
        cw.fit_global(
            "Vmax*x/(Km*(1 + I/Ki) + x) + base + drift*x",
            data=df,
            x="S",
            y="v",
            by="plate",
            shared=["Km"],
            constants=["I"],
            fixed={"base": 0.0},
            links={"drift": "Vmax/1000"},
            start={"Vmax": 10, "Km": 3, "Ki": 2.5},
        )
    finally:
        mp.undo()
    return seen[0]


@settings(max_examples=25)
@given(st.lists(st.floats(0.5, 20.0), min_size=9, max_size=9))
def test_stacked_problem_gathers_differentiates_and_maps_back(
    inhibition_problem: Any, raw: list[float]
) -> None:
    # The vectorised gather of each point's parameters equals the per-group values; the
    # vectorised curve equals the group-by-group evaluation of the model; the block Jacobian
    # equals central differences of the curve (numerics.finite_difference_jacobian, common
    # practice); a seed by model name maps onto the expanded parameters.
    from curvewright.numerics import finite_difference_jacobian

    prob = inhibition_problem
    th = np.array(raw[: len(prob.free)])
    rows = prob._rows(th)
    loop = np.empty(prob.x.size)
    for g, sl in enumerate(prob.slices):
        gv = prob.group_values(th, g)
        for i, nm in enumerate(prob.model.param_names):
            assert np.all(rows[i, sl] == pytest.approx(gv[nm], rel=1e-15))
        loop[sl] = prob.model.eval(prob.x[sl], gv)
    vals = prob.values(th)
    assert prob.curve(vals) == pytest.approx(loop, rel=1e-13)
    J = prob.jacobian_at(th)
    fd = finite_difference_jacobian(lambda t: prob.curve(prob.values(t)), th)
    assert pytest.approx(fd, rel=1e-6, abs=1e-8) == J
    seed = {n: 1.0 + i for i, n in enumerate(prob.model.param_names)}
    mapped = prob.theta_from(seed)
    assert [seed[b] for b in prob.base] == pytest.approx(mapped.tolist())
