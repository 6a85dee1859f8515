"""curvewright: guided nonlinear model fitting for notebooks.

The headless library (models, guided starting values, fitting, results, statistics) is imported
here; the notebook widget is imported lazily on first use (``curvewright.CurveBench``) so that
scripts never load traitlets or IPython.
"""

from __future__ import annotations

from typing import Any

from . import figures  # registers the drawing behind the results' plot methods
from ._version import __version__
from .batch_result import BatchResult, register_review
from .catalog import catalog, polynomial
from .data import Dataset, make_dataset
from .errors import (
    ComparisonError,
    CurvewrightError,
    CurvewrightWarning,
    DataError,
    DependencyError,
    DomainError,
    ExtrapolationWarning,
    FigureError,
    FitError,
    FormulaError,
    HandleError,
    ModelError,
    OutputError,
    ParameterError,
    RankDeficiencyWarning,
    SessionError,
)
from .figures import figure_for
from .fitting import fit, fit_global, fit_groups
from .global_result import GlobalResult, GroupFit
from .handles import move_handle, pin_through
from .models import Derived, Handle, Model, Param
from .parameters import Parameter, Parameters
from .reports import Report
from .result import FitResult
from .start import generic_start, guided_start
from .stats import (
    Comparison,
    LinearizedFit,
    compare,
    inverse_predict,
    linearized_fit,
    linearized_fits,
    polynomial_fit,
    profile_intervals,
    select_degree,
)
from .stats.diagnostics import residual_diagnostics
from .thresholds import CAUTION

__all__ = [
    "BatchResult",
    "fit_groups",
    "GlobalResult",
    "GroupFit",
    "fit_global",
    "CAUTION",
    "Comparison",
    "ComparisonError",
    "CurveBench",
    "CurvewrightError",
    "CurvewrightWarning",
    "DataError",
    "DependencyError",
    "Dataset",
    "Derived",
    "DomainError",
    "ExtrapolationWarning",
    "FigureError",
    "FitError",
    "FitResult",
    "FormulaError",
    "HandleError",
    "Handle",
    "LinearizedFit",
    "Model",
    "ModelError",
    "OutputError",
    "Param",
    "Parameter",
    "ParameterError",
    "SessionError",
    "load_session",
    "Parameters",
    "RankDeficiencyWarning",
    "Report",
    "__version__",
    "catalog",
    "compare",
    "figure_for",
    "figures",
    "fit",
    "generic_start",
    "guided_start",
    "inverse_predict",
    "linearized_fit",
    "linearized_fits",
    "make_dataset",
    "move_handle",
    "pin_through",
    "polynomial",
    "polynomial_fit",
    "profile_intervals",
    "residual_diagnostics",
    "select_degree",
]


def _open_review(batch: BatchResult, **kwargs: Any) -> Any:
    # BatchResult.review(): the widget is loaded on first use, as for CurveBench.
    from .widget import CurveBench

    return CurveBench(batch, **kwargs)


register_review(_open_review)


def __getattr__(name: str) -> Any:
    # The widget layer pulls in anywidget/traitlets; load it only when asked for.
    if name == "CurveBench":
        from .widget import CurveBench

        return CurveBench
    if name == "load_session":
        from .widget import load_session

        return load_session
    raise AttributeError(f"module 'curvewright' has no attribute {name!r}")
