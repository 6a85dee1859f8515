"""The widget class driven headlessly, as the page drives it: trait updates through
``set_state`` and custom messages through ``_handle_custom_msg``; plus its Python API.

References: fits are checked against ``scipy.optimize.curve_fit`` on the same reduced problem
(fixed parameter substituted, excluded points removed); the data are synthetic with a known
truth generated here (invented, for the test only).
"""

from __future__ import annotations

import asyncio
import json
import math
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import curve_fit

import curvewright as cw
from curvewright.parameters import Parameter, move_inside
from curvewright.widget import CurveBench
from curvewright.widget._state import MAX_POINTS

# Truth of the synthetic inhibition assay (4PL, falling from 96 with no inhibitor to 4).
TRUTH = {"full_effect": 4.0, "zero_dose": 96.0, "log_ic50": -6.7, "n_h": 1.1}
DOSES = [0.0, 1e-9, 1e-8, 3e-8, 1e-7, 3e-7, 1e-6, 1e-5, 1e-4]


def four_pl(x: Any, full_effect: float, zero_dose: float, log_ic50: float, n_h: float) -> Any:
    # Written independently of the catalog's formula: the usual 4PL with the midpoint in log10
    # units (common practice), falling from zero_dose (no inhibitor) to full_effect.
    x = np.asarray(x, dtype=float)
    return full_effect + (zero_dose - full_effect) / (1.0 + (x / 10.0**log_ic50) ** n_h)


def assay(seed: int = 3, sd: float = 2.0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.repeat(DOSES, 3)
    y = four_pl(x, **TRUTH) + rng.normal(0.0, sd, x.size)
    return pd.DataFrame({"conc": x, "response": y})


@pytest.fixture
def df() -> pd.DataFrame:
    return assay()


@pytest.fixture
def w(df: pd.DataFrame) -> CurveBench:
    return CurveBench(df, x="conc", y="response", model="inhibition_4pl")


def page_sets(widget: CurveBench, **state: Any) -> None:
    """What ipywidgets does with a state update from the page."""
    widget.set_state(state)


def page_sends(widget: CurveBench, content: dict[str, Any]) -> None:
    """What ipywidgets does with a custom message from the page."""
    widget._handle_custom_msg(content, [])


def with_setting(params: list[dict[str, Any]], name: str, **change: Any) -> list[dict[str, Any]]:
    """The ``params`` trait (a list of parameter records) with one record changed."""
    assert any(r["name"] == name for r in params), name
    return [{**r, **change} if r["name"] == name else dict(r) for r in params]


def record(params: list[dict[str, Any]], name: str) -> dict[str, Any]:
    (r,) = [r for r in params if r["name"] == name]
    return r


# ------------------------------------------------------------------------------ construction
def test_dataframe_columns_log_axis_and_zero_dose_listed(w: CurveBench) -> None:
    assert w.model_name == "inhibition_4pl"
    assert w.data["x_label"] == "conc" and w.data["y_label"] == "response"
    # Doses span five decades: x starts on a log axis; the zero-dose controls (rows 0-2)
    # cannot be drawn there and are listed, not dropped.
    assert w.x_scale == "log" and w.y_scale == "linear"
    assert w.data["off_axis"] == [0, 1, 2]
    assert len(w.data["x"]) == 27
    # The guided start is finite and near the truth it was generated from.
    assert abs(w.values["log_ic50"] - TRUTH["log_ic50"]) < 0.5
    assert w.model_json["has_preview"] is True
    assert w.model_names[0] == "inhibition_4pl"


def test_arrays_positional_and_keyword() -> None:
    d = assay()
    a = CurveBench(d["conc"].to_numpy(), d["response"].to_numpy(), model="inhibition_4pl")
    b = CurveBench(x=d["conc"].to_numpy(), y=d["response"].to_numpy(), model="inhibition_4pl")
    assert a.data["x"] == b.data["x"]
    assert a.params == b.params


def test_model_kinds_and_user_models_first(df: pd.DataFrame) -> None:
    def decline(x: Any, a: float, k: float) -> Any:
        return a * np.exp(-k * np.asarray(x))

    w = CurveBench(
        df,
        x="conc",
        y="response",
        model="full_effect + (zero_dose - full_effect)/(1 + x/ic50)",
        models=[decline, cw.catalog()["hill"]],
    )
    assert w.model_names[:3] == ["custom", "decline", "hill"]
    assert set(cw.catalog()) <= set(w.model_names)
    w.set_model("decline")
    assert w.model_json["tree"] is None and w.model_json["has_preview"] is False
    # A callable model is previewed by Python: the curve comes with the state.
    curve = w.preview_curve
    assert curve is not None and len(curve["x"]) == len(curve["y"]) > 10


def test_missing_or_unknown_model_raises(df: pd.DataFrame) -> None:
    with pytest.raises(cw.ModelError, match="Give the model to fit"):
        CurveBench(df, x="conc", y="response")
    with pytest.raises(cw.ModelError, match="inhibition_4pl"):
        CurveBench(df, x="conc", y="response", model="inhibition_4p")  # spelling hint


def test_two_different_models_with_one_name_raise(df: pd.DataFrame) -> None:
    a = cw.Model.from_formula("a*x + b", name="line_a")
    b = cw.Model.from_formula("a*x**2 + b", name="line_a")
    with pytest.raises(cw.ModelError, match="both called 'line_a'"):
        CurveBench(df, x="conc", y="response", model=a, models=[b])


def test_bad_data_and_options_raise(df: pd.DataFrame) -> None:
    with pytest.raises(cw.DataError, match="column"):
        CurveBench(df, x="dose", y="response", model="inhibition_4pl")
    with pytest.raises(cw.DataError, match="outside"):
        CurveBench(df, x="conc", y="response", model="inhibition_4pl", exclude=[99])
    with pytest.raises(cw.ParameterError, match="loss"):
        CurveBench(df, x="conc", y="response", model="inhibition_4pl", fit_options={"los": 1})
    with pytest.raises(cw.DataError, match="x_scale"):
        CurveBench(df, x="conc", y="response", model="inhibition_4pl", x_scale="ln")
    with pytest.raises(cw.ParameterError, match="outside its bounds"):
        CurveBench(
            df,
            x="conc",
            y="response",
            model="inhibition_4pl",
            start={"n_h": 3.0},
            bounds={"n_h": (0.1, 2.0)},
        )


# ------------------------------------------------------------------------- the page's flow
def reference_fit(df: pd.DataFrame, excluded: list[int], full_effect: float) -> np.ndarray:
    """scipy's curve_fit on the same problem: full_effect substituted, excluded rows removed."""
    keep = np.ones(len(df), dtype=bool)
    keep[excluded] = False
    x, y = df["conc"].to_numpy()[keep], df["response"].to_numpy()[keep]
    popt, _ = curve_fit(
        lambda x, zero_dose, log_ic50, n_h: four_pl(x, full_effect, zero_dose, log_ic50, n_h),
        x,
        y,
        p0=[90.0, -6.5, 1.0],
        maxfev=20000,
    )
    return np.asarray(popt)


def test_fix_exclude_and_fit_from_the_page(w: CurveBench, df: pd.DataFrame) -> None:
    # The page fixes full_effect at 5 (checkbox + typed value), clicks point 13, presses Fit.
    page_sets(w, params=with_setting(w.params, "full_effect", value=5.0, fixed=True))
    page_sets(w, excluded=[13])
    page_sends(w, {"type": "fit"})
    assert w.wait(timeout=60)
    r = w.result
    assert r is not None and r.success
    assert r.fixed == ("full_effect",) and r.values["full_effect"] == 5.0
    assert r.dataset.excluded_rows == [13] and r.n == len(df) - 1
    ref = reference_fit(df, [13], 5.0)
    got = np.array([r.values["zero_dose"], r.values["log_ic50"], r.values["n_h"]])
    np.testing.assert_allclose(got, ref, rtol=1e-5)
    # The state the page sees afterwards: fitted values, the fit, a status message.
    assert w.status["state"] == "done"
    assert w.fitted is not None and w.fitted["flags"]["full_effect"] == ["fixed"]
    assert w.fitted["excluded"] == [13]
    assert len(w.fitted["residuals"]) == len(w.data["x"])
    assert record(w.params, "log_ic50")["value"] == pytest.approx(r.values["log_ic50"])
    assert w.error == ""


def test_fit_request_carries_the_pages_latest_state(w: CurveBench, df: pd.DataFrame) -> None:
    # A state update still buffered in the page: the request itself brings it.
    params = with_setting(w.params, "full_effect", value=5.0, fixed=True)
    page_sends(
        w, {"type": "fit", "model_name": "inhibition_4pl", "params": params, "excluded": [13]}
    )
    assert w.wait(timeout=60)
    r = w.result
    assert r is not None and r.fixed == ("full_effect",) and r.dataset.excluded_rows == [13]
    assert w.excluded == [13]


def test_fit_from_python_callbacks_and_history(w: CurveBench) -> None:
    seen: list[cw.FitResult] = []
    observed: list[Any] = []
    w.on_fit(seen.append)
    w.observe(lambda ch: observed.append(ch["new"]), "result")
    r = w.fit()
    assert r is w.result and seen == [r] and observed == [r]
    # The truth the data were generated from lies inside the 99.9% intervals (noise SD 2).
    ci = r.ci(0.999)
    for name, truth in TRUTH.items():
        assert ci.loc[name, "lower"] <= truth <= ci.loc[name, "upper"], name
    w.on_fit(seen.append, remove=True)
    w.fit()
    assert len(seen) == 1 and len(w.history) == 2


def test_callback_error_is_shown_not_raised(w: CurveBench) -> None:
    def broken(_r: cw.FitResult) -> None:
        raise KeyError("no such column")

    w.on_fit(broken)
    w.fit()
    assert "KeyError" in w.error and w.result is not None


def test_bound_flags_reach_the_page(w: CurveBench) -> None:
    # Hill held below its true value (1.1) by an upper bound of 0.8: the fit ends on it.
    w.set_param("n_h", value=0.7, upper=0.8)
    r = w.fit()
    assert r.values["n_h"] == pytest.approx(0.8)
    assert "at_upper" in w.fitted["flags"]["n_h"]


def test_invalid_page_edit_is_shown_and_not_applied(w: CurveBench) -> None:
    before = json.dumps(w.params, sort_keys=True)
    page_sets(w, params=with_setting(w.params, "n_h", lower=3.0, upper=2.0))
    assert "lower bound 3 is above upper bound 2" in w.error
    assert json.dumps(w.params, sort_keys=True) == before
    page_sets(w, excluded=[500])
    assert "outside 0..26" in w.error and w.excluded == []
    page_sets(w, model_name="no_such_model")
    assert "no_such_model" in w.error and w.model_name == "inhibition_4pl"
    page_sends(w, {"type": "explode"})
    assert "Unknown message" in w.error


def test_fit_failure_goes_to_the_error_area(df: pd.DataFrame) -> None:
    # A power law needs x > 0, and the zero-dose rows are in the data.
    w = CurveBench(df, x="conc", y="response", model="power_law")
    page_sends(w, {"type": "fit"})
    assert w.wait(timeout=60)
    assert w.status["state"] == "error"
    assert "positive x" in w.error
    with pytest.raises(cw.DomainError, match="positive x"):
        w.fit()
    w.exclude([0, 1, 2])
    assert w.fit().success


def test_second_fit_while_running_raises(df: pd.DataFrame) -> None:
    gate = threading.Event()
    hold = False

    def slow(x: Any, a: float, b: float) -> Any:
        if hold:  # only the fit waits, not the guided start in the constructor
            gate.wait(5)
        return a + b * np.asarray(x)

    w = CurveBench(df, x="conc", y="response", model=slow)
    hold = True
    w.fit(wait=False)
    try:
        with pytest.raises(cw.FitError, match="already running"):
            w.fit()
    finally:
        gate.set()
        assert w.wait(timeout=60)


def test_cancel_stops_a_fit(df: pd.DataFrame) -> None:
    calls = 0
    fitting = False

    def slow(x: Any, full_effect: float, zero_dose: float, log_ic50: float, n_h: float) -> Any:
        nonlocal calls
        if fitting:  # the guided start in the constructor runs at full speed
            calls += 1
            time.sleep(0.02)
        return four_pl(x, full_effect, zero_dose, log_ic50, n_h)

    w = CurveBench(df, x="conc", y="response", model=slow, start=TRUTH)
    fitting = True
    page_sends(w, {"type": "fit"})
    while calls < 3:
        time.sleep(0.005)
    page_sends(w, {"type": "cancel"})
    assert w.wait(timeout=60)
    r = w.result
    assert r is not None and not r.success and r.code == "cancelled"
    assert w.status["state"] == "stopped"


def test_fit_applies_through_a_running_event_loop(w: CurveBench) -> None:
    # In a kernel the page's Fit runs with an event loop: the result is applied on it.
    async def main() -> cw.FitResult | None:
        page_sends(w, {"type": "fit"})
        # A generous wait (up to about 2 minutes), not a speed check: a loaded CI machine can
        # take seconds to schedule the fit's thread.
        for _ in range(12000):
            if w.result is not None:
                return w.result
            await asyncio.sleep(0.01)
        return None

    r = asyncio.run(main())
    assert r is not None and r.success and w.status["state"] == "done"


# ----------------------------------------------------------------------------- models
def test_switching_model_keeps_earlier_fits(w: CurveBench) -> None:
    first = w.fit()
    page_sets(w, model_name="inhibition_5pl")
    assert w.model_json["name"] == "inhibition_5pl"
    assert {r["name"] for r in w.params} == {"full_effect", "zero_dose", "log_ic50", "n_h", "g"}
    assert all(math.isfinite(s["value"]) for s in w.params)
    assert w.fitted is None
    assert [c["model_name"] for c in w.compare] == ["inhibition_4pl"]
    second = w.fit()
    assert w.fits == {"inhibition_4pl": first, "inhibition_5pl": second}
    assert {c["model_name"]: c["current"] for c in w.compare} == {
        "inhibition_4pl": False,
        "inhibition_5pl": True,
    }
    w.set_model("inhibition_4pl")
    assert w.fitted is not None and w.fitted["values"] == dict(first.values)


def test_reset_start_keeps_fixed_values(w: CurveBench) -> None:
    w.set_param("zero_dose", value=100.0, fixed=True)
    w.set_param("log_ic50", value=-3.0)
    page_sends(w, {"type": "guided_start"})
    assert w.values["zero_dose"] == 100.0 and w.settings["zero_dose"]["fixed"]
    assert abs(w.values["log_ic50"] - TRUTH["log_ic50"]) < 0.5


def test_callable_preview_round_trip(df: pd.DataFrame) -> None:
    def line(x: Any, a: float, b: float) -> Any:
        return a + b * np.asarray(x)

    w = CurveBench(df, x="conc", y="response", model=line, x_scale="linear")
    page_sends(w, {"type": "preview", "values": {"a": 2.0, "b": 3.0}, "x_min": 0, "x_max": 1})
    c = w.preview_curve
    assert c["values"] == {"a": 2.0, "b": 3.0}
    np.testing.assert_allclose(c["y"], 2.0 + 3.0 * np.asarray(c["x"]))
    assert c["x"][0] == 0 and c["x"][-1] == 1


# ------------------------------------------------------------------------------ Python API
def test_bad_python_edits_raise_and_change_nothing(w: CurveBench) -> None:
    before = json.dumps(w.snapshot(), sort_keys=True)
    with pytest.raises(cw.ParameterError, match="positive, so its value cannot be -1"):
        w.set_param("n_h", value=-1.0)
    with pytest.raises(cw.ParameterError, match=r"start value 9 lies outside its bounds \[0, 5\]"):
        w.set_param("n_h", value=9.0, upper=5.0)
    with pytest.raises(cw.ParameterError, match="Did you mean 'n_h'"):
        w.set_param("n_hh", value=1.0)
    with pytest.raises(cw.ParameterError, match="above upper bound"):
        w.params = with_setting(w.params, "zero_dose", lower=10.0, upper=1.0)
    with pytest.raises(cw.DataError, match="x_scale must be 'linear' or 'log'"):
        w.x_scale = "logarithmic"
    with pytest.raises(cw.DataError, match=r"outside 0\.\.26"):
        w.exclude([27])
    with pytest.raises(cw.DataError, match=r"outside 0\.\.26"):
        w.excluded = [1, 99]
    with pytest.raises(cw.ModelError, match="chooser"):
        w.model_name = "nope"
    assert json.dumps(w.snapshot(), sort_keys=True) == before
    assert w.error == ""


def test_exclude_include_and_axes_from_python(w: CurveBench) -> None:
    w.exclude([5, 3])
    w.exclude(4)
    assert w.excluded == [3, 4, 5] and w.data["excluded"] == [3, 4, 5]
    w.include([4])
    assert w.excluded == [3, 5] and w.dataset.excluded_rows == [3, 5]
    w.x_scale = "linear"
    assert w.data["off_axis"] == []


def test_snapshot_round_trip_through_json(w: CurveBench, df: pd.DataFrame, tmp_path: Path) -> None:
    w.set_model("stimulation_4pl")
    w.set_param("n_h", value=1.5, lower=0.5, upper=4.0, fixed=True)
    w.exclude([7])
    w.y_scale = "log"
    path = tmp_path / "state.json"
    w.save(path)
    other = CurveBench(df, x="conc", y="response", model="inhibition_4pl")
    other.load(path)
    assert other.snapshot() == w.snapshot()
    assert other.model_name == "stimulation_4pl" and other.excluded == [7]


def test_restore_rebuilds_a_formula_model(df: pd.DataFrame) -> None:
    a = CurveBench(
        df, x="conc", y="response", model="full_effect + (zero_dose - full_effect)/(1 + x/ic50)"
    )
    snap = json.loads(json.dumps(a.snapshot()))
    b = CurveBench(df, x="conc", y="response", model="inhibition_4pl")
    b.restore(snap)
    assert b.model.formula == a.model.formula and b.params == a.params


def test_restore_rejects_bad_snapshots_unchanged(w: CurveBench, df: pd.DataFrame) -> None:
    good = w.snapshot()
    before = json.dumps(good, sort_keys=True)
    with pytest.raises(cw.DataError, match="format"):
        w.restore({**good, "format": "other"})
    with pytest.raises(cw.DataError, match="with 5 rows; this widget holds 27"):
        w.restore({**good, "n_input": 5})
    with pytest.raises(cw.ParameterError, match=r"settings for \[.*\] are missing"):
        w.restore({**good, "params": [record(good["params"], "zero_dose")]})
    with pytest.raises(cw.ParameterError, match="params must be a list of parameter records"):
        w.restore({**good, "params": {"zero_dose": record(good["params"], "zero_dose")}})
    with pytest.raises(cw.DataError, match="x_scale"):
        w.restore({**good, "x_scale": "ln", "excluded": [1]})

    def f(x: Any, a: float) -> Any:
        return a * np.asarray(x)

    cb = CurveBench(df, x="conc", y="response", model=f)
    with pytest.raises(cw.ModelError, match="models=\\[f\\]"):
        w.restore(cb.snapshot())
    with pytest.raises(cw.DataError, match="Cannot read"):
        w.load(Path("/nonexistent/state.json"))
    assert json.dumps(w.snapshot(), sort_keys=True) == before


def test_a_snapshot_in_the_old_format_is_refused_by_name(
    w: CurveBench, df: pd.DataFrame, tmp_path: Path
) -> None:
    # Format 1 held other model and parameter names (e.g. a "logIC50" midpoint); restoring it
    # says which format it is and what to do, and changes nothing.
    good = w.snapshot()
    assert good["format"] == "curvewright.widget/4"
    before = json.dumps(good, sort_keys=True)
    old = {**good, "format": "curvewright.widget/1"}
    old["params"] = {
        "bottom": {"value": 4.0, "lower": None, "upper": None, "fixed": False},
        "logIC50": {"value": -6.7, "lower": None, "upper": None, "fixed": False},
    }
    message = r"saved in curvewright widget-state format 1 .*older model and parameter names"
    with pytest.raises(cw.DataError, match=message):
        w.restore(old)
    path = tmp_path / "old_state.json"
    path.write_text(json.dumps(old), encoding="utf-8")
    with pytest.raises(cw.DataError, match=message):
        w.load(path)
    # Format 2 kept the settings as a mapping by name; it is refused so too.
    two = {**good, "format": "curvewright.widget/2"}
    two["params"] = {
        r["name"]: {k: r[k] for k in ("value", "lower", "upper", "fixed")} for r in good["params"]
    }
    with pytest.raises(cw.DataError, match=r"format 2 .*older layout \(a mapping by name\)"):
        w.restore(two)
    # Format 3 had no place for groups; refused by name too.
    three = {k: v for k, v in {**good, "format": "curvewright.widget/3"}.items() if k != "groups"}
    with pytest.raises(cw.DataError, match=r"format 3 .*no place for groups"):
        w.restore(three)
    assert json.dumps(w.snapshot(), sort_keys=True) == before


def test_ping_pong_flush(w: CurveBench) -> None:
    page_sets(w, sync_ping=7)
    assert w.sync_pong == 7


def test_large_data_is_thinned_for_drawing_only() -> None:
    rng = np.random.default_rng(0)
    x = rng.uniform(0.0, 10.0, 60_000)
    y = 3.0 + 2.0 * x + rng.normal(0.0, 1.0, x.size)
    w = CurveBench(x, y, model="straight_line")
    assert w.data["decimated"] and w.data["n_total"] == 60_000
    assert len(w.data["x"]) < MAX_POINTS * 1.2
    r = w.fit()
    assert r.n == 60_000
    # Ordinary least squares on all points (numpy's lstsq as the reference).
    coef, *_ = np.linalg.lstsq(np.column_stack([np.ones_like(x), x]), y, rcond=None)
    np.testing.assert_allclose([r.values["intercept"], r.values["slope"]], coef, rtol=1e-9)


def test_core_does_not_import_the_widget_stack() -> None:
    code = (
        "import sys, curvewright, numpy as np; "
        "curvewright.fit('straight_line', [0, 1, 2, 3], [1, 3, 5, 7.5]); "
        "stack = ('traitlets', 'IPython', 'ipywidgets', 'anywidget'); "
        "print(','.join(m for m in stack if m in sys.modules))"
    )
    src = str(Path(__file__).resolve().parents[2] / "src")
    out = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        env={"PYTHONPATH": src, "PATH": ""},
    )
    assert out.stdout.strip() == ""


def test_result_observer_error_is_shown_not_raised(w: CurveBench) -> None:
    def broken(_change: Any) -> None:
        raise ZeroDivisionError("division by zero in a user's observer")

    w.observe(broken, "result")
    r = w.fit()
    assert w.result is r and "ZeroDivisionError" in w.error
    assert w.status["state"] == "done"


def test_models_are_compared_once_two_are_fitted(w: CurveBench) -> None:
    from scipy import stats as sps

    with pytest.raises(cw.ComparisonError, match="at least two models"):
        w.compare_models()
    four = w.fit()
    assert w.comparison_json is None
    w.set_model("inhibition_5pl")
    five = w.fit()
    comp = w.comparison_json
    assert comp is not None and [row["fit"] for row in comp["table"]] == [
        "inhibition_4pl",
        "inhibition_5pl",
    ]
    # The 4PL is the 5PL with s = 1: the extra-sum-of-squares F test (common practice),
    # recomputed here with scipy's F distribution.
    f = ((four.ssr - five.ssr) / (four.dof - five.dof)) / (five.ssr / five.dof)
    test = comp["f_tests"][0]
    assert test["F"] == pytest.approx(f, rel=1e-9)
    assert test["p"] == pytest.approx(sps.f.sf(f, four.dof - five.dof, five.dof), rel=1e-9)
    assert comp["recommendation"] and w.compare_models().preferred in comp["recommendation"]
    # Other exclusions make the fits incomparable: the page is told why.
    w.exclude([4])
    w.fit()
    assert "error" in w.comparison_json
    with pytest.raises(cw.ComparisonError):
        w.compare_models()


def test_callable_pins_are_solved_in_python(df: pd.DataFrame) -> None:
    def line(x: Any, a: float, b: float) -> Any:
        return a + b * np.asarray(x)

    w = CurveBench(df, x="conc", y="response", model=line, x_scale="linear")
    before = dict(w.values)
    # Dragging: the curve through (1, 3) and (2, 5) is y = 1 + 2x (two points fix a line).
    msg = {"type": "pins", "pins": [[1.0, 3.0], [2.0, 5.0]], "values": before, "seq": 1}
    page_sends(w, {**msg, "final": False, "x_min": 0.0, "x_max": 3.0})
    c = w.preview_curve
    assert c["values"]["a"] == pytest.approx(1.0, abs=1e-6)
    assert c["values"]["b"] == pytest.approx(2.0, rel=1e-6)
    assert [p[1] for p in c["pins"]] == pytest.approx([3.0, 5.0], rel=1e-6)
    assert c["seq"] == 1 and w.values == before  # not committed during the drag
    page_sends(w, {**msg, "final": True})
    assert w.values["b"] == pytest.approx(2.0, rel=1e-6) and w.error == ""
    # A fixed parameter stays: with a = 0 held, b is the least-squares slope through the
    # origin, sum(x*y)/sum(x*x) = (3 + 10)/(1 + 4) = 2.6.
    w.fix("a", 0.0)
    page_sends(w, {**msg, "final": True})
    assert w.values["a"] == 0.0 and w.values["b"] == pytest.approx(2.6, rel=1e-6)
    page_sends(w, {"type": "pins", "pins": [[1.0]], "values": w.values})
    assert "each pin is [x, y]" in w.error


def test_guided_start_on_large_data_uses_a_subset_and_stays_close() -> None:
    # 50k points from a known 4PL: the start (from 5000 evenly spaced points) lands near the
    # truth, and the fit (on every point) recovers it within its 99.9% intervals.
    rng = np.random.default_rng(5)
    x = 10.0 ** rng.uniform(-9.0, -4.0, 50_000)
    y = four_pl(x, **TRUTH) + rng.normal(0.0, 3.0, x.size)
    w = CurveBench(x, y, model="inhibition_4pl")
    assert abs(w.values["log_ic50"] - TRUTH["log_ic50"]) < 0.1
    r = w.fit()
    assert r.n == 50_000
    ci = r.ci(0.999)
    for name, truth in TRUTH.items():
        assert ci.loc[name, "lower"] <= truth <= ci.loc[name, "upper"], name


def test_sigma_and_fit_options_reach_the_fit(df: pd.DataFrame) -> None:
    df = df.assign(sd=2.0)
    w = CurveBench(
        df,
        x="conc",
        y="response",
        model="inhibition_4pl",
        sigma="sd",
        fit_options={"loss": "pseudo_huber", "max_evaluations": 5000},
    )
    r = w.fit()
    assert r.weighting == "sigma" and r.loss == "pseudo_huber"
    # With sigma = 2 for every point, weighted residuals are the residuals halved.
    np.testing.assert_allclose(r.weighted_residuals, r.residuals / 2.0, rtol=1e-12)


# ------------------------------------------------------------------------- parameter records
def test_the_params_trait_is_the_records_json_and_fit_gets_the_records(w: CurveBench) -> None:
    # One record from Python to the page and back (params_spec.json): the trait is exactly
    # Parameters.to_json() of what Fit hands to fit().
    assert w.params == w.parameters.to_json()
    assert [r["name"] for r in w.params] == list(w.model.param_names)
    page_sets(w, params=with_setting(w.params, "full_effect", value=5.0, fixed=True))
    assert w.parameters["full_effect"] == Parameter("full_effect", 5.0, fixed=True)
    expected = cw.fit(w.model, dataset=w.dataset, params=w.parameters)
    r = w.fit()
    assert dict(r.values) == dict(expected.values)  # the same problem, the same numbers
    assert r.parameters == expected.parameters
    # after the fit the records hold the fitted values, with the bounds and flags shown
    assert w.parameters == r.parameters
    assert w.params == r.parameters.to_json()


def test_a_guided_start_outside_given_bounds_is_moved_by_the_one_rule_with_a_notice(
    df: pd.DataFrame,
) -> None:
    # The guided log_ic50 is near -7 (the truth); bounds of [-5, -4] leave it outside.
    w = CurveBench(
        df, x="conc", y="response", model="inhibition_4pl", bounds={"log_ic50": (-5, -4)}
    )
    v = w.values["log_ic50"]
    assert v == move_inside(-5.0, -4.0, -7.0) == pytest.approx(-4.99)  # 1 % inside the bound
    assert "'log_ic50'" in w.status["message"] and "moved to" in w.status["message"]
    # a user's own start outside the bounds is refused, never moved
    with pytest.raises(cw.ParameterError, match="outside its bounds"):
        CurveBench(
            df,
            x="conc",
            y="response",
            model="inhibition_4pl",
            start={"log_ic50": -7.0},
            bounds={"log_ic50": (-5, -4)},
        )


def test_fit_option_links_join_the_records_of_the_request(df: pd.DataFrame) -> None:
    w = CurveBench(
        df,
        x="conc",
        y="response",
        model="inhibition_4pl",
        fit_options={"links": {"full_effect": "0.05*zero_dose"}},
    )
    r = w.fit()
    assert r.parameters["full_effect"].link == "0.05*zero_dose"
    assert r.values["full_effect"] == pytest.approx(0.05 * r.values["zero_dose"], rel=1e-12)
    assert "full_effect" not in r.free
