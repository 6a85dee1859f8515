"""Checking the arguments every figure takes: band kind, level, keyword options, an axes."""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from typing import Any, Literal

from matplotlib.axes import Axes

from ..errors import FigureError
from ..inference import check_level

__all__ = ["Bands", "check_axes", "check_bands", "check_level_of", "check_options"]

BandKind = Literal["confidence", "prediction"]
Bands = BandKind | tuple[BandKind, ...] | None
BAND_KINDS = ("confidence", "prediction")


def check_bands(bands: object) -> Bands:
    """``"confidence"``, ``"prediction"``, both as a tuple, or None; else a FigureError."""
    if bands is None or bands == "confidence" or bands == "prediction":
        return bands
    if isinstance(bands, (tuple, list)) and bands and all(b in BAND_KINDS for b in bands):
        return tuple(dict.fromkeys(bands))
    raise FigureError(
        f"bands must be 'confidence', 'prediction', both as a tuple, or None, got {bands!r}."
    )


def check_level_of(level: object) -> float:
    """A pointwise coverage in (0, 1) (the inference layer's one check, a ParameterError)."""
    return check_level(level)  # type: ignore[arg-type]  # check_level rejects non-numbers


def check_options(opts: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> dict[str, Any]:
    """``opts`` when every name is in ``allowed``; else a FigureError with a spelling hint."""
    for k in opts:
        if k not in allowed:
            close = difflib.get_close_matches(k, allowed, n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            raise FigureError(
                f"{where} has no option {k!r}; its options are {sorted(allowed)}.{hint}"
            )
    return dict(opts)


def check_axes(ax: object) -> Axes | None:
    """A matplotlib Axes (or None)."""
    if ax is None or isinstance(ax, Axes):
        return ax
    raise FigureError(f"ax must be a matplotlib Axes or None, got {type(ax).__name__}.")
