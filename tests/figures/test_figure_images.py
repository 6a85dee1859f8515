"""Image comparison against committed baselines made by this same code (tolerance, not bytes).

Regenerate with ``CURVEWRIGHT_UPDATE_BASELINES=1`` after a deliberate change of look; the
drawn-data checks (test_figures_drawn.py) are what prove the numbers. Data: R's DNase run 1
and ChickWeight chick 1 (tests/data/r_datasets/SOURCES.md). Fonts: DejaVu Sans, shipped with
matplotlib, so the images do not depend on the machine's fonts.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest
from matplotlib.figure import Figure
from matplotlib.testing.compare import compare_images

import curvewright as cw
from curvewright.figures import save_figure

HERE = Path(__file__).resolve().parent
DATA = HERE.parent / "data" / "r_datasets"
BASELINE = HERE / "baseline"
DPI = 72
TOL = 6.0  # RMS over 0-255 grey levels: freetype/antialiasing differences, not a changed plot


def _dnase_fit() -> Figure:
    d = pd.read_csv(DATA / "DNase.csv")
    r = cw.fit("stimulation_3pl", data=d[d["Run"] == 1], x="conc", y="density", exclude=[3])
    return r.plot(bands="confidence")


def _chick_zero() -> Figure:
    c = pd.read_csv(DATA / "ChickWeight.csv")
    r = cw.fit("logistic_growth", data=c[c["Chick"] == 1], x="Time", y="weight")
    return r.plot(log_x=True, bands="prediction")


def _dnase_global() -> Figure:
    d = pd.read_csv(DATA / "DNase.csv")
    g = cw.fit_global(
        "stimulation_3pl", data=d[d["Run"] <= 3], x="conc", y="density", by="Run", shared=["n_h"]
    )
    return g.plot()


CASES: dict[str, Callable[[], Figure]] = {
    "dnase_fit": _dnase_fit,
    "chick_zero_dose": _chick_zero,
    "dnase_global": _dnase_global,
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_figure_matches_its_baseline(name: str, tmp_path: Path) -> None:
    expected = BASELINE / f"{name}.png"
    fig = CASES[name]()
    if os.environ.get("CURVEWRIGHT_UPDATE_BASELINES") == "1":
        save_figure(fig, expected, dpi=DPI)
    actual = save_figure(fig, tmp_path / f"{name}.png", dpi=DPI)
    assert expected.is_file(), (
        f"no baseline {expected.name}; run with CURVEWRIGHT_UPDATE_BASELINES=1"
    )
    diff = compare_images(str(expected), str(actual), tol=TOL)
    assert diff is None, diff
