"""The figures draw the numbers they claim: curve = predict, band = confidence_band, residuals.

Fits are on real data (tests/data/r_datasets/SOURCES.md): R's DNase run 1 (ELISA, duplicate
wells at each concentration, 0.049 to 12.5 ng/ml, so more than two decades), ChickWeight chick
1 (weights from day 0: a real x = 0) and R's cars (speed against stopping distance: linear x).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure

import curvewright as cw
from curvewright.errors import FigureError

DATA = Path(__file__).resolve().parents[1] / "data" / "r_datasets"


def _dnase(**kw: object) -> cw.FitResult:
    d = pd.read_csv(DATA / "DNase.csv")
    return cw.fit("stimulation_3pl", data=d[d["Run"] == 1], x="conc", y="density", **kw)


def _by_gid(fig: Figure, gid: str, ax: int = 0) -> list[object]:
    a = fig.axes[ax]
    return [c for c in [*a.lines, *a.collections] if c.get_gid() == gid]


def test_curve_band_points_and_residuals_are_the_results_numbers() -> None:
    r = _dnase(exclude=[3])
    fig = r.plot(bands="confidence", level=0.9)
    (line,) = _by_gid(fig, "cw-curve")
    gx, gy = line.get_xdata(), line.get_ydata()
    np.testing.assert_allclose(gy, r.predict(gx), rtol=0, atol=0)
    # the band polygon's vertices are the band's numbers on the same grid
    (poly,) = _by_gid(fig, "cw-band")
    verts = poly.get_paths()[0].vertices
    cb = r.confidence_band(gx, 0.9)
    lo, hi = cb["lower"].to_numpy(), cb["upper"].to_numpy()
    for xv, lv, hv in zip(gx[::50], lo[::50], hi[::50], strict=True):
        at = verts[np.isclose(verts[:, 0], xv, rtol=1e-15)][:, 1]
        assert np.min(at) == pytest.approx(lv, rel=1e-12)
        assert np.max(at) == pytest.approx(hv, rel=1e-12)
    # the excluded row (input row 3) is in the hollow artist, not among the data
    (ex,) = _by_gid(fig, "cw-excluded")
    np.testing.assert_array_equal(ex.get_offsets(), [[r.dataset.x[3], r.dataset.y[3]]])
    (pts,) = _by_gid(fig, "cw-data")
    assert len(pts.get_offsets()) == r.n == 15
    # residual panel: y - predict(x) of the used points
    (res,) = _by_gid(fig, "cw-residuals", ax=1)
    off = np.asarray(res.get_offsets())
    np.testing.assert_allclose(off[:, 1], r.y - r.predict(r.x), rtol=0, atol=1e-15)
    # the fit's own residuals agree (the result's record, not recomputed by the figure)
    np.testing.assert_allclose(off[:, 1], r.residuals, atol=1e-12)


def test_replicate_mean_and_sd_where_x_repeats() -> None:
    r = _dnase()
    fig = r.plot(bands=None)
    bars = [c for c in fig.axes[0].containers if any(a.get_gid() == "cw-mean" for a in c)]
    (eb,) = bars
    mx, my = eb.lines[0].get_xdata(), eb.lines[0].get_ydata()
    d = pd.DataFrame({"x": r.x, "y": r.y}).groupby("x")["y"]
    np.testing.assert_allclose(mx, d.mean().index)  # 8 concentrations, duplicate wells
    np.testing.assert_allclose(my, d.mean().to_numpy())
    assert len(mx) == 8


def test_log_x_for_decades_linear_otherwise() -> None:
    assert _dnase().plot().axes[0].get_xscale() == "log"
    cars = pd.read_csv(DATA / "cars.csv")
    r = cw.fit("straight_line", data=cars, x="speed", y="dist")
    fig = r.plot()
    assert fig.axes[0].get_xscale() == "linear"
    assert fig.axes[1].get_xlabel() == "speed" and fig.axes[0].get_ylabel() == "dist"


def test_zero_dose_sits_at_a_marked_stand_in_left_of_the_data() -> None:
    c = pd.read_csv(DATA / "ChickWeight.csv")
    r = cw.fit("logistic_growth", data=c[c["Chick"] == 1], x="Time", y="weight")
    fig = r.plot(log_x=True)
    ax = fig.axes[0]
    off = np.asarray(_by_gid(fig, "cw-data")[0].get_offsets())
    zero_x = off[r.x == 0, 0]
    (z,) = set(zero_x.tolist())
    assert 0 < z < 2.0 / 10**0.6 + 1e-12  # at least 0.6 decade left of day 2
    np.testing.assert_array_equal(off[r.x > 0, 0], r.x[r.x > 0])
    assert len(_by_gid(fig, "cw-zero-break")) == 1
    labels = list(ax.xaxis.get_major_formatter().seq)
    assert labels[0] == "0" and ax.xaxis.get_major_locator().tick_values(0, 1)[0] == z
    (line,) = _by_gid(fig, "cw-curve")
    assert line.get_xdata().min() > z  # the curve never crosses the break
    with pytest.raises(cw.DataError, match="log_x=True needs positive x"):
        cw.fit("straight_line", x=[-1.0, 1, 2], y=[1.0, 2, 3]).plot(log_x=True)


def test_draw_into_given_axes_and_bad_options() -> None:
    r = _dnase()
    fig = Figure()
    ax = fig.add_subplot()
    assert r.plot(ax) is fig and len(fig.axes) == 1  # no residual panel unless asked
    with pytest.raises(FigureError, match="Did you mean 'xlabel'"):
        r.plot(xlable="conc")
    with pytest.raises(FigureError, match="bands must be"):
        r.plot(bands="both")
    with pytest.raises(FigureError, match="figure_for draws"):
        cw.figure_for(42)


def test_global_batch_and_forest() -> None:
    d = pd.read_csv(DATA / "DNase.csv")
    g = cw.fit_global(
        "stimulation_3pl", data=d[d["Run"] <= 3], x="conc", y="density", by="Run", shared=["n_h"]
    )
    fig = cw.figure_for(g)
    curves = _by_gid(fig, "cw-curve")
    assert [c.get_label() for c in curves] == ["1", "2", "3"]
    for c, grp in zip(curves, g.groups, strict=True):
        np.testing.assert_allclose(c.get_ydata(), grp.predict(c.get_xdata()), atol=0)
    b = cw.fit_groups("stimulation_3pl", data=d, x="conc", y="density", by="Run")
    grid = b.plot(groups=[1, 2, 3], ncols=2)
    assert len([a for a in grid.axes if a.get_title()]) == 3
    f = b.forest("ec50")
    a = f.axes[0]
    pts = np.asarray(
        next(c for c in a.collections if c.get_gid() == "cw-forest-points").get_offsets()
    )
    np.testing.assert_allclose(pts[:, 0], b.derived_array[:, 0, 0])
    with pytest.raises(FigureError, match="neither a parameter"):
        b.forest("ic50")
    with pytest.raises(FigureError, match="level"):
        b.forest("ec50", level=0.9)


def test_svg_is_deterministic() -> None:
    from curvewright.figures import figure_svg

    r = _dnase()
    assert figure_svg(r.plot()) == figure_svg(r.plot())


def test_widget_figure_is_the_screen_state() -> None:
    from curvewright import CurveBench

    d = pd.read_csv(DATA / "DNase.csv")
    w = CurveBench(d[d["Run"] == 1], x="conc", y="density", model="stimulation_3pl", exclude=[0])
    before = w.figure()  # no fit yet: the start curve, dashed, and the widget's log x
    (start,) = _by_gid(before, "cw-curve")
    assert start.get_linestyle() == "--" and before.axes[0].get_xscale() == "log"
    np.testing.assert_allclose(start.get_ydata(), w.model.eval(start.get_xdata(), w.values))
    res = w.fit()
    assert isinstance(res, cw.FitResult)
    w.show_confidence_band = True
    fig = w.figure()
    (line,) = _by_gid(fig, "cw-curve")
    np.testing.assert_allclose(line.get_ydata(), res.predict(line.get_xdata()), atol=0)
    assert len(_by_gid(fig, "cw-band")) == 1 and len(fig.axes) == 2  # residual strip on
    assert len(_by_gid(fig, "cw-excluded")[0].get_offsets()) == 1
    w.show_residuals = False
    w.x_scale = "linear"
    fig2 = w.figure()
    assert len(fig2.axes) == 1 and fig2.axes[0].get_xscale() == "linear"


def test_global_plot_of_some_groups_keeps_their_colours() -> None:
    d = pd.read_csv(DATA / "DNase.csv")
    g = cw.fit_global(
        "stimulation_3pl", data=d[d["Run"] <= 3], x="conc", y="density", by="Run", shared=["n_h"]
    )
    every = {c.get_label(): c.get_color() for c in _by_gid(g.plot(), "cw-curve")}
    some = _by_gid(g.plot(groups=["1", "3"]), "cw-curve")
    assert [c.get_label() for c in some] == ["1", "3"]
    assert [c.get_color() for c in some] == [every["1"], every["3"]]
    with pytest.raises(FigureError, match="no group '9'"):
        g.plot(groups=["9"])


def test_widget_figure_leaves_out_hidden_groups() -> None:
    from curvewright import CurveBench

    d = pd.read_csv(DATA / "DNase.csv")
    w = CurveBench(d[d["Run"] <= 3], x="conc", y="density", by="Run", model="stimulation_3pl")
    assert isinstance(w.fit(), cw.GlobalResult)
    w.hide_group("2")
    labels = [c.get_label() for c in _by_gid(w.figure(), "cw-curve")]
    assert labels == ["1", "3"]


def test_save_figure_to_a_missing_folder_gets_our_error(tmp_path: Path) -> None:
    from curvewright.figures import save_figure

    fig = _dnase().plot()
    with pytest.raises(cw.OutputError, match="does not exist"):
        save_figure(fig, tmp_path / "no-such-folder" / "f.svg")
    (tmp_path / "a.svg").mkdir()
    with pytest.raises(cw.OutputError, match="it is a folder"):
        save_figure(fig, tmp_path / "a.svg")
    out = save_figure(fig, tmp_path / "f.png", dpi=50)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
