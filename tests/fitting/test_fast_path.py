"""Tests of the fast first run for formula models (MINPACK lmder with the compiled Jacobian).

Outside references: scipy.optimize.curve_fit / least_squares on the same data (each differences
the model itself, so it shares none of our derivative code), and central differences for the
Jacobian through links (common practice). Data are invented. Iterative results are compared
only to the accuracy the solvers promise (rtol 1e-7 on values of well-conditioned problems),
never bit for bit; nothing here is timed.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pytest
import scipy.optimize

import curvewright as cw
import curvewright.fitting.engine as engine
from curvewright.catalog import catalog
from curvewright.expr import Expr
from curvewright.fitting.problem import _Problem
from curvewright.numerics import finite_difference_jacobian

# (catalog model, x, true values, start, noise sd): invented, well-conditioned problems whose
# minimum lies inside every bound.
_CASES: dict[str, tuple[Any, dict[str, float], dict[str, float], float]] = {
    "inhibition_4pl": (
        np.repeat(np.logspace(-9, -4, 8), 3),
        {"zero_dose": 100.0, "full_effect": 5.0, "log_ic50": -6.5, "n_h": 1.2},
        {"zero_dose": 130.0, "full_effect": 6.5, "log_ic50": -8.45, "n_h": 1.56},
        2.0,
    ),
    "exponential_decay": (
        np.linspace(0, 30, 40),
        {"baseline": 10.0, "amplitude": 90.0, "k": 0.25},
        {"baseline": 5.0, "amplitude": 60.0, "k": 0.1},
        1.0,
    ),
    "michaelis_menten": (
        np.array([0.5, 1, 2, 4, 8, 16, 32, 64] * 2, dtype=float),
        {"Vmax": 12.0, "Km": 6.0},
        {"Vmax": 20.0, "Km": 2.0},
        0.3,
    ),
    "gaussian_peak": (
        np.linspace(-5, 5, 60),
        {"baseline": 1.0, "amplitude": 8.0, "center": 0.4, "sigma": 1.1},
        {"baseline": 0.5, "amplitude": 6.0, "center": 0.0, "sigma": 1.6},
        0.2,
    ),
}


def _data(name: str, seed: int = 3) -> tuple[cw.Model, np.ndarray, np.ndarray, dict[str, float]]:
    x, truth, start, sd = _CASES[name]
    model = catalog()[name]
    y = model.eval(x, truth) + np.random.default_rng(seed).normal(0, sd, x.size)
    return model, x, y, start


@pytest.mark.parametrize("name", sorted(_CASES))
def test_fast_run_and_the_lmfit_ladder_reach_scipy_minimum(name: str) -> None:
    model, x, y, start = _data(name)
    names = list(model.param_names)
    p0 = [start[n] for n in names]
    # Reference: scipy curve_fit (MINPACK lmdif, its own differences) at tight tolerances.
    ref, _ = scipy.optimize.curve_fit(model.func, x, y, p0=p0, xtol=1e-14, ftol=1e-14)
    fast = cw.fit(model, x, y, start=start)
    assert fast.success, fast.message
    assert fast.attempts[0].strategy == "first run"
    assert fast.attempts[0].method == "levenberg_marquardt"
    np.testing.assert_allclose([fast.values[n] for n in names], ref, rtol=1e-7)
    # The same function as a Python callable takes the old route (an lmfit first run, then a
    # differenced polish): the same minimum, to what differencing allows.
    slow_model = cw.Model.from_callable(model.func, params=list(model.params))
    slow = cw.fit(slow_model, x, y, start=start)
    assert slow.success, slow.message
    np.testing.assert_allclose(
        [slow.values[n] for n in names], [fast.values[n] for n in names], rtol=1e-6
    )
    assert fast.ssr == pytest.approx(slow.ssr, rel=1e-10)
    assert fast.evaluations == sum(a.evaluations for a in fast.attempts)


def test_fast_path_runs_no_lmfit_and_differentiates_nothing_per_fit(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    model, x, y, start = _data("inhibition_4pl")
    model = cw.Model.from_formula(model.formula or "", params=list(model.params))  # a fresh one
    first = cw.fit(model, x, y, start=start)  # compiles the model's derivatives, once

    def no_lmfit(*args: Any, **kwargs: Any) -> Any:
        raise AssertionError("lmfit was run on the fast path")

    calls = {"n": 0}
    real = Expr.derivative

    def counted(self: Expr, name: str) -> Expr:
        calls["n"] += 1
        return real(self, name)

    with monkeypatch.context() as m:
        m.setattr(engine, "_solve", no_lmfit)
        m.setattr(Expr, "derivative", counted)
        again = cw.fit(model, x, y, start=start)
    assert calls["n"] == 0
    assert dict(again.values) == pytest.approx(dict(first.values), rel=1e-12)
    # lmfit's own object is still there for power users, made on first access at the solution.
    lm = again.lmfit_result
    assert lm is not None and lm is again.lmfit_result
    for i, n in enumerate(again.free):
        assert lm.params[f"p{i}"].value == pytest.approx(again.values[n], rel=1e-6)


@pytest.mark.parametrize(
    ("name", "start", "bounded", "lo", "hi"),
    [
        # the unconstrained minimum (k = 0.25) lies beyond the bound: the fit ends on it
        ("exponential_decay", {"baseline": 5.0, "amplitude": 60.0, "k": 0.05}, "k", 0.0, 0.12),
        # the first step heads for a negative Hill coefficient; the minimum is inside
        ("inhibition_4pl", _CASES["inhibition_4pl"][2], "n_h", 0.0, math.inf),
        ("exponential_decay", {"baseline": 40.0, "amplitude": 20.0, "k": 0.01}, "k", 0.0, 2.0),
    ],
)
def test_bounds_hold_and_the_model_is_never_evaluated_outside_them(
    monkeypatch: pytest.MonkeyPatch,
    name: str,
    start: dict[str, float],
    bounded: str,
    lo: float,
    hi: float,
) -> None:
    model, x, y, _ = _data(name)
    seen: list[float] = []
    real_curve, real_jac = _Problem.curve_at, _Problem.jacobian_at

    def curve(prob: Any, theta: Any) -> Any:
        seen.append(float(theta[prob.free.index(bounded)]))
        return real_curve(prob, theta)

    def jac(prob: Any, theta: Any) -> Any:
        seen.append(float(theta[prob.free.index(bounded)]))
        return real_jac(prob, theta)

    # The solvers' two calls are the problem's methods (fitting/problem.py).
    monkeypatch.setattr(_Problem, "curve_at", curve)
    monkeypatch.setattr(_Problem, "jacobian_at", jac)
    r = cw.fit(model, x, y, start=start, bounds={bounded: (lo, hi)})
    assert r.success, r.message
    assert seen and all(lo <= v <= hi for v in seen)
    # Reference: scipy's trust-region reflective method with the same bounds.
    names = list(model.param_names)
    k = names.index(bounded)
    lower, upper = np.full(len(names), -np.inf), np.full(len(names), np.inf)
    lower[k], upper[k] = lo, hi
    ref = scipy.optimize.least_squares(
        lambda p: y - model.func(x, *p),
        [start[n] for n in names],
        bounds=(lower, upper),
        method="trf",
        x_scale="jac",
        xtol=1e-15,
        ftol=1e-15,
        gtol=1e-15,
    )
    np.testing.assert_allclose([r.values[n] for n in names], ref.x, rtol=1e-7)
    assert (r.at_bound == {bounded: "upper"}) == bool(ref.x[k] >= hi * (1 - 1e-9))


def test_an_abort_inside_the_fast_run_is_clean() -> None:
    model, x, y, start = _data("inhibition_4pl")
    polls = {"n": 0}

    def cancel() -> bool:  # polled before every evaluation: allow five
        polls["n"] += 1
        return polls["n"] > 5

    r = cw.fit(model, x, y, start=start, cancel=cancel)
    assert r.code == "cancelled" and not r.success
    assert r.evaluations == 5 and polls["n"] == 6  # nothing evaluated after the cancel
    assert [a.strategy for a in r.attempts] == ["first run"]  # no ladder, no polish
    assert np.isnan(r.covariance).all()
    assert all(math.isfinite(v) for v in r.values.values())
    assert r.values["n_h"] >= 0.0
    start_ssr = float(np.sum((y - model.eval(x, start)) ** 2))
    assert r.ssr <= start_ssr
    assert r.lmfit_result is None

    s = cw.fit(model, x, y, start=start, max_evaluations=7)
    assert s.code == "stopped_evaluations" and not s.success
    assert s.evaluations == 7
    assert s.attempts[0].code == "stopped_evaluations"


@pytest.mark.parametrize(
    ("fixed", "links"),
    [({"full_effect": 5.0}, None), (None, {"full_effect": "zero_dose/20"}), ({"n_h": 1.0}, None)],
)
def test_problem_jacobian_through_fixed_and_linked_parameters(
    fixed: dict[str, float] | None, links: dict[str, str] | None
) -> None:
    # Reference: central differences of the curve in the free parameters (common practice),
    # accurate to about eps**(2/3) relative.
    from curvewright.data import make_dataset
    from curvewright.fitting.problem import (
        _build_problem,
        _curve,
        _model_jacobian,
        request_parameters,
    )

    model, x, y, start = _data("inhibition_4pl")
    prob = _build_problem(
        model,
        (make_dataset(x, y),),
        parameters=request_parameters(model, start=start, fixed=fixed, links=links),
        weights=None,
        loss="squared",
        loss_scale=None,
        absolute_sigma=False,
    )
    theta = np.array([start[n] for n in prob.free]) * 0.97
    fd = finite_difference_jacobian(lambda th: _curve(prob, th), theta)
    np.testing.assert_allclose(
        _model_jacobian(prob, theta), fd, rtol=1e-6, atol=1e-8 * np.abs(fd).max()
    )
