"""The spreadsheet: a result's four tables as sheets of one .xlsx file (openpyxl, optional)."""

from __future__ import annotations

import importlib
import io
from pathlib import Path
from typing import Any

from ..errors import DependencyError
from ..output import output_path, write_bytes
from ..thresholds import CAUTION
from .tables import SHEETS, tables_for

__all__ = ["to_excel"]


def _require_openpyxl() -> None:
    try:
        # By name: the check is only that it imports (pandas does the writing).
        importlib.import_module("openpyxl")
    except ImportError:
        raise DependencyError(
            "writing Excel files needs the optional package openpyxl; install it with "
            'pip install "curvewright[excel]"'
        ) from None


def to_excel(obj: Any, path: Any, *, level: float = 0.95) -> Path:
    """Write the parameters, derived quantities, diagnostics and data of a result to .xlsx.

    Parameters
    ----------
    obj : FitResult, GlobalResult or BatchResult
    path : str or Path
        The file to write (ending in ``.xlsx``); its folder must exist.
    level : float
        Coverage of the intervals in the parameter and derived sheets (a batch uses its own).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    DependencyError
        openpyxl is not installed (``pip install "curvewright[excel]"``).
    OutputError
        The folder does not exist, is not writable, or the name does not end in ``.xlsx``.
    """
    _require_openpyxl()
    import pandas as pd

    p = output_path(path, suffix=".xlsx")
    tables = tables_for(obj, level=level)
    buf = io.BytesIO()
    with pd.ExcelWriter(buf, engine="openpyxl") as writer:
        for name in SHEETS:
            tables[name].to_excel(writer, sheet_name=name, index=False)
        # The caution travels with the numbers, in the file's own description.
        writer.book.properties.description = CAUTION
    return write_bytes(p, buf.getvalue())
