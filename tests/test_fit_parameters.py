"""The parameter record through fit(): params= and the shorthand, the one bounds rule, the result.

These are rules of our own API (the shorthand is made into records once, a parameter is set one
way, a moved start leaves a diagnostic, the records survive JSON), so the checks are the rules
themselves; the fitted numbers are compared with scipy.optimize.least_squares on the same
problem, to the accuracy both solvers promise.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.optimize

import curvewright as cw
from curvewright.errors import ModelError, ParameterError
from curvewright.fitting import request_parameters
from curvewright.fitting.problem import _build_problem
from curvewright.parameters import Parameter, Parameters, move_inside

FORMULA = "baseline + amplitude*exp(-k*x)"


def _decay_data(seed: int = 3) -> tuple[np.ndarray, np.ndarray]:
    # Synthetic data from known parameters (a demo scenario).
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 12.0, 40)
    y = 1.5 + 6.0 * np.exp(-0.35 * x) + rng.normal(0.0, 0.03, x.size)
    return x, y


def test_shorthand_and_records_make_the_same_problem_and_the_same_fit() -> None:
    x, y = _decay_data()
    model = cw.Model.from_formula(FORMULA)
    short = dict(start={"k": 0.5}, fixed={"baseline": 1.5}, bounds={"k": (0.0, 2.0)})
    records = [
        Parameter("baseline", 1.5, fixed=True),
        Parameter("k", 0.5, 0.0, 2.0),
    ]
    a = request_parameters(model, **short)  # type: ignore[arg-type]
    b = request_parameters(model, records)
    assert a == b
    assert math.isnan(a["amplitude"].value)  # no start given: the guided start chooses it
    ds = (cw.make_dataset(x, y),)
    pa = _build_problem(
        model, ds, parameters=a, weights=None, loss="squared", loss_scale=None, absolute_sigma=False
    )
    pb = _build_problem(
        model, ds, parameters=b, weights=None, loss="squared", loss_scale=None, absolute_sigma=False
    )
    assert (pa.values0, pa.free, pa.fixed) == (pb.values0, pb.free, pb.fixed)
    assert np.array_equal(pa.lower, pb.lower) and np.array_equal(pa.upper, pb.upper)

    r1 = cw.fit(model, x, y, **short)  # type: ignore[arg-type]
    r2 = cw.fit(model, x, y, params=records)
    r3 = cw.fit(model, x, y, params=Parameters(records))
    # the same problem runs the same deterministic solvers: the same numbers
    assert dict(r1.values) == dict(r2.values) == dict(r3.values)
    assert r1.parameters == r2.parameters == r3.parameters
    # scipy.optimize.least_squares on the same problem (baseline held at 1.5)
    sol = scipy.optimize.least_squares(
        lambda p: 1.5 + p[0] * np.exp(-p[1] * x) - y, [5.0, 0.5], xtol=1e-15, ftol=1e-15
    )
    assert r1.values["amplitude"] == pytest.approx(sol.x[0], rel=1e-7)
    assert r1.values["k"] == pytest.approx(sol.x[1], rel=1e-7)


def test_a_parameter_set_both_ways_is_refused() -> None:
    x, y = _decay_data()
    rec = [Parameter("k", 0.5, 0.0, 2.0)]
    with pytest.raises(ParameterError, match=r"\['k'\] is set both by params= and by start="):
        cw.fit(FORMULA, x, y, params=rec, start={"k": 0.4})
    with pytest.raises(ParameterError, match=r"set both by params= and by bounds="):
        cw.fit(FORMULA, x, y, params=rec, bounds={"k": (0, 1)})
    with pytest.raises(ParameterError, match=r"set both by params= and by fixed="):
        cw.fit(FORMULA, x, y, params=rec, fixed="k")
    with pytest.raises(ParameterError, match=r"set both by params= and by links="):
        cw.fit(FORMULA, x, y, params=rec, links={"k": "2*baseline"})
    # other parameters may still be given by the shorthand
    r = cw.fit(FORMULA, x, y, params=rec, fixed={"baseline": 1.5})
    assert r.parameters["baseline"].fixed and r.parameters["k"].lower == 0.0
    with pytest.raises(ParameterError, match=r"params must be a Parameters or a sequence"):
        cw.fit(FORMULA, x, y, params={"k": 0.5})  # type: ignore[arg-type]
    with pytest.raises(ParameterError, match=r"'kk' is not a parameter.*\(in params=\)"):
        cw.fit(FORMULA, x, y, params=[Parameter("kk", 0.5)])
    with pytest.raises(ParameterError, match="outside its bounds"):
        cw.fit(FORMULA, x, y, params=[Parameter("k", 3.0, 0.0, 2.0)])
    with pytest.raises(ParameterError, match="scope must be one of"):
        cw.fit(FORMULA, x, y, params=[Parameter("k", 0.5, scope="each")])  # type: ignore[arg-type]


def test_a_guided_start_outside_user_bounds_is_moved_by_the_one_rule_and_noted() -> None:
    x, y = _decay_data()
    # the data's decay rate is about 0.35; the user insists on k in [1, 2] with no start
    r = cw.fit(FORMULA, x, y, bounds={"k": (1.0, 2.0)})
    notes = [d for d in r.diagnostics if d.code == "start_moved_inside_bounds"]
    assert len(notes) == 1
    d = notes[0]
    assert d.params == ("k",) and d.severity == "info"
    assert d.extra["before"] < 1.0
    assert d.extra["after"] == move_inside(1.0, 2.0, d.extra["before"]) == r.start["k"]
    assert (d.extra["lower"], d.extra["upper"]) == (1.0, 2.0)
    assert "'k'" in d.text and "moved to" in d.text
    # a start the user gives is never moved: outside its bounds it is an error
    with pytest.raises(ParameterError, match=r"start value 0\.3 lies outside its bounds"):
        cw.fit(FORMULA, x, y, start={"k": 0.3}, bounds={"k": (1.0, 2.0)})
    # nothing moved, nothing said
    r2 = cw.fit(FORMULA, x, y)
    assert not [d for d in r2.diagnostics if d.code == "start_moved_inside_bounds"]


def test_the_result_carries_the_records_and_they_survive_json() -> None:
    x, y = _decay_data()
    r = cw.fit(
        FORMULA,
        x,
        y,
        bounds={"k": (1.0, 2.0), "baseline": (None, 10.0)},
        links={"amplitude": "4*baseline"},
    )
    p = r.parameters
    assert p.names == r.model.param_names
    assert p.as_values() == dict(r.values)
    assert p["k"].lower == 1.0 and p["baseline"].upper == 10.0 and p["baseline"].lower == -math.inf
    assert p.links == {"amplitude": "4*baseline"} and p.free == r.free
    back = cw.FitResult.from_json(r.to_json())
    assert back.parameters == p
    assert [x.to_dict() for x in back.diagnostics] == [x.to_dict() for x in r.diagnostics]
    d = json.loads(r.to_json())
    assert d["version"] == 3 and d["parameters"] == p.to_json()
    # refitting from the solution's records lands on it again (to the solver's tolerance)
    again = cw.fit(r.model, x, y, params=p)
    for n in r.free:
        assert again.values[n] == pytest.approx(r.values[n], rel=1e-7)


def test_a_format_2_result_is_read_with_records_rebuilt_from_its_fields() -> None:
    x, y = _decay_data()
    r = cw.fit(FORMULA, x, y, fixed={"baseline": 1.5}, bounds={"k": (0.0, 2.0)})
    old = r.to_dict()
    old["version"] = 2
    del old["parameters"]
    back = cw.FitResult.from_dict(old)
    assert back.parameters == r.parameters  # format 2 held everything these records say
    old["version"] = 1
    with pytest.raises(ModelError, match="format 1"):
        cw.FitResult.from_dict(old)
