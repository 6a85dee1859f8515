"""The widget's pure JSON helpers (src/curvewright/widget/_state.py): parameter settings,
the data view with its thinning, axis choice, curve samples and the fitted-state JSON.

References: residuals and intervals of ``fitted_json`` are recomputed here from the textbook
formulas (y - f(x); value ± t(0.975, dof) * SE with scipy's t quantile); the thinning is checked
against an independent cell count; the data are synthetic with a known truth.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
from scipy import stats as sps

import curvewright as cw
from curvewright.parameters import Parameter, move_inside
from curvewright.widget import _state


def hill_inhibition(
    x: Any, full_effect: float, zero_dose: float, log_ic50: float, n_h: float
) -> Any:
    x = np.asarray(x, dtype=float)
    return full_effect + (zero_dose - full_effect) / (1.0 + (x / 10.0**log_ic50) ** n_h)


@pytest.fixture
def model() -> cw.Model:
    return cw.catalog()["inhibition_4pl"]


# ------------------------------------------------------------------------------ settings
def test_parse_params_reads_the_records_json_and_checks_it(model: cw.Model) -> None:
    raw = [
        {"name": "full_effect", "value": 1, "lower": None, "upper": None, "fixed": False},
        {"name": "zero_dose", "value": 99.5, "lower": 50, "upper": 150, "fixed": True},
        {"name": "log_ic50", "value": -7, "lower": None, "upper": None, "fixed": False},
        {"name": "n_h", "value": 1.2, "lower": 0, "upper": None, "fixed": False},
    ]
    out = _state.parse_params(model, raw)
    assert out["full_effect"] == Parameter("full_effect", 1.0)
    assert out["zero_dose"].fixed is True and out["zero_dose"].lower == 50.0
    # the trait carries exactly the record's JSON (params_spec.json), in the model's order
    js = _state.params_json(out)
    assert [r["name"] for r in js] == list(model.param_names)
    assert next(r for r in js if r["name"] == "full_effect") == {
        "name": "full_effect",
        "value": 1.0,
        "lower": None,
        "upper": None,
        "fixed": False,
        "link": None,
        "scope": "shared",
    }
    assert _state.params_json(out) == out.to_json()


def _with(raw: list[dict[str, Any]], which: str, **change: Any) -> list[dict[str, Any]]:
    return [{**r, **change} if r["name"] == which else r for r in raw]


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"value": 1.0, "lower": 2.0, "upper": 1.0}, "above upper"),
        ({"value": -1.0}, "positive"),
        ({"value": "1"}, "number"),
        ({"value": math.nan}, "finite"),
        ({"fixed": "yes"}, "true or false"),
        ({"scope": "each"}, "scope must be one of"),
        ({"colour": "red"}, "unknown field"),
        ({"name": "n_hh"}, "Did you mean"),
    ],
)
def test_parse_params_rejects(model: cw.Model, change: dict[str, Any], message: str) -> None:
    base = _state.params_json(_state.start_parameters(model)[0])
    with pytest.raises(cw.ParameterError, match=message):
        _state.parse_params(model, _with(base, "n_h", **change))


def test_parse_params_needs_every_parameter(model: cw.Model) -> None:
    base = _state.params_json(_state.start_parameters(model)[0])
    with pytest.raises(cw.ParameterError, match=r"settings for \['zero_dose'\] are missing"):
        _state.parse_params(model, [r for r in base if r["name"] != "zero_dose"])
    with pytest.raises(cw.ParameterError, match="must be a list of parameter records"):
        _state.parse_params(model, {r["name"]: r for r in base})
    with pytest.raises(cw.ParameterError, match="must be a mapping"):
        _state.parse_params(model, [1, 2])


def test_start_parameters_moves_a_start_inside_by_the_one_rule_and_says_so(
    model: cw.Model,
) -> None:
    s, notes = _state.start_parameters(model, {"n_h": -3.0, "zero_dose": math.nan})
    p = model.param("n_h")
    # n_h is positive: its lower bound is 0, and the one rule (parameters.move_inside) decides
    assert s["n_h"].value == move_inside(p.lower, p.upper, -3.0) and s["n_h"].value > 0
    assert s["zero_dose"].value == model.param("zero_dose").value
    assert len(notes) == 1 and "'n_h' (-3) lay outside its bounds" in notes[0]
    assert _state.start_parameters(model)[1] == ()


# ---------------------------------------------------------------------------------- axes
@pytest.mark.parametrize(
    ("x", "scale"),
    [
        ([0.0, 1e-9, 1e-8, 1e-7, 1e-6], "log"),  # zero-dose controls do not veto a log axis
        ([1.0, 2.0, 50.0], "linear"),  # under two decades
        ([-1.0, 1e-3, 10.0], "linear"),  # a negative x cannot sit on a log axis
        ([0.0, 5.0], "linear"),
    ],
)
def test_auto_x_scale(x: list[float], scale: str) -> None:
    assert _state.auto_x_scale(np.asarray(x)) == scale


def test_check_scale() -> None:
    assert _state.check_scale("log", "x_scale") == "log"
    with pytest.raises(cw.DataError, match="y_scale must be 'linear' or 'log'"):
        _state.check_scale("Log", "y_scale")


def test_sample_x_covers_the_data_in_decades_on_a_log_axis() -> None:
    xs = _state.sample_x(np.array([0.0, 1e-9, 1e-5]), "log", 50)
    steps = np.diff(np.log10(xs))
    np.testing.assert_allclose(steps, steps[0])
    assert xs[0] < 1e-9 and xs[-1] > 1e-5
    lin = _state.sample_x(np.array([2.0, 4.0]), "linear", 5)
    np.testing.assert_allclose(np.diff(lin), np.diff(lin)[0])
    assert lin[0] < 2.0 < 4.0 < lin[-1]


# ------------------------------------------------------------------------------ data view
def test_data_view_lists_rows_it_cannot_draw(model: cw.Model) -> None:
    ds = cw.make_dataset([0.0, np.nan, 1e-8, 1e-7, -1.0], [100, 99, 90, 50, 101])
    view = _state.data_view(ds, [3], "log", "linear", model)
    # Input row 1 (NaN) is dropped; the others keep their input-row numbers.
    assert view["row"] == [0, 2, 3, 4]
    assert view["excluded"] == [3]
    assert view["off_axis"] == [0, 4]  # x <= 0 on a log x axis
    assert view["outside_domain"] == [4]  # the model needs x >= 0
    assert view["decimated"] is False and view["n_total"] == 4
    assert _state.data_view(ds, [], "linear", "linear", model)["off_axis"] == []


def test_check_rows() -> None:
    ds = cw.make_dataset([1.0, np.nan, 3.0], [1.0, 2.0, 3.0])
    assert _state.check_rows(ds, None, "exclude") == []
    assert _state.check_rows(ds, np.array([2, 0, 2]), "exclude") == [0, 2]
    assert _state.check_rows(ds, [True, False, True], "exclude") == [0, 2]
    with pytest.raises(cw.DataError, match="dropped for missing"):
        _state.check_rows(ds, [1], "exclude")
    with pytest.raises(cw.DataError, match="integers"):
        _state.check_rows(ds, [0.5], "exclude")
    with pytest.raises(cw.DataError, match="one entry per input row"):
        _state.check_rows(ds, [True, False], "exclude")


def test_thinning_keeps_every_occupied_cell_extremes_and_excluded_points() -> None:
    rng = np.random.default_rng(7)
    n = 50_000
    x = rng.uniform(0.0, 1.0, n)
    y = np.sin(6 * x) + rng.normal(0.0, 0.2, n)
    keep = np.zeros(n, dtype=bool)
    keep[[5, 17, 40_000]] = True  # excluded points must stay visible
    budget = 2_000
    pos = _state.decimate_rows(x, y, keep, budget)
    assert pos.size < n / 5 and pos.size <= budget * 1.2
    assert {5, 17, 40_000} <= set(pos.tolist())
    assert {int(np.argmin(y)), int(np.argmax(y))} <= set(pos.tolist())
    # Independent cell count: every cell of the same grid that holds a point holds a kept one.
    cols = max(1, int(math.sqrt(budget * 0.9 * 1.6)))
    rows = max(1, int(budget * 0.9 / cols))
    hist_all, xe, ye = np.histogram2d(x, y, bins=[cols, rows])
    hist_kept, _, _ = np.histogram2d(x[pos], y[pos], bins=[xe, ye])
    assert np.all((hist_all > 0) <= (hist_kept > 0))


# -------------------------------------------------------------------------------- fitted
def test_fitted_json_matches_textbook_formulas(model: cw.Model) -> None:
    rng = np.random.default_rng(11)
    x = np.repeat([0.0, 1e-9, 1e-8, 1e-7, 1e-6, 1e-5], 3)
    truth = {"full_effect": 3.0, "zero_dose": 97.0, "log_ic50": -7.3, "n_h": 0.9}
    y = hill_inhibition(x, **truth) + rng.normal(0.0, 2.0, x.size)
    r = cw.fit(model, x, y, exclude=[4], fixed={"full_effect": 3.0})
    ds = cw.make_dataset(x, y)
    view = _state.data_view(ds, [4], "log", "linear", model)
    f = _state.fitted_json(r, view, "log")
    # Residual of every drawn point, the excluded one included: y - f(x).
    expected = y - hill_inhibition(x, **r.values)
    np.testing.assert_allclose(f["residuals"], expected, rtol=1e-12, atol=1e-12)
    # Wald intervals: value ± t(0.975, dof) * SE (common practice), t from scipy.
    q = sps.t.ppf(0.975, r.dof)
    for n in ("zero_dose", "log_ic50", "n_h"):
        assert f["ci_low"][n] == pytest.approx(r.values[n] - q * r.stderr[n], rel=1e-12)
        assert f["ci_high"][n] == pytest.approx(r.values[n] + q * r.stderr[n], rel=1e-12)
    assert f["stderr"]["full_effect"] is None and f["flags"]["full_effect"] == ["fixed"]
    assert f["excluded"] == [4] and f["stats"]["n"] == x.size - 1
    assert f["caution"] == cw.CAUTION
    ic50 = next(d for d in f["derived"] if d["name"] == "ic50")
    assert ic50["value"] == pytest.approx(10 ** r.values["log_ic50"], rel=1e-12)
    assert ic50["extrapolated"] is False
    # The curve samples are the model at the sampled x.
    cx = np.asarray(f["curve"]["x"])
    np.testing.assert_allclose(f["curve"]["y"], hill_inhibition(cx, **r.values), rtol=1e-12)


def test_fitted_json_flags_a_parameter_at_its_bound(model: cw.Model) -> None:
    rng = np.random.default_rng(2)
    x = np.repeat([1e-9, 1e-8, 1e-7, 1e-6, 1e-5], 3)
    y = hill_inhibition(x, 3.0, 97.0, -7.0, 1.2) + rng.normal(0.0, 1.0, x.size)
    r = cw.fit(model, x, y, bounds={"n_h": (0.1, 0.8)})
    f = _state.fitted_json(r, _state.data_view(cw.make_dataset(x, y), [], "log", "linear"), "log")
    assert "at_upper" in f["flags"]["n_h"]
