"""The Report: report text (HTML or Markdown) as a ``str`` that a notebook shows and can save."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..output import output_path, write_bytes

__all__ = ["Report"]


class Report(str):
    """A report's text; a ``str``, shown rendered in a notebook.

    Attributes
    ----------
    kind : {"html", "markdown"}
        The report's format (``str.format`` keeps its meaning).
    path : Path or None
        Where it was written, when a path was given.
    """

    kind: str
    path: Path | None
    _fragment: str

    def __new__(cls, text: str, kind: str, fragment: str | None = None) -> Report:  # noqa: D102
        out = super().__new__(cls, text)
        out.kind = kind
        out.path = None
        out._fragment = text if fragment is None else fragment
        return out

    def _repr_html_(self) -> str | None:
        return self._fragment if self.kind == "html" else None

    def _repr_markdown_(self) -> str | None:
        return str(self) if self.kind == "markdown" else None

    def save(self, path: Any) -> Path:
        """Write the report to ``path`` (UTF-8); the folder must exist.

        Raises
        ------
        OutputError
            The folder does not exist or cannot be written.
        """
        p = write_bytes(output_path(path), str(self).encode("utf-8"))
        self.path = p
        return p
