"""The fitting engine: validate a fit request, run lmfit with a fallback ladder, build a FitResult.

Like ``scipy.optimize.least_squares``, :func:`fit` first validates and normalises every input
(model, data, starting values, fixed values, bounds, links, weights, loss) into one
:class:`_Problem` of clean arrays, and only then runs solvers. Solver runs go through lmfit
(MINPACK's Levenberg-Marquardt or scipy's trust-region reflective method); the statistics of
the result (Jacobian, covariance, information criteria, diagnostics) are computed here from the
model's analytic derivatives when it is a formula, by central differences otherwise.

The core is ready for several datasets per fit: every dataset shares the model's parameters and
their residuals are stacked (a global fit in its simplest form).
"""

from __future__ import annotations

import math
import threading
import time
import warnings
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import lmfit
import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import least_squares

from .catalog import catalog
from .data import Dataset, as_datasets, make_dataset
from .errors import DataError, FitError, FormulaError, ModelError, ParameterError
from .expr import Expr
from .linear import solve_polynomial
from .messages import LEAST_SQUARES_STATUS, LEASTSQ_IER, outcome
from .models import Model, as_number, unknown_name_message
from .numerics import aicc as _aicc
from .numerics import bic as _bic
from .numerics import finite_difference_jacobian
from .result import HIGH_CORRELATION, NOT_IDENTIFIED_RSE, Attempt, Diagnostic, FitResult
from .start import guided_start

__all__ = ["fit", "point_weights", "resolve_model"]

FloatArray = NDArray[np.float64]
Weighting = Literal["none", "sigma", "relative", "poisson"]
Loss = Literal["squared", "pseudo_huber", "huber"]
Method = Literal["auto", "levenberg_marquardt", "trust_region"]

_WEIGHTINGS = ("none", "sigma", "relative", "poisson")
_LOSSES = ("squared", "pseudo_huber", "huber")
_METHODS = ("auto", "levenberg_marquardt", "trust_region")
_LM = "levenberg_marquardt"
_TR = "trust_region"
# Our losses by what they are; scipy's least_squares calls the sum of squares "linear" (rho(z) = z
# of the squared residual z) and the pseudo-Huber loss 2*(sqrt(1 + z) - 1) "soft_l1".
_SCIPY_LOSS = {"squared": "linear", "pseudo_huber": "soft_l1", "huber": "huber"}
# Tolerances far below what double precision can resolve: MINPACK then stops when no further
# reduction is possible (ier 6-8, "converged_precision"), which is how certified NIST values are
# reached to 6+ digits. Runs stay short because each step at the minimum is rejected quickly.
_TOL = 1e-15
# A model value this large replaces a non-finite residual during the fit, so that the solver
# rejects the step and shrinks its trust region instead of failing.
_PENALTY = 1e100
# Reduction of the objective by a restart, relative, beyond which the first run counts as stalled.
_STALL = 1e-9
# A column-scaled Jacobian with condition number above this has a near-singular covariance.
_NEAR_SINGULAR = 1e10


class _AbortError(Exception):
    """Raised inside the residual function to stop a solver run (cancel or time limit)."""

    def __init__(self, code: str) -> None:
        super().__init__(code)
        self.code = code


# ============================================================================ model
def resolve_model(model: Model | str | Callable[..., Any]) -> Model:
    """Turn what a user passes as ``model`` into a :class:`Model`.

    Parameters
    ----------
    model : Model, str or callable
        A Model; the name of a catalog model; a formula text; or a Python callable
        ``f(x, a, b, ...)``.

    Returns
    -------
    Model

    Raises
    ------
    FormulaError
        A string that is neither a catalog name nor a valid formula.
    ModelError
        Anything else that is not a model.
    """
    if isinstance(model, Model):
        return model
    if isinstance(model, str):
        cat = catalog()
        if model in cat:
            return cat[model]
        if model.isidentifier():
            # A bare word is almost always a misspelt catalog name, not a one-symbol formula.
            raise ModelError(unknown_name_message(model, list(cat), "the catalog", kind="model"))
        return Model.from_formula(model)
    if callable(model):
        return Model.from_callable(model)
    raise ModelError(
        f"model must be a Model, a catalog name, a formula text or a callable f(x, ...); got "
        f"{type(model).__name__}."
    )


# ============================================================================ problem
@dataclass
class _Problem:
    """A validated fit request: clean arrays and parameter bookkeeping, nothing left to check."""

    model: Model
    datasets: tuple[Dataset, ...]
    x: FloatArray
    y: FloatArray
    w: FloatArray | None  # 1/sigma per used point, None when unweighted
    weighting: str
    loss: str
    loss_scale: float | None
    absolute_sigma: bool
    values0: dict[str, float]  # every parameter, start for free ones
    free: tuple[str, ...]
    fixed: dict[str, float]
    links: dict[str, Expr]
    lower: FloatArray  # bounds of the free parameters
    upper: FloatArray
    link_texts: dict[str, str] = field(default_factory=dict)
    _link_fns: list[tuple[str, Callable[..., Any]]] = field(default_factory=list)
    # d f / d parameter for every model parameter, compiled once (formula models only).
    deriv_fns: list[Callable[..., Any]] | None = None

    # Residuals are handed to the solvers divided by this, so their tolerances (scipy checks
    # the gradient in absolute terms) mean the same whatever the unit of y: y in mol/L or in
    # counts per million converges alike. Weighted residuals are already dimensionless.
    rscale: float = 1.0

    def __post_init__(self) -> None:
        if self.w is None:
            rms = float(np.sqrt(np.mean(self.y**2))) if self.y.size else 0.0
            self.rscale = rms if math.isfinite(rms) and rms > 0 else 1.0
        order = [*self.free, *self.fixed]
        self._link_fns = [(n, e.compile(order)) for n, e in self.links.items()]
        expr = self.model.expr
        if expr is not None:
            args = ["x", *self.model.param_names]
            self.deriv_fns = [expr.derivative(m).compile(args) for m in self.model.param_names]

    def values(self, theta: Sequence[float] | FloatArray) -> dict[str, float]:
        v = dict(zip(self.free, (float(t) for t in theta), strict=True))
        v.update(self.fixed)
        args = [v[n] for n in (*self.free, *self.fixed)]
        with np.errstate(all="ignore"):
            for name, fn in self._link_fns:
                v[name] = float(fn(*args))
        return {n: v[n] for n in self.model.param_names}

    def curve(self, values: Mapping[str, float]) -> FloatArray:
        return self.model.eval(self.x, values)

    def weighted(self, values: Mapping[str, float]) -> FloatArray:
        r = self.y - self.curve(values)
        return r if self.w is None else r * self.w


def _as_names(fixed: Mapping[str, float] | Iterable[str] | None) -> dict[str, float | None]:
    if fixed is None:
        return {}
    if isinstance(fixed, str):
        return {fixed: None}
    if isinstance(fixed, Mapping):
        return {str(k): v for k, v in fixed.items()}
    return {str(k): None for k in fixed}


def _check_names(model: Model, names: Iterable[str], where: str) -> None:
    for n in names:
        if n not in model.param_names:
            raise ParameterError(
                unknown_name_message(n, model.param_names, f"model {model.name!r} (in {where}=)")
            )


def _bounds(
    model: Model, bounds: Mapping[str, tuple[float | None, float | None]] | None
) -> dict[str, tuple[float, float]]:
    out = {p.name: (p.lower, p.upper) for p in model.params}
    if bounds is None:
        return out
    if not isinstance(bounds, Mapping):
        raise ParameterError(
            "bounds must be a mapping {name: (lower, upper)}, e.g. {'k': (0, None)}; "
            f"got {type(bounds).__name__}."
        )
    _check_names(model, bounds, "bounds")
    for name, pair in bounds.items():
        if not isinstance(pair, (tuple, list)) or len(pair) != 2:
            raise ParameterError(
                f"bounds[{name!r}] must be a pair (lower, upper) with None for no bound; "
                f"got {pair!r}."
            )
        lo = -math.inf if pair[0] is None else as_number(pair[0], f"lower bound of {name!r}")
        hi = math.inf if pair[1] is None else as_number(pair[1], f"upper bound of {name!r}")
        if lo > hi:
            raise ParameterError(
                f"bounds[{name!r}]: lower bound {lo:g} is above upper bound {hi:g}; swap them."
            )
        if model.param(name).positive and lo < 0:
            raise ParameterError(
                f"bounds[{name!r}]: the model declares {name!r} positive, so its lower bound "
                f"cannot be {lo:g}; use 0 or more."
            )
        out[name] = (lo, hi)
    return out


def _links(
    model: Model, links: Mapping[str, str] | None, fixed: Mapping[str, Any]
) -> dict[str, Expr]:
    if not links:
        return {}
    if not isinstance(links, Mapping):
        raise ParameterError(
            "links must be a mapping {name: 'expression of other parameters'}, e.g. "
            f"{{'top': '2*bottom'}}; got {type(links).__name__}."
        )
    _check_names(model, links, "links")
    out: dict[str, Expr] = {}
    for name, text in links.items():
        if name in fixed:
            raise ParameterError(
                f"{name!r} is both fixed and linked; choose one (remove it from fixed= or links=)."
            )
        if not isinstance(text, str):
            raise ParameterError(
                f"links[{name!r}] must be an expression text such as '2*bottom', got {text!r}."
            )
        try:
            e = Expr.parse(text)
        except FormulaError as exc:
            raise ParameterError(f"links[{name!r}] = {text!r} cannot be parsed: {exc}") from exc
        for used in e.names:
            if used == "x":
                raise ParameterError(
                    f"links[{name!r}] = {text!r} uses x; a link may use only other parameters."
                )
            if used not in model.param_names:
                raise ParameterError(
                    f"links[{name!r}] = {text!r}: "
                    + unknown_name_message(used, model.param_names, f"model {model.name!r}")
                )
            if used in links:
                raise ParameterError(
                    f"links[{name!r}] = {text!r} uses {used!r}, which is itself linked; "
                    "write every link in terms of free or fixed parameters."
                )
        out[name] = e
    return out


def _weights(
    weighting: str | None, datasets: tuple[Dataset, ...], y: FloatArray
) -> tuple[str, FloatArray | None]:
    has_sigma = [d.sigma is not None for d in datasets]
    if weighting is None:
        weighting = "sigma" if all(has_sigma) else "none"
    if weighting not in _WEIGHTINGS:
        raise ParameterError(
            f"weights must be one of {_WEIGHTINGS} (or None for automatic), got {weighting!r}."
        )
    if weighting == "none":
        return "none", None
    if weighting == "sigma":
        if not all(has_sigma):
            raise DataError(
                "weights='sigma' needs a standard deviation per point: pass sigma=... "
                "(an array or a column name)."
            )
        s = np.concatenate([d.sigma_used for d in datasets if d.sigma_used is not None])
        return "sigma", 1.0 / s
    ay = np.abs(y)
    if np.any(ay == 0):
        rows = np.flatnonzero(ay == 0)[:5].tolist()
        raise DataError(
            f"weights={weighting!r} divides by y, but y is 0 at used points {rows}; exclude "
            "those points or choose weights='none'."
        )
    return weighting, (1.0 / ay if weighting == "relative" else 1.0 / np.sqrt(ay))


def point_weights(
    weighting: str | None, datasets: Sequence[Dataset]
) -> tuple[str, FloatArray | None]:
    """The weighting :func:`fit` would use and its ``1/sigma`` per used point.

    Parameters
    ----------
    weighting : {"none", "sigma", "relative", "poisson"} or None
        As ``fit(weights=...)``; None picks "sigma" when every dataset has sigma.
    datasets : sequence of Dataset

    Returns
    -------
    (str, ndarray or None)
        The resolved weighting and ``1/sigma`` over the used points (None when unweighted).

    Raises
    ------
    ParameterError, DataError
        As :func:`fit` does for the same weighting.
    """
    ds = tuple(datasets)
    y = np.concatenate([d.y_used for d in ds])
    return _weights(weighting, ds, y)


def _build_problem(
    model: Model,
    datasets: tuple[Dataset, ...],
    *,
    start: Mapping[str, float] | None,
    fixed: Mapping[str, float] | Iterable[str] | None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None,
    links: Mapping[str, str] | None,
    weights: str | None,
    loss: str,
    loss_scale: float | None,
    absolute_sigma: bool,
) -> _Problem:
    for d in datasets:
        model.check_domain(d.x_used)
    x = np.concatenate([d.x_used for d in datasets])
    y = np.concatenate([d.y_used for d in datasets])
    if loss not in _LOSSES:
        raise ParameterError(f"loss must be one of {_LOSSES}, got {loss!r}.")
    if loss_scale is not None:
        loss_scale = as_number(loss_scale, "loss_scale")
        if not loss_scale > 0 or math.isinf(loss_scale):
            raise ParameterError(f"loss_scale must be a positive number, got {loss_scale!r}.")
    weighting, w = _weights(weights, datasets, y)

    if start is not None and not isinstance(start, Mapping):
        raise ParameterError(
            f"start must be a mapping {{name: value}}, got {type(start).__name__}."
        )
    user_start = {str(k): as_number(v, f"start value of {k!r}") for k, v in (start or {}).items()}
    _check_names(model, user_start, "start")
    for k, v in user_start.items():
        if math.isinf(v):
            raise ParameterError(f"start value of {k!r} is infinite; give a finite number.")
    held_raw = _as_names(fixed)
    _check_names(model, held_raw, "fixed")
    held: dict[str, float] = {}
    for k, raw in held_raw.items():
        fv = as_number(
            user_start.get(k, model.param(k).value) if raw is None else raw,
            f"fixed value of {k!r}",
        )
        if math.isinf(fv):
            raise ParameterError(f"fixed value of {k!r} is infinite; give a finite number.")
        held[k] = fv
    link_exprs = _links(model, links, held)
    bnd = _bounds(model, bounds)
    free = tuple(n for n in model.param_names if n not in held and n not in link_exprs)
    n_used = x.size
    if n_used <= len(free):
        raise DataError(
            f"{n_used} point(s) are used but the model has {len(free)} free parameter(s); a fit "
            "needs more points than free parameters. Add data, include excluded points or fix "
            "parameters you know (fixed=...)."
        )
    for k, v in user_start.items():
        lo, hi = bnd[k]
        if k in free and not lo <= v <= hi:
            raise ParameterError(
                f"start value {v:g} of {k!r} lies outside its bounds [{lo:g}, {hi:g}]; give a "
                "start inside them or widen the bounds."
            )
    if free and any(k not in user_start for k in free):
        guess = guided_start(model, x, y, fixed={**held, **user_start})
    else:
        guess = model.defaults()
    values0 = {**model.defaults(), **guess, **user_start, **held}
    for k in free:  # a guided value (never a user's) is moved inside user bounds
        lo, hi = bnd[k]
        if k not in user_start:
            v = values0[k]
            if not lo <= v <= hi:
                values0[k] = _inside(lo, hi, v)
    return _Problem(
        model=model,
        datasets=datasets,
        x=x,
        y=y,
        w=w,
        weighting=weighting,
        loss=loss,
        loss_scale=loss_scale,
        absolute_sigma=bool(absolute_sigma),
        values0=values0,
        free=free,
        fixed=held,
        links=link_exprs,
        lower=np.array([bnd[n][0] for n in free], dtype=float),
        upper=np.array([bnd[n][1] for n in free], dtype=float),
        link_texts={k: str(v).strip() for k, v in (links or {}).items()},
    )


def _inside(lo: float, hi: float, v: float) -> float:
    if math.isfinite(lo) and math.isfinite(hi):
        return lo + 0.5 * (hi - lo) if not lo <= v <= hi else v
    if v < lo:
        return lo + max(abs(lo) * 0.1, 1e-3) if math.isfinite(lo) else v
    return hi - max(abs(hi) * 0.1, 1e-3) if math.isfinite(hi) else v


# ============================================================================ solver runs
@dataclass
class _Run:
    theta: FloatArray
    ssr: float
    objective: float
    code: str
    evaluations: int
    method: str
    strategy: str
    raw: Any = None


class _Watch:
    """Counts evaluations, keeps the best point seen and stops a run on cancel or time limit."""

    def __init__(
        self,
        prob: _Problem,
        deadline: float | None,
        max_evaluations: int | None,
        cancel: Callable[[], bool] | None,
        progress: Callable[[int, float], None] | None,
    ) -> None:
        self.prob = prob
        self.deadline = deadline
        self.max_evaluations = max_evaluations
        self.cancel = cancel
        self.progress = progress
        self.evaluations = 0
        self.best_ssr = math.inf
        self.best_theta: FloatArray | None = None
        self._last_report = 0.0

    def residual(self, theta: FloatArray) -> FloatArray:
        if self.cancel is not None and self.cancel():
            raise _AbortError("cancelled")
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise _AbortError("stopped_time")
        if self.max_evaluations is not None and self.evaluations >= self.max_evaluations:
            raise _AbortError("stopped_evaluations")
        self.evaluations += 1
        r = self.prob.weighted(self.prob.values(theta))
        bad = ~np.isfinite(r)
        if bad.any():
            r = np.where(bad, _PENALTY, r)
            return r
        ssr = float(r @ r)
        if ssr < self.best_ssr:
            self.best_ssr, self.best_theta = ssr, np.array(theta, dtype=float)
        if self.progress is not None:
            now = time.monotonic()
            if now - self._last_report >= 0.1:
                self._last_report = now
                self.progress(self.evaluations, self.best_ssr)
        return r / self.prob.rscale


def _objective(prob: _Problem, r: FloatArray) -> float:
    if prob.loss == "squared":
        return float(r @ r)
    c = prob.loss_scale or 1.0
    z = (r / c) ** 2
    if prob.loss == "pseudo_huber":
        rho = 2.0 * (np.sqrt(1.0 + z) - 1.0)
    else:  # huber
        rho = np.where(z <= 1.0, z, 2.0 * np.sqrt(z) - 1.0)
    return float(c**2 * np.sum(rho))


def _solve(
    prob: _Problem,
    watch: _Watch,
    theta0: FloatArray,
    method: str,
    strategy: str,
    budget: int,
    x_scale: str | None = None,
) -> _Run:
    params = lmfit.Parameters()
    for i in range(len(prob.free)):
        # Neutral names: lmfit reserves some identifiers (e.g. its asteval symbols) that a
        # model's parameter could legitimately use.
        params.add(f"p{i}", value=float(theta0[i]), min=prob.lower[i], max=prob.upper[i])

    def resid(p: lmfit.Parameters) -> FloatArray:
        return watch.residual(np.array([p[f"p{i}"].value for i in range(len(prob.free))]))

    kws: dict[str, Any]
    if method == _LM:
        kws = {"ftol": _TOL, "xtol": _TOL, "gtol": 0.0, "maxfev": budget}
    else:
        kws = {"ftol": _TOL, "xtol": _TOL, "gtol": _TOL, "max_nfev": budget}
        if prob.loss != "squared":
            kws["loss"] = _SCIPY_LOSS[prob.loss]
            kws["f_scale"] = (prob.loss_scale or 1.0) / prob.rscale
        if x_scale is not None:
            kws["x_scale"] = x_scale
    evals0 = watch.evaluations
    minimizer = lmfit.Minimizer(resid, params, nan_policy="propagate")
    raw: Any = None
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            # lmfit's names: "leastsq" is MINPACK's Levenberg-Marquardt, "least_squares" scipy's
            # trust-region reflective method
            raw = minimizer.minimize(method="leastsq" if method == _LM else "least_squares", **kws)
        theta = np.array([raw.params[f"p{i}"].value for i in range(len(prob.free))])
        code = _code_of(raw, method)
    except _AbortError as stop:
        theta = watch.best_theta if watch.best_theta is not None else theta0.copy()
        code = stop.code
        raw = None
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r) if np.all(np.isfinite(r)) else math.inf
    if not math.isfinite(ssr) and code != "cancelled":
        code = "not_finite"
    return _Run(
        theta=np.asarray(theta, dtype=float),
        ssr=ssr,
        objective=_objective(prob, r) if math.isfinite(ssr) else math.inf,
        code=code,
        evaluations=watch.evaluations - evals0,
        method=method,
        strategy=strategy,
        raw=raw,
    )


def _code_of(raw: Any, method: str) -> str:
    if method == _LM:
        ier = raw.ier if hasattr(raw, "ier") else raw.call_kws.get("ier", -99)
        return LEASTSQ_IER.get(int(ier), "not_converged")
    status = getattr(raw, "status", None)
    if status is None:
        return "converged_ssr" if raw.success else "not_converged"
    return LEAST_SQUARES_STATUS.get(int(status), "not_converged")


def _ladder(
    prob: _Problem,
    watch: _Watch,
    method: str,
    budget: int,
) -> list[_Run]:
    """Run solvers until one converges and a restart from its point cannot improve it."""
    theta0 = np.array([prob.values0[n] for n in prob.free], dtype=float)
    first = _TR if (method == _TR or prob.loss != "squared") else _LM
    other = _TR if first == _LM else _LM
    runs = [_solve(prob, watch, theta0, first, "first run", budget)]
    stop_codes = ("cancelled", "stopped_time")

    def best() -> _Run:
        return min(runs, key=lambda r: r.objective)

    if runs[-1].code in stop_codes:
        return runs
    if outcome(runs[0].code).success:
        return runs  # the polish in fit() refines it with exact derivatives
    # A run that stopped without converging (evaluation limit, a stall on a plateau) usually
    # moves on when restarted from its best point; at a true minimum the restart ends quickly.
    runs.append(_solve(prob, watch, best().theta, first, "restart from best point", budget))
    if runs[-1].code in stop_codes:
        return runs
    b = best()
    improved = runs[0].objective - runs[1].objective > _STALL * max(runs[0].objective, 1e-300)
    if outcome(b.code).success and not improved:
        return runs
    ladder: list[tuple[str, str, str | None]] = []
    if prob.loss == "squared" or other == _TR:
        ladder.append((other if prob.loss == "squared" else _TR, "switch method", None))
    ladder.append((_TR, "rescaled parameters", "jac"))
    for meth, strategy, xs in ladder:
        runs.append(_solve(prob, watch, best().theta, meth, strategy, budget, xs))
        if runs[-1].code in stop_codes:
            return runs
        if outcome(best().code).success and runs[-1] is not best():
            break
    if not outcome(best().code).success and prob.free:
        # Last resort: the generic multi-start from the data, ignoring the given start.
        from .start import generic_start

        try:
            seed = generic_start(prob.model, prob.x, prob.y, fixed=prob.fixed)
            theta = np.array(
                [
                    min(max(seed[n], lo), hi)
                    for n, lo, hi in zip(prob.free, prob.lower, prob.upper, strict=True)
                ]
            )
            runs.append(_solve(prob, watch, theta, first, "multi-start", budget))
        except (DataError, ParameterError, ArithmeticError, ValueError):
            pass
    return runs


def _polish(prob: _Problem, watch: _Watch, best: _Run, budget: int) -> _Run:
    """Finish from the best point with exact derivatives and tolerances at machine precision.

    The lmfit runs difference the model numerically, which limits the solution to about seven
    significant digits; for a formula model this run uses the analytic Jacobian (MINPACK's
    lmder through ``scipy.optimize.least_squares``, or its trust-region method when bounds or a
    robust loss are in force), which takes certified NIST values to ten digits or more.
    """
    bounded = bool(np.any(np.isfinite(prob.lower)) or np.any(np.isfinite(prob.upper)))
    meth: Literal["trf", "lm"] = "trf" if (bounded or prob.loss != "squared") else "lm"
    w = prob.w

    def jac(theta: FloatArray) -> FloatArray:
        J = _model_jacobian(prob, theta, prob.values(theta))
        return -(J if w is None else J * w[:, None]) / prob.rscale

    eps = float(np.finfo(float).eps)
    kws: dict[str, Any] = {"ftol": eps, "xtol": eps, "gtol": eps, "max_nfev": budget}
    if prob.model.expr is not None:
        kws["jac"] = jac
    if meth == "trf":
        kws["loss"] = _SCIPY_LOSS[prob.loss]
        kws["f_scale"] = (prob.loss_scale or 1.0) / prob.rscale
        kws["bounds"] = (prob.lower, prob.upper)
        kws["x_scale"] = "jac"
    theta0 = np.clip(best.theta, prob.lower, prob.upper)
    evals0 = watch.evaluations
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            sol = least_squares(watch.residual, theta0, method=meth, **kws)
        theta, code = (
            np.asarray(sol.x, dtype=float),
            LEAST_SQUARES_STATUS.get(int(sol.status), "not_converged"),
        )
    except _AbortError as stop:
        theta = watch.best_theta if watch.best_theta is not None else theta0
        code = stop.code
    except (ValueError, np.linalg.LinAlgError):
        return best
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r) if np.all(np.isfinite(r)) else math.inf
    return _Run(
        theta=theta,
        ssr=ssr,
        objective=_objective(prob, r) if math.isfinite(ssr) else math.inf,
        code=code if math.isfinite(ssr) else "not_finite",
        evaluations=watch.evaluations - evals0,
        method=_LM if meth == "lm" else _TR,
        strategy="polish",
    )


# ============================================================================ statistics
def _param_jacobian(prob: _Problem, values: Mapping[str, float]) -> FloatArray:
    names = prob.model.param_names
    pj = np.zeros((len(names), len(prob.free)))
    col = {n: j for j, n in enumerate(prob.free)}
    for i, n in enumerate(names):
        if n in col:
            pj[i, col[n]] = 1.0
        elif n in prob.links:
            e = prob.links[n]
            with np.errstate(all="ignore"):
                for m in e.names:
                    if m in col:
                        pj[i, col[m]] = float(np.asarray(e.derivative(m).evaluate(values)))
    return pj


def _model_jacobian(prob: _Problem, theta: FloatArray, values: Mapping[str, float]) -> FloatArray:
    """d f / d free at the data: analytic for formulas (through links), else central differences."""
    model = prob.model
    n, p = prob.x.size, len(prob.free)
    if p == 0:
        return np.zeros((n, 0))

    def curve(th: FloatArray) -> FloatArray:
        return prob.curve(prob.values(th))

    if prob.deriv_fns is None:
        return finite_difference_jacobian(curve, theta, lower=prob.lower, upper=prob.upper)
    args = [values[m] for m in model.param_names]
    with np.errstate(all="ignore"):
        full = np.column_stack(
            [np.broadcast_to(np.asarray(fn(prob.x, *args), float), (n,)) for fn in prob.deriv_fns]
        )
    with np.errstate(all="ignore"):
        J = full @ _param_jacobian(prob, values)
    bad = ~np.all(np.isfinite(J), axis=1)
    if bad.any():
        # e.g. d/dlogEC50 of 10**(log10(x)...) at a zero-dose control: inf * 0 analytically,
        # but the curve is flat there; differences give the limit.
        fd = finite_difference_jacobian(curve, theta, lower=prob.lower, upper=prob.upper)
        J[bad] = np.where(np.isfinite(fd[bad]), fd[bad], 0.0)
    return J


def _covariance(jw: FloatArray, scale: float) -> tuple[FloatArray, float, bool]:
    """Covariance ``scale * (Jw' Jw)^-1`` via the SVD of the column-scaled Jacobian."""
    p = jw.shape[1]
    if p == 0:
        return np.zeros((0, 0)), 1.0, False
    norms = np.linalg.norm(jw, axis=0)
    if not np.all(np.isfinite(jw)) or np.any(norms == 0):
        return np.full((p, p), np.nan), math.inf, True
    a = jw / norms
    _, s, vt = np.linalg.svd(a, full_matrices=False)
    cond = float(s[0] / s[-1]) if s[-1] > 0 else math.inf
    singular = not (s[-1] > s[0] * np.finfo(float).eps * max(jw.shape))
    if singular:
        return np.full((p, p), np.nan), cond, True
    inv = (vt.T / s**2) @ vt
    cov = scale * inv / np.outer(norms, norms)
    return cov, cond, False


def _diagnostics(
    prob: _Problem,
    values: Mapping[str, float],
    stderr: Mapping[str, float],
    cov: FloatArray,
    cond: float,
    singular: bool,
    code: str,
    success: bool,
) -> list[Diagnostic]:
    out: list[Diagnostic] = []
    for d in prob.datasets:
        for note in d.notes:
            out.append(Diagnostic("data_note", "info", note))
    if not success:
        out.append(
            Diagnostic(
                "not_converged",
                "error",
                f"The fit did not converge ({outcome(code).text}). The numbers below are where "
                "it stopped, not estimates; adjust the starting values or the model.",
            )
        )
    for i, n in enumerate(prob.free):
        v, lo, hi = values[n], prob.lower[i], prob.upper[i]
        tol = 1e-8 * max(abs(v), 1e-12)
        for side, b in (("lower", lo), ("upper", hi)):
            if math.isfinite(b) and abs(v - b) <= tol + 1e-300:
                out.append(
                    Diagnostic(
                        "at_bound",
                        "warning",
                        f"'{n}' is at its {side} bound ({b:g}); the data may want it beyond. Its "
                        "standard error and interval assume it is not, so treat them with care.",
                        params=(n,),
                        extra={"side": side, "bound": float(b)},
                    )
                )
    if singular:
        out.append(
            Diagnostic(
                "singular",
                "error",
                "The covariance is singular: some parameters cannot be told apart by these data "
                "(standard errors are not available). Fix a parameter or simplify the model.",
                params=prob.free,
            )
        )
    elif cond > _NEAR_SINGULAR:
        out.append(
            Diagnostic(
                "near_singular",
                "warning",
                f"The covariance is nearly singular (condition number {cond:.2g}): standard "
                "errors are large and unreliable in some directions.",
                params=prob.free,
                extra={"condition": cond},
            )
        )
    for n in prob.free:
        se, v = stderr[n], values[n]
        if math.isfinite(se) and v != 0 and se / abs(v) > NOT_IDENTIFIED_RSE:
            out.append(
                Diagnostic(
                    "not_identified",
                    "warning",
                    f"'{n}' is not identified by the data: its standard error ({se:.3g}) exceeds "
                    f"its value ({v:.3g}). Collect data where it matters, or fix it.",
                    params=(n,),
                    extra={"stderr": se, "value": v},
                )
            )
    if cov.size and not singular:
        sd = np.sqrt(np.diag(cov))
        with np.errstate(all="ignore"):
            corr = cov / np.outer(sd, sd)
        for i in range(len(prob.free)):
            for j in range(i + 1, len(prob.free)):
                if abs(corr[i, j]) > HIGH_CORRELATION:
                    out.append(
                        Diagnostic(
                            "high_correlation",
                            "warning",
                            f"'{prob.free[i]}' and '{prob.free[j]}' are correlated "
                            f"(r = {corr[i, j]:+.4f}): the data pin down a combination of them "
                            "better than either alone.",
                            params=(prob.free[i], prob.free[j]),
                            extra={"r": float(corr[i, j])},
                        )
                    )
    x_lo, x_hi = float(np.min(prob.x)), float(np.max(prob.x))
    with np.errstate(all="ignore"):
        for q in prob.model.derived:
            if q.axis != "x":
                continue
            val = float(np.asarray(q.expr.evaluate(dict(values))))
            if math.isfinite(val) and not x_lo <= val <= x_hi:
                out.append(
                    Diagnostic(
                        "extrapolation",
                        "warning",
                        f"{q.name} = {val:.4g} lies outside the range of the data "
                        f"[{x_lo:.4g}, {x_hi:.4g}]: it is an extrapolation, not a measurement.",
                        params=tuple(n for n in prob.model.param_names if n in q.expr.names),
                        extra={"quantity": q.name, "value": val, "range": [x_lo, x_hi]},
                    )
                )
    if prob.loss != "squared":
        out.append(
            Diagnostic(
                "robust_loss",
                "info",
                f"Fitted with the robust {prob.loss} loss; standard errors use the ordinary "
                "least-squares formula at the solution and are approximate.",
            )
        )
    return out


def _finish(prob: _Problem, runs: list[_Run]) -> FitResult:
    kept = min(runs, key=lambda r: (not outcome(r.code).success, r.objective)) if runs else None
    if kept is not None and not outcome(kept.code).success:
        kept = min(runs, key=lambda r: r.objective)
    theta = kept.theta if kept is not None else np.zeros(0)
    values = prob.values(theta)
    fitted = prob.curve(values)
    resid = prob.y - fitted
    rw = resid if prob.w is None else resid * prob.w
    ssr = float(rw @ rw)
    rss = float(resid @ resid)
    n, p = prob.x.size, len(prob.free)
    dof = n - p
    code = kept.code if kept is not None else "nothing_to_fit"
    success = outcome(code).success
    scale = 1.0 if prob.absolute_sigma else (ssr / dof if dof > 0 else math.nan)
    if code in ("cancelled", "stopped_time"):
        # The user asked to stop: no further model evaluations (a slow callable would need
        # 2 per parameter for its Jacobian). The point where it stopped has no covariance.
        J = np.full((n, p), np.nan)
        cov, cond, singular = np.full((p, p), np.nan), math.nan, False
    else:
        J = _model_jacobian(prob, theta, values)
        jw = J if prob.w is None else J * prob.w[:, None]
        cov, cond, singular = _covariance(jw, scale)
    pj = _param_jacobian(prob, values)
    with np.errstate(all="ignore"):
        var_all = np.einsum("ij,jk,ik->i", pj, cov, pj) if p else np.zeros(len(values))
    stderr = {}
    for i, nme in enumerate(prob.model.param_names):
        if nme in prob.fixed:
            stderr[nme] = math.nan
        else:
            stderr[nme] = float(math.sqrt(var_all[i])) if var_all[i] >= 0 else math.nan
    wts = np.ones(n) if prob.w is None else prob.w
    ybar = float(np.sum(wts**2 * prob.y) / np.sum(wts**2))
    sst = float(np.sum((wts * (prob.y - ybar)) ** 2))
    diags = _diagnostics(prob, values, stderr, cov, cond, singular, code, success)
    attempts = [
        Attempt(
            strategy=r.strategy,
            method=r.method,
            evaluations=r.evaluations,
            ssr=r.ssr,
            objective=r.objective,
            code=r.code,
            message=outcome(r.code).text,
        )
        for r in runs
    ]
    # The polish runs outside lmfit; power users get the best lmfit run (its values agree with
    # ours to the solver's tolerance, its statistics are lmfit's own).
    lm_runs = [r for r in runs if r.raw is not None]
    lm = min(lm_runs, key=lambda r: r.objective).raw if lm_runs else None
    return FitResult(
        model=prob.model,
        datasets=prob.datasets,
        values=values,
        stderr=stderr,
        free=prob.free,
        fixed=tuple(n for n in prob.model.param_names if n in prob.fixed),
        linked=dict(prob.link_texts),
        start=prob.values0,
        bounds={
            nme: (float(prob.lower[i]), float(prob.upper[i])) for i, nme in enumerate(prob.free)
        },
        covariance=cov,
        ssr=ssr,
        rss=rss,
        n=n,
        nfree=p,
        dof=dof,
        sigma_resid=math.sqrt(ssr / dof) if dof > 0 else math.nan,
        r2=1.0 - ssr / sst if sst > 0 else math.nan,
        aicc=_aicc(ssr, n, p + 1),
        bic=_bic(ssr, n, p + 1),
        condition=cond,
        fitted=fitted,
        residuals=resid,
        weights=None if prob.w is None else prob.w,
        jacobian=J,
        param_jacobian=pj,
        success=success,
        code=code,
        message=outcome(code).text,
        messages=tuple((a.code, a.message) for a in attempts),
        diagnostics=tuple(diags),
        attempts=tuple(attempts),
        weighting=prob.weighting,
        loss=prob.loss,
        loss_scale=prob.loss_scale,
        absolute_sigma=prob.absolute_sigma,
        method=kept.method if kept is not None else "none",
        evaluations=sum(r.evaluations for r in runs),
        _lmfit=lm,
    )


def _linear_run(prob: _Problem) -> _Run | None:
    """Solve a polynomial directly by QR when nothing calls for iteration."""
    k = prob.model.polynomial_degree
    if (
        k is None
        or prob.fixed
        or prob.links
        or prob.loss != "squared"
        or np.any(np.isfinite(prob.lower))
        or np.any(np.isfinite(prob.upper))
    ):
        return None
    sol = solve_polynomial(prob.x, prob.y, k, weights=None if prob.w is None else prob.w**2)
    coef = np.asarray(sol.coef, dtype=float)
    theta = np.array([coef[prob.model.param_names.index(n)] for n in prob.free])
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r)
    return _Run(theta, ssr, ssr, "linear", 0, "linear", "linear")


# ============================================================================ entry point
def fit(
    model: Model | str | Callable[..., Any],
    x: ArrayLike | str | None = None,
    y: ArrayLike | str | None = None,
    *,
    data: pd.DataFrame | Mapping[str, Any] | None = None,
    dataset: Dataset | Sequence[Dataset] | None = None,
    sigma: ArrayLike | str | None = None,
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
    start : mapping, optional
        Starting values by name; the others come from the model's guided start.
    fixed : mapping or iterable of str, optional
        Parameters held constant: ``{name: value}``, or names held at their start value.
    bounds : mapping, optional
        ``{name: (lower, upper)}`` with None for no bound; they replace the model's bounds.
    links : mapping, optional
        ``{name: "expression of other parameters"}``, e.g. ``{"a2": "2*a1"}``.
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
        Unknown names, bad bounds, a start outside its bounds, bad links or options.
    ModelError
        The model is malformed or its function raises / returns the wrong shape.
    FitError
        The residuals are not finite at the starting values, so the fit cannot start.
    """
    for name, val, allowed in (("method", method, _METHODS),):
        if val not in allowed:
            raise ParameterError(f"{name} must be one of {allowed}, got {val!r}.")
    if max_evaluations is not None and (
        isinstance(max_evaluations, bool)
        or not isinstance(max_evaluations, (int, np.integer))
        or max_evaluations < 1
    ):
        raise ParameterError(
            f"max_evaluations must be a positive whole number, got {max_evaluations!r}."
        )
    if timeout is not None:
        timeout = as_number(timeout, "timeout")
        if not timeout > 0:
            raise ParameterError(f"timeout must be a positive number of seconds, got {timeout}.")
    cancel_fn: Callable[[], bool] | None
    if cancel is None:
        cancel_fn = None
    elif isinstance(cancel, threading.Event):
        cancel_fn = cancel.is_set
    elif callable(cancel):
        cancel_fn = cancel
    else:
        raise ParameterError("cancel must be a threading.Event or a callable returning a bool.")

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

    prob = _build_problem(
        m,
        datasets,
        start=start,
        fixed=fixed,
        bounds=bounds,
        links=links,
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
    runs = _ladder(prob, watch, method, budget)
    best = min(runs, key=lambda r: r.objective)
    if runs[-1].code not in ("cancelled", "stopped_time") and math.isfinite(best.objective):
        polished = _polish(prob, watch, best, budget)
        # Kept only if it does not lose ground: the polish refines, it never replaces a better run.
        if polished.objective <= best.objective and outcome(polished.code).success:
            runs.append(polished)
    if progress is not None:
        progress(watch.evaluations, watch.best_ssr)
    try:
        return _finish(prob, runs)
    except ModelError:
        raise
    except (ValueError, ArithmeticError) as exc:  # pragma: no cover - a bug, said plainly
        raise FitError(f"Computing the fit statistics failed: {exc}") from exc
