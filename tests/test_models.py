"""Models as data: formula and callable models, parameter records, handles, serialisation.

Reference values are computed with numpy directly (the formula written by hand in the test).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from curvewright.errors import DomainError, FormulaError, ModelError, ParameterError
from curvewright.expr import Expr
from curvewright.models import Derived, Handle, Model, Param


def test_formula_model_names_in_order_and_evaluates_like_numpy() -> None:
    m = Model.from_formula("baseline + amplitude*exp(-k*x)")
    assert m.param_names == ("baseline", "amplitude", "k")
    assert m.formula == "baseline + amplitude*exp(-k*x)"
    x = np.linspace(0, 5, 11)
    got = m.eval(x, baseline=1.5, amplitude=2.0, k=0.7)
    np.testing.assert_array_equal(got, 1.5 + 2.0 * np.exp(-0.7 * x))
    assert m.has_preview


def test_explicit_param_order_and_records() -> None:
    m = Model.from_formula(
        "a*x + b", params=[Param("b", 2.0), Param("a", 3.0, lower=0, unit="y/x")]
    )
    assert m.param_names == ("b", "a")
    assert m.param("a").unit == "y/x"
    np.testing.assert_array_equal(m.eval([1.0, 2.0]), [5.0, 8.0])


def test_params_mapping_keeps_unlisted_names() -> None:
    m = Model.from_formula("a*x + b", params={"a": {"value": 2.0, "lower": 0}})
    assert m.param_names == ("a", "b")
    assert m.param("a").lower == 0


def test_formula_without_parameters() -> None:
    with pytest.raises(FormulaError, match=r"has no parameters"):
        Model.from_formula("2*x + 1")


def test_formula_params_missing_a_name() -> None:
    with pytest.raises(FormulaError, match=r"uses names \['b'\] that are not in params"):
        Model.from_formula("a*x + b", params=["a"])


def test_domain_guess_and_check() -> None:
    m = Model.from_formula("a*log10(x) + b")
    assert m.domain == "x>0"
    with pytest.raises(DomainError, match=r"needs positive x \(x>0\) but 2 value\(s\) are not"):
        m.check_domain(np.array([0.0, -1.0, 2.0]))
    Model.from_formula("a*x + b").check_domain(np.array([-1.0, 0.0]))


def test_callable_model_names_from_signature() -> None:
    def decay(x: np.ndarray, y0: float, k: float) -> np.ndarray:
        return y0 * np.exp(-k * x)

    m = Model.from_callable(decay)
    assert m.param_names == ("y0", "k") and m.name == "decay"
    assert not m.has_preview and m.formula is None
    np.testing.assert_allclose(m.eval([0.0, 1.0], y0=2.0, k=1.0), [2.0, 2.0 * math.exp(-1)])


def test_callable_that_raises_or_returns_wrong_shape() -> None:
    def bad(x: np.ndarray, a: float) -> np.ndarray:
        raise RuntimeError("boom")

    def wrong(x: np.ndarray, a: float) -> np.ndarray:
        return np.ones(3)

    with pytest.raises(ModelError, match=r"raised RuntimeError: boom"):
        Model.from_callable(bad).eval(np.arange(5.0))
    with pytest.raises(ModelError, match=r"returned shape \(3,\) for x of shape \(5,\)"):
        Model.from_callable(wrong).eval(np.arange(5.0))
    with pytest.raises(ModelError, match=r"must take x and at least one parameter"):
        Model.from_callable(lambda x: x)


def test_param_validation() -> None:
    with pytest.raises(ParameterError, match=r"lower bound 2 is above upper bound 1"):
        Param("k", 1.5, lower=2, upper=1)
    with pytest.raises(ParameterError, match=r"value 5 lies outside its bounds \[0, 1\]"):
        Param("k", 5, lower=0, upper=1)
    with pytest.raises(ParameterError, match=r"name '__k' is not valid"):
        Param("__k")
    assert Param("k", 1.0, positive=True).lower == 0.0


def test_unknown_parameter_name_has_hint() -> None:
    m = Model.from_formula("baseline + amplitude*exp(-k*x)")
    with pytest.raises(
        ParameterError, match=r"'baselin' is not a parameter.*Did you mean 'baseline'"
    ):
        m.eval([1.0], baselin=1.0)


def test_handles_and_derived() -> None:
    m = Model.from_formula(
        "baseline + amplitude*exp(-k*x)",
        derived=[Derived("half_life", Expr.parse("log(2)/k"), axis="x")],
        handles=[
            Handle(
                "half",
                "half-life point",
                Expr.parse("log(2)/k"),
                Expr.parse("baseline + amplitude/2"),
                ("k",),
            )
        ],
    )
    vals = {"baseline": 1.0, "amplitude": 4.0, "k": 0.5}
    hx, hy = m.handles[0].position(vals)
    assert hx == pytest.approx(math.log(2) / 0.5)
    # the half-life point lies on the curve: common practice definition of a half-life
    assert m.eval([hx], vals)[0] == pytest.approx(hy)
    assert m.derived_values(vals)["half_life"] == pytest.approx(math.log(2) / 0.5)
    with pytest.raises(ModelError, match=r"handle 'bad' uses unknown names \['x'\]"):
        Model.from_formula(
            "a*x", handles=[Handle("bad", "bad", Expr.parse("x"), Expr.parse("a"), ("a",))]
        )


def test_json_round_trip_is_exact() -> None:
    m = Model.from_formula(
        "full_effect + (zero_dose - full_effect)/(1 + (x/10**log_ec50)**n_h)",
        params=[
            Param("zero_dose", 0.0),
            Param("full_effect", 100.0),
            Param("log_ec50", -6.0),
            Param("n_h", 1.0, lower=0),
        ],
        derived={"ec50": "10**log_ec50"},
        domain="x>=0",
    )
    d = json.loads(json.dumps(m.to_dict()))
    back = Model.from_dict(d)
    assert back == m and back.to_dict() == m.to_dict()
    x = np.logspace(-9, -3, 13)
    np.testing.assert_array_equal(back.eval(x), m.eval(x))


def test_callable_model_cannot_be_rebuilt_from_json() -> None:
    def f(x: np.ndarray, a: float) -> np.ndarray:
        return a * x

    with pytest.raises(ModelError, match=r"was a Python callable"):
        Model.from_dict(Model.from_callable(f).to_dict())


def test_models_are_immutable() -> None:
    m = Model.from_formula("a*x")
    with pytest.raises(AttributeError):
        m.name = "other"  # type: ignore[misc]
    m2 = m.with_param("a", lower=0.0)
    assert m.param("a").lower == -math.inf and m2.param("a").lower == 0.0


def test_value_and_jacobian_match_scipy_differentiation() -> None:
    # Reference: scipy.differentiate.jacobian (adaptive finite differences with an error
    # estimate) on every catalog model at its default values, over points in its domain.
    from scipy.differentiate import jacobian

    from curvewright.catalog import catalog

    for m in catalog().values():
        x = np.linspace(0.5, 8.0, 7) if m.domain != "all" else np.linspace(-3.0, 8.0, 7)
        theta = np.array([p.value for p in m.params])
        f, J = m.value_and_jacobian(x, theta)
        np.testing.assert_array_equal(f, m.eval(x, m.defaults()))
        assert J.shape == (x.size, len(m.params))

        def f_of(t: np.ndarray, m: Model = m, x: np.ndarray = x) -> np.ndarray:
            # scipy passes t with extra trailing axes (its step sizes); x goes in front of them.
            xs = x.reshape(x.shape + (1,) * (t.ndim - 1))
            return np.broadcast_to(m.func(xs, *t), xs.shape[:1] + t.shape[1:])

        ref = jacobian(f_of, theta)
        scale = np.max(np.abs(ref.df), axis=0) + 1e-300
        # scipy's own error estimate (entries near zero may miss its relative tolerance).
        assert np.all(ref.error <= 1e-7 * scale), m.name
        np.testing.assert_allclose(J / scale, ref.df / scale, rtol=0, atol=1e-6, err_msg=m.name)


def test_value_and_jacobian_needs_a_formula() -> None:
    m = Model.from_callable(lambda x, a: a * x, name="scaled")
    assert not m.has_jacobian
    with pytest.raises(ModelError, match=r"'scaled' is a Python callable; it has no analytic"):
        m.value_and_jacobian(np.ones(2), [1.0])
