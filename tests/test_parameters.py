"""The parameter record (src/curvewright/parameters.py): shorthand, validation, bounds rule, JSON.

These are rules of our own API, so the checks are the rules themselves (what each setting must
mean) and properties over random input (hypothesis); no outside reference is involved.
"""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from curvewright.errors import ParameterError
from curvewright.models import Model, Param
from curvewright.parameters import Parameter, Parameters, move_inside

MODEL = Model.from_formula(
    "base + amp*exp(-k*x)",
    params=[
        Param("base", 0.0),
        Param("amp", 1.0),
        Param("k", 0.5, lower=0.0, positive=True, log_scale=True),
    ],
    name="decay",
)


def test_shorthand_becomes_one_record_per_parameter() -> None:
    p = Parameters.from_shorthand(
        MODEL,
        start={"k": 0.2},
        fixed={"base": 1.5},
        bounds={"k": (0.0, 3.0), "amp": (None, 100.0)},
    )
    assert p.names == ("base", "amp", "k")
    assert p["base"] == Parameter("base", 1.5, fixed=True)
    assert p["k"] == Parameter("k", 0.2, 0.0, 3.0)
    assert p["amp"].upper == 100.0 and p["amp"].lower == -math.inf
    assert p.free == ("amp", "k")
    assert p.fixed == {"base": 1.5}
    assert p.validated(MODEL) == p


def test_fixed_names_are_held_at_their_start() -> None:
    p = Parameters.from_shorthand(MODEL, start={"amp": 4.0}, fixed=["amp"])
    assert p["amp"].fixed and p["amp"].value == 4.0
    q = Parameters.from_shorthand(MODEL, fixed="base")
    assert q["base"].fixed and q["base"].value == 0.0


def test_links_are_records_too() -> None:
    p = Parameters.from_shorthand(MODEL, links={"amp": " 4*base "})
    assert p["amp"].link == "4*base"
    assert p.free == ("base", "k")
    assert p.links == {"amp": "4*base"}
    p.validated(MODEL)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"start": {"kk": 1.0}}, r"'kk'.*Did you mean 'k'"),
        ({"start": [1.0]}, r"start must be a mapping"),
        ({"start": {"k": "fast"}}, r"start value of 'k' must be a number"),
        ({"fixed": {"bas": 1.0}}, r"in fixed=.*Did you mean 'base'"),
        ({"bounds": {"k": 3.0}}, r"bounds\['k'\] must be a pair"),
        ({"bounds": [("k", (0, 1))]}, r"bounds must be a mapping"),
        ({"links": {"amp": 2}}, r"links\['amp'\] must be an expression text"),
    ],
)
def test_shorthand_errors_name_the_argument(kwargs: dict[str, object], match: str) -> None:
    with pytest.raises(ParameterError, match=match):
        Parameters.from_shorthand(MODEL, **kwargs)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"bounds": {"amp": (2.0, 1.0)}}, r"lower bound 2 is above upper bound 1; swap"),
        ({"bounds": {"k": (-1.0, 1.0)}}, r"declares it positive.*lower bound cannot be -1"),
        ({"start": {"k": 5.0}, "bounds": {"k": (0, 1)}}, r"start value 5 .*outside its bounds"),
        ({"start": {"amp": math.inf}}, r"'amp': value must be a finite number"),
        ({"fixed": {"k": -2.0}}, r"positive, so its fixed value cannot be -2"),
        ({"links": {"amp": "2*x"}}, r"uses x; a link may use only other parameters"),
        ({"links": {"amp": "2*bse"}}, r"Did you mean 'base'"),
        ({"links": {"amp": "2*k", "k": "base"}}, r"uses 'k', which is itself linked"),
        ({"links": {"amp": "amp + 1"}}, r"uses 'amp', which is itself linked"),
        ({"links": {"amp": "2*"}}, r"cannot be parsed"),
        ({"links": {"amp": "2*k"}, "fixed": ["amp"]}, r"both fixed and linked"),
    ],
)
def test_the_validator_explains_what_to_change(kwargs: dict[str, object], match: str) -> None:
    p = Parameters.from_shorthand(MODEL, **kwargs)  # type: ignore[arg-type]
    with pytest.raises(ParameterError, match=match):
        p.validated(MODEL)


def test_the_validator_wants_exactly_the_models_parameters() -> None:
    full = Parameters.for_model(MODEL)
    with pytest.raises(ParameterError, match=r"settings for \['k'\] are missing"):
        Parameters(r for r in full.values() if r.name != "k").validated(MODEL)
    with pytest.raises(ParameterError, match=r"'rate' is not a parameter"):
        Parameters([*full.values(), Parameter("rate", 1.0)]).validated(MODEL)
    with pytest.raises(ParameterError, match=r"'k' appears twice"):
        Parameters([*full.values(), Parameter("k", 1.0)])
    # Records given in another order come back in the model's order.
    shuffled = Parameters(reversed(list(full.values())))
    assert shuffled.validated(MODEL).names == MODEL.param_names


def test_inside_bounds_moves_only_free_values_and_says_so() -> None:
    p = Parameters(
        [
            Parameter("base", 7.0, 0.0, 1.0, fixed=True),  # a user's fixed value: untouched
            Parameter("amp", -3.0, 0.0, 10.0),
            Parameter("k", 0.3, 0.0, 1.0),
        ]
    )
    q, notes = p.inside_bounds()
    assert q["base"].value == 7.0
    assert q["amp"].value == pytest.approx(0.1)  # nearest bound, 1 % of the range inwards
    assert q["k"].value == 0.3
    assert len(notes) == 1 and "'amp' (-3) lay outside its bounds [0, 10]" in notes[0].text
    assert (notes[0].name, notes[0].before, notes[0].after) == ("amp", -3.0, q["amp"].value)
    assert (notes[0].lower, notes[0].upper) == (0.0, 10.0)
    # only= limits the rule to the named values (a guided start's, never a user's)
    assert p.inside_bounds(only=["k"]) == (p, ())
    assert q.inside_bounds() == (q, ())


finite = st.floats(-1e12, 1e12, allow_nan=False)


@given(finite, finite, finite)
def test_move_inside_lands_inside_and_keeps_inside_values(a: float, b: float, v: float) -> None:
    lo, hi = min(a, b), max(a, b)
    got = move_inside(lo, hi, v)
    assert lo <= got <= hi
    if lo <= v <= hi:
        assert got == v
    elif hi > lo:
        assert lo < got < hi  # strictly inside: a solver can leave the bound


@given(finite, finite)
def test_move_inside_on_one_sided_ranges(b: float, v: float) -> None:
    assert move_inside(b, math.inf, v) >= b
    assert move_inside(-math.inf, b, v) <= b
    assert move_inside(-math.inf, math.inf, v) == v


records = st.builds(
    Parameter,
    name=st.sampled_from(["a", "b", "k"]),
    value=st.floats(allow_nan=False, allow_infinity=False),
    lower=st.one_of(st.just(-math.inf), st.floats(-1e6, 0)),
    upper=st.one_of(st.just(math.inf), st.floats(0, 1e6)),
    fixed=st.booleans(),
    link=st.one_of(st.none(), st.just("2*a")),
    scope=st.sampled_from(["shared", "per_group"]),
)


@given(st.lists(records, max_size=3, unique_by=lambda r: r.name))
def test_json_round_trip_is_exact(recs: list[Parameter]) -> None:
    p = Parameters(recs)
    text = json.dumps(p.to_json(), allow_nan=False)  # no infinity leaks into JSON
    assert Parameters.from_json(json.loads(text)) == p


def test_from_json_takes_the_pages_mapping_and_checks_types() -> None:
    page = {"k": {"value": 0.4, "lower": 0, "upper": None, "fixed": False}}
    assert Parameters.from_json(page)["k"] == Parameter("k", 0.4, 0.0, math.inf)
    with pytest.raises(ParameterError, match=r"'k': fixed must be true or false"):
        Parameters.from_json({"k": {"value": 1.0, "fixed": "yes"}})
    with pytest.raises(ParameterError, match=r"'k': value must be a number"):
        Parameters.from_json({"k": {"value": "1"}})
    with pytest.raises(ParameterError, match=r"scope must be one of"):
        Parameters.from_json({"k": {"value": 1.0, "scope": "each"}})
    with pytest.raises(ParameterError, match=r"unknown field\(s\) \['fix'\]"):
        Parameters.from_json({"k": {"value": 1.0, "fix": True}})
    with pytest.raises(ParameterError, match=r"list of records or a mapping"):
        Parameters.from_json("k=1")


# ----------------------------------------------------------------------- the JSON contract
def test_records_json_is_the_schema_in_params_spec() -> None:
    # params_spec.json is the one description of a record's JSON, shared with js/params.ts
    # (js/tests/params.test.ts checks the TypeScript side against the same file).
    from dataclasses import fields

    import jsonschema

    from curvewright.parameters import SCOPES, SPEC

    jsonschema.Draft202012Validator.check_schema(SPEC)
    check = jsonschema.Draft202012Validator(SPEC)
    assert list(SPEC["properties"]) == [f.name for f in fields(Parameter)]
    assert tuple(SPEC["properties"]["scope"]["enum"]) == SCOPES
    samples = [
        Parameter("k", 0.5, 0.0, math.inf),
        Parameter("amp", 2.0, fixed=True, scope="per_group"),
        Parameter("base", math.nan, link="2*k"),
    ]
    for r in samples:
        check.validate(r.to_json())
        back = Parameter.from_json(json.loads(json.dumps(r.to_json(), allow_nan=False)))
        assert back.to_json() == r.to_json()
    # the schema refuses what from_json refuses
    bad = {**samples[0].to_json(), "scope": "each"}
    assert not check.is_valid(bad)
    with pytest.raises(ParameterError, match="scope must be one of"):
        Parameter.from_json(bad)
    extra = {**samples[0].to_json(), "colour": "red"}
    assert not check.is_valid(extra)
    with pytest.raises(ParameterError, match="unknown field"):
        Parameter.from_json(extra)


def test_a_record_that_drifts_from_the_spec_fails_at_import() -> None:
    from curvewright.parameters import SPEC, _check_spec

    props = dict(SPEC["properties"])
    props["colour"] = {"type": "string"}
    with pytest.raises(RuntimeError, match="lists fields"):
        _check_spec({**SPEC, "properties": props})
    with pytest.raises(RuntimeError, match="scope must be one of"):
        _check_spec({**SPEC, "properties": {**SPEC["properties"], "scope": {"enum": ["shared"]}}})


def test_the_page_vectors_are_what_python_writes_now() -> None:
    # tests/data/params_vectors.json feeds js/tests/params.test.ts; it must be today's output of
    # tools/gen_params_vectors.py, every valid list must match the schema and read back, and
    # Python must refuse every record the page is told to refuse.
    import importlib.util
    from pathlib import Path

    import jsonschema

    from curvewright.parameters import SPEC

    root = Path(__file__).resolve().parent.parent
    spec = importlib.util.spec_from_file_location(
        "gen_params_vectors", root / "tools" / "gen_params_vectors.py"
    )
    assert spec is not None and spec.loader is not None
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    fresh = json.loads(json.dumps(gen.build(), allow_nan=False))
    stored = json.loads((root / "tests" / "data" / "params_vectors.json").read_text("utf-8"))
    assert stored == fresh, "regenerate: PYTHONPATH=src python tools/gen_params_vectors.py"
    check = jsonschema.Draft202012Validator(SPEC)
    for records in stored["valid"].values():
        for r in records:
            check.validate(r)
        assert Parameters.from_json(records).to_json() == records
    for name, r in stored["invalid"].items():
        assert not check.is_valid(r), name
        with pytest.raises(ParameterError):
            Parameter.from_json(r)
