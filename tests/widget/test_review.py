"""Review of a batch in the widget: CurveBench(batch) / batch.review(), the review_json trait,
review_filter / review_open / review_accept, and BatchResult.replace_fit.

The plate below is invented (demo-style data: seeded 4PL curves of made-up wells, one started
far from its data so the batch fails it, one with a constant response, one with an unreadable
reading). The checks compare against outside references: the four-parameter logistic written
out here by hand (common practice: bottom + (top - bottom) / (1 + (x / IC50)^h)) for the sampled
curves, scipy.optimize.curve_fit (MINPACK) on the group's points for an accepted refit, and the
batch's own rule for a status (fit_groups run on that group alone from the refit's start).
Nothing is timed.
"""

from __future__ import annotations

import json
import math
import pickle
from typing import Any

import numpy as np
import pandas as pd
import pytest
import scipy.optimize

import curvewright as cw
from curvewright import BatchResult, CurveBench
from curvewright.widget import _review

CONC = np.repeat(np.logspace(-9, -4, 8), 3)
TRUE = {"zero_dose": 100.0, "full_effect": 5.0, "n_h": 1.2}
GOOD_START = {"zero_dose": 100.0, "full_effect": 5.0, "log_ic50": -6.3, "n_h": 1.0}


def logistic4(x: np.ndarray, zero: float, full: float, log_ic50: float, h: float) -> np.ndarray:
    # Written out independently of the catalog (common practice form of the 4PL).
    out: np.ndarray = full + (zero - full) / (1.0 + (x / 10.0**log_ic50) ** h)
    return out


def _plate() -> pd.DataFrame:
    rows: list[dict[str, Any]] = []
    for k in range(6):
        rng = np.random.default_rng(k)
        # W5's doses stop before its curve reaches the bottom plateau (IC50 above the top
        # dose): the data cannot place full_effect, so no start makes the fit identifiable
        # until a person fixes the plateau at the assay's known bottom.
        mid = -3.5 if k == 5 else -6.5 + 0.1 * k
        y = logistic4(CONC, 100.0, 5.0, mid, 1.2) + rng.normal(0, 2.0, CONC.size)
        rows += [{"well": f"W{k}", "conc": c, "resp": v} for c, v in zip(CONC, y, strict=True)]
    rows += [{"well": "W6", "conc": c, "resp": 50.0} for c in CONC]  # a constant response
    bad = [{"well": "W7", "conc": c, "resp": 40.0 + i} for i, c in enumerate(CONC)]
    bad[3]["resp"] = "overflow"  # an unreadable reading: the group has no data
    rows += bad
    return pd.DataFrame(rows)


def _batch() -> BatchResult:
    df = _plate()
    labels = sorted(df["well"].unique())
    start = pd.DataFrame(
        {
            "zero_dose": 100.0,
            "full_effect": 5.0,
            # W5 also starts far off (a steep step at the left edge).
            "log_ic50": [-8.8 if g == "W5" else -6.5 for g in labels],
            "n_h": [40.0 if g == "W5" else 1.2 for g in labels],
        },
        index=labels,
    )
    return cw.fit_groups(
        "inhibition_4pl", data=df, x="conc", y="resp", by="well", start=start, progress=False
    )


@pytest.fixture
def batch() -> BatchResult:
    return _batch()


def test_the_plate_has_the_failures_the_review_is_for(batch: BatchResult) -> None:
    st = batch.status
    assert st["W5"] == "failed" and "degenerate" in batch.reasons[batch.index_of("W5")]
    assert st["W6"] == "failed" and st["W7"] == "failed"
    assert batch.datasets[batch.index_of("W7")] is None
    assert all(st[f"W{k}"] in ("ok", "flagged") for k in range(5))


def test_review_json_holds_every_group_with_points_curve_and_key_numbers(
    batch: BatchResult,
) -> None:
    w = batch.review()
    assert isinstance(w, CurveBench) and w.batch is batch
    rj = w.review_json
    assert [g["label"] for g in rj["groups"]] == list(batch.labels)
    assert [g["status"] for g in rj["groups"]] == list(batch.statuses)
    assert rj["columns"] == ["zero_dose", "full_effect", "log_ic50", "n_h", "ic50", "amplitude"]
    assert rj["log_x"] is True  # five decades of dose: the main plot's rule says log
    json.dumps(rj, allow_nan=False)  # strict JSON: what the page receives
    for i, g in enumerate(rj["groups"]):
        assert g["reason"] == batch.reasons[i] and g["edited"] is False
        ds = batch.datasets[i]
        if ds is None:
            assert g["x"] == [] and g["cx"] == []
            continue
        assert g["x"] == pytest.approx(ds.x.tolist()) and g["y"] == pytest.approx(ds.y.tolist())
        if batch.statuses[i] == "failed":
            assert g["cx"] == [] and all(v is None for v in g["values"].values())
            continue
        v = batch.value_array[i]
        cx = np.array(g["cx"])
        assert len(cx) == _review.CURVE_SAMPLES and cx.min() < ds.x.min() < ds.x.max() < cx.max()
        assert np.allclose(np.diff(np.log10(cx)), np.diff(np.log10(cx))[0])  # even in decades
        assert g["cy"] == pytest.approx(logistic4(cx, *v).tolist(), rel=1e-12)
        assert g["values"]["ic50"] == pytest.approx(10 ** v[2], rel=1e-12)
        assert g["values"]["amplitude"] == pytest.approx(v[0] - v[1], rel=1e-12)


def test_a_large_group_is_thinned_for_its_small_plot() -> None:
    rng = np.random.default_rng(3)
    x = 10 ** rng.uniform(-9, -4, 5000)
    df = pd.DataFrame(
        {"g": "big", "conc": x, "resp": logistic4(x, 100, 5, -6.5, 1.2) + rng.normal(0, 2, x.size)}
    )
    b = cw.fit_groups("inhibition_4pl", data=df, x="conc", y="resp", by="g", progress=False)
    g = _review.group_entry(b, 0, "log")
    assert 20 < len(g["x"]) < 600 and len(g["x"]) == len(g["y"])
    # The outline is kept: the lowest and highest responses are among the drawn points.
    assert min(g["y"]) == pytest.approx(df["resp"].min()) and max(g["y"]) == pytest.approx(
        df["resp"].max()
    )


def test_filter_open_and_messages(batch: BatchResult) -> None:
    w = CurveBench(batch)
    # It opens on the first failed group that has data.
    assert w.review_group == "W5" and w.review_state["open"] == "W5"
    assert w.review_shown == batch.labels
    w.review_filter("failed")
    assert w.review_shown == ("W5", "W6", "W7") and w.review_state["filter"] == "failed"
    w._on_custom_msg(w, {"type": "review_filter", "filter": "flagged"}, [])
    assert w.review_state["filter"] == "flagged"
    assert w.review_shown == tuple(lab for lab, s in batch.status.items() if s == "flagged")
    with pytest.raises(cw.ParameterError, match="one of"):
        w.review_filter("broken")
    # An ok group opens at its batch fit's values, on its own points.
    i = batch.index_of("W2")
    w.review_open("W2")
    assert w.review_group == "W2" and w.review_state["can_accept"] is False
    fitted = dict(zip(batch.model.param_names, batch.value_array[i], strict=True))
    assert w.values == pytest.approx(fitted)
    assert w.dataset.x.tolist() == batch.datasets[i].x.tolist()
    assert w.x_scale == "log" and w.model.name == "inhibition_4pl"
    # A failed group opens at the start the batch used.
    w._on_custom_msg(w, {"type": "review_open", "label": "W5"}, [])
    assert w.review_group == "W5"
    assert w.values["log_ic50"] == -8.8 and w.values["n_h"] == 40.0
    with pytest.raises(cw.ParameterError, match="no group"):
        w.review_open("W99")
    with pytest.raises(cw.DataError, match="no data to open"):
        w.review_open("W7")
    assert w.review_group == "W5"  # a refused open changes nothing


def test_accept_writes_the_refit_into_the_batch_as_the_batch_would(batch: BatchResult) -> None:
    w = CurveBench(batch)
    assert w.review_group == "W5"
    with pytest.raises(cw.FitError, match="no refit"):
        w.review_accept()
    for name, v in GOOD_START.items():
        w.set_param(name, value=v)
    w.set_param("full_effect", value=5.0, fixed=True)  # the assay's known bottom plateau
    res = w.fit()
    assert res is not None and res.success
    assert w.review_state["can_accept"] is True
    seen: list[str] = []
    w.observe(lambda c: seen.append(c["new"]["groups"][5]["status"]), "review_json")
    out = w.review_accept()
    assert seen == [batch.statuses[5]]  # the page is told (a trait change, not a mutation)
    assert out is batch
    i = batch.index_of("W5")
    # The batch's own rule for the same group from the same start: fit_groups on it alone.
    df = _plate()
    alone = cw.fit_groups(
        "inhibition_4pl",
        data=df[df["well"] == "W5"],
        x="conc",
        y="resp",
        by="well",
        start=pd.DataFrame(
            [{k: v for k, v in GOOD_START.items() if k != "full_effect"}], index=["W5"]
        ),
        fixed={"full_effect": 5.0},
        progress=False,
    )
    assert batch.statuses[i] == alone.statuses[0] and batch.statuses[i] != "failed"
    assert batch.reasons[i] == alone.reasons[0] and batch.flags[i] == alone.flags[0]
    np.testing.assert_allclose(batch.value_array[i], alone.value_array[0], rtol=1e-6)
    np.testing.assert_allclose(batch.derived_array[i], alone.derived_array[0], rtol=1e-5)
    # Outside reference: curve_fit (MINPACK) on the group's points from the same start.
    ds = batch.datasets[i]
    assert ds is not None
    free = [GOOD_START["zero_dose"], GOOD_START["log_ic50"], GOOD_START["n_h"]]
    p3, _ = scipy.optimize.curve_fit(
        lambda x, z, m, h: logistic4(x, z, 5.0, m, h),
        ds.x,
        ds.y,
        p0=free,
        xtol=1e-14,
        ftol=1e-14,
        maxfev=20000,
    )
    popt = np.array([p3[0], 5.0, p3[1], p3[2]])
    se = np.nan_to_num(batch.stderr_array[i], nan=0.0)  # the fixed plateau has none
    assert np.all(np.abs(batch.value_array[i] - popt) <= 1e-3 * se + 1e-12)
    # Every table agrees; the group is marked edited with a note; the other groups are untouched.
    t = batch.table
    assert t.loc["W5", "status"] == batch.status["W5"] and t.loc["W5", "edited"]
    note = "refitted in review; fixed full_effect"
    assert t.loc["W5", "note"] == note and batch.note.to_dict() == {"W5": note}
    assert batch.values.loc["W5", "log_ic50"] == res.values["log_ic50"]
    assert batch.path["W5"] == "per-group" and batch["W5"] is res
    assert [bool(e) for e in t["edited"]] == [lab == "W5" for lab in batch.labels]
    before = _batch()
    for lab in batch.labels:
        if lab != "W5":
            pd.testing.assert_series_equal(t.loc[lab], before.table.loc[lab])
    # The page sees it: the overview's entry and the state.
    g = w.review_json["groups"][i]
    assert g["status"] == batch.statuses[i] and g["edited"] and g["cx"]
    assert w.review_state == {
        "filter": "all",
        "open": "W5",
        "can_accept": False,
        "accepted": True,
        "sort": {"key": "label", "ascending": True},
        "order": list(range(len(batch))),
    }
    with pytest.raises(cw.FitError, match="already in the batch"):
        w.review_accept()


def test_a_refit_with_excluded_points_and_a_fixed_parameter_round_trips(
    batch: BatchResult,
) -> None:
    w = batch.review()
    w.review_open("W3")
    w.exclude([0, 1])
    w.fix("full_effect", 5.0)
    res = w.fit()
    assert res is not None and res.success
    w._on_custom_msg(w, {"type": "review_accept"}, [])
    i = batch.index_of("W3")
    assert batch.edited[i] and batch.n_used[i] == CONC.size - 2
    assert (
        batch.notes[i] == "refitted in review; fixed full_effect; 2 point(s) excluded (rows 0, 1)"
    )
    assert math.isnan(batch.stderr_array[i, batch.model.param_names.index("full_effect")])
    text = batch.to_json()
    back = BatchResult.from_json(text)
    assert back.edited == batch.edited and back.notes == batch.notes
    assert back.statuses == batch.statuses
    pd.testing.assert_frame_equal(back.table, batch.table)
    # The accepted fit itself comes back (its exclusions and fixed parameter), not a new fit.
    assert back["W3"].values == res.values and back["W3"].fixed == ("full_effect",)
    assert back["W3"].n == CONC.size - 2
    again = pickle.loads(pickle.dumps(batch))
    assert again.notes == batch.notes and again["W3"].values == res.values
    # Reopening the edited group shows the accepted refit's exclusions and fixed parameter.
    w.review_open("W0")
    w.review_open("W3")
    assert w.excluded == [0, 1] and w.settings["full_effect"]["fixed"] is True


def test_replace_fit_refuses_bad_input_and_leaves_the_batch_as_it_was(batch: BatchResult) -> None:
    before = batch.to_json()
    ds = batch.datasets[batch.index_of("W1")]
    assert ds is not None
    other = cw.fit("stimulation_4pl", dataset=ds)
    same = cw.fit("inhibition_4pl", dataset=ds, start=GOOD_START)
    with pytest.raises(cw.ModelError, match="batch fits 'inhibition_4pl'"):
        batch.replace_fit("W1", other, note="x")
    with pytest.raises(cw.ParameterError, match="note"):
        batch.replace_fit("W1", same, note="  ")
    with pytest.raises(cw.FitError, match="FitResult"):
        batch.replace_fit("W1", {"a": 1}, note="x")  # type: ignore[arg-type]
    with pytest.raises(cw.ParameterError, match="no group"):
        batch.replace_fit("nope", same, note="x")
    assert batch.to_json() == before and not any(batch.edited)


def test_the_widget_refuses_what_a_review_cannot_take(batch: BatchResult) -> None:
    with pytest.raises(cw.DataError, match="CurveBench\\(batch\\)"):
        CurveBench(batch, x="conc")
    w = CurveBench(batch)
    w.set_model("stimulation_4pl")
    w.fit()
    with pytest.raises(cw.ModelError, match="switch back"):
        w.review_accept()
    plain = CurveBench(CONC, logistic4(CONC, 100, 5, -6.5, 1.2), model="inhibition_4pl")
    assert plain.review_json is None and plain.batch is None
    with pytest.raises(cw.DataError, match="made on a batch"):
        plain.review_filter("all")
    # A refit that did not converge is not accepted.
    w.review_open("W5")
    w._fit_options = {**w._fit_options, "max_evaluations": 3}
    r = w.fit()
    assert r is not None and not r.success
    with pytest.raises(cw.FitError, match="did not converge"):
        w.review_accept()
    assert not any(batch.edited)


def test_take_and_combine_keep_the_edits_and_the_refits(batch: BatchResult) -> None:
    from curvewright.batch_result import combine

    w = batch.review()
    for name, v in GOOD_START.items():
        w.set_param(name, value=v)
    w.set_param("full_effect", value=5.0, fixed=True)
    res = w.fit()
    w.review_accept(note="new start by hand")
    i = batch.index_of("W5")
    part = batch.take([i, 0])
    assert part.edited == (True, False) and part.notes == ("new start by hand", "")
    assert part["W5"] is res
    joined = combine([batch.take([0]), batch.take([i])])
    assert joined.edited == (False, True) and joined["W5"] is res


def test_a_snapshot_belongs_to_its_group(batch: BatchResult) -> None:
    w = batch.review()
    w.set_param("n_h", value=2.0)
    snap = w.snapshot()
    assert snap["review_group"] == "W5"
    w.review_open("W2")
    with pytest.raises(cw.DataError, match="review_open\\('W5'\\)"):
        w.restore(snap)
    assert w.values["n_h"] == pytest.approx(batch.values.loc["W2", "n_h"])
    w.review_open("W5")
    w.restore(snap)
    assert w.values["n_h"] == 2.0


def test_replace_fit_changes_only_that_groups_dataset(batch: BatchResult) -> None:
    # The batch's datasets are built on demand; accepting one group's refit must not build (or
    # change) the others'.
    from curvewright.data import GroupDatasets

    i = batch.index_of("W1")
    ds = batch.datasets[i]
    assert ds is not None
    refit = cw.fit("inhibition_4pl", dataset=ds.with_exclusions([0]), start=GOOD_START)
    others = {g: batch.datasets[batch.index_of(g)] for g in ("W0", "W2")}
    batch.replace_fit("W1", refit, note="first dose left out")
    if isinstance(batch.datasets, GroupDatasets):
        assert isinstance(batch.datasets, GroupDatasets)  # still lazy after the accept
    assert batch.datasets[i] is refit.dataset
    for g, before in others.items():
        assert batch.datasets[batch.index_of(g)] is before


# ------------------------------------------------------------------------------ table sort
def test_the_table_sorts_numbers_as_pandas_does_with_missing_values_last(
    batch: BatchResult,
) -> None:
    # Reference: pandas' stable sort_values with na_position="last", on the same column.
    w = CurveBench(batch)
    col = _review.columns(batch)[0]
    frame = pd.DataFrame({"label": batch.labels, col: batch.values[col].to_numpy()})
    for ascending in (True, False):
        w.review_sort(col, ascending)
        want = frame.sort_values(col, ascending=ascending, kind="stable", na_position="last")
        assert list(w.review_order) == list(want["label"])
        st = w.review_state
        assert st["sort"] == {"key": col, "ascending": ascending}
        assert [batch.labels[i] for i in st["order"]] == list(want["label"])


def test_the_table_sorts_labels_with_numbers_read_as_numbers() -> None:
    # Well B2 before B10, letters without case (common practice for plate wells).
    entries = [
        {"label": lab, "status": "ok", "values": {}} for lab in ["B10", "b2", "A1", "C3", "A10"]
    ]
    order = _review.table_order(entries, "label", True)
    assert [entries[i]["label"] for i in order] == ["A1", "A10", "b2", "B10", "C3"]
    assert _review.table_order(entries, "label", False) == order[::-1]


def test_sorting_by_status_puts_failed_then_flagged_first_and_a_click_flips(
    batch: BatchResult,
) -> None:
    w = CurveBench(batch)
    w.review_sort("status")
    ranks = [_review.STATUS_RANK[batch.status[lab]] for lab in w.review_order]
    assert ranks == sorted(ranks) and ranks[0] == 0
    # The page's header click: the same column flips, another starts ascending.
    w._on_custom_msg(w, {"type": "review_sort", "key": "status"}, [])
    assert w.review_state["sort"] == {"key": "status", "ascending": False}
    w._on_custom_msg(w, {"type": "review_sort", "key": "label"}, [])
    assert w.review_state["sort"] == {"key": "label", "ascending": True}
    # The filter keeps the sorted order of the groups it shows.
    w.review_sort("status", False)
    w.review_filter("failed")
    assert set(w.review_order) == {lab for lab in batch.labels if batch.status[lab] == "failed"}


def test_an_unknown_sort_column_is_our_error_and_changes_nothing(batch: BatchResult) -> None:
    w = CurveBench(batch)
    before = dict(w.review_state)
    with pytest.raises(cw.ParameterError, match="can be sorted by one of"):
        w.review_sort("no_such_column")
    with pytest.raises(cw.ParameterError, match="ascending must be"):
        w.review_sort("label", "yes")  # type: ignore[arg-type]
    assert w.review_state == before
    with pytest.raises(cw.DataError):
        CurveBench(
            pd.DataFrame({"x": [1.0, 2, 3], "y": [1.0, 2, 3]}), x="x", y="y", model="straight_line"
        ).review_sort("label")
