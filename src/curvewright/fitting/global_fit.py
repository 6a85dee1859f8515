"""Global fits: one model fitted to several groups at once, some parameters shared.

:func:`fit_global` splits a table into groups, validates everything once (columns, groups,
shared names, constants, starts, bounds, links, weights), then builds a :class:`_GlobalProblem`:
a :class:`_Problem` whose free parameters are the expanded ones (one per shared name, one per
group for the others), whose curve evaluates the original model on each group's slice and
whose Jacobian is block-structured from the model's analytic derivatives (central differences
per group for Python functions). The engine (:mod:`.engine`) runs on it unchanged; the
covariance comes from :func:`.assemble._covariance`, the per-group findings from
:func:`.assemble._diagnostics`.
"""

from __future__ import annotations

import itertools
import math
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..data import Dataset, split_groups
from ..errors import CurvewrightError, DataError, FitError, ParameterError
from ..expr import Expr
from ..global_result import GlobalResult, GroupFit, expanded_name
from ..inference import delta_method_variance
from ..messages import outcome
from ..models import Model, as_number, unknown_name_message
from ..numerics import aicc as _aicc
from ..numerics import bic as _bic
from ..numerics import finite_difference_jacobian
from ..parameters import Moved, Parameter, Parameters, move_inside
from ..result import Attempt, Diagnostic
from ..start import guided_start
from .assemble import (
    _Degeneracy,
    _diagnostics,
    _judged,
    _Search,
    _Solution,
    _solution,
    _stop_notes,
)
from .engine import _Run, _Watch
from .problem import (
    FloatArray,
    Loss,
    Method,
    Weighting,
    _check_limits,
    _check_loss,
    _param_jacobian,
    _Problem,
    _weights,
    request_parameters,
    resolve_model,
)
from .single import _run_and_judge, fit

__all__ = ["fit_global"]

# Findings about the whole fit, reported once (not once per group).
_WHOLE_FIT = frozenset({"not_converged", "singular", "near_singular", "robust_loss"})


# ============================================================================ the problem
@dataclass
class _GlobalProblem(_Problem):
    """The stacked problem of a global fit: expanded free parameters, one slice per group."""

    slices: tuple[slice, ...] = ()
    # Per group: its held values (constants and fixed) and the theta column of each of its
    # free model parameters.
    held: tuple[dict[str, float], ...] = ()
    cols: tuple[dict[str, int], ...] = ()
    group_links: dict[str, Expr] = field(default_factory=dict)
    base: tuple[str, ...] = ()  # model parameter name of each expanded free parameter
    # The joint start from every group fitted alone with no start (the global search's first
    # start); None when the fit began from that already (no start given).
    alone: Callable[[], FloatArray] | None = None

    def model_names(self) -> tuple[str, ...]:
        return self.base

    def search_starts(self) -> list[tuple[str, Callable[[], FloatArray]]]:
        # On all points together only the values every group holds alike can be held.
        common = {
            k: v for k, v in self.held[0].items() if all(h.get(k) == v for h in self.held[1:])
        }
        pooled = self._pooled_starts(common)
        if self.alone is None:
            return pooled
        return [("global search: groups alone", self.alone), *pooled]

    def _plan(self) -> None:
        # The single-fit plans index the model's own parameters; these index expanded ones.
        names = self.model.param_names
        n, p = self.x.size, len(self.free)
        # Every parameter's value at every point is one gather from z = [theta, held values]:
        # a formula model is then evaluated for all groups in one vectorised call (the
        # residual is the hot path; a Python loop over groups would cost a call per group).
        held_flat: list[float] = []
        index = np.full((len(names), n), -1, dtype=np.intp)
        for g, sl in enumerate(self.slices):
            for i, nm in enumerate(names):
                if nm in self.cols[g]:
                    index[i, sl] = self.cols[g][nm]
                elif nm in self.held[g]:
                    index[i, sl] = p + len(held_flat)
                    held_flat.append(self.held[g][nm])
        self._index = index
        self._held_flat = np.array(held_flat, dtype=float)
        self._linked_rows = [
            (names.index(nm), e.compile(list(names))) for nm, e in self.group_links.items()
        ]
        self._link_derivs = [
            (
                names.index(nm),
                [(names.index(m), e.derivative(m).compile(list(names))) for m in e.names],
            )
            for nm, e in self.group_links.items()
        ]
        self._vectorised = self.model.expr is not None

    def _rows(self, th: FloatArray) -> FloatArray:
        """Each model parameter's value at each point, shape (n_params, n)."""
        z = np.concatenate([np.asarray(th, dtype=float), self._held_flat])
        rows = z[np.where(self._index >= 0, self._index, 0)]
        if self._linked_rows:
            with np.errstate(all="ignore"):
                for i, fn in self._linked_rows:
                    rows[i] = np.broadcast_to(np.asarray(fn(*rows), dtype=float), self.x.shape)
        return rows

    def group_values(self, th: FloatArray, g: int) -> dict[str, float]:
        """Every model parameter's value in group ``g`` at the free vector ``th``."""
        v = dict(self.held[g])
        for n, j in self.cols[g].items():
            v[n] = float(th[j])
        with np.errstate(all="ignore"):
            for n, e in self.group_links.items():
                v[n] = float(np.asarray(e.evaluate(v)))
        return {n: v[n] for n in self.model.param_names}

    def theta_of(self, values: Mapping[str, float]) -> FloatArray:
        return np.array([values[n] for n in self.free], dtype=float)

    def values(self, theta: Sequence[float] | FloatArray) -> dict[str, float]:
        return dict(zip(self.free, (float(t) for t in theta), strict=True))

    def curve(self, values: Mapping[str, float]) -> FloatArray:
        return self.curve_at(self.theta_of(values))

    def curve_at(self, theta: Sequence[float] | FloatArray) -> FloatArray:
        th = np.asarray(theta, dtype=float)
        if self._vectorised:
            with np.errstate(all="ignore"):
                out = self.model.func(self.x, *self._rows(th))
            full: FloatArray = np.broadcast_to(np.asarray(out, dtype=float), self.x.shape).copy()
            return full
        res = np.empty(self.x.size)
        for g, sl in enumerate(self.slices):
            res[sl] = self.model.eval(self.x[sl], self.group_values(th, g))
        return res

    def theta_from(self, seed: Mapping[str, float]) -> FloatArray:
        return np.array(
            [
                move_inside(float(lo), float(hi), float(seed[b]))
                for b, lo, hi in zip(self.base, self.lower, self.upper, strict=True)
            ]
        )

    def jacobian_at(self, theta: FloatArray) -> FloatArray:
        th = np.asarray(theta, dtype=float)
        n, p = self.x.size, len(self.free)
        J = np.zeros((n, p))
        grad = self.model._value_and_gradient  # compiled once per Model; None for a callable
        if grad is None:
            for g, sl in enumerate(self.slices):
                idx = sorted(self.cols[g].values())
                J[sl, idx] = self._group_fd(th, g, idx)
            return J
        rows = self._rows(th)
        pts = np.arange(n)
        with np.errstate(all="ignore"):
            d = [np.broadcast_to(np.asarray(di, float), (n,)) for di in grad(self.x, *rows)[1:]]
            for i, col in enumerate(self._index):
                free_here = (col >= 0) & (col < p)
                J[pts[free_here], col[free_here]] += d[i][free_here]
            # a linked parameter passes its derivative on to the parameters its link uses
            for i, parts in self._link_derivs:
                for m, dfn in parts:
                    col = self._index[m]
                    free_here = (col >= 0) & (col < p)
                    dm = np.broadcast_to(np.asarray(dfn(*rows), float), (n,))
                    J[pts[free_here], col[free_here]] += (d[i] * dm)[free_here]
        bad = ~np.all(np.isfinite(J), axis=1)
        if bad.any():
            # as in _model_jacobian: e.g. inf * 0 at a zero dose where the curve is flat;
            # differences of that group give the limit
            for g, sl in enumerate(self.slices):
                rows_bad = bad[sl]
                if not rows_bad.any():
                    continue
                idx = sorted(self.cols[g].values())
                fd = self._group_fd(th, g, idx)
                block = J[sl]
                block[np.ix_(rows_bad, idx)] = np.where(
                    np.isfinite(fd[rows_bad]), fd[rows_bad], 0.0
                )
                block[rows_bad] = np.where(np.isfinite(block[rows_bad]), block[rows_bad], 0.0)
                J[sl] = block
        return J

    def _group_fd(self, th: FloatArray, g: int, idx: list[int]) -> FloatArray:
        sl = self.slices[g]

        def curve(t: FloatArray) -> FloatArray:
            full = th.copy()
            full[idx] = t
            return self.model.eval(self.x[sl], self.group_values(full, g))

        return finite_difference_jacobian(
            curve, th[idx], lower=self.lower[idx], upper=self.upper[idx]
        )


# ============================================================================ input
@dataclass
class _Groups:
    """The validated groups of a request, before any fitting."""

    keys: tuple[Any, ...]
    labels: tuple[str, ...]
    datasets: tuple[Dataset, ...]
    constants: tuple[dict[str, float], ...]


def _split(
    data: Any,
    x: str,
    y: str,
    by: Sequence[str],
    constants: Sequence[str],
    sigma: ArrayLike | str | None,
    exclude: ArrayLike | None,
) -> _Groups:
    g = split_groups(data, x, y, by, sigma=sigma, exclude=exclude, constants=constants)
    datasets = tuple(d for d in g.datasets if d is not None)  # every one, errors="raise"
    return _Groups(g.keys, g.labels, datasets, g.constants)


def _per_group_start(
    start: Mapping[str, float] | pd.DataFrame | None,
    model: Model,
    groups: _Groups,
) -> tuple[dict[str, float], list[dict[str, float]]]:
    """The user's starts: for every group (mapping) and per group (a DataFrame by group)."""
    if start is None:
        return {}, [{} for _ in groups.keys]
    if isinstance(start, pd.DataFrame):
        _check_names(model, [str(c) for c in start.columns], "start")
        per: list[dict[str, float]] = []
        known = set(start.index.tolist())
        for k, lab in zip(groups.keys, groups.labels, strict=True):
            row = start.loc[k] if k in known else start.loc[lab] if lab in known else None
            d: dict[str, float] = {}
            if row is not None:
                for c, v in row.items():
                    fv = as_number(v, f"start value of {c!r} for group {lab!r}", allow_nan=True)
                    if math.isinf(fv):
                        raise ParameterError(
                            f"start value of {c!r} for group {lab!r} is infinite; give a "
                            "finite number (or NaN for the guided start)."
                        )
                    if not math.isnan(fv):
                        d[str(c)] = fv
            per.append(d)
        extra = known - set(groups.keys) - set(groups.labels)
        if extra:
            raise ParameterError(
                f"start= has rows for groups {sorted(map(str, extra))[:5]} that are not in the "
                f"data; the groups are {list(groups.labels)}."
            )
        return {}, per
    if not isinstance(start, Mapping):
        raise ParameterError(
            "start must be a mapping {name: value} for every group, or a DataFrame with one "
            f"row per group and one column per parameter; got {type(start).__name__}."
        )
    _check_names(model, start, "start")
    common = {}
    for k, v in start.items():
        fv = as_number(v, f"start value of {k!r}")
        if math.isinf(fv):
            raise ParameterError(f"start value of {k!r} is infinite; give a finite number.")
        common[str(k)] = fv
    return common, [{} for _ in groups.keys]


# ============================================================================ entry point
def fit_global(
    model: Model | str | Callable[..., Any],
    *,
    data: pd.DataFrame,
    x: str,
    y: str,
    by: str | Sequence[str],
    shared: Iterable[str] = (),
    constants: Iterable[str] = (),
    sigma: ArrayLike | str | None = None,
    params: Parameters | Sequence[Parameter] | None = None,
    start: Mapping[str, float] | pd.DataFrame | None = None,
    fixed: Mapping[str, float] | Iterable[str] | None = None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None = None,
    links: Mapping[str, str] | None = None,
    weights: Weighting | None = None,
    loss: Loss = "squared",
    loss_scale: float | None = None,
    exclude: ArrayLike | None = None,
    absolute_sigma: bool = False,
    method: Method = "auto",
    max_evaluations: int | None = None,
    timeout: float | None = None,
    cancel: threading.Event | Callable[[], bool] | None = None,
    progress: Callable[[int, float], None] | None = None,
) -> GlobalResult:
    """Fit one model to several groups of a table at once, sharing some parameters.

    Parameters
    ----------
    model : Model, str or callable
        As for :func:`curvewright.fit`.
    data : DataFrame
        The table: one row per observation, with the x, y and group columns.
    x, y : str
        Column names of the observations.
    by : str or list of str
        Grouping column(s). With several columns a group's key is a tuple and its label joins
        the values with ``" / "`` (``"A / 2"``).
    shared : iterable of str
        Parameters estimated once for all groups. Every other free parameter is estimated per
        group; in the joint covariance it is named ``"name[label]"`` (e.g. ``"Asym[3]"``),
        shared ones keep their plain name.
    constants : iterable of str
        Model parameters taken from the column of the same name, which must be constant within
        each group (e.g. an inhibitor concentration ``I``): held fixed per group at that value.
    sigma : str or array_like, optional
        Column name (or one value per table row) of the standard deviation of each y.
    params : Parameters or sequence of Parameter, optional
        Parameter records (as for :func:`curvewright.fit`), applying to every group; a record's
        ``scope`` is not read: ``shared=`` says which parameters every group shares.
    start : mapping or DataFrame, optional
        ``{name: value}`` for every group, or per group a DataFrame indexed by group key (or
        label) with one column per parameter (NaN = guided). A shared parameter's start from a
        DataFrame is the median over the groups given.
    fixed, bounds, links : optional
        As for :func:`curvewright.fit`, applying to every group (links are evaluated within
        each group).
    weights, loss, loss_scale, absolute_sigma, method, max_evaluations, timeout, cancel, progress
        As for :func:`curvewright.fit`.
    exclude : array_like, optional
        Rows of the table to leave out: positions (0-based) or a boolean mask over rows.

    Returns
    -------
    GlobalResult

    Raises
    ------
    DataError
        A missing column, a group column with NaN, a constant that varies within a group, a
        group with fewer points than its own free parameters, too few points in all.
    ParameterError
        A shared, constant, fixed, bound or start name that is not a model parameter; a name
        both shared and fixed, or a constant also fixed, linked or shared; bad options.
    FitError
        The residuals are not finite at the starting values.

    Notes
    -----
    The guided start fits each group alone first (:func:`curvewright.fit`, shared parameters
    free); a shared parameter starts at the median of the groups' own values, a per-group one
    at its group's value (or that median when the group cannot be fitted alone).
    """
    timeout, cancel_fn = _check_limits(method, max_evaluations, timeout, cancel)
    t0 = time.monotonic()
    m = resolve_model(model)
    by_cols = [by] if isinstance(by, str) else [str(b) for b in by]
    if not by_cols:
        raise DataError("by= must name at least one grouping column.")
    shared_t = _names_arg(shared, "shared")
    const_t = _names_arg(constants, "constants")
    _check_names(m, shared_t, "shared")
    _check_names(m, const_t, "constants")
    for c in const_t:
        if c in shared_t:
            raise ParameterError(
                f"{c!r} is both a constant (taken from the data per group) and shared; choose one."
            )
    groups = _split(data, x, y, by_cols, const_t, sigma, exclude)
    return _fit_groups(
        m,
        groups,
        by=tuple(by_cols),
        shared=shared_t,
        constants=const_t,
        params=params,
        start=start,
        fixed=fixed,
        bounds=bounds,
        links=links,
        weights=weights,
        loss=loss,
        loss_scale=loss_scale,
        absolute_sigma=absolute_sigma,
        method=method,
        max_evaluations=max_evaluations,
        deadline=None if timeout is None else t0 + timeout,
        cancel=cancel_fn,
        progress=progress,
        labels=(x, y),
    )


def _check_names(model: Model, names: Iterable[str], where: str) -> None:
    for n in names:
        if n not in model.param_names:
            raise ParameterError(
                unknown_name_message(n, model.param_names, f"model {model.name!r} (in {where}=)")
            )


def _names_arg(v: Iterable[str] | str, what: str) -> tuple[str, ...]:
    if isinstance(v, str):
        return (v,)
    try:
        out = tuple(v)
    except TypeError as exc:
        raise ParameterError(f"{what} must be a list of parameter names, got {v!r}.") from exc
    for n in out:
        if not isinstance(n, str):
            raise ParameterError(f"{what} must be a list of parameter names, got {n!r} in it.")
    return out


def _fit_groups(
    m: Model,
    groups: _Groups,
    *,
    by: tuple[str, ...],
    shared: tuple[str, ...],
    constants: tuple[str, ...],
    params: Parameters | Sequence[Parameter] | None,
    start: Mapping[str, float] | pd.DataFrame | None,
    fixed: Mapping[str, float] | Iterable[str] | None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None,
    links: Mapping[str, str] | None,
    weights: str | None,
    loss: str,
    loss_scale: float | None,
    absolute_sigma: bool,
    method: str,
    max_evaluations: int | None,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    progress: Callable[[int, float], None] | None,
    labels: tuple[str, str],
) -> GlobalResult:
    # ---------------------------------------------------------------- validate everything
    loss_scale = _check_loss(loss, loss_scale)
    for d, lab in zip(groups.datasets, groups.labels, strict=True):
        try:
            m.check_domain(d.x_used)
        except DataError as exc:
            raise type(exc)(f"group {lab!r}: {exc}") from exc
    common_start, group_start = _per_group_start(start, m, groups)
    # The one conversion of the settings into checked records (as fit() does).
    recs = request_parameters(
        m, params, start=common_start or None, fixed=fixed, bounds=bounds, links=links
    )
    held = dict(recs.fixed)
    for k in held:
        if k in constants:
            raise ParameterError(
                f"{k!r} is both a constant (from the data per group) and fixed; choose one."
            )
        if k in shared:
            raise ParameterError(
                f"{k!r} is both shared and fixed; a fixed parameter is the same for every group "
                "already, so leave it out of shared=."
            )
    for c in constants:
        if c in recs.links:
            raise ParameterError(f"{c!r} is both a constant and linked; choose one.")
    link_exprs = {n: Expr.parse(t) for n, t in recs.links.items()}
    for n in shared:
        if n in link_exprs:
            raise ParameterError(
                f"{n!r} is linked, so its value follows its link in each group; leave it out "
                "of shared= (share the parameters its link uses instead)."
            )
    common_start = {n: r.value for n, r in recs.items() if r.free and not math.isnan(r.value)}
    bnd = {n: (r.lower, r.upper) for n, r in recs.items()}
    for g, gs in enumerate(group_start):
        for k, v in gs.items():
            lo, hi = bnd[k]
            if not lo <= v <= hi:
                raise ParameterError(
                    f"start value {v:g} of {k!r} for group {groups.labels[g]!r} lies outside "
                    f"its bounds [{lo:g}, {hi:g}]; give a start inside them or widen the bounds."
                )
    not_free = set(held) | set(constants) | set(link_exprs)
    shared_free = tuple(n for n in m.param_names if n in shared and n not in not_free)
    own_free = tuple(n for n in m.param_names if n not in shared and n not in not_free)
    G = len(groups.keys)
    free: list[str] = []
    base: list[str] = []
    cols: list[dict[str, int]] = [{} for _ in range(G)]
    for n in m.param_names:
        if n in shared_free:
            for g in range(G):
                cols[g][n] = len(free)
            free.append(n)
            base.append(n)
        elif n in own_free:
            for g, lab in enumerate(groups.labels):
                cols[g][n] = len(free)
                free.append(expanded_name(n, lab))
                base.append(n)
    for ds, lab in zip(groups.datasets, groups.labels, strict=True):
        if ds.n < len(own_free):
            raise DataError(
                f"group {lab!r} has {ds.n} point(s) used but {len(own_free)} parameter(s) of its "
                f"own ({', '.join(own_free)}); it needs at least as many points. Add data, share "
                "more parameters (shared=) or fix some (fixed=)."
            )
    n_used = sum(d.n for d in groups.datasets)
    if n_used <= len(free):
        raise DataError(
            f"{n_used} point(s) are used in all but the fit has {len(free)} free parameter(s); "
            "it needs more points than free parameters. Add data or share more parameters."
        )
    y_all = np.concatenate([d.y_used for d in groups.datasets])
    weighting, w = _weights(weights, groups.datasets, y_all)

    # ---------------------------------------------------------------- guided start
    held_g = [{**held, **groups.constants[g]} for g in range(G)]
    solo = _solo_starts(
        m,
        groups,
        held_g,
        common_start,
        group_start,
        shared_free,
        own_free,
        {n: bnd[n] for n in m.param_names},
        dict(recs.links),
        weights,
        loss,
        loss_scale,
        method,
        deadline,
        cancel,
    )
    values0, moved = _joint_start(
        m, solo, free, base, cols, shared_free, common_start, group_start, bnd
    )
    x_all = np.concatenate([d.x_used for d in groups.datasets])
    edges = np.cumsum([0, *(d.n for d in groups.datasets)])
    prob = _GlobalProblem(
        model=m,
        datasets=groups.datasets,
        x=x_all,
        y=y_all,
        w=w,
        weighting=weighting,
        loss=loss,
        loss_scale=loss_scale,
        absolute_sigma=bool(absolute_sigma),
        values0=values0,
        free=tuple(free),
        fixed={},
        links={},
        lower=np.array([bnd[b][0] for b in base], dtype=float),
        upper=np.array([bnd[b][1] for b in base], dtype=float),
        slices=tuple(slice(int(a), int(b)) for a, b in itertools.pairwise(edges)),
        held=tuple(held_g),
        cols=tuple(cols),
        group_links=link_exprs,
        base=tuple(base),
        parameters=recs,
        moved=tuple(moved),
    )
    if common_start or any(group_start):

        def alone() -> FloatArray:
            # Every group fitted alone from no start (each fit judges its own stop), joined.
            empty: list[dict[str, float]] = [{} for _ in range(G)]
            own = _solo_starts(
                m,
                groups,
                held_g,
                {},
                empty,
                shared_free,
                own_free,
                {n: bnd[n] for n in m.param_names},
                dict(recs.links),
                weights,
                loss,
                loss_scale,
                method,
                deadline,
                cancel,
            )
            v, _ = _joint_start(m, own, free, base, cols, shared_free, {}, empty, bnd)
            return np.array([v[n] for n in free], dtype=float)

        prob.alone = alone
    r0 = prob.weighted(values0)
    if not np.all(np.isfinite(r0)):
        rows = np.flatnonzero(~np.isfinite(r0))[:5].tolist()
        g_bad = [
            groups.labels[g]
            for g, sl in enumerate(prob.slices)
            if rows[0] in range(sl.start, sl.stop)
        ]
        raise FitError(
            f"The model gives NaN or infinite values at the starting values (first in group "
            f"{g_bad[0]!r}); the fit cannot start. Starting values: {values0}. Give starts "
            "(start=, a DataFrame per group), add bounds, or exclude those points."
        )

    # ---------------------------------------------------------------- the engine
    runs: list[_Run] = []
    sol: _Solution | None = None
    deg: _Degeneracy | None = None
    search: _Search | None = None
    if free:
        watch = _Watch(prob, deadline, max_evaluations, cancel, progress)
        budget = max_evaluations if max_evaluations is not None else 2000 * (len(free) + 1)
        runs, sol, deg, search = _run_and_judge(prob, watch, method, budget)
        if progress is not None:
            progress(watch.evaluations, watch.best_ssr)
    options = {
        "x": labels[0],
        "y": labels[1],
        "fixed": dict(held),
        "bounds": {
            k: bnd[k] for k in m.param_names if bnd[k] != (m.param(k).lower, m.param(k).upper)
        },
        "links": dict(recs.links),
        "weights": weights,
        "loss": loss,
        "loss_scale": loss_scale,
        "absolute_sigma": bool(absolute_sigma),
        "method": method,
    }
    judged = _judged(sol if sol is not None else _solution(prob, runs), deg)
    notes = _stop_notes(deg, search, prob.loss)
    return _assemble(
        prob, runs, judged, notes, groups, by, shared_free, own_free, constants, bnd, options
    )


def _joint_start(
    m: Model,
    solo: Sequence[dict[str, float] | None],
    free: Sequence[str],
    base: Sequence[str],
    cols: Sequence[Mapping[str, int]],
    shared_free: tuple[str, ...],
    common_start: Mapping[str, float],
    group_start: Sequence[Mapping[str, float]],
    bnd: Mapping[str, tuple[float, float]],
) -> tuple[dict[str, float], list[Moved]]:
    """The joint start from the groups' own fits: a shared parameter at their median.

    A user's start (for every group, or a group's own) comes first; a guided value outside
    its bounds is moved inside by the one rule, and the move noted.
    """
    G = len(cols)
    values0: dict[str, float] = {}
    moved: list[Moved] = []
    for j, (name, b) in enumerate(zip(free, base, strict=True)):
        if b in shared_free:
            given = [gs[b] for gs in group_start if b in gs]
            if b in common_start:
                v = common_start[b]
            elif given:
                v = float(np.median(given))
            else:
                v = _median([s.get(b) if s else None for s in solo], m.param(b).value)
        else:
            g = next(i for i in range(G) if cols[i][b] == j)
            if b in group_start[g]:
                v = group_start[g][b]
            elif b in common_start:
                v = common_start[b]
            elif solo[g] is not None and b in solo[g]:  # type: ignore[operator]
                v = solo[g][b]  # type: ignore[index]
            else:
                v = _median([s.get(b) if s else None for s in solo], m.param(b).value)
        lo, hi = bnd[b]
        if not lo <= v <= hi:
            # The one rule for a start outside its bounds, noted (a user's start never is).
            after = move_inside(lo, hi, v)
            moved.append(
                Moved(
                    name,
                    v,
                    after,
                    lo,
                    hi,
                    f"The guided start of {name} ({v:g}) lay outside "
                    f"its bounds [{lo:g}, {hi:g}]; it was moved inside, to {after:g}.",
                )
            )
            v = after
        values0[name] = v

    return values0, moved


def _median(vals: Sequence[float | None], default: float) -> float:
    got = [v for v in vals if v is not None and math.isfinite(v)]
    return float(np.median(got)) if got else float(default)


def _solo_starts(
    m: Model,
    groups: _Groups,
    held_g: list[dict[str, float]],
    common_start: Mapping[str, float],
    group_start: list[dict[str, float]],
    shared_free: tuple[str, ...],
    own_free: tuple[str, ...],
    bounds: Mapping[str, tuple[float | None, float | None]] | None,
    links: Mapping[str, str] | None,
    weights: str | None,
    loss: str,
    loss_scale: float | None,
    method: str,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
) -> list[dict[str, float] | None]:
    """Each group fitted alone (None where that fails): the seed of the joint start."""
    need = [
        any(n not in group_start[g] and n not in common_start for n in (*shared_free, *own_free))
        for g in range(len(groups.keys))
    ]
    out: list[dict[str, float] | None] = []
    for g, ds in enumerate(groups.datasets):
        if not need[g]:
            out.append({**common_start, **group_start[g]})
            continue
        left = None if deadline is None else deadline - time.monotonic()
        if left is not None and left <= 0:
            out.append(None)
            continue
        try:
            r = fit(
                m,
                dataset=ds,
                start={**common_start, **group_start[g]},
                fixed=held_g[g],
                bounds=bounds,
                links=links,
                weights=weights,  # type: ignore[arg-type]
                loss=loss,  # type: ignore[arg-type]
                loss_scale=loss_scale,
                method=method,  # type: ignore[arg-type]
                timeout=left,
                cancel=cancel,
            )
            out.append(dict(r.values) if r.success else None)
        except CurvewrightError:
            out.append(None)
    if all(o is None for o in out):
        # No group can be fitted alone: the guided start of the model on all points together.
        try:
            seed = guided_start(
                m,
                np.concatenate([d.x_used for d in groups.datasets]),
                np.concatenate([d.y_used for d in groups.datasets]),
                fixed={**held_g[0], **common_start},
            )
            out = [dict(seed) for _ in out]
        except (CurvewrightError, ArithmeticError, ValueError):
            pass
    return out


# ============================================================================ the result
def _assemble(
    prob: _GlobalProblem,
    runs: list[_Run],
    sol: _Solution,
    notes: Sequence[Diagnostic],
    groups: _Groups,
    by: tuple[str, ...],
    shared_free: tuple[str, ...],
    own_free: tuple[str, ...],
    constants: tuple[str, ...],
    bnd: Mapping[str, tuple[float, float]],
    options: Mapping[str, Any],
) -> GlobalResult:
    """The result of a global fit at the judged solution; ``notes`` head every list of findings."""
    m = prob.model
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
    sigma_resid = math.sqrt(ssr / dof) if dof > 0 else math.nan
    wts = np.ones(n) if prob.w is None else prob.w
    attempts = tuple(
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
    )
    aicc, bic = _aicc(ssr, n, p + 1), _bic(ssr, n, p + 1)
    theta0 = prob.theta_of(prob.values0)
    views: list[GroupFit] = []
    diags: list[Diagnostic] = list(notes)
    seen: set[tuple[str, str]] = {(d.code, d.text) for d in notes}
    for g, (ds, lab) in enumerate(zip(groups.datasets, groups.labels, strict=True)):
        sl = prob.slices[g]
        gv = prob.group_values(theta, g)
        gfree = tuple(nm for nm in m.param_names if nm in prob.cols[g])
        idx = [prob.cols[g][nm] for nm in gfree]
        sub = cov[np.ix_(idx, idx)]
        gprob = _Problem(
            model=m,
            datasets=(ds,),
            x=prob.x[sl],
            y=prob.y[sl],
            w=None if prob.w is None else prob.w[sl],
            weighting=prob.weighting,
            loss=prob.loss,
            loss_scale=prob.loss_scale,
            absolute_sigma=prob.absolute_sigma,
            values0=prob.group_values(theta0, g),
            free=gfree,
            fixed=dict(prob.held[g]),
            links=dict(prob.group_links),
            lower=np.array([bnd[nm][0] for nm in gfree], dtype=float),
            upper=np.array([bnd[nm][1] for nm in gfree], dtype=float),
            link_texts=dict(options["links"]),
        )
        pj = _param_jacobian(gprob, np.array([gv[nm] for nm in gfree], dtype=float))
        var = delta_method_variance(pj, sub) if idx else np.zeros(len(gv))
        stderr = {
            nm: (math.nan if nm in prob.held[g] else (math.sqrt(v) if v >= 0 else math.nan))
            for nm, v in zip(m.param_names, var.tolist(), strict=True)
        }
        gd = _diagnostics(gprob, gv, stderr, sub, cond, singular, code, success)
        for d in gd:
            if d.code in _WHOLE_FIT or (d.params and all(q in shared_free for q in d.params)):
                item = d
            else:
                item = Diagnostic(
                    d.code,
                    d.severity,
                    f"[{lab}] {d.text}",
                    params=d.params,
                    extra={**d.extra, "group": lab},
                )
            if (item.code, item.text) not in seen:
                seen.add((item.code, item.text))
                diags.append(item)
        ww = wts[sl]
        yg = prob.y[sl]
        ybar = float(np.sum(ww**2 * yg) / np.sum(ww**2))
        sst = float(np.sum((ww * (yg - ybar)) ** 2))
        rwg = sol.rw[sl]
        views.append(
            GroupFit(
                model=m,
                datasets=(ds,),
                values=gv,
                stderr=stderr,
                free=gfree,
                fixed=tuple(nm for nm in m.param_names if nm in prob.held[g]),
                linked=dict(options["links"]),
                start=prob.group_values(theta0, g),
                bounds={nm: bnd[nm] for nm in gfree},
                covariance=sub,
                ssr=ssr,
                rss=rss,
                n=ds.n,
                nfree=len(gfree),
                dof=dof,
                sigma_resid=sigma_resid,
                r2=1.0 - float(rwg @ rwg) / sst if sst > 0 else math.nan,
                aicc=aicc,
                bic=bic,
                condition=cond,
                fitted=fitted[sl],
                residuals=resid[sl],
                weights=None if prob.w is None else prob.w[sl],
                jacobian=J[sl][:, idx],
                param_jacobian=pj,
                success=success,
                code=code,
                message=outcome(code).text,
                messages=tuple((a.code, a.message) for a in attempts),
                diagnostics=(*notes, *gd),
                attempts=attempts,
                weighting=prob.weighting,
                loss=prob.loss,
                loss_scale=prob.loss_scale,
                absolute_sigma=prob.absolute_sigma,
                method=kept.method if kept is not None else "none",
                evaluations=sum(r.evaluations for r in runs),
                group=lab,
                shared=tuple(nm for nm in gfree if nm in shared_free),
                constants=constants,
            )
        )
    ybar = float(np.sum(wts**2 * prob.y) / np.sum(wts**2))
    sst = float(np.sum((wts * (prob.y - ybar)) ** 2))
    return GlobalResult(
        model=m,
        by=by,
        keys=groups.keys,
        labels=groups.labels,
        shared=shared_free,
        per_group=own_free,
        constants=constants,
        fixed=tuple(nm for nm in m.param_names if nm in options["fixed"]),
        linked=dict(options["links"]),
        free=prob.free,
        estimates=values,
        cov=cov,
        ssr=ssr,
        rss=rss,
        n=n,
        nfree=p,
        dof=dof,
        sigma_resid=sigma_resid,
        r2=1.0 - ssr / sst if sst > 0 else math.nan,
        aicc=aicc,
        bic=bic,
        condition=cond,
        success=success,
        code=code,
        message=outcome(code).text,
        attempts=attempts,
        diagnostics=tuple(diags),
        weighting=prob.weighting,
        loss=prob.loss,
        loss_scale=prob.loss_scale,
        absolute_sigma=prob.absolute_sigma,
        method=kept.method if kept is not None else "none",
        evaluations=sum(r.evaluations for r in runs),
        groups=tuple(views),
        options=options,
    )


# ============================================================================ refits
def refit_with_shared(
    result: GlobalResult, shared: Iterable[str], *, start: pd.DataFrame | None = None
) -> GlobalResult:
    """The same global fit (data, groups, options) with another set of shared parameters.

    Parameters
    ----------
    result : GlobalResult
    shared : iterable of str
        The new shared parameters.
    start : DataFrame, optional
        Per-group starts (default: the values of ``result``, one row per group).

    Returns
    -------
    GlobalResult
    """
    opts = result.options
    groups = _Groups(
        keys=result.keys,
        labels=result.labels,
        datasets=tuple(g.dataset for g in result.groups),
        constants=tuple({c: float(g.values[c]) for c in result.constants} for g in result.groups),
    )
    if start is None:
        start = result.values.drop(columns=[*result.constants, *result.fixed, *result.linked])
    return _fit_groups(
        result.model,
        groups,
        by=result.by,
        shared=tuple(shared),
        constants=result.constants,
        params=None,
        start=start,
        fixed=dict(opts.get("fixed", {})),
        bounds=dict(opts.get("bounds", {})) or None,
        links=dict(opts.get("links", {})) or None,
        weights=opts.get("weights"),
        loss=str(opts.get("loss", "squared")),
        loss_scale=opts.get("loss_scale"),
        absolute_sigma=bool(opts.get("absolute_sigma", False)),
        method=str(opts.get("method", "auto")),
        max_evaluations=None,
        deadline=None,
        cancel=None,
        progress=None,
        labels=(str(opts.get("x", "x")), str(opts.get("y", "y"))),
    )
