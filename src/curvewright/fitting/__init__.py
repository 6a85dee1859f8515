"""Fitting: the entry points that turn a request into a result.

The package's parts, in the order data flow through them: :mod:`.problem` validates the
request into a problem, :mod:`.engine` runs the solvers (the only place lmfit is imported),
:mod:`.assemble` computes the statistics and builds the result. :mod:`.single` is :func:`fit`;
:mod:`.global_fit` is :func:`fit_global`, several groups with shared and per-group parameters,
on the same engine; :mod:`.batch` is :func:`fit_groups`, every group on its own, through the
vectorised :mod:`.batch_engine` or :func:`fit` per group (:mod:`.batch_dask` on a cluster).
"""

from __future__ import annotations

from .batch import fit_groups
from .global_fit import fit_global
from .problem import point_weights, request_parameters, resolve_model
from .single import fit

__all__ = [
    "fit",
    "fit_global",
    "fit_groups",
    "point_weights",
    "request_parameters",
    "resolve_model",
]
