"""Dragging on the Python side: the parameter values that put a handle, or the curve, where asked.

This mirrors ``js/handles.ts`` step for step, so the kernel and the browser agree on where a drag
lands (checked on shared vectors, ``tests/data/handle_vectors.json``):

* :func:`move_handle` / :func:`solve_handle` change only the parameters a handle moves (minus
  fixed ones) so that its (x, y) lands on a target;
* :func:`pin_through` / :func:`solve_pins` change chosen parameters so the curve passes through
  one or more pins, for models without declared handles (callable models too).

Both are tiny nonlinear least-squares problems solved by the same damped Gauss-Newton
(Levenberg-Marquardt) iteration as the front end: central-difference derivatives, Marquardt's
diagonal scaling, simple bounds by an active set and projection, positive parameters moved in log
space. Distances are measured in screen units (log10 on a log axis, divided by the visible span),
so "close" means close on screen. When the target cannot be reached (a bound, or fewer moved
parameters than coordinates) the result is the closest reachable point and says so.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .errors import HandleError, ParameterError
from .models import Handle, Model, unknown_name_message

__all__ = [
    "HandleSolution",
    "log_params",
    "move_handle",
    "pin_through",
    "solve_handle",
    "solve_pins",
]

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class HandleSolution:
    """What a drag produced.

    Attributes
    ----------
    values : dict
        Every parameter of the model; only the moved ones differ from the input.
    converged : bool
        The iteration stopped normally (target reached, or no further improvement possible).
    reached : bool
        The screen distance left is within ``tol``: the handle (or every pin) is where asked.
    clamped : tuple of str
        Parameters a bound stopped (empty when none did).
    distance : float
        Remaining screen-normalised distance (root of the sum of squared residuals).
    iterations : int
    message : str
    """

    values: dict[str, float]
    converged: bool
    reached: bool
    clamped: tuple[str, ...]
    distance: float
    iterations: int
    message: str


# ------------------------------------------------------------------------------------ LM core
@dataclass
class _LMResult:
    u: FloatArray
    cost: float
    iterations: int
    converged: bool
    at_bound: list[bool]
    message: str


def _half_sum_sq(r: FloatArray) -> float:
    if not np.all(np.isfinite(r)):
        return math.inf
    with np.errstate(over="ignore"):  # residuals near 1e154 square to inf: a cost of inf
        return 0.5 * float(np.dot(r, r))


def _lm(
    residuals: Callable[[FloatArray], FloatArray],
    u0: FloatArray,
    lower: FloatArray,
    upper: FloatArray,
    typical: FloatArray,
    cost_tol: float,
    max_iter: int,
) -> _LMResult:
    """Minimise ``0.5*|r(u)|**2`` in the box ``lower <= u <= upper`` (as ``levenbergMarquardt``)."""
    n = u0.size
    u = u0.astype(float).copy()
    touched = [False] * n
    for j in range(n):
        if u[j] < lower[j]:
            u[j] = lower[j]
            touched[j] = True
        elif u[j] > upper[j]:
            u[j] = upper[j]
            touched[j] = True
    r = residuals(u)
    cost = _half_sum_sq(r)

    def finish(converged: bool, iterations: int, message: str) -> _LMResult:
        at = [touched[j] and (u[j] == lower[j] or u[j] == upper[j]) for j in range(n)]
        return _LMResult(u, cost, iterations, converged, at, message)

    if not math.isfinite(cost):
        return finish(False, 0, "the curve cannot be evaluated at the starting parameter values")
    lam = 1e-3
    m = r.size
    for it in range(1, max_iter + 1):
        if cost <= cost_tol:
            return finish(True, it - 1, "reached the target")
        J = np.zeros((m, n))
        for j in range(n):
            uj = u[j]
            h = 1e-6 * max(abs(uj), typical[j])
            u[j] = uj + h
            rp = residuals(u)
            u[j] = uj - h
            rm = residuals(u)
            u[j] = uj
            ok_p = _half_sum_sq(rp) < math.inf
            ok_m = _half_sum_sq(rm) < math.inf
            if ok_p and ok_m:
                J[:, j] = (rp - rm) / (2 * h)
            elif ok_p:
                J[:, j] = (rp - r) / h
            elif ok_m:
                J[:, j] = (r - rm) / h
        g = J.T @ r
        A = J.T @ J
        free = []
        for j in range(n):
            blocked = (u[j] <= lower[j] and g[j] > 0) or (u[j] >= upper[j] and g[j] < 0)
            if blocked:
                touched[j] = True
            else:
                free.append(j)
        g_norm = max((abs(g[j]) for j in free), default=0.0)
        max_diag = max((A[j, j] for j in free), default=0.0)
        if not free or g_norm <= 1e-15 * max(1.0, cost) or max_diag == 0:
            if not free:
                msg = "stopped at the parameters' bounds"
            elif max_diag == 0:
                msg = "the moved parameters do not change this position here"
            else:
                msg = "closest reachable point found"
            return finish(True, it - 1, msg)
        accepted = False
        idx = np.array(free)
        while lam < 1e12:
            Ar = A[np.ix_(idx, idx)].copy()
            br = -g[idx]
            diag = np.maximum(A[idx, idx], 1e-12 * max_diag)
            Ar[np.diag_indices_from(Ar)] += lam * diag
            try:
                step = np.linalg.solve(Ar, br)
            except np.linalg.LinAlgError:
                lam *= 10
                continue
            trial = u.copy()
            hit = np.zeros(n, dtype=bool)
            small = True
            for a, j in enumerate(free):
                v = u[j] + step[a]
                if v < lower[j]:
                    v = lower[j]
                    hit[j] = True
                elif v > upper[j]:
                    v = upper[j]
                    hit[j] = True
                trial[j] = v
                if abs(v - u[j]) > 1e-14 * max(abs(u[j]), 1e-3):
                    small = False
            if small:
                return finish(True, it, "closest reachable point found")
            r_trial = residuals(trial)
            c_trial = _half_sum_sq(r_trial)
            if c_trial < cost:
                u = trial
                r = r_trial
                cost = c_trial
                for j in range(n):
                    if hit[j]:
                        touched[j] = True
                lam = max(lam * 0.3, 1e-12)
                accepted = True
                break
            lam *= 10
        if not accepted:
            return finish(True, it, "closest reachable point found")
    return finish(cost <= cost_tol, max_iter, "stopped after the iteration limit")


# ------------------------------------------------------------------------------- set-up
@dataclass(frozen=True)
class _Unknowns:
    names: tuple[str, ...]
    log_space: tuple[bool, ...]
    u0: FloatArray
    typical: FloatArray
    lower: FloatArray
    upper: FloatArray

    def values(self, u: FloatArray, base: Mapping[str, float]) -> dict[str, float]:
        out = dict(base)
        for name, lg, ui in zip(self.names, self.log_space, u, strict=True):
            out[name] = math.exp(ui) if lg else float(ui)
        return out


def log_params(model: Model) -> frozenset[str]:
    """Parameters a drag moves in log space: those marked ``log_scale``.

    The same rule as the front end (``solveOptions`` in ``js/interact.ts``), so both sides solve
    the same problem. Catalog rates, concentrations and widths are all ``log_scale``; a value
    that is not positive at the start of a drag moves linearly (as in ``js/handles.ts``).
    """
    return frozenset(p.name for p in model.params if p.log_scale)


def _values(model: Model, values: Mapping[str, float]) -> dict[str, float]:
    out = model.defaults()
    for k, v in values.items():
        if k not in out:
            raise ParameterError(
                unknown_name_message(k, model.param_names, f"model {model.name!r}")
            )
        fv = float(v)
        if not math.isfinite(fv):
            raise ParameterError(f"Parameter {k!r} has no finite value (got {v!r}); give a number.")
        out[k] = fv
    return out


def _fixed_names(model: Model, fixed: Iterable[str] | Mapping[str, float] | None) -> set[str]:
    names = set(fixed.keys() if isinstance(fixed, Mapping) else (fixed or ()))
    for n in names:
        if n not in model.param_names:
            raise ParameterError(
                unknown_name_message(n, model.param_names, f"model {model.name!r}")
            )
    return names


def _unknowns(
    model: Model,
    names: Sequence[str],
    values: Mapping[str, float],
    fixed: set[str],
    logs: frozenset[str],
) -> _Unknowns:
    chosen = tuple(n for n in dict.fromkeys(names) if n not in fixed)
    u0, typ, lo, hi, lg = [], [], [], [], []
    for n in chosen:
        v = values[n]
        p = model.param(n)
        use_log = n in logs and v > 0
        lg.append(use_log)
        if use_log:
            u0.append(math.log(v))
            typ.append(1.0)  # a log-space step of 1e-6 is a relative change of 1e-6
            lo.append(math.log(p.lower) if p.lower > 0 else -math.inf)
            hi.append(math.log(p.upper) if p.upper > 0 else -math.inf)
        else:
            u0.append(v)
            typ.append(abs(v) if v != 0 else 1e-3)
            lo.append(p.lower)
            hi.append(p.upper)
    return _Unknowns(chosen, tuple(lg), np.array(u0), np.array(typ), np.array(lo), np.array(hi))


def _axis(v: float | FloatArray, log: bool) -> FloatArray:
    with np.errstate(all="ignore"):
        return np.log10(v) if log else np.asarray(v, dtype=float)


def _span_for(given: float | None, log: bool, *refs: float) -> float:
    if given is not None:
        if not (math.isfinite(given) and given > 0):
            raise HandleError(f"span must be a positive finite number, got {given}.")
        return float(given)
    if log:
        return 1.0
    mag = max((abs(r) if math.isfinite(r) else 0.0) for r in refs)
    return mag if mag > 0 else 1.0


def _check_point(
    p: tuple[float, float], x_log: bool, y_log: bool, what: str
) -> tuple[float, float]:
    try:
        px, py = (float(p[0]), float(p[1]))
    except (TypeError, ValueError, IndexError) as exc:
        raise HandleError(f"{what} must be a pair of numbers (x, y), got {p!r}.") from exc
    if not (math.isfinite(px) and math.isfinite(py)):
        raise HandleError(f"{what} must have finite x and y, got ({px}, {py}).")
    if x_log and not px > 0:
        raise HandleError(f"{what}: x must be > 0 on a log x axis, got {px}.")
    if y_log and not py > 0:
        raise HandleError(f"{what}: y must be > 0 on a log y axis, got {py}.")
    return px, py


def _run(
    unk: _Unknowns,
    m: int,
    base: dict[str, float],
    fill: Callable[[dict[str, float]], FloatArray],
    tol: float,
    max_iter: int,
) -> HandleSolution:
    if not unk.names:
        r = fill(dict(base))
        dist = math.sqrt(2 * _half_sum_sq(r))
        return HandleSolution(
            dict(base), False, dist <= tol, (), dist, 0, "no free parameter to move"
        )
    res = _lm(
        lambda u: fill(unk.values(u, base)),
        unk.u0,
        unk.lower,
        unk.upper,
        unk.typical,
        0.5 * tol * tol,
        max_iter,
    )
    dist = math.sqrt(2 * res.cost)
    clamped = tuple(n for n, b in zip(unk.names, res.at_bound, strict=True) if b)
    return HandleSolution(
        unk.values(res.u, base),
        res.converged,
        dist <= tol,
        clamped,
        dist,
        res.iterations,
        res.message,
    )


# ----------------------------------------------------------------------------- public API
def _find_handle(model: Model, name: str) -> Handle:
    for h in model.handles:
        if h.name == name:
            return h
    known = [h.name for h in model.handles]
    if not known:
        raise HandleError(
            f"Model {model.name!r} has no handles; use pin_through(model, values, pins) to make "
            "the curve pass through points instead."
        )
    raise HandleError(unknown_name_message(name, known, f"model {model.name!r}", kind="handle"))


def solve_handle(
    model: Model,
    values: Mapping[str, float],
    handle: str,
    target: tuple[float, float],
    *,
    fixed: Iterable[str] | Mapping[str, float] | None = None,
    x_log: bool = False,
    y_log: bool = False,
    span: tuple[float | None, float | None] | None = None,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> HandleSolution:
    """Parameter values that put ``handle`` at ``target``, with the details of the solve.

    Only the parameters the handle moves change, never fixed ones; bounds are respected (and
    reported in ``clamped``). Positive parameters move in log space.

    Parameters
    ----------
    model : Model
    values : mapping
        Current parameter values (missing ones take the model's defaults).
    handle : str
        Name of one of ``model.handles``.
    target : (float, float)
        Where the handle was dropped, in data units.
    fixed : iterable of names, or mapping, optional
        Parameters never moved, even if the handle lists them.
    x_log, y_log : bool
        Whether the plot axes are logarithmic (distances are then measured in decades).
    span : (float or None, float or None), optional
        Visible plot span along x and y in axis units (decades on a log axis); the distance is
        divided by it. Defaults: 1 on a log axis, else the larger magnitude of the target and the
        handle's current position (1 if both are zero).
    tol : float
        Screen-normalised distance counted as "reached".
    max_iter : int

    Returns
    -------
    HandleSolution

    Raises
    ------
    HandleError
        Unknown handle, a target that is not two finite numbers (or not positive on a log axis),
        a non-positive span.
    ParameterError
        ``values`` or ``fixed`` name an unknown parameter, or a value is not finite.
    """
    h = _find_handle(model, handle)
    tx, ty = _check_point(target, x_log, y_log, f"target for handle {handle!r}")
    base = _values(model, values)
    fixed_set = _fixed_names(model, fixed)
    sx0, sy0 = span if span is not None else (None, None)
    start = h.position(base)
    sx = _span_for(sx0, x_log, tx, start[0])
    sy = _span_for(sy0, y_log, ty, start[1])
    ax, ay = float(_axis(tx, x_log)), float(_axis(ty, y_log))
    unk = _unknowns(model, h.moves, base, fixed_set, log_params(model))

    def fill(p: dict[str, float]) -> FloatArray:
        with np.errstate(all="ignore"):
            px, py = h.position(p)
        return np.array([(float(_axis(px, x_log)) - ax) / sx, (float(_axis(py, y_log)) - ay) / sy])

    return _run(unk, 2, base, fill, tol, max_iter)


def move_handle(
    model: Model,
    values: Mapping[str, float],
    handle: str,
    target: tuple[float, float],
    *,
    fixed: Iterable[str] | Mapping[str, float] | None = None,
    x_log: bool = False,
    y_log: bool = False,
    span: tuple[float | None, float | None] | None = None,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> dict[str, float]:
    """New parameter values after dragging ``handle`` to ``target``.

    The same solve as :func:`solve_handle` (see there for the arguments), returning just the
    values. When the target cannot be reached (a bound, or the moved parameters can only slide
    the handle along a line) the handle ends at the closest reachable point; call
    :func:`solve_handle` to learn whether it was reached and which bounds stopped it.

    Examples
    --------
    >>> from curvewright import catalog
    >>> m = catalog()["exponential_decay"]
    >>> v = move_handle(m, {"baseline": 0, "amplitude": 10, "k": 1.0}, "half_life", (2.0, 5.0))
    >>> round(v["k"], 6)  # ln 2 / 2
    0.346574
    """
    return solve_handle(
        model,
        values,
        handle,
        target,
        fixed=fixed,
        x_log=x_log,
        y_log=y_log,
        span=span,
        tol=tol,
        max_iter=max_iter,
    ).values


def solve_pins(
    model: Model,
    values: Mapping[str, float],
    pins: Sequence[tuple[float, float]],
    *,
    free: Sequence[str] | None = None,
    fixed: Iterable[str] | Mapping[str, float] | None = None,
    x_log: bool = False,
    y_log: bool = False,
    span_y: float | None = None,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> HandleSolution:
    """Values of the ``free`` parameters that make the curve pass through every pin.

    Least squares in the vertical direction, screen-normalised (as ``solvePins`` in
    ``js/handles.ts``). With fewer pins than free parameters the solution nearest (in the damped
    iteration's sense) to the current values is found; with more, the closest fit.

    Parameters
    ----------
    model : Model
        Any model, formula or callable.
    values : mapping
        Current parameter values (missing ones take the model's defaults).
    pins : sequence of (x, y)
        At least one point.
    free : sequence of str, optional
        The parameters to change; default every parameter not in ``fixed``.
    fixed : iterable of names, or mapping, optional
        Parameters never changed.
    x_log, y_log : bool
        Log axes: pins then need positive coordinates on that axis, and y distances are in decades.
    span_y : float, optional
        Visible y span in axis units; default 1 on a log axis, else the largest ``|y|`` of the pins.
    tol, max_iter
        As for :func:`solve_handle`.

    Raises
    ------
    HandleError
        No pins, a pin that is not two finite numbers (or not positive on a log axis), a
        pin outside the model's domain, a non-positive span.
    ParameterError
        An unknown parameter name or a non-finite value.
    """
    if len(pins) == 0:
        raise HandleError("pin_through needs at least one pin (x, y).")
    pts = [_check_point(p, x_log, y_log, f"pin {i}") for i, p in enumerate(pins)]
    xs = np.array([p[0] for p in pts])
    try:
        model.check_domain(xs)
    except Exception as exc:  # DomainError: re-raised as a handle problem with its message
        raise HandleError(f"pins: {exc}") from exc
    base = _values(model, values)
    fixed_set = _fixed_names(model, fixed)
    names = list(model.param_names) if free is None else list(free)
    for n in names:
        if n not in model.param_names:
            raise ParameterError(
                unknown_name_message(n, model.param_names, f"model {model.name!r}")
            )
    ty = _axis(np.array([p[1] for p in pts]), y_log)
    sy = _span_for(span_y, y_log, *(p[1] for p in pts))
    unk = _unknowns(model, names, base, fixed_set, log_params(model))

    def fill(p: dict[str, float]) -> FloatArray:
        ys = model.eval(xs, p)
        out: FloatArray = (_axis(ys, y_log) - ty) / sy
        return out

    return _run(unk, len(pts), base, fill, tol, max_iter)


def pin_through(
    model: Model,
    values: Mapping[str, float],
    pins: Sequence[tuple[float, float]],
    *,
    free: Sequence[str] | None = None,
    fixed: Iterable[str] | Mapping[str, float] | None = None,
    x_log: bool = False,
    y_log: bool = False,
    span_y: float | None = None,
    tol: float = 1e-10,
    max_iter: int = 100,
) -> dict[str, float]:
    """New parameter values so that the curve passes through ``pins`` (see :func:`solve_pins`).

    Examples
    --------
    >>> from curvewright import Model
    >>> m = Model.from_formula("a*x**b")
    >>> v = pin_through(m, {"a": 1.0, "b": 1.0}, [(1.0, 3.0), (10.0, 30.0)])
    >>> round(v["a"], 9), round(v["b"], 9)
    (3.0, 1.0)
    """
    return solve_pins(
        model,
        values,
        pins,
        free=free,
        fixed=fixed,
        x_log=x_log,
        y_log=y_log,
        span_y=span_y,
        tol=tol,
        max_iter=max_iter,
    ).values
