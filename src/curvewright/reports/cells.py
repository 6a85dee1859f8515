"""How a report shows one cell: numbers to six significant digits, flags as yes/no."""

from __future__ import annotations

import math

from .content import Cell

__all__ = ["DIGITS", "cell_text"]

#: Significant digits of the numbers a report shows (the HTML keeps every digit as well, in
#: each number cell's ``data-value``).
DIGITS = 6


def cell_text(v: Cell) -> str:
    """The text of a cell: ``""`` for None, ``n/a`` for NaN, yes/no for flags."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "n/a"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return f"{v:.{DIGITS}g}"
    return v
