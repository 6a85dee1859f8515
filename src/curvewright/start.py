"""Guided starting values: a data-driven rule per catalog model and a generic multi-start.

Two layers:

* Linearisation helpers (:func:`hanes_woolf`, :func:`semilog_rate`, :func:`logit_line`, ...) turn
  a curve into a straight line and read parameters off an ordinary least-squares line. They are
  public because linearised fits (issue 3) reuse them.
* Start rules. A catalog model's rule (:class:`SeparableRule`) takes a first estimate from a
  linearisation, then improves it cheaply by *separable* least squares: most catalog models are
  affine in some parameters (levels, amplitudes, Vmax), so for trial values of the others
  those are solved exactly by linear least squares (variable projection, Golub & Pereyra 1973) and
  only one to three nonlinear parameters remain to search. That makes the rules robust to noise,
  to curves that do not reach their plateau, and to data in any order.

:func:`generic_start` serves models without a rule: it derives plausible ranges for each
parameter from the scales of x and y (inferring each parameter's dimension from the formula when
it has no unit hint), draws a Latin hypercube of starts, runs short least-squares from each and
polishes the best.
"""

from __future__ import annotations

import functools
import inspect
import itertools
import math
import warnings
import zlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import least_squares, lsq_linear
from scipy.signal import find_peaks, lombscargle, peak_prominences
from scipy.stats import qmc

from .errors import DataError, ParameterError
from .expr import Expr, compile_many
from .models import Model, Param, unknown_name_message
from .parameters import move_inside

__all__ = [
    "EnzymeEstimate",
    "LogitEstimate",
    "PolynomialRule",
    "PowerEstimate",
    "RateEstimate",
    "SeparableRule",
    "data_seed",
    "eadie_hofstee",
    "generic_start",
    "guided_start",
    "hanes_woolf",
    "lineweaver_burk",
    "logit_line",
    "loglog_power",
    "plausible_sizes",
    "semilog_rate",
]

FloatArray = NDArray[np.float64]
SeedFn = Callable[[FloatArray, FloatArray], dict[str, float]]
GridFn = Callable[[FloatArray, FloatArray, Mapping[str, float]], dict[str, FloatArray]]

_LN10 = math.log(10.0)


# ============================================================================ linearisations
class EnzymeEstimate(NamedTuple):
    """Michaelis-Menten parameters read off a straight-line plot."""

    Vmax: float
    Km: float


class RateEstimate(NamedTuple):
    """``y = baseline + amplitude*exp(-k*x)``: amplitude (value above the baseline at x = 0), k."""

    amplitude: float
    k: float


class PowerEstimate(NamedTuple):
    """``y = a*x**b`` read off a log-log line."""

    a: float
    b: float


class LogitEstimate(NamedTuple):
    """``log10(f/(1-f)) = slope*(t - mid)``, f the fraction of the way between the two levels."""

    mid: float
    slope: float


def _vectors(x: ArrayLike, y: ArrayLike, what: str) -> tuple[FloatArray, FloatArray]:
    try:
        xa = np.asarray(x, dtype=float).ravel()
        ya = np.asarray(y, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise DataError(f"{what}: x and y must be numeric arrays ({exc}).") from exc
    if xa.shape != ya.shape:
        raise DataError(
            f"{what}: x and y must have the same length; got {xa.size} x values and {ya.size} "
            "y values."
        )
    return xa, ya


def _ols_line(t: FloatArray, z: FloatArray, what: str) -> tuple[float, float]:
    """Ordinary least-squares line ``z = intercept + slope*t`` (centred, so well conditioned)."""
    if t.size < 2:
        raise DataError(
            f"{what} needs at least two usable points; got {t.size}. Check the data are in the "
            "range the plot needs (see the function's notes)."
        )
    tm = float(np.mean(t))
    zm = float(np.mean(z))
    dt = t - tm
    sxx = float(np.dot(dt, dt))
    if not sxx > 0:
        raise DataError(f"{what} needs at least two distinct abscissae; all points share one.")
    slope = float(np.dot(dt, z - zm)) / sxx
    return zm - slope * tm, slope


def _positive_pairs(x: ArrayLike, y: ArrayLike, what: str) -> tuple[FloatArray, FloatArray]:
    xa, ya = _vectors(x, y, what)
    keep = np.isfinite(xa) & np.isfinite(ya) & (xa > 0) & (ya > 0)
    return xa[keep], ya[keep]


def lineweaver_burk(x: ArrayLike, y: ArrayLike) -> EnzymeEstimate:
    """Michaelis-Menten ``Vmax`` and ``Km`` from the double-reciprocal (Lineweaver-Burk) line.

    ``1/y = 1/Vmax + (Km/Vmax) * (1/x)``: ordinary least squares of ``1/y`` on ``1/x`` over the
    points with ``x > 0`` and ``y > 0``.

    Parameters
    ----------
    x, y : array_like
        Substrate concentrations and rates.

    Returns
    -------
    EnzymeEstimate
        ``(Vmax, Km)``. On noisy data they can be negative or huge: the reciprocal puts the
        largest errors (those of the smallest rates) furthest out, where they steer the line.

    Raises
    ------
    DataError
        Fewer than two points with positive x and y, or all at one x.
    """
    xa, ya = _positive_pairs(x, y, "lineweaver_burk")
    a, b = _ols_line(1.0 / xa, 1.0 / ya, "lineweaver_burk")
    return EnzymeEstimate(1.0 / a, b / a)


def hanes_woolf(x: ArrayLike, y: ArrayLike) -> EnzymeEstimate:
    """Michaelis-Menten ``Vmax`` and ``Km`` from the Hanes-Woolf line.

    ``x/y = Km/Vmax + x/Vmax``: ordinary least squares of ``x/y`` on ``x`` over the points with
    ``x > 0`` and ``y > 0``.

    Hanes-Woolf is the better-conditioned of the two classical plots: the abscissa is x itself,
    so points keep their natural spacing instead of the low concentrations being thrown far out
    as in ``1/x``, and the error of ``x/y`` is about ``x * sd(y) / y**2``, far more even across
    the range than the ``sd(y) / y**2`` of ``1/y``, whose largest errors sit at the points with
    the most leverage (common practice; e.g. Cornish-Bowden, *Fundamentals of Enzyme Kinetics*,
    from memory).

    Parameters
    ----------
    x, y : array_like
        Substrate concentrations and rates.

    Returns
    -------
    EnzymeEstimate
        ``(Vmax, Km)``.

    Raises
    ------
    DataError
        Fewer than two points with positive x and y, or all at one x.
    """
    xa, ya = _positive_pairs(x, y, "hanes_woolf")
    a, b = _ols_line(xa, xa / ya, "hanes_woolf")
    return EnzymeEstimate(1.0 / b, a / b)


def eadie_hofstee(x: ArrayLike, y: ArrayLike) -> EnzymeEstimate:
    """Michaelis-Menten ``Vmax`` and ``Km`` from the Eadie-Hofstee line.

    ``y = Vmax - Km * (y/x)``: ordinary least squares of ``y`` on ``y/x`` over the points with
    ``x > 0`` and ``y > 0``. (y appears on both axes, so ordinary least squares is biased on
    noisy data; the line is best used to look at, or as a start.)

    Parameters
    ----------
    x, y : array_like
        Substrate concentrations and rates.

    Returns
    -------
    EnzymeEstimate
        ``(Vmax, Km)``.

    Raises
    ------
    DataError
        Fewer than two points with positive x and y, or all with the same ``y/x``.
    """
    xa, ya = _positive_pairs(x, y, "eadie_hofstee")
    a, b = _ols_line(ya / xa, ya, "eadie_hofstee")
    return EnzymeEstimate(a, -b)


def semilog_rate(x: ArrayLike, y: ArrayLike, baseline: float) -> RateEstimate:
    """Amplitude and rate constant of ``y = baseline + amplitude*exp(-k*x)`` from a log-linear line.

    ``log|y - baseline| = log|amplitude| - k*x``, fitted by ordinary least squares over the
    points on the majority side of the baseline whose distance from it is more than 5 % of the
    largest distance (points near the baseline carry almost no information on k and their
    logarithm amplifies noise). A rising exponential (growth) gives a negative k.

    Parameters
    ----------
    x, y : array_like
        Data (any order).
    baseline : float
        The level the curve approaches (0 for pure exponential decay or growth).

    Returns
    -------
    RateEstimate
        ``(amplitude, k)``; ``amplitude`` has the sign of ``y - baseline``.

    Raises
    ------
    DataError
        Fewer than two usable points, or all at one x.
    """
    xa, ya = _vectors(x, y, "semilog_rate")
    if not math.isfinite(baseline):
        raise DataError(f"semilog_rate: baseline must be finite, got {baseline}.")
    keep = np.isfinite(xa) & np.isfinite(ya)
    xa, d = xa[keep], ya[keep] - baseline
    sign = 1.0 if np.sum(d > 0) >= np.sum(d < 0) else -1.0
    dist = sign * d
    use = dist > 0
    if np.any(use):
        use &= dist > 0.05 * float(np.max(dist))
    a, b = _ols_line(xa[use], np.log(dist[use]), "semilog_rate")
    return RateEstimate(sign * math.exp(a), -b)


def loglog_power(x: ArrayLike, y: ArrayLike) -> PowerEstimate:
    """``a`` and ``b`` of ``y = a*x**b`` from the log-log line ``log y = log a + b*log x``.

    Ordinary least squares over the points with ``x > 0`` and ``y > 0``.

    Parameters
    ----------
    x, y : array_like
        Data.

    Returns
    -------
    PowerEstimate
        ``(a, b)``.

    Raises
    ------
    DataError
        Fewer than two points with positive x and y, or all at one x.
    """
    xa, ya = _positive_pairs(x, y, "loglog_power")
    a, b = _ols_line(np.log(xa), np.log(ya), "loglog_power")
    return PowerEstimate(math.exp(a), b)


def logit_line(
    x: ArrayLike,
    y: ArrayLike,
    low_x_level: float,
    high_x_level: float,
    *,
    log_x: bool = True,
    trim: float = 0.05,
) -> LogitEstimate:
    """Midpoint and slope of a sigmoid from the logit line.

    With ``f = (y - low_x_level)/(high_x_level - low_x_level)`` and ``t = log10(x)`` (or
    ``t = x`` when ``log_x=False``), fits ``log10(f/(1-f)) = slope*(t - mid)`` by ordinary least
    squares over the points with ``trim < f < 1 - trim`` (the logit of points at the levels is
    dominated by noise). For a 4-parameter logistic going from ``zero_dose`` (low x) to
    ``full_effect`` (high x), ``mid`` is log10 of the EC50 or IC50 and ``slope`` the Hill
    coefficient, whichever way the response moves.

    Parameters
    ----------
    x, y : array_like
        Data; with ``log_x`` only points with ``x > 0`` are used (zero-dose controls are not).
    low_x_level, high_x_level : float
        The levels the curve approaches at the low-x and the high-x end (either may be the
        larger).
    log_x : bool
        Whether the sigmoid is in log10 x (dose-response) or in x (Boltzmann, logistic growth).
    trim : float
        Fraction of the change between the levels excluded at each end.

    Returns
    -------
    LogitEstimate
        ``(mid, slope)``.

    Raises
    ------
    DataError
        The two levels are equal, or fewer than two points lie strictly between them.
    """
    xa, ya = _vectors(x, y, "logit_line")
    lo, hi = low_x_level, high_x_level
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo == hi:
        raise DataError(
            f"logit_line: low_x_level and high_x_level must be finite and different; got {lo}, "
            f"{hi}."
        )
    keep = np.isfinite(xa) & np.isfinite(ya)
    if log_x:
        keep &= xa > 0
    xa, ya = xa[keep], ya[keep]
    f = (ya - lo) / (hi - lo)
    use = (f > trim) & (f < 1.0 - trim)
    t = np.log10(xa[use]) if log_x else xa[use]
    fu = f[use]
    a, b = _ols_line(t, np.log10(fu / (1.0 - fu)), "logit_line")
    if b == 0:
        raise DataError("logit_line: the points between the levels show no trend in x.")
    return LogitEstimate(-a / b, b)


# ============================================================================ data helpers
def _check_data(model: Model, x: ArrayLike, y: ArrayLike) -> tuple[FloatArray, FloatArray]:
    xa, ya = _vectors(x, y, "guided start")
    if not (np.all(np.isfinite(xa)) and np.all(np.isfinite(ya))):
        raise DataError(
            "guided start: x and y must be finite; drop or exclude the NaN/inf points first."
        )
    if xa.size < 2:
        raise DataError(f"guided start needs at least two points; got {xa.size}.")
    model.check_domain(xa)
    return xa, ya


def _check_fixed(model: Model, fixed: Mapping[str, float] | None) -> dict[str, float]:
    out: dict[str, float] = {}
    for name, value in (fixed or {}).items():
        if name not in model.param_names:
            raise ParameterError(unknown_name_message(name, model.param_names, repr(model.name)))
        v = float(value)
        if not math.isfinite(v):
            raise ParameterError(f"Fixed value of {name!r} must be finite, got {value!r}.")
        out[name] = v
    return out


def _means_by_x(x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Distinct x (sorted) and the mean y at each: replicates count once, order is irrelevant."""
    ux, inv = np.unique(x, return_inverse=True)
    sums = np.bincount(inv, weights=y)
    counts = np.bincount(inv)
    return ux, sums / counts


def _end_levels(x: FloatArray, y: FloatArray, frac: float = 0.15) -> tuple[float, float]:
    """Mean response over the lowest and the highest ``frac`` of the distinct x values."""
    ux, my = _means_by_x(x, y)
    m = max(1, round(frac * ux.size))
    return float(np.mean(my[:m])), float(np.mean(my[-m:]))


def _span(a: FloatArray) -> float:
    s = float(np.ptp(a)) if a.size else 0.0
    return s if s > 0 else max(float(np.max(np.abs(a))) if a.size else 1.0, 1.0)


def _geom(lo: float, hi: float, n: int) -> FloatArray:
    return np.geomspace(lo, hi, n)


# ============================================================================ least squares core
@dataclass(frozen=True)
class _Problem:
    """A least-squares problem on some of a model's parameters (the others held)."""

    model: Model
    x: FloatArray
    y: FloatArray
    held: dict[str, float]  # fixed by the user (and, in a projection, nothing else)
    linear: tuple[str, ...]  # solved exactly for each trial of the others
    nonlinear: tuple[str, ...]  # searched
    big: float  # stands in for non-finite residuals so the solver backs away from them
    scale: float  # residuals are divided by the size of y, so tolerances mean the same at any scale

    @classmethod
    def make(
        cls,
        model: Model,
        x: FloatArray,
        y: FloatArray,
        held: Mapping[str, float],
        linear: Sequence[str],
    ) -> _Problem:
        free = [n for n in model.param_names if n not in held]
        lin = tuple(n for n in free if n in linear)
        non = tuple(n for n in free if n not in lin)
        big = 1e6 * (float(np.max(np.abs(y))) + _span(y))
        # least_squares' gradient tolerance is absolute: without this, data in units of 1e-9
        # would stop every search at its first step
        scale = float(np.max(np.abs(y))) or 1.0
        return cls(model, x, y, dict(held), lin, non, big, scale)

    # --- parameter transforms: positive parameters are searched in log space
    def logged(self, name: str) -> bool:
        p = self.model.param(name)
        return p.lower >= 0 and (p.positive or p.log_scale)

    def to_u(self, name: str, v: float) -> float:
        if self.logged(name):
            p = self.model.param(name)
            floor = p.lower if p.lower > 0 else 1e-300
            return math.log(max(v, floor, 1e-300))
        return v

    def from_u(self, name: str, u: float) -> float:
        return math.exp(min(u, 700.0)) if self.logged(name) else u

    def u_bounds(self, names: Sequence[str]) -> tuple[FloatArray, FloatArray]:
        lo, hi = [], []
        for n in names:
            p = self.model.param(n)
            if self.logged(n):
                lo.append(math.log(p.lower) if p.lower > 0 else -np.inf)
                hi.append(math.log(p.upper) if math.isfinite(p.upper) else np.inf)
            else:
                lo.append(p.lower)
                hi.append(p.upper)
        return np.array(lo), np.array(hi)

    # --- evaluation
    def curve(self, values: Mapping[str, float]) -> FloatArray:
        with np.errstate(all="ignore"):
            out = self.model.func(self.x, *(values[n] for n in self.model.param_names))
        return np.broadcast_to(np.asarray(out, dtype=float), self.x.shape)

    def residual(self, values: Mapping[str, float]) -> FloatArray:
        r = self.curve(values) - self.y
        out: FloatArray = np.where(np.isfinite(r), r, self.big) / self.scale
        return out

    def project(self, values: dict[str, float]) -> dict[str, float]:
        """Solve the linear parameters exactly for the given nonlinear ones."""
        return self._project(values)[0]

    def _project(self, values: dict[str, float]) -> tuple[dict[str, float], FloatArray | None]:
        """The projected values and, when they were solved, the curve they give (f0 + A c)."""
        if not self.linear:
            return values, None
        v0 = dict(values)
        for n in self.linear:
            v0[n] = 0.0
        f0 = self.curve(v0)
        cols = []
        for n in self.linear:
            v = dict(v0)
            v[n] = 1.0
            cols.append(self.curve(v) - f0)
        A = np.column_stack(cols)
        rhs = self.y - f0
        if not (np.all(np.isfinite(A)) and np.all(np.isfinite(rhs))):
            return values, None
        norms = np.linalg.norm(A, axis=0)
        norms[norms == 0] = 1.0
        As = A / norms
        lo = np.array([self.model.param(n).lower for n in self.linear]) * norms
        hi = np.array([self.model.param(n).upper for n in self.linear]) * norms
        if np.all(np.isinf(lo)) and np.all(np.isinf(hi)):
            c = np.linalg.lstsq(As, rhs, rcond=None)[0]
        else:
            c = lsq_linear(As, rhs, bounds=(lo, hi), method="bvls").x
        out = dict(values)
        for n, ci, s in zip(self.linear, c, norms, strict=True):
            out[n] = float(ci / s)
        # the model is affine in these parameters, so its curve is f0 + A c: one evaluation saved
        return out, f0 + As @ c

    def full(self, u: FloatArray, base: Mapping[str, float]) -> dict[str, float]:
        return self._full(u, base)[0]

    def _full(
        self, u: FloatArray, base: Mapping[str, float]
    ) -> tuple[dict[str, float], FloatArray | None]:
        v = {**base, **self.held}
        for n, ui in zip(self.nonlinear, u, strict=True):
            v[n] = self.from_u(n, float(ui))
        return self._project(v)

    def _residual_of(self, u: FloatArray, base: Mapping[str, float]) -> FloatArray:
        v, f = self._full(u, base)
        if f is None:
            return self.residual(v)
        r = f - self.y
        out: FloatArray = np.where(np.isfinite(r), r, self.big) / self.scale
        return out

    def ssr(self, values: Mapping[str, float]) -> float:
        r = self.residual(values)
        return float(np.dot(r, r))

    # --- the analytic path (formula models): variable projection with the model's Jacobian
    @property
    def analytic(self) -> bool:
        """Whether :meth:`_analytic_eval` applies: a formula, and no bounded linear parameter."""
        if not self.model.has_jacobian:
            return False
        return all(
            math.isinf(self.model.param(n).lower) and math.isinf(self.model.param(n).upper)
            for n in self.linear
        )

    @functools.cached_property
    def _index(self) -> tuple[list[int], list[int], list[bool]]:
        """Positions of the nonlinear and linear parameters in ``param_names``; which are logged.

        Looked up once: the analytic search needs them at every evaluation.
        """
        names = self.model.param_names
        return (
            [names.index(n) for n in self.nonlinear],
            [names.index(n) for n in self.linear],
            [self.logged(n) for n in self.nonlinear],
        )

    def _theta_base(self, base: Mapping[str, float]) -> FloatArray:
        """``base`` (held values applied) as a vector, its linear parameters 0."""
        v = {**base, **self.held}
        for n in self.linear:
            v[n] = 0.0
        return np.array([float(v[n]) for n in self.model.param_names])

    def _theta(
        self, u: FloatArray, base: Mapping[str, float], tb: FloatArray | None = None
    ) -> FloatArray:
        """The full vector at searched values ``u`` (linear ones 0); ``tb``: the base's vector."""
        theta = self._theta_base(base) if tb is None else tb.copy()
        non, _, logged = self._index
        for i, lg, ui in zip(non, logged, u.tolist(), strict=True):
            theta[i] = math.exp(min(ui, 700.0)) if lg else ui
        return theta

    def _linear_solve(self, theta: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray] | None:
        """The linear parameters solved at ``theta``'s nonlinear values (its linear ones 0).

        Returns the linear values by least squares, the curve they give and an orthonormal
        basis of the linear columns' span. The model is affine in them: ``f = f0 + A c`` with
        ``A`` the Jacobian's linear columns,
        both from one evaluation. None when something is not finite.
        """
        fn = self._screen_fn
        if fn is not None:  # only the curve and the linear columns
            out = fn(self.x, *theta.tolist())
            f0 = np.broadcast_to(out[0], self.x.shape).astype(float, copy=True)
            A = self._columns(out[1:])
        else:
            f0, J = self.model.value_and_jacobian(self.x, theta.tolist())
            A = J[:, self._index[1]]
        rhs = self.y - f0
        if not (np.all(np.isfinite(A)) and np.all(np.isfinite(rhs))):
            return None
        U, sv, Vt = np.linalg.svd(A, full_matrices=False)
        keep = sv > sv[0] * 1e-12 * max(A.shape) if sv.size and sv[0] > 0 else sv > 0
        Uk = U[:, keep]
        c = Vt[keep].T @ ((Uk.T @ rhs) / sv[keep])
        return c, f0 + A @ c, Uk

    @functools.cached_property
    def _screen_fn(self) -> Callable[..., tuple[Any, ...]] | None:
        """The curve and its linear parameters' columns only, compiled together (formulas).

        Screening needs nothing else; the nonlinear columns would be most of the work.
        """
        expr = self.model.expr
        if expr is None or not self.linear:
            return None
        family = [expr, *(expr.derivative(n) for n in self.linear)]
        return compile_many(family, ["x", *self.model.param_names])

    @functools.cached_property
    def _nonlinear_fn(self) -> Callable[..., tuple[Any, ...]] | None:
        """The nonlinear parameters' columns only, compiled together (formulas with linear ones).

        The projected Jacobian needs no more: the curve and linear columns come from the
        residual's evaluation.
        """
        expr = self.model.expr
        if expr is None or not self.linear or not self.nonlinear:
            return None
        return compile_many(
            [expr.derivative(n) for n in self.nonlinear], ["x", *self.model.param_names]
        )

    def _columns(self, out: Sequence[Any]) -> FloatArray:
        """Evaluated columns as an ``(x.size, len(out))`` array (constants broadcast).

        Column-major, as the Jacobian's columns picked by index are: the linear algebra then
        gives the same bits either way.
        """
        J = np.empty((self.x.size, len(out)), order="F")
        for j, col in enumerate(out):
            J[:, j] = col
        return J

    def screen(self, values: Mapping[str, float]) -> float:
        """Residual sum of squares after solving the linear parameters: one evaluation."""
        u = np.array([self.to_u(n, float(values[n])) for n in self.nonlinear])
        theta = self._theta(u, values)
        with np.errstate(all="ignore"):
            if not self.linear:
                r = self.residual(dict(zip(self.model.param_names, theta.tolist(), strict=True)))
                return float(r @ r)
            got = self._linear_solve(theta)
        if got is None:
            return math.inf
        r = (got[1] - self.y) / self.scale
        ssr = float(r @ r)
        return ssr if math.isfinite(ssr) else math.inf

    def screen_many(self, pool: Sequence[Mapping[str, float]]) -> FloatArray:
        """:meth:`screen` of many candidates at once (formula models): one broadcast call.

        The model is evaluated with each nonlinear parameter as a column of candidate values
        (the formula's numpy code broadcasts), and the linear least-squares problems are solved
        together by a stacked QR. A candidate whose linear columns are (nearly) dependent gets
        infinity: its projected sum of squares is not reliable, and it is a poor start anyway.
        """
        if self._screen_fn is None or not pool:
            return np.array([self.screen(c) for c in pool])
        # in blocks: the temporaries of a block stay in the cache (twice as fast for 500
        # candidates), and each candidate's score is computed alone either way
        block = _SCREEN_BLOCK
        return np.concatenate(
            [self._screen_block(pool[i : i + block]) for i in range(0, len(pool), block)]
        )

    def _screen_block(self, pool: Sequence[Mapping[str, float]]) -> FloatArray:
        """:meth:`screen_many` of one block of candidates (formula models)."""
        names = self.model.param_names
        fn = self._screen_fn
        assert fn is not None
        k = len(pool)
        args: list[Any] = []
        for n in names:
            if n in self.linear:
                args.append(0.0)
            elif n in self.held:
                args.append(float(self.held[n]))
            else:
                args.append(np.array([[float(c[n])] for c in pool]))
        with np.errstate(all="ignore"):
            out = fn(self.x[None, :], *args)
            shape = (k, self.x.size)
            f0 = np.broadcast_to(np.asarray(out[0], dtype=float), shape)
            lin = range(1, 1 + len(self.linear))
            A = np.stack(
                [np.broadcast_to(np.asarray(out[i], dtype=float), shape) for i in lin], axis=2
            )
            rhs = self.y[None, :] - f0
            ok = np.all(np.isfinite(A), axis=(1, 2)) & np.all(np.isfinite(rhs), axis=1)
            A = np.where(ok[:, None, None], A, 0.0)
            rhs = np.where(ok[:, None], rhs, 0.0)
            norms = np.linalg.norm(A, axis=1, keepdims=True)
            good = np.all(norms[:, 0, :] > 0, axis=1)
            q, r = np.linalg.qr(A / np.where(norms > 0, norms, 1.0))
            diag = np.abs(np.diagonal(r, axis1=1, axis2=2))
            good &= np.min(diag, axis=1) > 1e-10
            proj = np.einsum("knl,kn->kl", q, rhs)
            ssr = (np.sum(rhs * rhs, axis=1) - np.sum(proj * proj, axis=1)) / self.scale**2
        ssr = np.maximum(ssr, 0.0)
        return np.where(ok & good & np.isfinite(ssr), ssr, np.inf)

    def _analytic_residual(
        self, u: FloatArray, base: Mapping[str, float], tb: FloatArray | None = None
    ) -> tuple[FloatArray, FloatArray, FloatArray | None]:
        """Residual at ``u`` (linear parameters solved), the full vector, the linear basis.

        The basis is the linear columns' orthonormal one (None when not solved).
        ``tb``: :meth:`_theta_base` of ``base``, when the caller has it.
        """
        theta = self._theta(u, base, tb)
        basis = None
        if self.linear:
            got = self._linear_solve(theta)
            if got is None:
                return np.full(self.x.size, self.big / self.scale), theta, None
            c, f, basis = got
            theta[self._index[1]] = c
        else:
            f = self.model.value_and_jacobian(self.x, theta.tolist())[0]
        r = (f - self.y) / self.scale
        bad = ~np.isfinite(r)
        if bad.any():
            r = np.where(bad, self.big / self.scale, r)
        return r, theta, basis

    def _analytic_jacobian(self, theta: FloatArray, basis: FloatArray | None = None) -> FloatArray:
        """The residual's Jacobian in the searched (log) parameters at the full vector ``theta``.

        With linear parameters it is Kaufman's (1975) variable-projection Jacobian: the model's
        nonlinear columns, at the solved linear values, with their part in the span of the
        linear columns removed. ``basis``: that span's orthonormal basis, when the residual
        just computed it (the linear columns do not depend on the linear values).
        """
        non, lin, logged = self._index
        fn = self._nonlinear_fn
        if fn is not None and basis is not None:  # only the columns needed
            Jn = self._columns(fn(self.x, *theta.tolist())) / self.scale
        else:
            _, J = self.model.value_and_jacobian(self.x, theta.tolist())
            Jn = J[:, non] / self.scale
        for j, lg in enumerate(logged):
            if lg:
                Jn[:, j] *= theta[non[j]]  # d theta / d log theta
        if self.linear and basis is not None:
            Jn = Jn - basis @ (basis.T @ Jn)
        elif self.linear:
            A = J[:, lin]
            if np.all(np.isfinite(A)):
                U, sv, _ = np.linalg.svd(A, full_matrices=False)
                keep = sv > sv[0] * 1e-12 * max(A.shape) if sv.size and sv[0] > 0 else sv > 0
                basis = U[:, keep]
                Jn = Jn - basis @ (basis.T @ Jn)
        if not np.all(np.isfinite(Jn)):
            Jn = np.nan_to_num(Jn, nan=0.0, posinf=0.0, neginf=0.0)
        return Jn

    def search(
        self, base: Mapping[str, float], budget: int, tol: float | None = None
    ) -> dict[str, float]:
        """Short least-squares run on the nonlinear parameters (linear ones projected out).

        ``tol`` tightens the analytic path's tolerances (a polish); scipy's defaults otherwise.
        """
        if not self.nonlinear:
            return self.full(np.zeros(0), base)
        u0 = np.array([self.to_u(n, base[n]) for n in self.nonlinear])
        lo, hi = self.u_bounds(self.nonlinear)
        u0 = np.clip(u0, np.nextafter(lo, hi), np.nextafter(hi, lo))
        if self.analytic:
            return self._search_analytic(u0, lo, hi, base, budget, tol)

        # Searched in units of each parameter's own size: least_squares checks gtol on the
        # unscaled gradient, which otherwise depends on the unit of x (a midpoint at 3e7 has a
        # tiny derivative and would stop the search at once). Log-space ones are unitless.
        logged = np.array([self.logged(n) for n in self.nonlinear])
        typ = np.where(logged, 1.0, np.abs(u0))
        typ = np.where(typ > 0, typ, 1.0)

        def fun(w: FloatArray) -> FloatArray:
            return self._residual_of(w * typ, base)

        try:
            sol = least_squares(
                fun, u0 / typ, bounds=(lo / typ, hi / typ), x_scale="jac", max_nfev=budget
            )
            u = sol.x * typ
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            u = u0
        return self.full(u, base)

    def _search_analytic(
        self,
        u0: FloatArray,
        lo: FloatArray,
        hi: FloatArray,
        base: Mapping[str, float],
        budget: int,
        tol: float | None = None,
    ) -> dict[str, float]:
        """:meth:`search` with the model's analytic Jacobian (variable projection)."""
        logged = np.array([self.logged(n) for n in self.nonlinear])
        typ = np.where(logged, 1.0, np.abs(u0))
        typ = np.where(typ > 0, typ, 1.0)
        tb = self._theta_base(base)
        # the full vector and linear basis at the last residual's point
        last: dict[bytes, tuple[FloatArray, FloatArray | None]] = {}

        def fun(w: FloatArray) -> FloatArray:
            r, theta, basis = self._analytic_residual(w * typ, base, tb)
            last.clear()
            last[w.tobytes()] = (theta, basis)
            return r

        def jac(w: FloatArray) -> FloatArray:
            got = last.get(w.tobytes())
            if got is None:  # the solver asks at the last residual's point; just in case
                got = self._analytic_residual(w * typ, base, tb)[1:]
            return self._analytic_jacobian(*got) * typ

        best = u0
        try:
            with np.errstate(all="ignore"):
                sol = least_squares(
                    fun,
                    u0 / typ,
                    jac=jac,
                    bounds=(lo / typ, hi / typ),
                    x_scale="jac",
                    max_nfev=budget,
                    ftol=1e-8 if tol is None else tol,  # scipy's defaults unless told
                    xtol=1e-8 if tol is None else tol,
                    gtol=1e-8 if tol is None else tol,
                )
            best = sol.x * typ
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            pass
        with np.errstate(all="ignore"):
            theta = self._analytic_residual(best, base, tb)[1]
        out = {**base, **dict(zip(self.model.param_names, theta.tolist(), strict=True))}
        return {**out, **self.held}

    # --- stacked short searches: many starts advanced together (formula models)
    def _eval_many(self, U: FloatArray, tb: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Residuals and projected Jacobians at the searched points ``U``, all at once.

        ``U``: ``(k, d)`` searched values (log for logged parameters); ``tb``: the held values
        as a full vector. Two broadcast calls for all ``k`` points: the curve and linear
        columns (linear values 0), then, with the linear values solved (a stacked QR of the
        normalised columns; a column that adds no direction gets the value 0 and adds none to
        the basis), the nonlinear columns. The residual is the part of the data outside the
        linear columns' span; the Jacobian is Kaufman's projected one, as
        :meth:`_analytic_jacobian`.
        """
        sfn, nfn = self._screen_fn, self._nonlinear_fn
        assert sfn is not None and nfn is not None
        non, lin, logged = self._index
        k, d, n, L = U.shape[0], U.shape[1], self.x.size, len(lin)
        lg = np.array(logged, dtype=bool)
        V = np.where(lg, np.exp(np.minimum(U, 700.0)), U) if lg.any() else U
        col: dict[int, Any] = {i: v[:, None] for i, v in zip(non, V.T, strict=True)}
        args = [col[i] if i in col else float(tb[i]) for i in range(tb.size)]
        shape = (k, n)
        xr = self.x[None, :]
        out = sfn(xr, *args)
        rhs = self.y[None, :] - np.broadcast_to(np.asarray(out[0], dtype=float), shape)
        A = np.empty((k, n, L))
        for j in range(L):
            A[:, :, j] = np.broadcast_to(np.asarray(out[1 + j], dtype=float), shape)
        ok = np.all(np.isfinite(rhs), axis=1) & np.all(np.isfinite(A), axis=(1, 2))
        A = np.where(ok[:, None, None], A, 0.0)
        rhs = np.where(ok[:, None], rhs, 0.0)
        norms = np.sqrt(np.einsum("knl,knl->kl", A, A))
        norms = np.where(norms > 0, norms, 1.0)
        Q, R = np.linalg.qr(A / norms[:, None, :])
        keep = np.abs(np.diagonal(R, axis1=1, axis2=2)) > 1e-10
        Q = Q * keep[:, None, :]
        Qt = Q.transpose(0, 2, 1)
        proj = (Qt @ rhs[:, :, None])[:, :, 0]
        # R c = Q'rhs on the kept columns; a dropped column's row becomes c_j = 0
        R = R * keep[:, :, None] + np.where(keep, 0.0, 1.0)[:, :, None] * np.eye(L)
        c = np.linalg.solve(R, proj[:, :, None])[:, :, 0] / norms
        for j, i in enumerate(lin):
            col[i] = c[:, j : j + 1]
        args = [col[i] if i in col else float(tb[i]) for i in range(tb.size)]
        out = nfn(xr, *args)
        Jn = np.empty((k, n, d))
        for j in range(d):
            Jn[:, :, j] = np.broadcast_to(np.asarray(out[j], dtype=float), shape)
        if lg.any():
            Jn *= np.where(lg, V, 1.0)[:, None, :]  # d theta / d log theta
        Jn /= self.scale
        Jn -= Q @ (Qt @ Jn)
        r = -(rhs - (Q @ proj[:, :, None])[:, :, 0]) / self.scale
        r = np.where(np.isfinite(r) & ok[:, None], r, self.big / self.scale)
        Jn = np.where(np.isfinite(Jn), Jn, 0.0)
        return r, Jn

    def search_many(
        self, bases: Sequence[Mapping[str, float]], budget: int
    ) -> list[dict[str, float]]:
        """Short searches from many starts at once: a stacked Levenberg-Marquardt.

        Every start gets at most ``budget`` evaluations, one per step, as scipy's ``max_nfev``
        counts them (Marquardt's damping scaled by the diagonal of ``J'J``, steps clipped into
        the bounds; a start stops when its sum of squares or its step stalls). All active
        starts are evaluated together in one broadcast call per step, which removes the
        per-start overhead of separate solver runs. Each start's path depends only on its own
        values, so its answer does not depend on which other starts share the batch. Models
        without a formula or without linear parameters get :meth:`search`, one start at a time.
        """
        if not bases:
            return []
        if not (self.analytic and self._screen_fn is not None and self._nonlinear_fn is not None):
            return [self.search(b, budget) for b in bases]
        lo, hi = self.u_bounds(self.nonlinear)
        lo_in, hi_in = np.nextafter(lo, hi), np.nextafter(hi, lo)
        U = np.array([[self.to_u(n, float(b[n])) for n in self.nonlinear] for b in bases])
        U = np.clip(U, lo_in, hi_in)
        tb = self._theta_base(bases[0])
        k, d = U.shape
        with np.errstate(all="ignore"):
            r, J = self._eval_many(U, tb)
            S = np.einsum("kn,kn->k", r, r)
            lam = np.full(k, 1e-3)
            active = np.isfinite(S)
            eye = np.eye(d, dtype=bool)
            for _ in range(budget - 1):
                idx = np.flatnonzero(active)
                if idx.size == 0:
                    break
                Jk, rk = J[idx], r[idx]
                H = Jk.transpose(0, 2, 1) @ Jk
                g = np.einsum("knd,kn->kd", Jk, rk)
                dg = np.diagonal(H, axis1=1, axis2=2)
                dg = np.maximum(dg, 1e-12 * np.max(dg, axis=1, keepdims=True) + 1e-300)
                M = H + np.where(eye, (lam[idx, None] * dg)[:, :, None], 0.0)
                try:
                    step = -np.linalg.solve(M, g[:, :, None])[:, :, 0]
                except np.linalg.LinAlgError:
                    step = -g / (dg * (1.0 + lam[idx, None]))
                step = np.where(np.isfinite(step), step, 0.0)
                Un = np.clip(U[idx] + step, lo_in, hi_in)
                rn, Jn = self._eval_many(Un, tb)
                Sn = np.einsum("kn,kn->k", rn, rn)
                better = np.isfinite(Sn) & (Sn < S[idx])
                # scipy's default tolerances: a tiny relative decrease or a tiny step stops a
                # start, a rejected tiny step too (the damping only shrinks it further)
                tiny = np.all(np.abs(Un - U[idx]) <= 1e-8 * (1e-8 + np.abs(U[idx])), axis=1)
                acc = idx[better]
                small = (S[acc] - Sn[better] <= 1e-8 * S[acc]) | tiny[better]
                U[acc], S[acc], r[acc], J[acc] = Un[better], Sn[better], rn[better], Jn[better]
                lam[acc] = np.maximum(lam[acc] / 3.0, 1e-12)
                rej = idx[~better]
                lam[rej] = lam[rej] * 4.0
                active[acc[small]] = False
                active[rej[(lam[rej] > 1e12) | tiny[~better]]] = False
            # each stopping point's linear values as the one-start search solves them
            thetas = [self._analytic_residual(u, bases[0], tb)[1] for u in U]
        names = self.model.param_names
        out = []
        for b, th in zip(bases, thetas, strict=True):
            v = {**b, **dict(zip(names, th.tolist(), strict=True))}
            out.append({**v, **self.held})
        return out


_POLISH_TOL = 1e-14
#: Candidates screened per broadcast call (see _Problem.screen_many).
_SCREEN_BLOCK = 96


def _polish(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    values: Mapping[str, float],
    held: Mapping[str, float],
    budget: int,
    tol: float | None = _POLISH_TOL,
) -> dict[str, float]:
    """Least squares on every free parameter at once, from ``values``; keeps the better.

    ``tol``: the analytic path's tolerances (None: scipy's defaults, for candidates that the
    fit polishes anyway).
    """
    prob = _Problem.make(model, x, y, held, ())
    if not prob.nonlinear:
        return dict(values)
    start = {**values, **held}
    # exact derivatives make tight tolerances cheap: the start rules return exact values on
    # clean data in any unit
    refined = prob.search(start, budget, tol)
    return refined if prob.ssr(refined) <= prob.ssr(start) else start


def _clip_into_bounds(model: Model, values: Mapping[str, float]) -> dict[str, float]:
    """Candidate values inside the model's bounds, by the one rule (parameters.move_inside)."""
    out = {}
    for p in model.params:
        v = float(values.get(p.name, p.value))
        if not math.isfinite(v):
            v = p.value
        if p.lower >= 0 and (p.positive or p.log_scale) and v <= 0:
            # a rate or width of exactly 0 stalls a log-scale search; use a tiny positive value
            v = max(p.lower, abs(p.value) * 1e-6, 1e-12)
        out[p.name] = float(move_inside(p.lower, p.upper, v))
    return out


# ============================================================================ rules
@dataclass(frozen=True)
class SeparableRule:
    """A catalog model's starting-value rule: linearised seed, small grid, separable refinement.

    Parameters
    ----------
    seed : callable
        ``seed(x, y) -> {name: value}``: first estimates from a linearisation.
    linear : tuple of str
        Parameters the model is affine in (solved exactly for each trial of the others).
    grid : callable, optional
        ``grid(x, y, seed) -> {name: candidate values}`` for nonlinear parameters: extra trial
        points in case the linearisation misleads (noisy or partial curves).
    finish : callable, optional
        Tidies the result, e.g. orders the two rates of a biexponential decay.
    model : Model, optional
        The model the rule belongs to (set by the catalog); a model passed at call time wins,
        so changed bounds are respected.
    """

    seed: SeedFn
    linear: tuple[str, ...] = ()
    grid: GridFn | None = None
    finish: Callable[[dict[str, float]], dict[str, float]] | None = None
    model: Model | None = None
    n_refine: int = 3

    def bind(self, model: Model) -> SeparableRule:
        """The same rule attached to ``model``."""
        return SeparableRule(self.seed, self.linear, self.grid, self.finish, model, self.n_refine)

    def __call__(
        self,
        x: FloatArray,
        y: FloatArray,
        *,
        fixed: Mapping[str, float] | None = None,
        model: Model | None = None,
    ) -> dict[str, float]:
        """Starting values for ``model`` (default: the bound one) on data ``x, y``."""
        m = model if model is not None else self.model
        if m is None:
            raise ParameterError("This start rule is not attached to a model; pass model=...")
        xa = np.asarray(x, dtype=float)
        ya = np.asarray(y, dtype=float)
        held = dict(fixed or {})
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            try:
                seed = self.seed(xa, ya)
            except (DataError, ValueError, ZeroDivisionError, OverflowError):
                seed = {}
        base = _clip_into_bounds(m, {**m.defaults(), **seed, **held})
        prob = _Problem.make(m, xa, ya, held, self.linear)
        candidates = [base]
        if self.grid is not None and prob.nonlinear:
            g = self.grid(xa, ya, base)
            axes = [
                np.asarray(g[n], dtype=float) if n in g else np.array([base[n]])
                for n in prob.nonlinear
            ]
            for combo in itertools.product(*axes):
                candidates.append(
                    _clip_into_bounds(m, {**base, **dict(zip(prob.nonlinear, combo, strict=True))})
                )
        projected = [prob.project(c) for c in candidates]
        order = np.argsort([prob.ssr(c) for c in projected])
        best = projected[int(order[0])]
        best_ssr = prob.ssr(best)
        budget = 60 * (len(prob.nonlinear) + 1)
        seen: list[FloatArray] = []
        for i in order:
            if len(seen) >= self.n_refine:
                break
            c = projected[int(i)]
            key = np.array([prob.to_u(n, c[n]) for n in prob.nonlinear])
            if any(np.allclose(key, s, rtol=1e-3, atol=1e-9) for s in seen):
                continue
            seen.append(key)
            r = prob.search(c, budget)
            s = prob.ssr(r)
            if s < best_ssr:
                best, best_ssr = r, s
        best = _polish(m, xa, ya, best, held, 100 * (len(m.params) + 1))
        if self.finish is not None:
            tidy = self.finish(best)
            # a tidy-up that would change a value the user fixed would no longer describe the
            # same curve once the fixed value is restored; keep the untidied values then
            if all(tidy[n] == best[n] for n in held):
                best = tidy
        return _clip_into_bounds(m, {**best, **held})


@dataclass(frozen=True)
class PolynomialRule:
    """Starting values for a polynomial (or straight line): the linear least-squares solution.

    ``names`` are the coefficients in ascending powers of x.
    """

    names: tuple[str, ...]
    model: Model | None = None

    def bind(self, model: Model) -> PolynomialRule:
        """The same rule attached to ``model``."""
        return PolynomialRule(self.names, model)

    def __call__(
        self,
        x: FloatArray,
        y: FloatArray,
        *,
        fixed: Mapping[str, float] | None = None,
        model: Model | None = None,
    ) -> dict[str, float]:
        """The least-squares coefficients (with fixed ones held, solved for the others)."""
        from .linear import solve_polynomial  # the linear solver is only needed here

        held = dict(fixed or {})
        xa = np.asarray(x, dtype=float)
        ya = np.asarray(y, dtype=float)
        k = len(self.names) - 1
        m = model if model is not None else self.model
        with warnings.catch_warnings():
            # rank deficiency is reported by the fit itself; a start value needs no warning
            warnings.simplefilter("ignore")
            if not held and xa.size > k + 1:
                coef = solve_polynomial(xa, ya, k).coef
                return {n: float(c) for n, c in zip(self.names, coef, strict=True)}
            free = [j for j, n in enumerate(self.names) if n not in held]
            rest = ya - sum(
                (held[n] * xa**j for j, n in enumerate(self.names) if n in held),
                start=np.zeros_like(xa),
            )
            out = dict(held)
            if free:
                A = np.column_stack([xa**j for j in free])
                c = np.linalg.lstsq(A, rest, rcond=None)[0]
                out.update({self.names[j]: float(ci) for j, ci in zip(free, c, strict=True)})
        return _clip_into_bounds(m, out) if m is not None else out


# ---------------------------------------------------------------- seeds for the catalog
def _x_scale(x: FloatArray) -> float:
    return _span(x)


def _rate_grid(x: FloatArray, n: int = 11) -> FloatArray:
    s = _x_scale(x)
    return _geom(0.03 / s, 30.0 / s, n)


def _tail_level(x: FloatArray, y: FloatArray) -> float:
    return _end_levels(x, y)[1]


def seed_decay(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``baseline + amplitude*exp(-k*x)``: baseline from the tail, then the semilog line."""
    baseline = _tail_level(x, y)
    amplitude, k = semilog_rate(x, y, baseline)
    return {"baseline": baseline, "amplitude": amplitude, "k": abs(k)}


def grid_rate(name: str) -> GridFn:
    """Rate-constant candidates spanning three decades either side of 1/(x range)."""

    def grid(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
        return {name: _rate_grid(x)}

    return grid


def seed_biexponential(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Curve peeling (method of residuals, common practice).

    The slower phase (2) comes from the late half, the faster phase (1) from what phase 2
    leaves early on.
    """
    baseline = _tail_level(x, y)
    ux, my = _means_by_x(x, y)
    half = ux.size // 2
    a2, k2 = semilog_rate(ux[half:], my[half:], baseline)
    early = my[:half] - baseline - a2 * np.exp(-abs(k2) * ux[:half])
    a1, k1 = semilog_rate(ux[:half], early + 0.0, 0.0)
    k2, k1 = abs(k2), abs(k1)
    if k1 < k2:
        k1 = 3.0 * k2
    return {"baseline": baseline, "a1": a1, "k1": k1, "a2": a2, "k2": k2}


def grid_biexponential(
    x: FloatArray, y: FloatArray, seed: Mapping[str, float]
) -> dict[str, FloatArray]:
    """Pairs of rates over the data's time scales (the refinement sorts out which is faster)."""
    g = _rate_grid(x, 8)
    return {"k1": g, "k2": g}


def finish_biexponential(v: dict[str, float]) -> dict[str, float]:
    """Number the phases so that phase 1 is the faster: ``k1 >= k2``."""
    if v["k1"] < v["k2"]:
        v = dict(v)
        v["k1"], v["k2"] = v["k2"], v["k1"]
        v["a1"], v["a2"] = v["a2"], v["a1"]
    return v


def seed_rise(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``baseline + amplitude*(1 - exp(-k*x))``: the level reached from the tail, then semilog.

    Written as a decay toward that level, ``level - amplitude*exp(-k*x)``, the semilog line
    gives ``-amplitude`` and k.
    """
    level = _tail_level(x, y)
    toward, k = semilog_rate(x, y, level)
    return {"baseline": level + toward, "amplitude": -toward, "k": abs(k)}


def seed_growth(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``y0*exp(k*x)``: log-linear line through the data (baseline 0)."""
    y0, k = semilog_rate(x, y, 0.0)
    return {"y0": y0, "k": abs(k)}


def seed_mm(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Hanes-Woolf on the replicate means."""
    ux, my = _means_by_x(x, y)
    est = hanes_woolf(ux, my)
    vmax = est.Vmax if est.Vmax > 0 else float(np.max(my))
    km = est.Km if est.Km > 0 else float(np.median(ux[ux > 0]))
    return {"Vmax": vmax, "Km": km}


def _conc_grid(x: FloatArray, n: int = 11) -> FloatArray:
    pos = x[x > 0]
    if pos.size == 0:
        return _geom(1e-3, 1e3, n)
    return _geom(float(np.min(pos)) / 10.0, float(np.max(pos)) * 10.0, n)


def grid_conc(*names: str) -> GridFn:
    """Concentration candidates from a tenth of the lowest to ten times the highest x."""

    def grid(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
        return {n: _conc_grid(x, 9 if len(names) > 1 else 13) for n in names}

    return grid


def seed_substrate_inhibition(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Hanes-Woolf on the rising part; Ki from the peak position ``sqrt(Km*Ki)``."""
    ux, my = _means_by_x(x, y)
    ipk = int(np.argmax(my))
    rising = slice(0, max(ipk + 1, 3))
    try:
        est = hanes_woolf(ux[rising], my[rising])
        vmax, km = est
    except DataError:
        vmax, km = float(np.max(my)), float(ux[ipk])
    if not (vmax > 0 and km > 0):
        vmax, km = 2.0 * float(np.max(my)), max(float(ux[ipk]), 1e-12)
    xpk = float(ux[ipk])
    ki = xpk**2 / km if 0 < ipk < ux.size - 1 and xpk > 0 else 100.0 * float(np.max(ux))
    return {"Vmax": vmax, "Km": km, "Ki": max(ki, 1e-12)}


def seed_hill(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``Vmax*x**n_h/(K05**n_h + x**n_h)``: Vmax just above the largest response, then logit."""
    ux, my = _means_by_x(x, y)
    vmax = 1.05 * float(np.max(my))
    try:
        mid, slope = logit_line(ux, my, 0.0, vmax)
        return {"Vmax": vmax, "K05": 10.0**mid, "n_h": max(abs(slope), 0.1)}
    except DataError:
        return {"Vmax": vmax, "K05": float(np.median(ux[ux > 0])), "n_h": 1.0}


def grid_hill(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
    """K0.5 over the concentration range, Hill coefficients 0.5 to 4."""
    return {"K05": _conc_grid(x, 9), "n_h": np.array([0.5, 1.0, 2.0, 4.0])}


def _log_mid_fallback(x: FloatArray, y: FloatArray, lo_level: float, hi_level: float) -> float:
    """log10 of the x where the replicate means first cross halfway (interpolated)."""
    ux, my = _means_by_x(x[x > 0], y[x > 0])
    if ux.size == 0:
        return 0.0
    half = 0.5 * (lo_level + hi_level)
    s = np.sign(my - half)
    idx = np.nonzero(s[:-1] * s[1:] <= 0)[0]
    if idx.size:
        i = int(idx[0])
        t0, t1 = math.log10(ux[i]), math.log10(ux[i + 1])
        d0, d1 = my[i] - half, my[i + 1] - half
        return t0 if d1 == d0 else t0 + (t1 - t0) * d0 / (d0 - d1)
    return float(np.median(np.log10(ux)))


def seed_logistic(kind: str) -> SeedFn:
    """Dose-response seed: the two levels from the ends (zero-dose controls included), logit line.

    ``kind`` is ``"inhibition"``, ``"stimulation"`` (both: ``zero_dose`` from the low-dose end,
    ``full_effect`` from the high-dose end) or ``"three"`` (zero response at zero dose, rising
    to ``full_effect``).
    """
    mid_name = "log_ic50" if kind == "inhibition" else "log_ec50"

    def seed(x: FloatArray, y: FloatArray) -> dict[str, float]:
        low_end, high_end = _end_levels(x, y)
        if kind == "three":
            low_end = 0.0
        try:
            mid, slope = logit_line(x, y, low_end, high_end)
            n_h = min(max(abs(slope), 0.2), 5.0)
        except DataError:
            mid, n_h = _log_mid_fallback(x, y, low_end, high_end), 1.0
        out = {mid_name: mid, "n_h": n_h, "full_effect": high_end}
        if kind != "three":
            out["zero_dose"] = low_end
        return out

    return seed


def grid_logistic(mid_name: str, asymmetry: bool = False) -> GridFn:
    """log10 midpoints over the dose range (a decade beyond each end), a few Hill coefficients."""

    def grid(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
        pos = x[x > 0]
        lo, hi = (
            (math.log10(float(np.min(pos))), math.log10(float(np.max(pos))))
            if pos.size
            else (
                -3.0,
                3.0,
            )
        )
        cands: dict[str, FloatArray] = {
            mid_name: np.linspace(lo - 1.0, hi + 1.0, 9),
            "n_h": np.array([0.5, 1.0, 2.0, 4.0]),
        }
        if asymmetry:
            cands["g"] = np.array([0.3, 1.0, 3.0])
        return cands

    return grid


def seed_logistic_growth(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``K/(1 + (K/N0 - 1)*exp(-r*x))``: K above the largest value, r and N0 from the logit."""
    ux, my = _means_by_x(x, y)
    K = 1.05 * float(np.max(my))
    try:
        mid, slope = logit_line(ux, my, 0.0, K, log_x=False)
        r = abs(slope) * _LN10
        n0 = K / (1.0 + math.exp(min(r * mid, 700.0)))
    except DataError:
        r, n0 = 1.0 / _x_scale(ux), max(float(my[0]), 1e-12 * K)
    return {"N0": max(n0, 1e-12 * abs(K)), "K": K, "r": max(r, 1e-12)}


def grid_growth(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
    """Carrying capacities near the seed (the data may stop short of it) and rates around it."""
    return {
        "K": seed["K"] * np.array([1.0, 1.3, 2.0]),
        "r": seed["r"] * np.array([0.3, 1.0, 3.0]),
    }


def seed_gompertz(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """``K*exp(log(N0/K)*exp(-r*x))``: K a little above the largest value, then a semilog line.

    ``log(K/y)`` decays to 0 at rate r, so the semilog line gives r and ``log(K/N0)``.
    """
    ux, my = _means_by_x(x, y)
    K = 1.05 * float(np.max(my))
    pos = my > 0
    log_ratio, r = semilog_rate(ux[pos], np.log(K / my[pos]), 0.0)
    return {"N0": K * math.exp(-max(log_ratio, 1e-9)), "K": K, "r": max(abs(r), 1e-12)}


def _peak_seed(x: FloatArray, y: FloatArray) -> tuple[float, float, float, float]:
    """Baseline, signed amplitude, centre and full width at half maximum from the data."""
    ux, my = _means_by_x(x, y)
    if my.size >= 5:
        # a 3-point running median keeps one noisy point from being taken for the apex
        pad = np.concatenate([[my[0]], my, [my[-1]]])
        sm = np.median(np.stack([pad[:-2], pad[1:-1], pad[2:]]), axis=0)
    else:
        sm = my
    edge = max(1, round(0.1 * ux.size))
    baseline = float(np.median(np.concatenate([sm[:edge], sm[-edge:]])))
    dev = sm - baseline
    i = int(np.argmax(np.abs(dev)))
    amp = float(dev[i])
    center = float(ux[i])
    above = np.abs(dev) >= 0.5 * abs(amp)
    # walk out from the apex to the half-maximum crossings on each side
    left = i
    while left > 0 and above[left - 1]:
        left -= 1
    right = i
    while right < ux.size - 1 and above[right + 1]:
        right += 1
    fwhm = float(ux[min(right + 1, ux.size - 1)] - ux[max(left - 1, 0)]) * 0.75
    if not fwhm > 0:
        fwhm = 0.1 * _x_scale(ux)
    return baseline, amp, center, fwhm


def seed_gauss(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Peak position and width (half-maximum crossings) from the data; sigma = FWHM/2.3548."""
    b, a, c, w = _peak_seed(x, y)
    return {
        "baseline": b,
        "amplitude": a,
        "center": c,
        "sigma": w / (2.0 * math.sqrt(2 * math.log(2))),
    }


def seed_lorentz(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Peak position and half width at half maximum from the data."""
    b, a, c, w = _peak_seed(x, y)
    return {"baseline": b, "amplitude": a, "center": c, "hwhm": w / 2.0}


def grid_peak(width: str) -> GridFn:
    """Centres across the data and widths from narrow to broad."""

    def grid(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
        s = _x_scale(x)
        lo, hi = float(np.min(x)), float(np.max(x))
        centres = np.concatenate([[seed["center"]], np.linspace(lo, hi, 7)])
        return {"center": centres, width: np.array([seed[width], 0.02 * s, 0.1 * s, 0.3 * s])}

    return grid


def seed_boltzmann(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Levels at the two ends, midpoint and slope from the logit line in x."""
    low_end, high_end = _end_levels(x, y)
    try:
        mid, slope = logit_line(x, y, low_end, high_end, log_x=False)
        k = 1.0 / (slope * _LN10)
    except DataError:
        mid, k = float(np.median(x)), 0.1 * _x_scale(x)
    return {"low": low_end, "high": high_end, "x_half": mid, "width": k}


def finish_boltzmann(v: dict[str, float]) -> dict[str, float]:
    """Keep ``low <= high``: swapping the levels and negating the width is the same curve."""
    if v["high"] < v["low"]:
        v = dict(v)
        v["low"], v["high"] = v["high"], v["low"]
        v["width"] = -v["width"]
    return v


def grid_boltzmann(
    x: FloatArray, y: FloatArray, seed: Mapping[str, float]
) -> dict[str, FloatArray]:
    """Midpoints across the data, slope factors of either sign from 1/50 to 1/3 of the range."""
    s = _x_scale(x)
    mags = s * np.array([0.02, 0.07, 0.3])
    return {
        "x_half": np.linspace(float(np.min(x)), float(np.max(x)), 7),
        "width": np.concatenate([mags, -mags]),
    }


def seed_power(x: FloatArray, y: FloatArray) -> dict[str, float]:
    """Log-log line (of |y| when the data are negative)."""
    sign = 1.0 if np.sum(y > 0) >= np.sum(y < 0) else -1.0
    a, b = loglog_power(x, sign * y)
    return {"a": sign * a, "b": b}


def grid_power(x: FloatArray, y: FloatArray, seed: Mapping[str, float]) -> dict[str, FloatArray]:
    """Exponents from -3 to 3."""
    return {"b": np.linspace(-3.0, 3.0, 13)}


# ============================================================================ generic multi-start
_MAX_ROUNDS = 4  # rounds of fresh starts when the best minimum is found only once


@dataclass(frozen=True)
class _Range:
    kind: str  # "log": magnitude 10**U(lo, hi) with a sign; "lin": U(lo, hi)
    lo: float
    hi: float
    signs: tuple[float, ...] = (1.0,)


def _unit_dims(unit: str) -> tuple[float, float] | None:
    """(power of x, power of y) of a unit hint such as ``"y/x**2"``; None when not understood."""
    u = unit.replace(" ", "")
    table = {
        "x": (1.0, 0.0),
        "y": (0.0, 1.0),
        "1/x": (-1.0, 0.0),
        "y/x": (-1.0, 1.0),
        "1": (0.0, 0.0),
    }
    if u in table:
        return table[u]
    if u.startswith("y/x**"):
        try:
            return (-float(u[5:]), 1.0)
        except ValueError:
            return None
    return None


def _infer_dims(model: Model) -> dict[str, tuple[float, float]]:
    """Each parameter's dimension as powers of x and y, inferred from the formula.

    Terms of a sum share a dimension, arguments of exp/log/trig functions and exponents are
    dimensionless, and the whole formula has the dimension of y; the (least-squares, minimum
    norm) solution of those equations gives a typical size ``|x|**a * |y|**b`` per parameter.
    A heuristic for sampling only.
    """
    names = list(model.param_names)
    if model.expr is None:
        return {}
    idx = {n: i for i, n in enumerate(names)}
    rows: list[tuple[FloatArray, FloatArray]] = []  # (coefficients, constant) of "dim = 0"
    P = len(names)
    Lin = tuple[FloatArray, FloatArray]  # coefficients over params, constant (x, y) powers

    def zero() -> Lin:
        return np.zeros(P), np.zeros(2)

    def eq(a: Lin, b: Lin) -> None:
        rows.append((a[0] - b[0], a[1] - b[1]))

    def walk(n: Mapping[str, Any]) -> Lin | None:
        t = n.get("type")
        if t in ("num", "const"):
            return zero()
        if t == "name":
            c, k = zero()
            if n["id"] == "x":
                k[0] = 1.0
            elif n["id"] in idx:
                c[idx[n["id"]]] = 1.0
            return c, k
        if t == "neg":
            return walk(n["arg"])
        if t == "call":
            arg = walk(n["args"][0])
            fn = n["fn"]
            if arg is None:
                return None if fn in ("sqrt", "abs") else zero()
            if fn == "sqrt":
                return arg[0] / 2, arg[1] / 2
            if fn == "abs":
                return arg
            eq(arg, zero())
            return zero()
        if t == "bin":
            op = n["op"]
            a = walk(n["left"])
            if op == "**":
                r = n["right"]
                if r.get("type") == "num" or (
                    r.get("type") == "neg" and r["arg"].get("type") == "num"
                ):
                    p = float(r["value"]) if r.get("type") == "num" else -float(r["arg"]["value"])
                    return None if a is None else (a[0] * p, a[1] * p)
                e = walk(r)
                if e is not None:
                    eq(e, zero())
                return None
            b = walk(n["right"])
            if op in "+-":
                if a is not None and b is not None:
                    eq(a, b)
                return a if a is not None else b
            if a is None or b is None:
                return None
            if op == "*":
                return a[0] + b[0], a[1] + b[1]
            return a[0] - b[0], a[1] - b[1]
        return None

    top = walk(model.expr.to_json())
    if top is not None:
        c, k = zero()
        k[1] = 1.0
        eq(top, (c, k))
    if not rows:
        return {n: (0.0, 0.0) for n in names}
    A = np.array([r[0] for r in rows])
    B = -np.array([r[1] for r in rows])
    D = np.linalg.lstsq(A, B, rcond=None)[0]
    # rounded so that exact dimensions compare equal (lstsq gives 0.9999999999999996 for 1)
    return {
        n: (round(float(D[i, 0]), 9) + 0.0, round(float(D[i, 1]), 9) + 0.0)
        for i, n in enumerate(names)
    }


def _locations(model: Model) -> set[str]:
    """Parameters added to or subtracted from an expression in x, such as x0 in ``x - x0``.

    Those are positions on the x axis (a centre, a midpoint, a lag), sampled across the data;
    other x-sized parameters (a width, a time constant) are scales, sampled in log space.
    """
    return _names_beside_x(model, ("+", "-"), direct=False)


def _x_offsets(model: Model) -> set[str]:
    """Names in ``x - name`` or ``name - x`` themselves: positions such as a centre.

    Not a baseline added to a curve in x (which :func:`_locations` also counts, for its
    sampling), nor a scale such as ``Km + x``.
    """
    return _names_beside_x(model, ("-",), direct=True)


def _names_beside_x(model: Model, ops: tuple[str, ...], *, direct: bool) -> set[str]:
    """Names that are one operand of a sum or difference (``ops``) beside x.

    The other operand is x itself when ``direct``, else any expression in x.
    """
    if model.expr is None:
        return set()
    found: set[str] = set()

    def has_x(n: Mapping[str, Any]) -> bool:
        if n.get("type") == "name":
            return bool(n.get("id") == "x")
        if direct:
            return False
        kids = [n[k] for k in ("arg", "left", "right") if k in n] + list(n.get("args", []))
        return any(has_x(k) for k in kids)

    def walk(n: Mapping[str, Any]) -> None:
        if n.get("type") == "bin" and n.get("op") in ops:
            for a, b in ((n["left"], n["right"]), (n["right"], n["left"])):
                if a.get("type") == "name" and a.get("id") != "x" and has_x(b):
                    found.add(str(a["id"]))
        for k in ("arg", "left", "right"):
            if k in n:
                walk(n[k])
        for a in n.get("args", []):
            walk(a)

    walk(model.expr.to_json())
    return found


def location_parameters(model: Model) -> dict[str, str]:
    """The parameters that are positions or levels, and the axis that measures them.

    ``"log"`` for a log10 midpoint (unit ``"log10(x)"``, e.g. a dose-response ``log_ic50``),
    ``"lin"`` for a position subtracted from x (a peak centre, a half-activation voltage),
    ``"y"`` for a level or amplitude in y's unit that may take either sign (a plateau, a
    baseline, an intercept). Such a parameter's value can sit at or near zero where nothing is
    wrong (an IC50 of 1 in the data's unit has ``log_ic50 = 0``; full inhibition has
    ``full_effect = 0``), so its standard error is judged against the data's span on that axis,
    not against its own size. Cached per model.
    """
    key = id(model)
    hit = _LOCATION_CACHE.get(key)
    if hit is not None and hit[0] is model:
        return hit[1]
    out = {p.name: "log" for p in model.params if p.unit == "log10(x)"}
    for n in sorted(_x_offsets(model)):
        out.setdefault(n, "lin")
    # Levels and amplitudes in y's unit that may take any sign (a plateau, a baseline, an
    # intercept): zero is an ordinary value for them, so they are judged against y's span.
    for p in model.params:
        if p.unit == "y" and not p.positive:
            out.setdefault(p.name, "y")
    if len(_LOCATION_CACHE) > 256:
        _LOCATION_CACHE.clear()
    _LOCATION_CACHE[key] = (model, out)
    return out


# id(model) -> (model, locations); the model is kept so an id is never reused while cached.
_LOCATION_CACHE: dict[int, tuple[Model, dict[str, str]]] = {}


def x_span(x: FloatArray, scale: str) -> float:
    """The data's extent along x on a location's scale (log10 decades for "log"); NaN if none."""
    xa = np.asarray(x, dtype=float)
    xa = xa[np.isfinite(xa)]
    if scale == "log":
        xa = xa[xa > 0]
        if xa.size < 2:
            return math.nan
        return float(np.log10(np.max(xa)) - np.log10(np.min(xa)))
    return float(np.ptp(xa)) if xa.size >= 2 else math.nan


def _ranges(model: Model, x: FloatArray, y: FloatArray, names: Sequence[str]) -> dict[str, _Range]:
    """Plausible sampling ranges for the named parameters from the data scales."""
    ax = float(np.max(np.abs(x))) or 1.0
    ay = float(np.max(np.abs(y))) or 1.0
    inferred = _infer_dims(model)
    locations = _locations(model)
    pos = x[x > 0]
    ux = np.unique(x)
    # the finest and the coarsest x scale the data can resolve: the smallest spacing, the span
    fine = float(np.min(np.diff(ux))) if ux.size > 1 else ax
    coarse = float(np.ptp(ux)) if ux.size > 1 else ax
    out: dict[str, _Range] = {}
    for n in names:
        p = model.param(n)
        if p.unit.replace(" ", "") == "log10(x)":
            lo, hi = (
                (math.log10(float(np.min(pos))), math.log10(float(np.max(pos))))
                if pos.size
                else (
                    -3.0,
                    3.0,
                )
            )
            out[n] = _clamp_lin(p, lo - 1.0, hi + 1.0)
            continue
        dims = _unit_dims(p.unit) if p.unit else None
        if dims is None:
            dims = inferred.get(n, (0.0, 0.0))
        if dims == (1.0, 0.0) and p.lower < 0 and n in locations:
            # a position on the x axis (a centre, a midpoint, a lag): across the data and a bit
            lo, hi = float(np.min(x)), float(np.max(x))
            out[n] = _clamp_lin(p, lo - 0.5 * (hi - lo), hi + 0.5 * (hi - lo))
            continue
        c = dims[0] * math.log10(ax) + dims[1] * math.log10(ay)
        lo_l, hi_l = c - 2.0, c + 2.0
        if dims in ((1.0, 0.0), (-1.0, 0.0)) and fine > 0 and coarse > 0:
            # an x scale (a width, a time constant) or its inverse (a rate): between the finest
            # and the coarsest scale of the data, half a decade beyond each
            a, b = math.log10(fine), math.log10(coarse) + 0.5
            lo_l, hi_l = (a, b) if dims[0] > 0 else (-b, -a)
        signs: tuple[float, ...]
        if p.lower >= 0:
            signs = (1.0,)
            if p.lower > 0:
                lo_l = max(lo_l, math.log10(p.lower))
            if math.isfinite(p.upper):
                hi_l = min(hi_l, math.log10(p.upper)) if p.upper > 0 else lo_l
        elif p.upper <= 0:
            signs = (-1.0,)
            if p.upper < 0:
                lo_l = max(lo_l, math.log10(-p.upper))
            if math.isfinite(p.lower):
                hi_l = min(hi_l, math.log10(-p.lower))
        elif math.isfinite(p.lower) and math.isfinite(p.upper):
            out[n] = _Range("lin", p.lower, p.upper)
            continue
        else:
            signs = (1.0, -1.0)
        if hi_l < lo_l:
            lo_l = hi_l
        out[n] = _Range("log", lo_l, hi_l, signs)
    return out


def plausible_sizes(
    model: Model, x: ArrayLike, y: ArrayLike, names: Sequence[str]
) -> dict[str, tuple[float, float]]:
    """A typical and a largest plausible magnitude for each named parameter, from the data.

    The sampling ranges of :func:`generic_start` (unit hints, the dimension inferred from the
    formula, the finest and coarsest x scale of the data, bounds) read as sizes: a log range
    ``10**lo .. 10**hi`` gives ``(10**((lo + hi)/2), 10**hi)``, a linear range its width and its
    largest absolute end. The fit judges runaway parameters and standard errors by them.

    Parameters
    ----------
    model : Model
    x, y : array_like
        Finite data of equal length.
    names : sequence of str
        Parameters of ``model``.

    Returns
    -------
    dict
        ``{name: (typical, largest)}``, both positive and finite.
    """
    xa = np.asarray(x, dtype=float).ravel()
    ya = np.asarray(y, dtype=float).ravel()
    out: dict[str, tuple[float, float]] = {}
    for n, r in _ranges(model, xa, ya, names).items():
        if r.kind == "log":
            typical, largest = 10.0 ** ((r.lo + r.hi) / 2.0), 10.0**r.hi
        else:
            largest = max(abs(r.lo), abs(r.hi))
            typical = max(r.hi - r.lo, 1e-300)
        largest = max(largest, typical)
        if not (math.isfinite(typical) and math.isfinite(largest) and typical > 0):
            typical = largest = 1.0
        out[n] = (typical, largest)
    return out


def _clamp_lin(p: Param, lo: float, hi: float) -> _Range:
    lo2, hi2 = max(lo, p.lower), min(hi, p.upper)
    if hi2 < lo2:
        lo2 = hi2 = min(max(p.value, p.lower), p.upper)
    return _Range("lin", lo2, hi2)


def _affine_subset(
    prob: _Problem, names: Sequence[str], bases: Sequence[dict[str, float]]
) -> list[str]:
    """The largest (greedy) set of parameters the model is jointly affine in, tested numerically."""
    rng = np.random.default_rng(12345)
    chosen: list[str] = []
    for cand in names:
        trial = [*chosen, cand]
        ok = True
        for base in bases:
            f0 = prob.curve(base)
            if not np.all(np.isfinite(f0)):
                ok = False
                break
            steps = {n: max(abs(base[n]), 1e-3) for n in trial}
            cols = {}
            for n in trial:
                v = dict(base)
                v[n] = base[n] + steps[n]
                cols[n] = prob.curve(v) - f0
            delta = rng.normal(size=len(trial)) * 1.7
            v = dict(base)
            lin = f0.copy()
            for d, n in zip(delta, trial, strict=True):
                v[n] = base[n] + d * steps[n]
                lin = lin + d * cols[n]
            got = prob.curve(v)
            scale = float(np.max(np.abs(f0))) + float(np.max(np.abs(lin))) + 1e-300
            if not (np.all(np.isfinite(got)) and np.max(np.abs(got - lin)) <= 1e-8 * scale):
                ok = False
                break
        if ok:
            chosen.append(cand)
    return chosen


def generic_start(
    model: Model,
    x: ArrayLike,
    y: ArrayLike,
    *,
    fixed: Mapping[str, float] | None = None,
    n_starts: int | None = None,
    seed: int | None = None,
) -> dict[str, float]:
    """Starting values for any model without a user's numbers: scale-aware multi-start.

    1. Each free parameter gets a plausible range from the data: from its unit hint (``"x"``,
       ``"1/x"``, ``"y"``, ``"log10(x)"``, ...) or, failing that, its dimension inferred from
       the formula, a magnitude ``|x|**a * |y|**b`` give or take two decades, sampled in log
       space with either sign unless the bounds fix the sign; bounds are respected. Positions
       on the x axis (``x0`` in ``x - x0``) are drawn across the data; x scales (widths, time
       constants) and their inverses (rates) between the data's finest spacing and its span.
    2. Parameters the model is affine in (detected numerically) are not sampled: for each trial
       of the others they are solved by linear least squares (variable projection). For a
       formula model the searches use its analytic Jacobian with Kaufman's projected Jacobian
       for the nonlinear parameters.
    3. A Latin hypercube (``scipy.stats.qmc``) of ``n_starts`` points, plus the model's default
       values, plus starts with the x positions on peaks, dips and shoulders of the data (the
       extrema of the smoothed data and of its second derivative), the widths paired with them
       in the formula set from the curvature there, and the rates of sines and cosines on
       peaks of its Lomb-Scargle periodogram. For a formula model many more candidates are
       drawn and screened by one evaluation each (linear parameters solved); the best few get
       a short run, all of them stacked in one Levenberg-Marquardt loop, and the best of those
       a longer one (successive halving). Otherwise each start
       gets a short least-squares run. The best few by residual sum of squares are polished.
    4. When the best minimum was reached from only one start, the landscape is rugged (periodic
       or multi-peak models): up to three more rounds of fresh starts are run.

    Deterministic: the only random draws are the hypercubes, seeded from the data's bytes.

    Parameters
    ----------
    model : Model
    x, y : array_like
        Finite data of equal length.
    fixed : mapping, optional
        Parameters held at given values.
    n_starts : int, optional
        Number of sampled starts (default ``12 + 8 * d`` for ``d`` searched parameters).
    seed : int, optional
        Seed of the Latin hypercube; by default one made from the bytes of x and y
        (:func:`data_seed`), so the same data always give the same starts, in any process.

    Returns
    -------
    dict
        A finite value within bounds for every parameter (fixed ones included).

    Raises
    ------
    DataError
        Non-finite data, unequal lengths, fewer than two points, x outside the model's domain.
    ParameterError
        ``fixed`` names an unknown parameter or gives a non-finite value.
    """
    xa, ya = _check_data(model, x, y)
    held = _check_fixed(model, fixed)
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        return _generic(model, xa, ya, held, n_starts, data_seed(xa, ya) if seed is None else seed)


def data_seed(x: ArrayLike, y: ArrayLike) -> int:
    """A seed made from the data's bytes: the same data give the same seed in any process.

    No global random state is read or changed (Python's ``hash`` of bytes changes between
    processes, so a checksum of the float64 bytes is used).

    Parameters
    ----------
    x, y : array_like
        The data.

    Returns
    -------
    int
        In ``[0, 2**32)``.
    """
    xa = np.ascontiguousarray(np.asarray(x, dtype=np.float64))
    ya = np.ascontiguousarray(np.asarray(y, dtype=np.float64))
    return zlib.crc32(ya.tobytes(), zlib.crc32(xa.tobytes())) & 0xFFFFFFFF


def _sample(
    ranges: Mapping[str, _Range], names: Sequence[str], n: int, seed: int
) -> list[dict[str, float]]:
    sign_names = [nm for nm in names if ranges[nm].kind == "log" and len(ranges[nm].signs) > 1]
    d = len(names) + len(sign_names)
    if n <= 0 or d == 0:
        return []
    pts = qmc.LatinHypercube(d=d, seed=seed).random(n)
    out = []
    for row in pts:
        v: dict[str, float] = {}
        for j, nm in enumerate(names):
            r = ranges[nm]
            t = r.lo + (r.hi - r.lo) * float(row[j])
            if r.kind == "lin":
                v[nm] = t
            else:
                sgn = r.signs[0]
                if nm in sign_names:
                    sgn = 1.0 if row[len(names) + sign_names.index(nm)] < 0.5 else -1.0
                v[nm] = sgn * 10.0**t
        out.append(v)
    return out


def _features(x: FloatArray, y: FloatArray) -> FloatArray:
    """x of the prominent local maxima and minima of the (lightly smoothed) data.

    Positions such as a peak's centre or a sigmoid's midpoint usually sit at a feature of the
    data; seeding them there finds overlapping peaks a uniform draw rarely does.
    """
    ux, my = _means_by_x(x, y)
    if ux.size < 7:
        return np.zeros(0)
    w = max(3, (ux.size // 25) | 1)  # odd window, about 4 % of the points
    sm = np.convolve(np.pad(my, w // 2, mode="edge"), np.ones(w) / w, mode="valid")
    prom = 0.02 * _span(sm)
    found = [find_peaks(sgn * sm, prominence=prom)[0] for sgn in (1.0, -1.0)]
    idx = np.concatenate(found)
    if idx.size == 0:
        return np.zeros(0)
    # the most prominent first, at most eight
    prominences = np.concatenate(
        [peak_prominences(sgn * sm, f)[0] for sgn, f in zip((1.0, -1.0), found, strict=True)]
    )
    return np.asarray(ux[idx[np.argsort(-prominences)][:8]], dtype=float)


def _trig_rates(model: Model) -> dict[str, tuple[float, float]]:
    """Parameters setting how fast a sine or cosine turns with x.

    For each, ``(s1, power)``: the argument's slope in x is ``s1 * value**power`` (power -1 for
    a period as in ``cos(2*pi*x/P)``, +1 for an angular frequency as in ``sin(w*x + p)``),
    measured on the formula with every other parameter at 1. Only arguments linear in x count.
    """
    if model.expr is None:
        return {}
    inferred = _infer_dims(model)
    out: dict[str, tuple[float, float]] = {}

    def walk(n: Mapping[str, Any]) -> None:
        if n.get("type") == "call" and n.get("fn") in ("sin", "cos", "tan"):
            arg = Expr.from_json(n["args"][0])
            if "x" in arg.names:
                for name in arg.names:
                    power = {(1.0, 0.0): -1.0, (-1.0, 0.0): 1.0}.get(inferred.get(name, (0, 0)))
                    if name == "x" or power is None:
                        continue
                    env: dict[str, Any] = {k: 1.0 for k in arg.names}
                    env["x"] = np.array([0.0, 1.0, 2.0])
                    with np.errstate(all="ignore"):
                        v = np.broadcast_to(np.asarray(arg.evaluate(env), dtype=float), (3,))
                    s1 = float(v[1] - v[0])
                    if math.isfinite(s1) and s1 != 0 and abs((v[2] - v[1]) - s1) <= 1e-9 * abs(s1):
                        out[name] = (s1, power)
        for k in ("arg", "left", "right"):
            if k in n:
                walk(n[k])
        for a in n.get("args", []):
            walk(a)

    walk(model.expr.to_json())
    return out


def _spectral_peaks(x: FloatArray, y: FloatArray) -> FloatArray:
    """Angular frequencies of the strongest peaks of the data's Lomb-Scargle periodogram.

    Uneven spacing is fine (Lomb 1976, Scargle 1982); a straight-line trend is removed first.
    """
    ux, my = _means_by_x(x, y)
    if ux.size < 8:
        return np.zeros(0)
    span = float(np.ptp(ux))
    fine = float(np.min(np.diff(ux)))
    if not (span > 0 and fine > 0):
        return np.zeros(0)
    resid = my - np.polyval(np.polyfit(ux, my, 1), ux)
    omega = np.linspace(2 * math.pi / (3 * span), math.pi / fine, 4000)
    power = lombscargle(ux, resid, omega)
    idx, _ = find_peaks(power)
    if idx.size == 0:
        return np.zeros(0)
    top = idx[np.argsort(-power[idx])][:6]
    return np.asarray(omega[top], dtype=float)


def _location_plan(model: Model, names: Sequence[str]) -> tuple[list[str], dict[str, str]]:
    """The x positions among ``names`` and the width paired with each (see _location_widths)."""
    inferred = _infer_dims(model)
    where = _locations(model)

    def x_sized(n: str) -> bool:
        unit = model.param(n).unit
        dims = _unit_dims(unit) if unit else None
        return (dims if dims is not None else inferred.get(n)) == (1.0, 0.0)

    # positions on the x axis only (a phase added to w*x is not one)
    locs = [n for n in names if n in where and x_sized(n)]
    scales = [n for n in names if n not in where and x_sized(n)]
    return locs, _location_widths(model, locs, scales)


def _residual_moves(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    best: Mapping[str, float],
    locs: Sequence[str],
    pairs: Mapping[str, str],
) -> list[dict[str, float]]:
    """Starts that move one position of the best fit so far onto a feature of its residuals.

    Two peaks the data show as one are fitted as one (or as two on top of each other); the
    residuals then peak where the other one is. Each position in turn is moved onto each of
    the residuals' main features, its paired width set from the curvature there.
    """
    with np.errstate(all="ignore"):
        r = y - np.asarray(model.func(x, *(best[n] for n in model.param_names)), dtype=float)
    if not np.all(np.isfinite(r)):
        return []
    feats, widths = _peak_shapes(x, r)
    out: list[dict[str, float]] = []
    for loc in locs:
        for fx, fw in zip(feats[:4].tolist(), widths[:4].tolist(), strict=True):
            for factor in _WIDTH_FACTORS[:3]:
                v = dict(best)
                v[loc] = fx
                if loc in pairs and math.isfinite(fw) and fw > 0:
                    v[pairs[loc]] = factor * fw
                out.append(_clip_into_bounds(model, v))
    # two components fitted on top of each other (or cancelling): split them apart
    span = float(np.ptp(x)) or 1.0
    for i, a in enumerate(locs):
        for b in locs[i + 1 :]:
            wa = abs(best[pairs[a]]) if a in pairs else span / 20
            wb = abs(best[pairs[b]]) if b in pairs else span / 20
            w = max(min(wa, wb, span / 4), span / 200)
            c = (best[a] + best[b]) / 2.0
            for delta in (0.5 * w, w, 1.5 * w):
                v = dict(best)
                v[a], v[b] = c - delta, c + delta
                for n in (pairs.get(a), pairs.get(b)):
                    if n is not None:
                        v[n] = w
                out.append(_clip_into_bounds(model, v))
    # one wide component covering two peaks: split it, the freed one taken from elsewhere
    for a in locs:
        if a not in pairs:
            continue
        w = abs(best[pairs[a]])
        for b in locs:
            if b == a:
                continue
            for delta in (0.5 * w, w):
                v = dict(best)
                v[a], v[b] = best[a] - delta, best[a] + delta
                v[pairs[a]] = w / 2.0
                if b in pairs:
                    v[pairs[b]] = w / 2.0
                out.append(_clip_into_bounds(model, v))
    return out


def _feature_starts(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    names: Sequence[str],
    ranges: Mapping[str, _Range],
    base: dict[str, float],
    seed: int,
    per: int = 4,
) -> list[dict[str, float]]:
    """Extra starts with the location parameters put on features of the data.

    ``per`` starts per searched parameter (and ``per`` more); the others are drawn.
    """
    locs, pairs = _location_plan(model, names)
    feats, widths = _peak_shapes(x, y) if locs else (np.zeros(0), np.zeros(0))
    rates = {n: r for n, r in _trig_rates(model).items() if n in names}
    omegas = _spectral_peaks(x, y) if rates else np.zeros(0)
    if feats.size == 0 and omegas.size == 0:
        return []
    rng = np.random.default_rng(seed + 17)

    # with screening (per > 4) the six most prominent features are combined, else five
    top = 6 if per > 4 else 5

    def assignments(cands: FloatArray, k: int) -> list[tuple[float, ...]]:
        # distinct candidates, the most prominent combinations first; random when too few
        if k == 0 or cands.size == 0:
            return []
        if cands.size < k:
            return [tuple(rng.choice(cands, size=k)) for _ in range(8)]
        combos = list(itertools.permutations(range(min(cands.size, top)), k))
        combos.sort(key=sum)
        return [tuple(float(cands[i]) for i in c) for c in combos]

    loc_sets = assignments(feats, len(locs))
    rate_sets = assignments(omegas, len(rates))
    width_of = dict(zip(feats.tolist(), widths.tolist(), strict=True))
    out = []
    n_out = per * (1 + len(names))
    for i, s in enumerate(_sample(ranges, names, n_out, seed + 31)):
        if loc_sets:
            pick_locs = loc_sets[i % len(loc_sets)]
            s.update(dict(zip(locs, pick_locs, strict=True)))
            # a peak's width from the data's curvature there, scaled by turns (the formula's
            # width may be a standard deviation, a half width or sqrt(2) times either)
            factor = _WIDTH_FACTORS[(i // len(loc_sets)) % len(_WIDTH_FACTORS)]
            for loc, at in zip(locs, pick_locs, strict=True):
                wv = width_of.get(at, math.nan)
                if loc in pairs and math.isfinite(wv) and wv > 0:
                    s[pairs[loc]] = factor * wv
        if rate_sets:
            # a sine's rate from a peak of the periodogram: slope s1*value**power = omega
            pick = rate_sets[(i // max(len(loc_sets), 1)) % len(rate_sets)]
            for (n, (s1, power)), om in zip(rates.items(), pick, strict=True):
                v = (om / abs(s1)) ** (1.0 / power)
                s[n] = math.copysign(v, s[n]) if n in s and s[n] != 0 else v
        out.append(_clip_into_bounds(model, {**base, **s}))
    return out


_WIDTH_FACTORS = (1.0, 1.4, 0.7, 2.0, 0.5)


def _peak_shapes(x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Positions and widths of the peaks, dips and shoulders of the (smoothed) data.

    The prominent extrema (:func:`_features`) and the extrema of the second derivative, which
    also mark a peak hidden as a shoulder of its neighbour; each with a width from the
    curvature there, ``sqrt(height / |y''|)`` (a Gaussian's standard deviation).
    """
    ux, my = _means_by_x(x, y)
    ext = _features(x, y)
    if ux.size < 7:
        return ext, np.full(ext.size, math.nan)
    w = max(3, (ux.size // 25) | 1)
    kern = np.ones(w) / w
    sm = np.convolve(np.pad(my, w // 2, mode="edge"), kern, mode="valid")
    with np.errstate(all="ignore"):
        d2 = np.gradient(np.gradient(sm, ux), ux)
    d2 = np.convolve(np.pad(d2, w // 2, mode="edge"), kern, mode="valid")
    if not np.all(np.isfinite(d2)):
        return ext, np.full(ext.size, math.nan)
    lo, hi = float(np.min(sm)), float(np.max(sm))
    cands: list[tuple[float, float, float]] = []  # (prominence, x, width)
    for sgn in (1.0, -1.0):  # peaks bend down, dips bend up
        idx, props = find_peaks(-sgn * d2, prominence=0.05 * _span(d2))
        for i, prom in zip(idx, props["prominences"], strict=True):
            h = sm[i] - lo if sgn > 0 else hi - sm[i]
            curv = -sgn * d2[i]
            width = math.sqrt(h / curv) if h > 0 and curv > 0 else math.nan
            cands.append((float(prom), float(ux[i]), width))
    cands.sort(key=lambda c: -c[0])
    xs = [float(v) for v in ext]
    near = 2.0 * w * float(np.median(np.diff(ux)))

    def width_at(v: float) -> float:
        if not cands:
            return math.nan
        return min(cands, key=lambda c: abs(c[1] - v))[2]

    ws = [width_at(v) for v in xs]
    for _, xv, wv in cands:
        if len(xs) >= 8:
            break
        if all(abs(xv - v) > near for v in xs):
            xs.append(xv)
            ws.append(wv)
    return np.array(xs, dtype=float), np.array(ws, dtype=float)


def _location_widths(model: Model, locs: Sequence[str], scales: Sequence[str]) -> dict[str, str]:
    """Which width goes with which position: the smallest part of the formula holding both.

    For ``a1*exp(-(x - m1)**2/(2*s1**2)) + ...`` that is ``{"m1": "s1", ...}``. A position
    whose smallest enclosing part holds no width, or more than one, is left out.
    """
    if model.expr is None or not locs or not scales:
        return {}
    found: dict[str, tuple[int, str]] = {}
    wanted = set(scales)

    def walk(n: Mapping[str, Any]) -> set[str]:
        kids = [n[k] for k in ("arg", "left", "right") if k in n] + list(n.get("args", []))
        names: set[str] = set()
        if n.get("type") == "name":
            names.add(str(n.get("id")))
        for k in kids:
            names |= walk(k)
        ws = names & wanted
        for m in locs:
            if m in names and len(ws) == 1 and (m not in found or len(names) < found[m][0]):
                found[m] = (len(names), next(iter(ws)))
        return names

    walk(model.expr.to_json())
    return {m: w for m, (_, w) in found.items()}


#: Screening (formula models): candidates drawn per search start, and searches made per round.
_SCREEN = 8
_KEEP = 4
#: Rounds of moving a position onto a feature of the residuals (peak models).
_MOVES = 2


def _best_screened(
    prob: _Problem, pool: Sequence[dict[str, float]], k: int
) -> list[dict[str, float]]:
    """The ``k`` candidates of ``pool`` with the lowest screened sum of squares, best first."""
    if len(pool) <= k:
        return list(pool)
    scores = prob.screen_many(pool) if prob.analytic else np.array([prob.screen(c) for c in pool])
    order = np.argsort(scores, kind="stable")
    return [pool[int(i)] for i in order[:k]]


def _generic(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    held: dict[str, float],
    n_starts: int | None,
    seed: int,
) -> dict[str, float]:
    free = [n for n in model.param_names if n not in held]
    if not free:
        return {**model.defaults(), **held}
    ranges = _ranges(model, x, y, free)
    base0 = _clip_into_bounds(model, {**model.defaults(), **held})
    probe = _Problem.make(model, x, y, held, ())
    trial_bases = [{**base0, **s} for s in _sample(ranges, free, 2, seed + 7)]
    linear = _affine_subset(probe, free, trial_bases) if trial_bases else []
    prob = _Problem.make(model, x, y, held, linear)
    d = len(prob.nonlinear)
    n = n_starts if n_starts is not None else 12 + 8 * d
    budget = 15 * (d + 1)
    results: list[tuple[float, dict[str, float]]] = []
    polished: list[tuple[float, dict[str, float]]] = []
    done: set[int] = set()
    exact = 1e-24 * (float(np.dot(y, y)) / prob.scale**2 + 1e-300)  # in the scaled residuals
    searched: dict[tuple[int, tuple[float, ...]], dict[str, float]] = {}

    def search(s: Mapping[str, float], nfev: int) -> dict[str, float]:
        # the same start searched again gives the same answer: candidate pools repeat some
        key = (nfev, tuple(float(s[n]) for n in model.param_names))
        if key not in searched:
            searched[key] = prob.search(s, nfev)
        return dict(searched[key])

    def search_short(starts: Sequence[Mapping[str, float]]) -> list[dict[str, float]]:
        # the short runs of successive halving, all starts stacked in one loop
        nfev = max(budget // 4, d + 2)
        keys = [(nfev, tuple(float(s[n]) for n in model.param_names)) for s in starts]
        todo = {key: s for key, s in zip(keys, starts, strict=True) if key not in searched}
        for key, r in zip(todo, prob.search_many(list(todo.values()), nfev), strict=True):
            searched[key] = r
        return [dict(searched[key]) for key in keys]

    for rnd in range(_MAX_ROUNDS):
        # round 0 also tries the model's own defaults; later rounds draw fresh hypercubes
        starts = [base0] if rnd == 0 else []
        starts += [
            _clip_into_bounds(model, {**base0, **s})
            for s in _sample(ranges, prob.nonlinear, n, seed + 1009 * rnd)
        ]
        fast = prob.analytic and bool(prob.nonlinear)
        feature = (
            _feature_starts(
                model, x, y, prob.nonlinear, ranges, base0, seed, _SCREEN * 8 if fast else 4
            )
            if rnd == 0
            else []
        )
        if fast:
            # Cheap screening: many more candidates, each scored by one evaluation with the
            # linear parameters solved; only the best few (and the best few placed on
            # features of the data) are searched.
            pool = starts + [
                _clip_into_bounds(model, {**base0, **s})
                for s in _sample(ranges, prob.nonlinear, _SCREEN * n, seed + 7919 + 1009 * rnd)
            ]
            starts = _best_screened(prob, pool, _KEEP + d // 2) + _best_screened(
                prob, feature, _KEEP + d // 2
            )
        else:
            starts += feature
        if fast:
            # Successive halving: a short run from every start, then only the best go on.
            short = search_short(starts)
            scores = [prob.ssr(r) for r in short]
            keep = np.argsort(scores, kind="stable")[: _KEEP + d // 2]
            starts = [short[int(i)] for i in keep]
        for s in starts:
            r = search(s, budget) if prob.nonlinear else prob.project(s)
            results.append((prob.ssr(r), r))
        order = sorted(range(len(results)), key=lambda i: results[i][0])
        for i in [i for i in order if i not in done][:3]:
            done.add(i)
            pol = _polish(model, x, y, results[i][1], held, 200 * (len(free) + 1), None)
            polished.append((probe.ssr(pol), pol))
        polished.sort(key=lambda t: t[0])
        best_ssr = polished[0][0]
        # Confidence: the best minimum was found from more than one start, or fits exactly.
        # Otherwise the landscape is rugged (periodic or multi-peak models) and another round
        # of starts is cheap insurance.
        agree = sum(1 for sr, _ in polished if sr <= best_ssr * (1 + 1e-6) + exact)
        if agree >= 2 or best_ssr <= exact or not prob.nonlinear:
            break
    if polished and prob.analytic and prob.nonlinear and polished[0][0] > exact:
        locs, pairs = _location_plan(model, prob.nonlinear)
        for _ in range(_MOVES if locs else 0):
            # Peaks the data merge: move one position onto what the residuals still show.
            cur_ssr, cur = polished[0]
            moves = _best_screened(prob, _residual_moves(model, x, y, cur, locs, pairs), _KEEP + d)
            short = search_short(moves)
            keep = np.argsort([prob.ssr(r) for r in short], kind="stable")[:2]
            tried = [search(short[int(i)], budget) for i in keep]
            if not tried:
                break
            r = min(tried, key=prob.ssr)
            pol = _polish(model, x, y, r, held, 200 * (len(free) + 1), None)
            pol_ssr = probe.ssr(pol)
            if not pol_ssr < cur_ssr * (1 - 1e-6):
                break
            polished.insert(0, (pol_ssr, pol))
    best = polished[0][1] if polished else base0
    return _clip_into_bounds(model, {**best, **held})


# ============================================================================ entry point
def _accepts_fixed(rule: Callable[..., Any]) -> bool:
    try:
        sig = inspect.signature(rule)
    except (TypeError, ValueError):
        return False
    return "fixed" in sig.parameters


#: Above this many points a start is taken from an evenly spaced subset along x: a start needs
#: the curve's shape, not every point (100k points would take seconds; the fit uses them all).
START_POINTS = 5000


def _shape_subset(x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    if x.size <= START_POINTS:
        return x, y
    order = np.argsort(x, kind="stable")
    pick = order[np.linspace(0, x.size - 1, START_POINTS).round().astype(np.intp)]
    return x[pick], y[pick]


def guided_start(
    model: Model,
    x: ArrayLike,
    y: ArrayLike,
    *,
    fixed: Mapping[str, float] | None = None,
) -> dict[str, float]:
    """Data-driven starting values for ``model`` on ``x, y``, without any number from the user.

    Above :data:`START_POINTS` points it works on an evenly spaced subset along x. Uses the
    model's own rule (``model.start_rule``) when it has one; a rule that fails or
    returns non-finite values falls back to :func:`generic_start`, as do models without a rule.

    Parameters
    ----------
    model : Model
    x, y : array_like
        Finite data of equal length (any order, replicates allowed).
    fixed : mapping, optional
        Parameters held at given values; the others are estimated given them.

    Returns
    -------
    dict
        A finite value within bounds for every parameter, fixed ones included.

    Raises
    ------
    DataError
        Non-finite data, unequal lengths, fewer than two points, x outside the model's domain.
    ParameterError
        ``fixed`` names an unknown parameter or gives a non-finite value.
    """
    xa, ya = _shape_subset(*_check_data(model, x, y))
    held = _check_fixed(model, fixed)
    rule = model.start_rule
    if rule is not None:
        try:
            with warnings.catch_warnings(), np.errstate(all="ignore"):
                warnings.simplefilter("ignore")
                if isinstance(rule, (SeparableRule, PolynomialRule)):
                    got = rule(xa, ya, fixed=held, model=model)
                elif _accepts_fixed(rule):
                    got = dict(rule(xa, ya, fixed=held))  # type: ignore[call-arg]
                else:
                    got = dict(rule(xa, ya))
            values = {**model.defaults(), **{k: float(v) for k, v in got.items()}, **held}
            unknown = [k for k in got if k not in model.param_names]
            if not unknown and all(math.isfinite(v) for v in values.values()):
                values = _clip_into_bounds(model, values)
                if not held or isinstance(rule, (SeparableRule, PolynomialRule)):
                    return {**values, **held}
                # a user rule that ignores fixed values: re-estimate the others given them
                with warnings.catch_warnings(), np.errstate(all="ignore"):
                    warnings.simplefilter("ignore")
                    pol = _polish(model, xa, ya, values, held, 100 * (len(model.params) + 1))
                return _clip_into_bounds(model, {**pol, **held})
        except (ArithmeticError, ValueError, np.linalg.LinAlgError):
            pass  # the generic strategy below needs nothing from the rule
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        return _generic(model, xa, ya, held, None, data_seed(xa, ya))
