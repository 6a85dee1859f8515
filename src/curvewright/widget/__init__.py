"""The notebook widget (anywidget): the only part of curvewright that imports traitlets/IPython."""

from __future__ import annotations

from ._widget import CurveBench, load_session

__all__ = ["CurveBench", "load_session"]
