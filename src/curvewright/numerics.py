"""Numeric pieces shared by the fitting core and the statistics layer.

Information criteria (AIC, AICc, BIC) from a residual sum of squares, one convention for all,
central-difference Jacobians (for models given as Python functions), the Jacobian of a curve
over the free parameters (analytic through links, or by differences), used by the fit and by the
bands alike, and how many points carry each Jacobian column (the single and the batch fits'
thin-support check).

The convention, used by every fit curvewright reports (linear, polynomial and nonlinear), is the
Gaussian log-likelihood with the residual variance estimated by maximum likelihood and the
additive constants dropped (they cancel when fits to the same data are compared):

    AIC  = n ln(SSR / n) + 2 K
    AICc = AIC + 2 K (K + 1) / (n - K - 1)
    BIC  = n ln(SSR / n) + K ln(n)

with ``K`` the number of estimated quantities *including the residual variance*: for a curve
with ``p`` free parameters (or a polynomial with ``p`` coefficients) ``K = p + 1``. Compared with
statsmodels' ``aic``/``bic`` (which keep the constant ``n (1 + ln 2 pi)`` and do not count the
variance) the values differ by a constant for given data, so differences between models agree
up to that counting. For weighted fits SSR is the weighted sum of squares; the log-likelihood then
differs from the exact one by ``sum(ln w) / 2``, a constant for given data and weights.
Only differences between fits to the same data (and weights) mean anything.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray

from curvewright.errors import DataError

__all__ = ["aic", "aicc", "bic", "column_support", "finite_difference_jacobian", "free_jacobian"]

FloatArray = NDArray[np.float64]


def _check(ssr: float, n: int, k: int) -> float:
    if isinstance(n, bool) or int(n) != n or n < 1:
        raise DataError(f"n must be the number of points, a whole number >= 1; got {n!r}.")
    if isinstance(k, bool) or int(k) != k or k < 1:
        raise DataError(
            f"k must count the estimated quantities including the variance (n_params + 1), "
            f"a whole number >= 1; got {k!r}."
        )
    value = float(ssr)
    if not (math.isfinite(value) and value >= 0.0):
        raise DataError(f"ssr must be a finite residual sum of squares >= 0; got {ssr!r}.")
    # ln(0) = -inf: a perfect fit has an unbounded Gaussian likelihood.
    return -math.inf if value == 0.0 else float(n) * math.log(value / n)


def aic(ssr: float, n: int, k: int) -> float:
    """Akaike's information criterion, ``n ln(SSR/n) + 2 k``.

    Parameters
    ----------
    ssr : float
        Residual sum of squares (weighted, for a weighted fit).
    n : int
        Number of points fitted.
    k : int
        Number of estimated quantities including the residual variance: ``n_params + 1``.

    Returns
    -------
    float
        ``-inf`` for a perfect fit (``ssr == 0``).
    """
    return _check(ssr, n, k) + 2.0 * k


def aicc(ssr: float, n: int, k: int) -> float:
    """Small-sample corrected AIC, ``AIC + 2 k (k + 1) / (n - k - 1)``.

    Parameters
    ----------
    ssr : float
        Residual sum of squares (weighted, for a weighted fit).
    n : int
        Number of points fitted.
    k : int
        Number of estimated quantities including the residual variance: ``n_params + 1``.

    Returns
    -------
    float
        ``inf`` when ``n <= k + 1``: the correction is undefined there, and a model with that
        many quantities for so few points cannot be preferred on this criterion.
    """
    base = aic(ssr, n, k)
    if n - k - 1 <= 0:
        return math.inf
    return base + 2.0 * k * (k + 1) / (n - k - 1)


def bic(ssr: float, n: int, k: int) -> float:
    """Schwarz's Bayesian information criterion, ``n ln(SSR/n) + k ln(n)``.

    Parameters
    ----------
    ssr : float
        Residual sum of squares (weighted, for a weighted fit).
    n : int
        Number of points fitted.
    k : int
        Number of estimated quantities including the residual variance: ``n_params + 1``.

    Returns
    -------
    float
        ``-inf`` for a perfect fit (``ssr == 0``).
    """
    return _check(ssr, n, k) + k * math.log(n)


def finite_difference_jacobian(
    func: Callable[[FloatArray], FloatArray],
    theta: ArrayLike,
    *,
    lower: ArrayLike | None = None,
    upper: ArrayLike | None = None,
) -> FloatArray:
    """Jacobian of ``func(theta) -> array of shape (n,)`` by central differences.

    The step is ``eps**(1/3) * max(|theta_j|, 1e-8 * (1 + |theta_j|))`` (common practice: it
    balances truncation against rounding error for central differences); near a bound the
    difference becomes one-sided so ``func`` is never evaluated outside ``[lower, upper]``.

    Returns
    -------
    ndarray, shape (n, p)
    """
    th = np.asarray(theta, dtype=float)
    p = th.size
    lo = np.full(p, -np.inf) if lower is None else np.asarray(lower, dtype=float)
    hi = np.full(p, np.inf) if upper is None else np.asarray(upper, dtype=float)
    f0 = np.asarray(func(th), dtype=float)
    J = np.empty((f0.size, p))
    base = np.finfo(float).eps ** (1.0 / 3.0)
    for j in range(p):
        h = base * max(abs(th[j]), 1.0e-8 * (1.0 + abs(th[j])), 1e-300)
        up, dn = th.copy(), th.copy()
        if th[j] + h <= hi[j] and th[j] - h >= lo[j]:
            up[j] += h
            dn[j] -= h
            J[:, j] = (np.asarray(func(up)) - np.asarray(func(dn))) / (2.0 * h)
        elif th[j] + h <= hi[j]:
            up[j] += h
            J[:, j] = (np.asarray(func(up)) - f0) / h
        else:
            dn[j] -= h
            J[:, j] = (f0 - np.asarray(func(dn))) / h
    return J


def free_jacobian(
    analytic: FloatArray,
    param_jacobian: FloatArray | None,
    curve: Callable[[FloatArray], FloatArray] | None,
    theta: ArrayLike,
    *,
    lower: ArrayLike | None = None,
    upper: ArrayLike | None = None,
) -> FloatArray:
    """Jacobian of a formula's curve over the free parameters, shape ``(n, nfree)``.

    The analytic derivatives chained through the links; a model without them (a Python
    function) takes :func:`finite_difference_jacobian` of ``curve`` instead.

    Parameters
    ----------
    analytic : ndarray, shape (n, n_params)
        ``d f / d parameter`` for every parameter of the model (the symbolic derivatives).
    param_jacobian : ndarray, shape (n_params, nfree), or None
        ``d parameter / d free parameter``: the chain rule through links, zero for fixed ones.
        None when ``analytic`` already holds just the free parameters' columns (no links: the
        chain rule is then a selection, which the caller has made).
    curve : callable or None
        ``curve(theta) -> f`` at the same points, as a function of the free parameters: for
        central differences (see :func:`finite_difference_jacobian`), used for the rows where
        the analytic Jacobian is not finite. None leaves those rows as they are.
    theta, lower, upper : array_like
        The free parameters and their bounds.
    """
    if param_jacobian is None:
        J = np.asarray(analytic, dtype=float)
    else:
        with np.errstate(all="ignore"):
            J = np.asarray(analytic, dtype=float) @ param_jacobian
    if curve is None or np.isfinite(J).all():  # the usual case, checked in one pass
        return J
    bad = ~np.all(np.isfinite(J), axis=1)
    if bad.any():
        # e.g. d/dlogEC50 of 10**(log10(x)...) at a zero-dose control: inf * 0 analytically,
        # but the curve is flat there; differences give the limit.
        fd = finite_difference_jacobian(curve, theta, lower=lower, upper=upper)
        J[bad] = np.where(np.isfinite(fd[bad]), fd[bad], 0.0)
    return J


def column_support(jw: FloatArray) -> FloatArray:
    """How many points carry each column: ``(sum J**2)**2 / sum J**4`` over the point axis.

    The participation ratio: 1 when one point carries all of a column, k when k points carry
    it alike, 0 for a zero column (and for one that is not finite). ``jw`` is ``(N, p)``, or
    ``(..., N, p)`` for many groups at once (the points on the second-to-last axis).
    """
    with np.errstate(all="ignore"):
        sq = jw * jw
        s2 = sq.sum(axis=-2)
        fast: FloatArray = s2 * s2 / (sq * sq).sum(axis=-2)
        if np.all(np.isfinite(fast)):
            return fast  # few numpy calls: this runs after every fit
        # scaled by the column's largest entry first, so that J**4 neither overflows nor
        # underflows
        a = np.abs(jw) / np.max(np.abs(jw), axis=-2, keepdims=True)
        s2 = np.sum(a * a, axis=-2)
        support = np.where(s2 > 0, s2 * s2 / np.sum(a**4, axis=-2), 0.0)
    out: FloatArray = np.where(np.isfinite(support), support, 0.0)
    return out
