"""Uncertainty of fits: parameter tests, profile intervals, correlation, delta method, bands and
inverse prediction, each checked against NIST StRD, statsmodels, lmfit or an independent
computation in the test."""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path

import lmfit
import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm  # type: ignore[import-untyped]  # statsmodels ships no stubs

import curvewright as cw
from curvewright.errors import DataError, ExtrapolationWarning, FitError, ParameterError
from curvewright.stats.uncertainty import (
    band,
    correlation,
    derived_quantity,
    derived_table,
    model_gradient,
    parameter_table,
    profile_intervals,
    wald_intervals,
)
from nist_nonlinear import FORMULAS, read

DATA = Path(__file__).resolve().parent.parent / "data"


def puromycin() -> pd.DataFrame:
    # R's Puromycin, treated cells (tests/data/stats/SOURCES.md).
    df = pd.read_csv(DATA / "stats" / "Puromycin.csv")
    return df[df["state"] == "treated"].reset_index(drop=True)


def cars() -> pd.DataFrame:
    # R's cars (tests/data/r_datasets/SOURCES.md).
    return pd.read_csv(DATA / "r_datasets" / "cars.csv")


def dnase1() -> pd.DataFrame:
    # R's DNase, run 1 (tests/data/r_datasets/SOURCES.md).
    df = pd.read_csv(DATA / "r_datasets" / "DNase.csv")
    return df[df["Run"] == 1].reset_index(drop=True)


def col(frame: pd.DataFrame, name: str) -> np.ndarray:
    return np.asarray(frame[name], dtype=float)


def at(frame: pd.DataFrame, row: object, name: str) -> float:
    return float(np.asarray(frame[name], dtype=float)[list(frame.index).index(row)])


def fd_gradient(f: object, theta: np.ndarray, h: float = 1e-6) -> np.ndarray:
    """Central-difference gradient of f(theta) -> array (the test's own, independent of ours)."""
    fn = f  # type: ignore[assignment]
    cols = []
    for j in range(theta.size):
        step = h * max(abs(theta[j]), 1e-3)
        up, dn = theta.copy(), theta.copy()
        up[j] += step
        dn[j] -= step
        cols.append((np.asarray(fn(up)) - np.asarray(fn(dn))) / (2 * step))  # type: ignore[operator]
    return np.column_stack(cols)


# ---------------------------------------------------------------------------------------------
# parameter tests: NIST certified standard deviations, statsmodels t and p


@pytest.mark.parametrize("name", ["Misra1a", "Misra1b", "DanWood", "Chwirut2", "MGH17"])
def test_parameter_table_matches_nist_certified_sd(name: str) -> None:
    # NIST StRD nonlinear: certified parameters and standard deviations (LRE >= 4 for the SDs).
    p = read(name)
    model = cw.Model.from_formula(FORMULAS[name], params=list(p.names))
    r = cw.fit(model, p.x, p.y, start=dict(zip(p.names, p.start2, strict=True)))
    table = parameter_table(r)
    for n, cert, sd in zip(p.names, p.certified, p.certified_sd, strict=True):
        assert at(table, n, "value") == pytest.approx(cert, rel=1e-6)
        assert at(table, n, "stderr") == pytest.approx(sd, rel=1e-4)
        t = cert / sd
        assert at(table, n, "t") == pytest.approx(t, rel=1e-4)
        # two-sided p on NIST's residual degrees of freedom (scipy.stats.t reference)
        assert at(table, n, "p") == pytest.approx(2 * scipy.stats.t.sf(abs(t), p.dof), rel=1e-3)
        q = scipy.stats.t.ppf(0.975, p.dof)
        assert at(table, n, "lower") == pytest.approx(cert - q * sd, rel=1e-4)


def test_parameter_table_matches_statsmodels_ols_for_a_line() -> None:
    # statsmodels OLS on R's cars: dist = intercept + slope*speed, same maths as our fit.
    df = cars()
    ref = sm.OLS(df["dist"], sm.add_constant(df["speed"])).fit()
    r = cw.fit("straight_line", "speed", "dist", data=df)
    table = r.parameter_table()
    ci = np.asarray(ref.conf_int(0.05))
    for i, n in enumerate(["intercept", "slope"]):
        assert at(table, n, "value") == pytest.approx(ref.params.iloc[i], rel=1e-10)
        assert at(table, n, "stderr") == pytest.approx(ref.bse.iloc[i], rel=1e-9)
        assert at(table, n, "t") == pytest.approx(ref.tvalues.iloc[i], rel=1e-9)
        assert at(table, n, "p") == pytest.approx(ref.pvalues.iloc[i], rel=1e-7)
        assert at(table, n, "lower") == pytest.approx(ci[i, 0], rel=1e-9)
        assert at(table, n, "upper") == pytest.approx(ci[i, 1], rel=1e-9)
    assert list(table["status"]) == ["free", "free"]


def test_absolute_sigma_uses_normal_quantiles_like_statsmodels_fixed_scale() -> None:
    # statsmodels WLS with cov_type="fixed scale": sigma taken as exact, normal-based tests.
    rng = np.random.default_rng(4)
    x = np.linspace(1, 10, 15)
    sigma = 0.2 + 0.1 * x
    y = 1.0 + 2.0 * x + rng.normal(0, sigma)
    ref = sm.WLS(y, sm.add_constant(x), weights=1 / sigma**2).fit(cov_type="fixed scale")
    r = cw.fit("straight_line", x, y, sigma=sigma, absolute_sigma=True)
    table = r.parameter_table()
    ci = np.asarray(ref.conf_int(0.05))
    np.testing.assert_allclose(col(table, "stderr"), ref.bse, rtol=1e-9)
    np.testing.assert_allclose(col(table, "p"), ref.pvalues, rtol=1e-6)
    np.testing.assert_allclose(col(table, "lower"), ci[:, 0], rtol=1e-9)
    grid = np.array([2.0, 5.0])
    frame = ref.get_prediction(sm.add_constant(grid)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(
        col(r.confidence_band(grid), "upper"), frame["mean_ci_upper"], rtol=1e-9
    )
    with pytest.raises(FitError, match="absolute_sigma"):
        r.profile_ci()


def test_fixed_parameter_has_no_statistics() -> None:
    df = puromycin()
    r = cw.fit("michaelis_menten", "conc", "rate", data=df, fixed={"Vmax": 210.0})
    table = parameter_table(r)
    assert table.loc["Vmax", "status"] == "fixed"
    assert math.isnan(at(table, "Vmax", "stderr")) and math.isnan(at(table, "Vmax", "p"))


# ---------------------------------------------------------------------------------------------
# profile-likelihood intervals against lmfit's conf_interval


def lmfit_interval(resid: object, params: lmfit.Parameters) -> dict[str, tuple[float, float]]:
    mini = lmfit.Minimizer(resid, params)
    out = mini.minimize(method="leastsq")
    ci = lmfit.conf_interval(mini, out, sigmas=[0.95])
    return {n: (float(v[0][1]), float(v[-1][1])) for n, v in ci.items()}


def test_profile_intervals_match_lmfit_conf_interval_puromycin() -> None:
    # lmfit.conf_interval: F-test profile intervals on the same problem (reference library).
    df = puromycin()
    x, y = col(df, "conc"), col(df, "rate")
    p = lmfit.Parameters()
    p.add("Vmax", 200.0)
    p.add("Km", 0.1)

    def resid(p: lmfit.Parameters) -> np.ndarray:
        return y - p["Vmax"] * x / (p["Km"] + x)

    ref = lmfit_interval(resid, p)
    r = cw.fit("michaelis_menten", x, y)
    prof = r.profile_ci()
    for n in ("Vmax", "Km"):
        assert at(prof, n, "lower") == pytest.approx(ref[n][0], rel=1e-4)
        assert at(prof, n, "upper") == pytest.approx(ref[n][1], rel=1e-4)
    # Curvature makes the profile interval asymmetric about the estimate (Km's upper arm
    # longer), unlike the Wald interval.
    km = r.values["Km"]
    assert at(prof, "Km", "upper") - km > 1.1 * (km - at(prof, "Km", "lower"))
    assert at(prof, "Km", "wald_upper") - km == pytest.approx(km - at(prof, "Km", "wald_lower"))


def test_profile_intervals_match_lmfit_three_parameters() -> None:
    # lmfit.conf_interval on R's DNase run 1 with the 3-parameter logistic in x.
    df = dnase1()
    x, y = col(df, "conc"), col(df, "density")
    p = lmfit.Parameters()
    p.add("full_effect", 2.0)
    p.add("log_ec50", 0.5)
    p.add("n_h", 1.0)

    def resid(p: lmfit.Parameters) -> np.ndarray:
        # the sigmoid Emax curve without baseline, E = Emax*C**n/(EC50**n + C**n)
        c50n = (10 ** p["log_ec50"]) ** p["n_h"]
        return y - p["full_effect"] * x ** p["n_h"] / (c50n + x ** p["n_h"])

    ref = lmfit_interval(resid, p)
    r = cw.fit("stimulation_3pl", x, y)
    prof = profile_intervals(r, ["full_effect", "log_ec50", "n_h"])
    for n in ("full_effect", "log_ec50", "n_h"):
        assert at(prof, n, "lower") == pytest.approx(ref[n][0], rel=2e-4), n
        assert at(prof, n, "upper") == pytest.approx(ref[n][1], rel=2e-4), n


def test_profile_intervals_match_lmfit_on_nist_misra1a() -> None:
    # NIST StRD Misra1a (y = b1*(1 - exp(-b2*x))), lmfit.conf_interval as the reference.
    p = read("Misra1a")
    x, y = p.x, p.y
    params = lmfit.Parameters()
    params.add("b1", p.start2[0])
    params.add("b2", p.start2[1])

    def resid(q: lmfit.Parameters) -> np.ndarray:
        return y - q["b1"] * (1 - np.exp(-q["b2"] * x))

    ref = lmfit_interval(resid, params)
    model = cw.Model.from_formula(FORMULAS["Misra1a"], params=list(p.names))
    r = cw.fit(model, x, y, start=dict(zip(p.names, p.start2, strict=True)))
    prof = r.profile_ci()
    for n in ("b1", "b2"):
        assert at(prof, n, "lower") == pytest.approx(ref[n][0], rel=1e-4), n
        assert at(prof, n, "upper") == pytest.approx(ref[n][1], rel=1e-4), n


def test_plain_band_and_wald_functions_agree_with_the_result_layer() -> None:
    df = puromycin()
    r = cw.fit("michaelis_menten", "conc", "rate", data=df)
    grid = np.array([0.05, 0.5])
    G = model_gradient(r, grid)
    lo, hi = band(r.predict(grid), G, r.covariance, r.dof)
    cb = r.confidence_band(grid)
    np.testing.assert_allclose(lo, col(cb, "lower"), rtol=1e-12)
    np.testing.assert_allclose(hi, col(cb, "upper"), rtol=1e-12)
    s2 = r.ssr / r.dof
    lo_p, _ = band(r.predict(grid), G, r.covariance, r.dof, observation_variance=s2)
    np.testing.assert_allclose(lo_p, col(r.prediction_band(grid), "lower"), rtol=1e-12)
    table = r.parameter_table(0.9)
    wl, wu = wald_intervals(col(table, "value"), col(table, "stderr"), r.dof, 0.9)
    np.testing.assert_allclose(wl, col(table, "lower"), rtol=1e-12)
    np.testing.assert_allclose(wu, col(table, "upper"), rtol=1e-12)
    # the FitResult's own ci() (result.py) says the same
    np.testing.assert_allclose(col(r.ci(0.9), "lower"), wl, rtol=1e-12)


def test_profile_of_a_linear_model_equals_the_t_interval() -> None:
    # For a model linear in its parameters the profile interval equals the Wald t interval
    # exactly (F(1, dof) = t(dof)^2; Bates and Watts 1988, from memory) - checked on cars.
    df = cars()
    r = cw.fit("straight_line", "speed", "dist", data=df)
    prof = profile_intervals(r)
    np.testing.assert_allclose(col(prof, "lower"), col(prof, "wald_lower"), rtol=1e-7)
    np.testing.assert_allclose(col(prof, "upper"), col(prof, "wald_upper"), rtol=1e-7)


def test_profile_unbounded_side_is_reported() -> None:
    # Data that stop well below Km: as Km grows the curve tends to the line y = (Vmax/Km) x, so
    # the profile of Km levels off at the SSR of the best line through the origin. When that
    # is below the F threshold the data set no upper limit (checked here independently with
    # numpy's least squares and scipy's F quantile).
    x = np.linspace(0.1, 1.0, 6)
    rng = np.random.default_rng(0)
    y = 100 * x / (3 + x) * (1 + rng.normal(0, 0.1, x.size))
    r = cw.fit("michaelis_menten", x, y)
    c = float(np.linalg.lstsq(x[:, None], y, rcond=None)[0][0])
    ssr_line = float(((y - c * x) ** 2).sum())
    threshold = r.ssr * (1 + scipy.stats.f.ppf(0.95, 1, r.dof) / r.dof)
    assert ssr_line < threshold
    prof = profile_intervals(r, ["Km"])
    assert math.isinf(at(prof, "Km", "upper"))
    assert 0 < at(prof, "Km", "lower") < r.values["Km"]
    assert "do not bound" in str(prof.loc["Km", "note"])


# ---------------------------------------------------------------------------------------------
# correlation


def test_correlation_matrix_and_warning() -> None:
    # statsmodels OLS covariance -> correlation, on a line whose x sits far from 0 so the
    # intercept and slope trade off almost exactly (|r| > 0.99 warns; common practice).
    rng = np.random.default_rng(1)
    x = np.linspace(1000.0, 1010.0, 12)
    y = 3.0 + 0.5 * x + rng.normal(0, 0.2, x.size)
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    cov = np.asarray(ref.cov_params())
    r_ref = cov[0, 1] / math.sqrt(cov[0, 0] * cov[1, 1])
    r = cw.fit("straight_line", x, y)
    rep = correlation(r)
    assert float(rep.matrix.loc["intercept", "slope"]) == pytest.approx(r_ref, rel=1e-8)
    assert len(rep.warnings) == 1
    assert "intercept and slope" in rep.warnings[0]
    assert "<table" in rep._repr_html_()
    calm = correlation(cw.fit("straight_line", "speed", "dist", data=cars()), threshold=0.99)
    assert calm.warnings == ()


# ---------------------------------------------------------------------------------------------
# derived quantities: delta method against an independent finite-difference computation


def test_derived_quantities_delta_method() -> None:
    rng = np.random.default_rng(8)
    x = np.linspace(0, 8, 17)
    y = 2.0 + 40.0 * np.exp(-0.6 * x) + rng.normal(0, 0.8, x.size)
    r = cw.fit("exponential_decay", x, y)
    names = list(r.free)
    theta = np.array([r.values[n] for n in names])
    cov = np.asarray(r.covariance)

    def half_life(th: np.ndarray) -> np.ndarray:
        return np.array([math.log(2) / th[names.index("k")]])

    g = fd_gradient(half_life, theta)[0]
    se_ref = math.sqrt(g @ cov @ g)
    table = derived_table(r)
    assert at(table, "half_life", "value") == pytest.approx(math.log(2) / r.values["k"])
    assert at(table, "half_life", "stderr") == pytest.approx(se_ref, rel=1e-6)
    assert not bool(table.loc["half_life", "extrapolated"])
    q = scipy.stats.t.ppf(0.975, r.dof)
    assert at(table, "half_life", "upper") == pytest.approx(
        math.log(2) / r.values["k"] + q * se_ref, rel=1e-6
    )

    # an arbitrary expression: amplitude/baseline, gradient over two parameters
    def ratio(th: np.ndarray) -> np.ndarray:
        return np.array([th[names.index("amplitude")] / th[names.index("baseline")]])

    g2 = fd_gradient(ratio, theta)[0]
    s = r.derive("amplitude/baseline")
    assert float(s["stderr"]) == pytest.approx(math.sqrt(g2 @ cov @ g2), rel=1e-6)
    assert s["extrapolated"] is None


@pytest.mark.parametrize(
    ("model", "truth", "x", "quantity", "of"),
    [
        # phase 1's share of the total amplitude, a1/(a1 + a2) (common practice)
        (
            "biexponential_decay",
            {"baseline": 5.0, "a1": 60.0, "k1": 2.0, "a2": 35.0, "k2": 0.1},
            np.geomspace(0.05, 60, 30),
            "share_1",
            lambda v: v["a1"] / (v["a1"] + v["a2"]),
        ),
        # the level a first-order rise reaches, its start plus its rise
        (
            "exponential_rise",
            {"baseline": 3.0, "amplitude": 45.0, "k": 0.08},
            np.linspace(0, 60, 20),
            "plateau",
            lambda v: v["baseline"] + v["amplitude"],
        ),
        # the size of an inhibitor's effect, the zero-dose level minus the full-effect level
        (
            "inhibition_4pl",
            {"zero_dose": 98.0, "full_effect": 4.0, "log_ic50": -6.6, "n_h": 1.3},
            np.repeat(np.r_[0.0, np.geomspace(1e-9, 1e-4, 11)], 2),
            "amplitude",
            lambda v: v["zero_dose"] - v["full_effect"],
        ),
    ],
)
def test_derived_quantities_of_the_catalog_carry_delta_method_errors(
    model: str,
    truth: dict[str, float],
    x: np.ndarray,
    quantity: str,
    of: Callable[[dict[str, float]], float],
) -> None:
    # The standard error of each derived quantity against the delta method computed here from
    # the covariance and a finite-difference gradient of the quantity written out by hand.
    m = cw.catalog()[model]
    clean = m.eval(x, truth)
    y = clean + 0.01 * float(np.ptp(clean)) * np.random.default_rng(4).standard_normal(x.size)
    r = cw.fit(m, x, y)
    assert r.success, r.message
    names = list(r.free)
    theta = np.array([r.values[n] for n in names])

    def q(th: np.ndarray) -> np.ndarray:
        return np.array([of(dict(zip(names, th, strict=True)))])

    g = fd_gradient(q, theta)[0]
    table = derived_table(r)
    assert at(table, quantity, "value") == pytest.approx(of(dict(r.values)), rel=1e-12)
    se_ref = math.sqrt(g @ np.asarray(r.covariance) @ g)
    assert at(table, quantity, "stderr") == pytest.approx(se_ref, rel=1e-6)


def test_extrapolated_ec50_is_flagged_in_result_table_and_summary() -> None:
    # An agonist curve whose midpoint lies above the highest dose tested.
    x = 10.0 ** np.linspace(-3, 0, 10)
    rng = np.random.default_rng(2)
    y = 100 / (1 + (10.0**0.6 / x) ** 1.0) + rng.normal(0, 0.3, x.size)
    r = cw.fit("stimulation_4pl", x, y, fixed={"zero_dose": 0.0, "full_effect": 100.0})
    table = r.derived_table()
    assert at(table, "ec50", "value") > x.max()
    assert bool(table.loc["ec50", "extrapolated"])
    assert any(d.code == "extrapolation" for d in r.diagnostics)
    assert "outside the range of x in the data" in r.summary()
    s = derived_quantity(r, "10**log_ec50", axis="x")
    assert s["extrapolated"] is True


# ---------------------------------------------------------------------------------------------
# bands: statsmodels get_prediction for linear models, independent delta method for nonlinear


@pytest.mark.parametrize("model", ["straight_line", "polynomial_2"])
def test_bands_match_statsmodels_get_prediction(model: str) -> None:
    # statsmodels OLS get_prediction: mean_ci (confidence) and obs_ci (prediction) limits.
    df = cars()
    x, y = col(df, "speed"), col(df, "dist")
    deg = 1 if model == "straight_line" else 2
    X = np.vander(x, deg + 1, increasing=True)
    ref_fit = sm.OLS(y, X).fit()
    grid = np.linspace(2.0, 27.0, 11)  # a little beyond the data on both sides
    frame = ref_fit.get_prediction(np.vander(grid, deg + 1, increasing=True)).summary_frame(
        alpha=0.05
    )
    r = cw.fit(model if deg == 1 else cw.polynomial(2), x, y)
    cb = r.confidence_band(grid)
    pb = r.prediction_band(grid)
    np.testing.assert_allclose(col(cb, "fit"), frame["mean"], rtol=1e-10)
    np.testing.assert_allclose(col(cb, "lower"), frame["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(col(cb, "upper"), frame["mean_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(col(pb, "lower"), frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(col(pb, "upper"), frame["obs_ci_upper"], rtol=1e-9)


def test_weighted_bands_match_statsmodels_wls() -> None:
    # statsmodels WLS get_prediction with weights 1/sigma^2 at the new points.
    rng = np.random.default_rng(4)
    x = np.linspace(1, 10, 15)
    sigma = 0.2 + 0.1 * x
    y = 1.0 + 2.0 * x + rng.normal(0, sigma)
    ref_fit = sm.WLS(y, sm.add_constant(x), weights=1 / sigma**2).fit()
    grid = np.array([1.5, 4.0, 9.5])
    s_new = 0.2 + 0.1 * grid
    frame = ref_fit.get_prediction(sm.add_constant(grid), weights=1 / s_new**2).summary_frame(
        alpha=0.05
    )
    r = cw.fit("straight_line", x, y, sigma=sigma)
    cb = r.confidence_band(grid)
    pb = r.prediction_band(grid, sigma=s_new)
    np.testing.assert_allclose(col(cb, "lower"), frame["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(col(pb, "lower"), frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(col(pb, "upper"), frame["obs_ci_upper"], rtol=1e-9)
    # Without sigma= the data's sigma is interpolated in x: linear here, so exact.
    np.testing.assert_allclose(
        col(r.prediction_band(grid), "upper"), frame["obs_ci_upper"], rtol=1e-9
    )


def test_nonlinear_bands_match_independent_delta_method() -> None:
    # Delta method computed in the test: estimates from lmfit (reference library, tight
    # tolerances), covariance s^2 (J'J)^-1 and band gradients from the test's own central
    # differences of Vmax*x/(Km + x) (Bates and Watts 1988, section 2.3; common practice).
    df = puromycin()
    x, y = col(df, "conc"), col(df, "rate")
    p = lmfit.Parameters()
    p.add("Vmax", 200.0)
    p.add("Km", 0.1)
    out = lmfit.minimize(lambda p: y - p["Vmax"] * x / (p["Km"] + x), p, xtol=1e-14, ftol=1e-14)
    theta = np.array([out.params["Vmax"].value, out.params["Km"].value])
    n, k = x.size, 2
    resid = y - theta[0] * x / (theta[1] + x)
    s2 = float(resid @ resid) / (n - k)
    J = fd_gradient(lambda th: th[0] * x / (th[1] + x), theta)
    cov = s2 * np.linalg.inv(J.T @ J)
    grid = np.geomspace(0.01, 2.0, 9)

    def curve(th: np.ndarray) -> np.ndarray:
        return th[0] * grid / (th[1] + grid)

    G = fd_gradient(curve, theta)
    var = np.einsum("ij,jk,ik->i", G, cov, G)
    q = scipy.stats.t.ppf(0.975, n - k)
    r = cw.fit("michaelis_menten", x, y)
    cb = r.confidence_band(grid)
    pb = r.prediction_band(grid, level=0.95)
    np.testing.assert_allclose(col(cb, "fit"), curve(theta), rtol=1e-6)
    np.testing.assert_allclose(col(cb, "upper") - col(cb, "fit"), q * np.sqrt(var), rtol=1e-6)
    np.testing.assert_allclose(col(pb, "fit") - col(pb, "lower"), q * np.sqrt(var + s2), rtol=1e-6)
    # mean of 3 new readings: the added variance is s2/3
    pb3 = r.prediction_band(grid, replicates=3)
    np.testing.assert_allclose(
        col(pb3, "upper") - col(pb3, "fit"), q * np.sqrt(var + s2 / 3), rtol=1e-6
    )


def test_callable_model_and_json_round_trip_give_the_same_uncertainty() -> None:
    # The finite-difference path (a Python function has no formula) against the symbolic one,
    # and a result rebuilt from JSON against the original (profile refits need only the model
    # and the data, both stored).
    df = puromycin()
    x, y = col(df, "conc"), col(df, "rate")
    r = cw.fit("michaelis_menten", x, y)

    def mm(x: np.ndarray, Vmax: float, Km: float) -> np.ndarray:
        return Vmax * x / (Km + x)

    rc = cw.fit(mm, x, y, start={"Vmax": 200.0, "Km": 0.1})
    grid = np.geomspace(0.01, 2.0, 7)
    np.testing.assert_allclose(
        col(rc.confidence_band(grid), "upper"), col(r.confidence_band(grid), "upper"), rtol=1e-6
    )
    np.testing.assert_allclose(
        col(profile_intervals(rc), "upper"), col(profile_intervals(r), "upper"), rtol=1e-6
    )
    back = cw.FitResult.from_json(r.to_json())
    pd.testing.assert_frame_equal(back.profile_ci(), r.profile_ci())
    pd.testing.assert_frame_equal(back.prediction_band(grid), r.prediction_band(grid))


def test_band_errors() -> None:
    df = puromycin()
    r = cw.fit("michaelis_menten", "conc", "rate", data=df)
    with pytest.raises(ParameterError, match="level must be"):
        r.confidence_band([0.1], level=95)
    with pytest.raises(ParameterError, match="replicates must be a whole number"):
        r.prediction_band([0.1], replicates=0)
    with pytest.raises(DataError, match="non-finite"):
        r.confidence_band([0.1, math.nan])
    with pytest.raises(DataError, match="sigma for new observations must be positive"):
        r.prediction_band([0.1], sigma=-1.0)
    robust = cw.fit("michaelis_menten", "conc", "rate", data=df, loss="pseudo_huber")
    with pytest.raises(FitError, match="robust 'pseudo_huber' loss"):
        robust.confidence_band([0.1])
    with pytest.raises(FitError, match="robust"):
        robust.profile_ci()
    with pytest.raises(ParameterError, match="not a free parameter"):
        r.profile_ci(["Kd"])
    with pytest.raises(ParameterError, match="Kd"):
        r.derive("Vmax/Kd")


# ---------------------------------------------------------------------------------------------
# inverse prediction


def test_inverse_prediction_line_matches_fieller_interval() -> None:
    # Calibration with a straight line: the interval solves the quadratic
    # (y0 - a - b x)^2 = t^2 s^2 (1/m + 1/n + (x - xbar)^2 / Sxx)  (Draper and Smith 1998,
    # Applied Regression Analysis, section 3.2, "inverse regression"; from memory), solved here
    # with numpy from the statsmodels OLS estimates.
    rng = np.random.default_rng(12)
    x = np.repeat([0.0, 1.0, 2.0, 4.0, 6.0, 8.0, 10.0], 2)
    y = 0.05 + 0.12 * x + rng.normal(0, 0.02, x.size)
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    a, b = ref.params
    s2, n = ref.scale, x.size
    xbar, sxx = x.mean(), ((x - x.mean()) ** 2).sum()
    t = scipy.stats.t.ppf(0.975, n - 2)
    r = cw.fit("straight_line", x, y)
    for y0, m in ((0.5, 1), (0.9, 3)):
        # (b^2 - c/Sxx) x^2 + ... expanded about xbar in u = x - xbar
        c = t**2 * s2
        d = y0 - a - b * xbar
        coeffs = [b**2 - c / sxx, -2 * b * d, d**2 - c * (1 / m + 1 / n)]
        lo, hi = sorted(np.roots(coeffs).real + xbar)
        out = r.inverse_predict(y0, replicates=m)
        assert float(out["x"].iloc[0]) == pytest.approx((y0 - a) / b, rel=1e-9)
        assert float(out["lower"].iloc[0]) == pytest.approx(lo, rel=1e-8)
        assert float(out["upper"].iloc[0]) == pytest.approx(hi, rel=1e-8)
        assert not bool(out["extrapolated"].iloc[0])


def test_inverse_prediction_nonlinear_interval_ends_are_band_crossings() -> None:
    # Definition check: at the interval's ends the prediction band's limit equals y0.
    df = puromycin()
    r = cw.fit("michaelis_menten", "conc", "rate", data=df)
    out = r.inverse_predict([100.0, 150.0])
    for _, row in out.iterrows():
        y0 = float(row["y"])
        assert float(r.predict(np.array([row["x"]]))[0]) == pytest.approx(y0, rel=1e-10)
        pb = r.prediction_band(np.array([row["lower"], row["upper"]]))
        # rising curve: the upper limit meets y0 at the lower end, the lower limit at the upper
        assert float(pb["upper"].iloc[0]) == pytest.approx(y0, rel=1e-8)
        assert float(pb["lower"].iloc[1]) == pytest.approx(y0, rel=1e-8)


def test_inverse_prediction_on_a_falling_standard_curve() -> None:
    # A competitive-assay standard curve (signal falls with concentration), synthetic; the
    # definition is the reference: f(x) = y0, and the prediction band meets y0 at both ends.
    rng = np.random.default_rng(30)
    x = np.repeat(10.0 ** np.linspace(-2, 2, 9), 2)
    y = 0.1 + (2.0 - 0.1) / (1 + (x / 1.5) ** 1.1) + rng.normal(0, 0.03, x.size)
    r = cw.fit("inhibition_4pl", x, y)
    out = r.inverse_predict([1.5, 0.6], replicates=2)
    for _, row in out.iterrows():
        y0 = float(row["y"])
        assert float(r.predict(np.array([row["x"]]))[0]) == pytest.approx(y0, rel=1e-10)
        assert float(row["lower"]) < float(row["x"]) < float(row["upper"])
        pb = r.prediction_band(np.array([row["lower"], row["upper"]]), replicates=2)
        # falling curve: the lower limit meets y0 at the lower end, the upper at the upper end
        assert float(pb["lower"].iloc[0]) == pytest.approx(y0, rel=1e-8)
        assert float(pb["upper"].iloc[1]) == pytest.approx(y0, rel=1e-8)


def test_inverse_prediction_warns_outside_range_and_beyond_asymptote() -> None:
    df = puromycin()
    r = cw.fit("michaelis_menten", "conc", "rate", data=df)
    with pytest.warns(ExtrapolationWarning, match="outside the fitted curve's range"):
        out = r.inverse_predict(205.0)
    assert bool(out["extrapolated"].iloc[0])
    assert float(out["x"].iloc[0]) > df["conc"].max()
    with pytest.warns(ExtrapolationWarning, match="beyond what the fitted curve reaches"):
        out = r.inverse_predict([150.0, 250.0])  # Vmax is about 213
    assert math.isnan(float(out["x"].iloc[1]))
    assert "asymptote" in str(out["note"].iloc[1])
    assert not bool(out["extrapolated"].iloc[0])


def test_inverse_prediction_errors() -> None:
    x = np.linspace(-3, 3, 25)
    rng = np.random.default_rng(0)
    y = 1.0 + 5.0 * np.exp(-(x**2) / 2) + rng.normal(0, 0.05, x.size)
    peak = cw.fit("gaussian_peak", x, y)
    with pytest.raises(DataError, match="not monotone"):
        peak.inverse_predict(3.0)
    r = cw.fit("michaelis_menten", "conc", "rate", data=puromycin())
    with pytest.raises(DataError, match="non-finite"):
        r.inverse_predict(math.inf)
    with pytest.raises(ParameterError, match="replicates"):
        r.inverse_predict(100.0, replicates=1.5)  # type: ignore[arg-type]
