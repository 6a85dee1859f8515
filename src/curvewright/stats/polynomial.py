"""Polynomial regression: coefficient tests, the overall F test, and choosing the degree.

All fits go through :func:`curvewright.linear.solve_polynomial` (QR in an orthogonal basis,
exact conversion to plain coefficients), so the statistics keep their accuracy on badly
conditioned data. Information criteria follow :mod:`curvewright.numerics`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats as sps

from curvewright.errors import DataError, ModelError, ParameterError
from curvewright.linear import LinearSolution, solve_polynomial
from curvewright.numerics import aicc as _aicc
from curvewright.numerics import bic as _bic

__all__ = ["DegreeSelection", "PolynomialFit", "polynomial_fit", "select_degree"]


@dataclass(frozen=True)
class PolynomialFit:
    """A polynomial of degree k fitted to (x, y[, weights]), with its tests.

    Attributes
    ----------
    degree : int
        The degree k.
    solution : LinearSolution
        The least-squares solution (plain coefficients, covariance, residuals, ...).
    coef_table : pandas.DataFrame
        Index ``c0 .. ck`` (the coefficient of ``x**j``); columns ``estimate``, ``stderr``, ``t``
        and ``p``: the two-sided t test of H0 "this coefficient is 0" with ``df_resid`` degrees of
        freedom. Undetermined coefficients (rank-deficient data) have NaN statistics.
    f_overall, f_overall_p : float
        Overall ANOVA F test of H0 "every coefficient but the intercept is 0", F with
        (``df_model``, ``df_resid``) degrees of freedom. NaN for degree 0.
    df_model : int
        Model degrees of freedom, the number of determined coefficients minus the intercept.
    df_resid : int
        Residual degrees of freedom, ``n - (df_model + 1)``.
    r2, r2_adj : float
        R² (about the weighted mean of y) and adjusted R², ``1 - (1 - R²)(n - 1)/df_resid``.
        NaN when y is constant.
    aicc, bic : float
        AICc and BIC with ``K = number of determined coefficients + 1`` (the variance); see
        :mod:`curvewright.numerics`.
    """

    degree: int
    solution: LinearSolution
    coef_table: pd.DataFrame
    f_overall: float
    f_overall_p: float
    df_model: int
    df_resid: int
    r2: float
    r2_adj: float
    aicc: float
    bic: float

    @property
    def n(self) -> int:
        """Number of points fitted."""
        return int(self.solution.fitted.shape[0])

    @property
    def ssr(self) -> float:
        """Residual sum of squares (weighted for a weighted fit)."""
        return self.solution.ssr


def _centred_tss(y: np.ndarray, weights: ArrayLike | None) -> float:
    y = np.asarray(y, dtype=np.float64)
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=np.float64)
    ybar = float(w @ y) / float(w.sum())
    d = y - ybar
    return float((w * d) @ d)


def polynomial_fit(
    x: ArrayLike,
    y: ArrayLike,
    degree: int,
    *,
    weights: ArrayLike | None = None,
) -> PolynomialFit:
    """Fit ``y = c0 + c1 x + ... + ck x**k`` and test its coefficients.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Data.
    degree : int
        Polynomial degree k >= 0.
    weights : array_like, shape (n,), optional
        Positive weights, ``1/sigma_i**2`` style, treated as relative (the covariance is scaled
        by the residual mean square), as in statsmodels' WLS.

    Returns
    -------
    PolynomialFit

    Raises
    ------
    ModelError
        ``degree`` is not a whole number >= 0.
    DataError
        Shapes do not match, values are not finite, weights are not positive, or there are not
        more points than coefficients.

    Warns
    -----
    RankDeficiencyWarning
        When the data cannot determine a polynomial of this degree.
    """
    sol = solve_polynomial(x, y, degree, weights=weights)
    yv = np.asarray(y, dtype=np.float64)
    n = yv.shape[0]
    df_resid = sol.dof
    df_model = sol.rank - 1
    k = sol.n_coef - 1

    with np.errstate(divide="ignore", invalid="ignore"):
        tvals = sol.coef / sol.stderr
    pvals = 2.0 * sps.t.sf(np.abs(tvals), df_resid)
    undetermined = list(sol.undetermined)
    tvals[undetermined] = np.nan
    pvals[undetermined] = np.nan
    table = pd.DataFrame(
        {"estimate": sol.coef, "stderr": sol.stderr, "t": tvals, "p": pvals},
        index=pd.Index([f"c{j}" for j in range(k + 1)], name="coefficient"),
    )

    tss = _centred_tss(yv, weights)
    ssr = sol.ssr
    if tss > 0.0:
        r2 = 1.0 - ssr / tss
        r2_adj = 1.0 - (1.0 - r2) * (n - 1) / df_resid
    else:
        r2 = r2_adj = math.nan
    if df_model >= 1 and tss > 0.0:
        explained = max(tss - ssr, 0.0) / df_model
        if ssr > 0.0:
            f_overall = explained / (ssr / df_resid)
            f_overall_p = float(sps.f.sf(f_overall, df_model, df_resid))
        else:
            f_overall, f_overall_p = math.inf, 0.0
    else:
        f_overall = f_overall_p = math.nan

    n_quantities = sol.rank + 1  # determined coefficients + the residual variance
    return PolynomialFit(
        degree=k,
        solution=sol,
        coef_table=table,
        f_overall=float(f_overall),
        f_overall_p=float(f_overall_p),
        df_model=df_model,
        df_resid=df_resid,
        r2=float(r2),
        r2_adj=float(r2_adj),
        aicc=_aicc(ssr, n, n_quantities),
        bic=_bic(ssr, n, n_quantities),
    )


@dataclass(frozen=True)
class DegreeSelection:
    """Polynomial fits of degree 0..max_degree, the tests between them and a suggested degree.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per degree d = 1..max_degree (index ``degree``): ``ssr``, ``df_resid`` of the
        degree-d fit; ``F``, ``df_num``, ``df_den``, ``p``: the extra-sum-of-squares F test of
        the added term x**d against the fit of degree d - 1 (H0: the new top coefficient is 0),
        ``F = ((SSR[d-1] - SSR[d]) / df_num) / (SSR[d] / df_resid[d])`` -- each test uses the
        residual mean square of its own larger model, degree d; then ``aicc``, ``bic``, ``r2``,
        ``r2_adj`` of the degree-d fit.
    sequential_anova : pandas.DataFrame
        Type-I (sequential) ANOVA of the LARGEST model, degree max_degree: one row per term
        ``x^1 .. x^k`` (the reduction in SSR when that power is added after the lower ones) and
        a ``Residual`` row; columns ``df``, ``sum_sq``, ``mean_sq``, ``F``, ``p``. Every F here
        divides by the residual mean square of the largest model, unlike ``table``, so its p
        values differ from those in ``table`` (only the last row's agree).
    suggested : int
        The suggested degree: stop at the first added term that is not significant at
        ``alpha`` (p >= alpha in ``table``) and keep the degree below it; ``max_degree`` when
        every added term is significant; 0 (a constant) when even the slope is not.
    alpha : float
        Significance level used.
    reasoning : str
        The decision in plain language, with the F tests and what AICc and BIC prefer.
    fits : Mapping[int, PolynomialFit]
        The fits by degree, 0..max_degree (read-only).
    """

    table: pd.DataFrame
    sequential_anova: pd.DataFrame
    suggested: int
    alpha: float
    reasoning: str
    fits: Mapping[int, PolynomialFit]

    def fit_for(self, degree: int) -> PolynomialFit:
        """The fit of a given degree, to override the suggestion.

        Parameters
        ----------
        degree : int
            A degree between 0 and max_degree.

        Returns
        -------
        PolynomialFit

        Raises
        ------
        ModelError
            No fit of that degree was made.
        """
        if isinstance(degree, bool) or degree not in self.fits:
            top = max(self.fits)
            raise ModelError(
                f"no fit of degree {degree!r} was made; choose a degree from 0 to {top}, or run "
                f"select_degree with max_degree={degree} if there are enough points."
            )
        return self.fits[degree]

    @property
    def suggested_fit(self) -> PolynomialFit:
        """The fit of the suggested degree."""
        return self.fits[self.suggested]


def _fmt_p(p: float) -> str:
    return f"{p:.3g}" if p >= 1e-4 else f"{p:.2e}"


def select_degree(
    x: ArrayLike,
    y: ArrayLike,
    *,
    max_degree: int = 5,
    alpha: float = 0.05,
    weights: ArrayLike | None = None,
) -> DegreeSelection:
    """Fit polynomials of degree 0..max_degree and suggest the degree the data support.

    Each added power of x is tested by the extra-sum-of-squares F test between consecutive
    nested fits; the suggestion stops at the first added term that is not significant at
    ``alpha``. AICc and BIC are reported for every degree, and the type-I (sequential) ANOVA of
    the largest model is given separately (it uses the largest model's residual mean square for
    every term, so its p values differ from the pairwise tests).

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Data.
    max_degree : int, default 5
        Largest degree to fit; needs at least ``max_degree + 2`` points and ``max_degree + 1``
        distinct x values.
    alpha : float, default 0.05
        Significance level for the F tests, in (0, 1).
    weights : array_like, shape (n,), optional
        Positive weights, ``1/sigma_i**2`` style, used in every fit.

    Returns
    -------
    DegreeSelection

    Raises
    ------
    ModelError
        ``max_degree`` is not a whole number >= 1.
    ParameterError
        ``alpha`` is not in (0, 1).
    DataError
        Bad data (see :func:`polynomial_fit`), or too few points or distinct x values for
        ``max_degree``.
    """
    if isinstance(max_degree, bool) or not isinstance(max_degree, (int, np.integer)):
        raise ModelError(
            f"max_degree must be a whole number >= 1; got {max_degree!r}. Pass e.g. max_degree=4."
        )
    kmax = int(max_degree)
    if kmax < 1:
        raise ModelError(f"max_degree must be >= 1 (at least a straight line); got {kmax}.")
    a = float(alpha)
    if not (0.0 < a < 1.0):
        raise ParameterError(f"alpha must be a significance level in (0, 1); got {alpha!r}.")

    fit0 = polynomial_fit(x, y, 0, weights=weights)  # validates x, y and weights
    xv = np.asarray(x, dtype=np.float64)
    n = fit0.n
    n_distinct = int(np.unique(xv).size)
    if n < kmax + 2 or n_distinct < kmax + 1:
        top = max(min(n - 2, n_distinct - 1), 0)
        raise DataError(
            f"max_degree={kmax} needs at least {kmax + 2} points and {kmax + 1} distinct x values "
            f"(one residual degree of freedom at the top degree); got {n} points with "
            f"{n_distinct} distinct x values. Lower max_degree to {top} or add points."
        )

    fits: dict[int, PolynomialFit] = {0: fit0}
    for d in range(1, kmax + 1):
        fits[d] = polynomial_fit(x, y, d, weights=weights)

    rows: list[dict[str, float]] = []
    for d in range(1, kmax + 1):
        small, big = fits[d - 1], fits[d]
        df_num = small.df_resid - big.df_resid
        df_den = big.df_resid
        extra = max(small.ssr - big.ssr, 0.0)  # rounding can make it a hair negative
        if big.ssr > 0.0:
            f_stat = (extra / df_num) / (big.ssr / df_den)
            p = float(sps.f.sf(f_stat, df_num, df_den))
        else:
            f_stat, p = math.inf, 0.0
        rows.append(
            {
                "degree": d,
                "ssr": big.ssr,
                "df_resid": big.df_resid,
                "F": f_stat,
                "df_num": df_num,
                "df_den": df_den,
                "p": p,
                "aicc": big.aicc,
                "bic": big.bic,
                "r2": big.r2,
                "r2_adj": big.r2_adj,
            }
        )
    table = pd.DataFrame(rows).set_index("degree")

    largest = fits[kmax]
    resid_ms = largest.ssr / largest.df_resid
    seq_rows = []
    for d in range(1, kmax + 1):
        df = fits[d - 1].df_resid - fits[d].df_resid
        ss = max(fits[d - 1].ssr - fits[d].ssr, 0.0)
        ms = ss / df
        f_stat = ms / resid_ms if resid_ms > 0.0 else math.inf
        seq_rows.append(
            {
                "df": float(df),
                "sum_sq": ss,
                "mean_sq": ms,
                "F": f_stat,
                "p": float(sps.f.sf(f_stat, df, largest.df_resid)),
            }
        )
    seq_rows.append(
        {
            "df": float(largest.df_resid),
            "sum_sq": largest.ssr,
            "mean_sq": resid_ms,
            "F": math.nan,
            "p": math.nan,
        }
    )
    sequential_anova = pd.DataFrame(
        seq_rows, index=pd.Index([f"x^{d}" for d in range(1, kmax + 1)] + ["Residual"])
    )

    suggested, reasoning = _suggest(rows, fits, kmax, a)
    return DegreeSelection(
        table=table,
        sequential_anova=sequential_anova,
        suggested=suggested,
        alpha=a,
        reasoning=reasoning,
        fits=MappingProxyType(fits),
    )


def _suggest(
    rows: list[dict[str, float]], fits: Mapping[int, PolynomialFit], kmax: int, alpha: float
) -> tuple[int, str]:
    """Apply the stopping rule to the pairwise F tests and say why, in plain language."""
    pvals = {int(r["degree"]): float(r["p"]) for r in rows}
    lines = [
        "Each added power of x was tested against the fit one degree lower with the "
        f"extra-sum-of-squares F test (H0: the new top coefficient is 0), at alpha = {alpha:g}."
    ]
    suggested = kmax
    for d in range(1, kmax + 1):
        row = rows[d - 1]
        p = pvals[d]
        significant = p < alpha
        lines.append(
            f"x^{d}: F = {float(row['F']):.4g} on {int(row['df_num'])} and {int(row['df_den'])} "
            f"df, p = {_fmt_p(p)} ({'significant' if significant else 'not significant'})."
        )
        if not significant:
            suggested = d - 1
            break
    later = [d for d in range(suggested + 2, kmax + 1) if pvals[d] < alpha]
    if suggested == kmax:
        lines.append(
            f"Every added term up to degree {kmax} is significant, so degree {kmax} is suggested; "
            "a larger max_degree or a different (nonlinear) model may describe the data better."
        )
    elif suggested == 0 and not later:
        lines.append(
            "Even the straight line's slope is not significant and no higher term is either: "
            "the data show no trend at this level, so a constant (degree 0) is suggested."
        )
    else:
        lines.append(
            "The rule stops at the first added term that is not significant: degree "
            f"{suggested} is suggested."
        )
    if later:
        terms = ", ".join(f"x^{d} (p = {_fmt_p(pvals[d])})" for d in later)
        lines.append(
            f"Caution: higher terms were significant again: {terms}. The data may follow a "
            "curve that the lower-degree tests miss (for instance one with no overall linear "
            "trend); if so, or if the science gives a reason to expect them, look at those "
            "fits with fit_for(degree)."
        )
    aicc_values = {d: fits[d].aicc for d in fits}
    bic_values = {d: fits[d].bic for d in fits}
    best_aicc = min(aicc_values, key=lambda d: aicc_values[d])
    best_bic = min(bic_values, key=lambda d: bic_values[d])
    if best_aicc == best_bic:
        agree = "too" if best_aicc == suggested else "instead"
        lines.append(f"AICc and BIC are both lowest at degree {best_aicc} {agree}.")
    else:
        lines.append(f"AICc is lowest at degree {best_aicc} and BIC at degree {best_bic}.")
    if best_aicc != suggested or best_bic != suggested:
        # Burnham & Anderson's rule of thumb for AIC differences (common practice).
        lines.append("(Lower is better; a difference below about 2 is weak evidence.)")
    lines.append("Use fit_for(degree) to take another degree.")
    return suggested, " ".join(lines)
