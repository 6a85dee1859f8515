"""The batch's work: fit every group of a split table (the local backend and each Dask task).

:func:`run_groups` settles each group's start (the user's, else the batched guided start of
:mod:`curvewright.start_batch`, else the per-curve one), then routes: formula models with the
squared loss and no links to the vectorised engine (:mod:`.batch_engine`, a chunk of groups at
once, statistics included); Python callables, robust losses, links, and groups the engine did
not settle to :func:`fit` one group at a time, which has the fallback ladder. Every group ends
with a status, a reason and its path; :func:`run_table` is the same on a table of whole groups.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..batch_result import BatchResult, register_fit_row, register_group_fit, start_records
from ..data import Dataset, Groups, labels_of, plain_key, split_groups
from ..errors import CurvewrightError, DataError, ParameterError
from ..expr import parse
from ..inference import quantile
from ..models import Model
from ..parameters import Parameters
from ..result import FitResult
from ..start import guided_start, plausible_sizes
from ..start_batch import guided_starts
from ..thresholds import DEGENERATE_CORRELATION, DEGENERATE_SE, RUNAWAY, THIN_SUPPORT
from .batch_engine import (
    BatchProblem,
    batch_derived,
    batch_statistics,
    batch_support,
    solve_batch,
)
from .problem import (
    FloatArray,
    point_weights,
)
from .single import fit

__all__ = ["check_frame", "failed_part", "run_groups", "run_table", "unfittable_reasons"]


#: Groups the vectorised engine advances together: bounds the (groups, points, parameters)
#: arrays of one chunk and sets how often cancel, the time limit and the progress bar are seen.
CHUNK = 2048

#: Findings that make a fitted group "flagged" (a person should look), as FitResult codes.
FLAG_CODES = ("not_identified", "near_singular", "high_correlation", "at_bound", "extrapolation")


# ============================================================================ the request
@dataclass(frozen=True)
class _Request:
    """A validated batch request: what every group's fit is called with (picklable)."""

    model: Model
    parameters: Parameters  # shared settings; values: the common start, NaN where unset
    frame: pd.DataFrame | None  # per-group starts, columns = free parameters
    options: dict[str, Any]  # weights, loss, loss_scale, absolute_sigma, method, max_evaluations
    level: float
    x: str
    y: str
    by: tuple[str, ...]
    sigma: str | None


def check_frame(frame: pd.DataFrame, keys: Sequence[Any], labels: Sequence[str]) -> None:
    """Refuse a start table with rows for groups that are not in the data.

    Raises
    ------
    ParameterError
        Rows whose index is neither a group key nor a label.
    """
    known = set(keys) | set(labels)
    extra = [k for k in frame.index.tolist() if plain_key(k) not in known]
    if extra:
        shown = list(labels[:10]) + (["..."] if len(labels) > 10 else [])
        raise ParameterError(
            f"start= has rows for groups {[str(e) for e in extra[:5]]} that are not in the data; "
            f"the groups are {shown} (index the start table by group key or label, or give it "
            "the by columns)."
        )


# ============================================================================ running
@dataclass
class _Row:
    """One group's outcome, as it goes into the result."""

    status: str = "failed"
    reason: str = ""
    path: str = "none"
    flags: tuple[str, ...] = ()
    values: FloatArray | None = None
    stderr: FloatArray | None = None
    lower: FloatArray | None = None
    upper: FloatArray | None = None
    ssr: float = math.nan
    derived: FloatArray | None = None
    fit: FitResult | None = None


_SINGULAR = "singular fit: the data cannot tell the parameters apart"


class _Out:
    """Every group's outcome as arrays over groups (what the result is made of)."""

    def __init__(self, G: int, P: int, D: int) -> None:
        self.status: NDArray[np.object_] = np.full(G, "failed", dtype=object)
        self.reason: NDArray[np.object_] = np.full(G, "", dtype=object)
        self.path: NDArray[np.object_] = np.full(G, "none", dtype=object)
        self.flags: list[tuple[str, ...]] = [()] * G
        self.values = np.full((G, P), np.nan)
        self.stderr = np.full((G, P), np.nan)
        self.lower = np.full((G, P), np.nan)
        self.upper = np.full((G, P), np.nan)
        self.ssr = np.full(G, np.nan)
        self.derived = np.full((G, D, 4), np.nan)
        self.fits: dict[int, FitResult] = {}

    def fail(
        self,
        g: int,
        reason: str,
        *,
        path: str = "none",
        flags: tuple[str, ...] = (),
        fit: FitResult | None = None,
    ) -> None:
        """Group ``g`` is failed for ``reason`` (no numbers in its row)."""
        self.status[g], self.reason[g], self.path[g], self.flags[g] = "failed", reason, path, flags
        if fit is not None:
            self.fits[g] = fit

    def put(self, g: int, row: _Row) -> None:
        """Group ``g``'s outcome from a per-group fit."""
        if row.status == "failed":
            self.fail(g, row.reason, path=row.path, flags=row.flags, fit=row.fit)
            return
        self.status[g], self.reason[g], self.path[g], self.flags[g] = (
            row.status,
            row.reason,
            row.path,
            row.flags,
        )
        for name in ("values", "stderr", "lower", "upper", "derived"):
            v = getattr(row, name)
            if v is not None:
                getattr(self, name)[g] = v
        self.ssr[g] = row.ssr
        if row.fit is not None:
            self.fits[g] = row.fit


def run_table(
    req: _Request,
    table: pd.DataFrame,
    *,
    exclude_col: str | None = None,
    sigma_col: str | None = None,
    deadline: float | None = None,
) -> BatchResult:
    """Split a table of whole groups and fit them (one Dask task runs this on its partition)."""
    ex = None if exclude_col is None else table[exclude_col].to_numpy(dtype=bool)
    groups = split_groups(
        table,
        req.x,
        req.y,
        req.by,
        sigma=sigma_col or req.sigma,
        exclude=ex,
        errors="keep",
        caller="fit_groups",
    )
    return run_groups(req, groups, deadline=deadline, cancel=None, tick=None)


def run_groups(
    req: _Request,
    groups: Groups,
    *,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    tick: Callable[[int], Any] | None,
) -> BatchResult:
    """Fit every group of ``groups`` (the local backend; also each Dask task's work)."""
    m = req.model
    names = m.param_names
    P = len(names)
    G = len(groups)
    recs = req.parameters
    free = recs.free
    out = _Out(G, P, len(m.derived))
    starts = np.full((G, P), np.nan)
    started = np.zeros(G, dtype=bool)  # the group has its start and goes on to a fit

    def stop_reason() -> str | None:
        if cancel is not None and cancel():
            return "cancelled"
        if deadline is not None and time.time() >= deadline:
            return "timed out"
        return None

    # ---------------------------------------------------------- settle each group's start
    frame_rows = _frame_lookup(req.frame, groups)
    why = unfittable_reasons(m, groups, len(free))
    for g in np.flatnonzero(why != "").tolist():
        out.fail(g, str(why[g]))
    ready = np.flatnonzero(why == "")
    own = np.array([bool(r) for r in frame_rows], dtype=bool) if req.frame is not None else None
    plain = ready if own is None else ready[~own[ready]]
    col = [names.index(n) for n in free]
    got = _batched_starts(m, recs, groups, plain, starts)
    started[got] = True
    # The groups starting (in part) from the user's values: those starts are judged, as the
    # single fit judges a user's start (a guided start is not).
    users = np.zeros(G, dtype=bool)
    if any(not math.isnan(recs[n].value) for n in free):
        users[:] = True
    elif own is not None:
        users[own] = True
    for g in ready[~started[ready]].tolist():
        ds = groups.datasets[g]
        assert ds is not None
        halt = stop_reason()  # a per-curve guided start of a Python function can be slow
        if halt:
            out.fail(g, f"not run: {halt}")
            continue
        try:
            r = _group_records(m, recs, ds, frame_rows[g])
        except CurvewrightError as exc:
            out.fail(g, str(exc))
            continue
        except Exception as exc:  # a model function raising in the guided start
            out.fail(g, f"the model raised {type(exc).__name__}: {exc}")
            continue
        starts[g, col] = [r[n].value for n in free]
        started[g] = True

    # ---------------------------------------------------------- route
    vector = (
        m.expr is not None
        and m._value_and_gradient is not None
        and req.options["loss"] == "squared"
        and not recs.links
    )
    todo = np.flatnonzero(started).tolist()
    finished = set(range(G)) - set(todo)
    if tick is not None:
        tick(len(finished))
    stopped: str | None = None
    queue: list[int] = []  # groups for the per-group fit
    if vector:
        for a in range(0, len(todo), CHUNK):
            stopped = stop_reason()
            if stopped:
                break
            chunk = todo[a : a + CHUNK]
            try:
                back, unrun = _run_vectorised(req, groups, chunk, starts, users, out, stop_reason)
            except Exception:  # pragma: no cover - an engine bug must not stop the batch
                back, unrun = chunk, []
            queue += back
            fin = set(chunk) - set(back) - set(unrun)
            finished |= fin
            if tick is not None:
                tick(len(fin))
    else:
        queue = todo
    for g in queue:
        stopped = stopped or stop_reason()
        if stopped:
            break
        out.put(
            g,
            _run_one(
                req, groups.datasets[g], start_records(recs, names, starts[g]), deadline, cancel
            ),
        )
        finished.add(g)
        if tick is not None:
            tick(1)
    for g in todo:
        if g not in finished:
            out.fail(g, f"not run: {stopped or stop_reason() or 'cancelled'}")
    return _assemble(req, groups, out, starts)


def _frame_lookup(frame: pd.DataFrame | None, groups: Groups) -> list[dict[str, float]]:
    out: list[dict[str, float]] = [{} for _ in range(len(groups))]
    if frame is None:
        return out
    where: dict[Any, int] = {}
    for i, (k, lab) in enumerate(zip(groups.keys, groups.labels, strict=True)):
        where[k] = i
        where.setdefault(lab, i)
    for idx, row in zip(frame.index.tolist(), frame.to_numpy(dtype=float), strict=True):
        at = where.get(plain_key(idx))
        if at is not None:
            out[at] = {
                str(c): float(v)
                for c, v in zip(frame.columns, row, strict=True)
                if not math.isnan(v)
            }
    return out


def _batched_starts(
    m: Model, recs: Parameters, groups: Groups, idx: NDArray[np.intp], starts: FloatArray
) -> NDArray[np.intp]:
    """Guided starts of many groups at once (:func:`start_batch.guided_starts`), into ``starts``.

    Used when no free parameter has a start from the user; returns the groups served. A group
    the batched rule does not serve is left out, and gets the per-curve guided start.
    """
    free = recs.free
    if not idx.size or any(not math.isnan(recs[n].value) for n in free):
        return np.zeros(0, dtype=np.intp)
    names = m.param_names
    col = np.array([names.index(n) for n in free], dtype=np.intp)
    lower = np.array([recs[n].lower for n in names])
    upper = np.array([recs[n].upper for n in names])
    served: list[NDArray[np.intp]] = []
    for a in range(0, idx.size, CHUNK):
        chunk = idx[a : a + CHUNK]
        x, y, _, mask = groups.padded(chunk)
        try:
            st, ok = guided_starts(
                m, x, y, mask, fixed=recs.fixed or None, lower=lower, upper=upper
            )
        except CurvewrightError:
            continue
        done = chunk[ok]
        starts[np.ix_(done, col)] = st[ok][:, col]
        served.append(done)
    return np.concatenate(served) if served else np.zeros(0, dtype=np.intp)


def _group_records(m: Model, recs: Parameters, ds: Dataset, own: Mapping[str, float]) -> Parameters:
    """A group's records with every free start settled: its own, the common one, else guided.

    The guided start is :func:`fit`'s (``guided_start`` given the fixed values and the user's
    starts, moved inside the bounds by the one rule), so the group's fit from these records is
    the fit it would have had from its guided start, less the note of a move.
    """
    r = recs.with_values(own).validated(m, allow_unset=True)
    unset = [n for n in r.free if math.isnan(r[n].value)]
    if not unset:
        return r
    given = {n: r[n].value for n in r.free if n not in unset}
    guess = guided_start(m, ds.x_used, ds.y_used, fixed={**r.fixed, **given})
    r = r.with_values({n: guess[n] for n in unset})
    r, _ = r.inside_bounds(only=unset)
    return r


def unfittable_reasons(m: Model, groups: Groups, nfree: int) -> NDArray[np.object_]:
    """Why each group cannot be fitted at all, before any solver runs ("" when it can).

    Array operations over the groups' used points (:class:`~curvewright.data.Groups`), with
    the words of :func:`_unfittable` (one group's reason from its Dataset), which tests check
    it against: unreadable data, too few points, a constant response, x outside the domain.
    """
    G = len(groups)
    out = np.full(G, "", dtype=object)
    bad = np.array([e is not None for e in groups.errors], dtype=bool)
    for g in np.flatnonzero(bad).tolist():
        out[g] = str(groups.errors[g])
    n = groups.n_used
    few = ~bad & (n <= nfree)
    for g in np.flatnonzero(few).tolist():
        out[g] = (
            f"too few points: {n[g]} used for {nfree} free parameter(s); a fit needs more points "
            "than free parameters"
        )
    live = ~bad & ~few
    off = groups.used_offsets
    has = np.flatnonzero(n > 0)  # reduceat over the non-empty runs (empty ones lie between)
    if nfree >= 2 and has.size:
        lo = np.full(G, np.nan)
        hi = np.full(G, np.nan)
        lo[has] = np.minimum.reduceat(groups.used_y, off[has])
        hi[has] = np.maximum.reduceat(groups.used_y, off[has])
        flat = live & (hi == lo)
        for g in np.flatnonzero(flat).tolist():
            out[g] = (
                f"constant response: every y is {groups.used_y[off[g]]:g}, so the curve's shape "
                "is not determined"
            )
        live &= ~flat
    if m.domain != "all" and has.size:
        xs = groups.used_x
        outside = (xs <= 0) if m.domain == "x>0" else (xs < 0)
        k = np.zeros(G, dtype=np.int64)
        k[has] = np.add.reduceat(outside.astype(np.int64), off[has])
        for g in np.flatnonzero(live & (k > 0)).tolist():
            try:  # the model's own message, on this group's points
                m.check_domain(xs[off[g] : off[g + 1]])
            except DataError as exc:
                out[g] = str(exc)
    return out


def _unfittable(m: Model, ds: Dataset, nfree: int) -> str:
    """Why one group cannot be fitted at all ("" when it can): the per-group definition."""
    n = ds.n
    if n <= nfree:
        return (
            f"too few points: {n} used for {nfree} free parameter(s); a fit needs more points "
            "than free parameters"
        )
    yu = ds.y_used
    if nfree >= 2 and n and float(np.ptp(yu)) == 0.0:
        return f"constant response: every y is {yu[0]:g}, so the curve's shape is not determined"
    try:
        m.check_domain(ds.x_used)
    except DataError as exc:
        return str(exc)
    return ""


def _run_one(
    req: _Request,
    ds: Dataset | None,
    records: Parameters,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
) -> _Row:
    """One group by :func:`fit` (the per-group path); any error becomes the group's reason."""
    assert ds is not None
    timeout = None if deadline is None else max(deadline - time.time(), 1e-3)
    try:
        r = _fit_group(req.model, ds, records, req.options, timeout=timeout, cancel=cancel)
    except CurvewrightError as exc:
        return _Row(reason=str(exc), path="per-group")
    except Exception as exc:  # a model function that raises something of its own
        return _Row(reason=f"the model raised {type(exc).__name__}: {exc}", path="per-group")
    try:
        return _row_of_fit(r, req.level)
    except Exception as exc:  # pragma: no cover - a bug in the statistics, said plainly
        return _Row(
            reason=f"computing its statistics failed ({type(exc).__name__}: {exc})",
            path="per-group",
            fit=r,
        )


def _fit_group(
    m: Model,
    ds: Dataset,
    records: Parameters,
    options: Mapping[str, Any],
    *,
    timeout: float | None = None,
    cancel: Callable[[], bool] | None = None,
) -> FitResult:
    return fit(
        m,
        dataset=ds,
        params=records,
        weights=options["weights"],
        loss=options["loss"],
        loss_scale=options["loss_scale"],
        absolute_sigma=options["absolute_sigma"],
        method=options["method"],
        max_evaluations=options["max_evaluations"],
        timeout=timeout,
        cancel=cancel,
    )


def _amplitudes(model: Model) -> NDArray[np.bool_]:
    """The parameters the formula is linear in: its derivative in them does not hold them."""
    assert model.expr is not None  # the batch engine takes formula models only
    return np.array(_linear_in(model.expr.text, model.param_names), dtype=bool)


@functools.lru_cache(maxsize=64)
def _linear_in(formula: str, names: tuple[str, ...]) -> tuple[bool, ...]:
    # symbolic differentiation costs a fraction of a millisecond: once per formula, not per
    # chunk of every batch
    expr = parse(formula)
    return tuple(n not in expr.derivative(n).names for n in names)


def _thin_amplitudes(model: Model, support: FloatArray) -> NDArray[np.bool_]:
    """Groups with a free amplitude carried by fewer than THIN_SUPPORT points (``support``).

    The single fit's thin-support check (``assemble._thin_support``): a feature of the
    curve narrower than the data's spacing. Its linearity test is made once per model here,
    on the formula; the groups picked go to the per-group fit, which judges them itself.
    NaN support (a fixed parameter, a column not finite) is not judged.
    """
    amp = _amplitudes(model)
    with np.errstate(invalid="ignore"):
        thin: NDArray[np.bool_] = np.any(support[:, amp] < THIN_SUPPORT, axis=1)
    return thin


def _runaway(
    prob: BatchProblem, values: FloatArray, stderr: FloatArray, free: NDArray[np.bool_]
) -> NDArray[np.bool_]:
    """Groups with a free parameter run off or undetermined, by the single fit's rule.

    The cheap test of ``assemble._degeneracy`` (a value above RUNAWAY, a standard error above
    DEGENERATE_SE times the value) runs on every group at once; only the groups it picks get
    the data-based sizes (``start.plausible_sizes``), as a single fit does.
    """
    v, se = values[:, free], stderr[:, free]
    with np.errstate(invalid="ignore"):
        a = np.abs(v)
        big = (a > RUNAWAY) | (se > DEGENERATE_SE * a)
    out = np.zeros(values.shape[0], dtype=bool)
    names = [n for n, f in zip(prob.model.param_names, free.tolist(), strict=True) if f]
    for k in np.flatnonzero(big.any(axis=1)).tolist():
        m = prob.mask[k]
        cols = np.flatnonzero(big[k]).tolist()
        try:
            with np.errstate(all="ignore"):
                sizes = plausible_sizes(
                    prob.model, prob.x[k][m], prob.y[k][m], [names[j] for j in cols]
                )
        except (ValueError, ArithmeticError, KeyError):
            sizes = {}
        for j in cols:
            typical, largest = sizes.get(names[j], (1.0, 1.0))
            if a[k, j] > RUNAWAY * largest or se[k, j] > DEGENERATE_SE * max(a[k, j], typical):
                out[k] = True
                break
    return out


def _findings_text(found: Sequence[tuple[str, tuple[str, ...]]], order: Sequence[str] = ()) -> str:
    """A group's findings in the batch's words; names in ``order`` (the model's) come in it.

    One order for both paths: the single fit names correlated pairs as it finds them, the
    engine's statistics know only which parameters are in a pair.
    """
    words = {
        "not_identified": "not identified",
        "near_singular": "nearly singular covariance",
        "high_correlation": "highly correlated",
        "at_bound": "at a bound",
        "extrapolation": "extrapolated",
        "singular": "singular covariance",
    }
    parts: dict[str, list[str]] = {}
    for code, ps in found:
        parts.setdefault(code, [])
        parts[code] += [p for p in ps if p not in parts[code]]
    rank = {n: i for i, n in enumerate(order)}
    for listed in parts.values():
        listed.sort(key=lambda p: rank.get(p, len(rank)))
    return "; ".join(
        words.get(c, c)
        + (f": {', '.join(ps)}" if ps and c != "singular" and c != "near_singular" else "")
        for c, ps in parts.items()
    )


def _row_of_fit(r: FitResult, level: float) -> _Row:
    names = r.model.param_names
    if r.code == "cancelled":
        return _Row(reason="stopped: cancelled", path="per-group", fit=r)
    if r.code == "stopped_time":
        return _Row(reason="stopped: timed out", path="per-group", fit=r)
    if r.code == "degenerate_stop":
        # The reasons as data (the diagnostic's extra) and in the batch's words.
        why: tuple[str, ...] = ()
        for d in r.diagnostics:
            if d.code == "degenerate_stop":
                why = tuple(str(w) for w in d.extra.get("reasons", ()))
        words = {
            "singular": _SINGULAR,
            "near_singular": "nearly singular covariance",
            "runaway": "a parameter ran off",
            "undetermined": "a parameter is not determined",
        }
        text = "; ".join(words.get(w, w) for w in why) or "no finite minimum"
        return _Row(
            reason=f"stopped at a degenerate point ({text}); the global search found no better",
            path="per-group",
            flags=("degenerate_stop", *why),
            fit=r,
        )
    if not r.success:
        return _Row(reason=f"did not converge: {r.message}", path="per-group", fit=r)
    if any(d.code == "singular" for d in r.diagnostics):
        return _Row(
            reason=_SINGULAR,
            path="per-group",
            flags=("singular",),
            fit=r,
        )
    found = [
        (d.code, (str(d.extra["quantity"]),) if d.code == "extrapolation" else d.params)
        for d in r.diagnostics
        if d.code in FLAG_CODES
    ]
    ci = r.ci(level)
    dv = r.derived(level)
    return _Row(
        status="flagged" if found else "ok",
        reason=_findings_text(found, names),
        path="per-group",
        flags=tuple(dict.fromkeys(c for c, _ in found)),
        values=np.array([r.values[n] for n in names]),
        stderr=np.array([r.stderr[n] for n in names]),
        lower=ci["lower"].to_numpy(dtype=float),
        upper=ci["upper"].to_numpy(dtype=float),
        ssr=r.ssr,
        derived=dv[["value", "stderr", "lower", "upper"]].to_numpy(dtype=float)
        if len(dv)
        else np.zeros((0, 4)),
        fit=r,
    )


def _run_vectorised(
    req: _Request,
    groups: Groups,
    chunk: list[int],
    starts: FloatArray,
    users: NDArray[np.bool_],
    out: _Out,
    stop_reason: Callable[[], str | None],
) -> tuple[list[int], list[int]]:
    """Fit ``chunk`` with the batch engine.

    ``users`` marks the groups whose start is (in part) the user's. Returns the groups it did
    not settle, or that are suspect (for the per-group fit), and those it was stopped on.
    """
    m = req.model
    names = m.param_names
    recs = req.parameters
    free = np.array([n in recs.free for n in names])
    fixed = recs.fixed
    take, sw = _chunk_weights(req.options["weights"], groups, np.asarray(chunk), out)
    if not take.size:
        return [], []
    x, y, _, mask = groups.padded(take, fill="first")
    st = starts[take].copy()
    for j, n in enumerate(names):
        if n in fixed:
            st[:, j] = fixed[n]
    K, P = st.shape
    lower = np.array([recs[n].lower for n in names], dtype=float)
    upper = np.array([recs[n].upper for n in names], dtype=float)
    prob = BatchProblem(
        model=m,
        x=x,
        y=y,
        mask=mask,
        sw=sw,
        free=free,
        start=st,
        lower=np.array(np.broadcast_to(lower, (K, P))),
        upper=np.array(np.broadcast_to(upper, (K, P))),
    )
    max_ev = req.options["max_evaluations"]
    sol = solve_batch(
        prob,
        max_iterations=200 if max_ev is None else max(1, min(200, int(max_ev) - 1)),
        cancel=lambda: stop_reason() is not None,
    )
    stats = batch_statistics(prob, sol, absolute_sigma=req.options["absolute_sigma"])
    derived = batch_derived(prob, sol, stats, req.level)
    q = np.empty(len(take))
    for d in np.unique(stats.dof):
        q[stats.dof == d] = quantile(req.level, float(d), known_sigma=req.options["absolute_sigma"])
    dq = list(derived.values())
    tk = take
    cancelled = ~sol.settled & (np.asarray(sol.reason, dtype=object) == "cancelled")
    # A group settled at a degenerate point (singular or near-singular covariance, a parameter
    # run off or undetermined, by the single fit's rule) or a suspect one (|r| near 1; an
    # amplitude whose feature touches about one point) is suspect, as in the single fit: it
    # goes to the per-group fit, whose global search keeps a clearly lower minimum or reports
    # the degenerate stop, so the batch row and batch[group] tell the same story.
    suspect = sol.settled & (
        stats.singular
        | stats.near_singular
        | (np.nan_to_num(stats.max_correlation, nan=0.0) > DEGENERATE_CORRELATION)
        | _thin_amplitudes(m, stats.support)
        | _runaway(prob, sol.values, stats.stderr, free)
    )
    # A user's start on a feature narrower than the data's spacing: the single fit runs its
    # global search from there, whatever the stop; so does the per-group fit.
    mine = np.flatnonzero(users[take])
    if mine.size:
        at_start = np.full((K, P), np.nan)
        at_start[mine] = batch_support(prob.rows(mine), st[mine])
        suspect |= _thin_amplitudes(m, at_start)
    back = tk[(~sol.settled & ~cancelled) | suspect].tolist()  # to the per-group fit
    unrun = tk[cancelled].tolist()  # reported as not run by the caller
    good = sol.settled & ~suspect
    gi = tk[good]
    v, se, qq = sol.values[good], stats.stderr[good], q[good][:, None]
    out.values[gi], out.stderr[gi] = v, se
    out.lower[gi], out.upper[gi] = v - qq * se, v + qq * se
    out.ssr[gi] = sol.ssr[good]
    outside = np.zeros((K, len(dq)), dtype=bool)
    if dq:
        four = np.stack([np.stack([c.value, c.stderr, c.lower, c.upper], axis=-1) for c in dq], 1)
        out.derived[gi] = four[good]
        for j, c in enumerate(dq):
            if c.in_data_range is not None:
                outside[:, j] = ~c.in_data_range
    flagged = (
        stats.at_bound.any(axis=1)
        | stats.not_identified.any(axis=1)
        | stats.near_singular
        | stats.high_correlation
        | outside.any(axis=1)
    )
    out.status[gi] = np.where(flagged[good], "flagged", "ok")
    out.path[gi] = "vectorised"
    # Words only for the flagged groups, once per pattern of findings (few patterns occur).
    sel = np.flatnonzero(good & flagged)
    pattern = np.concatenate(
        [
            stats.at_bound[sel],
            stats.not_identified[sel],
            stats.near_singular[sel, None],
            stats.correlated[sel],
            outside[sel],
        ],
        axis=1,
    )
    kinds, which = np.unique(pattern, axis=0, return_inverse=True)
    texts = [_pattern_findings(row, names, list(derived)) for row in kinds]
    reason = np.empty(len(kinds), dtype=object)
    reason[:] = [t for t, _ in texts]
    out.reason[tk[sel]] = reason[np.ravel(which)]
    for g, w in zip(tk[sel].tolist(), np.ravel(which).tolist(), strict=True):
        out.flags[g] = texts[w][1]
    return back, unrun


def _chunk_weights(
    weighting: str | None, groups: Groups, chunk: NDArray[np.intp], out: _Out
) -> tuple[NDArray[np.intp], FloatArray | None]:
    """The groups of ``chunk`` that :func:`point_weights` accepts and their padded ``1/sigma``.

    Every group of a table has sigma or none has, so the weighting resolves alike for all;
    a group it refuses (``y == 0`` with weights by y) is failed with :func:`point_weights`'s
    own message.
    """
    s = groups.used_sigma
    w = weighting or ("sigma" if s is not None else "none")
    if w == "none":
        return chunk, None
    if w == "sigma" and s is None:
        ds = groups.datasets[int(chunk[0])]
        try:
            point_weights(weighting, () if ds is None else (ds,))
        except CurvewrightError as exc:
            for g in chunk.tolist():
                out.fail(g, str(exc))
        return chunk[:0], None
    if w != "sigma":
        zero = np.zeros(len(groups), dtype=bool)
        has = np.flatnonzero(groups.n_used > 0)
        if has.size:
            z = np.add.reduceat((groups.used_y == 0).astype(np.int64), groups.used_offsets[has])
            zero[has] = z > 0
        for g in chunk[zero[chunk]].tolist():
            ds = groups.datasets[g]
            try:
                point_weights(weighting, () if ds is None else (ds,))
            except CurvewrightError as exc:
                out.fail(g, str(exc))
        chunk = chunk[~zero[chunk]]
    if not chunk.size:
        return chunk, None
    _, y, sig, mask = groups.padded(chunk, fill="first")
    with np.errstate(divide="ignore", invalid="ignore"):
        if w == "sigma":
            assert sig is not None
            sw = 1.0 / sig
        elif w == "relative":
            sw = 1.0 / np.abs(y)
        else:
            sw = 1.0 / np.sqrt(np.abs(y))
    return chunk, np.where(mask, sw, 1.0)


def _pattern_findings(
    row: NDArray[np.bool_], names: Sequence[str], qnames: Sequence[str]
) -> tuple[str, tuple[str, ...]]:
    """The reason and flag codes of one pattern of findings (the columns of ``_run_vectorised``).

    ``row`` holds at_bound (P), not_identified (P), near_singular, the correlated parameters
    (P) and the extrapolated quantities (D), in the order a per-group fit names them.
    """
    P = len(names)
    found: list[tuple[str, tuple[str, ...]]] = []
    for code, part in (("at_bound", row[:P]), ("not_identified", row[P : 2 * P])):
        ps = tuple(n for j, n in enumerate(names) if part[j])
        if ps:
            found.append((code, ps))
    if row[2 * P]:
        found.append(("near_singular", ()))
    corr = tuple(n for j, n in enumerate(names) if row[2 * P + 1 + j])
    if corr:
        found.append(("high_correlation", corr))
    ext = tuple(qnames[j] for j in np.flatnonzero(row[3 * P + 1 :]).tolist())
    if ext:
        found.append(("extrapolation", ext))
    return _findings_text(found, names), tuple(c for c, _ in found)


def _assemble(req: _Request, groups: Groups, out: _Out, starts: FloatArray) -> BatchResult:
    m = req.model
    datasets = groups.datasets
    n_used, n_dropped = groups.n_used, groups.n_dropped
    batch = BatchResult(
        model=m,
        by=groups.by,
        keys=groups.keys,
        labels=groups.labels,
        level=req.level,
        value_array=out.values,
        stderr_array=out.stderr,
        lower_array=out.lower,
        upper_array=out.upper,
        ssr_array=out.ssr,
        n_used=n_used,
        n_dropped=n_dropped,
        statuses=tuple(str(v) for v in out.status),
        reasons=tuple(str(v) for v in out.reason),
        paths=tuple(str(v) for v in out.path),
        flags=tuple(out.flags),
        derived_names=tuple(d.name for d in m.derived),
        derived_array=out.derived,
        starts=starts,
        datasets=datasets,
        parameters=req.parameters,
        options=req.options,
    )
    batch._fits.update(out.fits)
    return batch


def _group_fit(batch: BatchResult, i: int) -> FitResult:
    """``batch[group]``: :func:`fit` on the group's data from its start, with the options."""
    ds = batch.datasets[i]
    assert ds is not None
    return _fit_group(batch.model, ds, batch.group_parameters(i), batch.options)


register_group_fit(_group_fit)
# A group refitted in review gets its row and status by the rule every per-group fit uses.
register_fit_row(_row_of_fit)


def failed_part(req: _Request, keys: Sequence[Any], reason: str) -> BatchResult:
    """A batch part whose groups all failed with one reason (e.g. a Dask task that raised)."""
    m = req.model
    G, P, D = len(keys), len(m.param_names), len(m.derived)
    return BatchResult(
        model=m,
        by=req.by,
        keys=tuple(keys),
        labels=labels_of(list(keys)),
        level=req.level,
        value_array=np.full((G, P), np.nan),
        stderr_array=np.full((G, P), np.nan),
        lower_array=np.full((G, P), np.nan),
        upper_array=np.full((G, P), np.nan),
        ssr_array=np.full(G, np.nan),
        n_used=np.zeros(G, dtype=np.int64),
        n_dropped=np.zeros(G, dtype=np.int64),
        statuses=("failed",) * G,
        reasons=(reason,) * G,
        paths=("none",) * G,
        flags=((),) * G,
        derived_names=tuple(d.name for d in m.derived),
        derived_array=np.full((G, D, 4), np.nan),
        starts=np.full((G, P), np.nan),
        datasets=(None,) * G,
        parameters=req.parameters,
        options=req.options,
    )
