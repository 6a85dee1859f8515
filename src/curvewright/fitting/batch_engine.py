"""The batch engine: one formula model fitted to many groups at once, and their statistics.

Its one job is the numerics of batch fitting: a Levenberg-Marquardt solver that advances every
group of a :class:`BatchProblem` together (numpy over the group axis), and the per-group
covariance, standard errors, flags and derived quantities at its solution, by the same rules
as the single fit (:mod:`.assemble`, :meth:`FitResult.derived`). Requests, validation of user
input, and result objects belong to the batch API built on top of it.

Interface
---------
:class:`BatchProblem`
    ``model`` (a formula model), padded ``x``, ``y``, ``mask`` (True = a real point) and
    ``sw`` (1/sigma, or None) of shape ``(G, N)``; ``free`` ``(P,)`` in ``model.param_names``
    order; ``start``, ``lower``, ``upper`` ``(G, P)``. :meth:`BatchProblem.from_groups` pads
    ragged groups and broadcasts per-parameter settings (``(P,)`` or ``(G, P)``; defaults: the
    model's values and bounds, every parameter free). ``groups`` and ``n`` (real points per
    group) are properties.
:func:`solve_batch(problem, *, max_iterations=200, cancel=None, kernel="auto")
<solve_batch>` -> :class:`BatchSolution`
    ``values (G, P)``, ``ssr (G,)``, ``evaluations (G,)``, ``iterations (G,)``,
    ``settled (G,)`` and ``reason`` (``""`` when settled, else one of "iteration limit",
    "non-finite model values at the start", "non-finite model values", "singular system",
    "start outside the bounds or not finite", "no more points than free parameters",
    "cancelled").
:func:`batch_statistics(problem, solution, *, absolute_sigma=False) <batch_statistics>`
    -> :class:`BatchStatistics`: ``n``, ``dof``, ``covariance (G, P, P)`` (NaN rows and
    columns for fixed parameters), ``stderr (G, P)``, ``condition``, ``singular``,
    ``near_singular``, ``max_correlation``, ``high_correlation``, ``at_lower``/``at_upper``/
    ``at_bound`` and ``not_identified`` ``(G, P)``, ``absolute_sigma``.
:func:`batch_derived(problem, solution, stats, level=0.95) <batch_derived>`
    -> ``{name: DerivedColumns(value, stderr, lower, upper, in_data_range)}``, each ``(G,)``
    (``in_data_range`` None for a quantity not on the x axis).

Method
------
Levenberg-Marquardt with Marquardt's diagonal scaling (the running maximum of ``diag(J'J)``,
as MINPACK), Nielsen's damping update, one damping factor per group. The model's value and
analytic Jacobian come from one call of its compiled code (``Model._value_and_gradient``) on
``(g, N)`` arrays with parameter columns ``(g, 1)``; a derivative that is not finite where the
value is (the 4PL's slope at a zero-dose control) is replaced by central differences, as the
single fit does. Two implementations run the same steps: numpy over the group axis (settled
groups leave the working set), and a compiled per-group loop (:mod:`.batch_kernel`, numba),
2-4 times faster; ``kernel="auto"`` takes the compiled one when it is available.

Bounds: the model is never evaluated outside them. A step that would cross a bound goes half
the way to it, so one long step cannot land on a bound where the model degenerates (a Hill
slope of 0); a parameter already within a millionth of its step from the bound is put on it,
and a parameter on a bound whose descent direction points outward is held for the step. A
minimum on a bound is thus reached exactly (where the single fit's bounded polish also ends);
one inside is the unconstrained minimum, which the single fit's MINPACK runs reach.

A group settles by MINPACK's three tests, tighter than its defaults because the single fit
polishes to machine precision: the scaled gradient cosine ``max |J_j' r| / (|J_j| |r|)`` below
``GTOL``; an accepted step with actual and predicted relative reductions below ``FTOL``; or a
scaled step below ``XTOL`` times the scaled parameters (also after a rejected step: no
representable step reduces the sum any more). A group that settles while its scaling is stale
(a running maximum over a thousand times the current curvature) starts again from there with
fresh scaling, as the single fit's polish restarts MINPACK. Points outside ``mask`` take no
part: their residuals and Jacobian rows are set to zero with ``np.where``, so whatever padding
values they hold (even NaN) never change an answer. A non-finite model value at a trial point
rejects the step (the damping grows), as the single fit's penalty does; at the start it ends
the group with a reason.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Literal, NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import DataError, ModelError, ParameterError
from ..inference import quantile
from ..models import Model
from ..numerics import column_support
from ..result import _power_of
from ..start import location_parameters
from ..thresholds import HIGH_CORRELATION, NEAR_SINGULAR, NOT_IDENTIFIED_RSE
from .batch_kernel import (
    STATUS,
    jacobian_kernel_for,
    kernel_for,
    normals_kernel_for,
    parallel_kernel_for,
    symmetric_inverse_for,
    threads,
)
from .problem import FloatArray

__all__ = [
    "FTOL",
    "GTOL",
    "XTOL",
    "BatchProblem",
    "BatchSolution",
    "BatchStatistics",
    "DerivedColumns",
    "batch_derived",
    "batch_statistics",
    "batch_support",
    "solve_batch",
]

BoolArray = NDArray[np.bool_]
IntArray = NDArray[np.int_]

#: Relative reduction of the sum of squares (actual and predicted) below which a group settles.
FTOL = 1e-14
#: Scaled step, relative to the scaled parameters, below which a group settles.
XTOL = 1e-10
#: Cosine between the residuals and any Jacobian column below which a group settles.
GTOL = 1e-10
# Damping at the start, relative to Marquardt's scaling: 0.1 found the same minimum as the single
# fit from far starts of peak models more often than 1e-3 or 1e-7 (measured on the catalog's
# test cases), at no cost in iterations elsewhere. A step is accepted when it achieves this
# fraction of its predicted reduction.
_LAMBDA0 = 0.1
_ACCEPT = 1e-4
# Damping beyond which no step can change the parameters: the group is at a minimum to
# machine precision (MINPACK's "no further reduction possible", counted as converged there).
_LAMBDA_MAX = 1e16
# A step blocked by a bound goes this fraction of the way; a parameter within this fraction of
# its step from the bound is put on it.
_BACK = 0.5
_SNAP = 1e-6
# A group that settles while some scaling exceeds its current curvature this many times starts
# again with fresh scaling, at most _RESTARTS times.
_STALE = 1e3
_RESTARTS = 10
_TINY = np.finfo(float).tiny
_EPS = float(np.finfo(float).eps)
# Below this condition number of the column-scaled Jacobian, the statistics take the
# eigenvalues of J'J instead of the SVD of J (see _scaled_inverse): error about 2e-10 relative.
_EIG_COND = 1e3


# ============================================================================ problem
@dataclass(frozen=True)
class BatchProblem:
    """Many groups, one formula model: padded data and per-group parameter settings.

    Attributes
    ----------
    model : Model
        A formula model (``model.expr`` is not None).
    x, y : ndarray, shape (G, N)
        Padded data; only points where ``mask`` is True take part.
    mask : ndarray of bool, shape (G, N)
        True for a real point of that group.
    sw : ndarray, shape (G, N), or None
        ``1/sigma`` per point; None when unweighted.
    free : ndarray of bool, shape (P,)
        Which parameters (in ``model.param_names`` order) are fitted; the others are held at
        ``start``.
    start, lower, upper : ndarray, shape (G, P)
        Every parameter's start (the value of a fixed one) and bounds (``-inf``/``inf`` where
        none).
    """

    model: Model
    x: FloatArray
    y: FloatArray
    mask: BoolArray
    sw: FloatArray | None
    free: BoolArray
    start: FloatArray
    lower: FloatArray
    upper: FloatArray

    def rows(self, idx: NDArray[np.intp]) -> BatchProblem:
        """The problem of groups ``idx`` only."""
        return BatchProblem(
            model=self.model,
            x=self.x[idx],
            y=self.y[idx],
            mask=self.mask[idx],
            sw=None if self.sw is None else self.sw[idx],
            free=self.free,
            start=self.start[idx],
            lower=self.lower[idx],
            upper=self.upper[idx],
        )

    def __post_init__(self) -> None:
        if self.model.expr is None:
            raise ModelError(
                "The batch engine needs a formula model (its derivatives are compiled); "
                f"{self.model.name!r} is a Python callable. Fit its groups one by one with fit()."
            )
        g, n = self.x.shape if self.x.ndim == 2 else (-1, -1)
        p = len(self.model.param_names)
        shapes = {"x": self.x, "y": self.y, "mask": self.mask}
        if self.sw is not None:
            shapes["sw"] = self.sw
        for name, a in shapes.items():
            if a.shape != (g, n):
                raise DataError(
                    f"{name} must have shape (groups, points) = {self.x.shape}, got {a.shape}."
                )
        for name, a in (("start", self.start), ("lower", self.lower), ("upper", self.upper)):
            if a.shape != (g, p):
                raise ParameterError(
                    f"{name} must have shape (groups, parameters) = ({g}, {p}), got {a.shape}."
                )
        if self.free.shape != (p,):
            raise ParameterError(f"free must have shape ({p},), got {self.free.shape}.")

    @property
    def groups(self) -> int:
        """The number of groups ``G``."""
        return int(self.x.shape[0])

    @property
    def n(self) -> IntArray:
        """Real points per group, shape (G,)."""
        out: IntArray = self.mask.sum(axis=1)
        return out

    @classmethod
    def from_groups(
        cls,
        model: Model,
        xs: Sequence[ArrayLike],
        ys: Sequence[ArrayLike],
        sws: Sequence[ArrayLike] | None = None,
        start: ArrayLike | None = None,
        free: ArrayLike | None = None,
        lower: ArrayLike | None = None,
        upper: ArrayLike | None = None,
    ) -> BatchProblem:
        """Pad ragged groups into one problem.

        Parameters
        ----------
        model : Model
            A formula model.
        xs, ys : sequence of 1-d array_like
            Each group's points (groups may differ in size).
        sws : sequence of 1-d array_like, optional
            Each group's ``1/sigma``; None when unweighted.
        start : array_like, shape (P,) or (G, P), optional
            Starts (values of fixed parameters); default the model's defaults.
        free : array_like of bool, shape (P,), optional
            Default: every parameter free.
        lower, upper : array_like, shape (P,) or (G, P), optional
            Bounds; default the model's own.

        Returns
        -------
        BatchProblem
            Padding repeats a group's first point with mask False (a value inside the model's
            domain, so padded columns compute quietly; they never count).
        """
        g = len(xs)
        if len(ys) != g or (sws is not None and len(sws) != g):
            raise DataError("xs, ys (and sws) must hold one array per group, the same number each.")
        cols = [np.asarray(v, dtype=float).ravel() for v in xs]
        rows_y = [np.asarray(v, dtype=float).ravel() for v in ys]
        lens = np.array([c.size for c in cols], dtype=int)
        for i, (a, b) in enumerate(zip(cols, rows_y, strict=True)):
            if a.size != b.size:
                raise DataError(f"group {i}: x has {a.size} points but y has {b.size}.")
        n = int(lens.max()) if g else 0
        mask = np.arange(n)[None, :] < lens[:, None]
        x = np.zeros((g, n))
        y = np.zeros((g, n))
        sw = None if sws is None else np.ones((g, n))
        for i in range(g):
            k = lens[i]
            fill = cols[i][0] if k else 1.0
            x[i, :k], x[i, k:] = cols[i], fill
            y[i, :k], y[i, k:] = rows_y[i], rows_y[i][0] if k else 0.0
            if sw is not None and sws is not None:
                s = np.asarray(sws[i], dtype=float).ravel()
                if s.size != k:
                    raise DataError(f"group {i}: sws has {s.size} entries but x has {k}.")
                sw[i, :k] = s
        p = len(model.param_names)
        params = model.params

        def per_group(v: ArrayLike | None, default: list[float], name: str) -> FloatArray:
            a = np.asarray(default if v is None else v, dtype=float)
            try:
                out: FloatArray = np.array(np.broadcast_to(a, (g, p)), dtype=float)
            except ValueError:
                raise ParameterError(
                    f"{name} must have shape ({p},) or ({g}, {p}), got {a.shape}."
                ) from None
            return out

        fr = np.ones(p, dtype=bool) if free is None else np.asarray(free, dtype=bool)
        return cls(
            model=model,
            x=x,
            y=y,
            mask=mask,
            sw=sw,
            free=fr,
            start=per_group(start, [q.value for q in params], "start"),
            lower=per_group(lower, [q.lower for q in params], "lower"),
            upper=per_group(upper, [q.upper for q in params], "upper"),
        )


@dataclass(frozen=True)
class BatchSolution:
    """Where the solver left each group.

    Attributes
    ----------
    values : ndarray, shape (G, P)
        Every parameter (fixed ones at their value).
    ssr : ndarray, shape (G,)
        Weighted sum of squares at ``values`` (NaN where it is not available).
    evaluations : ndarray of int, shape (G,)
        Model evaluations (value and Jacobian together count as one).
    iterations : ndarray of int, shape (G,)
    settled : ndarray of bool, shape (G,)
        The group met one of the convergence tests.
    reason : tuple of str
        Per group: ``""`` when settled, else a short plain reason.
    """

    values: FloatArray
    ssr: FloatArray
    evaluations: IntArray
    iterations: IntArray
    settled: BoolArray
    reason: tuple[str, ...]


# ============================================================================ evaluation
def _evaluate(
    grad: Callable[..., tuple[Any, ...]],
    x: FloatArray,
    theta: FloatArray,
    p: int,
) -> tuple[FloatArray, FloatArray]:
    """The model ``(g, N)`` and its Jacobian ``(g, P, N)`` at parameter rows ``theta``."""
    out = grad(x, *(theta[:, j : j + 1] for j in range(p)))
    f = np.empty(x.shape)
    f[...] = out[0]  # a formula without x gives a number: broadcast
    jac = np.empty((x.shape[0], p, x.shape[1]))
    for j in range(p):
        jac[:, j, :] = out[j + 1]
    return f, jac


def _patch_jacobian(
    model: Model,
    x: FloatArray,
    theta: FloatArray,
    f: FloatArray,
    jac: FloatArray,
    lo: FloatArray,
    hi: FloatArray,
    real: BoolArray,
) -> None:
    """Replace, in place, Jacobian columns that are not finite where the model value is.

    As the single fit does (``numerics.free_jacobian``): e.g. d/dlog_ic50 of the 4PL at a
    zero-dose control is ``inf * 0`` analytically but the curve is flat there; central
    differences (one-sided at a bound) give the limit, and a difference that is not finite
    either becomes 0. The check is one pass; the differences touch only the bad points.
    """
    bad = real & np.isfinite(f) & ~np.all(np.isfinite(jac), axis=1)
    if not bad.any():
        return
    gi, ni = np.nonzero(bad)
    xs = x[gi, ni]
    th = theta[gi]
    p = th.shape[1]
    base = _EPS ** (1.0 / 3.0)
    func = model.func
    f0 = f[gi, ni]
    for j in range(p):
        t = th[:, j]
        h = base * np.maximum(np.maximum(np.abs(t), 1.0e-8 * (1.0 + np.abs(t))), 1e-300)
        can_up = t + h <= hi[gi, j]
        can_dn = t - h >= lo[gi, j]
        up, dn = th.copy(), th.copy()
        up[:, j] = np.where(can_up, t + h, t)
        dn[:, j] = np.where(can_dn, t - h, t)
        fu = np.asarray(func(xs, *up.T), dtype=float)
        fd = np.asarray(func(xs, *dn.T), dtype=float)
        width = np.where(can_up, h, 0.0) + np.where(can_dn, h, 0.0)
        fu = np.where(can_up, fu, f0)
        fd = np.where(can_dn, fd, f0)
        with np.errstate(all="ignore"):
            d = (fu - fd) / width
        jac[gi, j, ni] = np.where(np.isfinite(d), d, 0.0)


def _residuals(
    f: FloatArray, jac: FloatArray, y: FloatArray, wt: FloatArray, real: BoolArray
) -> tuple[FloatArray, FloatArray, FloatArray, BoolArray]:
    """Weighted residuals, weighted Jacobian, sum of squares and finiteness per group."""
    r = np.where(real, (y - f) * wt, 0.0)
    jw = np.where(real[:, None, :], jac * wt[:, None, :], 0.0)
    ssr = np.einsum("gn,gn->g", r, r)
    ok = np.isfinite(ssr) & np.all(np.isfinite(jw), axis=(1, 2))
    return r, jw, ssr, ok


def _solve_systems(m: FloatArray, rhs: FloatArray) -> tuple[FloatArray, BoolArray]:
    """Solve the stack ``m @ d = rhs``; rows that are singular or not finite give NaN, False."""
    good = np.all(np.isfinite(m), axis=(1, 2)) & np.all(np.isfinite(rhs), axis=1)
    d = np.full(rhs.shape, np.nan)
    if not good.any():
        return d, good
    try:
        d[good] = np.linalg.solve(m[good], rhs[good][..., None])[..., 0]
    except np.linalg.LinAlgError:
        # one of them is singular: solve one by one so the others are unaffected
        for i in np.flatnonzero(good):
            try:
                d[i] = np.linalg.solve(m[i], rhs[i])
            except np.linalg.LinAlgError:
                good[i] = False
    good &= np.all(np.isfinite(d), axis=1)
    return d, good


# ============================================================================ solver
# Groups per call of the compiled kernel (cancel is polled between calls) and per numpy run.
_CHUNK = 8192
# From this many groups in a call, the compiled kernel runs on all of numba's threads (same
# answers; below it, starting the threads costs more than it saves).
_PARALLEL_FROM = 512


def _run_compiled(
    run: Callable[..., None],
    prob: BatchProblem,
    idx: IntArray,
    values: FloatArray,
    ssr_out: FloatArray,
    evals: IntArray,
    iters: IntArray,
    settled: BoolArray,
    reason: list[str],
    max_iterations: int,
    cancel: Callable[[], bool] | None,
) -> None:
    """Solve the groups ``idx`` with the compiled kernel, in chunks, filling the outputs."""
    free = np.ascontiguousarray(prob.free, dtype=np.bool_)
    par = parallel_kernel_for(prob.model) if threads() > 1 else None
    for c0 in range(0, idx.size, _CHUNK):
        part = idx[c0 : c0 + _CHUNK]
        if cancel is not None and cancel():
            for i in idx[c0:]:
                reason[i] = "cancelled"
            return
        x = np.ascontiguousarray(prob.x[part], dtype=float)
        wt = np.ones_like(x) if prob.sw is None else np.ascontiguousarray(prob.sw[part])
        th = np.ascontiguousarray(values[part], dtype=float)
        k = part.size
        ssr = np.full(k, np.nan)
        ev = np.zeros(k, dtype=np.int64)
        it = np.zeros(k, dtype=np.int64)
        st = np.zeros(k, dtype=np.int64)
        args = (
            x,
            np.ascontiguousarray(prob.y[part], dtype=float),
            wt,
            np.ascontiguousarray(prob.mask[part], dtype=np.bool_),
            free,
            th,
            np.ascontiguousarray(prob.lower[part], dtype=float),
            np.ascontiguousarray(prob.upper[part], dtype=float),
            int(max_iterations),
            FTOL,
            XTOL,
            GTOL,
            _LAMBDA0,
            _ACCEPT,
            _LAMBDA_MAX,
            _BACK,
            _SNAP,
            _STALE,
            _RESTARTS,
            ssr,
            ev,
            it,
            st,
        )
        with np.errstate(all="ignore"):
            if par is not None and k >= _PARALLEL_FROM:
                try:
                    par(*args)
                except Exception:  # no threading layer, or numba refused: stay serial
                    par = None
                    th[:] = values[part]
            if par is None or k < _PARALLEL_FROM:
                run(*args)
        values[part] = th
        ssr_out[part] = ssr
        evals[part] = ev
        iters[part] = it
        settled[part] = st == 0
        for i, code, n_it in zip(part.tolist(), st.tolist(), it.tolist(), strict=True):
            if code == 2 and n_it == 0:
                reason[i] = "non-finite model values at the start"
            elif code:
                reason[i] = STATUS[code]


def _bounded_step(
    theta: FloatArray, delta: FloatArray, lo: FloatArray, hi: FloatArray
) -> FloatArray:
    """The trial point of a step that must stay within the bounds.

    A step that would cross a bound goes half the way to it (the other parameters then adjust
    before the next step, so one large step cannot jump onto a bound where the model is
    degenerate, e.g. a Hill slope of 0); a parameter already so close that the step wants to
    go a million times further is put on the bound, where the active set then holds it.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        room = np.where(delta > 0, hi - theta, np.where(delta < 0, lo - theta, np.inf))
        frac = np.where(delta != 0, room / delta, np.inf)  # >= 0: the fraction to the bound
    snap = (frac < 1.0) & (frac <= _SNAP)
    frac = np.where(snap, np.inf, frac)
    alpha = np.minimum(1.0, _BACK * np.min(frac, axis=1, initial=np.inf))
    trial = theta + alpha[:, None] * delta
    trial = np.where(snap, np.where(delta > 0, hi, lo), trial)
    out: FloatArray = np.clip(trial, lo, hi)
    return out


def _run_numpy(
    prob: BatchProblem,
    idx: IntArray,
    values: FloatArray,
    ssr_out: FloatArray,
    evals: IntArray,
    iters: IntArray,
    settled: BoolArray,
    reason: list[str],
    max_iterations: int,
    cancel: Callable[[], bool] | None,
) -> bool:
    """Solve the groups ``idx`` together in numpy, filling the outputs; True if cancelled."""
    model = prob.model
    grad = model._value_and_gradient
    assert grad is not None  # BatchProblem refuses callables
    P = prob.start.shape[1]
    free = np.asarray(prob.free, dtype=bool)
    cancelled = False
    x = prob.x[idx]
    y = prob.y[idx]
    real = prob.mask[idx]
    wt = np.ones_like(x) if prob.sw is None else prob.sw[idx]
    lo = prob.lower[idx]
    hi = prob.upper[idx]
    theta = values[idx]
    with np.errstate(all="ignore"):
        f, jac = _evaluate(grad, x, theta, P)
        _patch_jacobian(model, x, theta, f, jac, lo, hi, real)
        r, jw, ssr, ok = _residuals(f, jac, y, wt, real)
    evals[idx] = 1
    ssr_out[idx] = ssr
    for i in idx[~ok]:
        reason[i] = "non-finite model values at the start"
    keep = ok
    held = ~free  # fixed parameters: never stepped
    lam = np.full(idx.size, _LAMBDA0)
    nu = np.full(idx.size, 2.0)
    scale = np.zeros((idx.size, P))
    restarts = np.zeros(idx.size, dtype=int)

    def compact(k: BoolArray) -> None:
        nonlocal idx, x, y, real, wt, lo, hi, theta, r, jw, ssr, lam, nu, scale, restarts
        idx, x, y, real, wt, lo, hi = idx[k], x[k], y[k], real[k], wt[k], lo[k], hi[k]
        theta, r, jw, ssr, lam, nu, scale = theta[k], r[k], jw[k], ssr[k], lam[k], nu[k], scale[k]
        restarts = restarts[k]

    compact(keep)
    eye = np.eye(P)
    for _ in range(max_iterations):
        if idx.size == 0:
            break
        if cancel is not None and cancel():
            for i in idx:
                reason[i] = "cancelled"
            cancelled = True
            break
        iters[idx] += 1
        with np.errstate(all="ignore"):
            a = jw @ jw.transpose(0, 2, 1)  # J'J, (g, P, P)
            g = np.einsum("gpn,gn->gp", jw, r)  # J'r: the step direction's right-hand side
            diag = np.einsum("gpp->gp", a)
            scale = np.maximum(scale, diag)
            # A parameter on a bound whose descent direction points outward is held this step.
            frozen = held[None, :] | ((theta <= lo) & (g <= 0.0)) | ((theta >= hi) & (g >= 0.0))
            cos = np.abs(g) / np.sqrt(diag * ssr[:, None])
            cos = np.where(frozen | (diag == 0.0), 0.0, cos)
            done_g = (np.max(cos, axis=1, initial=0.0) <= GTOL) | (ssr == 0.0)
            d = np.where(frozen, 1.0, np.maximum(scale, _TINY))
            m = np.where(frozen[:, :, None] | frozen[:, None, :], 0.0, a)
            m = m + eye * (np.where(frozen, 1.0, lam[:, None] * d))[:, None, :]
            rhs = np.where(frozen, 0.0, g)
            delta, solved = _solve_systems(m, rhs)
            delta = np.where(solved[:, None], delta, 0.0)
            trial = _bounded_step(theta, delta, lo, hi)
            trial = np.where(held[None, :], theta, trial)
            s = trial - theta
            pred = 2.0 * np.einsum("gp,gp->g", s, g) - np.einsum("gp,gpq,gq->g", s, a, s)
            f_t, jac_t = _evaluate(grad, x, trial, P)
            _patch_jacobian(model, x, trial, f_t, jac_t, lo, hi, real)
            r_t, jw_t, ssr_t, ok_t = _residuals(f_t, jac_t, y, wt, real)
            evals[idx] += ~done_g
            act = ssr - ssr_t
            rho = np.where(pred > 0, act / pred, -1.0)
            accept = ok_t & solved & ~done_g & (rho > _ACCEPT)
            sd = np.sqrt(d)
            xnorm = np.linalg.norm(sd * theta, axis=1)
            snorm = np.linalg.norm(sd * s, axis=1)
            small_step = snorm <= XTOL * xnorm
            done_f = accept & (lam <= 1.0) & (np.abs(act) <= FTOL * ssr) & (pred <= FTOL * ssr)
        # Nielsen's update of the damping
        t = 2.0 * rho - 1.0
        lam = np.where(accept, lam * np.maximum(1.0 / 3.0, 1.0 - t * t * t), lam * nu)
        nu = np.where(accept, 2.0, nu * 2.0)
        theta = np.where(accept[:, None], trial, theta)
        r = np.where(accept[:, None], r_t, r)
        jw = np.where(accept[:, None, None], jw_t, jw)
        ssr = np.where(accept, ssr_t, ssr)
        # A step too small to matter ends the group when the point it tried was computable.
        done_x = small_step & (accept | (ok_t & solved))
        stuck = lam > _LAMBDA_MAX
        done = done_g | done_f | done_x | stuck
        # A scaling frozen from early iterations (a running maximum far above the curvature
        # now) can stall a run along a long valley, e.g. a 5PL asymmetry drifting to infinity;
        # such a group starts again from where it stopped with fresh scaling and damping, as
        # the single fit's polish restarts MINPACK.
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(frozen | (diag <= 0), 1.0, scale / diag)
        again = (done_f | done_x) & (np.max(ratio, axis=1) > _STALE) & (restarts < _RESTARTS)
        if again.any():
            restarts += again
            scale = np.where(again[:, None], 0.0, scale)
            lam = np.where(again, _LAMBDA0, lam)
            nu = np.where(again, 2.0, nu)
            done &= ~again
        if done.any():
            fin = idx[done]
            values[fin] = theta[done]
            ssr_out[fin] = ssr[done]
            settled[fin] = True
            bad = stuck & ~(done_g | done_f | done_x) & ~(ok_t & solved)
            for i, why in zip(idx[bad], np.where(~ok_t[bad], 1, 0), strict=True):
                settled[i] = False
                reason[i] = "non-finite model values" if why else "singular system"
            compact(~done)
    # Whatever is left stopped on the iteration limit (or cancel).
    values[idx] = theta
    ssr_out[idx] = ssr
    for i in idx:
        if not reason[i]:
            reason[i] = "iteration limit"
    return cancelled


def solve_batch(
    problem: BatchProblem,
    *,
    max_iterations: int = 200,
    cancel: Callable[[], bool] | None = None,
    kernel: Literal["auto", "compiled", "numpy"] = "auto",
) -> BatchSolution:
    """Fit every group of ``problem`` by Levenberg-Marquardt, all groups advancing together.

    Parameters
    ----------
    problem : BatchProblem
    max_iterations : int
        Limit on iterations per group (each evaluates the model once).
    cancel : callable, optional
        Polled once per iteration (numpy) or per chunk of groups (compiled); when it returns
        True the groups still working stop with the reason ``"cancelled"``, at their best
        point so far (numpy) or at their start (compiled chunks not yet run).
    kernel : {"auto", "compiled", "numpy"}
        ``"compiled"`` runs the same algorithm per group in code compiled by numba
        (:mod:`.batch_kernel`), far faster, and from 512 groups on numba's threads (the same
        answers bit for bit; ``NUMBA_NUM_THREADS=1`` keeps it on one); ``"numpy"`` advances
        all groups together in numpy; ``"auto"`` takes the compiled kernel when numba is
        installed and compiles the model, else numpy. ``"compiled"`` without numba raises.

    Returns
    -------
    BatchSolution
    """
    prob = problem
    model = prob.model
    G = prob.start.shape[0]
    values = np.array(prob.start, dtype=float)
    ssr_out = np.full(G, np.nan)
    evals = np.zeros(G, dtype=int)
    iters = np.zeros(G, dtype=int)
    settled = np.zeros(G, dtype=bool)
    reason = [""] * G
    if G == 0:
        return BatchSolution(values, ssr_out, evals, iters, settled, ())
    free = np.asarray(prob.free, dtype=bool)
    nfree = int(free.sum())
    npts = prob.n

    start_ok = np.all(
        (values >= prob.lower) & (values <= prob.upper) | ~free[None, :], axis=1
    ) & np.all(np.isfinite(values), axis=1)
    for i in np.flatnonzero(~start_ok):
        reason[i] = "start outside the bounds or not finite"
    few = npts <= nfree
    for i in np.flatnonzero(few & start_ok):
        reason[i] = "no more points than free parameters"

    # The working set, compacted as groups finish: global index and per-group arrays.
    idx = np.flatnonzero(start_ok & ~few)
    run = None if kernel == "numpy" else kernel_for(model)
    if kernel == "compiled" and run is None:
        raise ModelError(
            "kernel='compiled' needs numba (pip install numba) and a model it can compile; "
            "use kernel='auto' to fall back to numpy."
        )
    if run is not None:
        try:
            _run_compiled(
                run,
                prob,
                idx,
                values,
                ssr_out,
                evals,
                iters,
                settled,
                reason,
                max_iterations,
                cancel,
            )
        except Exception as exc:  # numba's compile errors come at the first call, of many types
            if kernel == "compiled":
                raise ModelError(
                    f"numba could not compile the batch kernel of this model: {exc}"
                ) from exc
            run = None  # the numpy path below starts again from the starts
            values[idx] = prob.start[idx]
        else:
            values[:, ~free] = prob.start[:, ~free]
            return BatchSolution(values, ssr_out, evals, iters, settled, tuple(reason))
    # The numpy path in chunks: bounded memory (arrays of shape (chunk, P, N)), and each
    # chunk's working set shrinks as its groups settle.
    for c0 in range(0, idx.size, _CHUNK):
        if _run_numpy(
            prob, idx[c0 : c0 + _CHUNK], values, ssr_out, evals, iters, settled, reason,
            max_iterations, cancel,
        ):  # fmt: skip
            for i in idx[c0 + _CHUNK :]:
                reason[i] = "cancelled"
            break
    values[:, ~free] = prob.start[:, ~free]
    return BatchSolution(values, ssr_out, evals, iters, settled, tuple(reason))


# ============================================================================ statistics
@dataclass(frozen=True)
class BatchStatistics:
    """Per-group covariance, standard errors and flags at a batch solution (as the single fit).

    Attributes
    ----------
    n, dof : ndarray of int, shape (G,)
        Real points and residual degrees of freedom (``n - free``).
    covariance : ndarray, shape (G, P, P)
        ``scale * (Jw' Jw)^-1`` over the free parameters (``scale = ssr/dof``, or 1 with
        ``absolute_sigma``), from the column-scaled Jacobian as the single fit (see
        ``_scaled_inverse``); NaN rows and columns for fixed parameters, all NaN where singular.
    stderr : ndarray, shape (G, P)
        NaN for fixed parameters.
    condition : ndarray, shape (G,)
        Condition number of the column-scaled weighted Jacobian.
    singular, near_singular : ndarray of bool, shape (G,)
        Singular covariance; condition above ``thresholds.NEAR_SINGULAR``.
    max_correlation : ndarray, shape (G,)
        Largest ``|r|`` between two free parameters (NaN with fewer than two or singular).
    high_correlation : ndarray of bool, shape (G,)
        ``max_correlation > thresholds.HIGH_CORRELATION``.
    correlated : ndarray of bool, shape (G, P)
        The free parameters in a pair with ``|r| > thresholds.HIGH_CORRELATION`` (the names a
        reason gives, as the single fit names each pair).
    at_lower, at_upper, at_bound : ndarray of bool, shape (G, P)
        A free parameter at (within ``1e-8`` relative of) a finite bound.
    not_identified : ndarray of bool, shape (G, P)
        ``stderr > thresholds.NOT_IDENTIFIED_RSE * |value|``.
    absolute_sigma : bool
    support : ndarray, shape (G, P)
        How many points carry each free parameter's column of the weighted Jacobian (the
        participation ratio ``(sum J**2)**2 / sum J**4``, as the single fit's thin-support
        check); NaN for fixed parameters and where the column is not finite.
    """

    n: IntArray
    dof: IntArray
    covariance: FloatArray
    stderr: FloatArray
    condition: FloatArray
    singular: BoolArray
    near_singular: BoolArray
    max_correlation: FloatArray
    high_correlation: BoolArray
    correlated: BoolArray
    at_lower: BoolArray
    at_upper: BoolArray
    at_bound: BoolArray
    not_identified: BoolArray
    absolute_sigma: bool
    support: FloatArray


def _x_spans(prob: BatchProblem, where: str) -> FloatArray:
    """Each group's extent along x (log10 decades for ``"log"``), or along y for ``"y"``.

    NaN for a group with fewer than two points.
    """
    if where == "y":
        ok = prob.mask & np.isfinite(prob.y)
        hi = np.where(ok, prob.y, -np.inf).max(axis=1)
        lo = np.where(ok, prob.y, np.inf).min(axis=1)
        yspan: FloatArray = np.where(ok.sum(axis=1) >= 2, hi - lo, np.nan)
        return yspan
    ok = prob.mask & np.isfinite(prob.x)
    if where == "log":
        ok &= prob.x > 0
        with np.errstate(divide="ignore", invalid="ignore"):
            xv = np.log10(np.where(ok, prob.x, 1.0))
    else:
        xv = prob.x
    hi = np.where(ok, xv, -np.inf).max(axis=1)
    lo = np.where(ok, xv, np.inf).min(axis=1)
    span: FloatArray = np.where(ok.sum(axis=1) >= 2, hi - lo, np.nan)
    return span


def _kernel_inputs(prob: BatchProblem, vals: FloatArray) -> tuple[NDArray[Any], ...]:
    """``X, Y, W, M, TH, LO, HI`` as the compiled kernels take them, C-contiguous.

    ``W`` is 1 everywhere without weights.
    """
    wt = np.ones_like(prob.x) if prob.sw is None else prob.sw
    pairs = (
        (prob.x, float), (prob.y, float), (wt, float), (prob.mask, np.bool_), (vals, float),
        (prob.lower, float), (prob.upper, float),
    )  # fmt: skip
    return tuple(np.ascontiguousarray(a, dtype=t) for a, t in pairs)


def _weighted_jacobian(prob: BatchProblem, vals: FloatArray) -> FloatArray:
    """``w * df/dp`` at ``vals``, shape (G, N, P), 0 outside the mask (non-finite kept).

    The compiled evaluation when numba serves the model (several times faster), else numpy;
    both patch a non-finite derivative by the same rule (:func:`_patch_jacobian`).
    """
    G, N = prob.x.shape
    P = vals.shape[1]
    run = jacobian_kernel_for(prob.model) if G else None
    if run is not None:
        jw = np.empty((G, N, P))
        try:
            with np.errstate(all="ignore"):
                run(
                    *_kernel_inputs(prob, vals),
                    jw,
                    np.empty((G, N)),
                    np.empty(G),
                )
        except Exception:  # numba refused the model at its first call: numpy below
            pass
        else:
            return jw
    grad = prob.model._value_and_gradient
    assert grad is not None  # BatchProblem refuses callables
    with np.errstate(all="ignore"):
        f, jac = _evaluate(grad, prob.x, vals, P)
        _patch_jacobian(prob.model, prob.x, vals, f, jac, prob.lower, prob.upper, prob.mask)
        out: FloatArray = np.where(
            prob.mask[:, :, None],
            (jac if prob.sw is None else jac * prob.sw[:, None, :]).transpose(0, 2, 1),
            0.0,
        )
    return out


def _scaled_inverse(a: FloatArray, n: IntArray) -> tuple[FloatArray, FloatArray, BoolArray]:
    """``(A'A)^-1``, the condition number of ``A`` and the singular test, per group.

    ``a`` (g, N, p) is the column-scaled weighted Jacobian. The test and the condition are
    those of :func:`.assemble._covariance` (the SVD of ``A``). Most groups are well
    conditioned; for them the eigenvalues of the small ``A'A`` (``p x p``, stacked) give the
    same numbers, several times faster: its eigenvalues are the squared singular values of
    ``A``, computed to ``eps * s_max**2``, so below a condition of ``_EIG_COND`` the condition
    and the inverse agree with the SVD's to about ``eps * _EIG_COND**2`` relative, and both
    tests (singular; ``NEAR_SINGULAR``) are false either way. The other groups take the SVD.
    """
    m = a.transpose(0, 2, 1) @ a
    lam = np.linalg.eigvalsh(m)  # ascending
    fast = lam[:, 0] > lam[:, -1] / _EIG_COND**2
    g, p = a.shape[0], a.shape[2]
    inv = np.empty((g, p, p))
    cond = np.empty(g)
    sing = np.zeros(g, dtype=bool)
    if fast.any():
        inv[fast] = np.linalg.inv(m[fast])
        cond[fast] = np.sqrt(lam[fast, -1] / lam[fast, 0])
    slow = ~fast
    if slow.any():
        _, s, vt = np.linalg.svd(a[slow], full_matrices=False)
        with np.errstate(divide="ignore", invalid="ignore"):
            cond_s = s[:, 0] / s[:, -1]
            inv[slow] = (vt.transpose(0, 2, 1) / s[:, None, :] ** 2) @ vt
        cond[slow] = np.where(s[:, -1] > 0, cond_s, np.inf)
        sing[slow] = ~(s[:, -1] > s[:, 0] * _EPS * np.maximum(n[slow], p))
    return inv, cond, sing


def _supports(jw: FloatArray) -> FloatArray:
    """How many points carry each group's columns of ``jw`` (g, N, p).

    :func:`~curvewright.numerics.column_support`, with NaN (not judged) for a column that is
    not finite, as the single fit does.
    """
    out = column_support(jw)
    out[~np.all(np.isfinite(jw), axis=1)] = np.nan
    return out


def _compiled_normals(
    prob: BatchProblem, vals: FloatArray, fi: NDArray[np.intp]
) -> tuple[FloatArray, FloatArray, BoolArray, FloatArray] | None:
    """The compiled ``normals`` kernel at ``vals``: ``(norms, mat, ok, support)``, or None.

    See :func:`~.batch_kernel.normals_kernel_for`; None without numba, or where it refuses
    the model.
    """
    G, p = vals.shape[0], fi.size
    normals = normals_kernel_for(prob.model) if G else None
    if normals is None:
        return None
    norms, mat, ok = np.zeros((G, p)), np.zeros((G, p, p)), np.zeros(G, dtype=np.bool_)
    support = np.zeros((G, p))
    try:
        with np.errstate(all="ignore"):
            normals(
                *_kernel_inputs(prob, vals),
                np.ascontiguousarray(fi, dtype=np.int64),
                norms,
                mat,
                ok,
                support,
            )
    except Exception:  # numba refused the model at its first call: numpy instead
        return None
    return norms, mat, ok, support


def _compiled_inverse(
    prob: BatchProblem, vals: FloatArray, fi: NDArray[np.intp]
) -> tuple[BoolArray, FloatArray, FloatArray, FloatArray, FloatArray] | None:
    """``(A'A)^-1`` of the column-scaled weighted Jacobian ``A`` in compiled code, or None.

    Returns ``(done, inv, norms, cond, support)``: ``done`` marks the groups whose Jacobian
    is finite, with no zero column, and whose condition number is below ``_EIG_COND``; for
    them ``inv``, the column ``norms`` and ``cond`` are those :func:`_scaled_inverse` gives
    (its fast branch, to about ``eps * _EIG_COND**2`` relative). ``support`` (G, p), for every
    group, is :func:`_supports` of the free columns. None without numba.
    """
    G, p = vals.shape[0], fi.size
    invert = symmetric_inverse_for(prob.model) if G else None
    built = _compiled_normals(prob, vals, fi) if invert is not None else None
    if invert is None or built is None:
        return None
    norms, mat, ok, support = built
    inv, lmin, lmax = np.zeros((G, p, p)), np.zeros(G), np.zeros(G)
    try:
        with np.errstate(all="ignore"):
            invert(mat, inv, lmin, lmax)
    except Exception:  # numba refused the kernel at its first call: numpy instead
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        done = ok & (lmin > lmax / _EIG_COND**2) & (lmin > 0)
        cond = np.sqrt(lmax / lmin)
    return done, inv, norms, cond, support


def batch_support(problem: BatchProblem, values: FloatArray) -> FloatArray:
    """How many points carry each free parameter's Jacobian column at ``values``, per group.

    The participation ratio of :attr:`BatchStatistics.support` (the single fit's thin-support
    rule), at any point, such as the user's starts; shape (G, P), NaN for fixed parameters.
    """
    fi = np.flatnonzero(np.asarray(problem.free, dtype=bool))
    out = np.full(values.shape, np.nan)
    if not fi.size or not values.shape[0]:
        return out
    built = _compiled_normals(problem, values, fi)
    if built is not None:
        out[:, fi] = built[3]
    else:
        out[:, fi] = _supports(_weighted_jacobian(problem, values)[:, :, fi])
    return out


def batch_statistics(
    problem: BatchProblem, solution: BatchSolution, *, absolute_sigma: bool = False
) -> BatchStatistics:
    """Covariance, standard errors and diagnostic flags of every group at ``solution``.

    The same rules as :mod:`.assemble` (``_covariance``, ``_diagnostics``), vectorised.

    Parameters
    ----------
    problem : BatchProblem
    solution : BatchSolution
    absolute_sigma : bool
        Take sigma as exact (the covariance is not scaled by the residual variance).

    Returns
    -------
    BatchStatistics
    """
    prob = problem
    grad = prob.model._value_and_gradient
    if grad is None:  # pragma: no cover - BatchProblem refuses callables
        raise ModelError("The batch engine needs a formula model.")
    G, P = prob.start.shape
    free = np.asarray(prob.free, dtype=bool)
    fi = np.flatnonzero(free)
    p = fi.size
    n = prob.n
    dof = n - p
    vals = solution.values
    support = np.full((G, P), np.nan)
    cov_f = np.full((G, p, p), np.nan)
    cond = np.full(G, np.inf)
    singular = np.ones(G, dtype=bool)
    if p == 0:
        cond[:] = 1.0
        singular[:] = False
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            sc_all = np.ones(G) if absolute_sigma else np.where(dof > 0, solution.ssr / dof, np.nan)
        # Compiled: the well-conditioned groups' normal matrices and inverses, one group at a
        # time; the other groups (and all, without numba) take the SVD path below.
        rest = np.isfinite(solution.ssr)
        fast = _compiled_inverse(prob, vals, fi)
        if fast is not None:
            done, inv, norms, cond_d, sup = fast
            support[:, fi] = sup
            done &= rest
            c = sc_all[done][:, None, None] * inv[done]
            c /= norms[done][:, :, None] * norms[done][:, None, :]
            cov_f[done] = c
            cond[done] = cond_d[done]
            singular[done] = False
            rest &= ~done
        idx = np.flatnonzero(rest)
        if idx.size:
            jw = _weighted_jacobian(prob.rows(idx), vals[idx])[:, :, fi]  # (g, N, p)
            if fast is None:
                support[np.ix_(idx, fi)] = _supports(jw)
            nrm = np.linalg.norm(jw, axis=1)  # (g, p)
            usable = np.all(np.isfinite(jw), axis=(1, 2)) & np.all(nrm > 0, axis=1)
            if usable.any():
                a = jw[usable] / nrm[usable][:, None, :]
                u = idx[usable]
                inv, cond_u, sing_u = _scaled_inverse(a, n[u])
                nu_ = nrm[usable]
                with np.errstate(divide="ignore", invalid="ignore"):
                    c = sc_all[u][:, None, None] * inv / (nu_[:, :, None] * nu_[:, None, :])
                c[sing_u] = np.nan
                cov_f[u] = c
                cond[u] = cond_u
                singular[u] = sing_u
    cov = np.full((G, P, P), np.nan)
    cov[:, fi[:, None], fi[None, :]] = cov_f
    var = np.einsum("gpp->gp", cov)
    with np.errstate(invalid="ignore"):
        stderr = np.where(var >= 0, np.sqrt(np.where(var >= 0, var, 0.0)), np.nan)
    stderr[:, ~free] = np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.sqrt(np.einsum("gpp->gp", cov_f))
        corr = cov_f / (d[:, :, None] * d[:, None, :])
    if p >= 2:
        off = ~np.eye(p, dtype=bool)
        rabs = np.where(np.isfinite(corr) & off[None], np.abs(np.clip(corr, -1.0, 1.0)), -1.0)
        maxr = rabs.reshape(G, -1).max(axis=1)
        maxr = np.where(maxr < 0, np.nan, maxr)
        pairs = (rabs > HIGH_CORRELATION).any(axis=2)
    else:
        maxr = np.full(G, np.nan)
        pairs = np.zeros((G, p), dtype=bool)
    high = ~singular & (np.nan_to_num(maxr, nan=0.0) > HIGH_CORRELATION)
    correlated = np.zeros((G, P), dtype=bool)
    correlated[:, fi] = pairs & high[:, None]
    tol = 1e-8 * np.maximum(np.abs(vals), 1e-12) + 1e-300
    at_lower = free[None, :] & np.isfinite(prob.lower) & (np.abs(vals - prob.lower) <= tol)
    at_upper = free[None, :] & np.isfinite(prob.upper) & (np.abs(vals - prob.upper) <= tol)
    with np.errstate(divide="ignore", invalid="ignore"):
        not_id = (
            free[None, :]
            & np.isfinite(stderr)
            & (vals != 0)
            & (stderr / np.abs(vals) > NOT_IDENTIFIED_RSE)
        )
        # Positions on the x axis are judged against each group's span along x, as in the
        # single fit (assemble._diagnostics, start.location_parameters).
        spans: dict[str, FloatArray] = {}
        for j, name in enumerate(prob.model.param_names):
            where = location_parameters(prob.model).get(name)
            if where is None or not free[j]:
                continue
            if where not in spans:
                spans[where] = _x_spans(prob, where)
            span = spans[where]
            usable = np.isfinite(span) & (span > 0)
            by_span = (
                free[j] & np.isfinite(stderr[:, j]) & (stderr[:, j] > NOT_IDENTIFIED_RSE * span)
            )
            not_id[:, j] = np.where(usable, by_span, not_id[:, j])
    return BatchStatistics(
        n=n,
        dof=dof,
        covariance=cov,
        stderr=stderr,
        condition=cond,
        singular=singular,
        near_singular=~singular & (cond > NEAR_SINGULAR),
        max_correlation=maxr,
        high_correlation=high,
        correlated=correlated,
        at_lower=at_lower,
        at_upper=at_upper,
        at_bound=at_lower | at_upper,
        not_identified=not_id,
        absolute_sigma=bool(absolute_sigma),
        support=support,
    )


class DerivedColumns(NamedTuple):
    """One derived quantity over the groups, each of shape (G,).

    ``in_data_range`` is None for a quantity that is not a position on the x axis.
    """

    value: FloatArray
    stderr: FloatArray
    lower: FloatArray
    upper: FloatArray
    in_data_range: BoolArray | None


def _quantiles(level: float, dof: IntArray, known_sigma: bool) -> FloatArray:
    """``inference.quantile`` per group, computed once per distinct dof."""
    q = np.empty(dof.shape)
    for d in np.unique(dof):
        q[dof == d] = quantile(level, float(d), known_sigma=known_sigma)
    return q


def batch_derived(
    problem: BatchProblem,
    solution: BatchSolution,
    stats: BatchStatistics,
    level: float = 0.95,
) -> dict[str, DerivedColumns]:
    """The model's derived quantities per group, with delta-method errors and intervals.

    The conventions of :meth:`FitResult.derived`: ``sqrt(g' C g)`` over the free parameters
    (fixed ones contribute nothing), intervals ``value +- q * stderr`` with ``q`` the Student t
    quantile on the group's dof (normal with ``absolute_sigma``), except for ``10**p`` or
    ``exp(p)`` of one free parameter, whose interval is that parameter's interval transformed.

    Parameters
    ----------
    problem : BatchProblem
    solution : BatchSolution
    stats : BatchStatistics
    level : float
        Coverage of the intervals.

    Returns
    -------
    dict
        ``{name: DerivedColumns}`` in the model's order.
    """
    model = problem.model
    names = model.param_names
    vals = solution.values
    env = {nm: vals[:, j] for j, nm in enumerate(names)}
    free = np.asarray(problem.free, dtype=bool)
    q = _quantiles(level, stats.dof, stats.absolute_sigma)
    G = vals.shape[0]
    cov = np.nan_to_num(stats.covariance, nan=0.0)
    cov_nan = np.isnan(stats.covariance[:, free][:, :, free]).any(axis=(1, 2))
    xs = np.where(problem.mask, problem.x, np.nan)
    with np.errstate(all="ignore"):
        x_lo, x_hi = np.nanmin(xs, axis=1), np.nanmax(xs, axis=1)
    out: dict[str, DerivedColumns] = {}
    for dq in model.derived:
        with np.errstate(all="ignore"):
            value = np.broadcast_to(np.asarray(dq.expr.evaluate(env), dtype=float), (G,)).copy()
            g = np.zeros((G, len(names)))
            for j, nm in enumerate(names):
                if free[j] and nm in dq.expr.names:
                    g[:, j] = np.asarray(dq.expr.derivative(nm).evaluate(env), dtype=float)
            var = np.einsum("gp,gpq,gq->g", g, cov, g)
            se = np.where(var >= 0, np.sqrt(np.abs(var)), np.nan)
        if not free.any():
            se = np.full(G, np.nan)
        se = np.where(cov_nan, np.nan, se)
        lower, upper = value - q * se, value + q * se
        base = _power_of(dq)
        if base is not None and base[1] in names and free[names.index(base[1])]:
            j = names.index(base[1])
            v, s = vals[:, j], stats.stderr[:, j]
            with np.errstate(all="ignore"):
                lower, upper = base[0] ** (v - q * s), base[0] ** (v + q * s)
        inside: BoolArray | None = None
        if dq.axis == "x":
            inside = ~np.isfinite(value) | ((x_lo <= value) & (value <= x_hi))
        out[dq.name] = DerivedColumns(value, se, lower, upper, inside)
    return out
