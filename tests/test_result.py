"""Tests of FitResult: exact JSON round trip, immutability, tables, intervals, text and HTML.

References: scipy.stats.t for interval quantiles (common practice: Wald intervals use Student's t
on the residual degrees of freedom), NIST StRD Misra1a for a certified fit to carry around.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.stats

import curvewright as cw
from curvewright.errors import ModelError
from curvewright.result import FitResult
from nist_nonlinear import read


@pytest.fixture(scope="module")
def misra() -> cw.FitResult:
    p = read("Misra1a")
    return cw.fit("b1*(1-exp(-b2*x))", p.x, p.y, start={"b1": 500.0, "b2": 1e-4})


@pytest.fixture(scope="module")
def dose() -> cw.FitResult:
    # Synthetic 4PL data from known parameters, with a zero-dose control (truth is the reference).
    rng = np.random.default_rng(11)
    x = np.repeat([0.0, 1e-9, 1e-8, 3e-8, 1e-7, 3e-7, 1e-6, 1e-5], 3)
    m = cw.catalog()["inhibition_4pl"]
    y = m.eval(x, {"zero_dose": 95, "full_effect": 5, "log_ic50": -7.0, "n_h": 1.0})
    y = y + rng.normal(0, 2.0, x.size)
    return cw.fit(m, x, y, fixed={"full_effect": 5.0})


def test_json_round_trip_is_exact(misra: cw.FitResult, dose: cw.FitResult) -> None:
    for r in (misra, dose):
        text = r.to_json()
        back = cw.FitResult.from_json(text)
        assert back.to_json() == text
        assert dict(back.values) == dict(r.values)
        # NaN standard errors of fixed parameters survive as NaN
        for k, v in r.stderr.items():
            assert (math.isnan(v) and math.isnan(back.stderr[k])) or v == back.stderr[k]
        np.testing.assert_array_equal(back.fitted, r.fitted)
        np.testing.assert_array_equal(back.jacobian, r.jacobian)
        assert back.model.formula == r.model.formula
        assert back.diagnostics == r.diagnostics
        np.testing.assert_array_equal(back.predict([1.0, 2.0]), r.predict([1.0, 2.0]))
        json.loads(text)  # strict JSON (allow_nan=False when written)


def test_callable_model_needs_the_function_back() -> None:
    x = np.linspace(0, 5, 12)
    y = 2.0 * x + 1.0 + np.sin(7 * x) * 0.01

    def line(x: np.ndarray, a: float, b: float) -> np.ndarray:
        return a * x + b

    r = cw.fit(line, x, y, start={"a": 1.0, "b": 0.0})
    text = r.to_json()
    with pytest.raises(ModelError, match="Python function"):
        cw.FitResult.from_json(text)
    back = cw.FitResult.from_json(text, model=line)
    assert dict(back.values) == dict(r.values)


def test_corrupted_json_gives_our_error(misra: cw.FitResult) -> None:
    d = misra.to_dict()
    del d["covariance"]
    with pytest.raises(ModelError, match="incomplete or corrupted"):
        cw.FitResult.from_dict(d)
    with pytest.raises(ModelError, match="not a saved curvewright fit result"):
        cw.FitResult.from_dict({"format": "something else"})


def test_result_is_immutable(misra: cw.FitResult) -> None:
    with pytest.raises(AttributeError):
        misra.ssr = 1.0  # type: ignore[misc]
    with pytest.raises(TypeError):
        misra.values["b1"] = 0.0  # type: ignore[index]
    for arr in (misra.fitted, misra.residuals, misra.covariance, misra.jacobian):
        with pytest.raises(ValueError, match="read-only"):
            arr[0] = 0.0


def test_wald_intervals_use_student_t(misra: cw.FitResult) -> None:
    # Reference: scipy.stats.t.ppf(0.975, dof) * stderr (common practice for Wald intervals).
    ci = misra.ci(0.95)
    q = scipy.stats.t.ppf(0.975, misra.dof)
    for n in ("b1", "b2"):
        assert ci.loc[n, "lower"] == pytest.approx(misra.values[n] - q * misra.stderr[n])
        assert ci.loc[n, "upper"] == pytest.approx(misra.values[n] + q * misra.stderr[n])
    with pytest.raises(cw.ParameterError, match="level"):
        misra.ci(95)


def test_statistics_are_consistent(misra: cw.FitResult) -> None:
    # Definitions (common practice): R^2 = 1 - SSR/SST; AICc = n ln(SSR/n) + 2K + 2K(K+1)/(n-K-1)
    # with K = free parameters + 1; BIC = n ln(SSR/n) + K ln n.
    y = misra.y
    assert misra.r2 == pytest.approx(1 - misra.ssr / np.sum((y - y.mean()) ** 2), rel=1e-12)
    n, k = misra.n, misra.nfree + 1
    assert misra.aicc == pytest.approx(
        n * math.log(misra.ssr / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1), rel=1e-12
    )
    assert misra.bic == pytest.approx(n * math.log(misra.ssr / n) + k * math.log(n), rel=1e-12)
    np.testing.assert_allclose(misra.residuals, y - misra.fitted)
    assert misra.sigma_resid == pytest.approx(math.sqrt(misra.ssr / misra.dof))
    corr = misra.correlation
    assert corr.shape == (2, 2) and corr[0, 1] == pytest.approx(corr[1, 0])
    assert misra.lmfit_result is not None


def test_tables_and_derived_quantities(dose: cw.FitResult) -> None:
    df = dose.to_frame()
    assert list(df.index) == ["zero_dose", "full_effect", "log_ic50", "n_h"]
    assert bool(df.loc["full_effect", "fixed"]) and df.loc["full_effect", "status"] == "fixed"
    der = dose.derived()
    # IC50 = 10**log_ic50 (common practice for a midpoint fitted on a log scale).
    assert der.loc["ic50", "value"] == pytest.approx(10 ** dose.values["log_ic50"], rel=1e-12)
    # delta method: se(10**u) = ln(10) * 10**u * se(u)
    expected_se = math.log(10) * 10 ** dose.values["log_ic50"] * dose.stderr["log_ic50"]
    assert der.loc["ic50", "stderr"] == pytest.approx(expected_se, rel=1e-9)
    assert bool(der.loc["ic50", "in_data_range"])
    # amplitude = zero_dose - full_effect: with full_effect fixed its error is zero_dose's
    assert der.loc["amplitude", "value"] == pytest.approx(dose.values["zero_dose"] - 5.0)
    assert der.loc["amplitude", "stderr"] == pytest.approx(dose.stderr["zero_dose"], rel=1e-12)


def test_summary_and_html_carry_the_caution(dose: cw.FitResult) -> None:
    text = dose.summary()
    assert cw.CAUTION in text
    assert "log_ic50" in text and "held fixed" in text
    html = dose._repr_html_()
    assert "log_ic50" in html and "<table" in html
    assert "not for clinical or dosing decisions" in html


def test_unconverged_result_says_so() -> None:
    p = read("Misra1a")
    r = cw.fit("b1*(1-exp(-b2*x))", p.x, p.y, start={"b1": 500.0, "b2": 1e-4}, max_evaluations=3)
    assert not r.success
    assert "not converged" in r.summary().lower() or "did not converge" in r.summary()
    assert any(d.severity == "error" for d in r.diagnostics)


def test_ic50_interval_is_the_log_interval_transformed(dose: cw.FitResult) -> None:
    # Common practice for a midpoint fitted as log10: the IC50 interval is 10**(interval of
    # log_ic50), asymmetric about the IC50 and always positive.
    der = dose.derived(0.95)
    ci = dose.ci(0.95)
    assert der.loc["ic50", "lower"] == pytest.approx(10 ** ci.loc["log_ic50", "lower"], rel=1e-12)
    assert der.loc["ic50", "upper"] == pytest.approx(10 ** ci.loc["log_ic50", "upper"], rel=1e-12)
    v = der.loc["ic50", "value"]
    assert v - der.loc["ic50", "lower"] < der.loc["ic50", "upper"] - v


def test_a_result_saved_in_the_old_format_is_refused_by_name(dose: cw.FitResult) -> None:
    # Format 1 wrote other model, parameter and option names (e.g. a logIC50 midpoint and an
    # "nfev" count); it is refused with a message naming the format, not half read.
    old = dose.to_dict()
    old["version"] = 1
    old["nfev"] = old.pop("evaluations")
    old["values"] = {"bottom": 5.0, "top": 95.0, "logIC50": -7.0, "hill": 1.0}
    with pytest.raises(ModelError, match=r"saved in curvewright result format 1.*[Rr]efit"):
        cw.FitResult.from_dict(old)
    with pytest.raises(ModelError, match=r"saved in curvewright result format 1"):
        cw.FitResult.from_json(json.dumps(old))
    # a format from a later version, or none at all, is refused too
    newer = {**dose.to_dict(), "version": 4}
    with pytest.raises(ModelError, match=r"format 4; this version reads formats 2 and 3 only"):
        cw.FitResult.from_dict(newer)
    unversioned = {k: v for k, v in dose.to_dict().items() if k != "version"}
    with pytest.raises(ModelError, match=r"format None; this version reads formats 2 and 3 only"):
        cw.FitResult.from_dict(unversioned)
    assert dose.to_dict()["version"] == 3
    # format 3 without its records is damaged, not format 2
    damaged = {k: v for k, v in dose.to_dict().items() if k != "parameters"}
    with pytest.raises(ModelError, match="incomplete or corrupted"):
        cw.FitResult.from_dict(damaged)


def test_diagnostics_are_data_not_text() -> None:
    # A bound the data push against, and two parameters the data cannot tell apart: the
    # findings name their parameters and numbers in fields, and survive the JSON round trip.
    x = np.array([0.0, 1, 2, 3, 4, 6, 8, 12])
    y = np.array([9.8, 7.4, 5.7, 4.4, 3.5, 2.4, 1.8, 1.3])
    r = cw.fit("base + amp*exp(-k*x)", x, y, bounds={"k": (0.0, 0.2)})
    at = [d for d in r.diagnostics if d.code == "at_bound"]
    assert [d.params for d in at] == [("k",)]
    assert at[0].extra == {"side": "upper", "bound": 0.2}
    assert r.at_bound == {"k": "upper"}
    back = FitResult.from_json(r.to_json())
    assert back.diagnostics == r.diagnostics
    assert {d.params for d in r.diagnostics if d.code == "not_identified"} == {("base",)}
    # A short window of a slow decay: every pair trades off, each finding names its pair.
    x = np.linspace(0, 0.3, 8)
    wiggle = np.array([0.01, -0.02, 0.015, 0, -0.01, 0.02, -0.015, 0.005])
    r = cw.fit("base + amp*exp(-k*x)", x, 5 + 3 * np.exp(-0.5 * x) + wiggle)
    pairs = {d.params: d.extra["r"] for d in r.diagnostics if d.code == "high_correlation"}
    assert set(pairs) == {("base", "amp"), ("base", "k"), ("amp", "k")}
    assert all(abs(v) > 0.99 for v in pairs.values())
    assert FitResult.from_json(r.to_json()).diagnostics == r.diagnostics
