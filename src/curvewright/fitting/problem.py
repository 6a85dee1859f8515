"""Fit requests made into problems: resolve the model, validate every input, build clean arrays.

Like ``scipy.optimize.least_squares``, everything a fit needs (model, data, starting values,
fixed values, bounds, links, weights, loss) is checked and normalised here, once, into one
:class:`_Problem`; the engine and the result assembly downstream take it as given. The problem
also knows its own derivatives (the model's Jacobian through links), which both use.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from ..catalog import catalog
from ..data import Dataset
from ..errors import DataError, ModelError, ParameterError
from ..expr import Expr
from ..models import Model, as_number, unknown_name_message
from ..numerics import finite_difference_jacobian
from ..parameters import check_link
from ..start import guided_start

FloatArray = NDArray[np.float64]
Weighting = Literal["none", "sigma", "relative", "poisson"]
Loss = Literal["squared", "pseudo_huber", "huber"]
Method = Literal["auto", "levenberg_marquardt", "trust_region"]

_WEIGHTINGS = ("none", "sigma", "relative", "poisson")
_LOSSES = ("squared", "pseudo_huber", "huber")
_METHODS = ("auto", "levenberg_marquardt", "trust_region")


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

    # Hooks for problem variants (a global fit of several groups, fitting/global_fit.py) whose
    # free parameters are not the model's own: the engine and the assembly call these and stay
    # unchanged. The defaults are the single-fit behaviour.
    def jacobian_override(
        self, theta: FloatArray, values: Mapping[str, float]
    ) -> FloatArray | None:
        """d f / d free at the data for a variant with its own Jacobian; None: the default."""
        return None

    def theta_from(self, seed: Mapping[str, float]) -> FloatArray:
        """The free-parameter vector from values by model parameter name, clipped to bounds."""
        return np.array(
            [
                min(max(seed[n], lo), hi)
                for n, lo, hi in zip(self.free, self.lower, self.upper, strict=True)
            ]
        )


def _check_limits(
    method: str,
    max_evaluations: int | None,
    timeout: float | None,
    cancel: threading.Event | Callable[[], bool] | None,
) -> tuple[float | None, Callable[[], bool] | None]:
    """Validate the solver options of a fit; the timeout as a float and cancel as a callable."""
    if method not in _METHODS:
        raise ParameterError(f"method must be one of {_METHODS}, got {method!r}.")
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
    if cancel is None:
        return timeout, None
    if isinstance(cancel, threading.Event):
        return timeout, cancel.is_set
    if callable(cancel):
        return timeout, cancel
    raise ParameterError("cancel must be a threading.Event or a callable returning a bool.")


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
        e = check_link(model, name, text, links)
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
    own = prob.jacobian_override(theta, values)
    if own is not None:
        return own
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
