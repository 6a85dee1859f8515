"""The solver runs of a fit: lmfit with a fallback ladder, an analytic-Jacobian polish, QR.

The only module of curvewright that imports lmfit. Each run returns a :class:`_Run`; the
ladder decides which runs to make (restart, switch method, rescale, multi-start) and the polish
finishes from the best point at machine precision. Cancel, time and evaluation limits are
checked at every model evaluation (:class:`_Watch`).
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import lmfit
import numpy as np
from scipy.optimize import least_squares

from ..errors import DataError, ParameterError
from ..linear import solve_polynomial
from ..messages import LEAST_SQUARES_STATUS, LEASTSQ_IER, outcome
from .problem import FloatArray, _model_jacobian, _Problem

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
    """Counts evaluations, keeps the best point seen and stops a run on cancel or time limit."""

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
        self._last_report = 0.0

    def residual(self, theta: FloatArray) -> FloatArray:
        if self.cancel is not None and self.cancel():
            raise _AbortError("cancelled")
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise _AbortError("stopped_time")
        if self.max_evaluations is not None and self.evaluations >= self.max_evaluations:
            raise _AbortError("stopped_evaluations")
        self.evaluations += 1
        r = self.prob.weighted(self.prob.values(theta))
        bad = ~np.isfinite(r)
        if bad.any():
            r = np.where(bad, _PENALTY, r)
            return r
        ssr = float(r @ r)
        if ssr < self.best_ssr:
            self.best_ssr, self.best_theta = ssr, np.array(theta, dtype=float)
        if self.progress is not None:
            now = time.monotonic()
            if now - self._last_report >= 0.1:
                self._last_report = now
                self.progress(self.evaluations, self.best_ssr)
        return r / self.prob.rscale


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
        theta = watch.best_theta if watch.best_theta is not None else theta0.copy()
        code = stop.code
        raw = None
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r) if np.all(np.isfinite(r)) else math.inf
    if not math.isfinite(ssr) and code != "cancelled":
        code = "not_finite"
    return _Run(
        theta=np.asarray(theta, dtype=float),
        ssr=ssr,
        objective=_objective(prob, r) if math.isfinite(ssr) else math.inf,
        code=code,
        evaluations=watch.evaluations - evals0,
        method=method,
        strategy=strategy,
        raw=raw,
    )


def _code_of(raw: Any, method: str) -> str:
    if method == _LM:
        ier = raw.ier if hasattr(raw, "ier") else raw.call_kws.get("ier", -99)
        return LEASTSQ_IER.get(int(ier), "not_converged")
    status = getattr(raw, "status", None)
    if status is None:
        return "converged_ssr" if raw.success else "not_converged"
    return LEAST_SQUARES_STATUS.get(int(status), "not_converged")


def _ladder(
    prob: _Problem,
    watch: _Watch,
    method: str,
    budget: int,
) -> list[_Run]:
    """Run solvers until one converges and a restart from its point cannot improve it."""
    theta0 = np.array([prob.values0[n] for n in prob.free], dtype=float)
    first = _TR if (method == _TR or prob.loss != "squared") else _LM
    other = _TR if first == _LM else _LM
    runs = [_solve(prob, watch, theta0, first, "first run", budget)]
    stop_codes = ("cancelled", "stopped_time")

    def best() -> _Run:
        return min(runs, key=lambda r: r.objective)

    if runs[-1].code in stop_codes:
        return runs
    if outcome(runs[0].code).success:
        return runs  # the polish in fit() refines it with exact derivatives
    # A run that stopped without converging (evaluation limit, a stall on a plateau) usually
    # moves on when restarted from its best point; at a true minimum the restart ends quickly.
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


def _polish(prob: _Problem, watch: _Watch, best: _Run, budget: int) -> _Run:
    """Finish from the best point with exact derivatives and tolerances at machine precision.

    The lmfit runs difference the model numerically, which limits the solution to about seven
    significant digits; for a formula model this run uses the analytic Jacobian (MINPACK's
    lmder through ``scipy.optimize.least_squares``, or its trust-region method when bounds or a
    robust loss are in force), which takes certified NIST values to ten digits or more.
    """
    bounded = bool(np.any(np.isfinite(prob.lower)) or np.any(np.isfinite(prob.upper)))
    meth: Literal["trf", "lm"] = "trf" if (bounded or prob.loss != "squared") else "lm"
    w = prob.w

    def jac(theta: FloatArray) -> FloatArray:
        J = _model_jacobian(prob, theta, prob.values(theta))
        return -(J if w is None else J * w[:, None]) / prob.rscale

    eps = float(np.finfo(float).eps)
    kws: dict[str, Any] = {"ftol": eps, "xtol": eps, "gtol": eps, "max_nfev": budget}
    if prob.model.expr is not None:
        kws["jac"] = jac
    if meth == "trf":
        kws["loss"] = _SCIPY_LOSS[prob.loss]
        kws["f_scale"] = (prob.loss_scale or 1.0) / prob.rscale
        kws["bounds"] = (prob.lower, prob.upper)
        kws["x_scale"] = "jac"
    theta0 = np.clip(best.theta, prob.lower, prob.upper)
    evals0 = watch.evaluations
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            sol = least_squares(watch.residual, theta0, method=meth, **kws)
        theta, code = (
            np.asarray(sol.x, dtype=float),
            LEAST_SQUARES_STATUS.get(int(sol.status), "not_converged"),
        )
    except _AbortError as stop:
        theta = watch.best_theta if watch.best_theta is not None else theta0
        code = stop.code
    except (ValueError, np.linalg.LinAlgError):
        return best
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r) if np.all(np.isfinite(r)) else math.inf
    return _Run(
        theta=theta,
        ssr=ssr,
        objective=_objective(prob, r) if math.isfinite(ssr) else math.inf,
        code=code if math.isfinite(ssr) else "not_finite",
        evaluations=watch.evaluations - evals0,
        method=_LM if meth == "lm" else _TR,
        strategy="polish",
    )


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
    r = prob.weighted(prob.values(theta))
    ssr = float(r @ r)
    return _Run(theta, ssr, ssr, "linear", 0, "linear", "linear")
