"""Linear least squares by pivoted QR on a centred, column-scaled design, and polynomial fits.

Nothing here ever forms or inverts ``X.T @ X``: squaring the design squares its condition number
and throws away half the digits on badly conditioned problems (polynomials of high degree, data
far from the origin). Instead the weighted design is centred on a constant column when it has one,
each column is scaled to unit 2-norm, and a column-pivoted Householder QR (``scipy.linalg.qr``)
gives the solution, the numerical rank and the covariance from the triangular factor.

Polynomials are fitted in a Chebyshev basis of the centred and scaled abscissa
``t = (x - mid) / half_range``, which is well conditioned for any spread of x, and the result is
converted back to plain coefficients ``c0 .. ck`` of ``y = sum_j c_j x**j`` in exact rational
arithmetic; the covariance is carried through the same (triangular) basis-change matrix.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
import scipy.linalg
from numpy.polynomial import chebyshev
from numpy.typing import ArrayLike, NDArray

from curvewright.errors import DataError, ModelError, ParameterError, RankDeficiencyWarning

__all__ = [
    "LinearSolution",
    "polynomial_design",
    "solve_linear",
    "solve_polynomial",
]

FloatArray = NDArray[np.float64]
LongArray = NDArray[np.longdouble]

# Refinement steps of the QR solution (see _qr_core); two or three are enough in practice.
_MAX_REFINEMENTS = 4


@dataclass(frozen=True)
class LinearSolution:
    """The result of a (weighted) linear least-squares fit ``y ≈ design @ coef``.

    Attributes
    ----------
    coef : ndarray, shape (n_coef,)
        Estimated coefficients. For :func:`solve_polynomial` these are the plain coefficients
        ``c0 .. ck`` of ``y = sum_j c_j x**j``. Coefficients that the data do not determine
        (see ``undetermined``) are set to 0.
    stderr : ndarray, shape (n_coef,)
        Standard errors, ``sqrt(diag(cov))``; NaN for undetermined coefficients.
    cov : ndarray, shape (n_coef, n_coef)
        Covariance of the coefficients, ``sigma**2 * (Xw.T Xw)^-1`` evaluated through the QR
        factor (never by forming the product). The weights are treated as relative
        (``1/sigma_i**2`` up to a common factor), so the scale is the estimated residual
        variance ``sigma**2``, as in weighted least squares in statsmodels. When the design is
        rank-deficient it is the covariance conditional on the undetermined coefficients being 0;
        their rows and columns are NaN.
    rank : int
        Numerical rank of the design (see :func:`solve_linear` for the tolerance).
    n_coef : int
        Number of coefficients (columns of the design).
    condition : float
        2-norm condition number of the weighted design after scaling each column to unit norm:
        how strongly the reported coefficients react to small changes in the data. For
        :func:`solve_polynomial` it is that of the plain power design ``x**j``, although the fit
        itself is done in a far better conditioned basis. Values beyond about ``1e15`` only mean
        "at least that" (the smallest singular value is then lost in rounding); ``inf`` for a
        design with an exactly dependent column.
    ssr : float
        Residual sum of squares, weighted: ``sum(w * residuals**2)``.
    dof : int
        Residual degrees of freedom, ``n - rank``.
    sigma : float
        Residual standard deviation, ``sqrt(ssr / dof)``.
    fitted : ndarray, shape (n,)
        Fitted values at the data.
    residuals : ndarray, shape (n,)
        Raw (unweighted) residuals ``y - fitted``.
    rank_deficient : bool
        True when ``rank < n_coef``; a :class:`~curvewright.errors.RankDeficiencyWarning` was
        emitted naming the undetermined coefficients.
    undetermined : tuple of int
        Indices of the coefficients the data do not determine (empty when of full rank).
    """

    coef: FloatArray
    stderr: FloatArray
    cov: FloatArray
    rank: int
    n_coef: int
    condition: float
    ssr: float
    dof: int
    sigma: float
    fitted: FloatArray
    residuals: FloatArray
    rank_deficient: bool
    undetermined: tuple[int, ...] = ()


@dataclass(frozen=True)
class _QRFit:
    """What the QR core hands back, in the coordinates of the design it was given."""

    coef: LongArray
    cov_unscaled: FloatArray  # (Xw.T Xw)^-1 restricted to the determined columns, NaN elsewhere
    fitted: LongArray  # unweighted fitted values, computed from the centred design
    rank: int
    undetermined: tuple[int, ...]


# ---------------------------------------------------------------------------------------------
# validation


def _as_float_vector(values: ArrayLike, name: str) -> FloatArray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise DataError(
            f"{name} must be numeric; it could not be converted to floating point ({exc}). "
            "Convert text columns to numbers first, e.g. with pandas.to_numeric."
        ) from exc
    if arr.ndim != 1:
        raise DataError(
            f"{name} must be a 1-D array with one value per point; got shape {arr.shape}. "
            "Pass a flat sequence, e.g. numpy.ravel(values)."
        )
    return arr


def _check_finite(arr: FloatArray, name: str) -> None:
    bad = ~np.isfinite(arr)
    if bad.any():
        rows = np.flatnonzero(bad.reshape(arr.shape[0], -1).any(axis=1))
        shown = ", ".join(str(int(i)) for i in rows[:10]) + (", ..." if rows.size > 10 else "")
        raise DataError(
            f"{name} contains {int(bad.sum())} non-finite value(s) (NaN or inf) at row(s) "
            f"{shown}; remove or correct those points before fitting."
        )


def _check_weights(weights: ArrayLike | None, n: int) -> FloatArray | None:
    if weights is None:
        return None
    w = _as_float_vector(weights, "weights")
    if w.shape[0] != n:
        raise DataError(
            f"weights must have one value per point: expected {n}, got {w.shape[0]}. "
            "Pass weights of the same length as y (1/sigma**2 for each point)."
        )
    _check_finite(w, "weights")
    nonpos = np.flatnonzero(w <= 0)
    if nonpos.size:
        shown = ", ".join(str(int(i)) for i in nonpos[:10]) + (", ..." if nonpos.size > 10 else "")
        raise DataError(
            f"weights must be positive (1/sigma**2 per point); {nonpos.size} value(s) are <= 0 "
            f"at row(s) {shown}. Exclude such points from the data instead of weighting them 0."
        )
    return w


def _check_rcond(rcond: float | None, n: int, p: int) -> float:
    if rcond is None:
        # common practice: LAPACK / numpy.linalg.matrix_rank use max(n, p) * eps.
        return max(n, p) * float(np.finfo(np.float64).eps)
    value = float(rcond)
    if not (math.isfinite(value) and 0.0 <= value < 1.0):
        raise ParameterError(
            f"rcond must be a relative tolerance in [0, 1); got {rcond!r}. "
            "Leave it as None for the default max(n, n_coef) * machine epsilon."
        )
    return value


def _check_enough_points(n: int, p: int) -> None:
    if n <= p:
        raise DataError(
            f"need more points than coefficients to estimate the residual variance: got {n} "
            f"point(s) for {p} coefficient(s). Add points or use fewer coefficients "
            "(a lower polynomial degree)."
        )


def _check_degree(degree: object) -> int:
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)):
        raise ModelError(
            f"degree must be a whole number >= 0; got {degree!r} of type "
            f"{type(degree).__name__}. Pass e.g. degree=2 for a quadratic."
        )
    k = int(degree)
    if k < 0:
        raise ModelError(f"degree must be >= 0; got {k}. Use 0 for a constant, 1 for a line.")
    return k


# ---------------------------------------------------------------------------------------------
# the QR core


def _condition(scaled: FloatArray) -> float:
    """2-norm condition number from the singular values of an already column-scaled matrix."""
    if scaled.shape[1] == 0:
        return 1.0
    s = scipy.linalg.svdvals(scaled)
    if s[-1] == 0.0:
        return math.inf
    return float(s[0] / s[-1])


def _qr_core(design: LongArray, y: LongArray, sw: LongArray | None, tol: float) -> _QRFit:
    """Weighted least squares by pivoted QR on the centred, column-scaled design.

    Centring: if some column is constant (an intercept), every other column ``j`` is replaced by
    ``X_j - m_j`` with ``m_j`` its weighted mean. That is an invertible change of coordinates
    (it only moves the intercept), and it removes the near-collinearity between an intercept and
    columns far from zero (years, concentrations around 1e5), which is where most of the lost
    digits go otherwise. The intercept is restored afterwards, covariance included.

    Accuracy: the QR factorisation is done in float64 (LAPACK), then the solution is refined
    (``z += R^-1 Q^T (b - A z)``) with the residual computed in numpy's extended precision
    (``longdouble``; 80-bit on x86-64 Linux, equal to float64 on some platforms, where the
    refinement simply gains less). Because the scaled, centred design is far better conditioned
    than the raw one, each step gains many digits; the loop stops when the correction is below
    the extended-precision resolution or after a few steps.
    """
    n, p = design.shape
    w = np.ones(n, dtype=np.longdouble) if sw is None else sw * sw
    ptp = np.ptp(design, axis=0)
    const_cols = np.flatnonzero((ptp == 0) & (design[0] != 0))
    c0 = int(const_cols[0]) if const_cols.size else -1

    work = design.copy()
    means = np.zeros(p, dtype=np.longdouble)
    if c0 >= 0:
        means = (w @ design) / w.sum()
        means[c0] = 0
        work -= means  # broadcasting: each column minus its weighted mean (c0 untouched)
    a = work if sw is None else work * sw[:, None]
    b = y if sw is None else y * sw

    norms = np.sqrt(np.einsum("ij,ij->j", a, a))
    scale = np.where(norms > 0, norms, 1).astype(np.longdouble)  # zero column ranks last
    a_s = a / scale

    q, r, piv = scipy.linalg.qr(a_s.astype(np.float64), mode="economic", pivoting=True)
    diag = np.abs(np.diag(r))
    rank = int(np.count_nonzero(diag > tol * diag[0])) if diag.size and diag[0] > 0 else 0

    keep = piv[:rank]
    r11 = r[:rank, :rank]
    q1 = q[:, :rank]
    a_keep = a_s[:, keep]
    z = scipy.linalg.solve_triangular(r11, q1.T @ b.astype(np.float64)).astype(np.longdouble)
    resolution = float(np.finfo(np.longdouble).eps)

    def gradient(zz: LongArray) -> LongArray:
        g: LongArray = a_keep.T @ (b - a_keep @ zz)
        return g

    grad = gradient(z)
    grad_norm = float(np.max(np.abs(grad), initial=0.0))
    for _ in range(_MAX_REFINEMENTS if rank else 0):
        # Corrected semi-normal equations: the gradient A^T (b - A z) vanishes exactly at the
        # least-squares solution, however large the residual, so unlike Q^T (b - A z) it has no
        # rounding floor proportional to |b - A z|. Computed in extended precision, then
        # dz = R^-1 R^-T g. It converges when eps * cond(A_scaled)**2 << 1, which centring and
        # scaling make the usual case; a step is kept only if it shrinks the gradient, so on a
        # design too ill-conditioned for it the plain QR solution is returned.
        dz = scipy.linalg.solve_triangular(
            r11, scipy.linalg.solve_triangular(r11, grad.astype(np.float64), trans="T")
        )
        z_new = z + dz.astype(np.longdouble)
        grad_new = gradient(z_new)
        new_norm = float(np.max(np.abs(grad_new), initial=0.0))
        if not new_norm < grad_norm:
            break
        z, grad, grad_norm = z_new, grad_new, new_norm
        if float(np.max(np.abs(dz))) <= resolution * float(np.max(np.abs(z))):
            break

    coef_w = np.zeros(p, dtype=np.longdouble)
    coef_w[keep] = z / scale[keep]
    r11_inv = scipy.linalg.solve_triangular(r11, np.eye(rank))
    cov_s = r11_inv @ r11_inv.T
    scale64 = scale.astype(np.float64)
    cov_w = np.zeros((p, p))
    cov_w[np.ix_(keep, keep)] = cov_s / np.outer(scale64[keep], scale64[keep])

    fitted = work @ coef_w  # fitted values from the centred design: little cancellation
    if c0 >= 0:
        # Undo the centring: y = sum_j b'_j (X_j - m_j) + b'_c0 v  =>  b_c0 = b'_c0 - m.b'/v.
        v = design[0, c0]
        coef = coef_w.copy()
        coef[c0] = coef_w[c0] - (means @ coef_w) / v
        transform = np.eye(p)
        transform[c0, :] -= (means / v).astype(np.float64)
        cov = transform @ cov_w @ transform.T
    else:
        coef, cov = coef_w, cov_w

    undetermined = tuple(sorted(int(j) for j in piv[rank:]))
    if undetermined:
        idx = list(undetermined)
        cov[idx, :] = np.nan
        cov[:, idx] = np.nan
        coef[idx] = 0
    return _QRFit(coef=coef, cov_unscaled=cov, fitted=fitted, rank=rank, undetermined=undetermined)


def _finish(
    fit: _QRFit,
    y: FloatArray,
    w: FloatArray | None,
    condition: float,
    coef: FloatArray | None = None,
    cov_unscaled: FloatArray | None = None,
) -> LinearSolution:
    coef = fit.coef.astype(np.float64) if coef is None else coef
    cov_unscaled = fit.cov_unscaled if cov_unscaled is None else cov_unscaled
    n_coef = coef.shape[0]
    resid_ld = y.astype(np.longdouble) - fit.fitted
    wl = np.ones_like(resid_ld) if w is None else w.astype(np.longdouble)
    ssr = float((wl * resid_ld) @ resid_ld)
    residuals = resid_ld.astype(np.float64)
    dof = y.shape[0] - fit.rank
    sigma2 = ssr / dof
    cov = sigma2 * cov_unscaled
    with np.errstate(invalid="ignore"):
        stderr = np.sqrt(np.diag(cov))
    return LinearSolution(
        coef=coef,
        stderr=stderr,
        cov=cov,
        rank=fit.rank,
        n_coef=n_coef,
        condition=condition,
        ssr=ssr,
        dof=dof,
        sigma=math.sqrt(sigma2),
        fitted=fit.fitted.astype(np.float64),
        residuals=residuals,
        rank_deficient=fit.rank < n_coef,
        undetermined=fit.undetermined,
    )


def _scaled_condition(design: FloatArray, w: FloatArray | None) -> float:
    a = design if w is None else design * np.sqrt(w)[:, None]
    norms = np.sqrt(np.einsum("ij,ij->j", a, a))
    return _condition(a / np.where(norms > 0.0, norms, 1.0))


# ---------------------------------------------------------------------------------------------
# public API


def solve_linear(
    design: ArrayLike,
    y: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    rcond: float | None = None,
    column_names: Sequence[str] | None = None,
) -> LinearSolution:
    """Solve the linear least-squares problem ``min sum w_i (y_i - (design @ coef)_i)**2``.

    Accuracy: about ``eps * condition`` relative (less after the extended-precision refinement
    when the centred, scaled design is well conditioned). A polynomial design is far better
    served by :func:`solve_polynomial`, which never works in the power basis: at degree 10 on
    x in [-9, -3] this function keeps about 7 digits of the coefficients, that one all 15.

    Parameters
    ----------
    design : array_like, shape (n, n_coef)
        The design matrix, one row per point and one column per coefficient. Include a column of
        ones for an intercept; leave it out for a fit through the origin.
    y : array_like, shape (n,)
        Observations.
    weights : array_like, shape (n,), optional
        Positive weights, ``1/sigma_i**2`` style (rows are multiplied by ``sqrt(w)``). Treated as
        relative: the covariance is scaled by the estimated residual variance.
    rcond : float, optional
        Relative tolerance for the numerical rank: with the weighted, centred design scaled to
        unit column norms and factorised by column-pivoted QR, a column counts as determined when
        ``|R_ii| > rcond * |R_00|``. Default ``max(n, n_coef) * eps`` (common practice: the
        LAPACK / ``numpy.linalg.matrix_rank`` convention).
    column_names : sequence of str, optional
        Names of the columns, used in the rank-deficiency warning (default ``column 0``, ...).

    Returns
    -------
    LinearSolution

    Raises
    ------
    DataError
        Shapes do not match, values are not finite, weights are not positive, or there are not
        more points than coefficients.
    ParameterError
        ``rcond`` is not in [0, 1).

    Warns
    -----
    RankDeficiencyWarning
        When the design is numerically rank-deficient; the warning names the coefficients that
        the data do not determine (they are set to 0 with NaN standard errors, never dropped
        silently).
    """
    try:
        x = np.asarray(design, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise DataError(
            f"design must be numeric; it could not be converted to floating point ({exc})."
        ) from exc
    if x.ndim != 2:
        raise DataError(
            f"design must be a 2-D array of shape (n_points, n_coef); got shape {x.shape}. "
            "Stack the columns, e.g. numpy.column_stack([numpy.ones_like(t), t])."
        )
    n, p = x.shape
    if p == 0:
        raise DataError("design has no columns; give at least one column (coefficient).")
    yv = _as_float_vector(y, "y")
    if yv.shape[0] != n:
        raise DataError(
            f"y must have one value per design row: design has {n} rows, y has {yv.shape[0]} "
            "values. Check that both come from the same points."
        )
    if column_names is not None and len(column_names) != p:
        raise DataError(
            f"column_names must name each of the {p} design columns; got {len(column_names)}."
        )
    _check_finite(x, "design")
    _check_finite(yv, "y")
    w = _check_weights(weights, n)
    _check_enough_points(n, p)
    tol = _check_rcond(rcond, n, p)

    sw = None if w is None else np.sqrt(w.astype(np.longdouble))
    fit = _qr_core(x.astype(np.longdouble), yv.astype(np.longdouble), sw, tol)
    if fit.undetermined:
        names = list(column_names) if column_names is not None else None
        labels = [names[j] if names else f"column {j}" for j in fit.undetermined]
        warnings.warn(
            f"the design is numerically rank-deficient (rank {fit.rank} of {p} columns): the "
            f"data do not determine the coefficient(s) of {', '.join(labels)}. They are set to 0 "
            "and their standard errors are NaN; the other coefficients assume that choice. "
            "Remove the redundant column(s) or add data that separate them.",
            RankDeficiencyWarning,
            stacklevel=2,
        )
    return _finish(fit, yv, w, _scaled_condition(x, w))


def polynomial_design(x: ArrayLike, degree: int) -> FloatArray:
    """Plain power design: column ``j`` is ``x**j`` for ``j = 0 .. degree``.

    Parameters
    ----------
    x : array_like, shape (n,)
        Abscissae.
    degree : int
        Polynomial degree k >= 0; the design has k + 1 columns.

    Returns
    -------
    ndarray, shape (n, degree + 1)
    """
    k = _check_degree(degree)
    xv = _as_float_vector(x, "x")
    return np.vander(xv, k + 1, increasing=True)


def _power_of_two_at_least(value: float) -> float:
    return float(2.0 ** math.ceil(math.log2(value)))


def _basis_change(k: int, mid: float, half: float) -> list[list[Fraction]]:
    """Exact matrix B with plain coefficients ``c = B @ d`` for Chebyshev coefficients ``d``.

    ``sum_j d_j T_j(t)`` with ``t = (x - mid) / half``: first T_j -> powers of t (integer
    coefficients), then ``t**i = half**-i * sum_m binom(i, m) (-mid)**(i - m) x**m``.
    Both factors are upper triangular, and so is B.
    """
    # Integer power coefficients of T_j by the recurrence T_{j+1} = 2 t T_j - T_{j-1}.
    cheb_int: list[list[int]] = [[1], [0, 1]][: k + 1]
    while len(cheb_int) < k + 1:
        prev, cur = cheb_int[-2], cheb_int[-1]
        nxt = [0] + [2 * c for c in cur]
        for i, c in enumerate(prev):
            nxt[i] -= c
        cheb_int.append(nxt)
    cheb_to_t = [[Fraction(0)] * (k + 1) for _ in range(k + 1)]
    for j, poly in enumerate(cheb_int):
        for i, c in enumerate(poly):
            cheb_to_t[i][j] = Fraction(c)
    fm, fh = Fraction(mid), Fraction(half)
    t_to_x = [[Fraction(0)] * (k + 1) for _ in range(k + 1)]
    for i in range(k + 1):
        for m in range(i + 1):
            t_to_x[m][i] = math.comb(i, m) * (-fm) ** (i - m) / fh**i
    return [
        [
            sum((t_to_x[m][i] * cheb_to_t[i][j] for i in range(m, j + 1)), Fraction(0))
            for j in range(k + 1)
        ]
        for m in range(k + 1)
    ]


def solve_polynomial(
    x: ArrayLike,
    y: ArrayLike,
    degree: int,
    *,
    weights: ArrayLike | None = None,
) -> LinearSolution:
    """Fit ``y = c0 + c1 x + ... + ck x**k`` by least squares, keeping full accuracy.

    The fit is done in the Chebyshev basis of ``t = (x - mid) / h`` where ``mid`` is the centre
    of the x range and ``h`` the power of two at or above its half-width (a power of two so that
    the division is exact), by the same pivoted-QR solver as :func:`solve_linear`. The
    Chebyshev coefficients are converted to plain coefficients in exact rational arithmetic and
    the covariance is propagated by the triangular basis-change matrix ``B``: ``cov_c = B cov_d
    B.T``. Fitted values and residuals come from the Chebyshev form, so they do not suffer the
    cancellation that evaluating plain coefficients far from ``x = 0`` would.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Data.
    degree : int
        Polynomial degree k >= 0.
    weights : array_like, shape (n,), optional
        Positive weights, ``1/sigma_i**2`` style, treated as relative (see :func:`solve_linear`).

    Returns
    -------
    LinearSolution
        ``coef`` holds the plain coefficients ``c0 .. ck``; ``condition`` is that of the
        column-scaled plain power design.

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
        When the data cannot determine a polynomial of this degree (fewer distinct x values
        than coefficients, or x values too close together). The warning names the undetermined
        coefficients; the highest-degree ones are set to 0 and the polynomial of the highest
        degree the data support is fitted instead.
    """
    k = _check_degree(degree)
    xv = _as_float_vector(x, "x")
    yv = _as_float_vector(y, "y")
    if xv.shape[0] != yv.shape[0]:
        raise DataError(
            f"x and y must have the same length; got {xv.shape[0]} x values and {yv.shape[0]} "
            "y values. Check that both come from the same points."
        )
    n = xv.shape[0]
    _check_finite(xv, "x")
    _check_finite(yv, "y")
    w = _check_weights(weights, n)
    _check_enough_points(n, k + 1)
    tol = _check_rcond(None, n, k + 1)
    sw = None if w is None else np.sqrt(w.astype(np.longdouble))
    yl = yv.astype(np.longdouble)

    lo, hi = float(xv.min()), float(xv.max())
    mid = 0.5 * lo + 0.5 * hi  # written this way so it cannot overflow
    half_width = 0.5 * hi - 0.5 * lo
    half = _power_of_two_at_least(half_width) if half_width > 0.0 else 1.0
    # Extended precision for t and the basis so the refinement in _qr_core sees an accurate
    # design; half is a power of two, so the division adds no rounding.
    t = (xv.astype(np.longdouble) - np.longdouble(mid)) / np.longdouble(half)
    cheb = chebyshev.chebvander(t, k)

    fit = _qr_core(cheb, yl, sw, tol)
    rank = fit.rank
    if rank < k + 1:
        # Keep the polynomial of the highest degree the data support; T_0..T_{r-1} span the same
        # space as 1, x, ..., x**(r-1), so this is "the coefficients of x**r.. are undetermined".
        fit = _qr_core(cheb[:, :rank], yl, sw, tol)
        dropped = list(range(fit.rank, k + 1))
        n_distinct = int(np.unique(xv).size)
        warnings.warn(
            f"a polynomial of degree {k} is not determined by these data ({n_distinct} distinct "
            f"x value(s), numerical rank {fit.rank} of {k + 1}): the coefficient(s) of "
            f"{', '.join(f'x^{j}' for j in dropped)} are not determined. They are set to 0 "
            f"(a polynomial of degree {fit.rank - 1} was fitted) and their standard errors are "
            f"NaN. Lower the degree to {fit.rank - 1} or add data at new x values.",
            RankDeficiencyWarning,
            stacklevel=2,
        )
        fit = _QRFit(
            coef=np.concatenate([fit.coef, np.zeros(k + 1 - fit.coef.size, np.longdouble)]),
            cov_unscaled=_pad_nan(fit.cov_unscaled, k + 1),
            fitted=fit.fitted,
            rank=fit.rank,
            undetermined=tuple(dropped),
        )

    b_exact = _basis_change(k, mid, half)
    d_exact = [Fraction(*v.as_integer_ratio()) for v in fit.coef]
    coef = np.array(
        [
            float(sum((b_exact[m][j] * d_exact[j] for j in range(k + 1)), Fraction(0)))
            for m in range(k + 1)
        ]
    )
    b_float = np.array([[float(v) for v in row] for row in b_exact])
    det = [j for j in range(k + 1) if j not in fit.undetermined]
    cov_d = np.zeros((k + 1, k + 1))
    cov_d[np.ix_(det, det)] = fit.cov_unscaled[np.ix_(det, det)]
    cov_c = b_float @ cov_d @ b_float.T
    if fit.undetermined:
        idx = list(fit.undetermined)
        cov_c[idx, :] = np.nan
        cov_c[:, idx] = np.nan
    # Column scaling makes the condition number independent of the units of x, so the powers of
    # x / max|x| give the same number without overflowing for large x.
    xmax = float(np.max(np.abs(xv)))
    condition = _scaled_condition(np.vander(xv / (xmax or 1.0), k + 1, increasing=True), w)
    return _finish(fit, yv, w, condition, coef=coef, cov_unscaled=cov_c)


def _pad_nan(cov: FloatArray, size: int) -> FloatArray:
    out = np.full((size, size), np.nan)
    m = cov.shape[0]
    out[:m, :m] = cov
    return out
