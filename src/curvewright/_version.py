"""The package version, written only here: pyproject.toml reads it and package.json must match."""

from __future__ import annotations

__version__ = "0.1.0"
