"""The widget's judging tools, driven headlessly as the page drives them: the band and
residual toggles, and the polynomial degree table with picking a degree from it.

References: the bands of a straight-line fit are checked against statsmodels OLS
(``get_prediction().summary_frame``: ``mean_ci_*`` is the confidence band, ``obs_ci_*`` the
prediction band); a nonlinear fit's bands against ``FitResult.confidence_band`` /
``prediction_band`` on the same grid (the stats layer, itself checked against references in
tests/stats/); the degree table against ``curvewright.select_degree`` on the included points and
one F test against statsmodels' ``compare_f_test``. Data are synthetic with a known truth
generated here (invented, for the test only).
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import curvewright as cw
from curvewright.widget import CurveBench

# Truth of the synthetic inhibition assay (4PL, falling from 96 with no inhibitor to 4).
TRUTH = {"full_effect": 4.0, "zero_dose": 96.0, "log_ic50": -6.7, "n_h": 1.1}
DOSES = [1e-9, 1e-8, 3e-8, 1e-7, 3e-7, 1e-6, 1e-5, 1e-4]


def assay(seed: int = 5, sd: float = 2.0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.repeat(DOSES, 3)
    # The usual 4PL with the midpoint in log10 units (common practice).
    y = TRUTH["full_effect"] + (TRUTH["zero_dose"] - TRUTH["full_effect"]) / (
        1.0 + (x / 10.0 ** TRUTH["log_ic50"]) ** TRUTH["n_h"]
    )
    return pd.DataFrame({"conc": x, "response": y + rng.normal(0.0, sd, x.size)})


def curved(seed: int = 11, n: int = 30) -> tuple[np.ndarray, np.ndarray]:
    """A gently curved calibration-like trend: y = 1 + 0.5 x - 0.08 x**2 + noise (SD 0.2)."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 10.0, n)
    return x, 1.0 + 0.5 * x - 0.08 * x**2 + rng.normal(0.0, 0.2, n)


def page_sets(widget: CurveBench, **state: Any) -> None:
    """What ipywidgets does with a state update from the page."""
    widget.set_state(state)


def page_sends(widget: CurveBench, content: dict[str, Any]) -> None:
    """What ipywidgets does with a custom message from the page."""
    widget._handle_custom_msg(content, [])


def band_arrays(bands: dict[str, Any], kind: str) -> tuple[np.ndarray, np.ndarray]:
    b = bands[kind]
    lo = np.array([np.nan if v is None else v for v in b["lower"]], dtype=float)
    hi = np.array([np.nan if v is None else v for v in b["upper"]], dtype=float)
    return lo, hi


# ------------------------------------------------------------------------------ bands
def test_toggles_draw_the_fits_bands_on_the_plot_grid_log_spaced() -> None:
    df = assay()
    w = CurveBench(df, x="conc", y="response", model="inhibition_4pl")
    assert w.x_scale == "log"
    assert w.show_confidence_band is False and w.show_prediction_band is False
    assert w.show_residuals is True
    r = w.fit()
    assert r is not None and r.success
    assert w.bands_json is None  # both toggles off: nothing to draw, nothing sent

    page_sets(w, show_confidence_band=True)
    b = w.bands_json
    assert b is not None and b["prediction"] is None and b["note"] == ""
    assert b["level"] == 0.95 and b["model_name"] == "inhibition_4pl"
    xs = np.array(b["x"], dtype=float)
    # The grid of the fitted curve: evenly spaced in decades on the log axis, across the data.
    np.testing.assert_allclose(np.diff(np.log10(xs)), np.diff(np.log10(xs))[0], rtol=1e-9)
    assert xs[0] < min(DOSES) and xs[-1] > max(DOSES)
    assert b["x"] == w.fitted["curve"]["x"]
    ref = r.confidence_band(xs, 0.95)
    lo, hi = band_arrays(b, "confidence")
    np.testing.assert_allclose(lo, ref["lower"].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(hi, ref["upper"].to_numpy(), rtol=1e-12)

    page_sets(w, show_prediction_band=True)
    b = w.bands_json
    ref_p = r.prediction_band(xs, 0.95)
    lo_p, hi_p = band_arrays(b, "prediction")
    np.testing.assert_allclose(lo_p, ref_p["lower"].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(hi_p, ref_p["upper"].to_numpy(), rtol=1e-12)
    # A new observation varies more than the curve: the prediction band holds the other.
    assert np.all(lo_p < lo) and np.all(hi_p > hi)

    # The same numbers from Python, without the page.
    frame = w.bands()
    np.testing.assert_allclose(frame["x"].to_numpy(), xs, rtol=0)
    np.testing.assert_allclose(frame["confidence_lower"].to_numpy(), lo, rtol=1e-12)
    np.testing.assert_allclose(frame["prediction_upper"].to_numpy(), hi_p, rtol=1e-12)

    # A linear x axis gets a linear grid; switching the toggles off sends nothing again.
    w.x_scale = "linear"
    xs_lin = np.array(w.bands_json["x"], dtype=float)
    np.testing.assert_allclose(np.diff(xs_lin), np.diff(xs_lin)[0], rtol=1e-9)
    w.show_confidence_band = False
    assert w.bands_json is not None and w.bands_json["confidence"] is None
    page_sets(w, show_prediction_band=False)
    assert w.bands_json is None


def test_straight_line_bands_match_statsmodels_ols() -> None:
    x, y = curved()
    y = 2.0 + 0.3 * x + np.random.default_rng(2).normal(0.0, 0.4, x.size)
    w = CurveBench(x, y, model="straight_line")
    w.fit()
    w.show_confidence_band = True
    w.show_prediction_band = True
    b = w.bands_json
    xs = np.array(b["x"], dtype=float)
    # Reference: statsmodels OLS; mean_ci is the confidence band, obs_ci the prediction band.
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    frame = ols.get_prediction(sm.add_constant(xs)).summary_frame(alpha=0.05)
    lo, hi = band_arrays(b, "confidence")
    np.testing.assert_allclose(lo, frame["mean_ci_lower"].to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(hi, frame["mean_ci_upper"].to_numpy(), rtol=1e-9)
    lo_p, hi_p = band_arrays(b, "prediction")
    np.testing.assert_allclose(lo_p, frame["obs_ci_lower"].to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(hi_p, frame["obs_ci_upper"].to_numpy(), rtol=1e-9)


def test_weighted_straight_line_bands_match_statsmodels_wls() -> None:
    rng = np.random.default_rng(8)
    x = np.linspace(1.0, 20.0, 24)
    sigma = 0.1 + 0.03 * x
    y = 0.5 + 0.8 * x + rng.normal(0.0, sigma)
    w = CurveBench(x, y, model="straight_line", sigma=sigma)
    w.fit()
    page_sets(w, show_confidence_band=True, show_prediction_band=True)
    b = w.bands_json
    xs = np.array(b["x"], dtype=float)
    # Reference: statsmodels WLS with weights 1/sigma**2 (sigma relative, scaled by the residual
    # variance). A new observation's variance is scale / weight; its sigma at a grid x is the
    # data's sigma interpolated linearly in x, held beyond the ends (prediction_band's rule).
    wls = sm.WLS(y, sm.add_constant(x), weights=1.0 / sigma**2).fit()
    sd_new = np.interp(xs, x, sigma)
    frame = wls.get_prediction(sm.add_constant(xs), weights=1.0 / sd_new**2).summary_frame(
        alpha=0.05
    )
    lo, hi = band_arrays(b, "confidence")
    np.testing.assert_allclose(lo, frame["mean_ci_lower"].to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(hi, frame["mean_ci_upper"].to_numpy(), rtol=1e-9)
    lo_p, hi_p = band_arrays(b, "prediction")
    np.testing.assert_allclose(lo_p, frame["obs_ci_lower"].to_numpy(), rtol=1e-9)
    np.testing.assert_allclose(hi_p, frame["obs_ci_upper"].to_numpy(), rtol=1e-9)


def test_callable_model_bands_equal_the_results() -> None:
    def decay(x: Any, a: float, k: float) -> Any:
        return a * np.exp(-k * np.asarray(x))

    rng = np.random.default_rng(4)
    x = np.linspace(0.1, 10.0, 25)
    y = decay(x, 5.0, 0.4) + rng.normal(0.0, 0.1, x.size)
    w = CurveBench(x, y, model=decay)
    r = w.fit()
    assert r is not None and r.success
    w.show_prediction_band = True
    b = w.bands_json
    xs = np.array(b["x"], dtype=float)
    lo_p, hi_p = band_arrays(b, "prediction")
    ref = r.prediction_band(xs)
    np.testing.assert_allclose(lo_p, ref["lower"].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(hi_p, ref["upper"].to_numpy(), rtol=1e-12)


def test_bands_without_a_fit_or_for_a_robust_fit_say_why() -> None:
    df = assay()
    w = CurveBench(
        df, x="conc", y="response", model="inhibition_4pl", fit_options={"loss": "pseudo_huber"}
    )
    w.show_confidence_band = True
    assert w.bands_json is None  # no fit of this model yet
    with pytest.raises(cw.FitError, match="no fit yet"):
        w.bands()
    r = w.fit()
    assert r is not None and r.success
    b = w.bands_json
    assert b is not None and b["confidence"] is None
    assert "robust" in b["note"] and b["note"].startswith("No bands")
    with pytest.raises(cw.FitError, match="robust"):
        w.bands()


def test_no_bands_for_a_fit_that_did_not_converge() -> None:
    df = assay()
    w = CurveBench(
        df, x="conc", y="response", model="inhibition_4pl", fit_options={"max_evaluations": 3}
    )
    r = w.fit()
    assert r is not None and not r.success  # stopped by the evaluation limit
    page_sets(w, show_confidence_band=True)
    b = w.bands_json
    assert b["confidence"] is None and b["note"] == "No bands: the fit did not converge."
    with pytest.raises(cw.FitError, match="did not converge"):
        w.bands()


def test_bad_toggle_values_raise_and_change_nothing() -> None:
    x, y = curved()
    w = CurveBench(x, y, model="polynomial_2")
    w.fit()
    w.show_confidence_band = True
    before = json.dumps(w.bands_json)
    with pytest.raises(cw.DataError, match="show_confidence_band must be True or False"):
        w.show_confidence_band = "no"
    with pytest.raises(cw.DataError, match="show_residuals must be True or False"):
        w.show_residuals = 1
    assert w.show_confidence_band is True and w.show_residuals is True
    assert json.dumps(w.bands_json) == before
    with pytest.raises(cw.ParameterError, match="level"):
        w.bands(level=95)


def test_snapshot_keeps_the_toggles_and_restore_checks_them() -> None:
    x, y = curved()
    w = CurveBench(x, y, model="straight_line")
    page_sets(w, show_prediction_band=True, show_residuals=False)
    snap = json.loads(json.dumps(w.snapshot()))
    assert snap["show_prediction_band"] is True and snap["show_residuals"] is False
    assert snap["show_confidence_band"] is False

    other = CurveBench(x, y, model="straight_line")
    other.restore(snap)
    assert other.show_prediction_band is True and other.show_residuals is False
    assert other.snapshot() == w.snapshot()

    before = json.dumps(other.snapshot(), sort_keys=True)
    with pytest.raises(cw.DataError, match="show_residuals must be True or False"):
        other.restore({**snap, "show_residuals": "off", "x_scale": "log", "excluded": [2]})
    assert json.dumps(other.snapshot(), sort_keys=True) == before
    # A snapshot from before the toggles existed leaves them as they are.
    old = {k: v for k, v in snap.items() if not k.startswith("show_")}
    other.show_confidence_band = True
    other.restore(old)
    assert other.show_confidence_band is True and other.show_residuals is False


# --------------------------------------------------------------------- degree table
def test_degree_table_equals_select_degree_on_the_included_points() -> None:
    x, y = curved()
    w = CurveBench(x, y, model="straight_line")
    w.exclude([4, 17])
    keep = np.setdiff1d(np.arange(x.size), [4, 17])
    ref = cw.select_degree(x[keep], y[keep], max_degree=4)

    t = w.degree_table_json
    assert t is not None and "error" not in t
    assert t["current"] == 1 and t["max_degree"] == 4 and t["n"] == keep.size
    assert t["suggested"] == ref.suggested == 2  # the truth is quadratic
    assert t["reasoning"] == ref.reasoning and t["alpha"] == 0.05
    assert t["weighting"] == "none" and t["warnings"] == []
    assert [row["degree"] for row in t["rows"]] == [1, 2, 3, 4]
    for row in t["rows"]:
        want = ref.table.loc[row["degree"]]
        for col in ("F", "p", "aicc", "bic", "r2", "r2_adj", "ssr"):
            assert row[col] == pytest.approx(float(want[col]), rel=1e-12), col
        assert (row["df_num"], row["df_den"]) == (int(want["df_num"]), int(want["df_den"]))

    # Reference: statsmodels' extra-sum-of-squares F test of degree 2 against degree 1.
    small = sm.OLS(y[keep], np.vander(x[keep], 2, increasing=True)).fit()
    big = sm.OLS(y[keep], np.vander(x[keep], 3, increasing=True)).fit()
    f_sm, p_sm, _ = big.compare_f_test(small)
    assert t["rows"][1]["F"] == pytest.approx(f_sm, rel=1e-9)
    assert t["rows"][1]["p"] == pytest.approx(p_sm, rel=1e-6)

    # Python's own view is the same selection.
    sel = w.degree_table()
    pd.testing.assert_frame_equal(sel.table, ref.table)
    assert w.degree_table(max_degree=2).table.index.tolist() == [1, 2]

    # Re-including a point recomputes the table on the new set of points.
    w.include([4])
    keep2 = np.setdiff1d(np.arange(x.size), [17])
    ref2 = cw.select_degree(x[keep2], y[keep2], max_degree=4)
    assert w.degree_table_json["n"] == keep2.size
    assert w.degree_table_json["rows"][2]["F"] == pytest.approx(
        float(ref2.table.loc[3, "F"]), rel=1e-12
    )


def test_degree_table_is_weighted_like_the_fit() -> None:
    x, y = curved()
    sigma = 0.1 + 0.02 * x
    w = CurveBench(x, y, model="polynomial_2", sigma=sigma)
    ref = cw.select_degree(x, y, max_degree=4, weights=1.0 / sigma**2)
    t = w.degree_table_json
    assert t["weighting"] == "sigma" and t["current"] == 2
    got = np.array([row["F"] for row in t["rows"]])
    np.testing.assert_allclose(got, ref.table["F"].to_numpy(), rtol=1e-12)


def test_a_higher_degree_model_gets_a_table_reaching_past_it() -> None:
    x, y = curved(n=40)
    w = CurveBench(x, y, model="straight_line")
    w.use_degree(5)
    assert w.model_name == "polynomial_5" and "polynomial_5" in w.model_names
    t = w.degree_table_json
    assert t["current"] == 5 and t["max_degree"] == 6


def test_a_picked_degree_survives_a_snapshot() -> None:
    x, y = curved(n=40)
    w = CurveBench(x, y, model="straight_line")
    w.use_degree(5)
    snap = json.loads(json.dumps(w.snapshot()))
    other = CurveBench(x, y, model="straight_line")
    other.restore(snap)  # polynomial_5 is not in the chooser: rebuilt from the snapshot
    assert other.model_name == "polynomial_5" and other.model.polynomial_degree == 5
    assert other.degree_table_json == w.degree_table_json


def test_picking_a_degree_on_the_page_switches_the_model() -> None:
    x, y = curved()
    w = CurveBench(x, y, model="straight_line")
    page_sends(w, {"type": "use_degree", "degree": 2})
    assert w.model_name == "polynomial_2" and w.error == ""
    assert w.degree_table_json["current"] == 2
    w.fit()
    page_sends(w, {"type": "use_degree", "degree": 3})
    assert w.model_name == "polynomial_3"
    page_sends(w, {"type": "use_degree", "degree": 1})
    assert w.model_name == "straight_line"
    # Back to degree 2: its parameters and fit come back with it.
    w.use_degree(2)
    assert w.fitted is not None and w.fitted["model_name"] == "polynomial_2"


@pytest.mark.parametrize(
    ("degree", "message"),
    [(0, "from 1 to 10"), (11, "from 1 to 10"), ("two", "whole number"), (True, "whole number")],
)
def test_bad_degree_picks_are_shown_and_change_nothing(degree: Any, message: str) -> None:
    x, y = curved()
    w = CurveBench(x, y, model="polynomial_2")
    before = json.dumps(w.snapshot(), sort_keys=True)
    page_sends(w, {"type": "use_degree", "degree": degree})
    assert message in w.error
    assert json.dumps(w.snapshot(), sort_keys=True) == before
    with pytest.raises(cw.ModelError, match=message):
        w.use_degree(degree)
    assert w.model_name == "polynomial_2"


def test_no_table_for_other_models_and_a_reason_for_too_few_points() -> None:
    df = assay()
    w = CurveBench(df, x="conc", y="response", model="inhibition_4pl")
    assert w.degree_table_json is None
    with pytest.raises(cw.ModelError, match="for polynomial models"):
        w.degree_table()
    w.set_model("straight_line")
    assert w.degree_table_json is not None and "rows" in w.degree_table_json
    w.set_model("inhibition_4pl")
    assert w.degree_table_json is None

    few = CurveBench([1.0, 2.0, 3.0, 4.0], [1.0, 2.1, 2.9, 4.2], model="straight_line")
    few.exclude([0, 1])
    t = few.degree_table_json
    assert t["current"] == 1 and "needs at least 3 points" in t["error"]
    with pytest.raises(cw.DataError, match="needs at least 3 points"):
        few.degree_table()


def test_large_data_degree_table_waits_to_be_asked_for(monkeypatch: pytest.MonkeyPatch) -> None:
    from curvewright.widget import _widget

    # The threshold lowered so a small set stands in for 100k points (same code path).
    monkeypatch.setattr(_widget, "_DEGREE_TABLE_AUTO_POINTS", 20)
    x, y = curved()
    w = CurveBench(x, y, model="straight_line")
    assert w.degree_table_json == {"current": 1, "deferred": True, "n": 30}
    page_sends(w, {"type": "degree_table"})
    ref = cw.select_degree(x, y, max_degree=4)
    t = w.degree_table_json
    assert t["suggested"] == ref.suggested and t["n"] == 30
    assert [r["F"] for r in t["rows"]] == pytest.approx(ref.table["F"].tolist(), rel=1e-12)
    # Kept while the points stay the same (a fit, an axis change) ...
    w.fit()
    w.y_scale = "log"
    assert w.degree_table_json is t
    # ... and asked for again once they change.
    w.exclude([3])
    assert w.degree_table_json == {"current": 1, "deferred": True, "n": 29}
    # Python's own call always computes.
    assert w.degree_table().table["F"].tolist() == pytest.approx(
        cw.select_degree(np.delete(x, 3), np.delete(y, 3), max_degree=4).table["F"].tolist(),
        rel=1e-12,
    )
