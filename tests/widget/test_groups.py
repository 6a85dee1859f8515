"""CurveBench with by=: the widget's group methods and state, checked against fit_global.

The plate data below are invented (a demo scenario with invented compound names). That is
enough here because every check compares the widget with the library called directly on the
same data and settings; fit_global itself is checked against outside references in
tests/test_global_fit.py.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import curvewright as cw
from curvewright import CurveBench, fit_global


@pytest.fixture
def plate() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    rows = []
    for name, ec in (("zeltarin", 1.0), ("mobrazine", 3.0), ("quillamide", 0.3)):
        for xv in np.logspace(-2, 2, 12):
            rows.append((name, xv, 10 + 90 / (1 + (xv / ec) ** 1.2) + rng.normal(0, 2)))
    return pd.DataFrame(rows, columns=["compound", "conc", "resp"])


def bench(df: pd.DataFrame) -> CurveBench:
    return CurveBench(df, x="conc", y="resp", by="compound", model="inhibition_4pl")


def test_groups_start_per_group_and_select(plate: pd.DataFrame) -> None:
    w = bench(plate)
    assert w.groups == ("mobrazine", "quillamide", "zeltarin")
    assert all(r.scope == "per_group" for r in w.parameters.values())
    w.select_group("zeltarin")
    assert w.values == pytest.approx(w.group_values.loc["zeltarin"].to_dict())
    with pytest.raises(cw.DataError, match="group"):
        w.select_group("nosuch")


def test_fit_matches_fit_global(plate: pd.DataFrame) -> None:
    w = bench(plate)
    w.set_scope("n_h", "shared")
    w.exclude([3])
    got = []
    w.on_fit(got.append)
    res = w.fit()
    assert isinstance(res, cw.GlobalResult) and w.result is res and got == [res]
    start = w.group_values  # after the fit: the fitted values; refit from the same records
    ref = fit_global(
        "inhibition_4pl",
        data=plate,
        x="conc",
        y="resp",
        by="compound",
        shared=["n_h"],
        exclude=[3],
    )
    assert res.shared == ("n_h",)
    np.testing.assert_allclose(res.values.to_numpy(), ref.values.to_numpy(), rtol=1e-6)
    np.testing.assert_allclose(start.to_numpy(), ref.values.to_numpy(), rtol=1e-6)


def test_excluded_group_left_out_of_the_fit(plate: pd.DataFrame) -> None:
    w = bench(plate)
    w.exclude_group("quillamide")
    w.hide_group("mobrazine")
    res = w.fit()
    assert res is not None and res.labels == ("mobrazine", "zeltarin")
    ref = fit_global(
        "inhibition_4pl",
        data=plate[plate.compound != "quillamide"],
        x="conc",
        y="resp",
        by="compound",
    )
    np.testing.assert_allclose(res.values.to_numpy(), ref.values.to_numpy(), rtol=1e-6)
    assert w.hidden_groups == ("mobrazine",)
    w.exclude_group("mobrazine")
    with pytest.raises(cw.DataError, match="no group to fit"):
        w.exclude_group("zeltarin")


def test_snapshot_round_trip_and_mismatch(plate: pd.DataFrame) -> None:
    w = bench(plate)
    w.set_scope("n_h", "shared")
    w.select_group("zeltarin")
    w.set_param("log_ic50", value=0.1)
    w.hide_group("mobrazine")
    snap = json.loads(json.dumps(w.snapshot()))
    assert snap["format"] == "curvewright.widget/4"
    w2 = bench(plate)
    w2.restore(snap)
    assert w2.selected_group == "zeltarin" and w2.hidden_groups == ("mobrazine",)
    assert w2.parameters["n_h"].scope == "shared"
    pd.testing.assert_frame_equal(w2.group_values, w.group_values)
    single = CurveBench(plate, x="conc", y="resp", model="inhibition_4pl")
    with pytest.raises(cw.DataError, match="holds groups"):
        single.restore(snap)
    assert single.snapshot()["groups"] is None


def test_bad_group_input_is_refused(plate: pd.DataFrame) -> None:
    with pytest.raises(cw.DataError, match="compund"):
        CurveBench(plate, x="conc", y="resp", by="compund", model="inhibition_4pl")
    bad = plate.copy()
    bad.loc[2, "compound"] = None
    with pytest.raises(cw.DataError, match="empty"):
        CurveBench(bad, x="conc", y="resp", by="compound", model="inhibition_4pl")
    with pytest.raises(cw.DataError, match="needs groups"):
        CurveBench(plate, x="conc", y="resp", model="inhibition_4pl").select_group("a")
    w = bench(plate)
    with pytest.raises(cw.ParameterError, match="scope"):
        w.set_scope("n_h", "everywhere")


def test_callable_model_curves_are_sampled_per_drawn_group(plate: pd.DataFrame) -> None:
    # A Python callable: the page cannot evaluate it, so groups_json carries every drawn
    # group's curve (all but the selected one, whose curve is preview_curve, and the hidden).
    def falling(x: np.ndarray, top: float = 100.0, k: float = 1.0) -> np.ndarray:
        return top / (1.0 + x / k)

    w = CurveBench(plate, x="conc", y="resp", by="compound", model=falling)
    w.hide_group("quillamide")
    gj = w.groups_json
    assert gj is not None and set(gj["curves"]) == {"zeltarin"}
    vals = w.group_values.loc["zeltarin"]
    c = gj["curves"]["zeltarin"]
    xs = np.asarray(c["x"], dtype=float)
    # The samples are the callable itself at the group's values (numpy, written out here).
    np.testing.assert_allclose(c["y"], vals["top"] / (1.0 + xs / vals["k"]), rtol=1e-12)
    assert bench(plate).groups_json["curves"] is None  # a formula's curves are drawn on the page
