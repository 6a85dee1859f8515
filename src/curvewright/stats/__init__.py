"""Judging fits: polynomial degree choice, information criteria and (later) model comparison."""

from __future__ import annotations

from curvewright.stats.information import aic, aicc, bic
from curvewright.stats.polynomial import (
    DegreeSelection,
    PolynomialFit,
    polynomial_fit,
    select_degree,
)

__all__ = [
    "DegreeSelection",
    "PolynomialFit",
    "aic",
    "aicc",
    "bic",
    "polynomial_fit",
    "select_degree",
]
