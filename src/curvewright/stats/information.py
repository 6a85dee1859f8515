"""Information criteria (AIC, AICc, BIC) from a residual sum of squares, one convention for all.

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

from curvewright.errors import DataError

__all__ = ["aic", "aicc", "bic"]


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
    base = _check(ssr, n, k) + 2.0 * k
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
