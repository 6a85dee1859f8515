"""Judging fits: polynomial degree, uncertainty, prediction, linearised fits, model comparison."""

from __future__ import annotations

from curvewright.numerics import aic, aicc, bic
from curvewright.stats.compare import Comparison, akaike_weights, compare, extra_ss_f_test
from curvewright.stats.groups import GroupComparison, SharedTest, compare_groups, shared_or_separate
from curvewright.stats.linearized import (
    TRANSFORMS,
    LinearizedFit,
    linearized_fit,
    linearized_fits,
)
from curvewright.stats.polynomial import (
    DegreeSelection,
    PolynomialFit,
    polynomial_fit,
    select_degree,
)
from curvewright.stats.uncertainty import (
    Correlation,
    confidence_band,
    correlation,
    derived_quantity,
    derived_table,
    inverse_predict,
    parameter_table,
    prediction_band,
    profile_intervals,
)

__all__ = [
    "TRANSFORMS",
    "Comparison",
    "Correlation",
    "DegreeSelection",
    "GroupComparison",
    "LinearizedFit",
    "PolynomialFit",
    "SharedTest",
    "aic",
    "aicc",
    "akaike_weights",
    "bic",
    "compare",
    "compare_groups",
    "confidence_band",
    "correlation",
    "derived_quantity",
    "derived_table",
    "extra_ss_f_test",
    "inverse_predict",
    "linearized_fit",
    "linearized_fits",
    "parameter_table",
    "polynomial_fit",
    "prediction_band",
    "profile_intervals",
    "select_degree",
    "shared_or_separate",
]
