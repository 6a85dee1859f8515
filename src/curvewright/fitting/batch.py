"""Batch fits: :func:`fit_groups`, one model fitted to every group of a table, each on its own.

The request is validated once (model, columns, parameter settings, starts, options) into a
:class:`.batch_run._Request`; the table is split by :func:`curvewright.data.split_groups` with
``errors="keep"``, so a group whose data cannot be read gets a status and a reason and the
others go on; :func:`.batch_run.run_groups` fits them (or :func:`.batch_dask.run_dask` on a
cluster, each task running the same code on a partition of whole groups).
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..batch_result import BatchResult
from ..data import split_groups
from ..errors import DataError, ParameterError
from ..models import Model, as_number, unknown_name_message
from ..parameters import Parameter, Parameters
from ..result import FitResult
from .batch_run import _Request, check_frame, run_groups
from .problem import (
    _WEIGHTINGS,
    Loss,
    Method,
    Weighting,
    _check_limits,
    _check_loss,
    request_parameters,
    resolve_model,
)

__all__ = ["fit_groups"]

Backend = Literal["local", "dask"]


def fit_groups(
    model: Model | str | Callable[..., Any],
    *,
    data: Any,
    x: str,
    y: str,
    by: str | Sequence[str],
    sigma: ArrayLike | str | None = None,
    params: Parameters | Sequence[Parameter] | None = None,
    start: Mapping[str, float] | FitResult | pd.DataFrame | None = None,
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
    progress: bool | None = None,
    backend: Backend = "local",
    client: Any = None,
    level: float = 0.95,
    groups_per_task: int = 2000,
) -> BatchResult:
    """Fit one model to every group of a table, each group on its own.

    Parameters
    ----------
    model : Model, str or callable
        As for :func:`curvewright.fit`.
    data : DataFrame
        One row per observation, with the x, y and group columns (with ``backend="dask"`` a
        dask DataFrame too).
    x, y : str
        Column names of the observations.
    by : str or list of str
        Grouping column(s); with several, a group's key is a tuple and its label joins the
        values with ``" / "``.
    sigma : str or array_like, optional
        Column name (or one value per row) of the standard deviation of each y.
    params, fixed, bounds, links, weights, loss, loss_scale, absolute_sigma, method
        As for :func:`curvewright.fit`, applying to every group.
    start : mapping, FitResult or DataFrame, optional
        ``{name: value}`` for every group; a :class:`FitResult` (a template, e.g. one curve
        guided in the widget: its fitted values start every group); or a DataFrame of
        per-group starts, indexed by group key or label, or holding the ``by`` columns, with one
        column per free parameter (NaN: the guided start). Groups without a start get the
        guided start.
    exclude : array_like, optional
        Rows of the table to leave out: positions (0-based) or a boolean mask.
    max_evaluations : int, optional
        Limit on model evaluations of each group's fit.
    timeout : float, optional
        Limit in seconds for the whole batch. What has finished is kept; the other groups are
        failed with the reason ``"not run: timed out"`` (``"stopped: timed out"`` for one
        stopped in its fit).
    cancel : threading.Event or callable, optional
        Polled between groups and at every model evaluation; when set (or True) the batch
        stops as for ``timeout``, with ``"cancelled"`` in the reasons.
    progress : bool, optional
        Show a progress bar (``tqdm.auto``, which renders in notebooks). Default: on in an
        interactive session (a Python prompt, IPython or Jupyter), off in scripts.
    backend : {"local", "dask"}
        ``"dask"`` runs partitions of whole groups (``groups_per_task`` each) on a
        ``dask.distributed`` cluster, each with the same code as ``"local"``.
    client : distributed.Client, optional
        The cluster to use with ``backend="dask"``; without one a ``LocalCluster`` is
        started for the call and closed after it.
    level : float
        Coverage of the intervals (parameters and derived quantities).
    groups_per_task : int
        Groups per Dask task.

    Returns
    -------
    BatchResult

    Raises
    ------
    DataError
        Not a table, an empty table, an unknown column, a group column with a missing value.
    ParameterError
        Unknown parameter names, bad options, a start frame whose groups or columns do not
        match the data.
    DependencyError
        ``backend="dask"`` without dask and distributed installed.

    Notes
    -----
    A group that cannot be fitted (NaN rows are dropped and counted, but too few points, a
    constant response, infinite or non-numeric values, x outside the model's domain, a
    singular fit, a model function that raises) is ``failed`` with a reason; the batch goes
    on. Formula models with the squared loss and no links are fitted by the vectorised
    engine; the rest, and groups it does not settle, by :func:`curvewright.fit`
    (``BatchResult.path`` says which).
    """
    timeout, cancel_fn = _check_limits(method, max_evaluations, timeout, cancel)
    t0 = time.time()
    m = resolve_model(model)
    by_cols = (by,) if isinstance(by, str) else tuple(by)
    if not by_cols or not all(isinstance(b, str) for b in by_cols):
        raise DataError("by= must name one grouping column or a list of them (strings).")
    if backend not in ("local", "dask"):
        raise ParameterError(f"backend must be 'local' or 'dask', got {backend!r}.")
    level = as_number(level, "level")
    if not 0 < level < 1:
        raise ParameterError(f"level must be between 0 and 1, got {level}.")
    if (
        isinstance(groups_per_task, bool)
        or not isinstance(groups_per_task, int)
        or groups_per_task < 1
    ):
        raise ParameterError(
            f"groups_per_task must be a positive whole number, got {groups_per_task!r}."
        )
    loss_scale = _check_loss(loss, loss_scale)
    if weights is not None and weights not in _WEIGHTINGS:
        raise ParameterError(
            f"weights must be one of {_WEIGHTINGS} (or None for automatic), got {weights!r}."
        )
    req = _request(
        m,
        params,
        start,
        fixed,
        bounds,
        links,
        by_cols,
        x,
        y,
        sigma,
        level,
        options={
            "weights": weights,
            "loss": loss,
            "loss_scale": loss_scale,
            "absolute_sigma": bool(absolute_sigma),
            "method": method,
            "max_evaluations": None if max_evaluations is None else int(max_evaluations),
        },
    )
    deadline = None if timeout is None else t0 + timeout
    if progress is not None and not isinstance(progress, (bool, np.bool_)):
        raise ParameterError(
            f"progress must be True, False or None (on in a notebook), got {progress!r}."
        )
    show = _interactive() if progress is None else bool(progress)
    if backend == "dask":
        from .batch_dask import run_dask

        return run_dask(
            req,
            data,
            sigma=sigma,
            exclude=exclude,
            client=client,
            deadline=deadline,
            cancel=cancel_fn,
            progress=show,
            groups_per_task=groups_per_task,
        )
    if not isinstance(data, pd.DataFrame):
        raise DataError(
            "fit_groups needs data= as a pandas DataFrame holding the x, y and group columns "
            f"(or a dask DataFrame with backend='dask'); got {type(data).__name__}."
        )
    if len(data) == 0:
        raise DataError("data= is an empty table: there are no rows to fit.")
    from tqdm.auto import tqdm

    groups = split_groups(
        data, x, y, by_cols, sigma=sigma, exclude=exclude, errors="keep", caller="fit_groups"
    )
    if req.frame is not None:
        check_frame(req.frame, groups.keys, groups.labels)
    with tqdm(total=len(groups), disable=not show, desc="fitting groups", unit="group") as bar:
        return run_groups(req, groups, deadline=deadline, cancel=cancel_fn, tick=bar.update)


def _request(
    m: Model,
    params: Parameters | Sequence[Parameter] | None,
    start: Mapping[str, float] | FitResult | pd.DataFrame | None,
    fixed: Mapping[str, float] | Iterable[str] | None,
    bounds: Mapping[str, tuple[float | None, float | None]] | None,
    links: Mapping[str, str] | None,
    by: tuple[str, ...],
    x: str,
    y: str,
    sigma: ArrayLike | str | None,
    level: float,
    options: dict[str, Any],
) -> _Request:
    frame: pd.DataFrame | None = None
    common: Mapping[str, float] | None = None
    if isinstance(start, FitResult):
        if tuple(start.model.param_names) != tuple(m.param_names):
            raise ParameterError(
                f"the template result's model takes {list(start.model.param_names)}, this "
                f"batch's model takes {list(m.param_names)}; use a result of the same model."
            )
        base = request_parameters(m, params, fixed=fixed, bounds=bounds, links=links)
        common = {n: float(start.values[n]) for n in base.free}
    elif isinstance(start, pd.DataFrame):
        frame = start
    elif start is not None and not isinstance(start, Mapping):
        raise ParameterError(
            "start must be a mapping {name: value}, a FitResult (a template) or a DataFrame of "
            f"per-group starts; got {type(start).__name__}."
        )
    else:
        common = start
    records = request_parameters(m, params, start=common, fixed=fixed, bounds=bounds, links=links)
    if frame is not None:
        frame = _start_frame(frame, m, records, by)
    return _Request(
        model=m,
        parameters=records,
        frame=frame,
        options=options,
        level=level,
        x=x,
        y=y,
        by=by,
        sigma=sigma if isinstance(sigma, str) else None,
    )


def _start_frame(
    frame: pd.DataFrame, m: Model, records: Parameters, by: tuple[str, ...]
) -> pd.DataFrame:
    """The per-group start table checked: indexed by group, one float column per free param."""
    f = frame
    if len(by) and all(c in f.columns for c in by):
        f = f.set_index(list(by))
    for c in f.columns:
        if c not in m.param_names:
            raise ParameterError(
                unknown_name_message(str(c), m.param_names, f"model {m.name!r} (in start=)")
            )
        if c not in records.free:
            raise ParameterError(
                f"start= has a column {c!r}, which is fixed or linked in this batch; only free "
                "parameters take starts. Drop that column."
            )
    if f.index.has_duplicates:
        dup = f.index[f.index.duplicated()].tolist()[:5]
        raise ParameterError(f"start= has more than one row for groups {dup}; give one each.")
    out = pd.DataFrame(index=f.index)
    for c in f.columns:
        col = pd.to_numeric(f[c], errors="coerce").astype(float)
        if (col.isna() & f[c].notna()).any():
            raise ParameterError(
                f"start= column {c!r} holds values that are not numbers; give numbers (NaN for "
                "the guided start)."
            )
        if np.isinf(col.to_numpy()).any():
            raise ParameterError(
                f"start= column {c!r} holds infinite values; give finite numbers (NaN: guided)."
            )
        out[str(c)] = col
    checked: pd.DataFrame = out
    return checked


def _interactive() -> bool:
    """Whether a person is watching: a Python prompt, IPython or a Jupyter kernel."""
    if hasattr(sys, "ps1") or sys.flags.interactive:
        return True
    ip = sys.modules.get("IPython")  # only looked at, never imported here
    get = getattr(ip, "get_ipython", None)
    return bool(callable(get) and get() is not None)
