"""Writing figures to files and text: deterministic SVG and PDF, PNG at a chosen dpi."""

from __future__ import annotations

import io
import os
from pathlib import Path

import matplotlib
from matplotlib.figure import Figure

from ..errors import FigureError
from ..output import output_path, write_bytes

__all__ = ["DEFAULT_DPI", "figure_svg", "save_figure"]

#: Raster resolution of PNG output by default (dots per inch); 300 is common practice for print.
DEFAULT_DPI = 300
#: A fixed salt for the SVG element ids, so the same figure gives the same file every time.
SVG_SALT = "curvewright"
FORMATS = ("svg", "pdf", "png")


def _metadata(fmt: str) -> dict[str, str | None]:
    # No creation date (and, for PDF, none at all) so the bytes depend on the figure alone.
    if fmt == "svg":
        return {"Date": None}
    if fmt == "pdf":
        return {"CreationDate": None, "ModDate": None}
    return {}


def save_figure(fig: Figure, path: str | Path, *, dpi: float = DEFAULT_DPI) -> Path:
    """Save ``fig`` as SVG, PDF or PNG (by the file's suffix); SVG and PDF are deterministic.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or Path
        Ends in ``.svg``, ``.pdf`` or ``.png``.
    dpi : float
        Resolution of PNG output (and of any raster part of a vector file).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    FigureError
        Another suffix, or a dpi that is not positive.
    OutputError
        The folder does not exist, the path is a folder, or it cannot be written.
    """
    p = Path(path) if isinstance(path, (str, os.PathLike)) else output_path(path)
    fmt = p.suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        raise FigureError(f"save_figure writes {list(FORMATS)} files, got {p.name!r}.")
    if isinstance(dpi, bool) or not isinstance(dpi, (int, float)) or not dpi > 0:
        raise FigureError(f"dpi must be a positive number (e.g. 300), got {dpi!r}.")
    # svg.hashsalt is only read from rcParams; the context restores it at once.
    p = output_path(p)  # a missing folder or no permission: our own OutputError
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": SVG_SALT}):
        fig.savefig(buf, format=fmt, dpi=dpi, metadata=_metadata(fmt))
    return write_bytes(p, buf.getvalue())  # whole, so a failed write leaves no half file


def figure_svg(fig: Figure) -> str:
    """The figure as SVG text (deterministic), e.g. to embed in an HTML report."""
    buf = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": SVG_SALT}):
        fig.savefig(buf, format="svg", metadata=_metadata("svg"))
    return buf.getvalue()
