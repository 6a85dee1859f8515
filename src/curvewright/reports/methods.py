"""The methods paragraph: what was done to the data, in words a paper can use as they are.

Everything is read from the result itself (its weighting, loss, the solver runs it records,
whether sigma was taken as exact, its degrees of freedom, its derived quantities), so the text
says what this fit did, not what fits usually do.
"""

from __future__ import annotations

from typing import Any

from ..batch_result import BatchResult
from ..errors import ParameterError
from ..global_result import GlobalResult, GroupFit
from ..result import FitResult, _power_of
from .versions import software_versions

__all__ = ["methods_text"]

_WEIGHTING = {
    "none": "with every point weighted equally",
    "sigma": "with each point weighted by 1/sigma^2 from its given standard deviation",
    "relative": "with relative weights 1/y^2 (scatter taken as proportional to the response)",
    "poisson": "with Poisson weights 1/|y| (variance taken as proportional to the response)",
}
_LOSS = {
    "pseudo_huber": "the pseudo-Huber loss",
    "huber": "the Huber loss",
}


def _pct(level: float) -> str:
    return f"{100 * level:g}%"


def _weighting(weighting: str, absolute_sigma: bool) -> str:
    text = _WEIGHTING.get(weighting, f"with weighting {weighting!r}")
    return text + (" (the standard deviations taken as exact)" if absolute_sigma else "")


def _loss(loss: str, scale: float | None) -> str:
    if loss == "squared":
        return "the sum of squared residuals was minimised"
    scaled = f" with residual scale {scale:.4g}" if scale is not None else ""
    return (
        f"a robust criterion, {_LOSS.get(loss, loss)}{scaled}, was minimised, so that points "
        "far from the curve pull on it less than under squared residuals (the standard errors "
        "then use the least-squares formula at the solution and are approximate)"
    )


def _solver(method: str, formula: bool, versions: dict[str, str]) -> str:
    scipy = versions.get("scipy", "")
    if method == "linear":
        return (
            "The model is linear in its parameters, so the estimates were computed directly by "
            "a QR decomposition of the column-scaled design matrix (no iteration)"
        )
    if method == "levenberg_marquardt":
        if formula:
            return (
                "Estimates were found with the Levenberg-Marquardt algorithm as implemented in "
                f"MINPACK (lmder, called through SciPy {scipy}), using the model's analytic "
                "derivatives"
            )
        return (
            "Estimates were found with the Levenberg-Marquardt algorithm as implemented in "
            f"MINPACK, called through lmfit {versions.get('lmfit', '')}, with derivatives by "
            "finite differences"
        )
    if method == "trust_region":
        deriv = "the model's analytic derivatives" if formula else "finite-difference derivatives"
        return (
            "Estimates were found with the trust-region reflective algorithm of SciPy's "
            f"least_squares (SciPy {scipy}), using {deriv}"
        )
    return f"Estimates were found with the method {method!r}"


def _runs(attempts: Any) -> str:
    strategies = [a.strategy for a in attempts]
    if not strategies or strategies == ["linear"]:
        return ""
    extra = [s for s in dict.fromkeys(strategies) if s not in ("first run", "polish")]
    text = f"; the solver made {len(strategies)} run(s)"
    if extra:
        text += f" (besides the first: {', '.join(extra)})"
    if "polish" in strategies:
        text += ", the last a polishing run from the best point found"
    return text


def _intervals(level: float, dof: int | None, absolute_sigma: bool, intervals: str = "wald") -> str:
    # dof None: a batch, where every group has its own degrees of freedom.
    dofs = (
        "each group's residual degrees of freedom" if dof is None else f"{dof} degrees of freedom"
    )
    se = (
        "Standard errors come from the asymptotic covariance matrix of the estimates, computed "
        "from the Jacobian at the solution"
        + (
            " with the weights taken as exact"
            if absolute_sigma
            else f" and scaled by the residual variance (weighted SSR divided by {dofs})"
        )
    )
    q = (
        "the standard normal quantile (sigma taken as known)"
        if absolute_sigma
        else f"the Student t quantile on {dofs}"
    )
    if intervals == "profile":
        return (
            f"{se}. The {_pct(level)} confidence intervals of the free parameters are "
            "profile-likelihood intervals: every value at which the sum of squares, with the "
            "other parameters re-fitted, stays below its minimum times 1 + F/(n - p), F being "
            f"the {_pct(level)} quantile of the F distribution on 1 and {dof} degrees of freedom "
            "(an end the data do not bound is reported as unbounded)."
        )
    return (
        f"{se}. The {_pct(level)} confidence intervals of the parameters are Wald intervals, "
        f"estimate plus or minus {q} times the standard error."
    )


def _derived(r: FitResult, intervals: str = "wald") -> str:
    if not r.model.derived:
        return ""
    names = [d.name for d in r.model.derived]
    power = [d.name for d in r.model.derived if (p := _power_of(d)) is not None and p[1] in r.free]
    text = (
        f" Derived quantities ({', '.join(names)}) were computed from the estimates; their "
        "standard errors come from the first-order delta method, and their intervals are the "
        "estimate plus or minus "
        + ("the Student t quantile" if intervals == "profile" else "the same quantile")
        + " times that standard error"
    )
    if power:
        text += (
            f", except for {', '.join(power)}, a power of one parameter, whose interval is that "
            "parameter's interval carried through the power (so it is asymmetric)"
        )
    return text + "."


def _software(versions: dict[str, str]) -> str:
    libs = ", ".join(f"{k} {v}" for k, v in versions.items() if k not in ("curvewright",))
    return f" Computations were made with curvewright {versions['curvewright']} ({libs})."


def _model(model: Any) -> str:
    if model.formula:
        return f"The {model.name} model, y = {model.formula},"
    return f"The model {model.name} (a Python function)"


def _fit_methods(r: FitResult, level: float, intervals: str = "wald") -> str:
    v = software_versions()
    excluded = sum(int((~d.include).sum()) for d in r.datasets)
    points = f"{r.n} data points" + (f" ({excluded} excluded by the analyst)" if excluded else "")
    kind = "linear" if r.method == "linear" else "nonlinear"
    return (
        f"{_model(r.model)} was fitted to {points} by {kind} least squares "
        f"{_weighting(r.weighting, r.absolute_sigma)}; {_loss(r.loss, r.loss_scale)}. "
        f"{_solver(r.method, r.model.formula is not None, v)}{_runs(r.attempts)}. "
        f"{_intervals(level, r.dof, r.absolute_sigma, intervals)}{_derived(r, intervals)}"
        " Goodness of fit is reported as R^2 (descriptive for a nonlinear model), AICc and BIC."
        f"{_group_note(r)}{_software(v)}"
    )


def _group_note(r: FitResult) -> str:
    if not isinstance(r, GroupFit):
        return ""
    return (
        f" These are the estimates of one group ({r.group}) of a joint fit of several groups: "
        "its standard errors and intervals use the joint covariance and the joint degrees of "
        "freedom."
    )


def _global_methods(g: GlobalResult, level: float) -> str:
    v = software_versions()
    shared = ", ".join(g.shared) or "no parameter"
    own = ", ".join(g.per_group) or "no parameter"
    consts = (
        f"; {', '.join(g.constants)} took each group's value from the data" if g.constants else ""
    )
    derived = _derived(g.groups[0]) if g.groups else ""
    return (
        f"{_model(g.model)} was fitted jointly to {len(g)} groups ({g.n} data points in all) by "
        f"nonlinear least squares {_weighting(g.weighting, g.absolute_sigma)}, with {shared} "
        f"shared by all groups and {own} estimated for each group{consts}; "
        f"{_loss(g.loss, g.loss_scale)}. {_solver(g.method, g.model.formula is not None, v)}"
        f"{_runs(g.attempts)}. {_intervals(level, g.dof, g.absolute_sigma)}"
        " Each group's intervals use the joint covariance and the joint degrees of freedom."
        f"{derived}{_software(v)}"
    )


def _batch_methods(b: BatchResult, level: float) -> str:
    v = software_versions()
    opts = dict(b.options)
    weights = opts.get("weights")
    if weights is None:
        # As fit() resolves it: the given sigma when there is one, else equal weights.
        given = any(d is not None and d.sigma is not None for d in b.datasets)
        weights = "sigma" if given else "none"
    weighting = _weighting(str(weights), bool(opts.get("absolute_sigma", False)))
    loss = str(opts.get("loss", "squared"))
    paths = {p: sum(1 for t in b.paths if t == p) for p in ("vectorised", "per-group", "none")}
    c = b.counts
    parts = []
    if paths["vectorised"]:
        parts.append(
            f"{paths['vectorised']} group(s) were fitted by curvewright's vectorised "
            "Levenberg-Marquardt routine, which fits many groups at once"
        )
    if paths["per-group"]:
        parts.append(
            f"{paths['per-group']} group(s) by the single-fit procedure (the Levenberg-Marquardt "
            f"algorithm of MINPACK through SciPy {v.get('scipy', '')}, with its fallbacks)"
        )
    if paths["none"]:
        parts.append(f"{paths['none']} group(s) were not fitted")
    route = "; ".join(parts)
    route = route[:1].upper() + route[1:]
    return (
        f"{_model(b.model)} was fitted separately to each of {len(b)} groups (by "
        f"{', '.join(b.by)}) by nonlinear least squares {weighting}; "
        f"{_loss(loss, opts.get('loss_scale'))}. {route}. Each fit was then judged: "
        f"{c['ok']} groups were fitted with nothing to report, {c['flagged']} were flagged for "
        f"a person to review and {c['failed']} could not be fitted, each with its reason. "
        f"{_intervals(level, None, bool(opts.get('absolute_sigma', False)))}"
        f"{_software(v)}"
    )


def methods_text(obj: Any, *, level: float = 0.95, intervals: str = "wald") -> str:
    """The methods paragraph of a FitResult, GlobalResult or BatchResult.

    Parameters
    ----------
    obj : FitResult, GlobalResult or BatchResult
    level : float
        Coverage of the intervals the paragraph describes.
    intervals : {"wald", "profile"}
        How the report computed the parameters' intervals (profile: single fits only).

    Returns
    -------
    str
        One paragraph, plain text.
    """
    if not (isinstance(level, (int, float)) and 0 < float(level) < 1):
        raise ParameterError(f"level must be a number between 0 and 1 (e.g. 0.95), got {level!r}.")
    if intervals not in ("wald", "profile"):
        raise ParameterError(f"intervals must be 'wald' or 'profile', got {intervals!r}.")
    if isinstance(obj, FitResult):
        return _fit_methods(obj, level, intervals)
    if intervals != "wald":
        raise ParameterError("profile intervals are described for single fits only.")
    if isinstance(obj, GlobalResult):
        return _global_methods(obj, level)
    if isinstance(obj, BatchResult):
        return _batch_methods(obj, level)
    raise ParameterError(
        "methods are written for a FitResult, GlobalResult or BatchResult, got "
        f"{type(obj).__name__}."
    )
