"""The review page's data: a batch of fits turned into the ``review_json`` trait (js/review.ts).

One entry per group: its label, status, reason, review note and edited flag, its points
(thinned for large groups), its fitted curve sampled on a grid over its x, and the table's key
numbers (the free parameters and the derived quantities). The x axis is decided once for the
whole batch, by the rule the main plot uses, so every small plot reads the same way.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..batch_result import BatchResult
from ..errors import ParameterError
from . import _state

#: The filters of the overview (js/review.ts FILTERS).
FILTERS = ("all", "failed", "flagged")
#: Points drawn per small plot at most (beyond that the plot is thinned, outline kept).
POINTS_PER_CELL = 120
#: Samples of each group's fitted curve.
CURVE_SAMPLES = 48


def check_filter(value: object) -> str:
    """Validate a filter name."""
    if isinstance(value, str) and value in FILTERS:
        return value
    raise ParameterError(f"the review filter must be one of {list(FILTERS)}, got {value!r}.")


#: Sorting by status puts the work at the top: failed, then flagged, then ok.
STATUS_RANK = {"failed": 0, "flagged": 1, "ok": 2}


def check_sort(batch: BatchResult, key: object) -> str:
    """Validate a table column to sort by: ``"label"``, ``"status"`` or a number column."""
    allowed = ["label", "status", *columns(batch)]
    if isinstance(key, str) and key in allowed:
        return key
    raise ParameterError(f"the review table can be sorted by one of {allowed}, got {key!r}.")


def _label_key(label: str) -> tuple[tuple[int, int, str], ...]:
    # Runs of digits compare as numbers (well B2 before B10), letters without case.
    return tuple(
        (0, int(part), "") if part.isdigit() else (1, 0, part.casefold())
        for part in re.findall(r"\d+|\D+", label)
    )


def table_order(entries: Sequence[Mapping[str, Any]], key: str, ascending: bool) -> list[int]:
    """The groups' indices in the table's order, sorted by ``key``.

    Stable; a missing number (None: NaN or not fitted) comes last in both directions.
    """
    present: list[tuple[Any, int]] = []
    missing: list[int] = []
    for i, e in enumerate(entries):
        if key == "label":
            present.append((_label_key(str(e["label"])), i))
        elif key == "status":
            present.append((STATUS_RANK.get(str(e["status"]), len(STATUS_RANK)), i))
        else:
            v = e["values"].get(key)
            if v is None:
                missing.append(i)
            else:
                present.append((float(v), i))
    # Two stable passes keep ties in the batch's order whatever the direction.
    present.sort(key=lambda t: t[0], reverse=not ascending)
    return [i for _, i in present] + missing


def batch_x_scale(batch: BatchResult) -> _state.Scale:
    """One x scale for every group: the main plot's rule on all the batch's x together."""
    xs = [d.x for d in batch.datasets if d is not None]
    return _state.auto_x_scale(np.concatenate(xs) if xs else np.zeros(0))


def columns(batch: BatchResult) -> list[str]:
    """The table's number columns: the free parameters, then the derived quantities."""
    free = [n for n in batch.model.param_names if n not in batch.parameters.fixed]
    return [*free, *batch.derived_names]


def _num(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def group_entry(batch: BatchResult, i: int, x_scale: _state.Scale) -> dict[str, Any]:
    """Group ``i`` as the overview and the table show it."""
    ds = batch.datasets[i]
    x: list[float | None] = []
    y: list[float | None] = []
    cx: list[float | None] = []
    cy: list[float | None] = []
    if ds is not None:
        keep = _state.decimate_rows(ds.x, ds.y, ~ds.include, POINTS_PER_CELL, x_scale)
        if keep.size > ds.x.size or ds.x.size <= POINTS_PER_CELL:
            keep = np.arange(ds.x.size)
        x = [_num(v) for v in ds.x[keep]]
        y = [_num(v) for v in ds.y[keep]]
        row = batch.value_array[i]
        if batch.statuses[i] != "failed" and np.all(np.isfinite(row)):
            grid = _state.sample_x(ds.x, x_scale, CURVE_SAMPLES)
            values = dict(zip(batch.model.param_names, row.tolist(), strict=True))
            with np.errstate(all="ignore"):
                fy = np.asarray(batch.model.eval(grid, values), dtype=float)
            cx = [_num(v) for v in grid]
            cy = [_num(v) for v in fy]
    names = batch.model.param_names
    values_out: dict[str, float | None] = {}
    for c in columns(batch):
        if c in names:
            values_out[c] = _num(batch.value_array[i, names.index(c)])
        else:
            values_out[c] = _num(batch.derived_array[i, batch.derived_names.index(c), 0])
    return {
        "label": batch.labels[i],
        "status": batch.statuses[i],
        "reason": batch.reasons[i],
        "note": batch.notes[i],
        "edited": batch.edited[i],
        "x": x,
        "y": y,
        "cx": cx,
        "cy": cy,
        "values": values_out,
    }


def review_json(
    batch: BatchResult, x_scale: _state.Scale, entries: list[dict[str, Any]] | None = None
) -> dict[str, Any]:
    """The ``review_json`` trait; ``entries`` (the groups, if already built) are reused."""
    # A new list each time: a trait sees a change only when the new value differs from the old.
    groups = (
        list(entries)
        if entries is not None
        else [group_entry(batch, i, x_scale) for i in range(len(batch))]
    )
    return {
        "columns": columns(batch),
        "groups": groups,
        "log_x": x_scale == "log",
        "model": batch.model.name,
    }
