"""Residual diagnostics: whether the curve describes the data, and which points stand out.

The maths lives in plain functions on numpy arrays (residuals, the Jacobian, degrees of freedom)
so each can be checked against a reference library directly; :func:`residual_diagnostics` is the
thin layer that pulls those arrays out of a fit result and writes a plain-language summary.

Choices made here (each is documented where it is implemented):

* Normality: Shapiro-Wilk for 8 <= n <= 50, D'Agostino-Pearson (skewness and kurtosis combined)
  for n > 50; below 8 residuals no test is run, since neither has useful power there.
* Runs test: Wald-Wolfowitz on the signs of the residuals in x order, one-sided for *too few*
  runs (the sign of systematic deviation from the curve); exact distribution up to 2000 signs,
  normal approximation beyond.
* Outliers: externally studentised residuals with a Bonferroni-adjusted t test (as statsmodels'
  ``outlier_test(method="bonf")``), flagged when the adjusted p value is below ``alpha``.
* Leverage from the Jacobian of the weighted model by a thin QR factorisation (never by inverting
  ``J.T @ J``); Cook's distance from the internally studentised residuals and the leverage. Both
  are exact for models linear in their parameters and the usual tangent-plane (first-order)
  approximation otherwise.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import scipy.linalg
import scipy.stats
from numpy.typing import ArrayLike, NDArray

from curvewright.errors import DataError
from curvewright.result import register_statistics

if TYPE_CHECKING:
    from curvewright.result import FitResult

__all__ = [
    "Diagnostics",
    "LackOfFit",
    "NormalityTest",
    "RunsTest",
    "cooks_distance",
    "lack_of_fit_test",
    "leverage",
    "normality_test",
    "outlier_flags",
    "residual_diagnostics",
    "runs_test",
    "studentized_residuals",
]

FloatArray = NDArray[np.float64]

#: Below this many residuals neither normality test has useful power (common practice: the
#: Shapiro-Wilk test is defined from n = 3, but with fewer than about 8 points it almost never
#: rejects; scipy's D'Agostino-Pearson test needs n >= 8 for its kurtosis part).
MIN_NORMALITY_N = 8
#: Shapiro-Wilk up to this n, D'Agostino-Pearson above (common practice for small samples).
SHAPIRO_MAX_N = 50
#: Exact runs distribution up to this many signs; beyond it the normal approximation is
#: accurate to far better than the precision anyone reads a p value with.
RUNS_EXACT_MAX = 2000


def _vector(a: ArrayLike, name: str) -> FloatArray:
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1:
        raise DataError(f"{name} must be one-dimensional, got shape {arr.shape}.")
    if not np.all(np.isfinite(arr)):
        raise DataError(
            f"{name} holds {int((~np.isfinite(arr)).sum())} non-finite value(s); diagnostics "
            "need finite residuals (check the fit converged)."
        )
    return arr


# ------------------------------------------------------------------------------ normality
@dataclass(frozen=True)
class NormalityTest:
    """Outcome of a normality test of the residuals.

    ``method`` is ``"Shapiro-Wilk"``, ``"D'Agostino-Pearson"`` or ``"none"`` (too few points);
    then ``statistic`` and ``p_value`` are NaN and ``note`` says why.
    """

    method: str
    n: int
    statistic: float
    p_value: float
    note: str


def normality_test(residuals: ArrayLike, alpha: float = 0.05) -> NormalityTest:
    """Test whether residuals look normally distributed.

    Parameters
    ----------
    residuals : array_like
        Residuals; for a weighted fit pass the weighted residuals ``sqrt(w) * (y - f)``, which
        share one variance under the model.
    alpha : float
        Level used only for the wording of ``note``.

    Returns
    -------
    NormalityTest
        Shapiro-Wilk for ``8 <= n <= 50``; D'Agostino-Pearson (``scipy.stats.normaltest``) for
        ``n > 50``; no test for ``n < 8``.
    """
    r = _vector(residuals, "residuals")
    n = r.size
    if n < MIN_NORMALITY_N:
        return NormalityTest(
            "none",
            n,
            math.nan,
            math.nan,
            f"Too few residuals ({n}) for a normality test to say anything; it needs at least "
            f"{MIN_NORMALITY_N}.",
        )
    if np.ptp(r) == 0.0:
        return NormalityTest(
            "none", n, math.nan, math.nan, "All residuals are equal; normality cannot be judged."
        )
    if n <= SHAPIRO_MAX_N:
        sw = scipy.stats.shapiro(r)
        method, stat, p = "Shapiro-Wilk", float(sw.statistic), float(sw.pvalue)
    else:
        dp = scipy.stats.normaltest(r)
        method, stat, p = "D'Agostino-Pearson", float(dp.statistic), float(dp.pvalue)
    if p < alpha:
        note = (
            f"{method}: p = {p:.3g} < {alpha:g}; the residuals depart from a normal "
            "distribution, so p values and intervals that assume it are less trustworthy."
        )
    else:
        note = f"{method}: p = {p:.3g}; no evidence against normally distributed residuals."
    return NormalityTest(method, n, stat, p, note)


# ----------------------------------------------------------------------------------- runs
@dataclass(frozen=True)
class RunsTest:
    """Wald-Wolfowitz runs test on residual signs (one-sided: too few runs).

    ``p_value`` is ``P(R <= runs)`` under random signs; ``expected`` is the mean number of runs.
    ``method`` is ``"exact"``, ``"normal"`` or ``"none"`` (all residuals of one sign, or fewer
    than two residuals), with ``note`` in plain words.
    """

    n_positive: int
    n_negative: int
    runs: int
    expected: float
    z: float
    p_value: float
    method: str
    note: str


def _log_comb(n: int, k: int) -> float:
    if k < 0 or k > n:
        return -math.inf
    return math.lgamma(n + 1) - math.lgamma(k + 1) - math.lgamma(n - k + 1)


def runs_pmf(runs: int, n1: int, n2: int) -> float:
    """Exact probability of ``runs`` runs among ``n1`` positive and ``n2`` negative signs.

    Common practice (Wald and Wolfowitz, 1940): for ``R = 2k`` the probability is
    ``2 C(n1-1, k-1) C(n2-1, k-1) / C(n1+n2, n1)``; for ``R = 2k+1`` it is
    ``(C(n1-1, k-1) C(n2-1, k) + C(n1-1, k) C(n2-1, k-1)) / C(n1+n2, n1)``.
    Evaluated in log space so large counts do not overflow.
    """
    if runs < 2 or n1 < 1 or n2 < 1:
        return 0.0
    denom = _log_comb(n1 + n2, n1)
    k, odd = divmod(runs, 2)
    if not odd:
        log_terms = [math.log(2.0) + _log_comb(n1 - 1, k - 1) + _log_comb(n2 - 1, k - 1)]
    else:
        log_terms = [
            _log_comb(n1 - 1, k - 1) + _log_comb(n2 - 1, k),
            _log_comb(n1 - 1, k) + _log_comb(n2 - 1, k - 1),
        ]
    return float(sum(math.exp(t - denom) for t in log_terms if t > -math.inf))


def runs_test(residuals_in_x_order: ArrayLike, exact_max: int = RUNS_EXACT_MAX) -> RunsTest:
    """Runs test for systematic deviation of the data from the curve.

    Parameters
    ----------
    residuals_in_x_order : array_like
        Residuals sorted by x (ties keep the input order). Residuals exactly 0 carry no sign
        and are left out.
    exact_max : int
        Use the exact distribution when the number of signs is at most this; the normal
        approximation (no continuity correction) beyond.

    Returns
    -------
    RunsTest
        One-sided p value for too few runs: a curve that misses the data's shape leaves long
        stretches of residuals of one sign. Too *many* runs (alternating signs) is not what a
        wrong curve produces, so it is not tested.
    """
    r = _vector(residuals_in_x_order, "residuals")
    signs = np.sign(r)
    signs = signs[signs != 0]
    n1 = int((signs > 0).sum())
    n2 = int((signs < 0).sum())
    n = n1 + n2
    runs = int(1 + np.count_nonzero(np.diff(signs))) if n else 0
    if n1 == 0 or n2 == 0:
        return RunsTest(
            n1,
            n2,
            runs,
            math.nan,
            math.nan,
            math.nan,
            "none",
            "All residuals have the same sign: the curve lies entirely on one side of the data, "
            "which is itself a sign of a poor fit."
            if n >= 2
            else "Too few residuals.",
        )
    mean = 1.0 + 2.0 * n1 * n2 / n
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1.0))
    z = (runs - mean) / math.sqrt(var) if var > 0 else math.nan
    if n <= exact_max:
        p = min(1.0, sum(runs_pmf(k, n1, n2) for k in range(2, runs + 1)))
        method = "exact"
    else:
        p = float(scipy.stats.norm.cdf(z))
        method = "normal"
    if p < 0.05:
        note = (
            f"{runs} runs of residual signs where {mean:.1f} are expected (p = {p:.3g}): the "
            "data deviate systematically from the curve; consider another model."
        )
    else:
        note = f"{runs} runs where {mean:.1f} are expected (p = {p:.3g}): no sign of systematic "
        note += "deviation from the curve."
    return RunsTest(n1, n2, runs, mean, z, p, method, note)


# ---------------------------------------------------------------------------- lack of fit
@dataclass(frozen=True)
class LackOfFit:
    """Lack-of-fit F test from replicate observations.

    ``ss_pure_error`` is the (weighted) scatter of replicates about their group means, with
    ``df_pure_error = n - groups``; ``ss_lack_of_fit = ssr - ss_pure_error`` with
    ``df_lack_of_fit = groups - n_params``. When the test cannot be run (no replicates, or as many
    parameters as distinct x values) ``F`` and ``p_value`` are NaN and ``note`` says why.
    """

    groups: int
    ss_pure_error: float
    df_pure_error: int
    ss_lack_of_fit: float
    df_lack_of_fit: int
    F: float
    p_value: float
    note: str


def lack_of_fit_test(
    x: ArrayLike,
    y: ArrayLike,
    ssr: float,
    dof: int,
    weights: ArrayLike | None = None,
) -> LackOfFit:
    """Lack-of-fit F test when some x values are replicated.

    Parameters
    ----------
    x, y : array_like
        The observations used in the fit. Replicates are points with exactly equal x.
    ssr : float
        The fit's (weighted) residual sum of squares.
    dof : int
        The fit's residual degrees of freedom, ``n - n_params``.
    weights : array_like, optional
        The fit's weights ``1/sigma**2``; pure error then uses weighted group means.

    Returns
    -------
    LackOfFit
        ``F = (SS_lof / df_lof) / (SS_pe / df_pe)`` with ``p = P(F(df_lof, df_pe) > F)``
        (common practice; the same F as comparing the fit with a model that has one mean per
        distinct x).
    """
    xv, yv = _vector(x, "x"), _vector(y, "y")
    if xv.shape != yv.shape:
        raise DataError(f"x and y must have the same length; got {xv.size} and {yv.size}.")
    w = np.ones_like(yv) if weights is None else _vector(weights, "weights")
    if w.shape != yv.shape:
        raise DataError(f"weights must have one value per point ({yv.size}), got {w.size}.")
    n = yv.size
    n_params = n - int(dof)
    _, inverse = np.unique(xv, return_inverse=True)
    groups = int(inverse.max()) + 1 if n else 0
    wsum = np.bincount(inverse, weights=w)
    means = np.bincount(inverse, weights=w * yv) / wsum
    ss_pe = float(np.sum(w * (yv - means[inverse]) ** 2))
    df_pe = n - groups
    df_lof = groups - n_params
    ss_lof = float(ssr) - ss_pe
    if df_pe <= 0:
        return LackOfFit(
            groups,
            ss_pe,
            df_pe,
            ss_lof,
            df_lof,
            math.nan,
            math.nan,
            "No replicated x values, so there is no pure-error estimate for a lack-of-fit test.",
        )
    if df_lof <= 0:
        return LackOfFit(
            groups,
            ss_pe,
            df_pe,
            ss_lof,
            df_lof,
            math.nan,
            math.nan,
            f"The model has {n_params} parameters for {groups} distinct x values; it can pass "
            "through every group mean, so lack of fit cannot be tested.",
        )
    if ss_pe <= 0:
        return LackOfFit(
            groups,
            ss_pe,
            df_pe,
            ss_lof,
            df_lof,
            math.nan,
            math.nan,
            "Replicates agree exactly (pure error 0); the F ratio is undefined.",
        )
    # Rounding can make SSR a hair smaller than the pure error for a near-saturated fit.
    ss_lof = max(ss_lof, 0.0)
    F = (ss_lof / df_lof) / (ss_pe / df_pe)
    p = float(scipy.stats.f.sf(F, df_lof, df_pe))
    if p < 0.05:
        note = (
            f"Lack of fit: F = {F:.3g} on ({df_lof}, {df_pe}) df, p = {p:.3g}; the curve misses "
            "the replicate means by more than the replicates scatter."
        )
    else:
        note = (
            f"Lack of fit: F = {F:.3g} on ({df_lof}, {df_pe}) df, p = {p:.3g}; the curve is "
            "consistent with the replicate means."
        )
    return LackOfFit(groups, ss_pe, df_pe, ss_lof, df_lof, F, p, note)


# ------------------------------------------------------------------------------ influence
def leverage(jacobian: ArrayLike, rcond: float | None = None) -> FloatArray:
    """Diagonal of the hat matrix ``H = J (J.T J)^+ J.T`` by a thin pivoted QR of ``J``.

    Parameters
    ----------
    jacobian : array_like, shape (n, p)
        Jacobian of the *weighted* model, ``sqrt(w_i) * df(x_i)/dtheta_j``, over the free
        parameters (for a linear model: the weighted design).
    rcond : float, optional
        Relative tolerance for the numerical rank (default ``max(n, p) * eps``); columns beyond
        the rank are left out, so the leverage is that of the column space actually spanned.

    Returns
    -------
    ndarray, shape (n,)
        ``h_ii = sum_j Q_ij**2`` over the first ``rank`` columns of ``Q``; they sum to the rank.
    """
    J = np.asarray(jacobian, dtype=float)
    if J.ndim != 2:
        raise DataError(f"jacobian must be two-dimensional (n, p), got shape {J.shape}.")
    if not np.all(np.isfinite(J)):
        raise DataError("jacobian holds non-finite values; leverage cannot be computed.")
    n, p = J.shape
    if p == 0:
        return np.zeros(n)
    q, r, _ = scipy.linalg.qr(J, mode="economic", pivoting=True)
    d = np.abs(np.diag(r))
    tol = (max(n, p) * np.finfo(float).eps) if rcond is None else rcond
    rank = int(np.count_nonzero(d > tol * d[0])) if d.size and d[0] > 0 else 0
    return np.asarray(np.einsum("ij,ij->i", q[:, :rank], q[:, :rank]), dtype=float)


def studentized_residuals(
    weighted_residuals: ArrayLike, hat: ArrayLike, dof: int
) -> tuple[FloatArray, FloatArray]:
    """Internally and externally studentised residuals.

    Parameters
    ----------
    weighted_residuals : array_like, shape (n,)
        ``sqrt(w) * (y - f)`` (the raw residuals for an unweighted fit).
    hat : array_like, shape (n,)
        Leverages from :func:`leverage`.
    dof : int
        Residual degrees of freedom of the fit, ``n - p``.

    Returns
    -------
    internal, external : ndarray
        ``r_i = e_i / (s sqrt(1 - h_i))`` with ``s**2 = SSR / dof``, and
        ``t_i = r_i sqrt((dof - 1) / (dof - r_i**2))`` (the residual studentised by the variance
        estimated without point i). NaN where ``h_i = 1`` (a point that fixes its own fit).
    """
    e = _vector(weighted_residuals, "weighted_residuals")
    h = _vector(hat, "hat")
    if h.shape != e.shape:
        raise DataError(f"hat must have one value per residual ({e.size}), got {h.size}.")
    if dof < 1:
        raise DataError(f"dof must be at least 1 to studentise residuals, got {dof}.")
    s2 = float(e @ e) / dof
    with np.errstate(divide="ignore", invalid="ignore"):
        one_minus = np.where(h < 1.0 - 1e-12, 1.0 - h, np.nan)
        internal = e / np.sqrt(s2 * one_minus) if s2 > 0 else np.full_like(e, np.nan)
        if dof > 1:
            external = internal * np.sqrt((dof - 1) / np.maximum(dof - internal**2, 0.0))
        else:
            external = np.full_like(e, np.nan)
    return internal, external


def outlier_flags(
    external: ArrayLike, dof: int, alpha: float = 0.05
) -> tuple[FloatArray, FloatArray, NDArray[np.bool_]]:
    """Bonferroni outlier test on externally studentised residuals.

    Each ``t_i`` follows Student's t with ``dof - 1`` degrees of freedom when point i is not an
    outlier; the two-sided p value is multiplied by n (Bonferroni, capped at 1), as in
    statsmodels' ``outlier_test(method="bonf")``.

    Returns
    -------
    p_unadjusted, p_bonferroni, flag : ndarray
        ``flag`` is ``p_bonferroni < alpha``.
    """
    t = np.asarray(external, dtype=float)
    n = t.size
    if dof < 2:
        nan = np.full(n, np.nan)
        return nan, nan, np.zeros(n, dtype=bool)
    p = 2.0 * scipy.stats.t.sf(np.abs(t), dof - 1)
    p_bonf = np.minimum(p * n, 1.0)
    flag = np.asarray(np.nan_to_num(p_bonf, nan=1.0) < alpha, dtype=bool)
    return p, p_bonf, flag


def cooks_distance(internal: ArrayLike, hat: ArrayLike, n_params: int) -> FloatArray:
    """Cook's distance ``D_i = r_i**2 h_i / (p (1 - h_i))`` from internally studentised residuals.

    Exact for linear least squares; for a nonlinear model it is the first-order (tangent-plane)
    approximation at the solution.
    """
    r = np.asarray(internal, dtype=float)
    h = np.asarray(hat, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(r**2 * h / (n_params * (1.0 - h)), dtype=float)


# ---------------------------------------------------------------------------- the bundle
@dataclass(frozen=True)
class Diagnostics:
    """Residual diagnostics of one fit.

    Attributes
    ----------
    points : DataFrame
        One row per point used in the fit, in the user's input order: ``row`` (input row), ``x``,
        ``y``, ``fitted``, ``residual``, ``weighted_residual``, ``studentized`` (internal),
        ``studentized_external``, ``leverage``, ``cooks_distance``, ``p_outlier`` (Bonferroni)
        and ``outlier`` (flag). Plot ``residual`` against ``x`` or ``fitted``.
    tests : DataFrame
        One row per test (normality, runs, lack of fit): statistic, df, p value and a note.
    normality, runs, lack_of_fit : the individual test outcomes.
    linear : bool
        Whether the model is linear in its parameters (leverage and Cook's distance exact).
    summary : str
        Plain-language summary.
    """

    points: pd.DataFrame
    tests: pd.DataFrame
    normality: NormalityTest
    runs: RunsTest
    lack_of_fit: LackOfFit
    linear: bool
    alpha: float
    summary: str = field(default="")

    def residuals_vs_x(self) -> pd.DataFrame:
        """Columns ``x``, ``residual``, ``studentized`` sorted by x (for a residual plot)."""
        cols: pd.DataFrame = self.points[["x", "residual", "studentized"]]
        out: pd.DataFrame = cols.sort_values("x", kind="stable").reset_index(drop=True)
        return out

    def residuals_vs_fitted(self) -> pd.DataFrame:
        """Columns ``fitted``, ``residual``, ``studentized`` sorted by the fitted value."""
        cols: pd.DataFrame = self.points[["fitted", "residual", "studentized"]]
        out: pd.DataFrame = cols.sort_values("fitted", kind="stable").reset_index(drop=True)
        return out

    @property
    def outliers(self) -> pd.DataFrame:
        """The rows of :attr:`points` flagged as outliers."""
        flagged: pd.DataFrame = self.points[self.points["outlier"]].reset_index(drop=True)
        return flagged

    def __str__(self) -> str:
        return self.summary

    def _repr_html_(self) -> str:
        paras = "".join(f"<p>{html.escape(s)}</p>" for s in self.summary.split("\n") if s)
        return (
            '<div class="curvewright-diagnostics">'
            f"{paras}{self.tests.to_html(index=False, float_format=lambda v: f'{v:.4g}')}</div>"
        )


def _tests_frame(nt: NormalityTest, rt: RunsTest, lof: LackOfFit) -> pd.DataFrame:
    rows: list[dict[str, Any]] = [
        {
            "test": f"normality ({nt.method})" if nt.method != "none" else "normality",
            "statistic": nt.statistic,
            "df": "",
            "p_value": nt.p_value,
            "note": nt.note,
        },
        {
            "test": f"runs ({rt.method})" if rt.method != "none" else "runs",
            "statistic": float(rt.runs),
            "df": "",
            "p_value": rt.p_value,
            "note": rt.note,
        },
        {
            "test": "lack of fit (F)",
            "statistic": lof.F,
            "df": f"{lof.df_lack_of_fit}, {lof.df_pure_error}" if math.isfinite(lof.F) else "",
            "p_value": lof.p_value,
            "note": lof.note,
        },
    ]
    out: pd.DataFrame = pd.DataFrame(rows)
    return out


def diagnose_arrays(
    x: ArrayLike,
    y: ArrayLike,
    fitted: ArrayLike,
    jacobian: ArrayLike,
    dof: int,
    *,
    weights: ArrayLike | None = None,
    rows: ArrayLike | None = None,
    linear: bool = False,
    alpha: float = 0.05,
) -> Diagnostics:
    """All residual diagnostics from plain arrays.

    Parameters
    ----------
    x, y, fitted : array_like, shape (n,)
        The points used in the fit and the fitted values there.
    jacobian : array_like, shape (n, p)
        Jacobian of the *unweighted* model ``df/dtheta`` over the free parameters; it is weighted
        here by ``sqrt(w)``.
    dof : int
        Residual degrees of freedom.
    weights : array_like, optional
        The fit's weights ``1/sigma**2`` (None for an unweighted fit).
    rows : array_like of int, optional
        Input row of each point (default 0..n-1).
    linear : bool
        Whether the model is linear in its parameters (only changes the wording).
    alpha : float
        Level for the outlier flags and the wording of the tests.
    """
    xv, yv, fv = _vector(x, "x"), _vector(y, "y"), _vector(fitted, "fitted")
    n = xv.size
    if yv.size != n or fv.size != n:
        raise DataError(
            f"x, y and fitted must have one value per point; got {n}, {yv.size}, {fv.size}."
        )
    J = np.asarray(jacobian, dtype=float).reshape(n, -1)
    w = np.ones(n) if weights is None else _vector(weights, "weights")
    sw = np.sqrt(w)
    resid = yv - fv
    wres = sw * resid
    h = leverage(J * sw[:, None])
    internal, external = studentized_residuals(wres, h, dof)
    _, p_bonf, flag = outlier_flags(external, dof, alpha)
    cooks = cooks_distance(internal, h, n - dof)
    order = np.argsort(xv, kind="stable")
    nt = normality_test(wres, alpha)
    rt = runs_test(resid[order])
    ssr = float(wres @ wres)
    lof = lack_of_fit_test(xv, yv, ssr, dof, None if weights is None else w)
    points = pd.DataFrame(
        {
            "row": np.arange(n) if rows is None else np.asarray(rows, dtype=np.int64),
            "x": xv,
            "y": yv,
            "fitted": fv,
            "residual": resid,
            "weighted_residual": wres,
            "studentized": internal,
            "studentized_external": external,
            "leverage": h,
            "cooks_distance": cooks,
            "p_outlier": p_bonf,
            "outlier": flag,
        }
    )
    tests = _tests_frame(nt, rt, lof)
    summary = _summary(nt, rt, lof, points, linear, alpha)
    return Diagnostics(points, tests, nt, rt, lof, linear, alpha, summary)


def _summary(
    nt: NormalityTest,
    rt: RunsTest,
    lof: LackOfFit,
    points: pd.DataFrame,
    linear: bool,
    alpha: float,
) -> str:
    lines = [nt.note, rt.note, lof.note]
    out = points[points["outlier"]]
    if len(out):
        rows = ", ".join(str(int(r)) for r in out["row"].tolist()[:10])
        lines.append(
            f"{len(out)} point(s) (input rows {rows}) lie further from the curve than chance "
            f"allows (Bonferroni-adjusted studentised residual test, alpha = {alpha:g}); check "
            "them for recording errors before excluding anything."
        )
    else:
        lines.append(
            f"No point is an outlier by the Bonferroni-adjusted studentised residual test "
            f"(alpha = {alpha:g})."
        )
    hi = points[points["leverage"] > 2.0 * points["leverage"].mean()]
    if len(hi):
        rows = ", ".join(str(int(r)) for r in hi["row"].tolist()[:10])
        what = "" if linear else " (tangent-plane approximation for this nonlinear model)"
        lines.append(
            f"High leverage (more than twice the average){what}: input rows {rows}; these points "
            "pull the curve towards themselves, so their residuals look smaller than they are."
        )
    return "\n".join(lines)


def residual_diagnostics(result: FitResult, alpha: float = 0.05) -> Diagnostics:
    """Residual diagnostics of a fit: residual plots' data, tests, outliers and influence.

    Parameters
    ----------
    result : FitResult
        A least-squares fit.
    alpha : float
        Level for the outlier flags and the tests' wording.

    Returns
    -------
    Diagnostics

    Notes
    -----
    Normality is tested on the weighted residuals; the runs test uses the raw residuals in
    x order (their signs are the same). Leverage and Cook's distance come from the Jacobian
    at the solution: exact for polynomial models, a first-order approximation otherwise.
    """
    # Every dataset's points, stacked as the fit stacked them (fitted, jacobian and weights
    # cover all datasets one after another); rows are each point's row in its own input.
    w = _result_weights(result)
    return diagnose_arrays(
        result.x,
        result.y,
        result.fitted,
        result.jacobian,
        result.dof,
        weights=w,
        rows=np.concatenate([ds.row[ds.include] for ds in result.datasets]),
        linear=result.model.polynomial_degree is not None,
        alpha=alpha,
    )


def _result_weights(result: FitResult) -> FloatArray | None:
    """The weights ``1/sigma**2`` of a fit, or None when it was unweighted.

    ``FitResult.weights`` holds ``1/sigma`` per point (whatever the weighting: given sigma,
    relative or Poisson), so it is squared here.
    """
    w = result.weights
    if w is None:
        return None
    return np.asarray(w, dtype=float) ** 2


register_statistics(residual_diagnostics=residual_diagnostics, diagnose_arrays=diagnose_arrays)
