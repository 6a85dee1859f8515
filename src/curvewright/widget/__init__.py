"""The notebook widget (anywidget): the only part of curvewright that imports traitlets/IPython."""

from __future__ import annotations

from ._widget import CurveBench

__all__ = ["CurveBench"]
