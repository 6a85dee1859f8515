"""Assembling a FitResult from a problem and its solver runs: covariance, statistics, diagnostics.

The covariance comes from the SVD of the column-scaled weighted Jacobian; standard errors of
linked parameters by the delta method and the correlation diagnostic from
:mod:`curvewright.inference`; information criteria from :mod:`curvewright.numerics`; the alarm
levels from :mod:`curvewright.thresholds`; the diagnostics as data (kind, parameters, severity,
text).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..inference import correlated_pairs, correlation_matrix, delta_method_variance
from ..messages import outcome
from ..numerics import aicc as _aicc
from ..numerics import bic as _bic
from ..numerics import column_support
from ..result import Attempt, Diagnostic, FitResult
from ..start import location_parameters, x_span
from ..thresholds import (
    DEGENERATE_CORRELATION,
    DEGENERATE_SE,
    HIGH_CORRELATION,
    NEAR_SINGULAR,
    NOT_IDENTIFIED_RSE,
    RUNAWAY,
    THIN_SUPPORT,
)
from .engine import _lmfit_at, _Run
from .problem import FloatArray, _param_jacobian, _Problem


# ============================================================================ statistics
def _covariance(jw: FloatArray, scale: float) -> tuple[FloatArray, float, bool]:
    """Covariance ``scale * (Jw' Jw)^-1`` via the SVD of the column-scaled Jacobian."""
    p = jw.shape[1]
    if p == 0:
        return np.zeros((0, 0)), 1.0, False
    norms = np.linalg.norm(jw, axis=0)
    if not np.all(np.isfinite(jw)) or np.any(norms == 0):
        return np.full((p, p), np.nan), math.inf, True
    a = jw / norms
    _, s, vt = np.linalg.svd(a, full_matrices=False)
    cond = float(s[0] / s[-1]) if s[-1] > 0 else math.inf
    singular = not (s[-1] > s[0] * np.finfo(float).eps * max(jw.shape))
    if singular:
        return np.full((p, p), np.nan), cond, True
    inv = (vt.T / s**2) @ vt
    cov = scale * inv / np.outer(norms, norms)
    return cov, cond, False


def _diagnostics(
    prob: _Problem,
    values: Mapping[str, float],
    stderr: Mapping[str, float],
    cov: FloatArray,
    cond: float,
    singular: bool,
    code: str,
    success: bool,
) -> list[Diagnostic]:
    out: list[Diagnostic] = []
    for d in prob.datasets:
        for note in d.notes:
            out.append(Diagnostic("data_note", "info", note))
    for mv in prob.moved:
        out.append(
            Diagnostic(
                "start_moved_inside_bounds",
                "info",
                mv.text,
                params=(mv.name,),
                extra={
                    "before": mv.before,
                    "after": mv.after,
                    "lower": mv.lower,
                    "upper": mv.upper,
                },
            )
        )
    if not success and code != "degenerate_stop":
        out.append(
            Diagnostic(
                "not_converged",
                "error",
                f"The fit did not converge ({outcome(code).text}). The numbers below are where "
                "it stopped, not estimates; adjust the starting values or the model.",
            )
        )
    for i, n in enumerate(prob.free):
        v, lo, hi = values[n], prob.lower[i], prob.upper[i]
        tol = 1e-8 * max(abs(v), 1e-12)
        for side, b in (("lower", lo), ("upper", hi)):
            if math.isfinite(b) and abs(v - b) <= tol + 1e-300:
                out.append(
                    Diagnostic(
                        "at_bound",
                        "warning",
                        f"'{n}' is at its {side} bound ({b:g}); the data may want it beyond. Its "
                        "standard error and interval assume it is not, so treat them with care.",
                        params=(n,),
                        extra={"side": side, "bound": float(b)},
                    )
                )
    if singular:
        out.append(
            Diagnostic(
                "singular",
                "error",
                "The covariance is singular: some parameters cannot be told apart by these data "
                "(standard errors are not available). Fix a parameter or simplify the model.",
                params=prob.free,
            )
        )
    elif cond > NEAR_SINGULAR:
        out.append(
            Diagnostic(
                "near_singular",
                "warning",
                f"The covariance is nearly singular (condition number {cond:.2g}): standard "
                "errors are large and unreliable in some directions.",
                params=prob.free,
                extra={"condition": cond},
            )
        )
    locations = location_parameters(prob.model)
    for n in prob.free:
        se, v = stderr[n], values[n]
        if not math.isfinite(se):
            continue
        # A position on the x axis (log_ic50, a peak centre) is judged against the data's span
        # along x: its value can be zero with nothing wrong (an IC50 of 1 in the data's unit),
        # or far from zero with an interval wider than the data. A global fit's per-group
        # name is "name[group]".
        where = locations.get(n.split("[", 1)[0])
        if where == "y":
            span = float(np.ptp(prob.y)) if prob.y.size >= 2 else math.nan
        else:
            span = x_span(prob.x, where) if where is not None else math.nan
        if math.isfinite(span) and span > 0:
            if se <= NOT_IDENTIFIED_RSE * span:
                continue
            unit = " decades" if where == "log" else ""
            axis = "y" if where == "y" else "x"
            text = (
                f"'{n}' is not identified by the data: its standard error ({se:.3g}) is wider "
                f"than the data's whole span along {axis} ({span:.3g}{unit}). Collect data "
                "where it matters, or fix it."
            )
        else:
            if v == 0 or se / abs(v) <= NOT_IDENTIFIED_RSE:
                continue
            text = (
                f"'{n}' is not identified by the data: its standard error ({se:.3g}) exceeds "
                f"its value ({v:.3g}). Collect data where it matters, or fix it."
            )
        out.append(
            Diagnostic(
                "not_identified",
                "warning",
                text,
                params=(n,),
                extra={"stderr": se, "value": v, "span": span if math.isfinite(span) else None},
            )
        )
    if cov.size and not singular:
        for i, j, r in correlated_pairs(correlation_matrix(cov), HIGH_CORRELATION):
            out.append(
                Diagnostic(
                    "high_correlation",
                    "warning",
                    f"'{prob.free[i]}' and '{prob.free[j]}' are correlated "
                    f"(r = {r:+.4f}): the data pin down a combination of them "
                    "better than either alone.",
                    params=(prob.free[i], prob.free[j]),
                    extra={"r": r},
                )
            )
    x_lo, x_hi = float(np.min(prob.x)), float(np.max(prob.x))
    with np.errstate(all="ignore"):
        for q in prob.model.derived:
            if q.axis != "x":
                continue
            val = float(np.asarray(q.expr.evaluate(dict(values))))
            if math.isfinite(val) and not x_lo <= val <= x_hi:
                out.append(
                    Diagnostic(
                        "extrapolation",
                        "warning",
                        f"{q.name} = {val:.4g} lies outside the range of the data "
                        f"[{x_lo:.4g}, {x_hi:.4g}]: it is an extrapolation, not a measurement.",
                        params=tuple(n for n in prob.model.param_names if n in q.expr.names),
                        extra={"quantity": q.name, "value": val, "range": [x_lo, x_hi]},
                    )
                )
    if prob.loss != "squared":
        out.append(
            Diagnostic(
                "robust_loss",
                "info",
                f"Fitted with the robust {prob.loss} loss; standard errors use the ordinary "
                "least-squares formula at the solution and are approximate.",
            )
        )
    return out


@dataclass(frozen=True)
class _Solution:
    """The kept run and what every result needs at its point: residuals, dof, covariance."""

    kept: _Run | None
    theta: FloatArray
    fitted: FloatArray
    resid: FloatArray
    rw: FloatArray  # weighted residuals
    ssr: float  # weighted
    rss: float  # unweighted
    n: int
    p: int
    dof: int
    code: str
    success: bool
    J: FloatArray
    cov: FloatArray
    cond: float
    singular: bool


def _solution(prob: _Problem, runs: list[_Run], keep: _Run | None = None) -> _Solution:
    """Pick the run to report (the best converged one, else the best) and evaluate it.

    ``keep`` overrides the choice (the user's point after a global search that found no clearly
    lower minimum).
    """
    kept = min(runs, key=lambda r: (not outcome(r.code).success, r.objective)) if runs else None
    if kept is not None and not outcome(kept.code).success:
        kept = min(runs, key=lambda r: r.objective)
    if keep is not None:
        kept = keep
    theta = kept.theta if kept is not None else np.zeros(0)
    fitted = prob.curve_at(theta).copy()
    resid = prob.y - fitted
    rw = resid if prob.w is None else resid * prob.w
    ssr = float(rw @ rw)
    n, p = prob.x.size, len(prob.free)
    dof = n - p
    code = kept.code if kept is not None else "nothing_to_fit"
    scale = 1.0 if prob.absolute_sigma else (ssr / dof if dof > 0 else math.nan)
    if code in ("cancelled", "stopped_time"):
        # The user asked to stop: no further model evaluations (a slow callable would need
        # 2 per parameter for its Jacobian). The point where it stopped has no covariance.
        J = np.full((n, p), np.nan)
        cov, cond, singular = np.full((p, p), np.nan), math.nan, False
    else:
        J = prob.jacobian_at(theta)
        jw = J if prob.w is None else J * prob.w[:, None]
        cov, cond, singular = _covariance(jw, scale)
    return _Solution(
        kept,
        theta,
        fitted,
        resid,
        rw,
        ssr,
        float(resid @ resid),
        n,
        p,
        dof,
        code,
        outcome(code).success,
        J,
        cov,
        cond,
        singular,
    )


@dataclass(frozen=True)
class _Degeneracy:
    """Why a fit's stopping point is degenerate or suspect (see :func:`_degeneracy`)."""

    reasons: tuple[str, ...]  # "singular", "near_singular", "undetermined", "runaway"
    runaway: tuple[tuple[str, float, float], ...] = ()  # (name, value, largest plausible size)
    undetermined: tuple[tuple[str, float, float], ...] = ()  # (name, stderr, size)
    correlation: float = math.nan  # the largest |r| between two free parameters
    thin: tuple[tuple[str, float], ...] = ()  # (name, support in points) below THIN_SUPPORT

    @property
    def degenerate(self) -> bool:
        """The point is degenerate: its numbers are not estimates."""
        return bool(self.reasons)

    @property
    def suspect(self) -> bool:
        """Degenerate, or |r| so close to 1 that a lower minimum elsewhere is worth a look."""
        return bool(self.degenerate or self.thin or self.correlation > DEGENERATE_CORRELATION)

    @property
    def params(self) -> tuple[str, ...]:
        """The parameters a runaway or undetermined finding names, in order, once each."""
        return tuple(dict.fromkeys(n for n, _, _ in (*self.runaway, *self.undetermined)))


def _thin_support(
    prob: _Problem, theta: FloatArray, jw: FloatArray
) -> tuple[tuple[str, float], ...]:
    """The curve's feature at ``theta`` is narrower than the data's spacing: its amplitudes.

    A parameter the curve is linear in (an amplitude: its column does not change with it)
    whose column is carried by fewer than :data:`~curvewright.thresholds.THIN_SUPPORT`
    points (:func:`~curvewright.numerics.column_support`): the whole feature it scales
    touches about one point. A steep step has thin columns for its position and slope but
    wide ones for its levels, and is not reported. Returns ``(name, support)`` of each such
    amplitude; the linearity test (one more Jacobian) is made only when some column is thin.
    """
    if jw.size == 0 or not np.all(np.isfinite(jw)):
        return ()
    support = column_support(jw)
    thin = np.flatnonzero(support < THIN_SUPPORT)
    if thin.size == 0:
        return ()
    out: list[tuple[str, float]] = []
    # ``jw`` may be in the solver's scale; the columns compared are both made here
    j1 = _weighted_jacobian(prob, prob.jacobian_at(np.array(theta, dtype=float)))
    for i in thin.tolist():
        t2 = np.array(theta, dtype=float)
        step = max(abs(t2[i]), 1.0)
        t2[i] = t2[i] + step if t2[i] + step <= prob.upper[i] else t2[i] - step
        if not prob.lower[i] <= t2[i] <= prob.upper[i]:
            continue
        try:
            c2 = _weighted_jacobian(prob, prob.jacobian_at(t2))[:, i]
        except (ValueError, ArithmeticError):
            continue
        c1 = j1[:, i]
        if np.all(np.isfinite(c2)) and np.max(np.abs(c2 - c1)) <= 1e-8 * np.max(np.abs(c1)):
            out.append((prob.free[i], float(support[i])))
    return tuple(out)


def _weighted_jacobian(prob: _Problem, J: FloatArray) -> FloatArray:
    return J if prob.w is None else J * prob.w[:, None]


def _start_support(
    prob: _Problem, first: tuple[FloatArray, FloatArray] | None
) -> tuple[tuple[str, float], ...]:
    """:func:`_thin_support` at the user's start; () when no start was given.

    ``first`` is the fit's first analytic Jacobian and its point (``_Watch.first_jacobian``,
    weighted, in the solver's scale, which the support does not depend on); None for a
    Python callable, which is not judged (its Jacobian would cost evaluations).
    """
    if first is None or not prob.free or set(prob.free) <= prob.guided:
        return ()
    theta, jw = first
    theta0 = np.array([prob.values0[n] for n in prob.free], dtype=float)
    if not np.array_equal(theta, theta0):
        return ()  # the first run began elsewhere (a start moved inside its bounds)
    return _thin_support(prob, theta, jw)


def _degeneracy(prob: _Problem, sol: _Solution) -> _Degeneracy:
    """Judge the stopping point from what the assembly computed anyway (covariance, condition).

    Degenerate: a singular or near-singular covariance, a standard error above
    :data:`~curvewright.thresholds.DEGENERATE_SE` times the parameter's size, or a parameter
    beyond :data:`~curvewright.thresholds.RUNAWAY` times the largest size the data make
    plausible for it. Sizes come from :func:`curvewright.start.plausible_sizes`, computed only
    when a value or standard error is large enough to need them.
    """
    if sol.p == 0 or sol.kept is None or sol.kept.method == "linear" or not sol.success:
        return _Degeneracy(())
    reasons: list[str] = []
    if sol.singular:
        reasons.append("singular")
    elif sol.cond > NEAR_SINGULAR:
        reasons.append("near_singular")
    # Few numpy calls on purpose: this runs after every fit (tens of microseconds).
    theta, cov = sol.theta, sol.cov
    with np.errstate(all="ignore"):
        se = np.sqrt(np.abs(cov.diagonal()))
        corr = math.nan
        if not sol.singular and sol.p > 1:
            r = np.abs(cov / np.outer(se, se))
            r.flat[:: sol.p + 1] = 0.0
            corr = float(np.max(r))  # NaN when some variance is 0 or not finite
        a = np.abs(theta)
        # Sizes only when something is large against the parameter itself (the cheap test).
        big = (a > RUNAWAY) | (se > DEGENERATE_SE * a)
    runaway: list[tuple[str, float, float]] = []
    undetermined: list[tuple[str, float, float]] = []
    if big.any():
        from ..start import plausible_sizes

        bases = prob.model_names()
        names = list(dict.fromkeys(bases[i] for i in np.flatnonzero(big)))
        try:
            with np.errstate(all="ignore"):
                sizes = plausible_sizes(prob.model, prob.x, prob.y, names)
        except (ValueError, ArithmeticError, KeyError):
            sizes = {n: (1.0, 1.0) for n in names}
        for i in np.flatnonzero(big):
            n, v = prob.free[i], float(theta[i])
            typical, largest = sizes.get(bases[i], (1.0, 1.0))
            if abs(v) > RUNAWAY * largest:
                runaway.append((n, v, largest))
            size = max(abs(v), typical)
            if math.isfinite(se[i]) and se[i] > DEGENERATE_SE * size:
                undetermined.append((n, float(se[i]), size))
    if runaway:
        reasons.append("runaway")
    if undetermined:
        reasons.append("undetermined")
    thin = _thin_support(prob, theta, _weighted_jacobian(prob, sol.J)) if not sol.singular else ()
    return _Degeneracy(tuple(reasons), tuple(runaway), tuple(undetermined), corr, thin)


def _degenerate_diagnostics(deg: _Degeneracy) -> list[Diagnostic]:
    """The degenerate stop as data: one error naming the reasons, one finding per runaway."""
    words = {
        "singular": "the covariance is singular",
        "near_singular": "the covariance is nearly singular",
        "runaway": "a parameter ran away",
        "undetermined": "a parameter is not determined at all",
    }
    out = [
        Diagnostic(
            "degenerate_stop",
            "error",
            "The fit stopped at a degenerate point ("
            + "; ".join(words[r] for r in deg.reasons)
            + "), and the global search found no better one. The numbers below are not "
            "estimates: try other starting values, fix a parameter, or simplify the model.",
            params=deg.params,
            extra={"reasons": list(deg.reasons)},
        )
    ]
    for n, v, largest in deg.runaway:
        out.append(
            Diagnostic(
                "runaway",
                "error",
                f"'{n}' ran off to {v:.3g}, more than {RUNAWAY:.0e} times the largest size the "
                f"data make plausible for it ({largest:.3g}).",
                params=(n,),
                extra={"value": v, "largest": largest},
            )
        )
    return out


@dataclass(frozen=True)
class _Search:
    """What the global search did for a suspect fit (for the result's notes)."""

    why: tuple[str, ...]  # the suspect point's reasons (_degeneracy's, or the keys of _WHY)
    user_objective: float  # the best the user's start reached
    search_objective: float  # the best the search reached
    used: bool  # the answer is the search's minimum, not the user's


_WHY = {
    "singular": "a singular covariance",
    "near_singular": "a nearly singular covariance",
    "runaway": "a parameter running away",
    "undetermined": "a parameter not determined at all",
    "correlation": "two parameters nearly interchangeable",
    "thin_support": "a feature of the curve narrower than the spacing of the data",
    "thin_start": "a start whose feature was narrower than the spacing of the data",
}


def _search_diagnostic(search: _Search, loss: str) -> Diagnostic:
    what = "sum of squares" if loss == "squared" else "robust loss"
    why = ", ".join(_WHY[w] for w in search.why)
    if search.used:
        text = (
            f"The answer comes from the global search, not from the given starting values: "
            f"those stopped at a suspect point ({why}; {what} {search.user_objective:.6g}), "
            f"and the search found a lower minimum ({search.search_objective:.6g}). The "
            "attempts list shows both."
        )
    else:
        text = (
            f"The point reached from the given starting values was suspect ({why}), so a "
            f"global search was run; it found no lower minimum ({what} "
            f"{search.search_objective:.6g} against {search.user_objective:.6g})."
        )
    return Diagnostic(
        "global_search",
        "info",
        text,
        extra={
            "reasons": list(search.why),
            "used": search.used,
            "user_objective": search.user_objective,
            "search_objective": search.search_objective,
        },
    )


def _judged(sol: _Solution, degeneracy: _Degeneracy | None) -> _Solution:
    """The solution with its outcome: ``"degenerate_stop"`` (not a success) when degenerate."""
    if degeneracy is not None and degeneracy.degenerate:
        return replace(sol, code="degenerate_stop", success=False)
    return sol


def _stop_notes(
    degeneracy: _Degeneracy | None, search: _Search | None, loss: str
) -> list[Diagnostic]:
    """The notes on a suspect stop that head a result's findings (the search's first)."""
    out = [_search_diagnostic(search, loss)] if search is not None else []
    if degeneracy is not None and degeneracy.degenerate:
        out += _degenerate_diagnostics(degeneracy)
    return out


def _finish(
    prob: _Problem,
    runs: list[_Run],
    sol: _Solution | None = None,
    degeneracy: _Degeneracy | None = None,
    search: _Search | None = None,
) -> FitResult:
    """The result record; ``sol`` when the caller has evaluated the kept run already.

    A ``degeneracy`` that is degenerate turns the outcome into ``"degenerate_stop"`` (not a
    success); ``search`` adds a note on the global search.
    """
    sol = _judged(sol if sol is not None else _solution(prob, runs), degeneracy)
    kept, theta, fitted, resid, ssr, rss = (
        sol.kept,
        sol.theta,
        sol.fitted,
        sol.resid,
        sol.ssr,
        sol.rss,
    )
    n, p, dof, code, success = sol.n, sol.p, sol.dof, sol.code, sol.success
    J, cov, cond, singular = sol.J, sol.cov, sol.cond, sol.singular
    values = prob.values(theta)
    pj = _param_jacobian(prob, theta)
    var_all = delta_method_variance(pj, cov) if p else np.zeros(len(values))
    stderr = {}
    for i, nme in enumerate(prob.model.param_names):
        if nme in prob.fixed:
            stderr[nme] = math.nan
        else:
            stderr[nme] = float(math.sqrt(var_all[i])) if var_all[i] >= 0 else math.nan
    wts = np.ones(n) if prob.w is None else prob.w
    ybar = float(np.sum(wts**2 * prob.y) / np.sum(wts**2))
    sst = float(np.sum((wts * (prob.y - ybar)) ** 2))
    diags = _stop_notes(degeneracy, search, prob.loss)
    diags += _diagnostics(prob, values, stderr, cov, cond, singular, code, success)
    attempts = [
        Attempt(
            strategy=r.strategy,
            method=r.method,
            evaluations=r.evaluations,
            ssr=r.ssr,
            objective=r.objective,
            code=r.code,
            message=outcome(r.code).text,
        )
        for r in runs
    ]
    # The fast runs and the polish run outside lmfit; power users get the best lmfit run of the
    # ladder (its values agree with ours to the solver's tolerance, its statistics are lmfit's
    # own) or, when there was none, one made from the solution when first asked for.
    lm_runs = [r for r in runs if r.raw is not None]
    lm: Any = min(lm_runs, key=lambda r: r.objective).raw if lm_runs else None
    if lm is None and kept is not None and kept.method != "linear" and success:
        lm = _lmfit_at(prob, theta)
    return FitResult(
        model=prob.model,
        datasets=prob.datasets,
        values=values,
        stderr=stderr,
        free=prob.free,
        fixed=tuple(n for n in prob.model.param_names if n in prob.fixed),
        linked=dict(prob.link_texts),
        start=prob.values0,
        bounds={
            nme: (float(prob.lower[i]), float(prob.upper[i])) for i, nme in enumerate(prob.free)
        },
        covariance=cov,
        ssr=ssr,
        rss=rss,
        n=n,
        nfree=p,
        dof=dof,
        sigma_resid=math.sqrt(ssr / dof) if dof > 0 else math.nan,
        r2=1.0 - ssr / sst if sst > 0 else math.nan,
        aicc=_aicc(ssr, n, p + 1),
        bic=_bic(ssr, n, p + 1),
        condition=cond,
        fitted=fitted,
        residuals=resid,
        weights=None if prob.w is None else prob.w,
        jacobian=J,
        param_jacobian=pj,
        success=success,
        code=code,
        message=outcome(code).text,
        messages=tuple((a.code, a.message) for a in attempts),
        diagnostics=tuple(diags),
        attempts=tuple(attempts),
        weighting=prob.weighting,
        loss=prob.loss,
        loss_scale=prob.loss_scale,
        absolute_sigma=prob.absolute_sigma,
        method=kept.method if kept is not None else "none",
        evaluations=sum(r.evaluations for r in runs),
        parameters=prob.parameters.with_values(values),
        _lmfit=lm,
    )
