"""The inference maths of a least-squares fit, once, on plain arrays.

Quantiles for a coverage level, Wald intervals and t tests, delta-method variances and standard
errors (of linked parameters, derived quantities and curves), and the correlation matrix of a
covariance. Every layer that needs one of these calls it here: the fitting core (standard errors
of linked parameters, the correlation diagnostic), the result (its intervals and derived
quantities) and the statistics (tables, bands, calibration). The functions take numbers and
arrays, never a fit result, so this module sits at the bottom of the package with
:mod:`curvewright.numerics`; it imports nothing of ours but the errors.

Conventions (common practice): two-sided intervals ``value +- q * stderr`` with ``q`` the
Student t quantile on the residual degrees of freedom, or the normal quantile when sigma is
taken as known; first-order delta method ``var(g(p)) = grad' C grad``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from numbers import Real
from typing import TYPE_CHECKING

import numpy as np
import scipy.stats
from numpy.typing import ArrayLike, NDArray

from curvewright.errors import DataError, ParameterError

if TYPE_CHECKING:
    from curvewright.expr import Expr

__all__ = [
    "check_dof",
    "check_level",
    "correlated_pairs",
    "correlation_matrix",
    "delta_method_se",
    "delta_method_variance",
    "derived_value_and_se",
    "parameter_tests",
    "quantile",
    "t_quantile",
    "wald_intervals",
]

FloatArray = NDArray[np.float64]


# ------------------------------------------------------------------------------ quantiles
def check_level(level: float) -> float:
    """``level`` as a float strictly between 0 and 1, else a ParameterError saying so."""
    if isinstance(level, bool) or not isinstance(level, Real) or not (0.0 < float(level) < 1.0):
        raise ParameterError(
            f"level must be a probability between 0 and 1 (e.g. 0.95), got {level!r}."
        )
    return float(level)


def check_dof(dof: float) -> float:
    """``dof`` as a float when it is at least 1, else a DataError saying what is needed."""
    d = float(dof)
    if not d > 0:
        raise DataError(
            f"The fit has {dof} residual degrees of freedom; intervals need at least 1 "
            "(more points than free parameters)."
        )
    return d


def quantile(level: float, dof: float, *, known_sigma: bool = False) -> float:
    """Two-sided quantile ``q`` with ``P(|T| <= q) = level``.

    Student t on ``dof`` degrees of freedom; the standard normal when ``known_sigma`` (sigma
    taken as exact: the variance is not estimated). NaN when the variance is estimated from no
    degrees of freedom (``dof <= 0``), so a table can still be printed.
    """
    p = 0.5 + check_level(level) / 2.0
    if known_sigma:
        return float(scipy.stats.norm.ppf(p))
    if not float(dof) > 0:
        return math.nan
    return float(scipy.stats.t.ppf(p, float(dof)))


def t_quantile(level: float, dof: float) -> float:
    """Two-sided Student t quantile: ``t`` with ``P(|T| <= t) = level`` on ``dof`` df.

    Raises
    ------
    DataError
        ``dof`` is below 1.
    """
    return quantile(level, check_dof(dof))


# ---------------------------------------------------------------------- tests, intervals
def parameter_tests(
    values: ArrayLike, stderr: ArrayLike, dof: float, *, known_sigma: bool = False
) -> tuple[FloatArray, FloatArray]:
    """t statistics and two-sided p values for ``H0: parameter = 0``.

    Returns
    -------
    t, p : ndarray
        ``t = value / stderr`` and ``p = 2 P(T_dof > |t|)`` (the normal tail when
        ``known_sigma``); NaN where the standard error is not finite or zero.
    """
    v = np.asarray(values, dtype=float)
    se = np.asarray(stderr, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where((se > 0) & np.isfinite(se), v / se, np.nan)
    if known_sigma:
        p = 2.0 * scipy.stats.norm.sf(np.abs(t))
    else:
        p = 2.0 * scipy.stats.t.sf(np.abs(t), check_dof(dof))
    return np.asarray(t, dtype=float), np.asarray(p, dtype=float)


def wald_intervals(
    values: ArrayLike, stderr: ArrayLike, dof: float, level: float = 0.95
) -> tuple[FloatArray, FloatArray]:
    """Asymptotic (Wald) intervals ``value +- t(level, dof) * stderr``."""
    v = np.asarray(values, dtype=float)
    se = np.asarray(stderr, dtype=float)
    half = t_quantile(level, dof) * se
    return v - half, v + half


# --------------------------------------------------------------------------- correlation
def correlation_matrix(cov: ArrayLike) -> FloatArray:
    """Correlation matrix of a covariance matrix.

    NaN where a variance is zero or undefined (its row, column and diagonal entry); rounding
    beyond ``[-1, 1]`` is clipped.
    """
    c = np.asarray(cov, dtype=float)
    if c.ndim != 2 or c.shape[0] != c.shape[1]:
        raise DataError(f"cov must be a square matrix, got shape {c.shape}.")
    d = np.sqrt(np.diag(c))
    with np.errstate(divide="ignore", invalid="ignore"):
        r = c / np.outer(d, d)
    r = np.where(np.isfinite(r), r, np.nan)
    r[np.diag_indices_from(r)] = np.where(d > 0, 1.0, np.nan)
    return np.asarray(np.clip(r, -1.0, 1.0), dtype=float)


def correlated_pairs(corr: ArrayLike, threshold: float) -> list[tuple[int, int, float]]:
    """``(i, j, r)`` for each pair ``i < j`` with ``|r| > threshold`` (NaN never counts)."""
    r = np.asarray(corr, dtype=float)
    return [
        (i, j, float(r[i, j]))
        for i in range(r.shape[0])
        for j in range(i + 1, r.shape[0])
        if np.isfinite(r[i, j]) and abs(r[i, j]) > threshold
    ]


# ------------------------------------------------------------------------- delta method
def delta_method_variance(gradient: ArrayLike, cov: ArrayLike) -> FloatArray:
    """``g' C g`` for each row ``g`` of ``gradient`` (first-order delta method).

    Parameters
    ----------
    gradient : array_like, shape (p,) or (m, p)
        Gradient of one quantity (or each of m quantities, one per row) over the free
        parameters: a derived quantity, a linked parameter, the curve at m x values.
    cov : array_like, shape (p, p)
        Covariance of the free parameters.

    Returns
    -------
    ndarray, shape (m,)
    """
    g = np.atleast_2d(np.asarray(gradient, dtype=float))
    c = np.asarray(cov, dtype=float)
    if g.shape[1] != c.shape[0]:
        raise DataError(
            f"gradient has {g.shape[1]} entries per quantity but the covariance is "
            f"{c.shape[0]} x {c.shape[0]}; both must run over the same free parameters."
        )
    with np.errstate(all="ignore"):
        return np.asarray(np.einsum("ij,jk,ik->i", g, c, g), dtype=float)


def delta_method_se(gradient: ArrayLike, cov: ArrayLike) -> FloatArray:
    """Delta-method standard error(s) ``sqrt(g' C g)``; NaN where that is negative or NaN.

    See :func:`delta_method_variance` for the arguments.
    """
    var = delta_method_variance(gradient, cov)
    with np.errstate(invalid="ignore"):
        return np.asarray(np.sqrt(np.where(var >= 0, var, np.nan)), dtype=float)


def derived_value_and_se(
    expr: Expr,
    param_names: Sequence[str],
    values: Mapping[str, float],
    param_jacobian: ArrayLike,
    covariance: ArrayLike,
) -> tuple[float, float]:
    """Value of a function of the parameters and its delta-method standard error.

    Parameters
    ----------
    expr : Expr
        The quantity, in the parameter names.
    param_names : sequence of str
        Every parameter of the model, in model order (the rows of ``param_jacobian``).
    values : mapping
        All parameter values.
    param_jacobian : array_like, shape (n_params, nfree)
        ``d value / d free`` (identity rows for free parameters, zero rows for fixed ones, the
        link's gradient for linked ones), so links count and fixed parameters contribute
        nothing.
    covariance : array_like, shape (nfree, nfree)

    Returns
    -------
    (value, stderr)
        ``stderr`` is NaN when there is no free parameter.
    """
    env = dict(values)
    with np.errstate(all="ignore"):
        value = float(np.asarray(expr.evaluate(env)))
        grad_all = np.array(
            [float(np.asarray(expr.derivative(n).evaluate(env))) for n in param_names]
        )
    pj = np.asarray(param_jacobian, dtype=float)
    g = grad_all @ pj if pj.size else np.zeros(0)
    if g.size == 0:
        return value, math.nan
    return value, float(delta_method_se(g, covariance)[0])
