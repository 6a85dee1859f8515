"""Linearised fits checked against published worked examples, scipy's linregress and
statsmodels OLS on the transformed data, and NIST StRD certified values for the nonlinear side."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm  # type: ignore[import-untyped]  # statsmodels ships no stubs
from numpy.typing import NDArray

import curvewright as cw
from curvewright.errors import DataError, FitError, ParameterError
from curvewright.stats.linearized import TRANSFORMS, linearized_fit, linearized_fits
from nist_nonlinear import read

DATA = Path(__file__).resolve().parent.parent / "data"
FloatArray = NDArray[np.float64]


def puromycin_treated() -> pd.DataFrame:
    # R's Puromycin data, treated cells (tests/data/stats/SOURCES.md).
    df = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    return df[df["state"] == "treated"].reset_index(drop=True)


def cell(table: pd.DataFrame, row: str, col: str) -> float:
    return float(np.asarray(table[col], dtype=float)[list(table.index).index(row)])


def delta_se(fn: object, a: float, b: float, cov: FloatArray) -> float:
    """Delta-method SE of fn(a, b) with an analytic-free central difference (test's own)."""
    f = fn  # type: ignore[assignment]
    h = 1e-6
    ga = (f(a * (1 + h), b) - f(a * (1 - h), b)) / (2 * a * h)  # type: ignore[operator]
    gb = (f(a, b * (1 + h)) - f(a, b * (1 - h))) / (2 * b * h)  # type: ignore[operator]
    g = np.array([ga, gb])
    return float(math.sqrt(g @ cov @ g))


# ---------------------------------------------------------------------------------------------
# published worked example: Puromycin, double-reciprocal plot


def test_lineweaver_burk_puromycin_matches_bates_and_watts() -> None:
    # Bates, D. M. and Watts, D. G. (1988) Nonlinear Regression Analysis and Its Applications,
    # Wiley, section 2.1 (values from memory; confirmed here by linregress below): the
    # Lineweaver-Burk line on the treated Puromycin data has intercept 5.107e-3 and slope
    # 2.472e-4, giving Vmax = 195.8 and Km = 0.04841, while least squares on the rates gives
    # Vmax = 212.7 (SE 6.947) and Km = 0.06412 (SE 0.008281), residual SE 10.93 on 10 df.
    df = puromycin_treated()
    lf = linearized_fit("lineweaver_burk", "conc", "rate", data=df)
    assert lf.intercept == pytest.approx(5.107e-3, rel=2e-4)
    assert lf.slope == pytest.approx(2.472e-4, rel=2e-4)
    assert cell(lf.table, "Vmax", "linearized") == pytest.approx(195.8, rel=3e-4)
    assert cell(lf.table, "Km", "linearized") == pytest.approx(0.04841, rel=3e-4)
    assert cell(lf.table, "Vmax", "nonlinear") == pytest.approx(212.7, rel=3e-4)
    assert cell(lf.table, "Km", "nonlinear") == pytest.approx(0.06412, rel=3e-4)
    assert cell(lf.table, "Vmax", "nonlinear_se") == pytest.approx(6.947, rel=3e-4)
    assert cell(lf.table, "Km", "nonlinear_se") == pytest.approx(0.008281, rel=3e-4)
    assert lf.nonlinear is not None
    assert lf.nonlinear.sigma_resid == pytest.approx(10.93, rel=5e-4)
    assert "Report the nonlinear least-squares estimates" in lf.note
    assert "y^4" in lf.note


# ---------------------------------------------------------------------------------------------
# every Michaelis-Menten transform against linregress / statsmodels OLS on the transformed data

MM_CASES = {
    # transform: (t(x, y), z(x, y), Vmax(a, b), Km(a, b))
    "lineweaver_burk": (
        lambda x, y: 1 / x,
        lambda x, y: 1 / y,
        lambda a, b: 1 / a,
        lambda a, b: b / a,
    ),
    "hanes_woolf": (lambda x, y: x, lambda x, y: x / y, lambda a, b: 1 / b, lambda a, b: a / b),
    "eadie_hofstee": (lambda x, y: y / x, lambda x, y: y, lambda a, b: a, lambda a, b: -b),
}


@pytest.mark.parametrize("transform", list(MM_CASES))
def test_michaelis_menten_transforms_match_linregress_and_ols(transform: str) -> None:
    df = puromycin_treated()
    x, y = df["conc"].to_numpy(float), df["rate"].to_numpy(float)
    tf, zf, vf, kf = MM_CASES[transform]
    t, z = tf(x, y), zf(x, y)
    ref = scipy.stats.linregress(t, z)  # scipy reference line
    ols = sm.OLS(z, sm.add_constant(t)).fit()  # statsmodels reference covariance
    lf = linearized_fit(transform, x, y, nonlinear=False)
    assert lf.intercept == pytest.approx(ref.intercept, rel=1e-10)
    assert lf.slope == pytest.approx(ref.slope, rel=1e-10)
    assert lf.intercept_se == pytest.approx(ref.intercept_stderr, rel=1e-9)
    assert lf.slope_se == pytest.approx(ref.stderr, rel=1e-9)
    assert lf.line_r2 == pytest.approx(ref.rvalue**2, rel=1e-10)
    a, b = float(ref.intercept), float(ref.slope)
    assert cell(lf.table, "Vmax", "linearized") == pytest.approx(vf(a, b), rel=1e-10)
    assert cell(lf.table, "Km", "linearized") == pytest.approx(kf(a, b), rel=1e-10)
    cov = np.asarray(ols.cov_params())
    assert cell(lf.table, "Vmax", "linearized_se") == pytest.approx(
        delta_se(vf, a, b, cov), rel=1e-5
    )
    assert cell(lf.table, "Km", "linearized_se") == pytest.approx(delta_se(kf, a, b, cov), rel=1e-5)
    assert "nonlinear" not in lf.table.columns
    assert lf.n == 12


def test_effective_weights_follow_the_transform() -> None:
    # Common practice (error propagation): OLS on z = g(y) weights y by 1/g'(y)^2.
    df = puromycin_treated()
    x, y = df["conc"].to_numpy(float), df["rate"].to_numpy(float)
    lb = linearized_fit("lineweaver_burk", x, y, nonlinear=False)
    assert lb.effective_weights is not None
    np.testing.assert_allclose(lb.effective_weights, y**4 / np.mean(y**4), rtol=1e-12)
    hw = linearized_fit("hanes_woolf", x, y, nonlinear=False)
    assert hw.effective_weights is not None
    w = y**4 / x**2
    np.testing.assert_allclose(hw.effective_weights, w / np.mean(w), rtol=1e-12)
    eh = linearized_fit("eadie_hofstee", x, y, nonlinear=False)
    assert eh.effective_weights is None


def test_linearized_fits_table_for_michaelis_menten() -> None:
    df = puromycin_treated()
    table = linearized_fits("conc", "rate", data=df)
    assert list(table.columns) == ["lineweaver_burk", "eadie_hofstee", "hanes_woolf", "nonlinear"]
    # Bates and Watts 1988 (from memory, see above): least squares Vmax 212.7.
    assert cell(table, "Vmax", "nonlinear") == pytest.approx(212.7, rel=3e-4)
    # Same fit passed in: identical table.
    r = cw.fit("michaelis_menten", "conc", "rate", data=df)
    again = linearized_fits(result=r)
    pd.testing.assert_frame_equal(table, again, rtol=1e-6)


# ---------------------------------------------------------------------------------------------
# log-log: cars (linregress) and DanWood (NIST certified power law)


def test_loglog_cars_matches_linregress() -> None:
    # R's cars data (tests/data/r_datasets/SOURCES.md); reference: linregress on (ln x, ln y).
    df = pd.read_csv(DATA / "r_datasets" / "cars.csv")
    x, y = df["speed"].to_numpy(float), df["dist"].to_numpy(float)
    ref = scipy.stats.linregress(np.log(x), np.log(y))
    lf = linearized_fit("loglog", x, y)
    assert cell(lf.table, "a", "linearized") == pytest.approx(math.exp(ref.intercept), rel=1e-10)
    assert cell(lf.table, "b", "linearized") == pytest.approx(ref.slope, rel=1e-10)
    # delta method for a = exp(intercept): SE = a * SE(intercept)
    assert cell(lf.table, "a", "linearized_se") == pytest.approx(
        math.exp(ref.intercept) * ref.intercept_stderr, rel=1e-6
    )
    assert lf.model_name == "power_law"
    assert lf.nonlinear is not None and lf.nonlinear.success


def test_loglog_danwood_nonlinear_side_matches_nist() -> None:
    # NIST StRD DanWood (y = b1*x**b2): certified values and standard deviations.
    p = read("DanWood")
    x, y = p.x, p.y
    cert = dict(zip(p.names, zip(p.certified, p.certified_sd, strict=True), strict=True))
    ref = scipy.stats.linregress(np.log(x), np.log(y))
    lf = linearized_fit("loglog", x, y)
    assert cell(lf.table, "b", "linearized") == pytest.approx(ref.slope, rel=1e-10)
    assert cell(lf.table, "a", "nonlinear") == pytest.approx(cert["b1"][0], rel=1e-6)
    assert cell(lf.table, "b", "nonlinear") == pytest.approx(cert["b2"][0], rel=1e-6)
    assert cell(lf.table, "a", "nonlinear_se") == pytest.approx(cert["b1"][1], rel=1e-4)
    assert cell(lf.table, "b", "nonlinear_se") == pytest.approx(cert["b2"][1], rel=1e-4)


# ---------------------------------------------------------------------------------------------
# semi-log: recovery of a known decay (the truth is the reference) and linregress


def test_semilog_decay_matches_linregress_and_recovers_truth() -> None:
    rng = np.random.default_rng(11)
    x = np.repeat(np.linspace(0.0, 6.0, 13), 2)
    amplitude, k, baseline = 80.0, 0.45, 5.0
    y = baseline + amplitude * np.exp(-k * x) * np.exp(rng.normal(0.0, 0.03, x.size))
    lf = linearized_fit("semilog", x, y, baseline=baseline)
    used = lf.used
    ref = scipy.stats.linregress(x[used], np.log(y[used] - baseline))
    assert cell(lf.table, "k", "linearized") == pytest.approx(-ref.slope, rel=1e-10)
    assert cell(lf.table, "amplitude", "linearized") == pytest.approx(
        math.exp(ref.intercept), rel=1e-10
    )
    assert cell(lf.table, "k", "linearized_se") == pytest.approx(ref.stderr, rel=1e-9)
    # The 5% rule: points closer to the baseline than 5% of the largest distance are left out.
    d = y - baseline
    np.testing.assert_array_equal(used, d > 0.05 * d.max())
    # Truth recovered within a few standard errors by both.
    for col, secol in (("linearized", "linearized_se"), ("nonlinear", "nonlinear_se")):
        assert abs(cell(lf.table, "k", col) - k) < 4 * cell(lf.table, "k", secol)
    assert lf.nonlinear is not None
    assert "baseline" in lf.nonlinear.fixed
    assert lf.nonlinear.values["baseline"] == baseline
    assert dict(lf.held) == {"baseline": baseline}


def test_semilog_growth_on_chick_weights() -> None:
    # R's ChickWeight (tests/data/r_datasets/SOURCES.md): chick 1's weight over days 0-12 grows
    # roughly exponentially; reference: linregress of ln(weight) on Time.
    df = pd.read_csv(DATA / "r_datasets" / "ChickWeight.csv")
    c = df[(df["Chick"] == 1) & (df["Time"] <= 12)]
    x, y = c["Time"].to_numpy(float), c["weight"].to_numpy(float)
    lf = linearized_fit("semilog", x, y, model="exponential_growth")
    used = lf.used
    ref = scipy.stats.linregress(x[used], np.log(y[used]))
    assert cell(lf.table, "k", "linearized") == pytest.approx(ref.slope, rel=1e-10)
    assert cell(lf.table, "y0", "linearized") == pytest.approx(math.exp(ref.intercept), rel=1e-10)
    assert lf.nonlinear is not None and lf.nonlinear.model.name == "exponential_growth"
    assert cell(lf.table, "k", "nonlinear") > 0


# ---------------------------------------------------------------------------------------------
# logit: DNase run 1 and Orange (published nonlinear fits), linregress on the logit


def test_logit_dnase_run1() -> None:
    # R's DNase, run 1 (tests/data/r_datasets/SOURCES.md). R's documentation of nls fits
    # density ~ SSlogis(log(conc), Asym, xmid, scal) to it: Asym 2.34518 (SE 0.07815),
    # xmid 1.48309 (0.08135), scal 1.04146 (0.03227), residual SE 0.01919 on 13 df (from
    # memory). Our 3PL is the same curve with full_effect = Asym, log_ec50 = xmid/ln 10 and
    # n_h = 1/scal.
    df = pd.read_csv(DATA / "r_datasets" / "DNase.csv")
    d1 = df[df["Run"] == 1]
    x, y = d1["conc"].to_numpy(float), d1["density"].to_numpy(float)
    lf = linearized_fit("logit", x, y, model="stimulation_3pl")
    nls = lf.nonlinear
    assert nls is not None
    ln10 = math.log(10.0)
    assert nls.values["full_effect"] == pytest.approx(2.34518, rel=2e-5)
    assert cell(lf.table, "log_ec50", "nonlinear") == pytest.approx(1.48309 / ln10, rel=2e-5)
    assert cell(lf.table, "n_h", "nonlinear") == pytest.approx(1 / 1.04146, rel=2e-5)
    assert cell(lf.table, "log_ec50", "nonlinear_se") == pytest.approx(0.08135 / ln10, rel=2e-4)
    assert cell(lf.table, "n_h", "nonlinear_se") == pytest.approx(0.03227 / 1.04146**2, rel=5e-4)
    assert nls.sigma_resid == pytest.approx(0.01919, rel=5e-4)
    # The line: levels 0 and the fitted full_effect; linregress on the same points.
    full = nls.values["full_effect"]
    assert dict(lf.held) == {"full_effect": full}
    f = y / full
    keep = (f > 0.05) & (f < 0.95)
    np.testing.assert_array_equal(lf.used, keep)
    ref = scipy.stats.linregress(np.log10(x[keep]), np.log10(f[keep] / (1 - f[keep])))
    assert cell(lf.table, "n_h", "linearized") == pytest.approx(ref.slope, rel=1e-10)
    assert cell(lf.table, "log_ec50", "linearized") == pytest.approx(
        -ref.intercept / ref.slope, rel=1e-10
    )


def test_logit_orange_logistic_growth() -> None:
    # R's Orange (tests/data/r_datasets/SOURCES.md), all trees pooled. Pinheiro and Bates (2000)
    # Mixed-Effects Models in S and S-PLUS, and R's nls examples, fit
    # circumference ~ SSlogis(age, Asym, xmid, scal): Asym 192.69, xmid 728.76, scal 353.53
    # (from memory). In our logistic growth model K = Asym, r = 1/scal, x_inflection = xmid.
    df = pd.read_csv(DATA / "r_datasets" / "Orange.csv")
    x, y = df["age"].to_numpy(float), df["circumference"].to_numpy(float)
    lf = linearized_fit("logit", x, y, model="logistic_growth")
    nls = lf.nonlinear
    assert nls is not None
    assert nls.values["K"] == pytest.approx(192.69, rel=1e-4)
    assert dict(lf.held) == {"K": nls.values["K"]}
    assert cell(lf.table, "r", "nonlinear") == pytest.approx(1 / 353.53, rel=1e-4)
    xi = float(nls.derived().loc["x_inflection", "value"])
    assert xi == pytest.approx(728.76, rel=1e-4)
    K = nls.values["K"]
    f = y / K
    keep = (f > 0.05) & (f < 0.95)
    ref = scipy.stats.linregress(x[keep], np.log10(f[keep] / (1 - f[keep])))
    r = ref.slope * math.log(10.0)
    mid = -ref.intercept / ref.slope
    assert cell(lf.table, "r", "linearized") == pytest.approx(r, rel=1e-10)
    assert cell(lf.table, "N0", "linearized") == pytest.approx(
        K / (1 + math.exp(r * mid)), rel=1e-9
    )


def test_logit_inhibition_recovers_truth_with_given_levels() -> None:
    rng = np.random.default_rng(5)
    x = np.repeat(10.0 ** np.linspace(-3, 1, 9), 3)
    zero_dose, full_effect, log_ic50, n_h = 95.0, 5.0, -1.0, 1.2
    u = (x / 10**log_ic50) ** n_h
    y = full_effect + (zero_dose - full_effect) / (1 + u) + rng.normal(0, 1.5, x.size)
    lf = linearized_fit(
        "logit", x, y, model="inhibition_4pl", zero_dose=zero_dose, full_effect=full_effect
    )
    # f: the fraction of the inhibition reached, 0 with no inhibitor and 1 at a saturating dose
    f = (y - zero_dose) / (full_effect - zero_dose)
    keep = (f > 0.05) & (f < 0.95)
    ref = scipy.stats.linregress(np.log10(x[keep]), np.log10(f[keep] / (1 - f[keep])))
    assert cell(lf.table, "n_h", "linearized") == pytest.approx(ref.slope, rel=1e-10)
    assert cell(lf.table, "log_ic50", "linearized") == pytest.approx(log_ic50, abs=0.1)
    assert cell(lf.table, "n_h", "nonlinear") == pytest.approx(n_h, rel=0.2)
    assert dict(lf.held) == {"zero_dose": zero_dose, "full_effect": full_effect}


# ---------------------------------------------------------------------------------------------
# output and bad input


def test_summary_and_html() -> None:
    lf = linearized_fit("hanes_woolf", "conc", "rate", data=puromycin_treated())
    text = lf.summary()
    assert "hanes woolf" in text and "Vmax" in text and "nonlinear" in text
    assert "<table" in lf._repr_html_()
    assert set(TRANSFORMS) == {
        "lineweaver_burk",
        "hanes_woolf",
        "eadie_hofstee",
        "semilog",
        "loglog",
        "logit",
    }


def test_bad_input() -> None:
    df = puromycin_treated()
    with pytest.raises(
        ParameterError, match=r"transform must be one of.*Did you mean 'hanes_woolf'"
    ):
        linearized_fit("hanes-wolf", df["conc"], df["rate"])
    with pytest.raises(DataError, match="at least 3 usable points"):
        linearized_fit("lineweaver_burk", [1.0, 2.0, -1.0], [1.0, 2.0, 3.0], nonlinear=False)
    with pytest.raises(DataError, match="same length"):
        linearized_fit("loglog", [1.0, 2.0, 3.0], [1.0, 2.0], nonlinear=False)
    with pytest.raises(ParameterError, match="data= was not given"):
        linearized_fit("loglog", "conc", "rate")
    with pytest.raises(DataError, match="column 'speed' is not in data"):
        linearized_fit("loglog", "speed", "rate", data=df)
    r = cw.fit("power_law", df["conc"], df["rate"])
    with pytest.raises(FitError, match="transform estimates 'michaelis_menten'"):
        linearized_fit("hanes_woolf", result=r)
    with pytest.raises(ParameterError, match="not both"):
        linearized_fit("loglog", df["conc"], df["rate"], result=r)
    with pytest.raises(ParameterError, match="needs the levels: give zero_dose= and full_effect="):
        linearized_fit("logit", df["conc"], df["rate"], nonlinear=False)
    with pytest.raises(ParameterError, match="two levels must differ"):
        linearized_fit(
            "logit", df["conc"], df["rate"], zero_dose=1.0, full_effect=1.0, nonlinear=False
        )
    with pytest.raises(ParameterError, match=r"stimulation_3pl takes the logit level\(s\) "):
        linearized_fit("logit", df["conc"], df["rate"], model="stimulation_3pl", zero_dose=0.0)
    with pytest.raises(ParameterError, match=r"logistic_growth takes the logit level.*'K'"):
        linearized_fit("logit", df["conc"], df["rate"], model="logistic_growth", full_effect=200.0)
    with pytest.raises(ParameterError, match="belong to the logit transform, not to semilog"):
        linearized_fit("semilog", df["conc"], df["rate"], K=3.0)
    with pytest.raises(ParameterError, match="baseline= belongs to the semilog transform"):
        linearized_fit("hanes_woolf", df["conc"], df["rate"], baseline=3.0)
    with pytest.raises(ParameterError, match="estimates the model"):
        linearized_fit("logit", df["conc"], df["rate"], model="hill")
    with pytest.raises(ParameterError, match="no baseline"):
        linearized_fit("semilog", df["conc"], df["rate"], model="exponential_growth", baseline=3.0)
    dec = cw.fit("exponential_decay", [0, 1, 2, 3, 4, 5.0], [10, 6.1, 3.9, 2.6, 1.8, 1.5])
    with pytest.raises(FitError, match="takes the baseline as known"):
        linearized_fit("semilog", result=dec)
