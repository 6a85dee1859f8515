"""The four tables of a result that a spreadsheet gets: parameters, derived, diagnostics, data."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..batch_result import BatchResult
from ..errors import CurvewrightError, ParameterError
from ..global_result import GlobalResult
from ..result import Diagnostic, FitResult

__all__ = ["SHEETS", "tables_for"]

#: The sheet names, in order.
SHEETS = ("parameters", "derived", "diagnostics", "data")

_FINDING_COLUMNS = ["kind", "code", "severity", "parameters", "statistic", "p_value", "text"]


def _findings(diagnostics: tuple[Diagnostic, ...]) -> list[dict[str, Any]]:
    return [
        {
            "kind": "finding",
            "code": d.code,
            "severity": d.severity,
            "parameters": ", ".join(d.params),
            "statistic": np.nan,
            "p_value": np.nan,
            "text": d.text,
        }
        for d in diagnostics
    ]


def _data(datasets: Any, fitted: Any) -> pd.DataFrame:
    """Every input row of each dataset: x, y, sigma, whether used, the curve there."""
    frames = []
    for k, d in enumerate(datasets):
        x = np.asarray(d.x, dtype=float)
        f = np.asarray(fitted(x), dtype=float)
        frames.append(
            pd.DataFrame(
                {
                    "dataset": k,
                    "row": np.asarray(d.row),
                    "x": x,
                    "y": np.asarray(d.y, dtype=float),
                    "sigma": np.nan if d.sigma is None else np.asarray(d.sigma, dtype=float),
                    "used": np.asarray(d.include, dtype=bool),
                    "fitted": f,
                    "residual": np.asarray(d.y, dtype=float) - f,
                }
            )
        )
    out: pd.DataFrame = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    return out


def _fit_tables(r: FitResult, level: float) -> dict[str, pd.DataFrame]:
    rows = _findings(r.diagnostics)
    try:
        tests = r.residual_diagnostics().tests
    except CurvewrightError:
        tests = pd.DataFrame(columns=["test", "statistic", "p_value", "note"])
    for _, t in tests.iterrows():
        rows.append(
            {
                "kind": "test",
                "code": str(t["test"]),
                "severity": "",
                "parameters": "",
                "statistic": float(t["statistic"]),
                "p_value": float(t["p_value"]),
                "text": str(t["note"]),
            }
        )
    return {
        "parameters": r.to_frame(level).reset_index(),
        "derived": r.derived(level).reset_index(),
        "diagnostics": pd.DataFrame(rows, columns=_FINDING_COLUMNS),
        "data": _data(r.datasets, r.predict),
    }


def _global_tables(g: GlobalResult, level: float) -> dict[str, pd.DataFrame]:
    derived = [
        gf.derived(level).reset_index().assign(group=lab)
        for lab, gf in zip(g.labels, g.groups, strict=True)
    ]
    data = [
        _data(gf.datasets, gf.predict).assign(group=lab)
        for lab, gf in zip(g.labels, g.groups, strict=True)
    ]
    return {
        "parameters": g.to_frame(level),
        "derived": _group_first(pd.concat(derived, ignore_index=True)),
        "diagnostics": pd.DataFrame(_findings(g.diagnostics), columns=_FINDING_COLUMNS),
        "data": _group_first(pd.concat(data, ignore_index=True)),
    }


def _group_first(df: pd.DataFrame) -> pd.DataFrame:
    out: pd.DataFrame = df[["group", *[c for c in df.columns if c != "group"]]]
    return out


def _batch_tables(b: BatchResult) -> dict[str, pd.DataFrame]:
    prow = [
        {
            "group": b.labels[i],
            "parameter": n,
            "value": b.value_array[i, j],
            "stderr": b.stderr_array[i, j],
            "lower": b.lower_array[i, j],
            "upper": b.upper_array[i, j],
            "fixed": n in b.parameters.fixed,
        }
        for i in range(len(b))
        for j, n in enumerate(b.model.param_names)
    ]
    drow = [
        {
            "group": b.labels[i],
            "quantity": q,
            "value": b.derived_array[i, k, 0],
            "stderr": b.derived_array[i, k, 1],
            "lower": b.derived_array[i, k, 2],
            "upper": b.derived_array[i, k, 3],
        }
        for i in range(len(b))
        for k, q in enumerate(b.derived_names)
    ]
    diag = pd.DataFrame(
        {
            "group": list(b.labels),
            "status": list(b.statuses),
            "reason": list(b.reasons),
            "flags": [", ".join(f) for f in b.flags],
            "path": list(b.paths),
            "n": np.array(b.n_used),
            "n_dropped": np.array(b.n_dropped),
            "ssr": np.array(b.ssr_array),
            "edited": list(b.edited),
            "note": list(b.notes),
        }
    )
    data = []
    names = b.model.param_names
    for i, d in enumerate(b.datasets):
        if d is None:
            continue
        values = dict(zip(names, b.value_array[i].tolist(), strict=True))
        failed = b.statuses[i] == "failed"

        def curve(x: Any, values: dict[str, float] = values, failed: bool = failed) -> Any:
            return np.full(np.shape(x), np.nan) if failed else b.model.eval(x, values)

        data.append(_data([d], curve).drop(columns="dataset").assign(group=b.labels[i]))
    return {
        "parameters": pd.DataFrame(
            prow, columns=["group", "parameter", "value", "stderr", "lower", "upper", "fixed"]
        ),
        "derived": pd.DataFrame(
            drow, columns=["group", "quantity", "value", "stderr", "lower", "upper"]
        ),
        "diagnostics": diag,
        "data": _group_first(pd.concat(data, ignore_index=True)) if data else pd.DataFrame(),
    }


def tables_for(obj: Any, *, level: float = 0.95) -> dict[str, pd.DataFrame]:
    """The four tables (:data:`SHEETS`) of a FitResult, GlobalResult or BatchResult."""
    if isinstance(obj, FitResult):
        return _fit_tables(obj, level)
    if isinstance(obj, GlobalResult):
        return _global_tables(obj, level)
    if isinstance(obj, BatchResult):
        return _batch_tables(obj)
    raise ParameterError(
        f"tables are made from a FitResult, GlobalResult or BatchResult, got {type(obj).__name__}."
    )
