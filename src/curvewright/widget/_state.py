"""Convert between the library's objects and the JSON the widget syncs with the front end.

Pure functions (no traitlets): parameter records <-> the ``params`` trait (the record's own JSON
and validation, curvewright.parameters),
a dataset -> the ``data`` trait (decimated beyond a point budget), a fit result -> ``fitted``
and its confidence/prediction bands, a polynomial degree selection -> its table, curves sampled
for the front end.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..data import SCALES, Dataset, Scale, auto_x_scale, check_scale, sample_x
from ..errors import CurvewrightError, DataError, ParameterError
from ..models import Model
from ..parameters import Parameters
from ..result import FitResult
from ..stats.polynomial import DegreeSelection
from ..thresholds import CAUTION

__all__ = [
    "BAND_LEVEL",
    "CURVE_SAMPLES",
    "MAX_POINTS",
    "Scale",
    "auto_x_scale",
    "band_grid",
    "bands_json",
    "SCALES",
    "check_flag",
    "check_scale",
    "curve_json",
    "data_view",
    "decimate_rows",
    "degree_json",
    "fitted_json",
    "params_json",
    "parse_params",
    "sample_x",
    "start_parameters",
]


# The front end is sent every point up to this many; beyond it a thinned view that keeps the
# cloud's shape (the fit in Python always uses every point). 20k circles still draw smoothly.
MAX_POINTS = 20_000

# Samples of the fitted curve (and its bands) across the data, evenly spaced on the x axis.
CURVE_SAMPLES = 400

# Pointwise coverage of the bands the widget draws (common practice: 95%).
BAND_LEVEL = 0.95


def parse_params(model: Model, raw: object) -> Parameters:
    """Read a ``params`` trait value (as the page sends it) into checked records.

    The trait is :meth:`Parameters.to_json`'s list of records (``js/params.ts``); every
    parameter of the model must be present, and no other name. The checks are the record's
    own (:meth:`Parameters.from_json`, then :meth:`Parameters.validated`, the one validator).
    """
    if not isinstance(raw, (list, tuple)):
        raise ParameterError(
            "params must be a list of parameter records (name, value, lower, upper, fixed, "
            f"link, scope), got {type(raw).__name__}."
        )
    return Parameters.from_json(raw).validated(model)


def params_json(records: Parameters) -> list[dict[str, Any]]:
    """The ``params`` trait value: the records' JSON (``null`` bounds for none)."""
    return records.to_json()


def start_parameters(
    model: Model, values: Mapping[str, float] | None = None
) -> tuple[Parameters, tuple[str, ...]]:
    """Records for a model shown with these starting values: its bounds, nothing fixed.

    A value that is not finite falls back to the model's default. A start outside the model's
    bounds (a guess rule overshooting) is moved inside by the one rule
    (:meth:`Parameters.inside_bounds`), and the returned notes say so, for the page to show.
    """
    given = {k: float(v) for k, v in (values or {}).items() if math.isfinite(float(v))}
    records, moved = Parameters.for_model(model, given).inside_bounds()
    return records, tuple(m.text for m in moved)


# ------------------------------------------------------------------------------ axes
def check_flag(value: object, which: str) -> bool:
    """Validate an on/off display setting (a band or the residual strip shown or not)."""
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    raise DataError(f"{which} must be True or False, got {value!r}.")


# --------------------------------------------------------------------------- decimation
def _axis(v: NDArray[np.float64], scale: Scale) -> NDArray[np.float64]:
    if scale == "linear":
        return v
    with np.errstate(all="ignore"):
        return np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)


def decimate_rows(
    x: NDArray[np.float64],
    y: NDArray[np.float64],
    keep: NDArray[np.bool_],
    budget: int,
    x_scale: Scale = "linear",
    y_scale: Scale = "linear",
) -> NDArray[np.int64]:
    """Positions of a subset of points, at most about ``budget``, that looks like all of them.

    The plot area (in axis units) is cut into a grid of about ``budget`` cells; the first point
    in each occupied cell is kept, plus the lowest and highest point of each grid column, so the
    cloud's interior density is shown and its outline and outliers are never lost. Points with
    ``keep`` true (the excluded ones, which the user must see and be able to re-include) and
    points that cannot be placed on the axes are always kept.
    """
    n = x.size
    ax, ay = _axis(x, x_scale), _axis(y, y_scale)
    ok = np.isfinite(ax) & np.isfinite(ay)
    must = keep | ~ok
    idx = np.flatnonzero(ok & ~keep)
    if idx.size == 0:
        return np.flatnonzero(must).astype(np.int64)
    # Column extremes take up to 2 points per column; leave them a tenth of the budget.
    cols = max(1, int(math.sqrt(budget * 0.9 * 1.6)))  # a wider-than-tall plot
    rows = max(1, int(budget * 0.9 / cols))
    xs, ys = ax[idx], ay[idx]

    def cell(v: NDArray[np.float64], k: int) -> NDArray[np.int64]:
        lo, hi = float(v.min()), float(v.max())
        span = hi - lo if hi > lo else 1.0
        return np.minimum(((v - lo) / span * k).astype(np.int64), k - 1)

    cx, cy = cell(xs, cols), cell(ys, rows)
    flat = cx * rows + cy
    _, first = np.unique(flat, return_index=True)
    order = np.lexsort((ys, cx))  # by column, then y within a column
    col_sorted = cx[order]
    starts = np.flatnonzero(np.r_[True, col_sorted[1:] != col_sorted[:-1]])
    ends = np.r_[starts[1:], col_sorted.size] - 1
    chosen = np.zeros(n, dtype=bool)
    chosen[idx[first]] = True
    chosen[idx[order[starts]]] = True
    chosen[idx[order[ends]]] = True
    chosen |= must
    return np.flatnonzero(chosen).astype(np.int64)


def _list(a: NDArray[Any]) -> list[Any]:
    return [None if isinstance(v, float) and not math.isfinite(v) else v for v in a.tolist()]


def data_view(
    ds: Dataset,
    excluded: Sequence[int],
    x_scale: Scale,
    y_scale: Scale,
    model: Model | None = None,
    budget: int = MAX_POINTS,
) -> dict[str, Any]:
    """The ``data`` trait: the points to draw and which input rows they are.

    ``off_axis`` lists input rows that cannot be drawn on the current axes (x <= 0 on a log x
    axis, y <= 0 on a log y axis) and ``outside_domain`` those outside the model's domain, so the
    front end can list them instead of silently dropping them.
    """
    ex_rows = np.asarray(sorted(set(excluded)), dtype=np.int64)
    is_ex = np.isin(ds.row, ex_rows)
    n = ds.x.size
    if n > budget:
        pos = decimate_rows(ds.x, ds.y, is_ex, budget, x_scale, y_scale)
    else:
        pos = np.arange(n, dtype=np.int64)
    off = np.zeros(n, dtype=bool)
    if x_scale == "log":
        off |= ds.x <= 0
    if y_scale == "log":
        off |= ds.y <= 0
    outside = np.zeros(n, dtype=bool)
    if model is not None and model.domain != "all":
        outside = ds.x <= 0 if model.domain == "x>0" else ds.x < 0
    return {
        "x": _list(ds.x[pos]),
        "y": _list(ds.y[pos]),
        "row": ds.row[pos].tolist(),
        "sigma": None if ds.sigma is None else _list(ds.sigma[pos]),
        "excluded": ex_rows.tolist(),
        "x_label": ds.x_label,
        "y_label": ds.y_label,
        "n_total": int(n),
        "n_input": int(ds.n_input),
        "decimated": bool(pos.size < n),
        "off_axis": ds.row[off].tolist(),
        "outside_domain": ds.row[outside].tolist(),
    }


def check_rows(ds: Dataset, rows: object, what: str) -> list[int]:
    """Validate input-row indices (``exclude``/``include`` arguments, the ``excluded`` trait).

    ``None`` means no rows. Returns the rows sorted, each once.
    """
    if rows is None:
        return []
    if isinstance(rows, (int, np.integer)) and not isinstance(rows, bool):
        rows = [rows]
    arr = np.asarray(rows)
    if arr.size == 0:
        return []
    if arr.dtype == bool:
        if arr.shape != (ds.n_input,):
            raise DataError(
                f"{what} as a boolean mask must have one entry per input row ({ds.n_input}), "
                f"got shape {arr.shape}."
            )
        arr = np.flatnonzero(arr)
    elif arr.dtype.kind not in "iu":
        raise DataError(f"{what} must be input-row indices (integers), got {rows!r}.")
    arr = arr.ravel()
    bad = arr[(arr < 0) | (arr >= ds.n_input)]
    if bad.size:
        raise DataError(
            f"{what} names rows {bad[:5].tolist()} outside 0..{ds.n_input - 1}; "
            "use indices of the input rows."
        )
    dropped = np.setdiff1d(arr, ds.row)
    if dropped.size:
        raise DataError(
            f"{what} names rows {dropped[:5].tolist()} that were dropped for missing (NaN) "
            "values; they are not in the data."
        )
    return sorted({int(v) for v in arr})


# ------------------------------------------------------------------------- curves and fits
def curve_json(
    model: Model, values: Mapping[str, float], xs: NDArray[np.float64]
) -> dict[str, Any]:
    """``{"x": [...], "y": [...]}`` of the model at ``xs`` (non-finite y as ``null``).

    Used for models the front end cannot evaluate itself (Python callables) and for earlier
    fits of other models drawn for comparison.
    """
    with np.errstate(all="ignore"):
        ys = model.eval(xs, dict(values))
    return {"x": _list(xs), "y": _list(np.asarray(ys, dtype=float))}


def _opt(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def fitted_json(
    result: FitResult,
    view: Mapping[str, Any],
    x_scale: Scale,
    level: float = 0.95,
) -> dict[str, Any]:
    """The ``fitted`` trait for a fit result and the current ``data`` view.

    Residuals are given for every drawn point (excluded ones too, so the residual strip can
    show them in their own style); flags per parameter say fixed / at a bound / not identified;
    derived quantities carry an ``extrapolated`` flag when they lie outside the data's x range.
    """
    frame = result.to_frame(level)
    names = list(result.model.param_names)
    flags: dict[str, list[str]] = {}
    for n in names:
        row = frame.loc[n]
        f: list[str] = []
        if bool(row["fixed"]):
            f.append("fixed")
        if bool(row["at_lower"]):
            f.append("at_lower")
        if bool(row["at_upper"]):
            f.append("at_upper")
        if bool(row["not_identified"]) or (
            not bool(row["fixed"]) and not math.isfinite(float(row["stderr"]))
        ):
            f.append("not_identified")
        flags[n] = f
    vx = np.asarray([math.nan if v is None else v for v in view.get("x", [])], dtype=float)
    vy = np.asarray([math.nan if v is None else v for v in view.get("y", [])], dtype=float)
    with np.errstate(all="ignore"):
        resid = vy - result.predict(vx) if vx.size else np.zeros(0)
    derived: list[dict[str, Any]] = []
    if result.model.derived:
        table = result.derived(level)
        for name, row in table.iterrows():
            derived.append(
                {
                    "name": str(name),
                    "value": _opt(float(row["value"])),
                    "stderr": _opt(float(row["stderr"])),
                    "lower": _opt(float(row["lower"])),
                    "upper": _opt(float(row["upper"])),
                    "unit": str(row["unit"] or ""),
                    "extrapolated": row["in_data_range"] is False,
                }
            )
    xs = band_grid(result, x_scale)

    def column(col: str) -> dict[str, float | None]:
        arr = frame[col].to_numpy(dtype=float)  # rows in model order
        return {n: _opt(float(v)) for n, v in zip(names, arr, strict=True)}

    return {
        "model_name": result.model.name,
        "values": {n: float(result.values[n]) for n in names},
        "stderr": column("stderr"),
        "ci_low": column("ci_low"),
        "ci_high": column("ci_high"),
        "flags": flags,
        "ci_level": level,
        "curve": curve_json(result.model, result.values, xs),
        "residuals": _list(np.asarray(resid, dtype=float)),
        "derived": derived,
        "success": bool(result.success),
        "code": result.code,
        "message": result.message,
        "stats": {
            "n": int(result.n),
            "dof": int(result.dof),
            "ssr": _opt(result.ssr),
            "r2": _opt(result.r2),
            "aicc": _opt(result.aicc),
            "sigma_resid": _opt(result.sigma_resid),
            "evaluations": int(result.evaluations),
        },
        "excluded": [int(r) for d in result.datasets for r in d.excluded_rows],
        "diagnostics": [d.to_dict() for d in result.diagnostics if d.severity != "info"],
        "caution": CAUTION,
    }


# ------------------------------------------------------------------------------ bands
def band_grid(result: FitResult, x_scale: Scale) -> NDArray[np.float64]:
    """The x grid the fitted curve and its bands are sampled on (decades on a log x axis)."""
    return sample_x(result.dataset.x, x_scale, CURVE_SAMPLES)


def bands_json(
    result: FitResult,
    x_scale: Scale,
    *,
    confidence: bool,
    prediction: bool,
    level: float = BAND_LEVEL,
) -> dict[str, Any] | None:
    """The ``bands`` trait: the fit's confidence and/or prediction band on :func:`band_grid`.

    ``None`` when neither band is asked for. A band that cannot be computed (a fit that did not
    converge, a robust loss, no residual degrees of freedom) is ``null`` and ``note`` says why,
    so the page can say it instead of drawing nothing silently. Non-finite bounds (a parameter
    the data do not determine) are ``null``; the page breaks the area there.
    """
    if not (confidence or prediction):
        return None
    xs = band_grid(result, x_scale)
    out: dict[str, Any] = {
        "model_name": result.model.name,
        "level": level,
        "x": _list(xs),
        "confidence": None,
        "prediction": None,
        "note": "",
    }
    if not result.success:
        out["note"] = "No bands: the fit did not converge."
        return out
    try:
        if confidence:
            cb = result.confidence_band(xs, level)
            out["confidence"] = {
                "lower": _list(cb["lower"].to_numpy(dtype=float)),
                "upper": _list(cb["upper"].to_numpy(dtype=float)),
            }
        if prediction:
            pb = result.prediction_band(xs, level)
            out["prediction"] = {
                "lower": _list(pb["lower"].to_numpy(dtype=float)),
                "upper": _list(pb["upper"].to_numpy(dtype=float)),
            }
    except CurvewrightError as exc:
        out["confidence"] = out["prediction"] = None
        out["note"] = f"No bands: {exc}"
    return out


# --------------------------------------------------------------------- polynomial degree
def degree_json(
    selection: DegreeSelection, current: int, weighting: str, warnings: Sequence[str] = ()
) -> dict[str, Any]:
    """The ``degree_table_json`` trait: :func:`~curvewright.select_degree`'s table for the page.

    One row per degree 1..max_degree with the F test of its added term against the degree
    below, AICc, BIC, R² and adjusted R²; the suggested degree, its reasoning, the degree of
    the model shown (``current``) and the weighting used.
    """
    rows = []
    for degree, row in selection.table.iterrows():
        rows.append(
            {
                "degree": int(str(degree)),
                "F": _opt(float(row["F"])),
                "df_num": int(row["df_num"]),
                "df_den": int(row["df_den"]),
                "p": _opt(float(row["p"])),
                "aicc": _opt(float(row["aicc"])),
                "bic": _opt(float(row["bic"])),
                "r2": _opt(float(row["r2"])),
                "r2_adj": _opt(float(row["r2_adj"])),
                "ssr": _opt(float(row["ssr"])),
            }
        )
    return {
        "current": int(current),
        "suggested": int(selection.suggested),
        "alpha": float(selection.alpha),
        "max_degree": int(max(selection.fits)),
        "n": int(selection.fits[0].n),
        "weighting": weighting,
        "reasoning": selection.reasoning,
        "rows": rows,
        "warnings": list(warnings),
    }
