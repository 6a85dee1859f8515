"""BatchResult: the immutable record of :func:`curvewright.fit_groups`, one curve per group.

Every group of a batch is fitted on its own (no parameter is shared). The record holds one row
per group: the parameters' values, standard errors and interval bounds, the weighted SSR, the
derived quantities with their intervals, a status (``ok``, ``flagged``: fitted with a finding
that needs a person, ``failed``), the reason for every status that is not ``ok``, the path the
group took (the vectorised engine or the per-group :func:`curvewright.fit`) and the NaN rows
dropped. ``batch[group]`` is that group's full :class:`FitResult`, made by :func:`fit` on that
group from the start the batch used, with the batch's options, on first use (and cached): the
record keeps each group's data and start for that, so a batch read back from JSON gives the
same results. The fitting layer registers the function that makes them
(:func:`register_group_fit`) and the one that turns a fit into a row and a status
(:func:`register_fit_row`); this module imports nothing from it.

A person reviewing the batch may replace one group's fit by a refit of their own
(:meth:`BatchResult.replace_fit`): the only change a batch allows after it is made. The group's
row and status are recomputed from the new fit as the batch does, the group is marked
``edited`` with a note, and the refit itself is kept (and saved in the JSON form).
"""

from __future__ import annotations

import html
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .data import Dataset, GroupDatasets, labels_of
from .errors import CurvewrightError, FitError, ModelError, ParameterError
from .global_result import _key_from_json, _key_to_json
from .models import Model
from .parameters import Parameters
from .result import (
    FitResult,
    _dec,
    _dec_array,
    _enc,
    _enc_array,
    _need,
    _num,
    _restore_model,
    figure_function,
    report_function,
)
from .thresholds import CAUTION

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "STATUSES",
    "PATHS",
    "BatchResult",
    "register_fit_row",
    "register_group_fit",
    "register_review",
    "start_records",
]

_FORMAT = "curvewright.BatchResult"
_VERSION = 1

#: A group's status: fitted and nothing to report; fitted with a finding a person should look
#: at (a parameter not identified, at a bound, highly correlated, a near-singular covariance,
#: an extrapolated derived quantity); not fitted (see its reason).
STATUSES = ("ok", "flagged", "failed")
#: How a group was fitted: the vectorised engine, the per-group fit, or not at all (its data
#: could not be read, or the batch stopped before it).
PATHS = ("vectorised", "per-group", "none")

#: The four numbers kept for each parameter and derived quantity, in the last axis of
#: ``BatchResult.derived_array``.
_STATS = ("value", "stderr", "lower", "upper")

FloatArray = NDArray[np.float64]

_GROUP_FIT: list[Callable[[BatchResult, int], FitResult]] = []


def register_group_fit(fn: Callable[[BatchResult, int], FitResult]) -> None:
    """Tell :class:`BatchResult` how to fit one of its groups (called by the fitting layer)."""
    _GROUP_FIT[:] = [fn]


_FIT_ROW: list[Callable[[FitResult, float], Any]] = []
_REVIEW: list[Callable[..., Any]] = []


def register_fit_row(fn: Callable[[FitResult, float], Any]) -> None:
    """Tell :class:`BatchResult` how the batch turns one group's fit into its row.

    ``fn(fit, level)`` returns an object with ``status``, ``reason``, ``flags``, ``values``,
    ``stderr``, ``lower``, ``upper``, ``ssr`` and ``derived`` (the fitting layer's own rule, so a
    replaced fit gets its status exactly as a fitted group does).
    """
    _FIT_ROW[:] = [fn]


def register_review(fn: Callable[..., Any]) -> None:
    """Tell :class:`BatchResult` how to open the review widget (called by the package)."""
    _REVIEW[:] = [fn]


def start_records(parameters: Parameters, names: Sequence[str], start: Any) -> Parameters:
    """The shared records with one group's start row (model order; NaN: left unset).

    What a group's fit in the batch and ``batch[group]`` both start from.
    """
    row = {n: float(start[j]) for j, n in enumerate(names) if n in parameters.free}
    return parameters.with_values({n: v for n, v in row.items() if math.isfinite(v)})


def _frozen(a: Any, dtype: Any = float) -> Any:
    arr = np.array(a, dtype=dtype, copy=True)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class BatchResult:
    """The outcome of :func:`curvewright.fit_groups`; immutable (but for a cache of fits).

    Attributes
    ----------
    model : Model
        The model fitted to every group.
    by : tuple of str
        The grouping column(s).
    keys : tuple
        The group keys (values of ``by``; tuples for several columns), sorted.
    labels : tuple of str
        Their display labels (``"A / 2"`` for several columns); the index of every table.
    level : float
        Coverage of the intervals in ``lower``/``upper`` and the derived table.
    value_array, stderr_array, lower_array, upper_array : ndarray, shape (groups, params)
        Every model parameter's value, standard error and interval bounds (model order); NaN
        for a failed group, NaN standard error and bounds for fixed parameters.
    ssr_array : ndarray, shape (groups,)
        Weighted sum of squared residuals of each group (NaN where failed).
    n_used, n_dropped : ndarray of int, shape (groups,)
        Points used in each group's fit and rows dropped because x, y or sigma was NaN.
    statuses, reasons, paths : tuple of str
        Per group: one of :data:`STATUSES`, why it is not ``ok`` (``""`` when it is), one of
        :data:`PATHS` (as Series: :attr:`status`, :attr:`reason`, :attr:`path`).
    flags : tuple of tuple of str
        Per group, the codes of the findings behind a ``flagged`` status (or a ``failed`` one
        such as ``"singular"``), e.g. ``("at_bound", "not_identified")``: data, not text.
    derived_names : tuple of str
        The model's derived quantities (EC50, half-life, ...).
    derived_array : ndarray, shape (groups, quantities, 4)
        Their value, standard error and interval bounds per group (delta method, as
        :meth:`FitResult.derived`).
    starts : ndarray, shape (groups, params)
        The start each group's fit began from (NaN for fixed and linked parameters, and for a
        group that was never fitted, which ``batch[group]`` starts from the guided start).
    datasets : sequence of Dataset or None
        Each group's data (None where it could not be read); a :class:`GroupDatasets` from a
        fit makes each one when first asked for.
    parameters : Parameters
        The parameter settings every group shares (bounds, fixed values, links); the values
        are the common start (NaN where each group has its own).
    options : mapping
        The fit options every group's fit used (weights, loss, loss_scale, absolute_sigma,
        method, max_evaluations).
    edited : tuple of bool
        Per group: its fit was replaced by a person's refit (:meth:`replace_fit`).
    notes : tuple of str
        Per group: the note left with that change (``""`` for a group not edited).
    """

    model: Model
    by: tuple[str, ...]
    keys: tuple[Any, ...]
    labels: tuple[str, ...]
    level: float
    value_array: FloatArray
    stderr_array: FloatArray
    lower_array: FloatArray
    upper_array: FloatArray
    ssr_array: FloatArray
    n_used: NDArray[np.int64]
    n_dropped: NDArray[np.int64]
    statuses: tuple[str, ...]
    reasons: tuple[str, ...]
    paths: tuple[str, ...]
    flags: tuple[tuple[str, ...], ...]
    derived_names: tuple[str, ...]
    derived_array: FloatArray
    starts: FloatArray
    datasets: Sequence[Dataset | None]
    parameters: Parameters
    options: Mapping[str, Any] = field(default_factory=dict)
    edited: tuple[bool, ...] = ()
    notes: tuple[str, ...] = ()
    _fits: dict[int, FitResult] = field(default_factory=dict, repr=False, compare=False)

    def __post_init__(self) -> None:
        put = object.__setattr__
        g, p, d = len(self.keys), len(self.model.param_names), len(self.derived_names)
        for name in ("value_array", "stderr_array", "lower_array", "upper_array", "starts"):
            put(self, name, _frozen(np.reshape(getattr(self, name), (g, p))))
        put(self, "ssr_array", _frozen(np.reshape(self.ssr_array, (g,))))
        put(self, "derived_array", _frozen(np.reshape(self.derived_array, (g, d, 4))))
        for name in ("n_used", "n_dropped"):
            put(self, name, _frozen(np.reshape(getattr(self, name), (g,)), np.int64))
        for name in ("by", "keys", "labels", "statuses", "reasons", "paths"):
            put(self, name, tuple(getattr(self, name)))
        if not isinstance(self.datasets, GroupDatasets):  # those are made on use, and kept
            put(self, "datasets", tuple(self.datasets))
        put(self, "flags", tuple(tuple(f) for f in self.flags))
        put(self, "derived_names", tuple(self.derived_names))
        put(self, "options", MappingProxyType(dict(self.options)))
        put(self, "edited", tuple(bool(e) for e in self.edited) or (False,) * g)
        put(self, "notes", tuple(str(t) for t in self.notes) or ("",) * g)
        for name in (
            "labels",
            "statuses",
            "reasons",
            "paths",
            "flags",
            "datasets",
            "edited",
            "notes",
        ):
            if len(getattr(self, name)) != g:
                raise ValueError(
                    f"BatchResult: {name} has {len(getattr(self, name))} entries, not {g}."
                )
        bad = {s for s in self.statuses if s not in STATUSES} | {
            s for s in self.paths if s not in PATHS
        }
        if bad:
            raise ValueError(f"BatchResult: unknown status or path {sorted(bad)}.")

    # ------------------------------------------------------------------ access
    def __len__(self) -> int:
        return len(self.keys)

    def __iter__(self) -> Any:
        return iter(self.keys)

    def index_of(self, group: object) -> int:
        """The position of a group, given by key (e.g. ``"A"``, ``("A", 2)``) or by label.

        Raises
        ------
        ParameterError
            No such group.
        """
        for i, k in enumerate(self.keys):
            if group == k:
                return i
        if isinstance(group, str) and group in self.labels:
            return self.labels.index(group)
        shown = list(self.labels[:10]) + (["..."] if len(self.labels) > 10 else [])
        what = repr(group) if isinstance(group, (str, int, float, tuple)) else type(group).__name__
        raise ParameterError(
            f"no group {what} in this batch; the groups are {shown} (by key or label)."
        )

    def __getitem__(self, group: object) -> FitResult:
        """That group's full :class:`FitResult` (see :meth:`fit_of`)."""
        return self.fit_of(group)

    def fit_of(self, group: object) -> FitResult:
        """That group's full :class:`FitResult`.

        It is what :func:`curvewright.fit` gives on that group's data from the start the batch
        used (:attr:`starts`) with the batch's options; made on first use, then kept.

        Raises
        ------
        ParameterError
            No such group.
        FitError
            The group's data could not be read or its fit raised: the reason says why.
        """
        i = self.index_of(group)
        cached = self._fits.get(i)
        if cached is not None:
            return cached
        if self.datasets[i] is None:
            raise FitError(f"group {self.labels[i]!r} has no fit: {self.reasons[i]}")
        if not _GROUP_FIT:
            raise CurvewrightError(
                "BatchResult needs curvewright.fitting to fit a group; import curvewright first."
            )
        r = _GROUP_FIT[0](self, i)
        self._fits[i] = r
        return r

    def group_parameters(self, i: int) -> Parameters:
        """The parameter records group ``i``'s fit starts from (the shared settings, its start)."""
        return start_records(self.parameters, self.model.param_names, self.starts[i])

    def take(self, indices: Sequence[int]) -> BatchResult:
        """A batch of the groups at ``indices`` (in that order), with their cached fits."""
        ix = [int(i) for i in indices]
        out = BatchResult(
            model=self.model,
            by=self.by,
            keys=tuple(self.keys[i] for i in ix),
            labels=labels_of([self.keys[i] for i in ix]),
            level=self.level,
            value_array=self.value_array[ix],
            stderr_array=self.stderr_array[ix],
            lower_array=self.lower_array[ix],
            upper_array=self.upper_array[ix],
            ssr_array=self.ssr_array[ix],
            n_used=self.n_used[ix],
            n_dropped=self.n_dropped[ix],
            statuses=tuple(self.statuses[i] for i in ix),
            reasons=tuple(self.reasons[i] for i in ix),
            paths=tuple(self.paths[i] for i in ix),
            flags=tuple(self.flags[i] for i in ix),
            derived_names=self.derived_names,
            derived_array=self.derived_array[ix],
            starts=self.starts[ix],
            datasets=tuple(self.datasets[i] for i in ix),
            parameters=self.parameters,
            options=self.options,
            edited=tuple(self.edited[i] for i in ix),
            notes=tuple(self.notes[i] for i in ix),
        )
        for new, old in enumerate(ix):
            if old in self._fits:
                out._fits[new] = self._fits[old]
        return out

    # ------------------------------------------------------------------ review
    def replace_fit(self, group: object, fit: FitResult, *, note: str) -> None:
        """Put a person's refit of one group in place of the batch's fit (review).

        The group's row (values, standard errors, intervals, SSR, derived quantities), status,
        reason and flags are recomputed from ``fit`` by the batch's own rule; its data become
        the refit's (with its exclusions), its start the refit's start, its path
        ``per-group``; it is marked :attr:`edited` with ``note``, and ``batch[group]`` is
        ``fit`` from now on (also after a JSON round trip). Everything is checked and computed
        first, so on bad input the batch is left exactly as it was.

        Parameters
        ----------
        group : key or label
        fit : FitResult
            A fit of this batch's model to this group's data (e.g. from the review widget).
        note : str
            What the person did, in a few words (kept with the group; not empty).

        Raises
        ------
        ParameterError
            No such group, or an empty note.
        FitError
            ``fit`` is not a single-curve FitResult.
        ModelError
            ``fit`` is of another model than the batch's.
        """
        i = self.index_of(group)
        if not isinstance(fit, FitResult):
            raise FitError(
                f"replace_fit needs the FitResult of a refit of group {self.labels[i]!r}, got "
                f"{type(fit).__name__}."
            )
        m = self.model
        if fit.model.name != m.name or tuple(fit.model.param_names) != tuple(m.param_names):
            raise ModelError(
                f"the refit is of model {fit.model.name!r} ({', '.join(fit.model.param_names)}) "
                f"but the batch fits {m.name!r} ({', '.join(m.param_names)}); refit the group "
                "with the batch's model."
            )
        if len(fit.datasets) != 1:
            raise FitError("replace_fit needs a fit of one curve (one dataset), not a global fit.")
        if not isinstance(note, str) or not note.strip():
            raise ParameterError(
                "replace_fit needs a note saying what was changed, e.g. note='refitted from a "
                "new start'."
            )
        if not _FIT_ROW:
            raise CurvewrightError(
                "BatchResult needs curvewright.fitting to recompute a group; import curvewright."
            )
        row = _FIT_ROW[0](fit, self.level)
        P, D = len(m.param_names), len(self.derived_names)
        failed = row.status == "failed"

        def vec(v: Any, shape: tuple[int, ...]) -> FloatArray:
            if failed or v is None:
                return np.full(shape, np.nan)
            return np.reshape(np.asarray(v, dtype=float), shape)

        def at(a: Any, v: Any) -> Any:
            out = np.array(a, copy=True)
            out[i] = v
            return out

        def put_in(t: tuple[Any, ...], v: Any) -> tuple[Any, ...]:
            return (*t[:i], v, *t[i + 1 :])

        ds = fit.dataset
        start = np.array([float(fit.start.get(n, math.nan)) for n in m.param_names])
        new = {
            "value_array": at(self.value_array, vec(row.values, (P,))),
            "stderr_array": at(self.stderr_array, vec(row.stderr, (P,))),
            "lower_array": at(self.lower_array, vec(row.lower, (P,))),
            "upper_array": at(self.upper_array, vec(row.upper, (P,))),
            "ssr_array": at(self.ssr_array, math.nan if failed else float(row.ssr)),
            "derived_array": at(self.derived_array, vec(row.derived, (D, 4))),
            "starts": at(self.starts, start),
            "n_used": at(self.n_used, int(fit.n)),
            "statuses": put_in(self.statuses, str(row.status)),
            "reasons": put_in(self.reasons, str(row.reason)),
            "paths": put_in(self.paths, "per-group"),
            "flags": put_in(self.flags, tuple(str(c) for c in row.flags)),
            # A lazy table of datasets stays lazy: only this group's entry changes.
            "datasets": self.datasets.replaced(i, ds)
            if isinstance(self.datasets, GroupDatasets)
            else put_in(tuple(self.datasets), ds),
            "edited": put_in(self.edited, True),
            "notes": put_in(self.notes, note.strip()),
        }
        # Every new field is ready: now change them all (nothing above touched the batch).
        for name, v in new.items():
            if isinstance(v, np.ndarray):
                v = _frozen(v, np.int64 if name == "n_used" else float)
            object.__setattr__(self, name, v)
        self._fits[i] = fit

    @property
    def note(self) -> pd.Series:
        """The note of each group a person edited in review (only those groups)."""
        keep = [i for i, e in enumerate(self.edited) if e]
        return pd.Series(
            [self.notes[i] for i in keep],
            index=pd.Index([self.labels[i] for i in keep], name="group"),
            name="note",
            dtype=object,
        )

    def review(self, **kwargs: Any) -> Any:
        """Open the review widget on this batch (``CurveBench(batch, **kwargs)``).

        The page shows every group as a small plot coloured by status, a filter (all, failed,
        flagged) and a sortable table; a group opened there can be guided, refitted and
        accepted, which calls :meth:`replace_fit` on this batch.

        Raises
        ------
        CurvewrightError
            The widget is not available (install curvewright with its widget extra).
        """
        if not _REVIEW:
            raise CurvewrightError(
                "the review widget is not available; import curvewright (with the widget "
                "extra installed) and use curvewright.CurveBench(batch)."
            )
        return _REVIEW[0](self, **kwargs)

    # ------------------------------------------------------------------ tables
    def _index(self) -> pd.Index:
        out: pd.Index = pd.Index(list(self.labels), name="group")
        return out

    def _params_frame(self, a: FloatArray) -> pd.DataFrame:
        out: pd.DataFrame = pd.DataFrame(
            np.array(a),
            index=self._index(),
            columns=pd.Index(list(self.model.param_names), name="parameter"),
        )
        return out

    @property
    def values(self) -> pd.DataFrame:
        """Every model parameter's value, one row per group (NaN rows for failed groups)."""
        return self._params_frame(self.value_array)

    @property
    def stderr(self) -> pd.DataFrame:
        """Standard errors like :attr:`values` (NaN for fixed parameters)."""
        return self._params_frame(self.stderr_array)

    @property
    def lower(self) -> pd.DataFrame:
        """Lower bounds of the parameters' Wald intervals at :attr:`level`."""
        return self._params_frame(self.lower_array)

    @property
    def upper(self) -> pd.DataFrame:
        """Upper bounds of the parameters' Wald intervals at :attr:`level`."""
        return self._params_frame(self.upper_array)

    @property
    def ssr(self) -> pd.Series:
        """Weighted sum of squared residuals per group (NaN where failed)."""
        return pd.Series(np.array(self.ssr_array), index=self._index(), name="ssr")

    @property
    def status(self) -> pd.Series:
        """Status per group (``ok``, ``flagged``, ``failed``)."""
        return pd.Series(list(self.statuses), index=self._index(), name="status", dtype=object)

    @property
    def reason(self) -> pd.Series:
        """Why each group that is not ``ok`` is not (only those groups)."""
        keep = [i for i, s in enumerate(self.statuses) if s != "ok"]
        return pd.Series(
            [self.reasons[i] for i in keep],
            index=pd.Index([self.labels[i] for i in keep], name="group"),
            name="reason",
            dtype=object,
        )

    @property
    def path(self) -> pd.Series:
        """The path each group took (``vectorised``, ``per-group``, ``none``)."""
        return pd.Series(list(self.paths), index=self._index(), name="path", dtype=object)

    @property
    def dropped(self) -> pd.Series:
        """NaN rows dropped per group."""
        return pd.Series(np.array(self.n_dropped), index=self._index(), name="n_dropped")

    @property
    def derived(self) -> pd.DataFrame:
        """Derived quantities per group: columns (quantity, value/stderr/lower/upper)."""
        cols = pd.MultiIndex.from_product(
            [list(self.derived_names), list(_STATS)], names=["quantity", "statistic"]
        )
        flat = np.array(self.derived_array).reshape(len(self.keys), -1)
        out: pd.DataFrame = pd.DataFrame(flat, index=self._index(), columns=cols)
        return out

    @property
    def counts(self) -> dict[str, int]:
        """How many groups have each status."""
        return {s: sum(1 for t in self.statuses if t == s) for s in STATUSES}

    @property
    def table(self) -> pd.DataFrame:
        """Everything in one table, one row per group.

        Columns: status, reason, path, n (points used), n_dropped, ssr; then for each
        parameter ``p``: ``p``, ``p stderr``, ``p lower``, ``p upper``; then the same four for
        each derived quantity; last ``edited`` and ``note`` (review, :meth:`replace_fit`).
        """
        cols: dict[str, Any] = {
            "status": list(self.statuses),
            "reason": list(self.reasons),
            "path": list(self.paths),
            "n": np.array(self.n_used),
            "n_dropped": np.array(self.n_dropped),
            "ssr": np.array(self.ssr_array),
        }
        for j, p in enumerate(self.model.param_names):
            cols[p] = self.value_array[:, j]
            cols[f"{p} stderr"] = self.stderr_array[:, j]
            cols[f"{p} lower"] = self.lower_array[:, j]
            cols[f"{p} upper"] = self.upper_array[:, j]
        for k, q in enumerate(self.derived_names):
            cols[q] = self.derived_array[:, k, 0]
            for s in range(1, 4):
                cols[f"{q} {_STATS[s]}"] = self.derived_array[:, k, s]
        cols["edited"] = list(self.edited)
        cols["note"] = list(self.notes)
        out: pd.DataFrame = pd.DataFrame(cols, index=self._index())
        return out

    def to_frame(self) -> pd.DataFrame:
        """One row per group: the same table as :attr:`table`."""
        return self.table

    def report(
        self,
        format: Literal["html", "markdown"] = "html",
        *,
        figure: bool = True,
        path: str | Any = None,
    ) -> Any:
        """A self-contained report of the batch, listing failed and flagged groups with reasons.

        Intervals are at the batch's :attr:`level`. See :func:`curvewright.reports.report`.
        """
        return report_function("report")(self, format, level=self.level, figure=figure, path=path)

    def methods(self) -> str:
        """A methods paragraph saying what was done (see :func:`curvewright.reports.methods`)."""
        out: str = report_function("methods")(self, level=self.level)
        return out

    def to_excel(self, path: str | Any) -> Any:
        """Write parameters, derived quantities, diagnostics (status, reasons) and data to .xlsx.

        See :func:`curvewright.reports.to_excel` (needs ``pip install "curvewright[excel]"``).
        """
        return report_function("to_excel")(self, path, level=self.level)

    # ------------------------------------------------------------------ figures
    def plot(
        self,
        groups: Sequence[object] | None = None,
        ncols: int = 4,
        *,
        bands: Literal["confidence", "prediction"] | None = None,
        level: float = 0.95,
        log_x: bool | None = None,
        **opts: Any,
    ) -> Figure:
        """Small multiples: each group's data and fit in its own panel, failed groups marked.

        See :func:`curvewright.figures.plot_batch` for the options.
        """
        out: Figure = figure_function("batch")(
            self, groups, ncols, bands=bands, level=level, log_x=log_x, **opts
        )
        return out

    def forest(
        self, name: str, level: float | None = None, ax: Axes | None = None, **opts: Any
    ) -> Figure:
        """A forest plot of one parameter or derived quantity with its interval per group.

        See :func:`curvewright.figures.forest` for the options.
        """
        out: Figure = figure_function("forest")(self, name, level, ax, **opts)
        return out

    # ------------------------------------------------------------------ text
    def summary(self, max_listed: int = 20) -> str:
        """A readable plain-text report: counts, the groups that need a look, the caution.

        Parameters
        ----------
        max_listed : int
            How many groups that are not ``ok`` to list by name (the rest are counted).
        """
        m = self.model
        c = self.counts
        head = f"curvewright batch fit of {m.name!r} to {len(self)} groups"
        lines = [head, "=" * len(head)]
        lines.append(
            f"curve:      y = {m.formula}" if m.formula else "curve:      a Python function"
        )
        lines.append(f"groups by:  {', '.join(self.by)}")
        lines.append(f"status:     {c['ok']} ok, {c['flagged']} flagged, {c['failed']} failed")
        paths = {p: sum(1 for t in self.paths if t == p) for p in PATHS}
        lines.append(
            f"paths:      {paths['vectorised']} vectorised, {paths['per-group']} per-group fit, "
            f"{paths['none']} not fitted"
        )
        dropped = int(np.sum(self.n_dropped))
        if dropped:
            nd = int(np.count_nonzero(self.n_dropped))
            lines.append(f"NaN rows:   {dropped} dropped in {nd} group(s)")
        ok = [i for i, s in enumerate(self.statuses) if s != "failed"]
        if ok:
            lines += ["", "parameters over the fitted groups (median [min, max])"]
            for j, p in enumerate(m.param_names):
                v = self.value_array[ok, j]
                v = v[np.isfinite(v)]
                if v.size:
                    lines.append(
                        f"  {p:<14} {_num(float(np.median(v)))} "
                        f"[{_num(float(v.min()))}, {_num(float(v.max()))}]"
                    )
        bad = [i for i, s in enumerate(self.statuses) if s != "ok"]
        if bad:
            lines += ["", "groups that need a look"]
            w = max(len(self.labels[i]) for i in bad[:max_listed])
            for i in bad[:max_listed]:
                lines.append(f"  {self.labels[i]:<{w}}  {self.statuses[i]:<7}  {self.reasons[i]}")
            if len(bad) > max_listed:
                lines.append(f"  ... and {len(bad) - max_listed} more (see .reason)")
        return "\n".join([*lines, "", CAUTION])

    def __str__(self) -> str:
        return self.summary()

    def __repr__(self) -> str:
        c = self.counts
        return (
            f"<BatchResult {self.model.name!r}: {len(self)} groups, {c['ok']} ok, "
            f"{c['flagged']} flagged, {c['failed']} failed>"
        )

    def _repr_html_(self, max_rows: int = 20) -> str:
        e = html.escape
        c = self.counts
        names = [n for n in self.model.param_names if n not in self.parameters.fixed]
        head = "".join(f"<th>{e(n)}</th>" for n in [*names, *self.derived_names])
        order = sorted(range(len(self)), key=lambda i: STATUSES.index(self.statuses[i]) * -1)
        rows = []
        for i in order[:max_rows]:
            cells = []
            for n in names:
                j = self.model.param_names.index(n)
                v, s = self.value_array[i, j], self.stderr_array[i, j]
                cells.append(_num(v) if math.isnan(s) else f"{_num(v)} ± {_num(s)}")
            for k in range(len(self.derived_names)):
                v, lo, hi = (self.derived_array[i, k, t] for t in (0, 2, 3))
                cells.append(f"{_num(v)} [{_num(lo)}, {_num(hi)}]")
            tds = "".join(f"<td>{e(t)}</td>" for t in cells)
            rows.append(
                f"<tr class='cw-{e(self.statuses[i])}'><th>{e(self.labels[i])}</th>"
                f"<td>{e(self.statuses[i])}</td>{tds}<td>{e(self.reasons[i])}</td></tr>"
            )
        more = (
            f"<div>{len(self) - max_rows} more groups: see .table</div>"
            if len(self) > max_rows
            else ""
        )
        return (
            "<div class='cw-result cw-batch' style='font-family:sans-serif;font-size:13px'>"
            f"<div><b>{e(self.model.name)}</b>, {len(self)} groups &middot; {c['ok']} ok, "
            f"{c['flagged']} flagged, {c['failed']} failed</div>"
            "<table style='border-collapse:collapse'>"
            f"<thead><tr><th>{e(', '.join(self.by))}</th><th>status</th>{head}<th>reason</th>"
            "</tr></thead><tbody>"
            + "".join(rows)
            + "</tbody></table>"
            + more
            + f"<div style='font-size:11px;opacity:0.75'>{e(CAUTION)}</div></div>"
        )

    # ------------------------------------------------------------------ JSON
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict holding the whole batch (non-finite numbers as strings)."""
        return {
            "format": _FORMAT,
            "version": _VERSION,
            "model": self.model.to_dict(),
            "by": list(self.by),
            "keys": [_key_to_json(k) for k in self.keys],
            "labels": list(self.labels),
            "level": _enc(self.level),
            "values": _enc_array(self.value_array),
            "stderr": _enc_array(self.stderr_array),
            "lower": _enc_array(self.lower_array),
            "upper": _enc_array(self.upper_array),
            "ssr": _enc_array(self.ssr_array),
            "n_used": self.n_used.tolist(),
            "n_dropped": self.n_dropped.tolist(),
            "status": list(self.statuses),
            "reason": list(self.reasons),
            "path": list(self.paths),
            "flags": [list(f) for f in self.flags],
            "derived_names": list(self.derived_names),
            "derived": _enc_array(self.derived_array),
            "starts": _enc_array(self.starts),
            "datasets": [None if d is None else d.to_dict() for d in self.datasets],
            "parameters": self.parameters.to_json(),
            "options": {k: _enc(v) if isinstance(v, float) else v for k, v in self.options.items()},
            "edited": list(self.edited),
            "notes": list(self.notes),
            # A replaced group's refit itself: its exclusions and fixed parameters are its own.
            "edited_fits": {
                str(i): self._fits[i].to_dict()
                for i, e in enumerate(self.edited)
                if e and i in self._fits
            },
        }

    def to_json(self, **kwargs: Any) -> str:
        """The batch as strict JSON text (``**kwargs`` go to :func:`json.dumps`)."""
        return json.dumps(self.to_dict(), allow_nan=False, **kwargs)

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # Through the exact JSON form with the model alongside (a Python function travels by
        # reference), as FitResult does; the cache of fits is rebuilt on use.
        return (_batch_from_pickle, (self.to_json(), self.model))

    @classmethod
    def from_dict(
        cls, d: Mapping[str, Any], *, model: Model | Callable[..., Any] | None = None
    ) -> BatchResult:
        """Rebuild a batch from :meth:`to_dict` output.

        Parameters
        ----------
        d : mapping
        model : Model or callable, optional
            Required when the batch used a Python function: pass that function again.

        Raises
        ------
        ModelError
            Not a saved batch, another format version, damaged, or a Python-function model not
            passed again.
        """
        if d.get("format") != _FORMAT or d.get("version") != _VERSION:
            raise ModelError(
                f"this is not a saved curvewright batch in format {_VERSION} (format "
                f"{d.get('format')!r}, version {d.get('version')!r}); load the output of "
                "BatchResult.to_json() written by this version, or refit."
            )
        try:
            m = _restore_model(d["model"], model)
            arrays = {
                k: _need(_dec_array(d[k]))
                for k in ("values", "stderr", "lower", "upper", "ssr", "derived", "starts")
            }
            out = cls(
                model=m,
                by=tuple(str(b) for b in d["by"]),
                keys=tuple(_key_from_json(k) for k in d["keys"]),
                labels=tuple(str(s) for s in d["labels"]),
                level=_dec(d["level"]),
                value_array=arrays["values"],
                stderr_array=arrays["stderr"],
                lower_array=arrays["lower"],
                upper_array=arrays["upper"],
                ssr_array=arrays["ssr"],
                n_used=np.asarray(d["n_used"], dtype=np.int64),
                n_dropped=np.asarray(d["n_dropped"], dtype=np.int64),
                statuses=tuple(str(s) for s in d["status"]),
                reasons=tuple(str(s) for s in d["reason"]),
                paths=tuple(str(s) for s in d["path"]),
                flags=tuple(tuple(str(c) for c in f) for f in d["flags"]),
                derived_names=tuple(str(s) for s in d["derived_names"]),
                derived_array=arrays["derived"],
                starts=arrays["starts"],
                datasets=tuple(None if x is None else Dataset.from_dict(x) for x in d["datasets"]),
                parameters=Parameters.from_json(d["parameters"]),
                options={
                    str(k): _dec(v) if isinstance(v, str) and v in ("NaN", "Infinity") else v
                    for k, v in d["options"].items()
                },
                # A batch saved before review had no edits.
                edited=tuple(bool(e) for e in d.get("edited", ())),
                notes=tuple(str(t) for t in d.get("notes", ())),
            )
            for k, fd in dict(d.get("edited_fits", {})).items():
                out._fits[int(k)] = FitResult.from_dict(fd, model=m)
            return out
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            if isinstance(exc, CurvewrightError):
                raise
            raise ModelError(
                f"the saved batch is incomplete or corrupted ({type(exc).__name__}: {exc}); "
                "load an unmodified output of BatchResult.to_json()."
            ) from exc

    @classmethod
    def from_json(
        cls, text: str, *, model: Model | Callable[..., Any] | None = None
    ) -> BatchResult:
        """Rebuild a batch from :meth:`to_json` output (see :meth:`from_dict`)."""
        return cls.from_dict(json.loads(text), model=model)


def _batch_from_pickle(text: str, model: Model) -> BatchResult:
    return BatchResult.from_json(text, model=model)


def combine(parts: Sequence[BatchResult]) -> BatchResult:
    """One batch from several over disjoint groups (in the order given, labels made anew).

    Raises
    ------
    ValueError
        No parts, or parts of different models, levels or options.
    """
    if not parts:
        raise ValueError("combine needs at least one batch.")
    first = parts[0]
    keys = tuple(k for p in parts for k in p.keys)

    def cat(name: str) -> Any:
        return np.concatenate([getattr(p, name) for p in parts], axis=0)

    def join(name: str) -> tuple[Any, ...]:
        return tuple(v for p in parts for v in getattr(p, name))

    out = BatchResult(
        model=first.model,
        by=first.by,
        keys=keys,
        labels=labels_of(keys),
        level=first.level,
        value_array=cat("value_array"),
        stderr_array=cat("stderr_array"),
        lower_array=cat("lower_array"),
        upper_array=cat("upper_array"),
        ssr_array=cat("ssr_array"),
        n_used=cat("n_used"),
        n_dropped=cat("n_dropped"),
        statuses=join("statuses"),
        reasons=join("reasons"),
        paths=join("paths"),
        flags=join("flags"),
        derived_names=first.derived_names,
        derived_array=cat("derived_array"),
        starts=cat("starts"),
        datasets=join("datasets"),
        parameters=first.parameters,
        options=first.options,
        edited=join("edited"),
        notes=join("notes"),
    )
    # The parts' fits come along (a replaced group's refit is not made again from its start).
    offset = 0
    for p in parts:
        for i, f in p._fits.items():
            out._fits[offset + i] = f
        offset += len(p)
    return out
