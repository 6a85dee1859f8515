"""Writing a file the user named (report, spreadsheet, figure): checked, then written whole."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from .errors import OutputError

__all__ = ["output_path", "write_bytes"]


def output_path(path: Any, *, suffix: str | None = None) -> Path:
    """``path`` as a Path whose folder exists and is writable, or an OutputError saying why."""
    if not isinstance(path, (str, os.PathLike)):
        raise OutputError(f"path must be a file name (str or Path), got {type(path).__name__}.")
    p = Path(path).expanduser()
    if suffix is not None and p.suffix.lower() != suffix:
        raise OutputError(f"the file name must end in {suffix}, got {p.name!r}.")
    folder = p.parent
    if not folder.is_dir():
        raise OutputError(
            f"cannot write {p}: the folder {folder} does not exist; create it first or choose "
            "another path."
        )
    if p.is_dir():
        raise OutputError(f"cannot write {p}: it is a folder; give a file name.")
    if not os.access(folder, os.W_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise OutputError(f"cannot write {p}: no permission to write there; choose another path.")
    return p


def write_bytes(p: Path, data: bytes) -> Path:
    """Write ``data`` to ``p`` (made whole in memory first, so a failure leaves no half file)."""
    try:
        p.write_bytes(data)
    except OSError as exc:
        raise OutputError(f"cannot write {p}: {exc.strerror or exc}; choose another path.") from exc
    return p
