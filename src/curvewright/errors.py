"""The exception hierarchy: every error curvewright raises on purpose is one of these.

Each message says what is wrong and how to fix it. Classes subclass ``ValueError`` or
``TypeError`` where that is the apt built-in, so generic handlers keep working.
"""

from __future__ import annotations

__all__ = [
    "CurvewrightError",
    "DataError",
    "DependencyError",
    "DomainError",
    "FigureError",
    "FitError",
    "FormulaError",
    "HandleError",
    "ModelError",
    "ParameterError",
    "SessionError",
    "ComparisonError",
    "OutputError",
    "CurvewrightWarning",
    "ExtrapolationWarning",
    "RankDeficiencyWarning",
]


class CurvewrightError(Exception):
    """Base class of every error curvewright raises on purpose."""


class FormulaError(CurvewrightError, ValueError):
    """A formula cannot be parsed, uses a forbidden construct or an unknown name."""


class ModelError(CurvewrightError, TypeError):
    """A model is malformed: a callable that raises or returns the wrong shape, a bad handle."""


class DataError(CurvewrightError, ValueError):
    """The data cannot be fitted as given: lengths, non-finite values, columns, too few points."""


class DomainError(DataError):
    """Some x values lie outside the domain of the model (e.g. x <= 0 where it takes log x)."""


class ParameterError(CurvewrightError, ValueError):
    """Starting values, fixed values, bounds or links are inconsistent or unknown."""


class FitError(CurvewrightError, RuntimeError):
    """The fit cannot proceed, e.g. the residuals are not finite at the starting point."""


class HandleError(CurvewrightError, ValueError):
    """A drag cannot be solved as asked: unknown handle, a bad target or pin, no pins."""


class ComparisonError(CurvewrightError, ValueError):
    """Fits cannot be compared, e.g. they were made on different data or weights."""


class SessionError(DataError):
    """A saved session cannot be loaded: damaged, its data altered, a newer schema, no model."""


class OutputError(CurvewrightError, OSError):
    """A report or table cannot be written where asked: a missing folder, no permission."""


class FigureError(CurvewrightError, ValueError):
    """A figure cannot be drawn as asked: an unknown option or band kind, a bad axes."""


class DependencyError(CurvewrightError, ImportError):
    """An optional dependency a feature needs is not installed; the message says how to add it."""


class CurvewrightWarning(UserWarning):
    """Base class of curvewright's warnings."""


class ExtrapolationWarning(CurvewrightWarning):
    """A reported quantity lies outside the range of the data it was estimated from."""


class RankDeficiencyWarning(CurvewrightWarning):
    """A linear design is numerically rank-deficient; some coefficients are not determined."""
