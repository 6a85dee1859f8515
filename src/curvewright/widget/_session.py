"""The session file format: a whole widget analysis written to, and read from, one JSON file.

``write`` turns a :class:`CurveBench` into the file's document (schema in ``session_spec.json``,
described field by field in DEVELOPERS.md); ``read`` checks a document and builds a new widget
from it. Reading never runs code from the file: formulas are parsed by the whitelist parser
(``expr.py``) and a Python-function model must be passed in by the caller. Everything is built
into new objects; a file that fails any check raises :class:`~curvewright.errors.SessionError`
(or the record's own error) and leaves nothing half-made.
"""

from __future__ import annotations

import hashlib
import importlib.resources
import json
import math
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any, Final

import numpy as np
import pandas as pd

from .._version import __version__
from ..batch_result import BatchResult
from ..catalog import catalog
from ..data import Dataset
from ..errors import CurvewrightError, SessionError
from ..global_result import GlobalResult
from ..models import Model
from ..result import FitResult, _dec, _dec_array, _dec_map, _enc, _enc_array, _enc_map
from ..result import _restore_model as restore_model
from . import _state

if TYPE_CHECKING:
    from ._widget import CurveBench

__all__ = ["SCHEMA", "SCHEMA_VERSION", "SPEC_FILE", "load_document", "read", "write", "write_file"]

SCHEMA: Final = "curvewright.session"
#: The JSON Schema of the document, shipped beside this module (the one description of it).
SPEC_FILE: Final = "session_spec.json"
SPEC: Final[Mapping[str, Any]] = json.loads(
    importlib.resources.files("curvewright.widget").joinpath(SPEC_FILE).read_text("utf-8")
)
#: The schema version written, from the spec. Bump it (in session_spec.json) when a field is
#: added, removed or changes meaning, and say in DEVELOPERS.md what changed.
SCHEMA_VERSION: Final[int] = int(SPEC["properties"]["schema_version"]["const"])
_FIELDS: Final[tuple[str, ...]] = tuple(SPEC["required"])

ModelsArg = Mapping[str, "Model | Callable[..., Any]"] | None


# ----------------------------------------------------------------------------- encoding
def _column(name: str, values: pd.Series | np.ndarray) -> dict[str, Any]:
    """One data column with its kind; floats exactly (repr round-trips every double)."""
    s = pd.Series(values)
    if pd.api.types.is_bool_dtype(s):
        return {"name": name, "kind": "bool", "values": [bool(v) for v in s]}
    if pd.api.types.is_integer_dtype(s):
        return {"name": name, "kind": "int", "values": [int(v) for v in s]}
    if pd.api.types.is_float_dtype(s):
        return {"name": name, "kind": "float", "values": [_enc(float(v)) for v in s]}
    return {
        "name": name,
        "kind": "text",
        "values": [
            None if v is None or (isinstance(v, float) and math.isnan(v)) else str(v) for v in s
        ],
    }


def _missing(v: object) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def _decode_column(col: Mapping[str, Any]) -> tuple[str, np.ndarray | pd.Series]:
    name, kind, values = col["name"], col["kind"], col["values"]
    if not isinstance(name, str) or not isinstance(values, list):
        raise SessionError("a data column needs a text name and a list of values.")
    if kind == "float":
        return name, np.array([_dec(v) for v in values], dtype=float)
    if kind == "int":
        if not all(isinstance(v, int) and not isinstance(v, bool) for v in values):
            raise SessionError(f"column {name!r} is marked int but holds other values.")
        return name, np.array(values, dtype=np.int64)
    if kind == "bool":
        if not all(isinstance(v, bool) for v in values):
            raise SessionError(f"column {name!r} is marked bool but holds other values.")
        return name, np.array(values, dtype=bool)
    if kind == "text":
        if not all(v is None or isinstance(v, str) for v in values):
            raise SessionError(f"column {name!r} is marked text but holds other values.")
        return name, pd.Series(values, dtype=object)
    raise SessionError(f"column {name!r} has an unknown kind {kind!r}.")


def _dataset_json(ds: Dataset) -> dict[str, Any]:
    d = ds.to_dict()
    for k in ("x", "y", "sigma"):
        if d[k] is not None:
            d[k] = [_enc(v) for v in d[k]]
    return d


def _dataset_plain(d: object) -> dict[str, Any]:
    """A dataset's to_dict form back from the file's exact encoding."""
    if not isinstance(d, Mapping):
        raise SessionError("a dataset of the session file is not a mapping.")
    raw = dict(d)
    for k in ("x", "y", "sigma"):
        if raw.get(k) is not None:
            raw[k] = [_dec(v) for v in raw[k]]
    return raw


def _option(v: Any, name: str) -> Any:
    """A fit option as JSON: tagged where JSON alone would lose the type."""
    if v is None or isinstance(v, (bool, str)):
        return v
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return {"float": _enc(float(v))}
    if isinstance(v, np.ndarray) and v.dtype.kind in "fiub":
        return {"array": _enc_array(np.asarray(v, dtype=float))}
    if isinstance(v, Mapping) and all(isinstance(k, str) for k in v):
        return {"mapping": {k: _option(x, f"{name}[{k!r}]") for k, x in v.items()}}
    if isinstance(v, (list, tuple)):
        return {"list": [_option(x, name) for x in v]}
    raise SessionError(
        f"the fit option {name}={type(v).__name__} cannot be written to a session file (only "
        "numbers, text, arrays, lists and mappings can); set it again after loading."
    )


def _option_from(v: Any) -> Any:
    if v is None or isinstance(v, (bool, str, int)):
        return v
    if isinstance(v, Mapping) and len(v) == 1:
        (tag, x), *_ = v.items()
        if tag == "float":
            return _dec(x)
        if tag == "array":
            return _dec_array(x)
        if tag == "mapping" and isinstance(x, Mapping):
            return {str(k): _option_from(y) for k, y in x.items()}
        if tag == "list" and isinstance(x, list):
            return [_option_from(y) for y in x]
    raise SessionError(f"a fit option in the session file is not readable: {v!r:.80}.")


def canonical(obj: object) -> bytes:
    """The canonical encoding the fingerprint is taken over (sorted keys, no spaces, ASCII)."""
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    ).encode("ascii")


def fingerprint(data: Mapping[str, Any]) -> str:
    """``"sha256:<hex>"`` of the data section without its own fingerprint field."""
    body = {k: v for k, v in data.items() if k != "fingerprint"}
    return "sha256:" + hashlib.sha256(canonical(body)).hexdigest()


# ------------------------------------------------------------------------------- write
def _data_section(bench: CurveBench) -> tuple[str, dict[str, Any], dict[str, Any]]:
    """The kind, the data section and the setup (which columns play which role)."""
    rv, g, ds = bench._review, bench._groups, bench._ds
    if rv is not None:
        datasets = [None if d is None else _dataset_json(d) for d in rv.batch.datasets]
        return "batch", {"datasets": datasets}, {}
    if g is not None:
        names = [g.x, g.y, *g.by]
        sigma_name: str | None = None
        if isinstance(g.sigma, str):
            sigma_name = g.sigma
            names.append(g.sigma)
        cols = [_column(n, g.table[n]) for n in dict.fromkeys(names)]
        if isinstance(g.sigma, np.ndarray):
            sigma_name = _free_name("sigma", {c["name"] for c in cols})
            cols.append(_column(sigma_name, g.sigma.astype(float)))
        setup = {"x": g.x, "y": g.y, "by": list(g.by), "sigma": sigma_name}
        return "groups", {"columns": cols}, setup
    # One curve: every input row, the rows the dataset dropped (missing values) as NaN.
    n = ds.n_input
    xs = np.full(n, np.nan)
    ys = np.full(n, np.nan)
    xs[ds.row] = ds.x
    ys[ds.row] = ds.y
    xn = ds.x_label or "x"
    yn = ds.y_label if ds.y_label and ds.y_label != xn else _free_name("y", {xn})
    cols = [_column(xn, xs), _column(yn, ys)]
    sigma_name = None
    if ds.sigma is not None:
        sigma_name = _free_name("sigma", {xn, yn})
        ss = np.full(n, np.nan)
        ss[ds.row] = ds.sigma
        cols.append(_column(sigma_name, ss))
    return "curves", {"columns": cols}, {"x": xn, "y": yn, "by": None, "sigma": sigma_name}


def _free_name(base: str, taken: set[str]) -> str:
    name, k = base, 2
    while name in taken:
        name, k = f"{base}_{k}", k + 1
    return name


def _model_entry(name: str, model: Model, builtin: Mapping[str, Model]) -> dict[str, Any]:
    if builtin.get(name) is model:
        return {"name": name, "source": "catalog"}
    source = "formula" if model.expr is not None else "python"
    return {"name": name, "source": source, "model": model.to_dict()}


def _index(history: list[Any], obj: object) -> int | None:
    for i, h in enumerate(history):
        if h is obj:
            return i
    return None


def write(bench: CurveBench) -> dict[str, Any]:
    """The session document of a widget (JSON-ready; see ``session_spec.json``).

    Raises
    ------
    SessionError
        A fit is running, or a fit option cannot be written (e.g. a Python function).
    """
    if bench.fitting:
        raise SessionError("a fit is running; wait for it (widget.wait()) before saving.")
    kind, data, setup = _data_section(bench)
    data["fingerprint"] = fingerprint(data)
    builtin = catalog()
    history = list(bench._history)
    memory: dict[str, Any] = {}
    for name, mem in bench._memory.items():
        memory[name] = {
            "params": _state.params_json(mem.settings),
            "result": _index(history, mem.result),
            "global_result": _index(history, mem.global_result),
            "group_values": {lab: _enc_map(v) for lab, v in mem.group_values.items()},
        }
    rv = bench._review
    review = None
    batch = None
    if rv is not None:
        batch = rv.batch.to_dict()
        batch.pop("datasets")  # they are the data section
        review = {
            "filter": rv.filter,
            "sort": [rv.sort[0], rv.sort[1]],
            "opened": rv.batch.labels[rv.opened],
            "since": rv.since,
        }
    return {
        "schema": SCHEMA,
        "schema_version": SCHEMA_VERSION,
        "curvewright_version": __version__,
        "kind": kind,
        "data": data,
        "setup": setup,
        "models": [_model_entry(n, m, builtin) for n, m in bench._models.items()],
        "fit_options": {k: _option(v, k) for k, v in bench._fit_options.items()},
        "history": [
            {"type": "global" if isinstance(h, GlobalResult) else "fit", "result": h.to_dict()}
            for h in history
        ],
        "memory": memory,
        "result": _index(history, bench.result),
        "state": bench.snapshot(),
        "batch": batch,
        "review": review,
    }


def write_file(bench: CurveBench, path: str | Path) -> None:
    """Write :func:`write`'s document to ``path`` (UTF-8 JSON, strict: no NaN literals)."""
    text = json.dumps(write(bench), allow_nan=False, indent=1)
    try:
        Path(path).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise SessionError(f"Cannot write the session file {str(path)!r}: {exc}") from exc


# -------------------------------------------------------------------------------- read
def _need(d: Mapping[str, Any], key: str, kind: type | tuple[type, ...], where: str) -> Any:
    if key not in d:
        raise SessionError(f"the session file has no {where}{key!r}; the file is damaged.")
    v = d[key]
    if not isinstance(v, kind):
        raise SessionError(f"the session file's {where}{key!r} has the wrong type; it is damaged.")
    return v


def check_header(doc: object) -> Mapping[str, Any]:
    """The document if it is a session of a schema version this package reads."""
    if not isinstance(doc, Mapping) or doc.get("schema") != SCHEMA:
        raise SessionError(
            "this is not a curvewright session file (no 'schema': 'curvewright.session'); "
            "load a file written by CurveBench.save()."
        )
    version = doc.get("schema_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise SessionError(f"the session file's schema_version {version!r} is not a version.")
    if version > SCHEMA_VERSION:
        raise SessionError(
            f"this session file uses session schema version {version} (written by curvewright "
            f"{doc.get('curvewright_version')!r}); this curvewright {__version__} reads version "
            f"{SCHEMA_VERSION} and older. Upgrade curvewright to load it: "
            "pip install --upgrade curvewright."
        )
    missing = [k for k in _FIELDS if k not in doc]
    if missing:
        raise SessionError(
            f"the session file lacks the fields {missing}; it is truncated or damaged. Load an "
            "unmodified file written by CurveBench.save()."
        )
    return doc


def _check_data(data: Mapping[str, Any]) -> None:
    stored = data.get("fingerprint")
    if stored != fingerprint(data):
        raise SessionError(
            "the data in this session file do not match its fingerprint: the data were changed "
            "after saving (or the file is damaged). Load the file as it was saved, or start a "
            "new analysis from the data."
        )


def _registry(entries: list[Any], models: ModelsArg) -> dict[str, Model]:
    builtin = catalog()
    given = dict(models or {})
    out: dict[str, Model] = {}
    for e in entries:
        if not isinstance(e, Mapping):
            raise SessionError("a model entry of the session file is not a mapping.")
        name = _need(e, "name", str, "model entry ")
        source = e.get("source")
        if source == "catalog":
            if name not in builtin:
                raise SessionError(f"the session's catalog model {name!r} is not in this version.")
            out[name] = builtin[name]
        elif source == "formula":
            mdict = _need(e, "model", Mapping, f"model {name!r} ")
            if not isinstance(mdict.get("formula"), str):
                raise SessionError(f"model {name!r} is marked formula but has no formula text.")
            out[name] = _named(restore_model(mdict, None), name)
        elif source == "python":
            mdict = _need(e, "model", Mapping, f"model {name!r} ")
            fn = given.get(name)
            if fn is None:
                raise SessionError(
                    f"the session uses the Python-function model {name!r}, which a file cannot "
                    "hold (loading never runs code from a file); pass the function again: "
                    f"curvewright.load_session(path, models={{{name!r}: your_function}})."
                )
            out[name] = _named(restore_model(mdict, fn), name)
        else:
            raise SessionError(f"model {name!r} has an unknown source {source!r}.")
    if not out:
        raise SessionError("the session file names no model; it is damaged.")
    return out


def _named(model: Model, name: str) -> Model:
    if model.name != name:
        raise SessionError(f"model entry {name!r} holds a model called {model.name!r}.")
    return model


def _result(entry: object, registry: Mapping[str, Model]) -> FitResult | GlobalResult:
    if not isinstance(entry, Mapping):
        raise SessionError("a fit in the session's history is not a mapping.")
    d = _need(entry, "result", Mapping, "fit ")
    mdict = _need(d, "model", Mapping, "fit result ")
    model = registry.get(str(mdict.get("name")))
    given = model if model is not None and model.expr is None else None
    if entry.get("type") == "global":
        return GlobalResult.from_dict(d, model=given)
    if entry.get("type") == "fit":
        return FitResult.from_dict(d, model=given)
    raise SessionError(f"a fit in the history has an unknown type {entry.get('type')!r}.")


def _pick(history: list[Any], i: object, cls: type | tuple[type, ...], what: str) -> Any:
    if i is None:
        return None
    if not isinstance(i, int) or isinstance(i, bool) or not 0 <= i < len(history):
        raise SessionError(f"the session's {what} points to no fit in its history.")
    if not isinstance(history[i], cls):
        raise SessionError(f"the session's {what} points to the wrong kind of fit.")
    return history[i]


def read(doc: object, bench_cls: type[CurveBench], models: ModelsArg = None) -> CurveBench:
    """A new widget built from a session document (nothing else is touched).

    Raises
    ------
    SessionError
        Not a session, a newer schema, data that do not match the fingerprint, a missing
        Python-function model, or a damaged document.
    """
    head = check_header(doc)
    try:
        return _build(head, bench_cls, models)
    except CurvewrightError:
        raise
    except Exception as exc:  # a damaged file may break any step: say so, in our words
        raise SessionError(
            f"the session file is damaged or incomplete ({type(exc).__name__}: {exc!s:.200}); "
            "load an unmodified file written by CurveBench.save()."
        ) from exc


def _build(doc: Mapping[str, Any], bench_cls: type[CurveBench], models: ModelsArg) -> CurveBench:
    kind = doc.get("kind")
    data = _need(doc, "data", Mapping, "")
    _check_data(data)
    registry = _registry(_need(doc, "models", list, ""), models)
    state = _need(doc, "state", Mapping, "")
    shown = _need(state, "model", str, "state ")
    if shown not in registry:
        raise SessionError(f"the session shows model {shown!r}, which it does not list.")
    options = {str(k): _option_from(v) for k, v in _need(doc, "fit_options", Mapping, "").items()}
    history = [_result(h, registry) for h in _need(doc, "history", list, "")]
    ui_x, ui_y = state.get("x_scale", "linear"), state.get("y_scale", "linear")

    if kind == "batch":
        raw = dict(_need(doc, "batch", Mapping, ""))
        datasets = _need(data, "datasets", list, "data ")
        raw["datasets"] = [None if d is None else _dataset_plain(d) for d in datasets]
        mdict = _need(raw, "model", Mapping, "batch ")
        b_model = registry.get(str(mdict.get("name")))
        given = b_model if b_model is not None and b_model.expr is None else None
        batch = BatchResult.from_dict(raw, model=given)
        if len(batch.datasets) != len(batch.labels):
            raise SessionError("the session's batch and its data have different group counts.")
        review = _need(doc, "review", Mapping, "")
        bench = bench_cls(batch, x_scale=ui_x, y_scale=ui_y, fit_options=options)
    elif kind in ("curves", "groups"):
        setup = _need(doc, "setup", Mapping, "")
        cols = [_decode_column(c) for c in _need(data, "columns", list, "data ")]
        table = pd.DataFrame(dict(cols))
        by = setup.get("by") if kind == "groups" else None
        bench = bench_cls(
            table,
            x=setup.get("x"),
            y=setup.get("y"),
            by=by,
            sigma=setup.get("sigma"),
            model=registry[shown],
            exclude=state.get("excluded", []),
            x_scale=ui_x,
            y_scale=ui_y,
            fit_options=options,
        )
        review = None
    else:
        raise SessionError(f"the session's kind {kind!r} is not 'curves', 'groups' or 'batch'.")

    try:
        _fill(bench, doc, registry, history, state, review, bench._memory_type)
    except BaseException:
        bench.close()
        raise
    return bench


def _fill(
    bench: CurveBench,
    doc: Mapping[str, Any],
    registry: dict[str, Model],
    history: list[FitResult | GlobalResult],
    state: Mapping[str, Any],
    review: Mapping[str, Any] | None,
    memory_cls: Any,
) -> None:
    """Put the saved registry, fits and memory into a freshly built widget, then show it."""
    rv = bench._review
    if rv is not None and review is not None:
        opened = _need(review, "opened", str, "review ")
        if opened not in rv.batch.labels:
            raise SessionError(f"the review opens group {opened!r}, which the batch lacks.")
        if rv.batch.labels[rv.opened] != opened:
            bench.review_open(opened)
        # The accepted refit is one object in the batch and the history (the review tells
        # "accepted" by identity); the file holds it twice, so join the equal copies again.
        accepted = rv.batch._fits.get(rv.opened) if rv.batch.edited[rv.opened] else None
        if accepted is not None:
            same = accepted.to_dict()
            history[:] = [
                accepted if isinstance(h, FitResult) and h.to_dict() == same else h for h in history
            ]
    bench._models = dict(registry)
    memory: dict[str, Any] = {}
    for name, m in _need(doc, "memory", Mapping, "").items():
        if name not in registry or not isinstance(m, Mapping):
            raise SessionError(f"the session remembers model {name!r}, which it does not list.")
        model = registry[name]
        gv = _need(m, "group_values", Mapping, f"memory of {name!r} ")
        memory[name] = memory_cls(
            settings=_state.parse_params(model, m.get("params")),
            result=_pick(history, m.get("result"), FitResult, f"memory of {name!r}"),
            group_values={str(k): _dec_map(v) for k, v in gv.items()},
            global_result=_pick(
                history, m.get("global_result"), GlobalResult, f"memory of {name!r}"
            ),
        )
    shown = str(state.get("model"))
    if shown not in memory:
        raise SessionError(f"the session shows model {shown!r} but keeps no settings for it.")
    bench._memory = memory
    bench._history = list(history)
    last = _pick(history, doc.get("result"), (FitResult, GlobalResult), "latest result")
    if rv is not None and review is not None:
        since = review.get("since")
        if not isinstance(since, int) or isinstance(since, bool) or not 0 <= since <= len(history):
            raise SessionError("the review's 'since' does not point into the history.")
        rv.since = since
        rv.filter = str(review.get("filter"))
        sort = review.get("sort")
        if not isinstance(sort, list) or len(sort) != 2 or not isinstance(sort[1], bool):
            raise SessionError("the review's sort must be [column, ascending].")
        from ._review import check_filter, check_sort

        rv.filter = check_filter(rv.filter)
        rv.sort, rv.order = (check_sort(rv.batch, sort[0]), sort[1]), None
    kept = memory[shown]
    kept_result, kept_global = kept.result, kept.global_result
    bench.restore(state)  # the checked display state: params, exclusions, axes, toggles, groups
    kept.result, kept.global_result = kept_result, kept_global
    with bench.hold_sync(), bench._internal():
        bench.model_names = list(bench._models)
        bench._show_model(shown)
        bench.result = last
        bench.status = {"state": "idle", "message": "analysis loaded from a saved session"}
        bench._review_show(json_too=True)


def load_document(path: str | Path) -> object:
    """The parsed JSON of a file (UTF-8), or our error for a missing or unreadable one."""
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise SessionError(f"Cannot read the session file {str(path)!r}: {exc}") from exc
    try:
        return json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise SessionError(
            f"{str(path)!r} is not a readable session file (not valid UTF-8 JSON: {exc!s:.120}); "
            "it may be truncated or damaged."
        ) from exc
