"""Session files: CurveBench.save, curvewright.load_session and CurveBench.load.

Data: R's Puromycin (treated cells, and both states as groups) and R's DNase (11 runs as a batch),
tests/data/stats/SOURCES.md. The fits themselves are checked against the outside reference
where one exists (Bates and Watts 1988 for Puromycin, treated: Vmax 212.7, Km 0.06412, from
memory as in tests/stats/test_linearized.py) and against a refit after loading (the same problem
solved again must give the same answer to the solver's tolerance). Everything else is a round
trip: a loaded object must equal the saved one exactly (the exact JSON forms compared).
"""

from __future__ import annotations

import copy
import json
import threading
from pathlib import Path
from typing import Any

import jsonschema
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import curvewright as cw
from curvewright import CurveBench
from curvewright.widget import _session

DATA = Path(__file__).resolve().parents[1] / "data" / "stats"

# Everything the page draws comes from these synced traits; a loaded widget must show the same.
SHOWN = (
    "model_json",
    "data",
    "params",
    "fitted",
    "x_scale",
    "y_scale",
    "model_names",
    "model_name",
    "excluded",
    "preview_curve",
    "compare",
    "show_confidence_band",
    "show_prediction_band",
    "show_residuals",
    "bands_json",
    "degree_table_json",
    "comparison_json",
    "groups_json",
    "review_json",
    "review_state",
)


@pytest.fixture(scope="module")
def puromycin() -> pd.DataFrame:
    return pd.read_csv(DATA / "Puromycin.csv")


@pytest.fixture(scope="module")
def treated(puromycin: pd.DataFrame) -> pd.DataFrame:
    return puromycin[puromycin["state"] == "treated"].reset_index(drop=True)


def _fits(bench: CurveBench) -> list[dict[str, Any]]:
    return [h.to_dict() for h in bench.history]


def assert_same_analysis(a: CurveBench, b: CurveBench) -> None:
    """Every saved object of ``a`` equals ``b``'s, in its exact JSON form."""
    assert b.snapshot() == a.snapshot()
    assert _fits(b) == _fits(a)
    assert b.dataset.to_dict() == a.dataset.to_dict()
    assert list(b._models) == list(a._models)
    assert [m.to_dict() for m in b._models.values()] == [m.to_dict() for m in a._models.values()]
    assert set(b._memory) == set(a._memory)
    for name, mem in a._memory.items():
        other = b._memory[name]
        assert other.settings.to_json() == mem.settings.to_json()
        assert other.group_values == mem.group_values
        for r1, r2 in ((mem.result, other.result), (mem.global_result, other.global_result)):
            assert (r1 is None) == (r2 is None)
            if r1 is not None and r2 is not None:
                assert r2.to_dict() == r1.to_dict()
    assert (a.result is None) == (b.result is None)
    if a.result is not None and b.result is not None:
        assert b.result.to_dict() == a.result.to_dict()
    for t in SHOWN:
        assert getattr(b, t) == getattr(a, t), t
    if a.batch is not None:
        assert b.batch is not None and b.batch.to_dict() == a.batch.to_dict()


def _doc(path: Path) -> dict[str, Any]:
    out: dict[str, Any] = json.loads(path.read_text(encoding="utf-8"))
    return out


def _write(path: Path, doc: object) -> Path:
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


# ------------------------------------------------------------------------ round trips
def test_one_curve_round_trip(treated: pd.DataFrame, tmp_path: Path) -> None:
    bench = CurveBench(treated, x="conc", y="rate", model="michaelis_menten")
    first = bench.fit()
    assert isinstance(first, cw.FitResult)
    # Bates and Watts 1988 (from memory, see the module docstring).
    assert first.values["Vmax"] == pytest.approx(212.7, rel=3e-4)
    assert first.values["Km"] == pytest.approx(0.06412, rel=3e-4)
    bench.set_model("hill")
    bench.fit()
    bench.set_model("michaelis_menten")
    bench.exclude([2, 5])
    bench.set_param("Km", lower=0.01, upper=1.0)
    bench.fit()
    bench.x_scale = "log"
    bench.show_confidence_band = True
    bench.show_residuals = False
    path = tmp_path / "analysis.cwsession.json"
    bench.save(path)

    jsonschema.validate(_doc(path), _session.SPEC)
    again = cw.load_session(path)
    assert_same_analysis(bench, again)
    assert again.history[0].values == first.values  # exact, not approximate
    # The loaded analysis is live: the same fit made again agrees to the solver's tolerance.
    refit = again.fit()
    assert isinstance(refit, cw.FitResult)
    for name, v in bench.history[-1].values.items():
        assert refit.values[name] == pytest.approx(v, rel=1e-6)


def test_formula_model_comes_back_parsed_from_its_text(
    treated: pd.DataFrame, tmp_path: Path
) -> None:
    formula = "top*x/(half + x) + floor"
    bench = CurveBench(treated, x="conc", y="rate", model=formula)
    bench.fit()
    path = tmp_path / "f.cwsession.json"
    bench.save(path)
    doc = _doc(path)
    entry = next(e for e in doc["models"] if e["source"] == "formula")
    assert entry["model"]["formula"] == bench.model.formula
    assert entry["model"]["tree"] == bench.model.expr.to_json()  # type: ignore[union-attr]
    again = cw.load_session(path)
    assert again.model.to_dict() == bench.model.to_dict()
    assert_same_analysis(bench, again)


def test_groups_round_trip(puromycin: pd.DataFrame, tmp_path: Path) -> None:
    bench = CurveBench(puromycin, x="conc", y="rate", by="state", model="michaelis_menten")
    bench.set_scope("Km", "shared")
    bench.fit()
    bench.select_group("untreated")
    bench.hide_group("treated")
    bench.exclude([0])
    path = tmp_path / "g.cwsession.json"
    bench.save(path)
    jsonschema.validate(_doc(path), _session.SPEC)
    again = cw.load_session(path)
    assert isinstance(again.result, cw.GlobalResult)
    assert_same_analysis(bench, again)
    pd.testing.assert_frame_equal(again.group_values, bench.group_values, check_exact=True)


def test_groups_with_sigma_given_as_an_array(puromycin: pd.DataFrame, tmp_path: Path) -> None:
    sd = 2.0 + 0.05 * puromycin["rate"].to_numpy()
    bench = CurveBench(
        puromycin, x="conc", y="rate", by="state", sigma=sd, model="michaelis_menten"
    )
    bench.exclude_group("untreated")
    bench.fit()
    path = tmp_path / "gs.cwsession.json"
    bench.save(path)
    again = cw.load_session(path)
    assert_same_analysis(bench, again)
    assert np.array_equal(again.dataset.sigma, bench.dataset.sigma)  # type: ignore[arg-type]


def _dnase_batch() -> cw.BatchResult:
    dn = pd.read_csv(DATA / "DNase.csv")
    return cw.fit_groups(
        "stimulation_4pl", data=dn, x="conc", y="density", by="Run", progress=False
    )


def test_batch_review_round_trip_keeps_the_accepted_edit(tmp_path: Path) -> None:
    bench = CurveBench(_dnase_batch())
    assert bench.batch is not None
    label = bench.batch.labels[3]
    bench.review_open(label)
    bench.exclude([0])
    bench.fit()
    bench.review_accept(note="first well read twice")
    bench.review_sort("label", False)
    bench.review_filter("all")
    path = tmp_path / "b.cwsession.json"
    bench.save(path)
    jsonschema.validate(_doc(path), _session.SPEC)
    again = cw.load_session(path)
    assert_same_analysis(bench, again)
    assert again.batch is not None
    i = again.batch.labels.index(label)
    assert again.batch.edited[i] and again.batch.notes[i] == bench.batch.notes[i]
    assert again.review_group == label
    assert again.review_state is not None and again.review_state["accepted"] is True
    assert again.review_order == bench.review_order


def test_fit_options_round_trip(treated: pd.DataFrame, tmp_path: Path) -> None:
    sd = np.linspace(5.0, 12.0, len(treated))
    bench = CurveBench(
        treated,
        x="conc",
        y="rate",
        sigma=sd,
        model="michaelis_menten",
        fit_options={"loss": "huber", "loss_scale": 2.5, "max_evaluations": 400},
    )
    bench.fit()
    path = tmp_path / "o.cwsession.json"
    bench.save(path)
    again = cw.load_session(path)
    assert again._fit_options == bench._fit_options
    assert again.dataset.sigma is not None and bench.dataset.sigma is not None
    assert np.array_equal(again.dataset.sigma, bench.dataset.sigma)
    assert_same_analysis(bench, again)


def test_missing_values_stay_dropped(tmp_path: Path, treated: pd.DataFrame) -> None:
    t = treated.copy()
    t.loc[4, "rate"] = np.nan  # a missing reading: the dataset drops that row
    bench = CurveBench(t, x="conc", y="rate", model="michaelis_menten", exclude=[6])
    path = tmp_path / "m.cwsession.json"
    bench.save(path)
    again = cw.load_session(path)
    assert again.dataset.n_input == len(t) and 4 not in again.dataset.row.tolist()
    assert_same_analysis(bench, again)


def test_load_replaces_the_analysis_in_place(
    treated: pd.DataFrame, puromycin: pd.DataFrame, tmp_path: Path
) -> None:
    saved = CurveBench(puromycin, x="conc", y="rate", by="state", model="michaelis_menten")
    saved.fit()
    path = tmp_path / "g.cwsession.json"
    saved.save(path)
    bench = CurveBench(treated, x="conc", y="rate", model="hill")
    bench.fit()
    seen: list[object] = []
    bench.observe(lambda ch: seen.append(ch["new"]), "result")
    bench.load(path)
    assert_same_analysis(saved, bench)
    assert seen and isinstance(seen[-1], cw.GlobalResult)
    # And it goes on working: another fit lands in the loaded history.
    bench.fit()
    assert len(bench.history) == len(saved.history) + 1


# ------------------------------------------------------------------------ refusals
@pytest.fixture
def saved(treated: pd.DataFrame, tmp_path: Path) -> Path:
    bench = CurveBench(treated, x="conc", y="rate", model="michaelis_menten")
    bench.fit()
    path = tmp_path / "s.cwsession.json"
    bench.save(path)
    return path


def test_changed_data_do_not_match_the_fingerprint(saved: Path, tmp_path: Path) -> None:
    doc = _doc(saved)
    doc["data"]["columns"][1]["values"][0] += 1.0
    with pytest.raises(cw.SessionError, match="do not match its fingerprint"):
        cw.load_session(_write(tmp_path / "x.json", doc))


def test_a_newer_schema_asks_for_an_upgrade(saved: Path, tmp_path: Path) -> None:
    doc = _doc(saved)
    doc["schema_version"] = _session.SCHEMA_VERSION + 1
    with pytest.raises(cw.SessionError, match="Upgrade curvewright"):
        cw.load_session(_write(tmp_path / "x.json", doc))


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("", "not valid UTF-8 JSON"),
        ('{"schema": "curvewright.session", "schema_ver', "not valid UTF-8 JSON"),
        ("[1, 2]", "not a curvewright session file"),
        ('{"schema": "curvewright.session", "schema_version": 1}', "lacks the fields"),
    ],
)
def test_damaged_files_get_our_error(tmp_path: Path, text: str, match: str) -> None:
    path = tmp_path / "d.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(cw.SessionError, match=match):
        cw.load_session(path)


def test_truncated_file(saved: Path, tmp_path: Path) -> None:
    raw = saved.read_bytes()
    path = tmp_path / "t.json"
    path.write_bytes(raw[: len(raw) // 2])
    with pytest.raises(cw.SessionError, match="truncated or damaged"):
        cw.load_session(path)
    with pytest.raises(cw.SessionError, match="Cannot read the session file"):
        cw.load_session(tmp_path / "nowhere.json")


def saturating(x: Any, vmax: float, k: float) -> Any:
    # A Python function: a session file can name it but never hold it.
    x = np.asarray(x, dtype=float)
    return vmax * x / (k + x)


def test_python_model_must_be_passed_again(treated: pd.DataFrame, tmp_path: Path) -> None:
    bench = CurveBench(
        treated, x="conc", y="rate", model=saturating, start={"vmax": 200.0, "k": 0.1}
    )
    bench.fit()
    path = tmp_path / "p.cwsession.json"
    bench.save(path)
    assert "saturating" not in json.dumps(_doc(path)["models"][0].get("model", {}).get("tree"))
    with pytest.raises(cw.SessionError, match=r"'saturating'.*models=\{'saturating'"):
        cw.load_session(path)
    again = cw.load_session(path, models={"saturating": saturating})
    assert_same_analysis(bench, again)
    # bench.load offers the widget's own functions by name.
    other = CurveBench(treated, x="conc", y="rate", model=saturating)
    other.load(path)
    assert_same_analysis(bench, other)


def test_a_failed_load_leaves_the_bench_as_it_was(
    saved: Path, treated: pd.DataFrame, tmp_path: Path
) -> None:
    bench = CurveBench(treated, x="conc", y="rate", model="hill")
    bench.fit()
    before = (bench.snapshot(), _fits(bench), {t: copy.deepcopy(getattr(bench, t)) for t in SHOWN})
    doc = _doc(saved)
    doc["memory"]["michaelis_menten"]["result"] = 99  # points to no fit
    for bad in (doc, {**_doc(saved), "schema_version": 9}):
        with pytest.raises(cw.SessionError):
            bench.load(_write(tmp_path / "bad.json", bad))
        after = (bench.snapshot(), _fits(bench), {t: getattr(bench, t) for t in SHOWN})
        assert after == before


# ------------------------------------------------------------------ damaged files (hypothesis)
def _small_session(tmp_dir: Path) -> tuple[bytes, CurveBench]:
    t = pd.read_csv(DATA / "Puromycin.csv")
    t = t[t["state"] == "treated"].reset_index(drop=True)
    bench = CurveBench(t, x="conc", y="rate", model="michaelis_menten")
    bench.fit()
    bench.exclude([1])
    path = tmp_dir / "small.cwsession.json"
    bench.save(path)
    return path.read_bytes(), CurveBench(t, x="conc", y="rate", model="hill")


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory) -> tuple[bytes, CurveBench, Path]:
    d = tmp_path_factory.mktemp("sessions")
    raw, target = _small_session(d)
    return raw, target, d


def _paths(obj: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    out = [prefix]
    if isinstance(obj, dict):
        for k, v in obj.items():
            out += _paths(v, (*prefix, k))
    elif isinstance(obj, list):
        for i, v in enumerate(obj[:6]):  # a few items of each list keep the count small
            out += _paths(v, (*prefix, i))
    return out


JUNK = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=8)
    | st.sampled_from(["NaN", "Infinity", "", "michaelis_menten", "sha256:00"]),
    lambda c: st.lists(c, max_size=3) | st.dictionaries(st.text(max_size=6), c, max_size=3),
    max_leaves=6,
)


def _state_text(bench: CurveBench) -> str:
    # As text: a NaN a damaged (but loaded) file put somewhere compares equal to itself.
    parts = (bench.snapshot(), _fits(bench), bench.data, bench.params, bench.model_json)
    return json.dumps(parts, sort_keys=True, default=str)


def _load_into(target: CurveBench, path: Path) -> None:
    before = _state_text(target)
    try:
        target.load(path)
    except cw.CurvewrightError:
        assert _state_text(target) == before  # nothing half-changed
        return
    # A damage the checks let through (a changed number outside the data) loads whole.
    target.snapshot()


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(data=st.data())
def test_random_byte_damage_gives_only_our_errors(
    small: tuple[bytes, CurveBench, Path], data: st.DataObject
) -> None:
    raw, target, d = small
    n = data.draw(st.integers(1, 4))
    buf = bytearray(raw)
    for _ in range(n):
        i = data.draw(st.integers(0, len(buf) - 1))
        buf[i] = data.draw(st.integers(0, 255))
    if data.draw(st.booleans()):
        buf = buf[: data.draw(st.integers(0, len(buf)))]
    path = d / "damaged.json"
    path.write_bytes(bytes(buf))
    _load_into(target, path)


@settings(
    max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(data=st.data())
def test_random_field_damage_gives_only_our_errors(
    small: tuple[bytes, CurveBench, Path], data: st.DataObject
) -> None:
    raw, target, d = small
    doc = json.loads(raw)
    where = data.draw(st.sampled_from(_paths(doc)[1:]))
    parent = doc
    for k in where[:-1]:
        parent = parent[k]
    if data.draw(st.booleans()) and isinstance(parent, dict):
        del parent[where[-1]]
    else:
        parent[where[-1]] = data.draw(JUNK)
    path = d / "damaged.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    _load_into(target, path)


def test_damage_is_caught_by_load_session_too(small: tuple[bytes, CurveBench, Path]) -> None:
    raw, _, d = small
    doc = json.loads(raw)
    doc["history"][0]["result"]["covariance"] = {"shape": [2, 2], "data": ["x"]}
    path = _write(d / "cov.json", doc)
    with pytest.raises(cw.CurvewrightError, match=r"damaged|corrupted"):
        cw.load_session(path)


def test_no_save_or_load_while_a_fit_runs(saved: Path, treated: pd.DataFrame) -> None:
    bench = CurveBench(treated, x="conc", y="rate", model="michaelis_menten")
    gate = threading.Event()
    worker = threading.Thread(target=gate.wait)  # stands in for the fit's worker thread
    worker.start()
    bench._thread = worker
    try:
        with pytest.raises(cw.SessionError, match="a fit is running"):
            bench.save(saved.parent / "running.json")
        with pytest.raises(cw.FitError, match="A fit is running"):
            bench.load(saved)
    finally:
        gate.set()
        worker.join()
    assert not (saved.parent / "running.json").exists()
