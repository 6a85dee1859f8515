"""The single fit: :func:`fit`, one model to one set of points (or several sharing everything).

Validates through :mod:`.problem`, runs :mod:`.engine`'s ladder and polish, and assembles the
:class:`FitResult` through :mod:`.assemble`.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..data import Dataset, as_datasets, make_dataset
from ..errors import DataError, FitError, ModelError
from ..messages import outcome
from ..models import Model
from ..parameters import Parameter, Parameters
from ..result import FitResult
from ..thresholds import CLEARLY_LOWER
from .assemble import (
    _Degeneracy,
    _degeneracy,
    _finish,
    _Search,
    _Solution,
    _solution,
    _start_support,
)
from .engine import (
    _STOP,
    _first_method,
    _global_search,
    _ladder,
    _linear_run,
    _polish,
    _Run,
    _Watch,
)
from .problem import (
    Loss,
    Method,
    Weighting,
    _build_problem,
    _check_limits,
    _Problem,
    request_parameters,
    resolve_model,
)

__all__ = ["fit"]


# ============================================================================ suspect stops
def _search_globally(
    prob: _Problem,
    watch: _Watch,
    runs: list[_Run],
    sol: _Solution,
    deg: _Degeneracy,
    method: str,
    budget: int,
    thin_start: bool = False,
) -> tuple[_Solution, _Degeneracy, _Search | None]:
    """The global search after a suspect stop; the better minimum is kept (``runs`` grows).

    The user's point stays unless the search's is clearly lower
    (:data:`~curvewright.thresholds.CLEARLY_LOWER`); the point kept is judged again. No
    search (None) when there was nothing new to try: no start was given and the model has no
    start rule, so the fit began from the multi-start already.
    """
    user, deg0 = sol.kept, deg
    assert user is not None  # a suspect point is a solver run's
    first = _first_method(prob, method)
    found = _global_search(prob, watch, first, budget)
    if not found:
        return sol, deg, None
    runs.extend(found)
    good = [r for r in found if outcome(r.code).success and math.isfinite(r.objective)]
    best = min(good, key=lambda r: r.objective) if good else None
    used = best is not None and best.objective < user.objective * (1.0 - CLEARLY_LOWER)
    if used and best is not None:
        sol = _solution(prob, runs, keep=best)
        deg = _degeneracy(prob, sol)
    else:
        sol = _solution(prob, runs, keep=user)
    why = [*deg0.reasons, *(["thin_support"] if deg0.thin else [])]
    if thin_start:
        why.append("thin_start")
    search = _Search(
        why=tuple(why) or ("correlation",),
        user_objective=user.objective,
        search_objective=best.objective if best is not None else math.nan,
        used=used,
    )
    return sol, deg, search


def _run_and_judge(
    prob: _Problem, watch: _Watch, method: str, budget: int
) -> tuple[list[_Run], _Solution, _Degeneracy, _Search | None]:
    """The engine's runs on a problem and the verdict on where they stopped.

    The ladder, the polish, then the degenerate-stop check (:func:`.assemble._degeneracy`) and,
    for a suspect point, the global search (:func:`_search_globally`). The one sequence
    :func:`fit` and :func:`~curvewright.fitting.global_fit.fit_global` both run.
    """
    runs = _ladder(prob, watch, method, budget)
    best = min(runs, key=lambda r: r.objective)
    if runs[-1].code not in _STOP and math.isfinite(best.objective):
        polished = _polish(prob, watch, best, budget)
        # Kept only if it does not lose ground: the polish refines, it never replaces a better run.
        if polished.objective <= best.objective and outcome(polished.code).success:
            runs.append(polished)
    sol = _solution(prob, runs)
    deg = _degeneracy(prob, sol)
    search = None
    if runs[-1].code not in _STOP:
        # A start on a feature narrower than the data's spacing has seen nothing of the data's
        # shape: the minimum it reached is suspect even when nothing is wrong there.
        thin_start = not deg.suspect and bool(_start_support(prob, watch.first_jacobian))
        if deg.suspect or thin_start:
            sol, deg, search = _search_globally(
                prob, watch, runs, sol, deg, method, budget, thin_start
            )
    return runs, sol, deg, search


# ============================================================================ entry point
def fit(
    model: Model | str | Callable[..., Any],
    x: ArrayLike | str | None = None,
    y: ArrayLike | str | None = None,
    *,
    data: pd.DataFrame | Mapping[str, Any] | None = None,
    dataset: Dataset | Sequence[Dataset] | None = None,
    sigma: ArrayLike | str | None = None,
    params: Parameters | Sequence[Parameter] | None = None,
    start: Mapping[str, float] | None = None,
    fixed: Mapping[str, float] | Iterable[str] | None = None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None = None,
    links: Mapping[str, str] | None = None,
    weights: Weighting | None = None,
    loss: Loss = "squared",
    loss_scale: float | None = None,
    exclude: ArrayLike | None = None,
    absolute_sigma: bool = False,
    method: Method = "auto",
    max_evaluations: int | None = None,
    timeout: float | None = None,
    cancel: threading.Event | Callable[[], bool] | None = None,
    progress: Callable[[int, float], None] | None = None,
) -> FitResult:
    """Fit a model to data by (weighted, optionally robust) nonlinear least squares.

    Parameters
    ----------
    model : Model, str or callable
        A :class:`Model`, a catalog name (see :func:`curvewright.catalog`), a formula text such
        as ``"baseline + amplitude*exp(-k*x)"``, or a Python callable ``f(x, a, b, ...)``.
    x, y : array_like or str
        The observations, or column names of ``data``.
    data : DataFrame, optional
        Table holding the columns named by ``x``, ``y`` (and ``sigma``).
    dataset : Dataset or sequence of Dataset, optional
        Already validated data instead of ``x``/``y``/``data``; several datasets share every
        parameter (their residuals are stacked).
    sigma : array_like or str, optional
        Standard deviation of each y (or a column name); implies ``weights="sigma"``.
    params : Parameters or sequence of Parameter, optional
        The parameters' settings as records (value = start, bounds, fixed, link, scope), e.g.
        ``Parameters.for_model(model)`` edited, or a widget's or an earlier result's
        ``parameters``. Parameters without a record take the model's bounds and a guided
        start; a record's NaN value also asks for a guided start.
    start : mapping, optional
        Shorthand: starting values by name; the others come from the model's guided start.
    fixed : mapping or iterable of str, optional
        Shorthand: parameters held constant: ``{name: value}``, or names held at their start
        value.
    bounds : mapping, optional
        Shorthand: ``{name: (lower, upper)}`` with None for no bound; they replace the model's
        bounds.
    links : mapping, optional
        Shorthand: ``{name: "expression of other parameters"}``, e.g. ``{"a2": "2*a1"}``.
        The shorthand is made into records once (:meth:`Parameters.from_shorthand`); a
        parameter may be set by a record or by the shorthand, not both.
    weights : {"none", "sigma", "relative", "poisson"}, optional
        ``"sigma"``: 1/sigma²; ``"relative"``: 1/y² (constant coefficient of variation);
        ``"poisson"``: 1/|y| (counts). Default: ``"sigma"`` when sigma is given, else none.
    loss : {"squared", "pseudo_huber", "huber"}
        ``"squared"`` is ordinary least squares (the sum of squared residuals); the robust
        losses down-weight outliers:
        ``"pseudo_huber"`` (``2*(sqrt(1 + z) - 1)`` of the squared scaled residual z, a smooth
        version of Huber's) and ``"huber"`` (quadratic up to the scale, linear beyond).
    loss_scale : float, optional
        Residual size (in weighted units) where the robust loss starts to bend; default 1.
    exclude : array_like, optional
        Rows to leave out: integer indices of the input or a boolean mask (True = exclude).
    absolute_sigma : bool
        Take sigma as exact (covariance not scaled by the residual variance).
    method : {"auto", "levenberg_marquardt", "trust_region"}
        Solver of the first run: Levenberg-Marquardt (MINPACK) or the trust-region reflective
        method. "auto" picks Levenberg-Marquardt unless the loss is robust.
    max_evaluations : int, optional
        Limit on model evaluations over all runs.
    timeout : float, optional
        Limit in seconds; the best point so far is returned, marked as not converged.
    cancel : threading.Event or callable, optional
        Polled at every evaluation; when set (or returning True) the fit stops.
    progress : callable, optional
        ``progress(evaluations, best_ssr)``, called at most about ten times a second.

    Returns
    -------
    FitResult

    Raises
    ------
    DataError
        Lengths differ, infinite values, unknown or non-numeric columns, no more points than
        free parameters, weights that cannot be formed.
    DomainError
        Some x lie outside the model's domain (e.g. x <= 0 for a model that takes log x).
    ParameterError
        Unknown names, bad bounds, a start outside its bounds, bad links or options, a
        parameter set both by ``params=`` and by the shorthand.
    ModelError
        The model is malformed or its function raises / returns the wrong shape.
    FitError
        The residuals are not finite at the starting values, so the fit cannot start.
    """
    timeout, cancel_fn = _check_limits(method, max_evaluations, timeout, cancel)
    m = resolve_model(model)
    if dataset is not None:
        if x is not None or y is not None or data is not None or sigma is not None:
            raise DataError("Give either dataset=... or x, y (and data=, sigma=), not both.")
        datasets = as_datasets(dataset)
        if not datasets or not all(isinstance(d, Dataset) for d in datasets):
            raise DataError("dataset must be a curvewright Dataset or a sequence of them.")
        if exclude is not None:
            if len(datasets) != 1:
                raise DataError("exclude= works with one dataset; set exclusions on each Dataset.")
            datasets = (datasets[0].with_exclusions(exclude),)
    else:
        datasets = (make_dataset(x, y, data=data, sigma=sigma, exclude=exclude),)

    records = request_parameters(m, params, start=start, fixed=fixed, bounds=bounds, links=links)
    prob = _build_problem(
        m,
        datasets,
        parameters=records,
        weights=weights,
        loss=loss,
        loss_scale=loss_scale,
        absolute_sigma=absolute_sigma,
    )
    r0 = prob.weighted(prob.values0)
    if not np.all(np.isfinite(r0)):
        rows = np.flatnonzero(~np.isfinite(r0))[:5].tolist()
        raise FitError(
            f"The model gives NaN or infinite values at the starting values for used points "
            f"{rows} (x = {', '.join(f'{v:g}' for v in prob.x[rows])}); the fit cannot start. "
            f"Starting values: {prob.values0}. Change them, add bounds, or exclude those points."
        )
    if not prob.free:
        return _finish(prob, [])
    lin = _linear_run(prob)
    if lin is not None:
        return _finish(prob, [lin])
    deadline = None if timeout is None else time.monotonic() + timeout
    watch = _Watch(prob, deadline, max_evaluations, cancel_fn, progress)
    budget = max_evaluations if max_evaluations is not None else 2000 * (len(prob.free) + 1)
    try:
        runs, sol, deg, search = _run_and_judge(prob, watch, method, budget)
        if progress is not None:
            progress(watch.evaluations, watch.best_ssr)
        return _finish(prob, runs, sol, deg, search)
    except ModelError:
        raise
    except (ValueError, ArithmeticError) as exc:  # pragma: no cover - a bug, said plainly
        raise FitError(f"Computing the fit statistics failed: {exc}") from exc
