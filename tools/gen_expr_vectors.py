"""Write tests/data/expr_vectors.json: formulas, their trees and numpy's values, for JS parity.

Run from the repository root: ``PYTHONPATH=src .venv/bin/python tools/gen_expr_vectors.py``.
``tests/test_expr.py`` rebuilds the same data in memory and compares it with the committed file,
so the file cannot drift from the Python evaluator.

Each case is ``{id, formula, tree, names, env, x, y}``. ``y`` is the compiled function of
``curvewright.expr`` called with ``x`` as a float64 array and every ``env`` value as a Python
float, which is how a fit evaluates a model; it matters for ``**``, where numpy takes fast paths
for a scalar exponent (2, 0.5, -1) but not for an exponent array. Non-finite numbers in ``x``
and ``y`` are the strings ``"NaN"``, ``"Infinity"`` and ``"-Infinity"``; ``-0.0`` is kept.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np

from curvewright.expr import Expr

OUTPUT = Path(__file__).resolve().parent.parent / "tests" / "data" / "expr_vectors.json"

INF = math.inf
NAN = math.nan

# A spread of x values for formulas with no edge of their own: zero, both signs, small and large.
X_GENERAL = [-3.5, -1.0, -0.0, 0.0, 0.25, 1.0, 2.0, 10.0, 1e3]
X_POSITIVE = [1e-9, 1e-3, 0.1, 0.5, 1.0, 2.0, 10.0, 100.0, 1e6]
X_DOSE = [0.0, 1e-9, 1e-7, 1e-6, 3e-6, 1e-5, 1e-4, 1e-2]

# (id, formula, env, x). Every node type, every function and both constants appear below.
CASES: list[tuple[str, str, dict[str, float], list[float]]] = [
    # Node types one by one.
    ("num", "2.5", {}, [0.0, 1.0]),
    ("num_integer_literal", "7", {}, [0.0]),
    ("num_scientific", "1e-3 * x + 2.5e2", {}, X_GENERAL),
    ("name", "x", {}, X_GENERAL),
    ("const_pi", "2 * pi * x", {}, X_GENERAL),
    ("const_e", "e ** x", {}, [-1.0, 0.0, 1.0, 2.0]),
    ("neg", "-x", {}, X_GENERAL),
    ("neg_twice", "-(-x)", {}, X_GENERAL),
    ("unary_plus_drops", "+x + +a", {"a": 1.5}, [0.0, 1.0]),
    ("add", "x + a", {"a": 0.1}, X_GENERAL),
    ("sub", "x - a", {"a": 0.1}, X_GENERAL),
    ("mul", "a * x", {"a": -2.0}, X_GENERAL),
    ("div", "x / a", {"a": 3.0}, X_GENERAL),
    ("div_by_zero", "a / x", {"a": 1.0}, [-0.0, 0.0, 2.0, -INF, INF]),
    ("zero_over_zero", "x / x", {}, [0.0, 1.0, INF, NAN]),
    ("pow", "x ** a", {"a": 1.7}, X_GENERAL),
    # Precedence and associativity (Python's grammar: ** is right-associative and binds tighter
    # than a unary minus on its left; - and / are left-associative).
    ("pow_right_assoc", "2 ** 3 ** 2", {}, [0.0]),
    ("pow_left_grouped", "(2 ** 3) ** 2", {}, [0.0]),
    ("neg_pow", "-x ** 2", {}, X_GENERAL),
    ("pow_of_neg", "(-x) ** 3", {}, X_GENERAL),
    ("pow_neg_exponent", "2 ** -1 + x ** -a", {"a": 2.0}, [-2.0, -0.0, 0.0, 0.5, 4.0]),
    ("pow_tower_neg", "a ** -b ** x", {"a": 2.0, "b": 1.5}, [0.0, 1.0, 2.0]),
    ("sub_left_assoc", "x - a - b", {"a": 1.0, "b": 2.0}, X_GENERAL),
    ("div_left_assoc", "x / a / b", {"a": 2.0, "b": 4.0}, X_GENERAL),
    ("sub_right_grouped", "x - (a - b)", {"a": 1.0, "b": 2.0}, X_GENERAL),
    ("mul_before_add", "a + b * x - x / b", {"a": 1.0, "b": 3.0}, X_GENERAL),
    ("unary_minus_mul", "-a * x ** 2 / -b", {"a": 2.0, "b": 4.0}, X_GENERAL),
    # Every function, with edge values of its domain.
    ("fn_exp", "exp(x)", {}, [-INF, -800.0, -1.0, 0.0, 1.0, 709.0, 710.0, INF, NAN]),
    ("fn_log", "log(x)", {}, [-1.0, -0.0, 0.0, 1e-300, 1.0, math.e, INF]),
    ("fn_log10", "log10(x)", {}, [-1.0, 0.0, 1e-9, 1.0, 1000.0, INF]),
    ("fn_sqrt", "sqrt(x)", {}, [-INF, -1.0, -0.0, 0.0, 2.0, 4.0, INF]),
    ("fn_abs", "abs(x)", {}, [-INF, -2.5, -0.0, 0.0, 3.0, NAN]),
    ("fn_sin", "sin(x)", {}, [-math.pi, -1.0, 0.0, 0.5, math.pi / 2, 1e6, INF]),
    ("fn_cos", "cos(x)", {}, [-1.0, 0.0, 0.5, math.pi, 1e6, -INF]),
    ("fn_tan", "tan(x)", {}, [-1.0, 0.0, 0.5, math.pi / 4, 1.5, math.pi / 2]),
    ("fn_arctan", "arctan(x)", {}, [-INF, -1e10, -1.0, 0.0, 1.0, 1e10, INF]),
    ("fn_tanh", "tanh(x)", {}, [-INF, -20.0, -0.5, -0.0, 0.0, 0.5, 20.0, INF]),
    ("fn_nested", "sqrt(abs(sin(x))) + log(exp(x))", {}, [-2.0, 0.0, 1.0, 3.0]),
    # Powers at their edges: negative bases, large exponents, numpy's scalar-exponent paths.
    ("pow_large_exponent", "10 ** x", {}, [-400.0, -320.0, -1.0, 0.0, 1.0, 308.0, 309.0, 400.0]),
    ("pow_negative_base_integer", "x ** 3 + x ** 2", {}, [-2.0, -1.5, -0.0, 0.0, 1.5]),
    ("pow_negative_base_fraction", "x ** 2.5", {}, [-8.0, -1.0, -0.0, 0.0, 4.0]),
    ("pow_negative_base_cube_root", "(-8) ** (1 / 3) + x", {}, [0.0]),
    # numpy: a scalar exponent 0.5 is computed as sqrt (sqrt(-inf) = NaN, sqrt(-0) = -0) ...
    ("pow_half_scalar_exponent", "x ** 0.5 + x ** a", {"a": 0.5}, [-INF, -4.0, -0.0, 0.0, 2.0]),
    # ... while an exponent array takes C pow (pow(-inf, 0.5) = inf, pow(-0, 0.5) = 0). The
    # exponent is 0.5 for every x here, but it depends on x, so numpy sees an array.
    ("pow_half_array_exponent", "x ** (0.5 + 0 * arctan(x))", {}, [-INF, -4.0, -0.0, 0.0, 2.0]),
    ("pow_square_reciprocal", "x ** 2 + x ** -1", {}, [-INF, -3.0, -0.0, 0.0, 1e-200, 1e200]),
    ("pow_zero_exponent", "x ** 0", {}, [-INF, -1.0, 0.0, INF, NAN]),
    # C pow gives pow(1, y) = 1 for every y and pow(-1, +-inf) = 1; JS Math.pow gives NaN.
    ("pow_base_one", "1 ** x", {}, [-INF, 0.0, 2.5, INF, NAN]),
    ("pow_base_minus_one", "(-1) ** x", {}, [-INF, -1.0, 0.5, 2.0, INF]),
    ("inf_minus_inf", "x - x + x * 0", {}, [1.0, INF, -INF]),
    # Model formulas of the kind the catalog holds.
    (
        "dose_response_4pl",
        "full_effect + (zero_dose - full_effect)/(1 + (x/10**log_ec50)**n_h)",
        {"zero_dose": 5.0, "full_effect": 95.0, "log_ec50": -6.0, "n_h": 1.2},
        X_DOSE,
    ),
    (
        "dose_response_5pl",
        "full_effect + (zero_dose - full_effect)/(1 + (2**(1/g) - 1)*10**(n_h*(log10(x) - m)))**g",
        {"zero_dose": 0.0, "full_effect": 100.0, "m": -5.5, "n_h": -0.8, "g": 1.7},
        X_DOSE,
    ),
    (
        "dose_response_3pl",
        "full_effect/(1 + (10**log_ec50/x)**n_h)",
        {"full_effect": 2.0, "log_ec50": -6.0, "n_h": 1.5},
        X_DOSE,
    ),
    (
        "exponential_decay",
        "baseline + amplitude*exp(-k*x)",
        {"baseline": 2.0, "amplitude": 10.0, "k": 0.35},
        [0.0, 0.5, 1.0, 2.0, 5.0, 20.0, 2000.0],
    ),
    (
        "biexponential_decay",
        "baseline + a1*exp(-k1*x) + a2*exp(-k2*x)",
        {"baseline": 0.5, "a1": 6.0, "k1": 2.0, "a2": 3.0, "k2": 0.1},
        [0.0, 0.1, 1.0, 10.0, 100.0],
    ),
    ("michaelis_menten", "Vmax*x/(Km + x)", {"Vmax": 12.0, "Km": 0.8}, [0.0, *X_POSITIVE]),
    (
        "hill_equation",
        "Vmax*x**n/(K**n + x**n)",
        {"Vmax": 1.0, "K": 2.0, "n": 2.3},
        [0.0, *X_POSITIVE],
    ),
    (
        "gaussian_peak",
        "base + amp*exp(-0.5*((x - mu)/sigma)**2)",
        {"base": 0.1, "amp": 3.0, "mu": 1.0, "sigma": 0.4},
        X_GENERAL,
    ),
    (
        "lorentzian_peak",
        "base + amp/(1 + ((x - x0)/w)**2)",
        {"base": 0.0, "amp": 2.0, "x0": -1.0, "w": 0.5},
        X_GENERAL,
    ),
    (
        "boltzmann",
        "low + (high - low)/(1 + exp((x_half - x)/width))",
        {"low": -70.0, "high": 20.0, "x_half": -30.0, "width": 5.0},
        [-1e4, -100.0, -30.0, 0.0, 50.0, 1e4],
    ),
    (
        "logistic_growth",
        "K/(1 + ((K - N0)/N0)*exp(-r*x))",
        {"K": 1000.0, "N0": 10.0, "r": 0.7},
        [0.0, 1.0, 5.0, 10.0, 1e3],
    ),
    ("gompertz", "a*exp(-b*exp(-c*x))", {"a": 5.0, "b": 3.0, "c": 0.4}, [-10.0, 0.0, 2.0, 50.0]),
    ("power_law", "a*x**b", {"a": 2.0, "b": -0.75}, [-1.0, 0.0, *X_POSITIVE]),
    ("half_life_from_rate", "log(2)/k", {"k": 0.25}, [0.0]),
    ("multiline_text", "(a\n + b * x)", {"a": 1.0, "b": 2.0}, [0.0, 1.0]),
]


def encode(value: float) -> float | str:
    """A JSON-safe number: the float itself, or a string for NaN and the infinities."""
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "Infinity" if value > 0 else "-Infinity"
    return value


def build() -> dict[str, Any]:
    """The whole vector file as a JSON-ready object."""
    cases = []
    for case_id, formula, env, xs in CASES:
        expr = Expr.parse(formula)
        argnames = ["x", *env]
        function = expr.compile(argnames)
        x = np.array(xs, dtype=np.float64)
        y = np.broadcast_to(function(x, *env.values()), x.shape)
        cases.append(
            {
                "id": case_id,
                "formula": formula,
                "tree": expr.to_json(),
                "names": list(expr.names),
                "env": dict(env),
                "x": [encode(float(v)) for v in x],
                "y": [encode(float(v)) for v in y],
            }
        )
    return {
        "about": (
            "Parity vectors for js/expr.ts, generated by tools/gen_expr_vectors.py from "
            "curvewright.expr (numpy float64). y is compiled(x as an array, env values as "
            "scalars). Non-finite numbers are the strings NaN, Infinity, -Infinity. Compare "
            "finite values with a relative tolerance: libm and JS Math may differ in the last bit."
        ),
        "cases": cases,
    }


def render() -> str:
    """The exact text written to the file."""
    return json.dumps(build(), indent=1, allow_nan=False) + "\n"


def main() -> int:
    """Write the vector file and say where."""
    OUTPUT.write_text(render(), encoding="utf-8")
    print(f"wrote {len(CASES)} cases to {OUTPUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
