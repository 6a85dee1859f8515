"""Models and results pickle through their exact JSON form (process pools, clusters).

No outside reference is involved: the check is that what comes back is the same object, field
for field, as its JSON round trip; and that a real process pool (spawned interpreters) carries
them.
"""

from __future__ import annotations

import multiprocessing
import pickle
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

import curvewright as cw
from curvewright.errors import ModelError
from curvewright.models import Model
from curvewright.result import FitResult

X = np.array([0.0, 1.0, 2.0, 3.0, 5.0, 8.0, 12.0, 16.0])
Y = np.array([10.1, 7.6, 5.9, 4.8, 3.4, 2.6, 2.2, 2.05])


def decay(x: np.ndarray, base: float, amp: float, k: float) -> np.ndarray:
    """A module-level function: pickle finds it by reference."""
    return base + amp * np.exp(-k * x)


def _fit_in_worker(model: Model) -> FitResult:
    return cw.fit(model, X, Y, start={"base": 2.0, "amp": 8.0, "k": 0.3})


def test_a_formula_model_round_trips_with_its_start_rule() -> None:
    for m in cw.catalog().values():
        back = pickle.loads(pickle.dumps(m))
        assert back == m
        assert back.to_dict() == m.to_dict()
        assert back.start_rule is m.start_rule  # the built-in rule, found again by name
    custom = Model.from_formula("a*x + b", start_rule=_line_rule)
    assert pickle.loads(pickle.dumps(custom)).start_rule is _line_rule


def _line_rule(x: np.ndarray, y: np.ndarray) -> dict[str, float]:
    return {"a": 1.0, "b": 0.0}


def test_a_callable_model_carries_its_function() -> None:
    m = Model.from_callable(decay)
    back = pickle.loads(pickle.dumps(m))
    assert back.to_dict() == m.to_dict()
    np.testing.assert_array_equal(back.eval(X, {"k": 0.5}), m.eval(X, {"k": 0.5}))
    assert getattr(back.func, "__wrapped__", None) is decay


def test_a_lambda_model_says_why_it_cannot_be_pickled() -> None:
    m = Model.from_callable(lambda x, a: a * x, name="scaled")
    with pytest.raises(ModelError, match=r"'scaled' cannot be pickled.*module level"):
        pickle.dumps(m)


@pytest.mark.parametrize("model", ["exponential_growth", "a*exp(k*x)", decay])
def test_results_round_trip_exactly(model: object) -> None:
    x = np.array([0.0, 1, 2, 3, 4, 5, 6])
    y = np.array([1.02, 1.63, 2.75, 4.4, 7.5, 12.1, 20.3])
    start = {"base": 0.0, "amp": 1.0, "k": -0.5} if model is decay else None
    r = cw.fit(model, x, y, start=start)  # type: ignore[arg-type]
    back = pickle.loads(pickle.dumps(r))
    assert back.to_json() == r.to_json()
    np.testing.assert_array_equal(back.predict(x), r.predict(x))


def test_a_process_pool_carries_models_and_results() -> None:
    # Spawned interpreters: nothing is inherited, everything crosses as pickles.
    models = [Model.from_callable(decay), Model.from_formula("base + amp*exp(-k*x)")]
    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=1, mp_context=ctx) as pool:
        remote = list(pool.map(_fit_in_worker, models))
    for m, r in zip(models, remote, strict=True):
        local = _fit_in_worker(m)
        # Another interpreter may pick other BLAS threads; compare to the solver's accuracy.
        assert r.model.to_dict() == local.model.to_dict()
        for n in local.free:
            assert r.values[n] == pytest.approx(local.values[n], rel=1e-9)
        assert r.ssr == pytest.approx(local.ssr, rel=1e-9)
