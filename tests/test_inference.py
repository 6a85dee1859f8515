"""curvewright.inference: the one home of quantiles, intervals, the delta method and correlation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from curvewright.errors import DataError, ParameterError
from curvewright.expr import Expr
from curvewright.inference import (
    correlated_pairs,
    correlation_matrix,
    delta_method_se,
    derived_value_and_se,
    quantile,
    t_quantile,
)


def test_quantiles_match_the_printed_tables() -> None:
    # Two-sided 95%: z = 1.960 and t on 10 df = 2.228, as printed in the standard normal and
    # Student t tables (common practice; values from memory, to the tables' three decimals).
    assert quantile(0.95, 10, known_sigma=True) == pytest.approx(1.960, abs=5e-4)
    assert quantile(0.95, 10) == pytest.approx(2.228, abs=5e-4)
    assert t_quantile(0.95, 10) == quantile(0.95, 10)


def test_no_degrees_of_freedom_is_nan_for_tables_and_an_error_for_statistics() -> None:
    assert math.isnan(quantile(0.95, 0))
    with pytest.raises(DataError, match="0 residual degrees of freedom"):
        t_quantile(0.95, 0)


@pytest.mark.parametrize("level", [0.0, 1.0, 95, True, "0.95"])
def test_a_level_outside_0_1_or_not_a_number_is_refused(level: object) -> None:
    with pytest.raises(ParameterError, match="level must be a probability between 0 and 1"):
        quantile(level, 10)  # type: ignore[arg-type]


def test_correlation_matrix_agrees_with_numpy_corrcoef() -> None:
    # numpy.corrcoef of the same samples is the outside reference.
    rng = np.random.default_rng(7)
    a = rng.normal(size=(3, 50))
    a[2] = a[0] + 0.01 * a[2]  # a nearly collinear pair
    np.testing.assert_allclose(correlation_matrix(np.cov(a)), np.corrcoef(a), rtol=1e-12)
    assert [(i, j) for i, j, _ in correlated_pairs(np.corrcoef(a), 0.99)] == [(0, 2)]


def test_correlation_of_a_zero_or_undefined_variance_is_nan() -> None:
    r = correlation_matrix(np.array([[1.0, 0.0], [0.0, 0.0]]))
    assert r[0, 0] == 1.0 and np.isnan(r[1, 1]) and np.isnan(r[0, 1])
    assert correlated_pairs(r, 0.5) == []


def test_delta_method_of_a_linear_function_is_exact() -> None:
    # var(a'p) = a' C a exactly for a linear function (the delta method's defining case).
    cov = np.array([[4.0, 1.0], [1.0, 9.0]])
    a = np.array([2.0, -1.0])
    assert delta_method_se(a, cov)[0] == pytest.approx(math.sqrt(16 - 4 + 9))
    value, se = derived_value_and_se(
        Expr.parse("2*p - q"), ["p", "q"], {"p": 3.0, "q": 1.0}, np.eye(2), cov
    )
    assert value == 5.0 and se == pytest.approx(math.sqrt(21.0))
    # a fixed parameter (a zero row of the parameter Jacobian) contributes nothing
    _, se_fixed = derived_value_and_se(
        Expr.parse("2*p - q"),
        ["p", "q"],
        {"p": 3.0, "q": 1.0},
        np.array([[1.0], [0.0]]),
        np.array([[4.0]]),
    )
    assert se_fixed == pytest.approx(4.0)
