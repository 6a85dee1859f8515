"""The notebook widget: a thin anywidget view over the headless library for one dataset.

Everything the page can do is a method here too (choose a model, edit parameters, exclude
points, fit, cancel, show bands, pick a polynomial degree, save and restore the state), and
everything set from Python shows on the page. Synced traitlets mirror ``js/state.ts``; the front
end writes ``params``, ``excluded``, ``x_scale``, ``y_scale``, ``model_name``, ``error``,
``sync_ping`` and the display toggles ``show_confidence_band``, ``show_prediction_band`` and
``show_residuals``; Python writes the rest.
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import threading
import warnings
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar, Literal

import anywidget
import numpy as np
import pandas as pd
import traitlets
from matplotlib.figure import Figure
from numpy.typing import ArrayLike
from scipy.optimize import least_squares

from ..batch_result import BatchResult
from ..catalog import MAX_DEGREE, polynomial
from ..data import Dataset, make_dataset
from ..errors import (
    ComparisonError,
    CurvewrightError,
    DataError,
    FitError,
    ModelError,
    ParameterError,
)
from ..fitting import point_weights, resolve_model
from ..fitting.global_fit import _split as _split_groups
from ..global_result import GlobalResult
from ..models import Model, as_number, unknown_name_message
from ..parameters import SCOPES, Moved, Parameters
from ..result import FitResult
from ..start import guided_start
from ..stats.compare import Comparison, compare
from ..stats.polynomial import DegreeSelection, select_degree
from . import _review, _session, _state
from ._errors import describe

__all__ = ["CurveBench", "load_session"]

# The saved-state format; bump the number when its meaning changes, and say in
# _OLD_STATE_FORMATS why an older one is refused. Version 3 keeps the parameters as the
# record's JSON (a list, params_spec.json); version 4 adds "groups" (None for one curve, else the
# grouping columns, labels, selected/hidden/excluded groups and each group's values).
STATE_FORMAT = "curvewright.widget/4"
_OLD_STATE_FORMATS = {
    "curvewright.widget/3": (3, "had no place for groups (several curves) or their values"),
    "curvewright.widget/1": (1, "used older model and parameter names"),
    "curvewright.widget/2": (2, "kept parameter settings in an older layout (a mapping by name)"),
}

# fit() options a widget may carry into every fit; the rest of fit()'s arguments come from the
# widget's own state (model, data, start, fixed, bounds, exclusions).
FIT_OPTIONS = (
    "weights",
    "loss",
    "loss_scale",
    "absolute_sigma",
    "method",
    "max_evaluations",
    "timeout",
    "links",
)

# What a widget's analysis consists of besides its synced traits: CurveBench.load puts a newly
# read analysis in place by taking these over from the widget the session was read into.
_ANALYSIS_ATTRS = (
    "_ds",
    "_groups",
    "_review",
    "_models",
    "_memory",
    "_history",
    "_excluded",
    "_fit_options",
    "_comparison_key",
    "_degree_cache",
)

# Samples of a curve computed in Python (callable models, earlier fits drawn for comparison).
_PREVIEW_SAMPLES = 240
_COMPARE_SAMPLES = 200
# The degree table fits degrees 1..max(this, current degree + 1), as far as the data allow.
_DEGREE_TABLE_MAX = 4
# Beyond this many included points the degree table waits for the page to ask for it: its fits
# take about a second on 100k points, too long to redo on every click that excludes a point.
_DEGREE_TABLE_AUTO_POINTS = 20_000

FitState = Literal["idle", "fitting", "done", "stopped", "error"]

_BUNDLE = Path(__file__).parent.parent / "static" / "widget.js"
# Without the bundle (a source checkout before `npm run build`) the widget still works from
# Python and says on the page what is missing, instead of failing at import.
_NO_BUNDLE_ESM = """
export default { render({ el }) {
  el.textContent = "curvewright: the front-end bundle static/widget.js is missing; " +
    "run `npm run build` in the source tree (the widget still works from Python).";
} };
"""


@dataclass
class _Memory:
    """What the widget remembers per model, so switching back restores it.

    With groups, ``settings`` shows the selected group: a per-group record's value is that
    group's, a shared one's is every group's; ``group_values`` holds every group's values and
    ``result`` is the selected group's view of ``global_result``.
    """

    settings: Parameters
    result: FitResult | None = None
    group_values: dict[str, dict[str, float]] = field(default_factory=dict)
    global_result: GlobalResult | None = None


@dataclass
class _GroupSetup:
    """The groups of a widget made with ``by=``: fixed at construction, checked by the library."""

    table: pd.DataFrame
    x: str
    y: str
    by: tuple[str, ...]
    sigma: str | np.ndarray | None
    labels: tuple[str, ...]
    row_group: np.ndarray  # group index of every table row
    selected: str
    hidden: set[str] = field(default_factory=set)
    excluded: set[str] = field(default_factory=set)


@dataclass
class _ReviewSetup:
    """A widget made on a batch (``CurveBench(batch)``): the batch and what the review shows."""

    batch: BatchResult
    x_scale: _state.Scale
    entries: list[dict[str, Any]]
    filter: str = "all"
    # The table's sort: a column ("label", "status" or a number column) and its direction.
    sort: tuple[str, bool] = ("label", True)
    # The table's order for ``sort`` (None: to be worked out again, after a sort or an accept).
    order: list[int] | None = None
    opened: int = 0
    # Fits in the widget's history from this index on are refits of the opened group.
    since: int = 0


@dataclass(frozen=True)
class _FitRequest:
    """What a Fit hands to fit(): the records as they are (converted once, never taken apart)."""

    model: Model
    dataset: Dataset
    parameters: Parameters
    options: dict[str, Any] = field(default_factory=dict)
    # With groups: fit_global's data, x, y, by, sigma, shared, start and exclude arguments.
    groups: dict[str, Any] | None = None


def _running_loop() -> asyncio.AbstractEventLoop | None:
    try:
        return asyncio.get_running_loop()
    except RuntimeError:
        return None


def _is_table(v: object) -> bool:
    return isinstance(v, (pd.DataFrame, Mapping))


class _Flag(traitlets.Bool):  # type: ignore[type-arg]  # traitlets' generic Bool
    """An on/off trait that rejects anything but a bool with curvewright's own error."""

    def validate(self, obj: Any, value: Any) -> bool:
        return _state.check_flag(value, str(self.name))


class CurveBench(anywidget.AnyWidget):
    """Fit a model to data interactively in a notebook, with the result back in Python.

    Parameters
    ----------
    data : DataFrame, mapping or BatchResult, optional
        A table holding the columns named by ``x`` and ``y``. Arrays may be given instead as
        ``CurveBench(x_values, y_values, model=...)`` or with ``x=``/``y=``. A
        :class:`~curvewright.BatchResult` (``CurveBench(batch)``, as ``batch.review()``)
        opens the review of the batch: an overview of every group coloured by status, a
        filter, a sortable table, and one group at a time in the main plot to guide, refit
        and accept into the batch (:meth:`review_open`, :meth:`review_filter`,
        :meth:`review_accept`, :attr:`batch`). Then only ``models``, ``x_scale``,
        ``y_scale`` and ``fit_options`` may be given.
    x, y : str or array_like
        Column names of ``data``, or the observations themselves.
    model : Model, str or callable
        A catalog name (see :func:`curvewright.catalog`), a :class:`~curvewright.Model`, a
        formula text such as ``"a*exp(-k*x) + c"``, or a Python function ``f(x, a, b, ...)``.
    by : str or list of str, optional
        Grouping column(s) of ``data``: one curve per group, fitted together by
        :func:`curvewright.fit_global`. Each parameter is per group at first; see
        :meth:`set_scope`, :meth:`select_group`, :meth:`hide_group`, :meth:`exclude_group` and
        :attr:`group_values`. The table's checks are fit_global's (a missing column, an empty
        group cell).
    sigma : str or array_like, optional
        Standard deviation of each y (or a column name); the fit weights by it.
    models : sequence, optional
        Extra models for the model chooser (same kinds as ``model``); the catalog is always there.
    exclude : array_like, optional
        Input rows to leave out of the fit at first (indices or a boolean mask).
    x_scale, y_scale : {"linear", "log"}, optional
        Axis scales. By default x is logarithmic when it spans more than two decades (as
        concentrations do) and y is linear.
    start : mapping, optional
        Starting values by name; the others come from the model's guided start.
    fixed : mapping or iterable of str, optional
        Parameters held fixed: ``{name: value}`` or names held at their start.
    bounds : mapping, optional
        ``{name: (lower, upper)}``, ``None`` for no bound.
    fit_options : mapping, optional
        Extra :func:`curvewright.fit` arguments for every fit: weights, loss, loss_scale,
        absolute_sigma, method, max_evaluations, timeout, links.

    Attributes
    ----------
    result : FitResult, GlobalResult or None
        The latest fit (an observable trait: ``widget.observe(fn, "result")``); with ``by=`` the
        :class:`~curvewright.GlobalResult`.
    history : tuple of FitResult
        Every fit made in this widget, oldest first, across models.
    show_confidence_band, show_prediction_band : bool
        Draw the shown fit's 95% confidence band (where the true curve lies) / prediction band
        (where a new observation falls) under the fitted curve; the page's checkboxes. The
        numbers are :meth:`bands`.
    show_residuals : bool
        Show the residual strip under the plot after a fit (default True).

    For a polynomial model (``straight_line``, ``polynomial_k``) the page shows the degree
    table of :meth:`degree_table`; picking a row is :meth:`use_degree`.

    Raises
    ------
    DataError, ModelError, FormulaError, ParameterError
        Bad data, an unknown or malformed model, inconsistent starting values or bounds.

    Examples
    --------
    >>> w = CurveBench(df, x="conc", y="response", model="inhibition_4pl")  # doctest: +SKIP
    >>> w  # shows the widget; drag, fix, exclude, press Fit      # doctest: +SKIP
    >>> w.result.values["log_ic50"]                               # doctest: +SKIP
    """

    _esm = _BUNDLE if _BUNDLE.is_file() else _NO_BUNDLE_ESM
    # The per-model memory record, for the session reader (which cannot import this module).
    _memory_type: ClassVar[type[_Memory]] = _Memory

    # ---- synced with the front end (types in js/state.ts)
    model_json = traitlets.Dict().tag(sync=True)
    data = traitlets.Dict().tag(sync=True)
    # The parameter records, Parameters.to_json() (js/params.ts, params_spec.json).
    params: traitlets.List[Any] = traitlets.List().tag(sync=True)
    # Any rather than Dict: None is a legal value (no fit yet / nothing to preview).
    fitted = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    x_scale = traitlets.Unicode("linear").tag(sync=True)
    y_scale = traitlets.Unicode("linear").tag(sync=True)
    model_names = traitlets.List(traitlets.Unicode()).tag(sync=True)
    model_name = traitlets.Unicode("").tag(sync=True)
    status = traitlets.Dict().tag(sync=True)
    error = traitlets.Unicode("").tag(sync=True)
    excluded: traitlets.List[Any] = traitlets.List().tag(sync=True)
    preview_curve = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    compare: traitlets.List[Any] = traitlets.List().tag(sync=True)
    # Display toggles (the page's checkboxes; Python may set them too, and snapshots keep them).
    show_confidence_band = _Flag(False).tag(sync=True)
    show_prediction_band = _Flag(False).tag(sync=True)
    show_residuals = _Flag(True).tag(sync=True)
    # The shown fit's 95% bands on the fitted curve's x grid, for the toggles that are on
    # (_state.bands_json), or None.
    bands_json = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    # For a polynomial model: select_degree's table on the included points (_state.degree_json),
    # or {"current": k, "error": why not}, or on large data {"current": k, "deferred": True,
    # "n": points} until the page asks for it; None for other models.
    degree_table_json = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    # Model comparison of the latest converged fit of each model (stats.compare's to_dict), or
    # {"error": why not} when they cannot be compared, or None with fewer than two.
    comparison_json = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    # A flush for tests and tools: the page sets sync_ping, Python answers with sync_pong; the
    # answer proves every earlier update from the page has been applied here.
    sync_ping = traitlets.Int(0).tag(sync=True)
    sync_pong = traitlets.Int(0).tag(sync=True)
    # With by=: the groups as the page draws them (_state.groups_json), None for one curve.
    groups_json = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    # Made on a batch: every group for the overview and the table (_review.review_json), and
    # {"filter", "open" (label), "can_accept", "accepted"}; both None otherwise.
    review_json = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)
    review_state = traitlets.Any(default_value=None, allow_none=True).tag(sync=True)

    # ---- Python only
    # A FitResult, or with by= the GlobalResult of fit_global.
    result = traitlets.Union(
        [traitlets.Instance(FitResult), traitlets.Instance(GlobalResult)],
        allow_none=True,
        default_value=None,
    )

    def __init__(
        self,
        data: pd.DataFrame | Mapping[str, Any] | BatchResult | ArrayLike | None = None,
        x: str | ArrayLike | None = None,
        y: str | ArrayLike | None = None,
        *,
        model: Model | str | Callable[..., Any] | None = None,
        by: str | Sequence[str] | None = None,
        sigma: str | ArrayLike | None = None,
        models: Sequence[Model | str | Callable[..., Any]] = (),
        exclude: ArrayLike | None = None,
        x_scale: str | None = None,
        y_scale: str = "linear",
        start: Mapping[str, float] | None = None,
        fixed: Mapping[str, float] | Iterable[str] | None = None,
        bounds: Mapping[str, tuple[float | None, float | None]] | None = None,
        fit_options: Mapping[str, Any] | None = None,
    ) -> None:
        super().__init__()
        self._lock = threading.RLock()
        self._busy = 0  # >0 while the widget sets its own traits (observers stand aside)
        self._from_front = 0  # >0 while applying an update sent by the page
        self._thread: threading.Thread | None = None
        self._cancel_event: threading.Event | None = None
        self._pending: tuple[_FitRequest, FitResult | GlobalResult | BaseException] | None = None
        self._history: list[FitResult | GlobalResult] = []
        self._callbacks: list[Callable[[Any], Any]] = []
        self._memory: dict[str, _Memory] = {}
        self._comparison_key: tuple[int, ...] = ()
        self._degree_cache: tuple[tuple[Any, ...], dict[str, Any]] | None = None

        self._review: _ReviewSetup | None = None
        if isinstance(data, BatchResult):
            # CurveBench(batch): review the batch; the main plot shows one group at a time.
            if any(v is not None for v in (x, y, by, sigma, model, exclude, start, fixed, bounds)):
                raise DataError(
                    "CurveBench(batch) reviews a batch with its own data, model, start and "
                    "bounds; give only the batch (and optionally models=, x_scale=, y_scale=, "
                    "fit_options=)."
                )
            batch = data
            opened = _first_to_open(batch)
            if opened is None:
                raise DataError(
                    "this batch has no group with readable data to open; see batch.reason."
                )
            xs_batch = _review.batch_x_scale(batch)
            self._review = _ReviewSetup(
                batch=batch,
                x_scale=xs_batch,
                entries=[_review.group_entry(batch, i, xs_batch) for i in range(len(batch))],
                opened=opened,
            )
            ds0 = batch.datasets[opened]
            assert ds0 is not None
            model = batch.model
            fit_options = {**dict(batch.options), **dict(fit_options or {})}
            x_scale = xs_batch if x_scale is None else x_scale
            exclude = ds0.row[~ds0.include] if not np.all(ds0.include) else None
            data, x, y = None, ds0.x, ds0.y
            sigma = ds0.sigma

        if data is not None and not _is_table(data):
            # CurveBench(x_values, y_values, model=...): arrays given positionally.
            if y is not None:
                raise DataError(
                    "Give either a table and column names, CurveBench(df, x='col', y='col', "
                    "...), or two arrays, CurveBench(x_values, y_values, ...); got three "
                    "positional arguments and the first is not a table."
                )
            data, x, y = None, data, x
        table = data if isinstance(data, (pd.DataFrame, Mapping)) else None
        self._groups: _GroupSetup | None = None
        if by is not None:
            self._groups = _group_setup(table, x, y, by, sigma)
        self._ds = make_dataset(x, y, data=table, sigma=sigma)
        if self._review is not None:
            ds_open = self._review.batch.datasets[self._review.opened]
            assert ds_open is not None
            self._ds = ds_open  # the group's own rows and labels
        self._excluded: list[int] = _state.check_rows(self._ds, exclude, "exclude")
        self._fit_options = self._check_fit_options(fit_options)

        if model is None:
            raise ModelError(
                "Give the model to fit: model='<catalog name>' (see curvewright.catalog()), a "
                "Model, a formula text such as 'a*exp(-k*x) + c', or a function f(x, a, b)."
            )
        self._models: dict[str, Model] = {}
        user: list[Model] = []
        for spec in [model, *models]:
            user.append(self._register(spec))
        for name, m in _catalog().items():
            self._models.setdefault(name, m)
        first = user[0]
        # The user's own models first in the chooser, then the catalog.
        mine = [m.name for m in user]
        order = mine + [n for n in self._models if n not in mine]
        self._models = {n: self._models[n] for n in dict.fromkeys(order)}

        xs = _state.auto_x_scale(self._ds.x) if x_scale is None else x_scale
        xs_checked = _state.check_scale(xs, "x_scale")
        ys_checked = _state.check_scale(y_scale, "y_scale")

        settings, note = self._guided_settings(first)
        settings, moved = self._overlay(first, settings, start, fixed, bounds)
        if self._review is not None:
            settings = self._review_settings(self._review.opened, settings)
            note = self._review_note()
        note = " ".join(t for t in (note, *moved) if t)
        self._memory[first.name] = self._new_memory(first, settings, keep=set(start or ()))

        with self.hold_sync(), self._internal():
            self.model_names = list(self._models)
            self.x_scale = xs_checked
            self.y_scale = ys_checked
            self.excluded = list(self._excluded)
            self._show_model(first.name)
            self.status = {"state": "idle", "message": note}
            if self._review is not None:
                self._review_show(json_too=True)
        self.on_msg(self._on_custom_msg)

    # =================================================================== public: reading
    @property
    def model(self) -> Model:
        """The model shown now."""
        return self._models[self.model_name]

    @property
    def dataset(self) -> Dataset:
        """All observations with the current exclusions applied (what Fit would fit)."""
        return self._ds.with_exclusions(self._excluded)

    @property
    def parameters(self) -> Parameters:
        """The shown model's parameter records (what Fit hands to :func:`curvewright.fit`)."""
        return self._mem().settings

    @property
    def settings(self) -> dict[str, dict[str, Any]]:
        """Each parameter's value, lower and upper bound (``inf`` for none) and fixed flag."""
        return {
            n: {"value": r.value, "lower": r.lower, "upper": r.upper, "fixed": r.fixed}
            for n, r in self._mem().settings.items()
        }

    @property
    def values(self) -> dict[str, float]:
        """Current parameter values (the fitted ones after a successful fit)."""
        return self._mem().settings.as_values()

    @property
    def history(self) -> tuple[FitResult | GlobalResult, ...]:
        """Every fit made in this widget, oldest first, across all models."""
        return tuple(self._history)

    @property
    def fits(self) -> dict[str, FitResult]:
        """The latest fit of each model fitted so far, by model name (for comparison)."""
        return {n: m.result for n, m in self._memory.items() if m.result is not None}

    @property
    def fitting(self) -> bool:
        """Whether a fit is running now."""
        t = self._thread
        return t is not None and t.is_alive()

    # =================================================================== public: changing
    def set_model(self, model: Model | str | Callable[..., Any]) -> None:
        """Show another model: a name in the chooser, a Model, a formula text or a function.

        A model shown for the first time starts from its guided start; one shown before comes
        back with its parameters and its fit. Earlier fits stay in :attr:`fits`.
        """
        if isinstance(model, str) and model in self._models:
            name = model
        else:
            resolved = self._resolve(model)
            self._check_new_name(resolved)
            name = resolved.name
            if name not in self._models:
                self._models = {name: resolved, **self._models}
                with self._internal():
                    self.model_names = list(self._models)
        with self.hold_sync(), self._internal():
            self._switch(name)

    def set_param(
        self,
        name: str,
        *,
        value: float | None = None,
        lower: float | None = None,
        upper: float | None = None,
        fixed: bool | None = None,
    ) -> None:
        """Change one parameter's value, bounds or fixed flag (``None`` keeps the current one).

        Use ``math.inf``/``-math.inf`` to remove a bound.

        Raises
        ------
        ParameterError
            Unknown name, non-finite value, lower above upper, value outside the bounds, or a
            negative value for a positive parameter. Nothing changes then.
        """
        model = self.model
        if name not in model.param_names:
            raise ParameterError(unknown_name_message(name, model.param_names, repr(model.name)))
        change: dict[str, Any] = {}
        for key, v in (("value", value), ("lower", lower), ("upper", upper)):
            if v is not None:
                change[key] = as_number(v, f"{name} {key}", allow_nan=True)
        if fixed is not None:
            change["fixed"] = bool(fixed)
        settings = self._mem().settings.replace(name, **change).validated(model)
        with self.hold_sync(), self._internal():
            self._apply_settings(settings)

    def fix(self, name: str, value: float | None = None) -> None:
        """Hold a parameter fixed (at ``value`` if given, else at its current value)."""
        self.set_param(name, value=value, fixed=True)

    def free(self, name: str) -> None:
        """Let a fixed parameter be estimated again."""
        self.set_param(name, fixed=False)

    def exclude(self, rows: ArrayLike) -> None:
        """Leave input rows out of the fit (they stay on the plot in their own style)."""
        new = _state.check_rows(self._ds, rows, "exclude")
        self._set_excluded(sorted(set(self._excluded) | set(new)))

    def include(self, rows: ArrayLike) -> None:
        """Put excluded input rows back into the fit."""
        back = set(_state.check_rows(self._ds, rows, "include"))
        self._set_excluded([r for r in self._excluded if r not in back])

    def reset_start(self) -> None:
        """Run the model's guided start again (fixed parameters keep their values)."""
        model = self.model
        cur = self._mem().settings
        guided, note = self._guided_settings(model, cur.fixed)
        # The guided values with the bounds the user set, brought inside them by the one rule.
        settings, moved = cur.with_values({n: guided[n].value for n in cur.free}).inside_bounds()
        note = " ".join(t for t in (note, *(m.text for m in moved)) if t)
        with self.hold_sync(), self._internal():
            self._apply_settings(settings)
            self.status = {"state": "idle", "message": note or "guided start applied"}

    # =================================================================== public: review
    @property
    def batch(self) -> BatchResult | None:
        """The batch under review (``CurveBench(batch)``; accepted refits are in it), or None."""
        return None if self._review is None else self._review.batch

    @property
    def review_group(self) -> str | None:
        """The label of the batch's group shown in the main plot (None when not reviewing)."""
        rv = self._review
        return None if rv is None else rv.batch.labels[rv.opened]

    @property
    def review_shown(self) -> tuple[str, ...]:
        """The labels of the groups the review filter keeps, in the batch's order."""
        rv = self._need_review("review_shown")
        b = rv.batch
        return tuple(
            lab for lab, s in zip(b.labels, b.statuses, strict=True) if rv.filter in ("all", s)
        )

    def review_filter(self, which: str) -> None:
        """Show ``"all"`` groups, only the ``"failed"`` ones or only the ``"flagged"`` ones.

        Raises
        ------
        ParameterError
            Another filter name.
        DataError
            The widget was not made on a batch.
        """
        rv = self._need_review("review_filter")
        rv.filter = _review.check_filter(which)
        with self.hold_sync(), self._internal():
            self._review_show()

    @property
    def review_order(self) -> tuple[str, ...]:
        """The labels of the shown groups in the review table's order (:meth:`review_sort`)."""
        rv = self._need_review("review_order")
        b = rv.batch
        return tuple(
            b.labels[i] for i in self._review_table_order() if rv.filter in ("all", b.statuses[i])
        )

    def _review_table_order(self) -> list[int]:
        rv = self._need_review("the review table")
        if rv.order is None:
            rv.order = _review.table_order(rv.entries, *rv.sort)
        return rv.order

    def review_sort(self, column: str, ascending: bool | None = None) -> None:
        """Sort the review table by ``column``: ``"label"``, ``"status"`` or a number column.

        Labels sort with their numbers read as numbers (well B2 before B10); by status,
        failed groups come first, then flagged ones; a missing number comes last either way.
        With ``ascending=None`` (a click on a column header) the same column flips its
        direction and another starts ascending.

        Raises
        ------
        ParameterError
            A column the table does not have (the message lists them).
        DataError
            The widget was not made on a batch.
        """
        rv = self._need_review("review_sort")
        key = _review.check_sort(rv.batch, column)
        if ascending is None:
            ascending = not rv.sort[1] if key == rv.sort[0] else True
        elif not isinstance(ascending, bool):
            raise ParameterError(f"ascending must be True, False or None, got {ascending!r}.")
        rv.sort, rv.order = (key, ascending), None
        with self.hold_sync(), self._internal():
            self._review_show()

    def review_open(self, group: object) -> None:
        """Show one group of the batch in the main plot, at its batch fit's values.

        Its points (with the exclusions of an accepted refit), the batch's model, bounds and
        fixed parameters and fit options; a failed group starts from the start the batch used.
        Guide it, :meth:`fit`, then :meth:`review_accept`.

        Raises
        ------
        ParameterError
            No such group (by key or label).
        DataError
            The group's data could not be read (its reason says why), or no batch.
        FitError
            A fit is running.
        """
        rv = self._need_review("review_open")
        if self.fitting:
            raise FitError(
                "A fit is running; wait for it (widget.wait()) or stop it (widget.cancel()) "
                "before opening another group."
            )
        b = rv.batch
        i = b.index_of(group)
        ds = b.datasets[i]
        if ds is None:
            raise DataError(f"group {b.labels[i]!r} has no data to open: {b.reasons[i]}")
        model = b.model
        with self.hold_sync(), self._internal():
            self._ds = ds
            self._excluded = [int(r) for r in ds.row[~ds.include]]
            self._memory = {model.name: _Memory(settings=Parameters(()))}
            self.model_name = model.name
            guided, _ = self._guided_settings(model)
            self._memory[model.name] = _Memory(settings=self._review_settings(i, guided))
            self._comparison_key = ()
            self._degree_cache = None
            rv.opened, rv.since = i, len(self._history)
            self.excluded = list(self._excluded)
            self.x_scale = rv.x_scale
            self.result = None
            self.error = ""
            self._show_model(model.name)
            self.status = {"state": "idle", "message": self._review_note()}
            self._review_show()

    def review_accept(self, note: str | None = None) -> BatchResult:
        """Write the opened group's latest refit into the batch (:meth:`BatchResult.replace_fit`).

        The group's row and status are recomputed from the refit as the batch does, and it is
        marked edited with ``note`` (by default a note of what changed: fixed parameters and
        excluded points). Returns the batch (the same object, changed).

        Raises
        ------
        FitError
            No converged refit of the opened group since it was opened (press Fit first), that
            refit is already in the batch, or a fit is running.
        ModelError
            The refit is of another model than the batch's (switch back to it).
        ParameterError
            An empty note.
        """
        rv = self._need_review("review_accept")
        b = rv.batch
        label = b.labels[rv.opened]
        if self.fitting:
            raise FitError("A fit is running; wait for it (widget.wait()) before accepting.")
        res = self._review_candidate()
        if res is None:
            other = self.model_name != b.model.name
            raise (ModelError if other else FitError)(
                f"there is no refit of group {label!r} with the batch's model {b.model.name!r} "
                "to accept"
                + (f" (the plot shows {self.model_name!r}; switch back to it)" if other else "")
                + ": guide the curve, press Fit (widget.fit()), then accept."
            )
        if b._fits.get(rv.opened) is res and b.edited[rv.opened]:
            raise FitError(f"this refit of group {label!r} is already in the batch.")
        if not res.success:
            raise FitError(
                f"the refit of group {label!r} did not converge ({res.message}); guide the "
                "curve closer to the points and fit again before accepting."
            )
        text = _edit_note(res, b, rv.opened) if note is None else note
        b.replace_fit(label, res, note=text)
        rv.entries[rv.opened] = _review.group_entry(b, rv.opened, rv.x_scale)
        rv.order = None
        with self.hold_sync(), self._internal():
            self.review_json = _review.review_json(b, rv.x_scale, rv.entries)
            self._review_show()
            self.status = {
                "state": "done",
                "message": f"group {label} accepted into the batch: now {b.statuses[rv.opened]}",
            }
        return b

    # =================================================================== public: groups
    @property
    def groups(self) -> tuple[str, ...]:
        """The group labels (``by=``), in the order fit_global uses; empty for one curve."""
        return () if self._groups is None else self._groups.labels

    @property
    def selected_group(self) -> str | None:
        """The group the handles and the value fields act on (None for one curve)."""
        return None if self._groups is None else self._groups.selected

    @property
    def hidden_groups(self) -> tuple[str, ...]:
        """Groups not drawn (they are still fitted unless excluded)."""
        g = self._groups
        return () if g is None else tuple(lab for lab in g.labels if lab in g.hidden)

    @property
    def excluded_groups(self) -> tuple[str, ...]:
        """Groups left out of the fit (still drawn, in a faded style, unless hidden)."""
        g = self._groups
        return () if g is None else tuple(lab for lab in g.labels if lab in g.excluded)

    @property
    def group_values(self) -> pd.DataFrame:
        """Every group's parameter values now, one row per group (shared values repeat).

        Raises
        ------
        DataError
            The widget was made without ``by=``.
        """
        g = self._need_groups("group_values")
        mem = self._mem()
        rows = [self._values_of(mem, lab) for lab in g.labels]
        out: pd.DataFrame = pd.DataFrame(
            rows,
            index=pd.Index(list(g.labels), name="group"),
            columns=pd.Index(list(self.model.param_names), name="parameter"),
        )
        return out

    def select_group(self, label: str) -> None:
        """Act on this group: its curve gets the handles, its values show in the table."""
        g = self._need_groups("select_group")
        lab = self._check_group(label)
        mem = self._mem()
        with self.hold_sync(), self._internal():
            g.selected = lab
            self._show_group(mem)

    def set_scope(self, name: str, scope: str) -> None:
        """Share a parameter across the groups (``"shared"``) or give each its own value.

        Going per group, every group starts from the value shown; going shared, the selected
        group's value becomes every group's.

        Raises
        ------
        ParameterError
            Unknown parameter or scope (nothing changes then).
        """
        g = self._need_groups("set_scope")
        model = self.model
        if name not in model.param_names:
            raise ParameterError(unknown_name_message(name, model.param_names, repr(model.name)))
        if scope not in SCOPES:
            raise ParameterError(f"scope of {name!r} must be one of {SCOPES}, got {scope!r}.")
        mem = self._mem()
        settings = mem.settings.replace(name, scope=scope).validated(model)
        if scope == "per_group":
            for lab in g.labels:
                mem.group_values[lab][name] = settings[name].value
        with self.hold_sync(), self._internal():
            self._apply_settings(settings)

    def hide_group(self, label: str, hidden: bool = True) -> None:
        """Stop drawing a group (``hidden=False`` draws it again); a fit still uses it."""
        g = self._need_groups("hide_group")
        lab = self._check_group(label)
        (g.hidden.add if hidden else g.hidden.discard)(lab)
        with self.hold_sync(), self._internal():
            self.groups_json = self._groups_json()

    def show_group(self, label: str) -> None:
        """Draw a hidden group again."""
        self.hide_group(label, hidden=False)

    def exclude_group(self, label: str, excluded: bool = True) -> None:
        """Leave a group out of the fit (``excluded=False`` puts it back)."""
        g = self._need_groups("exclude_group")
        lab = self._check_group(label)
        if excluded and len(g.excluded | {lab}) == len(g.labels):
            raise DataError(
                f"Excluding {lab!r} would leave no group to fit; include another group first."
            )
        (g.excluded.add if excluded else g.excluded.discard)(lab)
        with self.hold_sync(), self._internal():
            self.groups_json = self._groups_json()

    def include_group(self, label: str) -> None:
        """Put an excluded group back into the fit."""
        self.exclude_group(label, excluded=False)

    # =================================================================== public: fitting
    def fit(self, *, wait: bool = True) -> FitResult | GlobalResult | None:
        """Fit the current model to the included points, like the Fit button.

        The fit runs in a worker thread. With ``wait=True`` (the default) this call waits for
        it and returns the :class:`FitResult`; with ``wait=False`` it returns at once and the
        result arrives in :attr:`result` (and the ``on_fit`` callbacks) when done; in a kernel it
        is applied once the running cell has finished, or at once by :meth:`wait`. While a cell
        waits, the kernel cannot hear the page's Cancel button: use ``wait=False`` (then
        :meth:`cancel` or the button) or a ``timeout`` in ``fit_options`` for long fits.

        Raises
        ------
        FitError
            A fit is already running.
        DataError, DomainError, ParameterError, ModelError, FitError
            Whatever :func:`curvewright.fit` raises for the current state (with ``wait=True``);
            the message is also shown in the widget's error area.
        """
        with self._lock:
            if self.fitting:
                raise FitError(
                    "A fit is already running; wait for it (widget.wait()) or stop it "
                    "(widget.cancel()) first."
                )
            request = self._request()
            cancel = threading.Event()
            self._cancel_event = cancel
            self._pending = None
            mode: Literal["join", "loop", "direct"]
            loop = None
            if wait:
                mode = "join"
            else:
                loop = _running_loop()
                mode = "loop" if loop is not None else "direct"
            thread = threading.Thread(
                target=self._work,
                args=(request, cancel, mode, loop),
                name="curvewright-fit",
                daemon=True,
            )
            self._thread = thread
        with self.hold_sync(), self._internal():
            self.error = ""
            self.status = {"state": "fitting", "message": f"fitting {request.model.name}..."}
        thread.start()
        if not wait:
            return None
        thread.join()
        outcome = self._apply_pending()
        if isinstance(outcome, BaseException):
            raise outcome
        return outcome

    def cancel(self) -> None:
        """Ask a running fit to stop; it ends with ``success=False`` and code "cancelled"."""
        ev = self._cancel_event
        if ev is not None:
            ev.set()

    def wait(self, timeout: float | None = None) -> bool:
        """Wait for a running fit to finish and apply its result; False on timeout."""
        t = self._thread
        if t is not None:
            t.join(timeout)
            if t.is_alive():
                return False
        self._apply_pending()
        return True

    def on_fit(self, callback: Callable[[FitResult], Any], *, remove: bool = False) -> None:
        """Call ``callback(result)`` after every fit (or stop calling it with ``remove=True``).

        An exception in the callback is shown in the widget's error area.
        """
        if remove:
            # == rather than is: bound methods are new objects on every attribute access.
            self._callbacks = [c for c in self._callbacks if c != callback]
        elif callback not in self._callbacks:
            self._callbacks.append(callback)

    def compare_models(self) -> Comparison:
        """Compare the latest converged fit of every model fitted so far (F test and AICc).

        Raises
        ------
        ComparisonError
            Fewer than two converged fits, or fits that cannot be compared (other exclusions,
            other weights, a robust loss).
        """
        fits = self._comparable()
        if len(fits) < 2:
            raise ComparisonError(
                "Fit at least two models to compare them (choose another model and press Fit); "
                f"converged fits so far: {[r.model.name for r in fits]}."
            )
        return compare(*fits, names=[r.model.name for r in fits])

    # =================================================================== public: figures
    def figure(self, **opts: Any) -> Figure:
        """A matplotlib figure of what the page shows now.

        The shown fit (or, before a fit, the starting curve, dashed), the widget's axes
        scales, its excluded points (hollow), the bands whose toggles are on (at 95%) and
        the residual panel when ``show_residuals`` is on. When the parameters were moved
        after the fit, the moved curve is added, dashed, as on the page. With groups: the
        global fit, the groups not hidden on one axes.

        Parameters
        ----------
        **opts
            Passed on to :func:`curvewright.figures.plot_fit` (``xlabel``, ``title``,
            ``width``, ...).

        Returns
        -------
        matplotlib.figure.Figure
        """
        from ..figures import marks, plot_curve, plot_fit, plot_global
        from ..figures.options import BandKind
        from ..figures.scales import x_axis

        log_x = _state.check_scale(self.x_scale, "x_scale") == "log"
        log_y = _state.check_scale(self.y_scale, "y_scale") == "log"
        wanted: list[BandKind] = []
        if self.show_confidence_band:
            wanted.append("confidence")
        if self.show_prediction_band:
            wanted.append("prediction")
        kinds = tuple(wanted)
        mem = self._mem()
        data = self.dataset
        if self._groups is not None and mem.global_result is not None:
            hidden = set(self.hidden_groups)
            shown = [lab for lab in mem.global_result.labels if lab not in hidden]
            return plot_global(
                mem.global_result,
                groups=shown or None,
                bands=kinds or None,
                level=_state.BAND_LEVEL,
                residuals=bool(self.show_residuals),
                log_x=log_x,
                log_y=log_y,
                **opts,
            )
        model, values = self.model, self.values
        res = mem.result
        if res is None:
            return plot_curve(
                data, lambda x: model.eval(x, values), log_x=log_x, log_y=log_y, **opts
            )
        fig = plot_fit(
            res,
            bands=(kinds or None) if res.success else None,
            level=_state.BAND_LEVEL,
            residuals=bool(self.show_residuals),
            log_x=log_x,
            log_y=log_y,
            data=data,
            **opts,
        )
        moved = any(
            not math.isclose(values[n], float(res.values[n]), rel_tol=1e-12, abs_tol=0.0)
            for n in model.param_names
        )
        if moved:
            main = fig.axes[0]
            grid = x_axis(data.x, log_x).grid
            marks.curve(
                main,
                grid,
                model.eval(grid, values),
                marks.DATA_GREY,
                linestyle="--",
                label="current values",
                gid="cw-current",
            )
            main.legend(**marks.legend_style())
        return fig

    # =================================================================== public: judging a fit
    def bands(self, level: float = _state.BAND_LEVEL) -> pd.DataFrame:
        """The shown fit's confidence and prediction bands on the x grid the page draws them on.

        The grid spans the data (5% beyond each end), evenly spaced on the x axis, so in
        decades on a log x axis. The toggles ``show_confidence_band`` and
        ``show_prediction_band`` draw these (at 95%) under the fitted curve.

        Parameters
        ----------
        level : float
            Pointwise coverage, in (0, 1).

        Returns
        -------
        DataFrame
            Columns ``x, fit, confidence_lower, confidence_upper, prediction_lower,
            prediction_upper`` (see :meth:`FitResult.confidence_band` and
            :meth:`FitResult.prediction_band`).

        Raises
        ------
        FitError
            No converged fit of the model shown, or a fit with a robust loss.
        ParameterError
            ``level`` outside (0, 1).
        """
        res = self._mem().result
        if res is None or not res.success:
            why = "no fit yet" if res is None else "its latest fit did not converge"
            raise FitError(
                f"No bands for {self.model_name}: {why}. Press Fit (or call widget.fit()) and "
                "get a converged fit first."
            )
        xs = _state.band_grid(res, _state.check_scale(self.x_scale, "x_scale"))
        cb = res.confidence_band(xs, level)
        pb = res.prediction_band(xs, level)
        out: pd.DataFrame = pd.DataFrame(
            {
                "x": xs,
                "fit": cb["fit"].to_numpy(dtype=float),
                "confidence_lower": cb["lower"].to_numpy(dtype=float),
                "confidence_upper": cb["upper"].to_numpy(dtype=float),
                "prediction_lower": pb["lower"].to_numpy(dtype=float),
                "prediction_upper": pb["upper"].to_numpy(dtype=float),
            }
        )
        return out

    def degree_table(self, max_degree: int | None = None, alpha: float = 0.05) -> DegreeSelection:
        """Polynomial degree selection on the included points, as the page's degree table shows.

        Only for a polynomial model (``straight_line`` or ``polynomial_k``). The points are the
        ones a fit would use (exclusions applied), weighted as a fit would weight them.

        Parameters
        ----------
        max_degree : int, optional
            Largest degree to fit. By default the larger of 4 and the model's degree + 1, as
            far as the data allow (``max_degree + 2`` points and ``max_degree + 1`` distinct x).
        alpha : float
            Significance level of the F tests.

        Returns
        -------
        DegreeSelection
            See :func:`curvewright.select_degree`; ``.table`` has one row per degree.

        Raises
        ------
        ModelError
            The model shown is not a polynomial, or ``max_degree`` is not a whole number >= 1.
        DataError, ParameterError
            Too few points for ``max_degree``, weights that cannot be formed, a bad ``alpha``.
        """
        k = self.model.polynomial_degree
        if k is None:
            raise ModelError(
                f"The degree table is for polynomial models; {self.model_name!r} is not one. "
                "Choose 'straight_line' or a polynomial first, e.g. widget.use_degree(2)."
            )
        selection, _, _ = self._select_degree(k, max_degree, alpha, record=False)
        return selection

    def use_degree(self, degree: int) -> None:
        """Show the polynomial of this degree (1 is the catalog's ``straight_line``).

        Like picking a row of the page's degree table: the model switches, with its guided
        start (or its earlier parameters and fit, if it was shown before).

        Raises
        ------
        ModelError
            ``degree`` is not a whole number from 1 to 10.
        """
        target = polynomial(degree)  # checks the degree
        line = self._models.get("straight_line")
        if target.polynomial_degree == 1 and line is not None and line.polynomial_degree == 1:
            target = line
        self.set_model(target)

    # =================================================================== public: state
    def snapshot(self) -> dict[str, Any]:
        """The widget's state as JSON-ready data: model, parameters, exclusions, axes.

        The data themselves are not included (they stay the user's); :meth:`restore` checks that
        a snapshot is applied to data with the same number of rows.
        """
        model = self.model
        return {
            "format": STATE_FORMAT,
            "model": model.name,
            "model_def": model.to_dict() if model.expr is not None else None,
            "params": _state.params_json(self._mem().settings),
            "excluded": list(self._excluded),
            "x_scale": self.x_scale,
            "y_scale": self.y_scale,
            "show_confidence_band": bool(self.show_confidence_band),
            "show_prediction_band": bool(self.show_prediction_band),
            "show_residuals": bool(self.show_residuals),
            "n_input": int(self._ds.n_input),
            "groups": self._groups_snapshot(),
            # Made on a batch: the group the state belongs to (restore needs that group open).
            "review_group": self.review_group,
        }

    def _groups_snapshot(self) -> dict[str, Any] | None:
        g = self._groups
        if g is None:
            return None
        mem = self._mem()
        return {
            "by": list(g.by),
            "labels": list(g.labels),
            "selected": g.selected,
            "hidden": [lab for lab in g.labels if lab in g.hidden],
            "excluded": [lab for lab in g.labels if lab in g.excluded],
            "values": {lab: self._values_of(mem, lab) for lab in g.labels},
        }

    def _parse_groups(self, raw: object, model: Model) -> dict[str, Any] | None:
        """A snapshot's groups checked against this widget's (nothing applied here)."""
        g = self._groups
        if g is None:
            if raw is not None:
                raise DataError(
                    "The snapshot holds groups (by=) but this widget shows one curve; make the "
                    "widget with the same by= to restore it."
                )
            return None
        if not isinstance(raw, Mapping):
            raise DataError(
                "The snapshot holds one curve but this widget has groups (by=); restore it on a "
                "widget made the same way."
            )
        if list(raw.get("by", [])) != list(g.by) or list(raw.get("labels", [])) != list(g.labels):
            raise DataError(
                f"The snapshot's groups ({raw.get('by')!r}: {raw.get('labels')!r}) are not this "
                f"widget's ({list(g.by)!r}: {list(g.labels)!r}); restore it on the same data."
            )
        selected = self._check_group(raw.get("selected"))
        hidden = {self._check_group(v) for v in raw.get("hidden", [])}
        excluded = {self._check_group(v) for v in raw.get("excluded", [])}
        if len(excluded) == len(g.labels):
            raise DataError("The snapshot excludes every group; at least one must be fitted.")
        vals = raw.get("values")
        if not isinstance(vals, Mapping) or set(vals) != set(g.labels):
            raise DataError("The snapshot's group values must map every group to its values.")
        values: dict[str, dict[str, float]] = {}
        for lab in g.labels:
            row = vals[lab]
            if not isinstance(row, Mapping):
                raise DataError(f"The snapshot's values of group {lab!r} must be a mapping.")
            values[lab] = {
                n: as_number(row.get(n), f"value of {n!r} in group {lab!r}")
                for n in model.param_names
            }
        return {"selected": selected, "hidden": hidden, "excluded": excluded, "values": values}

    def restore(self, snapshot: Mapping[str, Any]) -> None:
        """Apply a :meth:`snapshot` (everything is checked first; on error nothing changes).

        Raises
        ------
        DataError
            Wrong format (snapshots of format versions 1 and 2 are refused, saying why: set the
            model up again), other data (row count), bad exclusions or axis scales.
        ModelError
            A model the widget does not know and cannot rebuild (a Python function: pass it
            again with ``models=[...]``).
        ParameterError
            Parameter settings that do not fit the model.
        """
        if not isinstance(snapshot, Mapping):
            raise DataError(f"A widget snapshot is a mapping, got {type(snapshot).__name__}.")
        fmt = snapshot.get("format")
        if isinstance(fmt, str) and fmt in _OLD_STATE_FORMATS:
            number, why = _OLD_STATE_FORMATS[fmt]
            raise DataError(
                f"This snapshot was saved in curvewright widget-state format {number} "
                f"({fmt!r}), which {why}; this version cannot restore it. Choose the model and "
                "set its parameters again, then save a new snapshot."
            )
        if fmt != STATE_FORMAT:
            raise DataError(f"Not a widget snapshot: format is {fmt!r}, expected {STATE_FORMAT!r}.")
        n_input = snapshot.get("n_input")
        if n_input != self._ds.n_input:
            raise DataError(
                f"The snapshot was taken on data with {n_input} rows; this widget holds "
                f"{self._ds.n_input}. Restore it on the same data."
            )
        kept = snapshot.get("review_group")
        if self._review is not None and kept is not None and kept != self.review_group:
            raise DataError(
                f"The snapshot is of group {kept!r} of the batch; this widget shows group "
                f"{self.review_group!r}. Open that group first: widget.review_open({kept!r})."
            )
        name = snapshot.get("model")
        if not isinstance(name, str):
            raise ModelError(f"The snapshot's model name must be text, got {name!r}.")
        model_def = snapshot.get("model_def")
        model = self._models.get(name)
        new_model: Model | None = None
        if model is None or (
            isinstance(model_def, Mapping)
            and model.expr is not None
            and model.to_dict().get("formula") != model_def.get("formula")
        ):
            if not isinstance(model_def, Mapping) or model_def.get("formula") is None:
                raise ModelError(
                    f"The snapshot's model {name!r} is not known here and cannot be rebuilt "
                    "(it was a Python function); pass it with CurveBench(..., models=[f])."
                )
            if model is not None:
                raise ModelError(
                    f"The snapshot's model {name!r} has another formula than this widget's "
                    f"model of that name; rename one of them."
                )
            new_model = Model.from_dict(model_def)
            model = new_model
        settings = _state.parse_params(model, snapshot.get("params"))
        rows = _state.check_rows(self._ds, snapshot.get("excluded", []), "excluded")
        xs = _state.check_scale(snapshot.get("x_scale", "linear"), "x_scale")
        ys = _state.check_scale(snapshot.get("y_scale", "linear"), "y_scale")
        # Display toggles: snapshots from before they existed leave them as they are.
        flags = {
            f: _state.check_flag(snapshot.get(f, getattr(self, f)), f)
            for f in ("show_confidence_band", "show_prediction_band", "show_residuals")
        }
        groups = self._parse_groups(snapshot.get("groups"), model)
        # Everything is valid: apply.
        with self.hold_sync(), self._internal():
            if new_model is not None:
                self._models = {new_model.name: new_model, **self._models}
                self.model_names = list(self._models)
            mem = self._memory.setdefault(model.name, _Memory(settings=settings))
            mem.settings = settings
            if groups is not None and self._groups is not None:
                mem.group_values = groups["values"]
                mem.global_result = None
                mem.result = None
                self._groups.selected = groups["selected"]
                self._groups.hidden = groups["hidden"]
                self._groups.excluded = groups["excluded"]
            self._excluded = rows
            self.excluded = list(rows)
            self.x_scale = xs
            self.y_scale = ys
            for f, v in flags.items():
                setattr(self, f, v)
            self._show_model(model.name)

    def save(self, path: str | Path) -> None:
        """Write the whole analysis to a session file (e.g. ``"analysis.cwsession.json"``).

        The file holds the data with their fingerprint, every model of the chooser (formulas
        as text and expression tree), the parameter records, exclusions, every fit made, the
        groups or the batch under review (with its accepted refits), the axes and the display
        toggles; its schema is versioned (DEVELOPERS.md, ``widget/session_spec.json``).
        :func:`curvewright.load_session` or :meth:`load` read it back.

        Raises
        ------
        SessionError
            A fit is running, a fit option cannot be written (a Python function), or the file
            cannot be written.
        """
        _session.write_file(self, path)

    def load(
        self,
        path: str | Path,
        *,
        models: Mapping[str, Model | Callable[..., Any]] | None = None,
    ) -> None:
        """Replace the analysis shown with the one in a session file written by :meth:`save`.

        Everything is read and checked into a new widget first; only then is it put in place,
        in one step, so a file that fails leaves this widget as it was. The Python-function
        models of this widget are offered by name; pass others with ``models={"name": f}``.
        A file of :meth:`snapshot` (an older ``save``) is applied with :meth:`restore`.

        Raises
        ------
        SessionError
            The file is missing, damaged or truncated, its data do not match its fingerprint,
            its schema is newer than this curvewright, or a Python-function model is missing.
        FitError
            A fit is running (wait for it or cancel it first).
        """
        if self.fitting:
            raise FitError(
                "A fit is running; wait for it (widget.wait()) or stop it (widget.cancel()) "
                "before loading a session."
            )
        doc = _session.load_document(path)
        if isinstance(doc, Mapping) and "format" in doc and "schema" not in doc:
            self.restore(doc)  # a snapshot file, as save() wrote before sessions
            return
        mine = {n: m for n, m in self._models.items() if m.expr is None}
        new = _session.read(doc, type(self), {**mine, **dict(models or {})})
        self._adopt(new)

    def _adopt(self, new: CurveBench) -> None:
        """Take over a freshly built widget's whole analysis (it is closed afterwards)."""
        with self._lock:
            for attr in _ANALYSIS_ATTRS:
                setattr(self, attr, getattr(new, attr))
            self._pending = None
        with self.hold_sync(), self._internal():
            for name in CurveBench.class_own_traits(sync=True):
                setattr(self, name, getattr(new, name))
            self.result = new.result
        new.close()

    def close(self) -> None:
        """Stop any running fit and close the widget."""
        self.cancel()
        super().close()

    # =================================================================== front end plumbing
    def set_state(self, sync_data: dict[str, Any]) -> None:
        """Apply an update from the page (ipywidgets calls this); marks it as the page's."""
        self._from_front += 1
        try:
            super().set_state(sync_data)
        finally:
            self._from_front -= 1

    @traitlets.observe(
        "params",
        "excluded",
        "x_scale",
        "y_scale",
        "model_name",
        "sync_ping",
        "show_confidence_band",
        "show_prediction_band",
    )
    def _on_change(self, change: Mapping[str, Any]) -> None:
        if self._busy:
            return
        name = str(change["name"])
        try:
            with self.hold_sync(), self._internal():
                if name == "params":
                    self._apply_settings(_state.parse_params(self.model, change["new"]))
                elif name == "excluded":
                    self._set_excluded(_state.check_rows(self._ds, change["new"], "excluded"))
                elif name in ("x_scale", "y_scale"):
                    _state.check_scale(change["new"], name)
                    self._refresh_view()
                elif name == "model_name":
                    new = change["new"]
                    if new not in self._models:
                        raise ModelError(
                            unknown_name_message(
                                str(new), list(self._models), "the chooser", kind="model"
                            )
                        )
                    self._switch(str(new))
                elif name in ("show_confidence_band", "show_prediction_band"):
                    self.bands_json = self._bands_json()
                else:  # sync_ping
                    self.sync_pong = int(change["new"])
        except Exception as exc:
            with self._internal():
                self.set_trait(name, change["old"])
            if self._from_front:
                self._report(exc)
            else:
                raise

    def _on_custom_msg(self, _widget: Any, content: Any, _buffers: Any) -> None:
        try:
            kind = content.get("type") if isinstance(content, Mapping) else None
            if kind == "fit":
                self._take_page_state(content)
                self.fit(wait=False)
            elif kind == "cancel":
                self.cancel()
            elif kind == "guided_start":
                self.reset_start()
            elif kind == "preview":
                self._preview_request(content)
            elif kind == "pins":
                self._pins_request(content)
            elif kind == "select_group":
                self.select_group(content.get("label"))
            elif kind == "set_scope":
                self.set_scope(str(content.get("name")), str(content.get("scope")))
            elif kind == "hide_group":
                self.hide_group(content.get("label"), bool(content.get("hidden", True)))
            elif kind == "exclude_group":
                self.exclude_group(content.get("label"), bool(content.get("excluded", True)))
            elif kind == "review_open":
                self.review_open(content.get("label"))
            elif kind == "review_accept":
                note = content.get("note")
                self.review_accept(None if note is None else str(note))
            elif kind == "review_filter":
                self.review_filter(content.get("filter"))
            elif kind == "review_sort":
                self.review_sort(str(content.get("key")))
            elif kind == "dismiss":
                self.error = ""
            elif kind == "use_degree":
                self.use_degree(content.get("degree"))
            elif kind == "degree_table":
                with self.hold_sync(), self._internal():
                    self.degree_table_json = self._degree_json(force=True)
            else:
                raise DataError(f"Unknown message from the page: {content!r}.")
        except Exception as exc:
            self._report(exc)

    def _take_page_state(self, content: Mapping[str, Any]) -> None:
        """Apply the state a Fit request carries (what the page shows when Fit is pressed).

        The page sends one state update at a time and buffers the rest, so the request may
        arrive before the page's latest edits; it therefore carries them. Parameters apply
        only if the page still shows the model Python shows.
        """
        rows = content.get("excluded")
        params = content.get("params")
        new_rows = None if rows is None else _state.check_rows(self._ds, rows, "excluded")
        settings = None
        if params is not None and content.get("model_name") == self.model_name:
            settings = _state.parse_params(self.model, params)
        with self.hold_sync(), self._internal():
            if settings is not None and settings != self._mem().settings:
                self._apply_settings(settings)
            if new_rows is not None and new_rows != self._excluded:
                self._set_excluded(new_rows)

    def _report(self, exc: BaseException, *, fit_failed: bool = False) -> None:
        with self.hold_sync(), self._internal():
            self.error = describe(exc)
            if fit_failed:
                self.status = {"state": "error", "message": "the fit could not run (see below)"}

    # =================================================================== internals
    @contextmanager
    def _internal(self) -> Iterator[None]:
        self._busy += 1
        try:
            yield
        finally:
            self._busy -= 1

    def _mem(self) -> _Memory:
        return self._memory[self.model_name]

    @staticmethod
    def _check_fit_options(opts: Mapping[str, Any] | None) -> dict[str, Any]:
        if opts is None:
            return {}
        if not isinstance(opts, Mapping):
            raise ParameterError(f"fit_options must be a mapping, got {type(opts).__name__}.")
        for k in opts:
            if k not in FIT_OPTIONS:
                raise ParameterError(
                    unknown_name_message(str(k), FIT_OPTIONS, "fit_options", kind="option")
                )
        return dict(opts)

    def _resolve(self, spec: Model | str | Callable[..., Any]) -> Model:
        if isinstance(spec, str) and spec in getattr(self, "_models", {}):
            return self._models[spec]
        model = resolve_model(spec)
        if not isinstance(spec, Model) and model.name in getattr(self, "_models", {}):
            # A formula text or a function whose name is taken: give it a free name.
            base, k = model.name, 2
            while f"{base}_{k}" in self._models:
                k += 1
            model = model.renamed(f"{base}_{k}")
        return model

    def _check_new_name(self, model: Model) -> None:
        have = self._models.get(model.name)
        if have is not None and have is not model and have != model:
            raise ModelError(
                f"Two different models are both called {model.name!r}; rename one, e.g. "
                f"model.renamed('{model.name}_2')."
            )

    def _register(self, spec: Model | str | Callable[..., Any]) -> Model:
        model = self._resolve(spec)
        self._check_new_name(model)
        self._models.setdefault(model.name, model)
        return self._models[model.name]

    def _guided_settings(
        self, model: Model, held: Mapping[str, float] | None = None
    ) -> tuple[Parameters, str]:
        ds = self.dataset
        x, y = ds.x_used, ds.y_used
        if model.domain == "x>0":
            keep = x > 0
        elif model.domain == "x>=0":
            keep = x >= 0
        else:
            keep = np.ones(x.shape, dtype=bool)
        xs, ys = x[keep], y[keep]  # guided_start thins large data itself
        try:
            values = guided_start(model, xs, ys, fixed=held or None)
        except Exception as exc:  # a start is a convenience: fall back, never fail the widget
            records, moved = _state.start_parameters(model, held)
            return records, " ".join(
                [f"no guided start for {model.name} ({exc}); showing its default values", *moved]
            )
        records, moved = _state.start_parameters(model, values)
        return records, " ".join(moved)

    def _overlay(
        self,
        model: Model,
        settings: Parameters,
        start: Mapping[str, float] | None,
        fixed: Mapping[str, float] | Iterable[str] | None,
        bounds: Mapping[str, tuple[float | None, float | None]] | None,
    ) -> tuple[Parameters, tuple[str, ...]]:
        """The constructor's shorthand on top of the guided records, made into records once.

        A guided value (never a user's) that lies outside bounds the user gave is moved inside
        by the one rule; the notes say so.
        """
        records = Parameters.from_shorthand(
            model, start=start, fixed=fixed, bounds=bounds, base=settings
        )
        users = set(start or ()) | set(records.fixed)
        guided = [n for n in records if n not in users]
        records, moved = records.inside_bounds(only=guided)
        return records.validated(model), tuple(m.text for m in moved)

    # ---- groups (by=)
    def _need_review(self, what: str) -> _ReviewSetup:
        if self._review is None:
            raise DataError(
                f"{what} needs a widget made on a batch: CurveBench(batch) or batch.review()."
            )
        return self._review

    def _review_settings(self, i: int, guided: Parameters) -> Parameters:
        """Group ``i``'s records: the batch's settings at its fitted values (else its start)."""
        rv = self._need_review("review")
        b = rv.batch
        fit = b._fits.get(i)
        if b.edited[i] and fit is not None and len(fit.parameters):
            # An accepted refit opens as it was made (its own fixed parameters and bounds).
            rec = fit.parameters.with_values({n: fit.values[n] for n in fit.parameters.free})
        else:
            rec = b.group_parameters(i)
            vals: dict[str, float] = {}
            for j, n in enumerate(b.model.param_names):
                if n not in rec.free:
                    continue
                v = float(b.value_array[i, j])
                if not math.isfinite(v):
                    v = float(rec[n].value)
                if not math.isfinite(v) and n in guided.names:
                    v = float(guided[n].value)
                vals[n] = v
            rec = rec.with_values(vals)
        out, _moved = rec.inside_bounds()
        return out

    def _review_note(self) -> str:
        rv = self._need_review("review")
        b, i = rv.batch, rv.opened
        head = f"group {b.labels[i]} of the batch: {b.statuses[i]}"
        tail = [t for t in (b.reasons[i], b.notes[i] and f"edited: {b.notes[i]}") if t]
        return head + (f" ({'; '.join(tail)})" if tail else "")

    def _review_candidate(self) -> FitResult | None:
        """The latest refit of the opened group with the batch's model, if any."""
        rv = self._review
        if rv is None:
            return None
        mem = self._memory.get(rv.batch.model.name)
        res = None if mem is None else mem.result
        if res is None or not any(r is res for r in self._history[rv.since :]):
            return None
        return res

    def _review_show(self, *, json_too: bool = False) -> None:
        rv = self._review
        if rv is None:
            return
        b = rv.batch
        if json_too:
            self.review_json = _review.review_json(b, rv.x_scale, rv.entries)
        res = self._review_candidate()
        done = res is not None and b._fits.get(rv.opened) is res and b.edited[rv.opened]
        self.review_state = {
            "filter": rv.filter,
            "open": b.labels[rv.opened],
            "can_accept": bool(res is not None and res.success and not done),
            "accepted": bool(done),
            "sort": {"key": rv.sort[0], "ascending": rv.sort[1]},
            # The table's order is decided here (review_sort), the page only shows it.
            "order": self._review_table_order(),
        }

    def _need_groups(self, what: str) -> _GroupSetup:
        if self._groups is None:
            raise DataError(
                f"{what} needs groups: make the widget with by='<group column>', e.g. "
                "CurveBench(df, x='conc', y='response', by='compound', model=...)."
            )
        return self._groups

    def _check_group(self, label: object) -> str:
        g = self._need_groups("a group")
        if not isinstance(label, str) or label not in g.labels:
            raise DataError(unknown_name_message(str(label), g.labels, "the groups", kind="group"))
        return label

    def _values_of(self, mem: _Memory, label: str) -> dict[str, float]:
        """One group's values: per-group records from the group, shared ones from the record."""
        own = mem.group_values.get(label, {})
        return {
            n: (own.get(n, r.value) if r.scope == "per_group" and not r.fixed else r.value)
            for n, r in mem.settings.items()
        }

    def _show_group(self, mem: _Memory) -> None:
        """Show the selected group's values and fit (callers hold hold_sync + _internal)."""
        g = self._groups
        assert g is not None
        own = mem.group_values.get(g.selected, {})
        per = {n: own[n] for n, r in mem.settings.items() if r.scope == "per_group" and n in own}
        mem.settings = mem.settings.with_values(per)
        gr = mem.global_result
        mem.result = gr[g.selected] if gr is not None and g.selected in gr.labels else None
        self.params = _state.params_json(mem.settings)
        if not self.model.has_preview:
            self.preview_curve = self._python_curve(self.values)
        self._refresh_view()

    def _new_memory(self, model: Model, settings: Parameters, keep: set[str]) -> _Memory:
        """A model's memory; with groups every parameter per group, each from its group's data.

        ``keep``: names whose value the user gave (every group starts there).
        """
        g = self._groups
        if g is None:
            return _Memory(settings=settings)
        for n in model.param_names:
            settings = settings.replace(n, scope="per_group")
        values: dict[str, dict[str, float]] = {}
        for lab in g.labels:
            values[lab] = self._guided_group(model, settings, lab, keep)
        mem = _Memory(settings=settings, group_values=values)
        own = values[g.selected]
        mem.settings = settings.with_values({n: own[n] for n in settings.free})
        return mem

    def _guided_group(
        self, model: Model, settings: Parameters, label: str, keep: set[str]
    ) -> dict[str, float]:
        """The guided start on one group's included points, inside the records' bounds."""
        g = self._groups
        assert g is not None
        ds = self.dataset
        in_group = g.row_group[ds.row] == g.labels.index(label)
        used = in_group & ds.include
        x, y = ds.x[used], ds.y[used]
        if model.domain != "all":
            ok = x > 0 if model.domain == "x>0" else x >= 0
            x, y = x[ok], y[ok]
        base = settings.as_values()
        try:
            guided = guided_start(model, x, y, fixed=settings.fixed or None)
        except Exception:  # a start is a convenience: the group starts at the shown values
            guided = {}
        free = [n for n in settings.free if n not in keep]
        moved, _ = settings.with_values(
            {n: float(guided[n]) for n in free if n in guided and math.isfinite(guided[n])}
        ).inside_bounds(only=free)
        return {n: moved[n].value if n in free else base[n] for n in model.param_names}

    def _groups_json(self) -> dict[str, Any] | None:
        g = self._groups
        if g is None:
            return None
        mem = self._mem()
        gr = mem.global_result
        fitted = None
        if gr is not None:
            fitted = {
                lab: dict(zip(gr.model.param_names, row.tolist(), strict=True))
                for lab, row in zip(gr.labels, gr.values.to_numpy(dtype=float), strict=True)
            }
        rows = self.data.get("row", []) if isinstance(self.data, Mapping) else []
        values = {lab: self._values_of(mem, lab) for lab in g.labels}
        # The page draws a formula's curves itself; a callable's are sampled here, for the
        # groups drawn beside the selected one (whose curve is preview_curve).
        curves = (
            None
            if self.model.has_preview
            else {
                lab: self._python_curve(values[lab])
                for lab in g.labels
                if lab != g.selected and lab not in g.hidden
            }
        )
        return {
            "by": list(g.by),
            "labels": list(g.labels),
            "selected": g.selected,
            "hidden": [lab for lab in g.labels if lab in g.hidden],
            "excluded": [lab for lab in g.labels if lab in g.excluded],
            "values": values,
            "fitted": fitted,
            "fit_success": None if gr is None else bool(gr.success),
            "point_group": g.row_group[np.asarray(rows, dtype=np.int64)].tolist(),
            "curves": curves,
        }

    def _group_request(self, records: Parameters) -> dict[str, Any]:
        """fit_global's arguments for the groups, exclusions and per-group values shown."""
        g = self._groups
        assert g is not None
        mem = self._mem()
        keep_groups = [i for i, lab in enumerate(g.labels) if lab not in g.excluded]
        rows = np.flatnonzero(np.isin(g.row_group, keep_groups))
        table = g.table.iloc[rows].reset_index(drop=True)
        excluded = np.zeros(len(g.table), dtype=bool)
        excluded[self._excluded] = True
        per = [n for n in records.free if records[n].scope == "per_group"]
        shared = [n for n in records.free if records[n].scope == "shared"]
        kept = [g.labels[i] for i in keep_groups]
        start = pd.DataFrame(
            [[mem.group_values[lab][n] for n in per] for lab in kept],
            index=pd.Index(kept),
            columns=pd.Index(per),
        )
        sigma = g.sigma[rows] if isinstance(g.sigma, np.ndarray) else g.sigma
        return {
            "data": table,
            "x": g.x,
            "y": g.y,
            "by": list(g.by),
            "sigma": sigma,
            "shared": shared,
            "start": start if per else None,
            "exclude": excluded[rows] if excluded.any() else None,
        }

    # ---- trait updates (callers hold hold_sync + _internal)
    def _show_model(self, name: str) -> None:
        model = self._models[name]
        mem = self._memory[name]
        self.model_name = name
        self.model_json = model.to_dict()
        self.params = _state.params_json(mem.settings)
        if self._groups is not None:
            self._show_group(mem)
        else:
            self._refresh_view()

    def _switch(self, name: str) -> None:
        model = self._models[name]
        note = ""
        if name not in self._memory:
            settings, note = self._guided_settings(model)
            self._memory[name] = self._new_memory(model, settings, keep=set())
        self._show_model(name)
        if not self.fitting:
            self.status = {"state": "idle", "message": note}

    def _apply_settings(self, settings: Parameters) -> None:
        mem = self._mem()
        mem.settings = settings
        if self._groups is not None:
            own = mem.group_values.setdefault(self._groups.selected, {})
            own.update({n: r.value for n, r in settings.items() if r.scope == "per_group"})
            self.groups_json = self._groups_json()
        self.params = _state.params_json(settings)
        if not self.model.has_preview:
            self.preview_curve = self._python_curve(self.values)

    def _set_excluded(self, rows: list[int]) -> None:
        with self.hold_sync(), self._internal():
            self._excluded = list(rows)
            self.excluded = list(rows)
            self._refresh_view()

    def _refresh_view(self) -> None:
        """Recompute everything drawn from the data, the axes and the fits."""
        model = self.model
        xs = _state.check_scale(self.x_scale, "x_scale")
        ys = _state.check_scale(self.y_scale, "y_scale")
        view = _state.data_view(self._ds, self._excluded, xs, ys, model)
        self.data = view
        res = self._mem().result
        self.fitted = None if res is None else _state.fitted_json(res, view, xs)
        g = self._groups
        if g is not None and self.fitted is not None:
            # A group's fit says nothing of the other groups' points: no residual for them.
            mine = g.row_group[np.asarray(view["row"], dtype=np.int64)] == g.labels.index(
                g.selected
            )
            self.fitted = {
                **self.fitted,
                "residuals": [
                    r if m else None for r, m in zip(self.fitted["residuals"], mine, strict=True)
                ],
            }
        self.preview_curve = None if model.has_preview else self._python_curve(self.values)
        self.compare = self._compare_json()
        self._update_comparison()
        self.bands_json = self._bands_json()
        self.degree_table_json = self._degree_json()
        self.groups_json = self._groups_json()

    def _bands_json(self) -> dict[str, Any] | None:
        res = self._mem().result
        if res is None:
            return None
        return _state.bands_json(
            res,
            _state.check_scale(self.x_scale, "x_scale"),
            confidence=bool(self.show_confidence_band),
            prediction=bool(self.show_prediction_band),
        )

    def _select_degree(
        self, k: int, max_degree: int | None, alpha: float, *, record: bool
    ) -> tuple[DegreeSelection, str, list[str]]:
        """select_degree on the included points, weighted as a fit would weight them.

        With ``record`` the warnings (rank deficiency) are collected for the page instead of
        being raised as warnings.
        """
        ds = self.dataset
        x, y = ds.x_used, ds.y_used
        weighting, w = point_weights(self._fit_options.get("weights"), (ds,))
        if max_degree is None:
            n_distinct = int(np.unique(x).size)
            top = min(max(_DEGREE_TABLE_MAX, k + 1), MAX_DEGREE, x.size - 2, n_distinct - 1)
            # Below 1 select_degree itself says how many points are missing.
            max_degree = max(top, 1)
        # fit() weights residuals by w; select_degree takes 1/sigma**2-style weights.
        weights = None if w is None else w**2
        if not record:
            sel = select_degree(x, y, max_degree=max_degree, alpha=alpha, weights=weights)
            return sel, weighting, []
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            sel = select_degree(x, y, max_degree=max_degree, alpha=alpha, weights=weights)
        return sel, weighting, [str(c.message) for c in caught]

    def _degree_json(self, *, force: bool = False) -> dict[str, Any] | None:
        k = self.model.polynomial_degree
        if k is None:
            return None
        key = (k, tuple(self._excluded))
        if self._degree_cache is not None and self._degree_cache[0] == key:
            return self._degree_cache[1]
        n_used = int(self.dataset.x_used.size)
        if n_used > _DEGREE_TABLE_AUTO_POINTS and not force:
            return {"current": k, "deferred": True, "n": n_used}
        out: dict[str, Any]
        try:
            sel, weighting, notes = self._select_degree(k, None, 0.05, record=True)
            out = _state.degree_json(sel, k, weighting, notes)
        except CurvewrightError as exc:
            out = {"current": k, "error": str(exc)}
        self._degree_cache = (key, out)
        return out

    def _comparable(self) -> list[FitResult]:
        return [
            m.result for m in self._memory.values() if m.result is not None and m.result.success
        ]

    def _update_comparison(self) -> None:
        fits = self._comparable()
        key = tuple(id(r) for r in fits)
        if key == self._comparison_key:
            return
        self._comparison_key = key
        if len(fits) < 2:
            self.comparison_json = None
            return
        try:
            self.comparison_json = compare(*fits, names=[r.model.name for r in fits]).to_dict()
        except CurvewrightError as exc:
            self.comparison_json = {"error": str(exc)}

    def _python_curve(
        self, values: Mapping[str, float], lo: float | None = None, hi: float | None = None
    ) -> dict[str, Any] | None:
        xs_kind = _state.check_scale(self.x_scale, "x_scale")
        if lo is not None and hi is not None and hi > lo and (xs_kind == "linear" or lo > 0):
            xs = (
                np.logspace(math.log10(lo), math.log10(hi), _PREVIEW_SAMPLES)
                if xs_kind == "log"
                else np.linspace(lo, hi, _PREVIEW_SAMPLES)
            )
        else:
            xs = _state.sample_x(self._ds.x, xs_kind, _PREVIEW_SAMPLES)
        try:
            return _state.curve_json(self.model, values, xs)
        except CurvewrightError:
            return None

    def _compare_json(self) -> list[dict[str, Any]]:
        xs = _state.sample_x(
            self._ds.x, _state.check_scale(self.x_scale, "x_scale"), _COMPARE_SAMPLES
        )
        out = []
        for name, mem in self._memory.items():
            r = mem.result
            if r is None:
                continue
            out.append(
                {
                    "model_name": name,
                    "current": name == self.model_name,
                    "success": bool(r.success),
                    "nfree": int(r.nfree),
                    "n": int(r.n),
                    "ssr": _opt(r.ssr),
                    "r2": _opt(r.r2),
                    "aicc": _opt(r.aicc),
                    "curve": _state.curve_json(r.model, r.values, xs),
                }
            )
        return out

    def _preview_request(self, content: Mapping[str, Any]) -> None:
        raw = content.get("values")
        model = self.model
        if model.has_preview:
            return  # the page draws formula models itself
        if not isinstance(raw, Mapping):
            raise ParameterError("preview: values must be a mapping name -> number.")
        values = {n: as_number(raw.get(n), f"preview value of {n!r}") for n in model.param_names}
        lo, hi = content.get("x_min"), content.get("x_max")
        lo_f = float(lo) if isinstance(lo, (int, float)) and math.isfinite(lo) else None
        hi_f = float(hi) if isinstance(hi, (int, float)) and math.isfinite(hi) else None
        curve = self._python_curve(values, lo_f, hi_f)
        with self._internal():
            self.preview_curve = None if curve is None else {**curve, "values": values}

    def _pins_request(self, content: Mapping[str, Any]) -> None:
        """Generic pins of a callable model, dragged on the page: solve here, send the curve.

        The page cannot evaluate a Python function, so it sends the pins (points the curve
        should pass through) and Python solves for the free parameters, as the page's own
        solver does for formula models. ``final`` marks the end of a drag: the solved values
        become the parameters' values.
        """
        model = self.model
        if model.has_preview:
            return
        raw_values = content.get("values")
        if not isinstance(raw_values, Mapping):
            raise ParameterError("pins: values must be a mapping name -> number.")
        values = {n: as_number(raw_values.get(n), f"value of {n!r}") for n in model.param_names}
        raw_pins = content.get("pins")
        if not isinstance(raw_pins, Sequence) or not 1 <= len(raw_pins) <= _MAX_PINS:
            raise DataError(f"pins: expected 1 to {_MAX_PINS} points [x, y], got {raw_pins!r}.")
        pts = []
        for p in raw_pins:
            if not isinstance(p, Sequence) or len(p) != 2:
                raise DataError(f"pins: each pin is [x, y], got {p!r}.")
            pts.append((as_number(p[0], "pin x"), as_number(p[1], "pin y")))
        px = np.array([p[0] for p in pts])
        py = np.array([p[1] for p in pts])
        settings = self._mem().settings
        # Fixed parameters keep Python's value whatever the page sent.
        values.update(settings.fixed)
        y_log = self.y_scale == "log"
        solved = _solve_pins(model, values, settings, px, py, y_log, self._ds.y)
        lo, hi = content.get("x_min"), content.get("x_max")
        lo_f = float(lo) if isinstance(lo, (int, float)) and math.isfinite(lo) else None
        hi_f = float(hi) if isinstance(hi, (int, float)) and math.isfinite(hi) else None
        curve = self._python_curve(solved, lo_f, hi_f)
        with np.errstate(all="ignore"):
            pin_y = model.eval(px, solved)
        with self.hold_sync(), self._internal():
            if content.get("final"):
                self._apply_settings(settings.with_values(solved))
            self.preview_curve = (
                None
                if curve is None
                else {
                    **curve,
                    "values": solved,
                    "pins": [[float(a), _opt(float(b))] for a, b in zip(px, pin_y, strict=True)],
                    "seq": content.get("seq"),
                }
            )

    # ---- fitting
    def _request(self) -> _FitRequest:
        model = self.model
        records = self._mem().settings
        options = dict(self._fit_options)
        links = options.pop("links", None)
        if links:
            # fit_options' links join the records here, the request's one conversion.
            records = Parameters.from_shorthand(model, links=links, base=records)
        groups = None if self._groups is None else self._group_request(records)
        return _FitRequest(
            model=model, dataset=self.dataset, parameters=records, options=options, groups=groups
        )

    def _work(
        self,
        req: _FitRequest,
        cancel: threading.Event,
        mode: Literal["join", "loop", "direct"],
        loop: asyncio.AbstractEventLoop | None,
    ) -> None:
        from ..fitting import fit  # the engine; imported here so the widget module loads fast

        def post(fn: Callable[[], None]) -> None:
            if mode == "loop" and loop is not None:
                # RuntimeError: the loop has closed (the kernel is shutting down).
                with contextlib.suppress(RuntimeError):
                    loop.call_soon_threadsafe(fn)
            else:
                with self._lock:
                    fn()

        def progress(evaluations: int, ssr: float) -> None:
            msg = f"fitting {req.model.name}: {evaluations} evaluations, SSR {ssr:.6g}"
            post(lambda: self._set_status("fitting", msg))

        outcome: FitResult | GlobalResult | BaseException
        try:
            if req.groups is not None:
                from ..fitting.global_fit import fit_global

                outcome = fit_global(
                    req.model,
                    params=req.parameters,
                    cancel=cancel,
                    progress=progress,
                    **req.groups,
                    **req.options,
                )
            else:
                outcome = fit(
                    req.model,
                    dataset=req.dataset,
                    params=req.parameters,
                    cancel=cancel,
                    progress=progress,
                    **req.options,
                )
        except Exception as exc:
            outcome = exc
        with self._lock:
            self._pending = (req, outcome)
        if mode == "loop":
            post(self._apply_from_loop)
        elif mode == "direct":
            with self._lock:
                self._apply_pending()

    def _set_status(self, state: FitState, message: str) -> None:
        with self._internal():
            self.status = {"state": state, "message": message}

    def _apply_from_loop(self) -> None:
        # call_soon_threadsafe wants a callable returning None.
        self._apply_pending()

    def _apply_pending(self) -> FitResult | GlobalResult | BaseException | None:
        with self._lock:
            pending, self._pending = self._pending, None
        if pending is None:
            return None
        req, outcome = pending
        if isinstance(outcome, BaseException):
            self._report(outcome, fit_failed=True)
            return outcome
        if isinstance(outcome, GlobalResult):
            self._accept_global(req, outcome)
        else:
            self._accept(req, outcome)
        return outcome

    def _accept_global(self, req: _FitRequest, res: GlobalResult) -> None:
        name = req.model.name
        mem = self._memory[name]
        g = self._groups
        assert g is not None
        mem.global_result = res
        self._history.append(res)
        if res.success:
            table = res.values
            arr = table.to_numpy(dtype=float)
            names = list(res.model.param_names)
            for i, lab in enumerate(res.labels):
                mem.group_values[lab].update(dict(zip(names, arr[i].tolist(), strict=True)))
            # Shared records take the fitted value; per-group ones show the selected group's.
            shared = {n: float(arr[0, names.index(n)]) for n in res.shared}
            mem.settings = mem.settings.with_values(shared)
            state: FitState = "done"
            message = f"fitted {name} to {len(res.labels)} groups: {res.message}"
        else:
            state = "stopped"
            message = f"{name} not fitted: {res.message}"
        with self.hold_sync(), self._internal():
            if name == self.model_name:
                self._show_group(mem)
            self.status = {"state": state, "message": message}
        self._announce(res)

    def _announce(self, res: FitResult | GlobalResult) -> None:
        try:
            self.result = res
        except Exception as exc:  # an observer of `result` raised: show it, keep going
            self._report(exc)
        for cb in list(self._callbacks):
            try:
                cb(res)
            except Exception as exc:  # a user's callback must not break the widget
                self._report(exc)

    def _accept(self, req: _FitRequest, res: FitResult) -> None:
        name = req.model.name
        mem = self._memory.setdefault(name, _Memory(settings=Parameters(())))
        mem.result = res
        self._history.append(res)
        moved: tuple[Moved, ...] = ()
        if res.success and len(mem.settings):
            # The fitted values become the starts; one outside the bounds shown (a value the
            # fit computed from a link) is moved inside by the one rule, and the status says so.
            mem.settings, moved = mem.settings.with_values(res.values).inside_bounds()
        if res.success:
            state: FitState = "done"
            message = " ".join([f"fitted {name}: {res.message}", *(m.text for m in moved)])
        else:
            state = "stopped"
            message = f"{name} not fitted: {res.message}"
        with self.hold_sync(), self._internal():
            if name == self.model_name:
                self.params = _state.params_json(mem.settings)
                self._refresh_view()
            else:
                self.compare = self._compare_json()
                self._update_comparison()
            self.status = {"state": state, "message": message}
            self._review_show()
        self._announce(res)


def load_session(
    path: str | Path, models: Mapping[str, Model | Callable[..., Any]] | None = None
) -> CurveBench:
    """A widget holding the analysis saved in a session file by :meth:`CurveBench.save`.

    Loading never runs code from the file: formulas are parsed by curvewright's whitelist
    parser, and a model that was a Python function must be passed again by name.

    Parameters
    ----------
    path : str or Path
        The session file (e.g. ``"analysis.cwsession.json"``).
    models : mapping, optional
        ``{"model name": function_or_Model}`` for the session's Python-function models.

    Raises
    ------
    SessionError
        The file is missing, damaged or truncated, its data do not match its fingerprint, its
        schema is newer than this curvewright (upgrade it), or a Python-function model was not
        passed in ``models``.

    Examples
    --------
    >>> bench.save("analysis.cwsession.json")                        # doctest: +SKIP
    >>> again = curvewright.load_session("analysis.cwsession.json")  # doctest: +SKIP
    """
    return _session.read(_session.load_document(path), CurveBench, models)


# ------------------------------------------------------------------------------ helpers
# As many pins as js/interact.ts's MAX_PINS.
_MAX_PINS = 5


def _solve_pins(
    model: Model,
    values: Mapping[str, float],
    settings: Parameters,
    px: np.ndarray,
    py: np.ndarray,
    y_log: bool,
    y_data: np.ndarray,
) -> dict[str, float]:
    """Values of the free parameters that bring the curve closest to the pins.

    Bounded least squares in the vertical direction (in log10 y on a log y axis), residuals
    scaled by the data's y span so the solver's tolerances mean the same for any units.
    """
    free = [n for n in model.param_names if not settings[n].fixed]
    out = {n: float(values[n]) for n in model.param_names}
    if not free:
        return out
    lo = np.array([settings[n].lower for n in free])
    hi = np.array([settings[n].upper for n in free])
    # The drag solver's own iterate projected into its box (least_squares needs a start
    # inside): a solver step, not a start the user set, so not the record's rule.
    u0 = np.clip(np.array([out[n] for n in free]), lo, hi)
    span = float(np.ptp(y_data[np.isfinite(y_data)])) if y_data.size else 1.0
    scale = span if span > 0 else 1.0

    def transform(v: np.ndarray) -> np.ndarray:
        if not y_log:
            return v / scale
        with np.errstate(all="ignore"):
            return np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)

    target = transform(py)

    def resid(u: np.ndarray) -> np.ndarray:
        vals = {**out, **dict(zip(free, u.tolist(), strict=True))}
        with np.errstate(all="ignore"):
            r = transform(model.eval(px, vals)) - target
        # A curve undefined at a pin is far from it (the solver then steps back).
        return np.where(np.isfinite(r), r, 1e6)

    if not np.all(np.isfinite(target)):
        return out
    sol = least_squares(resid, u0, bounds=(lo, hi), max_nfev=100 * (len(free) + 1))
    out.update(dict(zip(free, (float(v) for v in sol.x), strict=True)))
    return out


def _group_setup(
    table: pd.DataFrame | Mapping[str, Any] | None,
    x: object,
    y: object,
    by: str | Sequence[str],
    sigma: object,
) -> _GroupSetup:
    """The groups of ``by=``, checked by fit_global's own table checks (one validator)."""
    if not isinstance(table, pd.DataFrame):
        raise DataError(
            "by= needs the data as a pandas DataFrame with the x, y and group columns, e.g. "
            "CurveBench(df, x='conc', y='response', by='compound', model=...); got "
            f"{type(table).__name__}."
        )
    if isinstance(by, str):
        cols: tuple[str, ...] = (by,)
    elif isinstance(by, Sequence) and by and all(isinstance(c, str) for c in by):
        cols = tuple(by)
    else:
        raise DataError(f"by= must be a column name or a list of column names, got {by!r}.")
    sig: str | np.ndarray | None
    if sigma is None or isinstance(sigma, str):
        sig = sigma
    else:
        sig = np.asarray(sigma, dtype=float).ravel()
    groups = _split_groups(table, x, y, cols, (), sig, None)  # type: ignore[arg-type]
    row_group = np.empty(len(table), dtype=np.int64)
    for i, pos in enumerate(table.groupby(list(cols), sort=True, dropna=False).indices.values()):
        row_group[pos] = i
    return _GroupSetup(
        table=table,
        x=str(x),
        y=str(y),
        by=cols,
        sigma=sig,
        labels=groups.labels,
        row_group=row_group,
        selected=groups.labels[0],
    )


def _first_to_open(batch: BatchResult) -> int | None:
    """The group a review opens with: the first failed one with data, else flagged, else any."""
    for want in ("failed", "flagged", None):
        for i, (s, d) in enumerate(zip(batch.statuses, batch.datasets, strict=True)):
            if d is not None and want in (None, s):
                return i
    return None


def _edit_note(res: FitResult, batch: BatchResult, i: int) -> str:
    """The default note of an accepted refit: what the person changed, in plain words."""
    parts = ["refitted in review"]
    fixed = [n for n in res.fixed if n not in batch.parameters.fixed]
    if fixed:
        parts.append(f"fixed {', '.join(fixed)}")
    ds = res.dataset
    out = [int(r) for r in ds.row[~ds.include]]
    if out:
        parts.append(f"{len(out)} point(s) excluded (rows {', '.join(map(str, out[:8]))})")
    return "; ".join(parts)


def _catalog() -> Mapping[str, Model]:
    from ..catalog import catalog

    return catalog()


def _opt(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None
