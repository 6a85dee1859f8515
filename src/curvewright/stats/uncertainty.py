"""Uncertainty of a least-squares fit: tests, intervals, derived quantities, bands, calibration.

The maths lives in plain functions on numpy arrays (estimates, covariance, gradients, residual
degrees of freedom) so each can be checked against a reference library directly: the quantiles,
Wald intervals, t tests, delta method and correlation in :mod:`curvewright.inference` (shared with
the fitting core and the result, re-exported here), the bands and profiles below. The functions
taking a :class:`~curvewright.result.FitResult` only gather those arrays; this module imports the
result for annotations only, and registers the functions behind the result's convenience methods.

Conventions (each also stated where it is implemented):

* Wald intervals use Student's t with the fit's residual degrees of freedom.
* Profile-likelihood intervals use the F-based threshold for one parameter,
  ``SSR(theta_j) = SSR_min * (1 + F(level; 1, dof) / dof)``, with the other free parameters
  re-optimised at each trial value of ``theta_j`` (our own refitting, so it also works on a
  result rebuilt from JSON, given the model and the data).
* Derived quantities: delta-method standard errors from the symbolic gradient over the free
  parameters; fixed parameters contribute nothing.
* Bands: ``f(x) +- t * sqrt(g(x)' C g(x))`` for the curve and, for a new observation, the
  variance of that observation added under the root (see :func:`prediction_band` for how
  weights enter).
* Inverse prediction: the classical calibration interval, obtained by inverting the prediction
  band (the x values whose prediction band contains the observed y).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import scipy.optimize
import scipy.stats
from numpy.typing import ArrayLike, NDArray

from curvewright.errors import DataError, ExtrapolationWarning, FitError, ParameterError
from curvewright.expr import Expr
from curvewright.inference import (
    check_dof,
    check_level,
    correlated_pairs,
    correlation_matrix,
    delta_method_se,
    delta_method_variance,
    derived_value_and_se,
    parameter_tests,
    quantile,
    t_quantile,
    wald_intervals,
)
from curvewright.models import unknown_name_message
from curvewright.numerics import finite_difference_jacobian, free_jacobian
from curvewright.result import register_statistics
from curvewright.thresholds import HIGH_CORRELATION

if TYPE_CHECKING:
    from curvewright.result import FitResult

__all__ = [
    "band",
    "confidence_band",
    "Correlation",
    "ProfileBound",
    "correlation",
    "correlation_matrix",
    "correlation_warnings",
    "delta_method_se",
    "derived_quantity",
    "derived_table",
    "inverse_predict",
    "model_gradient",
    "parameter_table",
    "parameter_tests",
    "prediction_band",
    "profile_interval",
    "profile_intervals",
    "profile_threshold",
    "t_quantile",
    "wald_intervals",
]

FloatArray = NDArray[np.float64]


def correlation_warnings(
    corr: ArrayLike, names: Sequence[str], threshold: float = HIGH_CORRELATION
) -> list[str]:
    """Plain-language warnings for each pair of parameters with ``|r| > threshold``."""
    return [
        f"{names[i]} and {names[j]} are correlated with r = {r:+.4f}: the data "
        "hardly separate them, so each alone is poorly determined. Fix one of them "
        "from prior knowledge, re-parametrise, or collect data where they act "
        "differently."
        for i, j, r in correlated_pairs(corr, threshold)
    ]


# ------------------------------------------------------------------------------ bands
def band(
    fit: ArrayLike,
    gradients: ArrayLike,
    cov: ArrayLike,
    dof: float,
    level: float = 0.95,
    *,
    observation_variance: ArrayLike | float | None = None,
) -> tuple[FloatArray, FloatArray]:
    """Pointwise band ``fit +- t * sqrt(g' C g [+ observation_variance])``.

    Parameters
    ----------
    fit : array_like, shape (m,)
        The fitted curve at the band's x values.
    gradients : array_like, shape (m, p)
        ``df(x)/dtheta`` over the free parameters at each x.
    cov : array_like, shape (p, p)
        Covariance of the free parameters.
    dof : float
        Residual degrees of freedom (for the t quantile).
    observation_variance : float or array_like, optional
        Variance of one new observation at each x: give it for a prediction band, leave it out
        for the confidence band of the curve.

    Returns
    -------
    lower, upper : ndarray
    """
    f = np.asarray(fit, dtype=float)
    var = delta_method_variance(gradients, cov)
    if observation_variance is not None:
        var = var + np.asarray(observation_variance, dtype=float)
    with np.errstate(invalid="ignore"):
        half = t_quantile(level, dof) * np.sqrt(np.where(var >= 0, var, np.nan))
    return f - half, f + half


# ---------------------------------------------------------------------------- profile
def profile_threshold(ssr_min: float, dof: float, level: float = 0.95) -> float:
    """SSR level that bounds a one-parameter profile interval.

    ``SSR_min * (1 + F(level; 1, dof) / dof)`` (common practice, e.g. Bates and Watts 1988; the
    same F-based rule lmfit's ``conf_interval`` uses with one parameter fixed).
    """
    d = check_dof(dof)
    return float(ssr_min) * (1.0 + float(scipy.stats.f.ppf(check_level(level), 1, d)) / d)


@dataclass(frozen=True)
class ProfileBound:
    """One end of a profile interval: the value, or an infinity with the reason."""

    value: float
    note: str = ""


def profile_interval(
    ssr_at: Callable[[float], float],
    estimate: float,
    stderr: float,
    threshold: float,
    *,
    lower_bound: float = -math.inf,
    upper_bound: float = math.inf,
    max_steps: int = 40,
    xtol: float = 1e-10,
) -> tuple[ProfileBound, ProfileBound]:
    """Where the profile SSR of one parameter crosses ``threshold`` on each side of the estimate.

    Parameters
    ----------
    ssr_at : callable
        ``ssr_at(v)``: the smallest SSR with the parameter fixed at ``v`` and every other free
        parameter re-optimised. May return ``inf`` or NaN where the model cannot be fitted.
    estimate, stderr : float
        The estimate (where the profile has its minimum) and its standard error, which sets the
        first step of the search for a bracket.
    threshold : float
        From :func:`profile_threshold`.
    lower_bound, upper_bound : float
        The parameter's bounds; the search never leaves them.

    Returns
    -------
    lower, upper : ProfileBound
        ``-inf`` / ``inf`` with a note when the profile stays below the threshold up to the bound
        or over the whole search (the data do not bound the parameter on that side).

    Notes
    -----
    The search steps outwards by ``0.5 * stderr`` times a doubling factor until the profile
    exceeds the threshold, then finds the crossing with Brent's method.
    """
    step0 = stderr if (math.isfinite(stderr) and stderr > 0) else max(abs(estimate), 1.0) * 0.1
    step0 *= 0.5

    def g(v: float) -> float:
        s = float(ssr_at(v))
        return s - threshold if math.isfinite(s) else math.inf

    out: list[ProfileBound] = []
    for sign, bound in ((-1.0, lower_bound), (1.0, upper_bound)):
        inner = estimate
        step = step0
        found: ProfileBound | None = None
        for _ in range(max_steps):
            trial = estimate + sign * step
            at_bound = (sign < 0 and trial <= bound) or (sign > 0 and trial >= bound)
            if at_bound:
                trial = bound
            gv = g(trial)
            if gv > 0:
                if math.isinf(gv):
                    # Cannot evaluate out there: home in on where evaluation stops working.
                    lo_t, hi_t = inner, trial
                    for _ in range(60):
                        mid = 0.5 * (lo_t + hi_t)
                        gm = g(mid)
                        if math.isinf(gm):
                            hi_t = mid
                        elif gm > 0:
                            trial = mid
                            break
                        else:
                            lo_t = mid
                    else:
                        side = "lower" if sign < 0 else "upper"
                        found = ProfileBound(
                            sign * math.inf,
                            f"the model cannot be fitted beyond {hi_t:.6g} and the profile "
                            f"stays below the threshold there; no {side} limit.",
                        )
                        break
                a, b = (trial, inner) if sign < 0 else (inner, trial)
                root = scipy.optimize.brentq(g, a, b, xtol=xtol * max(1.0, abs(estimate)))
                found = ProfileBound(float(root))
                break
            inner = trial
            if at_bound:
                found = ProfileBound(
                    sign * math.inf,
                    f"the profile stays below the threshold up to the bound {bound:g}.",
                )
                break
            step *= 2.0
        if found is None:
            found = ProfileBound(
                sign * math.inf,
                "the profile stays below the threshold as far as the search went; the data do "
                "not bound this parameter on this side.",
            )
        out.append(found)
    return out[0], out[1]


# ============================================================================ FitResult layer
def _quantile(result: FitResult, level: float) -> float:
    """Two-sided quantile as the result's own intervals use it.

    Student t on ``dof``, or the normal quantile when sigma was taken as exact
    (``absolute_sigma``).
    """
    if result.absolute_sigma:
        return quantile(level, result.dof, known_sigma=True)
    return t_quantile(level, result.dof)


def _require_least_squares(result: FitResult, what: str) -> None:
    if result.loss != "squared":
        raise FitError(
            f"{what} assumes a least-squares fit, but this fit used the robust {result.loss!r} "
            "loss, whose sum of squares does not follow the same distribution. Refit with "
            "loss='squared' (after excluding the outliers the robust fit revealed)."
        )


def _as_x(x: ArrayLike, what: str = "x") -> FloatArray:
    try:
        xa = np.asarray(x, dtype=float)
    except (TypeError, ValueError) as exc:
        raise DataError(f"{what} must be numbers ({exc}).") from exc
    if xa.ndim == 0:
        xa = xa.reshape(1)
    if xa.ndim != 1:
        raise DataError(f"{what} must be one-dimensional, got shape {xa.shape}.")
    if not np.all(np.isfinite(xa)):
        raise DataError(f"{what} holds non-finite values; give finite numbers.")
    return xa


def values_from_free(result: FitResult, theta: ArrayLike) -> dict[str, float]:
    """All parameter values with the free ones set to ``theta`` (in ``result.free`` order).

    Fixed parameters keep their values; linked ones are recomputed from their expressions.
    """
    th = np.asarray(theta, dtype=float)
    vals = dict(result.values)
    for name, v in zip(result.free, th, strict=True):
        vals[name] = float(v)
    if result.linked:
        exprs = {n: Expr.parse(e) for n, e in result.linked.items()}
        # Links may refer to other links; as many passes as links resolve any chain.
        for _ in range(len(exprs)):
            for n, e in exprs.items():
                with np.errstate(all="ignore"):
                    vals[n] = float(np.asarray(e.evaluate(vals)))
    return vals


def model_gradient(result: FitResult, x: ArrayLike) -> FloatArray:
    """``df(x)/dtheta`` over the free parameters at the solution, shape ``(len(x), nfree)``.

    Formula models: the symbolic derivative of the formula with respect to every parameter,
    chained through ``result.param_jacobian`` (so links are honoured and fixed parameters give
    zero; see :func:`curvewright.numerics.free_jacobian`). Python-callable models: central finite
    differences over the free parameters (see :func:`finite_difference_jacobian`), links
    recomputed at each step.
    """
    xa = _as_x(x)
    model = result.model
    if result.nfree == 0:
        return np.zeros((xa.size, 0))
    theta = np.array([result.values[n] for n in result.free])
    lo = np.array([result.bounds.get(n, (-math.inf, math.inf))[0] for n in result.free])
    hi = np.array([result.bounds.get(n, (-math.inf, math.inf))[1] for n in result.free])

    def curve(th: FloatArray) -> FloatArray:
        return model.eval(xa, values_from_free(result, th))

    if model.expr is None:
        return finite_difference_jacobian(curve, theta, lower=lo, upper=hi)
    env: dict[str, Any] = {**dict(result.values), "x": xa}
    cols = []
    for name in model.param_names:
        d = model.expr.derivative(name)
        with np.errstate(all="ignore"):
            cols.append(np.broadcast_to(np.asarray(d.evaluate(env), dtype=float), xa.shape))
    g_all = np.column_stack(cols) if cols else np.zeros((xa.size, 0))
    # The fit's own chain rule. Rows that are not finite (e.g. x = 0 in a log-dose formula) stay
    # so, and the band is NaN there, as it always was: passing ``curve`` would fill them by
    # differences as the fit does (a change of results, left for a decision of its own).
    return free_jacobian(g_all, np.asarray(result.param_jacobian), None, theta, lower=lo, upper=hi)


@dataclass(frozen=True)
class Correlation:
    """Correlation of the free parameters and the warnings for pairs with ``|r| > threshold``."""

    matrix: pd.DataFrame
    warnings: tuple[str, ...]

    def _repr_html_(self) -> str:
        table: str = self.matrix.to_html(float_format=lambda v: f"{v:+.3f}")
        notes = "".join(f"<li>{w}</li>" for w in self.warnings)
        return table + (f"<ul>{notes}</ul>" if notes else "")


def correlation(result: FitResult, threshold: float = HIGH_CORRELATION) -> Correlation:
    """Correlation matrix of the free parameters, with a warning for each pair above threshold.

    A pair warns when ``|r| > threshold``.

    Parameters
    ----------
    result : FitResult
    threshold : float
        Alarm level for ``|r|`` (default 0.99, common practice).
    """
    names = list(result.free)
    corr = correlation_matrix(result.covariance) if names else np.zeros((0, 0))
    frame = pd.DataFrame(corr, index=pd.Index(names, name="parameter"), columns=names)
    return Correlation(frame, tuple(correlation_warnings(corr, names, threshold)))


def parameter_table(result: FitResult, level: float = 0.95) -> pd.DataFrame:
    """Estimates with standard error, t, p and Wald interval, one row per parameter.

    Parameters
    ----------
    result : FitResult
    level : float
        Coverage of the intervals.

    Returns
    -------
    DataFrame
        Indexed by parameter (model order): ``value, stderr, t, p, lower, upper, status``.
        ``t = value / stderr`` and ``p`` is two-sided for ``H0: parameter = 0`` on the fit's
        residual degrees of freedom (normal when sigma was taken as exact). Intervals are
        ``value +- q * stderr``. Fixed parameters have NaN statistics; ``status`` is ``free``,
        ``fixed`` or ``linked``.

    Notes
    -----
    The test of ``parameter = 0`` answers a question only when 0 means "no effect" (a slope, a
    second phase's amplitude); for a rate constant or a Km it is rarely of interest.
    """
    q = _quantile(result, level)
    names = list(result.model.param_names)
    value = np.array([result.values[n] for n in names])
    se = np.array([result.stderr[n] for n in names])
    fixed = np.array([n in result.fixed for n in names])
    se = np.where(fixed, np.nan, se)
    t, p = parameter_tests(value, se, result.dof, known_sigma=result.absolute_sigma)
    status = [
        "fixed" if n in result.fixed else "linked" if n in result.linked else "free" for n in names
    ]
    out: pd.DataFrame = pd.DataFrame(
        {
            "value": value,
            "stderr": se,
            "t": t,
            "p": p,
            "lower": value - q * se,
            "upper": value + q * se,
            "status": status,
        },
        index=pd.Index(names, name="parameter"),
    )
    return out


def derived_table(result: FitResult, level: float = 0.95) -> pd.DataFrame:
    """Derived quantities (half-life, EC50, ...) with delta-method standard errors and intervals.

    The value and standard error come from :meth:`FitResult.derived` (symbolic gradient through
    links, ``sqrt(g' C g)`` over the free parameters, fixed parameters contributing nothing);
    this adds ``extrapolated``: True for an x-axis quantity (EC50, Km, a half-life) outside the
    range of x in the data, where the data say little about it.

    Returns
    -------
    DataFrame
        Indexed by name: ``value, stderr, lower, upper, extrapolated, unit, description``.
    """
    check_level(level)
    d = result.derived(level)
    out: pd.DataFrame = pd.DataFrame(
        {
            "value": d["value"].astype(float),
            "stderr": d["stderr"].astype(float),
            "lower": d["lower"].astype(float),
            "upper": d["upper"].astype(float),
            "extrapolated": [v is False for v in d["in_data_range"]],
            "unit": d["unit"],
            "description": d["description"],
        },
        index=d.index,
    )
    return out


# ------------------------------------------------------------------------------ bands
def _observation_sd(
    result: FitResult, x: FloatArray, fit: FloatArray, sigma: ArrayLike | float | None
) -> FloatArray:
    """Standard deviation of one new observation at each x, in the fit's weighting units."""
    if sigma is not None:
        s = np.broadcast_to(np.asarray(sigma, dtype=float), x.shape).astype(float)
        if np.any(~np.isfinite(s)) or np.any(s <= 0):
            raise DataError("sigma for new observations must be positive and finite.")
        return s
    if result.weights is None or result.weighting == "none":
        return np.ones_like(x)
    if result.weighting == "relative":
        return np.abs(fit)
    if result.weighting == "poisson":
        return np.sqrt(np.abs(fit))
    # Given sigma: interpolate the data's sigma in x (constant beyond the ends); replicates at
    # one x are averaged first so the interpolation is well defined.
    xd = result.x
    sd = 1.0 / np.asarray(result.weights, dtype=float)
    ux, inv = np.unique(xd, return_inverse=True)
    mean_sd = np.bincount(inv, weights=sd) / np.bincount(inv)
    return np.asarray(np.interp(x, ux, mean_sd), dtype=float)


def _band_frame(
    result: FitResult,
    x: ArrayLike,
    level: float,
    prediction: bool,
    sigma: ArrayLike | float | None,
    replicates: int,
) -> pd.DataFrame:
    xa = _as_x(x)
    _require_least_squares(result, "A confidence or prediction band")
    q = _quantile(result, level)
    fit = result.predict(xa)
    var = delta_method_variance(model_gradient(result, xa), result.covariance)
    if prediction:
        if isinstance(replicates, bool) or int(replicates) != replicates or replicates < 1:
            raise ParameterError(f"replicates must be a whole number >= 1, got {replicates!r}.")
        s2 = 1.0 if result.absolute_sigma else result.ssr / result.dof
        sd = _observation_sd(result, xa, fit, sigma)
        var = var + s2 * sd**2 / int(replicates)
    with np.errstate(invalid="ignore"):
        half = q * np.sqrt(np.where(var >= 0, var, np.nan))
    out: pd.DataFrame = pd.DataFrame(
        {"x": xa, "fit": fit, "lower": fit - half, "upper": fit + half}
    )
    return out


def confidence_band(result: FitResult, x: ArrayLike, level: float = 0.95) -> pd.DataFrame:
    """Pointwise confidence band of the fitted curve.

    ``f(x) +- q * sqrt(g(x)' C g(x))`` with ``g`` the gradient of the curve over the free
    parameters (symbolic for formula models, finite differences for Python functions), ``C``
    the covariance and ``q`` the Student t quantile on the residual degrees of freedom (normal
    when sigma was taken as exact). It says where the true curve lies, not where new data fall.

    Parameters
    ----------
    result : FitResult
        A least-squares fit.
    x : array_like
        Where to evaluate the band.
    level : float
        Pointwise coverage.

    Returns
    -------
    DataFrame
        Columns ``x, fit, lower, upper``.

    Raises
    ------
    FitError
        The fit used a robust loss.
    """
    return _band_frame(result, x, level, False, None, 1)


def prediction_band(
    result: FitResult,
    x: ArrayLike,
    level: float = 0.95,
    *,
    sigma: ArrayLike | float | None = None,
    replicates: int = 1,
) -> pd.DataFrame:
    """Pointwise prediction band: where a new observation (or the mean of ``replicates``) falls.

    ``f(x) +- q * sqrt(g(x)' C g(x) + s**2 * sd(x)**2 / m)`` where ``s**2`` is the residual
    variance ``ssr / dof`` (1 when sigma was taken as exact), ``m = replicates`` and ``sd(x)``
    the new observation's standard deviation in the units the fit weighted by:

    * unweighted fit: ``sd = 1``, so the added variance is ``s**2``;
    * relative weighting (``1/y**2``): ``sd = |f(x)|``; Poisson weighting: ``sd = sqrt|f(x)|``;
    * given sigma: ``sigma`` if passed here, else the data's sigma interpolated linearly in x
      (replicates averaged, held constant beyond the ends of the data). Pass ``sigma`` when you
      know the standard deviation of the new measurement.

    This is the usual weighted least-squares rule: a point of weight ``w = 1/sd**2`` has
    variance ``s**2 / w``.

    Parameters
    ----------
    result : FitResult
        A least-squares fit.
    x : array_like
        Where to evaluate the band.
    level : float
        Pointwise coverage.
    sigma : float or array_like, optional
        Standard deviation of the new observation(s) at each x (weighted fits only matter).
    replicates : int
        Number of new observations averaged (1 for a single reading).

    Returns
    -------
    DataFrame
        Columns ``x, fit, lower, upper``.
    """
    return _band_frame(result, x, level, True, sigma, replicates)


# --------------------------------------------------------------------- derived quantities
def derived_quantity(
    result: FitResult,
    expression: str,
    level: float = 0.95,
    *,
    axis: str | None = None,
) -> pd.Series:
    """Any function of the parameters, with its delta-method standard error and interval.

    For quantities the model does not list among its derived ones (see :func:`derived_table`),
    e.g. ``"log(2)/k"``, ``"Vmax/Km"`` or ``"10**log_ec50"``.

    Parameters
    ----------
    result : FitResult
    expression : str
        A formula in the parameter names (the expression language of models; no ``x``).
    level : float
        Coverage of the interval ``value +- q * stderr`` (Student t on the residual degrees of
        freedom, normal when sigma was taken as exact).
    axis : {"x", None}
        ``"x"`` when the quantity is a position on the x axis (a concentration or a time):
        it is then checked against the range of the data.

    Returns
    -------
    pandas.Series
        ``value, stderr, lower, upper, extrapolated`` (``extrapolated`` is None unless
        ``axis="x"``).

    Raises
    ------
    FormulaError
        The expression cannot be parsed.
    ParameterError
        It uses a name that is not a parameter of the model.

    Notes
    -----
    The gradient is symbolic over every parameter and chained through
    ``result.param_jacobian`` (so links count and fixed parameters contribute nothing): first
    order only, so for a strongly nonlinear function of poorly determined parameters the
    interval can be far from its nominal coverage; profile intervals do better there.
    """
    e = Expr.parse(expression)
    names = set(result.model.param_names)
    for n in e.names:
        if n not in names:
            raise ParameterError(
                unknown_name_message(n, result.model.param_names, f"model {result.model.name!r}")
            )
    if axis not in (None, "x"):
        raise ParameterError(f"axis must be 'x' or None, got {axis!r}.")
    value, se = derived_value_and_se(
        e, result.model.param_names, result.values, result.param_jacobian, result.covariance
    )
    q = _quantile(result, level)
    extrapolated: bool | None = None
    if axis == "x":
        xs = np.asarray(result.x)
        extrapolated = bool(
            math.isfinite(value) and not (float(xs.min()) <= value <= float(xs.max()))
        )
    return pd.Series(
        {
            "value": value,
            "stderr": se,
            "lower": value - q * se,
            "upper": value + q * se,
            "extrapolated": extrapolated,
        },
        name=expression,
        dtype=object,
    )


# ------------------------------------------------------------------------------ profile
def _profile_ssr(result: FitResult, j: int) -> Callable[[float], float]:
    """``v -> min SSR`` with free parameter ``j`` held at ``v``, the others re-optimised.

    Each re-optimisation starts from the solution found at the nearest value tried so far
    (continuation), so the search follows the valley of the SSR surface.
    """
    x = np.asarray(result.x, dtype=float)
    y = np.asarray(result.y, dtype=float)
    w = np.ones_like(y) if result.weights is None else np.asarray(result.weights, dtype=float)
    free = list(result.free)
    theta0 = np.array([result.values[n] for n in free], dtype=float)
    lo = np.array([result.bounds.get(n, (-math.inf, math.inf))[0] for n in free])
    hi = np.array([result.bounds.get(n, (-math.inf, math.inf))[1] for n in free])
    others = np.array([i for i in range(len(free)) if i != j], dtype=int)
    seen: dict[float, FloatArray] = {float(theta0[j]): theta0[others].copy()}
    model = result.model

    def resid(full: FloatArray) -> FloatArray:
        try:
            f = model.eval(x, values_from_free(result, full))
        except Exception:
            # A user's callable may raise anywhere; that trial value is simply infeasible.
            return np.full(y.size, np.nan)
        return np.asarray(w * (y - f), dtype=float)

    def ssr_at(v: float) -> float:
        full = theta0.copy()
        full[j] = v
        if others.size == 0:
            r = resid(full)
            return float(r @ r) if np.all(np.isfinite(r)) else math.inf
        near = min(seen, key=lambda s: abs(s - v))
        u0 = seen[near].copy()
        lo_o, hi_o = lo[others], hi[others]
        # least_squares needs a start strictly inside the bounds
        span = np.where(np.isfinite(hi_o - lo_o), hi_o - lo_o, 1.0)
        u0 = np.clip(u0, lo_o + 1e-10 * span, hi_o - 1e-10 * span)
        big = 1e6 * (float(np.max(np.abs(y))) + 1.0) * float(np.max(w))

        def r_other(u: FloatArray) -> FloatArray:
            full[others] = u
            r = resid(full)
            return np.where(np.isfinite(r), r, big)

        bounded = bool(np.any(np.isfinite(lo_o)) or np.any(np.isfinite(hi_o)))
        try:
            sol = scipy.optimize.least_squares(
                r_other,
                u0,
                bounds=(lo_o, hi_o) if bounded else (-np.inf, np.inf),
                method="trf" if bounded or y.size < others.size else "lm",
                x_scale="jac",
                xtol=1e-13,
                ftol=1e-13,
                gtol=1e-13,
                max_nfev=400 * (others.size + 1),
            )
        except (ValueError, np.linalg.LinAlgError):
            return math.inf
        full[others] = sol.x
        r = resid(full)
        if not np.all(np.isfinite(r)):
            return math.inf
        seen[float(v)] = np.asarray(sol.x, dtype=float).copy()
        return float(r @ r)

    return ssr_at


def profile_intervals(
    result: FitResult, names: Sequence[str] | None = None, level: float = 0.95
) -> pd.DataFrame:
    """Profile-likelihood confidence intervals of free parameters.

    For each parameter the interval is the set of values ``v`` whose profile sum of squares
    (the smallest SSR with the parameter held at ``v`` and every other free parameter
    re-fitted) stays below ``SSR_min * (1 + F(level; 1, dof) / dof)`` (common practice; Bates
    and Watts 1988, section 6.1, and the same F rule as lmfit's ``conf_interval``). Unlike the
    Wald interval it follows the curvature of the model, so it can be asymmetric, which is
    usual for rate constants, EC50s and Km.

    Parameters
    ----------
    result : FitResult
        A least-squares fit (not a robust loss).
    names : sequence of str, optional
        Free parameters to profile (default: all).
    level : float
        Coverage.

    Returns
    -------
    DataFrame
        Indexed by parameter: ``value, lower, upper, wald_lower, wald_upper, note``. An end the
        data do not bound is ``-inf``/``inf`` with the reason in ``note``.

    Raises
    ------
    ParameterError
        A name is not a free parameter.
    FitError
        The fit used a robust loss, or sigma was taken as exact (the F rule estimates the
        variance; use the Wald intervals then).
    """
    _require_least_squares(result, "A profile-likelihood interval")
    if result.absolute_sigma:
        raise FitError(
            "Profile intervals here use the F rule, which estimates the residual variance; "
            "this fit took sigma as exact (absolute_sigma=True). Use the Wald intervals "
            "(parameter_table), or refit with absolute_sigma=False."
        )
    lv = check_level(level)
    free = list(result.free)
    want = free if names is None else list(names)
    for n in want:
        if n not in free:
            raise ParameterError(
                f"{n!r} is not a free parameter of this fit; free parameters: {free}."
            )
    thr = profile_threshold(result.ssr, result.dof, lv)
    q = _quantile(result, lv)
    rows = []
    for n in want:
        j = free.index(n)
        est, se = result.values[n], result.stderr[n]
        b_lo, b_hi = result.bounds.get(n, (-math.inf, math.inf))
        lo, hi = profile_interval(
            _profile_ssr(result, j), est, se, thr, lower_bound=b_lo, upper_bound=b_hi
        )
        notes = [s for s in (lo.note, hi.note) if s]
        rows.append(
            {
                "parameter": n,
                "value": est,
                "lower": lo.value,
                "upper": hi.value,
                "wald_lower": est - q * se,
                "wald_upper": est + q * se,
                "note": " ".join(notes),
            }
        )
    out: pd.DataFrame = pd.DataFrame(rows).set_index("parameter")
    return out


# --------------------------------------------------------------------- inverse prediction
def _search_grid(result: FitResult, npts: int = 4001) -> FloatArray:
    """x values to look for solutions on: the data range and beyond.

    As far again beyond each end, or a decade beyond each end on a log scale for positive x
    spanning more than a decade.
    """
    xs = np.asarray(result.x, dtype=float)
    lo, hi = float(xs.min()), float(xs.max())
    pos = xs[xs > 0]
    domain = result.model.domain
    if lo >= 0 and pos.size and float(pos.max()) / float(pos.min()) > 10.0:
        lo_p, hi_p = float(pos.min()), float(pos.max())
        g = np.geomspace(lo_p / 10.0, hi_p * 10.0, npts)
        return np.asarray(np.concatenate([[0.0], g]) if domain != "x>0" else g, dtype=float)
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    a, b = lo - span, hi + span
    if domain == "x>=0":
        a = max(a, 0.0)
    elif domain == "x>0":
        a = max(a, lo * 1e-3 if lo > 0 else 1e-12)
    return np.linspace(a, b, npts)


def _roots(fun: Callable[[float], float], grid: FloatArray, values: FloatArray) -> list[float]:
    """Every sign change of ``values`` over ``grid``, refined with Brent's method."""
    out: list[float] = []
    for i in range(grid.size - 1):
        a, b = values[i], values[i + 1]
        if not (math.isfinite(a) and math.isfinite(b)):
            continue
        if a == 0.0:
            out.append(float(grid[i]))
        elif a * b < 0:
            out.append(float(scipy.optimize.brentq(fun, grid[i], grid[i + 1], xtol=1e-14)))
    if values.size and values[-1] == 0.0:
        out.append(float(grid[-1]))
    return out


def inverse_predict(
    result: FitResult,
    y: ArrayLike,
    level: float = 0.95,
    *,
    replicates: int = 1,
    sigma: ArrayLike | float | None = None,
) -> pd.DataFrame:
    """x for observed y off a fitted standard curve, with an interval (calibration).

    The estimate solves ``f(x) = y``. The interval is the classical calibration interval: the
    x values whose prediction band (for the mean of ``replicates`` new readings) contains
    ``y``, i.e. ``|y - f(x)| <= q * sqrt(g(x)' C g(x) + s**2 sd(x)**2 / m)`` (Eisenhart 1939;
    for a straight line this is Fieller's interval, e.g. Draper and Smith 1998, section 3.2;
    common practice for standard curves). It accounts for the uncertainty of the curve and of
    the new reading, and is asymmetric where the curve bends.

    Parameters
    ----------
    result : FitResult
        A least-squares fit of the standard curve.
    y : float or array_like
        Observed response(s) of the unknown sample(s).
    level : float
        Coverage of the interval.
    replicates : int
        How many readings were averaged into each ``y``.
    sigma : float or array_like, optional
        Standard deviation of the new reading (weighted fits; see :func:`prediction_band`).

    Returns
    -------
    DataFrame
        One row per y: ``y, x, lower, upper, extrapolated, note``. ``x`` is NaN when no x
        gives that response (beyond an asymptote or outside the curve's range); an interval end
        is ``-inf``/``inf`` when the band never excludes y on that side within the search range.

    Warns
    -----
    ExtrapolationWarning
        A y is outside the range of the fitted curve over the data (its x is an extrapolation)
        or beyond what the curve reaches at all (beyond an asymptote).

    Raises
    ------
    DataError
        y is not finite, or the curve takes the value y at several x within the data range
        (not monotone there), so the reading is ambiguous.
    FitError
        The fit used a robust loss.
    """
    _require_least_squares(result, "Inverse prediction")
    ys = _as_x(y, "y")
    lv = check_level(level)
    if isinstance(replicates, bool) or int(replicates) != replicates or replicates < 1:
        raise ParameterError(f"replicates must be a whole number >= 1, got {replicates!r}.")
    q = _quantile(result, lv)
    s2 = 1.0 if result.absolute_sigma else result.ssr / result.dof
    grid = _search_grid(result)
    fgrid = result.predict(grid)
    xs = np.asarray(result.x, dtype=float)
    x_lo, x_hi = float(xs.min()), float(xs.max())
    inside = (grid >= x_lo) & (grid <= x_hi)
    f_in = fgrid[inside & np.isfinite(fgrid)]
    f_min, f_max = float(np.min(f_in)), float(np.max(f_in))
    f_fin = fgrid[np.isfinite(fgrid)]
    reach_min, reach_max = float(np.min(f_fin)), float(np.max(f_fin))

    def half(xv: FloatArray) -> FloatArray:
        var = delta_method_variance(model_gradient(result, xv), result.covariance)
        fv = result.predict(xv)
        sd = _observation_sd(result, xv, fv, sigma)
        var = var + s2 * sd**2 / int(replicates)
        with np.errstate(invalid="ignore"):
            return np.asarray(q * np.sqrt(np.where(var >= 0, var, np.nan)), dtype=float)

    hgrid = half(grid)
    rows = []
    warn_out: list[float] = []
    warn_beyond: list[float] = []
    for y0 in ys:
        y0 = float(y0)

        def fx(t: float, y0: float = y0) -> float:
            return float(result.predict(np.array([t]))[0]) - y0

        roots = _roots(fx, grid, fgrid - y0)
        in_range = [r for r in roots if x_lo <= r <= x_hi]
        note = ""
        if len(in_range) > 1:
            raise DataError(
                f"The fitted curve passes through y = {y0:g} at several x within the data "
                f"({', '.join(f'{r:.6g}' for r in in_range)}): it is not monotone there, so the "
                "reading is ambiguous. Restrict the standard curve to its monotone part."
            )
        if in_range:
            x0 = in_range[0]
        elif roots:
            x0 = min(roots, key=lambda r: min(abs(r - x_lo), abs(r - x_hi)))
        else:
            x0 = math.nan
        extrapolated = not (f_min <= y0 <= f_max)
        if math.isnan(x0):
            note = (
                f"y = {y0:g} is beyond what the fitted curve reaches ({reach_min:.6g} to "
                f"{reach_max:.6g} over x from {grid[0]:.4g} to {grid[-1]:.4g}): it lies beyond "
                "an asymptote or far outside the standard curve; no x can be read off."
            )
            warn_beyond.append(y0)
            rows.append(
                {
                    "y": y0,
                    "x": math.nan,
                    "lower": math.nan,
                    "upper": math.nan,
                    "extrapolated": True,
                    "note": note,
                }
            )
            continue
        if extrapolated:
            note = (
                f"y = {y0:g} is outside the responses of the fitted curve over the data "
                f"({f_min:.6g} to {f_max:.6g}); x = {x0:.6g} is an extrapolation."
            )
            warn_out.append(y0)

        # interval: where |y0 - f(x)| - half(x) changes sign on each side of x0
        def gx(t: float, y0: float = y0) -> float:
            tv = np.array([t])
            return float(abs(y0 - result.predict(tv)[0]) - half(tv)[0])

        gvals = np.abs(y0 - fgrid) - hgrid
        ends: list[float] = []
        for side in (-1, 1):
            idx = np.flatnonzero((grid < x0) if side < 0 else (grid > x0))
            idx = idx[::-1] if side < 0 else idx
            prev = x0
            end = math.inf * side
            for i in idx:
                gv = gvals[i]
                if math.isfinite(gv) and gv > 0:
                    a, b = sorted((prev, float(grid[i])))
                    try:
                        end = float(scipy.optimize.brentq(gx, a, b, xtol=1e-13))
                    except ValueError:
                        end = float(grid[i])
                    break
                prev = float(grid[i])
            ends.append(end)
        lo_e, hi_e = ends
        if math.isinf(lo_e) or math.isinf(hi_e):
            extra = (
                "the prediction band does not exclude this y on one side within the search "
                "range, so the data do not bound x there (typical near a plateau)."
            )
            note = (note + " " + extra).strip()
        rows.append(
            {
                "y": y0,
                "x": x0,
                "lower": lo_e,
                "upper": hi_e,
                "extrapolated": extrapolated,
                "note": note,
            }
        )
    if warn_out:
        warnings.warn(
            f"{len(warn_out)} response(s) ({', '.join(f'{v:g}' for v in warn_out)}) lie "
            f"outside the fitted curve's range over the data ({f_min:.6g} to {f_max:.6g}); "
            "their x values are extrapolations. Extend the standard curve or dilute the sample.",
            ExtrapolationWarning,
            stacklevel=2,
        )
    if warn_beyond:
        warnings.warn(
            f"{len(warn_beyond)} response(s) ({', '.join(f'{v:g}' for v in warn_beyond)}) lie "
            "beyond what the fitted curve reaches (past an asymptote); x is NaN for them.",
            ExtrapolationWarning,
            stacklevel=2,
        )
    out: pd.DataFrame = pd.DataFrame(
        rows, columns=["y", "x", "lower", "upper", "extrapolated", "note"]
    )
    return out


register_statistics(
    parameter_table=parameter_table,
    profile_intervals=profile_intervals,
    correlation=correlation,
    derived_table=derived_table,
    derived_quantity=derived_quantity,
    confidence_band=confidence_band,
    prediction_band=prediction_band,
    inverse_predict=inverse_predict,
)
