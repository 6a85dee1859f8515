"""Fitting: the entry points that turn a request into a result.

The package's parts, in the order data flow through them: :mod:`.problem` validates the
request into a problem, :mod:`.engine` runs the solvers (the only place lmfit is imported),
:mod:`.assemble` computes the statistics and builds the result. :mod:`.single` is :func:`fit`;
:mod:`.global_fit` is :func:`fit_global`, several groups with shared and per-group parameters,
on the same engine.
"""

from __future__ import annotations

from .global_fit import fit_global
from .problem import point_weights, request_parameters, resolve_model
from .single import fit

__all__ = ["fit", "fit_global", "point_weights", "request_parameters", "resolve_model"]
