"""Dragging handles and pins on the Python side (src/curvewright/handles.py).

References: round trips (the target is where the handle sits at known parameter values, so the
solve must land there); closed forms for pins (two points fix a power law: b = log(y2/y1) /
log(x2/x1), common practice); numpy.polyfit for a least-squares line through three pins; and the
shared vectors in tests/data/handle_vectors.json, which js/tests/handles_parity.test.ts solves
with js/handles.ts.
"""

from __future__ import annotations

import importlib.util
import json
import math
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from curvewright.catalog import catalog
from curvewright.errors import HandleError, ParameterError
from curvewright.handles import (
    log_params,
    move_handle,
    pin_through,
    solve_handle,
    solve_pins,
)
from curvewright.models import Model

ROOT = Path(__file__).resolve().parent.parent
VECTORS = ROOT / "tests" / "data" / "handle_vectors.json"
GENERATOR = ROOT / "tools" / "gen_handle_vectors.py"

DOSE = ("inhibition_4pl", "inhibition_5pl", "stimulation_4pl", "stimulation_5pl", "stimulation_3pl")

# Parameter values to drag from (invented; physically sensible for each model).
START: dict[str, dict[str, float]] = {
    "straight_line": {"intercept": 2.0, "slope": -0.7},
    "exponential_decay": {"baseline": 12.0, "amplitude": 80.0, "k": 0.25},
    "biexponential_decay": {"baseline": 5.0, "a1": 60.0, "k1": 2.0, "a2": 35.0, "k2": 0.1},
    "exponential_rise": {"baseline": 3.0, "amplitude": 45.0, "k": 0.08},
    "exponential_growth": {"y0": 150.0, "k": 0.45},
    "michaelis_menten": {"Vmax": 42.0, "Km": 7.5},
    "substrate_inhibition": {"Vmax": 60.0, "Km": 5.0, "Ki": 80.0},
    "hill": {"Vmax": 9.0, "K05": 4.0, "n_h": 2.3},
    "inhibition_4pl": {"zero_dose": 98.0, "full_effect": 4.0, "log_ic50": -6.6, "n_h": 1.3},
    "inhibition_5pl": {
        "zero_dose": 98.0,
        "full_effect": 4.0,
        "log_ic50": -6.6,
        "n_h": 1.3,
        "g": 2.0,
    },
    "stimulation_4pl": {"zero_dose": 120.0, "full_effect": 860.0, "log_ec50": -7.2, "n_h": 0.9},
    "stimulation_5pl": {
        "zero_dose": 120.0,
        "full_effect": 860.0,
        "log_ec50": -7.2,
        "n_h": 0.9,
        "g": 0.5,
    },
    "stimulation_3pl": {"full_effect": 1.8, "log_ec50": -6.0, "n_h": 1.6},
    "logistic_growth": {"N0": 0.02, "K": 1.6, "r": 0.55},
    "gompertz_growth": {"N0": 0.05, "K": 1.6, "r": 0.3},
    "gaussian_peak": {"baseline": 0.1, "amplitude": 2.5, "center": 512.0, "sigma": 14.0},
    "lorentzian_peak": {"baseline": 0.1, "amplitude": 2.5, "center": 512.0, "hwhm": 9.0},
    "boltzmann": {"low": 0.02, "high": 1.0, "x_half": -35.0, "width": 7.5},
}

HANDLES = sorted((m.name, h.name) for m in catalog().values() for h in m.handles)


def test_start_values_cover_every_model_with_handles() -> None:
    assert {m for m, _ in HANDLES} == set(START)


def _moved(
    model: Model, values: dict[str, float], moves: tuple[str, ...], k: int
) -> dict[str, float]:
    """New values of the moved parameters: factors in log space, else shifts by their size."""
    logs = log_params(model)
    out = dict(values)
    factors = (1.4, 0.6, 1.15, 0.8)
    for i, n in enumerate(moves):
        f = factors[(i + k) % len(factors)]
        out[n] = values[n] * f if n in logs else values[n] + (f - 1.0) * max(abs(values[n]), 1.0)
    return out


@pytest.mark.parametrize(("model", "handle"), HANDLES)
@pytest.mark.parametrize("k", [0, 1])
def test_move_handle_round_trip(model: str, handle: str, k: int) -> None:
    m = catalog()[model]
    h = next(h for h in m.handles if h.name == handle)
    v0 = START[model]
    target = h.position(_moved(m, v0, h.moves, k))
    x_log = model in DOSE
    new = move_handle(m, v0, handle, target, x_log=x_log)
    # read the handle back from the model: it is where it was dropped
    got = h.position(new)
    assert got[0] == pytest.approx(target[0], rel=1e-8, abs=1e-12)
    assert got[1] == pytest.approx(target[1], rel=1e-8, abs=1e-10)
    # nothing the handle does not move has changed, not even in the last bit
    for n in m.param_names:
        if n not in h.moves:
            assert new[n] == v0[n], n
    for n in m.param_names:
        p = m.param(n)
        assert p.lower <= new[n] <= p.upper


def test_move_handle_recovers_both_parameters_of_a_two_way_handle() -> None:
    # The Gaussian apex moves centre (x) and amplitude (y): one point fixes both.
    m = catalog()["gaussian_peak"]
    v = move_handle(m, START["gaussian_peak"], "apex", (530.0, 4.1))
    assert v["center"] == pytest.approx(530.0, rel=1e-12)
    assert v["amplitude"] == pytest.approx(4.1 - 0.1, rel=1e-10)


def test_half_life_drag_sets_k_from_ln2() -> None:
    # half-life = ln 2 / k (common practice): dropping it at t = 2 gives k = ln 2 / 2
    m = catalog()["exponential_decay"]
    v = move_handle(m, {"baseline": 0.0, "amplitude": 10.0, "k": 1.0}, "half_life", (2.0, 5.0))
    assert v["k"] == pytest.approx(math.log(2) / 2, rel=1e-10)


def test_midpoint_drag_on_log_axis_sets_log_ic50() -> None:
    m = catalog()["inhibition_4pl"]
    v0 = START["inhibition_4pl"]
    v = move_handle(m, v0, "midpoint", (3.0e-8, 51.0), x_log=True)
    assert v["log_ic50"] == pytest.approx(math.log10(3.0e-8), rel=1e-10)
    assert (v["zero_dose"], v["full_effect"], v["n_h"]) == (
        v0["zero_dose"],
        v0["full_effect"],
        v0["n_h"],
    )


def test_unreachable_target_gives_closest_point_and_says_so() -> None:
    m = catalog()["exponential_decay"]
    v0 = {"baseline": 1.0, "amplitude": 10.0, "k": 0.5}
    sol = solve_handle(m, v0, "half_life", (3.0, 9.0))
    # k alone moves the half-life point along y = baseline + amplitude/2 = 6: x reaches 3, y cannot
    assert not sol.reached and sol.converged
    assert sol.values["k"] == pytest.approx(math.log(2) / 3.0, rel=1e-8)
    assert sol.distance == pytest.approx(3.0 / 9.0, rel=1e-8)  # |6 - 9| / span 9


def test_bound_stops_the_drag_and_is_reported() -> None:
    m = catalog()["exponential_decay"].with_param("k", value=0.5, upper=0.6)
    sol = solve_handle(m, {"baseline": 1.0, "amplitude": 10.0, "k": 0.5}, "half_life", (0.5, 6.0))
    assert not sol.reached
    assert sol.clamped == ("k",)
    assert sol.values["k"] == pytest.approx(0.6, rel=1e-14)


def test_positive_parameters_stay_positive() -> None:
    # Dropping the half-life at negative time would need k < 0; k moves in log space.
    m = catalog()["exponential_decay"]
    sol = solve_handle(m, {"baseline": 0.0, "amplitude": 10.0, "k": 1.0}, "half_life", (-2.0, 5.0))
    assert sol.values["k"] > 0
    assert not sol.reached


def test_fixed_parameters_are_never_touched() -> None:
    m = catalog()["gaussian_peak"]
    v0 = {"baseline": 0.5, "amplitude": 3.0, "center": 2.0, "sigma": 0.7}
    for fixed in (["amplitude"], {"amplitude": 3.0}):
        sol = solve_handle(m, v0, "apex", (2.6, 5.0), fixed=fixed)
        assert sol.values["amplitude"] == 3.0
        assert sol.values["center"] == pytest.approx(2.6, rel=1e-10)
        assert not sol.reached
    every = solve_handle(m, v0, "apex", (2.6, 5.0), fixed=["amplitude", "center"])
    assert every.values == v0
    assert every.message == "no free parameter to move"


# ------------------------------------------------------------------------------------- pins
def test_two_pins_fix_a_power_law() -> None:
    m = catalog()["power_law"]  # no declared handles: pins are the way to drag it
    assert m.handles == ()
    (x1, y1), (x2, y2) = (2.0, 5.0), (50.0, 7.0)
    b = math.log(y2 / y1) / math.log(x2 / x1)  # closed form (common practice)
    a = y1 / x1**b
    for y_log in (False, True):
        v = pin_through(m, {"a": 1.0, "b": 1.0}, [(x1, y1), (x2, y2)], y_log=y_log)
        assert v["a"] == pytest.approx(a, rel=1e-9)
        assert v["b"] == pytest.approx(b, rel=1e-9)


def test_three_pins_on_a_line_give_the_least_squares_line() -> None:
    m = catalog()["straight_line"]
    pts = [(0.0, 1.0), (1.0, 2.5), (2.0, 3.2)]
    sol = solve_pins(m, {"intercept": 0.0, "slope": 1.0}, pts)
    slope, intercept = np.polyfit([p[0] for p in pts], [p[1] for p in pts], 1)  # reference
    assert sol.values["slope"] == pytest.approx(slope, rel=1e-9)
    assert sol.values["intercept"] == pytest.approx(intercept, rel=1e-9)
    assert not sol.reached  # three points are not on one line


def test_pins_with_a_callable_model_and_fixed_parameter() -> None:
    def sat(x: np.ndarray, vmax: float, km: float, base: float) -> np.ndarray:
        return base + vmax * x / (km + x)

    m = Model.from_callable(sat)
    v0 = {"vmax": 10.0, "km": 2.0, "base": 1.0}
    v = pin_through(m, v0, [(1.0, 4.0), (8.0, 9.0)], fixed=["base"])
    assert v["base"] == 1.0
    np.testing.assert_allclose(m.eval([1.0, 8.0], v), [4.0, 9.0], rtol=1e-9)
    # only the named parameters move
    v = pin_through(m, v0, [(4.0, 6.0)], free=["vmax"])
    assert (v["km"], v["base"]) == (2.0, 1.0)
    assert v["vmax"] == pytest.approx((6.0 - 1.0) * (2.0 + 4.0) / 4.0, rel=1e-9)


# -------------------------------------------------------------------------------- bad input
def test_bad_input_raises_our_errors() -> None:
    m = catalog()["exponential_decay"]
    v0 = {"baseline": 0.0, "amplitude": 10.0, "k": 1.0}
    with pytest.raises(
        HandleError,
        match=r"'half_lfe' is not a handle of model 'exponential_decay'.*Did you mean 'half_life'",
    ):
        move_handle(m, v0, "half_lfe", (1.0, 5.0))
    with pytest.raises(HandleError, match=r"'power_law' has no handles; use pin_through"):
        move_handle(catalog()["power_law"], {}, "apex", (1.0, 1.0))
    with pytest.raises(HandleError, match=r"must have finite x and y, got \(nan, 5.0\)"):
        move_handle(m, v0, "half_life", (math.nan, 5.0))
    with pytest.raises(HandleError, match=r"must be a pair of numbers \(x, y\), got 3.0"):
        move_handle(m, v0, "half_life", 3.0)  # type: ignore[arg-type]
    with pytest.raises(HandleError, match=r"x must be > 0 on a log x axis, got 0.0"):
        move_handle(m, v0, "half_life", (0.0, 5.0), x_log=True)
    with pytest.raises(HandleError, match=r"span must be a positive finite number, got -1"):
        move_handle(m, v0, "half_life", (1.0, 5.0), span=(-1.0, None))
    with pytest.raises(
        ParameterError, match=r"'kk' is not a parameter of model .*Did you mean 'k'"
    ):
        move_handle(m, {**v0, "kk": 1.0}, "half_life", (1.0, 5.0))
    with pytest.raises(ParameterError, match=r"'k' has no finite value \(got inf\)"):
        move_handle(m, {**v0, "k": math.inf}, "half_life", (1.0, 5.0))
    with pytest.raises(ParameterError, match=r"'spam' is not a parameter"):
        move_handle(m, v0, "half_life", (1.0, 5.0), fixed=["spam"])
    with pytest.raises(HandleError, match=r"needs at least one pin"):
        pin_through(m, v0, [])
    with pytest.raises(HandleError, match=r"pin 1: y must be > 0 on a log y axis"):
        pin_through(m, v0, [(1.0, 2.0), (2.0, -1.0)], y_log=True)
    with pytest.raises(HandleError, match=r"pins: Model 'power_law' needs positive x"):
        pin_through(catalog()["power_law"], {}, [(0.0, 1.0)])
    with pytest.raises(ParameterError, match=r"'slop' is not a parameter.*Did you mean 'slope'"):
        pin_through(catalog()["straight_line"], {}, [(0.0, 1.0)], free=["slop"])


def test_a_failed_request_leaves_the_values_alone() -> None:
    m = catalog()["exponential_decay"]
    v0 = {"baseline": 0.0, "amplitude": 10.0, "k": 1.0}
    before = dict(v0)
    with pytest.raises(HandleError):
        move_handle(m, v0, "half_life", (math.inf, 5.0))
    assert v0 == before


# ------------------------------------------------------------------------------ JS parity
def _generator() -> ModuleType:
    spec = importlib.util.spec_from_file_location("gen_handle_vectors", GENERATOR)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


# The solver's promise, which is all a comparison of its output may rely on: a drag that reaches
# its target stops once the screen distance left is below ``tol`` (1e-10 of the view); one that
# cannot reach stops at the closest point, where the cost is flat. Its Jacobian is a central
# difference with a step of 1e-6 of each value, so rounding limits the values to about 1e-9 of
# their size. Where the iteration stops inside those limits depends on the CPU's floating-point
# kernels, so values are compared to 1e-7 relative (as js/tests/handles_parity.test.ts does).
SOLVER_TOL = 1e-10
VALUE_RTOL = 1e-7


def _same_inputs(old: object, new: object, where: str) -> None:
    """Structures, strings and flags exactly; numbers to a few ulp (numpy's SIMD kernels for
    exp/log/pow may differ in the last bit between CPUs, and targets are computed with them)."""
    if isinstance(old, dict) and isinstance(new, dict):
        assert old.keys() == new.keys(), where
        for k in old:
            _same_inputs(old[k], new[k], f"{where}.{k}")
    elif isinstance(old, list) and isinstance(new, list):
        assert len(old) == len(new), where
        for i, (a, b) in enumerate(zip(old, new, strict=True)):
            _same_inputs(a, b, f"{where}[{i}]")
    elif isinstance(old, float) and isinstance(new, float):
        assert new == pytest.approx(old, rel=1e-13, abs=1e-300), where
    else:
        assert old == new, where


def _movable(case: dict[str, object]) -> set[str]:
    """The parameters this drag may change: the handle's moves (or the pins' free list), less
    the fixed ones."""
    if case["kind"] == "handle":
        handle = case["handle"]
        assert isinstance(handle, dict)
        names = set(handle["moves"])
    else:
        names = set(case["free"])  # type: ignore[call-overload]
    options = case["options"]
    assert isinstance(options, dict)
    return names - set(options["fixed"])


def test_committed_vectors_are_what_the_generator_makes() -> None:
    # The committed file holds the inputs the JS parity test replays and Python's solutions; a
    # fresh run of the generator on this machine must pose the same problems and meet the same
    # contract: the curve reaches the target (or the same closest point), the parameters the
    # drag may not move keep their values exactly, and the same parameters end at a bound.
    committed = json.loads(VECTORS.read_text(encoding="utf-8"))
    fresh = json.loads(_generator().render())
    assert committed["about"] == fresh["about"]
    assert [c["id"] for c in committed["cases"]] == [c["id"] for c in fresh["cases"]]
    for old, new in zip(committed["cases"], fresh["cases"], strict=True):
        cid = old["id"]
        for key in ("kind", "model", "params", "options", "handle", "tree", "free", "pins"):
            _same_inputs(old.get(key), new.get(key), f"{cid}: {key}")
        _same_inputs(old.get("target"), new.get("target"), f"{cid}: target")
        was, now = old["python"], new["python"]
        assert was["reached"] == now["reached"], cid
        assert sorted(was["clamped"]) == sorted(now["clamped"]), cid
        movable = _movable(old)
        for sol in (was, now):
            for n, v in old["params"].items():
                if n not in movable:
                    assert sol["values"][n] == v, (cid, n)  # untouched, bit for bit
        if was["reached"]:
            assert was["distance"] <= SOLVER_TOL and now["distance"] <= SOLVER_TOL, cid
        else:
            assert now["distance"] == pytest.approx(was["distance"], rel=VALUE_RTOL), cid
        for n in movable:
            want, got = was["values"][n], now["values"][n]
            assert abs(got - want) <= VALUE_RTOL * max(abs(want), 1e-6), (cid, n, got, want)


def _axis_units(v: float | np.ndarray, log: bool) -> np.ndarray:
    return np.log10(v) if log else np.asarray(v, dtype=float)


def _scale(given: float | None, log: bool, *refs: float) -> float:
    # The documented default span (solve_handle / solve_pins): 1 decade on a log axis, else the
    # largest magnitude among the reference coordinates, 1 if all are zero.
    if given is not None:
        return given
    if log:
        return 1.0
    return max(abs(r) for r in refs) or 1.0


def test_the_vector_contract_holds_for_the_committed_solutions() -> None:
    # Independent of how the solutions were found: evaluate the committed values with the model,
    # here, and check that every drag marked reached puts the handle on its target (the curve
    # through every pin) to the solver's tolerance, measured as the docstrings define it.
    cat = catalog()
    for case in json.loads(VECTORS.read_text(encoding="utf-8"))["cases"]:
        if not case["python"]["reached"]:
            continue
        m = cat[case["model"]]
        opt, values = case["options"], case["python"]["values"]
        span = opt["span"] or [None, None]
        if case["kind"] == "pins":
            xs = np.array([p[0] for p in case["pins"]])
            ys = np.array([p[1] for p in case["pins"]])
            sy = _scale(span[1], opt["yLog"], *ys)
            r = (_axis_units(m.eval(xs, values), opt["yLog"]) - _axis_units(ys, opt["yLog"])) / sy
        else:
            h = next(h for h in m.handles if h.name == case["handle"]["name"])
            tx, ty = case["target"]
            x0, y0 = h.position(case["params"])
            px, py = h.position(values)
            sx = _scale(span[0], opt["xLog"], tx, x0)
            sy = _scale(span[1], opt["yLog"], ty, y0)
            r = np.array(
                [
                    (_axis_units(px, opt["xLog"]) - _axis_units(tx, opt["xLog"])) / sx,
                    (_axis_units(py, opt["yLog"]) - _axis_units(ty, opt["yLog"])) / sy,
                ]
            )
        # A hair of slack over the tolerance for this machine's rounding of the evaluation.
        assert float(np.sqrt(np.sum(r**2))) <= 1.01 * SOLVER_TOL, case["id"]


def test_vectors_cover_every_catalog_handle_and_the_edge_cases() -> None:
    data = json.loads(VECTORS.read_text(encoding="utf-8"))
    ids = {c["id"] for c in data["cases"]}
    assert {f"{m}/{h}" for m, h in HANDLES} <= ids
    outcomes = {(c["python"]["reached"], bool(c["python"]["clamped"])) for c in data["cases"]}
    assert outcomes == {(True, False), (False, False), (False, True)}
    assert any(c["kind"] == "pins" for c in data["cases"])


def test_log_space_rule_matches_the_front_end() -> None:
    # js/interact.ts moves exactly the log_scale parameters in log space; so does Python, and
    # every positive catalog parameter (rates, concentrations, widths) is marked log_scale.
    for m in catalog().values():
        assert log_params(m) == {p.name for p in m.params if p.log_scale}
        for p in m.params:
            if p.positive:
                assert p.log_scale, (m.name, p.name)


@settings(max_examples=60)
@given(
    st.sampled_from(HANDLES),
    st.lists(st.floats(0.3, 3.0), min_size=2, max_size=2),
    st.booleans(),
)
def test_round_trip_for_any_reachable_target(
    which: tuple[str, str], factors: list[float], x_log: bool
) -> None:
    # Targets are where the handle sits after changing its moved parameters by random factors
    # (log-space ones) or shifts (the others): reachable by construction, so the drag lands.
    model, handle = which
    m = catalog()[model]
    h = next(h for h in m.handles if h.name == handle)
    v0 = START[model]
    logs = log_params(m)
    moved = dict(v0)
    for i, n in enumerate(h.moves):
        f = factors[i % 2]
        # a log10 dose moves by up to two decades (a drag stays on the plot), others by their size
        size = 1.0 if m.param(n).unit == "log10(x)" else max(abs(v0[n]), 1.0)
        moved[n] = v0[n] * f if n in logs else v0[n] + (f - 1.0) * size
    target = h.position(moved)
    x_log = x_log and m.domain != "all"  # a log x axis only for models of positive x
    sol = solve_handle(m, v0, handle, target, x_log=x_log)
    assert sol.reached, (sol.message, sol.distance)
    got = h.position(sol.values)
    assert got[0] == pytest.approx(target[0], rel=1e-7, abs=1e-9)
    assert got[1] == pytest.approx(target[1], rel=1e-7, abs=1e-9)
