"""The solver runs of a fit: a fast analytic-Jacobian run, a fallback ladder, a polish, QR.

The only module of curvewright that imports lmfit. Each run returns a :class:`_Run`. For a
formula model the first run calls MINPACK's Levenberg-Marquardt (``scipy.optimize.leastsq``)
with the model's compiled value-and-Jacobian, bounds kept by lmfit's change of variables
(:class:`_Transform`), or scipy's trust-region method for a robust loss; a Python callable
starts with lmfit, differencing numerically. The ladder decides which further runs to make
(restart, switch method, rescale, multi-start; lmfit runs) and the polish finishes from the best
point at machine precision. Cancel, time and evaluation limits are checked at every model
evaluation, Jacobians included (:class:`_Watch`).
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import lmfit
import numpy as np
from scipy.optimize import least_squares, leastsq

from ..errors import DataError, ParameterError
from ..linear import solve_polynomial
from ..messages import LEAST_SQUARES_STATUS, LEASTSQ_IER, outcome
from .problem import FloatArray, _Problem

_LM = "levenberg_marquardt"
_TR = "trust_region"
# Our losses by what they are; scipy's least_squares calls the sum of squares "linear" (rho(z) = z
# of the squared residual z) and the pseudo-Huber loss 2*(sqrt(1 + z) - 1) "soft_l1".
_SCIPY_LOSS = {"squared": "linear", "pseudo_huber": "soft_l1", "huber": "huber"}
# Tolerances far below what double precision can resolve: MINPACK then stops when no further
# reduction is possible (ier 6-8, "converged_precision"), which is how certified NIST values are
# reached to 6+ digits. Runs stay short because each step at the minimum is rejected quickly.
_TOL = 1e-15
# A model value this large replaces a non-finite residual during the fit, so that the solver
# rejects the step and shrinks its trust region instead of failing.
_PENALTY = 1e100
# Reduction of the objective by a restart, relative, beyond which the first run counts as stalled.
_STALL = 1e-9
_EPS = float(np.finfo(float).eps)
# Outcomes after which no further run is made: the user asked to stop.
_STOP = ("cancelled", "stopped_time")


class _AbortError(Exception):
    """Raised inside the residual function to stop a solver run (cancel or time limit)."""

    def __init__(self, code: str) -> None:
        super().__init__(code)
        self.code = code


# ============================================================================ solver runs
@dataclass
class _Run:
    theta: FloatArray
    ssr: float
    objective: float
    code: str
    evaluations: int
    method: str
    strategy: str
    raw: Any = None


class _Watch:
    """Counts evaluations, keeps the best point seen and stops a run on cancel or time limit.

    Every call of the model counts as one evaluation, an analytic Jacobian (the model's value
    and derivatives, compiled together) included; the limits are checked before each.
    """

    def __init__(
        self,
        prob: _Problem,
        deadline: float | None,
        max_evaluations: int | None,
        cancel: Callable[[], bool] | None,
        progress: Callable[[int, float], None] | None,
    ) -> None:
        self.prob = prob
        self.deadline = deadline
        self.max_evaluations = max_evaluations
        self.cancel = cancel
        self.progress = progress
        self.evaluations = 0
        self.best_ssr = math.inf
        self.best_theta: FloatArray | None = None
        # The first analytic Jacobian of the fit and its point (the start): the start's thin
        # support check (assemble._start_support) reads it instead of computing its own.
        self.first_jacobian: tuple[FloatArray, FloatArray] | None = None
        self._last_report = 0.0
        # What the residuals and their Jacobian are multiplied by: 1/rscale (see _Problem),
        # with minus 1/sigma per row for the Jacobian of the weighted residual y - f.
        self._rscale = 1.0 / prob.rscale
        self._jscale: FloatArray | float = (
            -self._rscale if prob.w is None else (-self._rscale * prob.w)[:, None]
        )

    def _tick(self) -> None:
        if self.cancel is not None and self.cancel():
            raise _AbortError("cancelled")
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise _AbortError("stopped_time")
        if self.max_evaluations is not None and self.evaluations >= self.max_evaluations:
            raise _AbortError("stopped_evaluations")
        self.evaluations += 1

    def residual(self, theta: FloatArray) -> FloatArray:
        self._tick()
        prob = self.prob
        r = prob.y - prob.curve_at(theta)
        if prob.w is not None:
            r *= prob.w
        ssr = float(r @ r)
        if not math.isfinite(ssr):
            bad = ~np.isfinite(r)
            if bad.any():
                return np.where(bad, _PENALTY, r)
        elif ssr < self.best_ssr:
            self.best_ssr, self.best_theta = ssr, np.array(theta, dtype=float)
        if self.progress is not None:
            now = time.monotonic()
            if now - self._last_report >= 0.1:
                self._last_report = now
                self.progress(self.evaluations, self.best_ssr)
        r *= self._rscale
        return r

    def jacobian(self, theta: FloatArray) -> FloatArray:
        """The Jacobian of :meth:`residual`: a formula model's analytic one, one evaluation.

        Python callables are differenced by the solvers themselves, through :meth:`residual`,
        so that every evaluation is counted and checked.
        """
        self._tick()
        J = self.prob.jacobian_at(theta)
        J *= self._jscale
        if self.first_jacobian is None:
            # a copy: a solver with a change of variables scales the columns in place
            self.first_jacobian = (np.array(theta, dtype=float), J.copy())
        return J

    def best_inside(self, fallback: FloatArray) -> FloatArray:
        """The best point seen if it lies within the bounds, else ``fallback``."""
        b, prob = self.best_theta, self.prob
        if b is None or not np.all((b >= prob.lower) & (b <= prob.upper)):
            return np.array(fallback, dtype=float)
        return b


class _Transform:
    """lmfit's (MINUIT's) change of variables that keeps an unbounded solver within bounds.

    Two bounds: ``theta = lo + (sin(u) + 1) * (hi - lo) / 2``; a lower bound only:
    ``theta = lo - 1 + sqrt(u**2 + 1)``; an upper bound only: ``theta = hi + 1 - sqrt(u**2 + 1)``.
    The same formulas as lmfit's, so the fast run and lmfit's runs of the ladder see one problem.
    """

    def __init__(self, lower: FloatArray, upper: FloatArray) -> None:
        self.plan = [
            (i, float(lo), float(hi))
            for i, (lo, hi) in enumerate(zip(lower, upper, strict=True))
            if math.isfinite(lo) or math.isfinite(hi)
        ]

    def inside(self, theta: FloatArray) -> FloatArray:
        u = np.array(theta, dtype=float)
        for i, lo, hi in self.plan:
            t = float(u[i])
            if math.isinf(hi):
                v = math.sqrt(max((t - lo + 1.0) ** 2 - 1.0, 0.0))
            elif math.isinf(lo):
                v = math.sqrt(max((hi - t + 1.0) ** 2 - 1.0, 0.0))
            else:
                v = math.asin(min(max(2.0 * (t - lo) / (hi - lo) - 1.0, -1.0), 1.0))
            u[i] = v
        return u

    def outside(self, u: FloatArray) -> FloatArray:
        theta = np.array(u, dtype=float)
        for i, lo, hi in self.plan:
            v = float(u[i])
            if math.isinf(hi):
                theta[i] = lo - 1.0 + math.sqrt(v * v + 1.0)
            elif math.isinf(lo):
                theta[i] = hi + 1.0 - math.sqrt(v * v + 1.0)
            else:
                theta[i] = lo + (math.sin(v) + 1.0) * (hi - lo) / 2.0
        return theta

    def slope(self, u: FloatArray) -> FloatArray:
        """``d theta / d u``, for the chain rule on the Jacobian's columns."""
        d = np.ones(u.size)
        for i, lo, hi in self.plan:
            v = float(u[i])
            if math.isinf(hi):
                d[i] = v / math.sqrt(v * v + 1.0)
            elif math.isinf(lo):
                d[i] = -v / math.sqrt(v * v + 1.0)
            else:
                d[i] = math.cos(v) * (hi - lo) / 2.0
        return d


@dataclass
class _MinpackInfo:
    """What MINPACK reported (its ``info``, called ``ier`` by scipy and lmfit)."""

    ier: int


def _objective(prob: _Problem, r: FloatArray) -> float:
    if prob.loss == "squared":
        return float(r @ r)
    c = prob.loss_scale or 1.0
    z = (r / c) ** 2
    if prob.loss == "pseudo_huber":
        rho = 2.0 * (np.sqrt(1.0 + z) - 1.0)
    else:  # huber
        rho = np.where(z <= 1.0, z, 2.0 * np.sqrt(z) - 1.0)
    return float(c**2 * np.sum(rho))


def _solve(
    prob: _Problem,
    watch: _Watch,
    theta0: FloatArray,
    method: str,
    strategy: str,
    budget: int,
    x_scale: str | None = None,
) -> _Run:
    params = lmfit.Parameters()
    for i in range(len(prob.free)):
        # Neutral names: lmfit reserves some identifiers (e.g. its asteval symbols) that a
        # model's parameter could legitimately use.
        params.add(f"p{i}", value=float(theta0[i]), min=prob.lower[i], max=prob.upper[i])

    def resid(p: lmfit.Parameters) -> FloatArray:
        return watch.residual(np.array([p[f"p{i}"].value for i in range(len(prob.free))]))

    kws: dict[str, Any]
    if method == _LM:
        kws = {"ftol": _TOL, "xtol": _TOL, "gtol": 0.0, "maxfev": budget}
    else:
        kws = {"ftol": _TOL, "xtol": _TOL, "gtol": _TOL, "max_nfev": budget}
        if prob.loss != "squared":
            kws["loss"] = _SCIPY_LOSS[prob.loss]
            kws["f_scale"] = (prob.loss_scale or 1.0) / prob.rscale
        if x_scale is not None:
            kws["x_scale"] = x_scale
    evals0 = watch.evaluations
    minimizer = lmfit.Minimizer(resid, params, nan_policy="propagate")
    raw: Any = None
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            # lmfit's names: "leastsq" is MINPACK's Levenberg-Marquardt, "least_squares" scipy's
            # trust-region reflective method
            raw = minimizer.minimize(method="leastsq" if method == _LM else "least_squares", **kws)
        theta = np.array([raw.params[f"p{i}"].value for i in range(len(prob.free))])
        code = _code_of(raw, method)
    except _AbortError as stop:
        theta = watch.best_inside(theta0)
        code = stop.code
        raw = None
    return _finish_run(prob, watch, theta, code, evals0, method, strategy, raw)


def _weighted(prob: _Problem, theta: FloatArray) -> FloatArray:
    r = prob.y - prob.curve_at(theta)
    return r if prob.w is None else r * prob.w


def _finish_run(
    prob: _Problem,
    watch: _Watch,
    theta: FloatArray,
    code: str,
    evals0: int,
    method: str,
    strategy: str,
    raw: Any = None,
) -> _Run:
    r = _weighted(prob, theta)
    ssr = float(r @ r)
    if not math.isfinite(ssr) and code != "cancelled":
        code = "not_finite"
    return _Run(
        theta=np.array(theta, dtype=float),
        ssr=ssr,
        objective=_objective(prob, r) if math.isfinite(ssr) else math.inf,
        code=code,
        evaluations=watch.evaluations - evals0,
        method=method,
        strategy=strategy,
        raw=raw,
    )


class _LeftBoundsError(Exception):
    """Raised when an unbounded run asks for a point outside the bounds (it is not evaluated)."""


def _lmder(
    prob: _Problem,
    watch: _Watch,
    theta0: FloatArray,
    budget: int,
    tol: float,
    gtol: float,
    bounds: str,
) -> tuple[FloatArray, str]:
    """One call of MINPACK's Levenberg-Marquardt: the solution and its outcome code.

    MINPACK knows no bounds. ``bounds="transform"`` keeps them by :class:`_Transform`;
    ``bounds="guard"`` runs in the parameters themselves and raises :class:`_LeftBoundsError`
    before evaluating a point outside them (most fits never come near a bound, and the change
    of variables costs iterations). Raises :class:`_AbortError` on cancel or a limit.
    """
    t = _Transform(prob.lower, prob.upper)
    plan = t.plan
    fun: Callable[[FloatArray], FloatArray] = watch.residual
    jac: Callable[[FloatArray], FloatArray] = watch.jacobian
    outside: Callable[[FloatArray], FloatArray] = np.asarray
    u0 = np.array(theta0, dtype=float)
    if plan and bounds == "transform":

        def fun(u: FloatArray) -> FloatArray:
            return watch.residual(t.outside(u))

        def jac(u: FloatArray) -> FloatArray:
            J = watch.jacobian(t.outside(u))
            J *= t.slope(u)
            return J

        u0, outside = t.inside(theta0), t.outside
    elif plan:

        def check(theta: FloatArray) -> None:
            for i, lo, hi in plan:
                if theta[i] < lo or theta[i] > hi:
                    raise _LeftBoundsError

        def fun(u: FloatArray) -> FloatArray:
            check(u)
            return watch.residual(u)

        def jac(u: FloatArray) -> FloatArray:
            check(u)
            return watch.jacobian(u)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u, ier = leastsq(
            fun,
            u0,
            # a Python callable is differenced by MINPACK itself (lmdif)
            Dfun=jac if prob.model.has_jacobian else None,
            ftol=tol,
            xtol=tol,
            gtol=gtol,
            maxfev=budget,
        )
    return outside(np.asarray(u, dtype=float)), _code_of(_MinpackInfo(int(ier)), _LM)


def _lm_run(
    prob: _Problem,
    watch: _Watch,
    theta0: FloatArray,
    strategy: str,
    budget: int,
    *,
    tol: float,
    gtol: float,
    on_bound: str,
) -> _Run | None:
    """MINPACK's Levenberg-Marquardt with the model's analytic Jacobian (lmder), no lmfit.

    The run goes in the parameters themselves; if it heads outside the bounds, ``on_bound``
    says what follows: ``"transform"`` runs again from ``theta0`` with lmfit's change of
    variables (evaluations of both counted in this run), ``"give_up"`` returns None (the
    caller goes on with a bounded method).
    """
    evals0 = watch.evaluations
    try:
        try:
            theta, code = _lmder(prob, watch, theta0, budget, tol, gtol, "guard")
        except _LeftBoundsError:
            if on_bound != "transform":
                return None
            start = watch.best_inside(theta0)
            theta, code = _lmder(prob, watch, start, budget, tol, gtol, "transform")
    except _AbortError as stop:
        theta, code = watch.best_inside(theta0), stop.code
    return _finish_run(prob, watch, theta, code, evals0, _LM, strategy)


def _trf_run(
    prob: _Problem,
    watch: _Watch,
    theta0: FloatArray,
    strategy: str,
    budget: int,
    *,
    tol: float,
    x_scale: str | None,
) -> _Run | None:
    """scipy's trust-region reflective method (bounds, robust losses), no lmfit.

    The model's analytic Jacobian for a formula, else scipy's differences. None if scipy
    rejects the problem (the caller keeps what it has).
    """
    kws: dict[str, Any] = {"ftol": tol, "xtol": tol, "gtol": tol, "max_nfev": budget}
    if prob.model.has_jacobian:
        kws["jac"] = watch.jacobian
    if x_scale is not None:
        kws["x_scale"] = x_scale
    kws["loss"] = _SCIPY_LOSS[prob.loss]
    kws["f_scale"] = (prob.loss_scale or 1.0) / prob.rscale
    theta0 = np.clip(theta0, prob.lower, prob.upper)
    evals0 = watch.evaluations
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            sol = least_squares(
                watch.residual, theta0, method="trf", bounds=(prob.lower, prob.upper), **kws
            )
        theta, code = np.asarray(sol.x, dtype=float), _code_of(sol, _TR)
    except _AbortError as stop:
        theta, code = watch.best_inside(theta0), stop.code
    except (ValueError, np.linalg.LinAlgError):
        return None
    return _finish_run(prob, watch, theta, code, evals0, _TR, strategy)


def _code_of(raw: Any, method: str) -> str:
    if method == _LM:
        ier = raw.ier if hasattr(raw, "ier") else raw.call_kws.get("ier", -99)
        return LEASTSQ_IER.get(int(ier), "not_converged")
    status = getattr(raw, "status", None)
    if status is None:
        return "converged_ssr" if raw.success else "not_converged"
    return LEAST_SQUARES_STATUS.get(int(status), "not_converged")


def _first_run(prob: _Problem, watch: _Watch, theta0: FloatArray, method: str, budget: int) -> _Run:
    """The first run: the fast analytic one for a formula model, else lmfit's."""
    if prob.model.has_jacobian:
        run = (
            _lm_run(
                prob, watch, theta0, "first run", budget, tol=_TOL, gtol=0.0, on_bound="transform"
            )
            if method == _LM
            else _trf_run(prob, watch, theta0, "first run", budget, tol=_TOL, x_scale=None)
        )
        if run is not None:
            return run
    return _solve(prob, watch, theta0, method, "first run", budget)


def _first_method(prob: _Problem, method: str) -> str:
    """The first run's solver: trust-region when asked or for a robust loss, else LM."""
    return _TR if (method == _TR or prob.loss != "squared") else _LM


def _ladder(
    prob: _Problem,
    watch: _Watch,
    method: str,
    budget: int,
) -> list[_Run]:
    """Run solvers until one converges and a restart from its point cannot improve it."""
    theta0 = np.array([prob.values0[n] for n in prob.free], dtype=float)
    first = _first_method(prob, method)
    other = _TR if first == _LM else _LM
    runs = [_first_run(prob, watch, theta0, first, budget)]
    stop_codes = _STOP

    def best() -> _Run:
        return min(runs, key=lambda r: r.objective)

    if runs[-1].code in stop_codes:
        return runs
    if outcome(runs[0].code).success:
        return runs  # the polish in fit() finishes it at machine precision
    # A run that stopped without converging (evaluation limit, a stall on a plateau) usually
    # moves on when restarted from its best point; at a true minimum the restart ends quickly.
    # The rungs below are lmfit's runs, which difference the model: another view of a hard
    # problem than the analytic first run's.
    runs.append(_solve(prob, watch, best().theta, first, "restart from best point", budget))
    if runs[-1].code in stop_codes:
        return runs
    b = best()
    improved = runs[0].objective - runs[1].objective > _STALL * max(runs[0].objective, 1e-300)
    if outcome(b.code).success and not improved:
        return runs
    ladder: list[tuple[str, str, str | None]] = []
    if prob.loss == "squared" or other == _TR:
        ladder.append((other if prob.loss == "squared" else _TR, "switch method", None))
    ladder.append((_TR, "rescaled parameters", "jac"))
    for meth, strategy, xs in ladder:
        runs.append(_solve(prob, watch, best().theta, meth, strategy, budget, xs))
        if runs[-1].code in stop_codes:
            return runs
        if outcome(best().code).success and runs[-1] is not best():
            break
    if not outcome(best().code).success and prob.free:
        # Last resort: the generic multi-start from the data, ignoring the given start.
        from ..start import generic_start

        try:
            seed = generic_start(prob.model, prob.x, prob.y, fixed=prob.fixed)
            theta = prob.theta_from(seed)
            runs.append(_solve(prob, watch, theta, first, "multi-start", budget))
        except (DataError, ParameterError, ArithmeticError, ValueError):
            pass
    return runs


def _global_search(prob: _Problem, watch: _Watch, method: str, budget: int) -> list[_Run]:
    """Fits from starts that ignore the user's (:meth:`_Problem.search_starts`).

    Run when the point the user's start reached is suspect (degenerate, or parameters nearly
    interchangeable). Each start gets the first run's solver; the best of them is polished.
    Returns every run made, named ``"global search: ..."`` in the attempts.
    """
    runs: list[_Run] = []
    for strategy, make in prob.search_starts():
        try:
            theta = make()
        except (DataError, ParameterError, ArithmeticError, ValueError, np.linalg.LinAlgError):
            continue
        if not np.all(np.isfinite(theta)):
            continue
        run = _first_run(prob, watch, theta, method, budget)
        run.strategy = strategy
        runs.append(run)
        if run.code in _STOP:
            return runs
    done = [r for r in runs if outcome(r.code).success and math.isfinite(r.objective)]
    if done:
        best = min(done, key=lambda r: r.objective)
        polished = _polish(prob, watch, best, budget)
        if polished.objective <= best.objective and outcome(polished.code).success:
            polished.strategy = "global search: polish"
            runs.append(polished)
    return runs


def _polish(prob: _Problem, watch: _Watch, best: _Run, budget: int) -> _Run:
    """Finish from the best point with exact derivatives and tolerances at machine precision.

    lmfit's runs difference the model numerically, which limits the solution to about seven
    significant digits, and the first run's tolerances stop short of machine precision; for a
    formula model this run uses the analytic Jacobian, which takes certified NIST values to ten
    digits or more. With the squared loss it is MINPACK's Levenberg-Marquardt (lmder), which
    from a minimum ends within an iteration or two; if it heads outside the bounds (a minimum
    on a bound), and for a robust loss, it is the trust-region reflective method. A Python
    callable is differenced by MINPACK or scipy.
    """
    bounded = bool(np.any(np.isfinite(prob.lower)) or np.any(np.isfinite(prob.upper)))
    theta0 = np.clip(best.theta, prob.lower, prob.upper)
    evals0 = watch.evaluations
    if prob.loss == "squared" and (prob.model.has_jacobian or not bounded):
        lm = _lm_run(prob, watch, theta0, "polish", budget, tol=_EPS, gtol=_EPS, on_bound="give_up")
        if lm is not None:
            return lm
    trf = _trf_run(prob, watch, theta0, "polish", budget, tol=_EPS, x_scale="jac")
    if trf is None:
        return best
    trf.evaluations = watch.evaluations - evals0  # with the Levenberg-Marquardt try, if any
    return trf


def _linear_run(prob: _Problem) -> _Run | None:
    """Solve a polynomial directly by QR when nothing calls for iteration."""
    k = prob.model.polynomial_degree
    if (
        k is None
        or prob.fixed
        or prob.links
        or prob.loss != "squared"
        or np.any(np.isfinite(prob.lower))
        or np.any(np.isfinite(prob.upper))
    ):
        return None
    sol = solve_polynomial(prob.x, prob.y, k, weights=None if prob.w is None else prob.w**2)
    coef = np.asarray(sol.coef, dtype=float)
    theta = np.array([coef[prob.model.param_names.index(n)] for n in prob.free])
    r = _weighted(prob, theta)
    ssr = float(r @ r)
    return _Run(theta, ssr, ssr, "linear", 0, "linear", "linear")


def _lmfit_at(prob: _Problem, theta: FloatArray) -> Callable[[], Any]:
    """An lmfit result at the solution, made when first asked for (FitResult.lmfit_result).

    The fast path does not run lmfit; a power user who wants lmfit's object gets one from a
    short lmfit run started at the solution, which ends where it starts to lmfit's tolerance.
    """

    def run() -> Any:
        method = _LM if prob.loss == "squared" else _TR
        watch = _Watch(prob, None, None, None, None)
        return _solve(prob, watch, theta, method, "lmfit", 2000 * (len(prob.free) + 1)).raw

    return run
