"""Fit requests made into problems: resolve the model, validate every input, build clean arrays.

Like ``scipy.optimize.least_squares``, everything a fit needs (model, data, starting values,
fixed values, bounds, links, weights, loss) is checked and normalised here, once, into one
:class:`_Problem`; the engine and the result assembly downstream take it as given. The problem
also knows its own derivatives (the model's Jacobian through links), which both use.
"""

from __future__ import annotations

import functools
import math
import threading
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Literal, cast

import numpy as np
from numpy.typing import NDArray

from ..catalog import catalog
from ..data import Dataset
from ..errors import DataError, ModelError, ParameterError
from ..expr import Expr
from ..models import Model, as_number, unknown_name_message
from ..numerics import finite_difference_jacobian, free_jacobian
from ..parameters import Moved, Parameter, Parameters, move_inside
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
    # The records the fit runs with (values: the starts; NaN for linked ones) and the notes of
    # starts the one rule moved inside their bounds (they become diagnostics of the result).
    parameters: Parameters = field(default_factory=lambda: Parameters(()))
    moved: tuple[Moved, ...] = ()
    # Free parameters whose start came from the guided start (no value given by the user).
    guided: frozenset[str] = frozenset()
    _link_fns: list[tuple[str, Callable[..., Any]]] = field(default_factory=list)
    # Index plans for building the model's argument vector from the free values (filled in
    # __post_init__): the solvers' inner loop then does no dict work per evaluation.
    _args0: FloatArray = field(init=False, repr=False)
    _free_index: NDArray[np.intp] = field(init=False, repr=False)
    _order_index: NDArray[np.intp] = field(init=False, repr=False)
    _link_plan: list[tuple[int, Callable[..., Any]]] = field(init=False, repr=False)
    # (row of the linked parameter, column of a free one it uses, compiled partial derivative)
    _link_partials: list[tuple[int, int, Callable[..., Any]]] = field(init=False, repr=False)

    # Residuals are handed to the solvers divided by this, so their tolerances (scipy checks
    # the gradient in absolute terms) mean the same whatever the unit of y: y in mol/L or in
    # counts per million converges alike. Weighted residuals are already dimensionless.
    rscale: float = 1.0

    def __post_init__(self) -> None:
        if self.w is None:
            rms = float(np.sqrt(np.mean(self.y**2))) if self.y.size else 0.0
            self.rscale = rms if math.isfinite(rms) and rms > 0 else 1.0
        self._plan()

    def _plan(self) -> None:
        """Compile the links and the index plans of the model's argument vector."""
        order = (*self.free, *self.fixed)
        self._link_fns = [(n, e.compile(order)) for n, e in self.links.items()]
        # The model's own derivatives are compiled once per Model (Model.value_and_jacobian);
        # only the links, which belong to this request, are handled here.
        names = self.model.param_names
        pos = {n: i for i, n in enumerate(names)}
        args0 = np.zeros(len(names))
        for n, v in self.fixed.items():
            args0[pos[n]] = v
        self._args0 = args0
        self._free_index = np.array([pos[n] for n in self.free], dtype=np.intp)
        self._order_index = np.array([pos[n] for n in order], dtype=np.intp)
        self._link_plan = [(pos[n], fn) for n, fn in self._link_fns]
        col = {n: j for j, n in enumerate(self.free)}
        self._link_partials = [
            (pos[n], col[m], _link_partial(e, m, order))
            for n, e in self.links.items()
            for m in e.names
            if m in col
        ]

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

    # The solvers' two calls. A problem variant whose free parameters are not the model's own
    # (a global fit of several groups, fitting/global_fit.py) overrides these and _plan; the
    # engine and the assembly run on it unchanged.
    def curve_at(self, theta: Sequence[float] | FloatArray) -> FloatArray:
        """The model at the data for the free values ``theta`` (the solvers' inner loop)."""
        x = self.x
        with np.errstate(all="ignore"):
            f = self.model.func(x, *_args(self, theta))
        if np.shape(f) != x.shape:  # a formula without x gives one number
            f = np.broadcast_to(np.asarray(f, dtype=float), x.shape)
        out: FloatArray = np.asarray(f, dtype=float)
        return out

    def jacobian_at(self, theta: FloatArray) -> FloatArray:
        """d f / d free at the data: analytic for formulas (through links), else differences."""
        n, p = self.x.size, len(self.free)
        if p == 0:
            return np.zeros((n, 0))
        grad = self.model._value_and_gradient  # compiled once per Model; None for a callable
        if grad is None:
            return finite_difference_jacobian(
                self.curve_at, theta, lower=self.lower, upper=self.upper
            )
        args = _args(self, theta)
        with np.errstate(all="ignore"):
            if self.links:
                _, full = self.model.value_and_jacobian(self.x, cast("Sequence[float]", args))
                pj = _param_jacobian(self, theta)
            else:
                # Without links the chain rule only selects the free parameters' columns: copy
                # those out (a constant derivative, e.g. d/d baseline = 1, broadcasts).
                out = grad(self.x, *args)
                full = np.empty((n, p))
                for j, k in enumerate(self._free_index.tolist()):
                    full[:, j] = out[k + 1]
                pj = None
        return free_jacobian(full, pj, self.curve_at, theta, lower=self.lower, upper=self.upper)

    def model_names(self) -> tuple[str, ...]:
        """The model parameter behind each free parameter (a global fit's ``k[A]`` is ``k``)."""
        return self.free

    def search_starts(self) -> list[tuple[str, Callable[[], FloatArray]]]:
        """The global search's starts, each ignoring the user's: (attempt name, free vector).

        The catalog's start rule (if any) and the generic multi-start. With no start given the
        fit began from the rule (or, without one, from the multi-start): the same deterministic
        start again would only repeat the first run, so it is left out. Each start is computed
        only when called.
        """
        return self._pooled_starts(self.fixed)

    def _pooled_starts(
        self, fixed: Mapping[str, float]
    ) -> list[tuple[str, Callable[[], FloatArray]]]:
        """:meth:`search_starts` from the model on all points, ``fixed`` held."""
        from ..start import generic_start

        no_start = set(self.free) <= self.guided
        rule = self.model.start_rule is not None
        out: list[tuple[str, Callable[[], FloatArray]]] = []
        if rule and not no_start:
            out.append(
                (
                    "global search: start rule",
                    lambda: self.theta_from(guided_start(self.model, self.x, self.y, fixed=fixed)),
                )
            )
        if rule or not no_start:
            out.append(
                (
                    "global search: multi-start",
                    lambda: self.theta_from(generic_start(self.model, self.x, self.y, fixed=fixed)),
                )
            )
        return out

    def theta_from(self, seed: Mapping[str, float]) -> FloatArray:
        """The free-parameter vector from values by name, moved inside bounds by the one rule."""
        return np.array(
            [
                move_inside(float(lo), float(hi), float(seed[n]))
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


def _check_loss(loss: str, loss_scale: float | None) -> float | None:
    """The loss name and scale, checked (the scale as a number, or None for the default)."""
    if loss not in _LOSSES:
        raise ParameterError(f"loss must be one of {_LOSSES}, got {loss!r}.")
    if loss_scale is not None:
        loss_scale = as_number(loss_scale, "loss_scale")
        if not loss_scale > 0 or math.isinf(loss_scale):
            raise ParameterError(f"loss_scale must be a positive number, got {loss_scale!r}.")
    return loss_scale


def request_parameters(
    model: Model,
    params: Parameters | Sequence[Parameter] | None = None,
    *,
    start: Mapping[str, float] | None = None,
    fixed: Mapping[str, float] | Iterable[str] | None = None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None = None,
    links: Mapping[str, str] | None = None,
) -> Parameters:
    """The one conversion of a fit request's parameter settings into checked records.

    ``params=`` records and the ``start=``/``fixed=``/``bounds=``/``links=`` shorthand meet
    here, once. A parameter with no record and no start gets a NaN value: the guided start
    chooses it. Records may cover only some parameters (the others take the model's bounds);
    a parameter set both by a record and by the shorthand is refused, whatever the values.

    Raises
    ------
    ParameterError
        ``params`` of the wrong type, a parameter given both ways, and whatever
        :meth:`Parameters.from_shorthand` and :meth:`Parameters.validated` refuse.
    """
    unset = Parameters(replace(r, value=math.nan) for r in Parameters.for_model(model).values())
    base = unset
    if params is not None:
        if isinstance(params, Parameters):
            recs = list(params.values())
        elif isinstance(params, Sequence) and not isinstance(params, str):
            recs = list(params)
        else:
            raise ParameterError(
                "params must be a Parameters or a sequence of Parameter records, got "
                f"{type(params).__name__}."
            )
        given = Parameters(recs)  # checks the type of each and that no name repeats
        for n in given:
            if n not in model.param_names:
                raise ParameterError(
                    unknown_name_message(n, model.param_names, f"model {model.name!r} (in params=)")
                )
        for arg, what in (("start", start), ("fixed", fixed), ("bounds", bounds), ("links", links)):
            if what is None:
                continue
            names = [what] if isinstance(what, str) else list(what)
            both = [str(n) for n in names if n in given]
            if both:
                raise ParameterError(
                    f"{both} {'is' if len(both) == 1 else 'are'} set both by params= and by "
                    f"{arg}=; give each parameter's setting once (change its record, or leave "
                    "it out of params=)."
                )
        base = Parameters(given.get(n, r) for n, r in unset.items())
    out = Parameters.from_shorthand(
        model, start=start, fixed=fixed, bounds=bounds, links=links, base=base
    )
    return out.validated(model, allow_unset=True)


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
    parameters: Parameters,
    weights: str | None,
    loss: str,
    loss_scale: float | None,
    absolute_sigma: bool,
) -> _Problem:
    """The problem of a request whose settings :func:`request_parameters` has made into records.

    Starts left unset (NaN) come from the guided start given the others, and are brought inside
    their bounds by the one rule (:meth:`Parameters.inside_bounds`), each move noted; a user's
    start is never moved (:meth:`Parameters.validated` has refused one outside its bounds).
    """
    for d in datasets:
        model.check_domain(d.x_used)
    x = np.concatenate([d.x_used for d in datasets])
    y = np.concatenate([d.y_used for d in datasets])
    loss_scale = _check_loss(loss, loss_scale)
    weighting, w = _weights(weights, datasets, y)

    recs = parameters.validated(model, allow_unset=True)
    free = recs.free
    held = recs.fixed
    link_exprs = {n: Expr.parse(t) for n, t in recs.links.items()}
    n_used = x.size
    if n_used <= len(free):
        raise DataError(
            f"{n_used} point(s) are used but the model has {len(free)} free parameter(s); a fit "
            "needs more points than free parameters. Add data, include excluded points or fix "
            "parameters you know (fixed=...)."
        )
    unset = [n for n in free if math.isnan(recs[n].value)]
    user_start = {n: recs[n].value for n in free if n not in unset}
    guess = guided_start(model, x, y, fixed={**held, **user_start}) if unset else {}
    values0 = {**model.defaults(), **guess, **user_start, **held}
    # Linked values are computed from the others; the record keeps NaN there until the fit.
    recs = recs.with_values({n: values0[n] for n in free})
    recs, moved = recs.inside_bounds(only=unset)
    values0.update({n: recs[n].value for n in free})
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
        lower=np.array([recs[n].lower for n in free], dtype=float),
        upper=np.array([recs[n].upper for n in free], dtype=float),
        link_texts=dict(recs.links),
        parameters=recs,
        moved=moved,
        guided=frozenset(unset),
    )


@functools.lru_cache(maxsize=256)
def _link_partial(e: Expr, name: str, order: tuple[str, ...]) -> Callable[..., Any]:
    # A link's partial derivatives, compiled once per link text (not per fit or per step).
    return e.derivative(name).compile(order)


def _args(prob: _Problem, theta: Sequence[float] | FloatArray) -> FloatArray:
    """Every model parameter's value, in model order, for the free values ``theta``."""
    a: FloatArray = prob._args0.copy()
    a[prob._free_index] = theta
    if prob._link_plan:
        given = a[prob._order_index]
        with np.errstate(all="ignore"):
            for i, fn in prob._link_plan:
                a[i] = float(fn(*given))
    return a


def _curve(prob: _Problem, theta: Sequence[float] | FloatArray) -> FloatArray:
    """The model at the data for the free values ``theta`` (:meth:`_Problem.curve_at`)."""
    return prob.curve_at(theta)


def _param_jacobian(prob: _Problem, theta: Sequence[float] | FloatArray) -> FloatArray:
    """``d value / d free`` for every model parameter: identity, zero (fixed) or a link's."""
    pj = np.zeros((len(prob.model.params), len(prob.free)))
    pj[prob._free_index, np.arange(len(prob.free))] = 1.0
    if prob._link_partials:
        given = _args(prob, theta)[prob._order_index]
        with np.errstate(all="ignore"):
            for i, j, fn in prob._link_partials:
                pj[i, j] = float(fn(*given))
    return pj


def _model_jacobian(prob: _Problem, theta: FloatArray) -> FloatArray:
    """d f / d free at the data (:meth:`_Problem.jacobian_at`)."""
    return prob.jacobian_at(theta)
