"""The software versions a report names: curvewright, Python and the libraries behind a fit."""

from __future__ import annotations

import platform
from importlib import metadata

from .._version import __version__

__all__ = ["LIBRARIES", "software_versions"]

#: The libraries whose versions a report lists, in this order (those not installed are left out).
LIBRARIES = ("numpy", "scipy", "lmfit", "pandas", "matplotlib")


def software_versions() -> dict[str, str]:
    """Name -> version of curvewright, Python and each installed library of :data:`LIBRARIES`."""
    out = {"curvewright": __version__, "Python": platform.python_version()}
    for name in LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    return out
