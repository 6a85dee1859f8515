"""The parameter record: one typed setting per parameter, from ``fit()`` to the page and back.

A :class:`Parameter` holds what a user edits about one parameter of a fit: its value (the start,
or after a fit the estimate), its bounds, whether it is held fixed, a link expression that ties it
to other parameters, and its scope in a fit of several groups (one value shared by every group, or
one per group). A :class:`Parameters` is the ordered set of them for one model. It has the one
validator (:meth:`Parameters.validated`) and the one rule for bringing a value inside its bounds
(:meth:`Parameters.inside_bounds`, which leaves a note whenever it moves one), so that ``fit()``,
the widget and a saved result all agree on what a setting means. ``fit(start=, fixed=, bounds=,
links=)`` are shorthand, converted once by :meth:`Parameters.from_shorthand`.

The JSON form (:meth:`Parameter.to_json`) is what the widget syncs, the page sends with a Fit and
a saved result holds. It is written down once, as a JSON Schema in ``params_spec.json``: this
module refuses to import while :class:`Parameter`'s fields or :data:`SCOPES` differ from it, and
``js/params.ts`` types the page's records from the same file.
"""

from __future__ import annotations

import importlib.resources
import json
import math
from collections.abc import Collection, Iterable, Iterator, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any, Final, Literal

from .errors import FormulaError, ParameterError
from .expr import Expr
from .models import Model, as_number, unknown_name_message

__all__ = [
    "SCOPES",
    "SPEC",
    "Moved",
    "Parameter",
    "Parameters",
    "Scope",
    "check_link",
    "move_inside",
]

Scope = Literal["shared", "per_group"]
SCOPES: tuple[Scope, ...] = ("shared", "per_group")

_SPEC_FILE: Final = "params_spec.json"
#: The JSON Schema of one record's JSON form (``params_spec.json``), shared with js/params.ts.
SPEC: Final[Mapping[str, Any]] = json.loads(
    importlib.resources.files("curvewright").joinpath(_SPEC_FILE).read_text(encoding="utf-8")
)


@dataclass(frozen=True, slots=True)
class Parameter:
    """One parameter's setting for a fit.

    Parameters
    ----------
    name : str
        The model's parameter name.
    value : float
        Starting value before a fit, the estimate after one; for a fixed parameter, the value it
        is held at. A linked parameter's value is computed from its link.
    lower, upper : float
        Bounds, ``-inf``/``inf`` for none.
    fixed : bool
        Held at ``value`` during the fit.
    link : str or None
        An expression of other parameters (e.g. ``"2*baseline"``) that gives this one's value.
    scope : {"shared", "per_group"}
        In a fit of several groups: one value for all groups, or one per group.
    """

    name: str
    value: float
    lower: float = -math.inf
    upper: float = math.inf
    fixed: bool = False
    link: str | None = None
    scope: Scope = "shared"

    @property
    def free(self) -> bool:
        """Adjusted by the fit: neither fixed nor linked."""
        return not self.fixed and self.link is None

    def to_json(self) -> dict[str, Any]:
        """JSON-ready form (the schema in ``params_spec.json``).

        Infinite bounds are ``null`` (JSON has no infinity); so is a value that is not a finite
        number (a link not yet computed, or a start left to the guided start).
        """
        return {
            "name": self.name,
            "value": self.value if math.isfinite(self.value) else None,
            "lower": None if math.isinf(self.lower) else self.lower,
            "upper": None if math.isinf(self.upper) else self.upper,
            "fixed": self.fixed,
            "link": self.link,
            "scope": self.scope,
        }

    @classmethod
    def from_json(cls, d: object, name: str | None = None) -> Parameter:
        """Read :meth:`to_json` output (or what the page sends), checking every field's type.

        Parameters
        ----------
        d : mapping
            ``{"value", "lower", "upper", "fixed", "link", "scope"}``; ``name`` may be omitted
            when given separately. Missing bounds mean none, missing flags their defaults.
        name : str, optional
            The parameter's name when ``d`` is keyed by it.

        Raises
        ------
        ParameterError
            A field of the wrong type, an unknown field or scope.
        """
        if not isinstance(d, Mapping):
            raise ParameterError(
                f"a parameter setting must be a mapping with value, lower, upper, fixed, link "
                f"and scope; got {type(d).__name__}."
            )
        nm = d.get("name", name)
        if not isinstance(nm, str):
            raise ParameterError(f"a parameter setting needs a name, got {nm!r}.")
        extra = sorted(set(d) - {"name", "value", "lower", "upper", "fixed", "link", "scope"})
        if extra:
            raise ParameterError(
                f"Parameter {nm!r}: unknown field(s) {extra}; a setting has value, lower, upper, "
                "fixed, link and scope."
            )
        what = f"Parameter {nm!r}"
        fixed = d.get("fixed", False)
        if not isinstance(fixed, bool):
            raise ParameterError(f"{what}: fixed must be true or false, got {fixed!r}.")
        link = d.get("link")
        if link is not None and not isinstance(link, str):
            raise ParameterError(f"{what}: link must be an expression text or null, got {link!r}.")
        scope = d.get("scope", "shared")
        if scope not in SCOPES:
            raise ParameterError(f"{what}: scope must be one of {SCOPES}, got {scope!r}.")
        return cls(
            name=nm,
            value=_bound(d.get("value"), math.nan, f"{what}: value"),
            lower=_bound(d.get("lower"), -math.inf, f"{what}: lower bound"),
            upper=_bound(d.get("upper"), math.inf, f"{what}: upper bound"),
            fixed=fixed,
            link=link.strip() if isinstance(link, str) and link.strip() else None,
            scope=scope,
        )


def _bound(v: object, none: float, what: str) -> float:
    return none if v is None else as_number(v, what, allow_nan=True)


def _check_spec(spec: Mapping[str, Any]) -> None:
    """Fail at import while the record and its JSON Schema disagree (a fault of the package)."""
    where = f"curvewright/{_SPEC_FILE}"
    props = spec.get("properties")
    if not isinstance(props, dict):
        raise RuntimeError(f"{where} must be a JSON Schema with 'properties'.")
    mine = [f.name for f in fields(Parameter)]
    if list(props) != mine or list(spec.get("required", ())) != mine:
        raise RuntimeError(
            f"{where} lists fields {list(props)} (required {spec.get('required')}) but "
            f"Parameter has {mine}; change both together (and js/params.ts)."
        )
    if tuple(props["scope"].get("enum", ())) != SCOPES:
        raise RuntimeError(f"{where}: scope must be one of {SCOPES}, as parameters.SCOPES says.")


def move_inside(lower: float, upper: float, value: float) -> float:
    """The one rule for bringing a value inside ``[lower, upper]``.

    A value inside is kept. Outside a finite range it goes to the nearest bound, moved 1 % of
    the range inwards (a solver started exactly on a bound may not leave it); outside a one-sided
    range, to the bound moved inwards by a tenth of its size (at least 1e-3).
    """
    if lower <= value <= upper:
        return value
    if math.isfinite(lower) and math.isfinite(upper):
        step = 0.01 * (upper - lower)
        return lower + step if value < lower else upper - step
    if value < lower:
        return lower + max(abs(lower) * 0.1, 1e-3)
    return upper - max(abs(upper) * 0.1, 1e-3)


_check_spec(SPEC)


@dataclass(frozen=True, slots=True)
class Moved:
    """A note that :meth:`Parameters.inside_bounds` moved a value inside its bounds.

    Attributes
    ----------
    name : str
        The parameter moved.
    before, after : float
        Its value before and after.
    lower, upper : float
        The bounds it was moved inside.
    text : str
        One sentence for people saying so.
    """

    name: str
    before: float
    after: float
    lower: float
    upper: float
    text: str


class Parameters(Mapping[str, Parameter]):
    """The ordered, immutable set of :class:`Parameter` records of one model.

    Build it with :meth:`for_model` or :meth:`from_shorthand`; check it with :meth:`validated`.
    It is a mapping from name to record, in the model's parameter order.

    Examples
    --------
    >>> from curvewright import catalog
    >>> m = catalog()["michaelis_menten"]
    >>> p = Parameters.from_shorthand(m, start={"Km": 2.0}, fixed={"Vmax": 10.0})
    >>> p["Vmax"].fixed, p["Km"].value, p.free
    (True, 2.0, ('Km',))
    """

    __slots__ = ("_records",)

    def __init__(self, records: Iterable[Parameter]) -> None:
        recs: dict[str, Parameter] = {}
        for r in records:
            if not isinstance(r, Parameter):
                raise ParameterError(f"Parameters holds Parameter records, got {type(r).__name__}.")
            if r.name in recs:
                raise ParameterError(f"Parameter {r.name!r} appears twice; give it once.")
            recs[r.name] = r
        self._records = recs

    # -------------------------------------------------------------------------- mapping
    def __getitem__(self, name: str) -> Parameter:
        try:
            return self._records[name]
        except KeyError:
            raise KeyError(
                unknown_name_message(name, list(self._records), "these parameters")
            ) from None

    def __iter__(self) -> Iterator[str]:
        return iter(self._records)

    def __len__(self) -> int:
        return len(self._records)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Parameters):
            return NotImplemented
        return list(self._records.values()) == list(other._records.values())

    def __hash__(self) -> int:
        return hash(tuple(self._records.values()))

    def __repr__(self) -> str:
        inner = ", ".join(
            f"{r.name}={r.value:g}{' fixed' if r.fixed else ''}{f' = {r.link}' if r.link else ''}"
            for r in self._records.values()
        )
        return f"Parameters({inner})"

    # -------------------------------------------------------------------------- views
    @property
    def names(self) -> tuple[str, ...]:
        """Every parameter's name, in order."""
        return tuple(self._records)

    @property
    def free(self) -> tuple[str, ...]:
        """Names of the parameters the fit adjusts (neither fixed nor linked)."""
        return tuple(n for n, r in self._records.items() if r.free)

    @property
    def fixed(self) -> dict[str, float]:
        """Held parameters and their values."""
        return {n: r.value for n, r in self._records.items() if r.fixed}

    @property
    def links(self) -> dict[str, str]:
        """Linked parameters and their expressions."""
        return {n: r.link for n, r in self._records.items() if r.link is not None}

    def as_values(self) -> dict[str, float]:
        """Every parameter's value by name."""
        return {n: r.value for n, r in self._records.items()}

    def replace(self, name: str, **changes: Any) -> Parameters:
        """A copy with one record changed (fields as keywords); not validated."""
        return Parameters(
            replace(r, **changes) if n == name else r
            for n, r in ((n, self[n]) for n in self._records)
        )

    def with_values(self, values: Mapping[str, float]) -> Parameters:
        """A copy with new values for the named parameters; not validated."""
        return Parameters(
            replace(r, value=float(values[n])) if n in values else r
            for n, r in self._records.items()
        )

    # -------------------------------------------------------------------------- JSON
    def to_json(self) -> list[dict[str, Any]]:
        """The records in order, each as :meth:`Parameter.to_json`."""
        return [r.to_json() for r in self._records.values()]

    @classmethod
    def from_json(cls, data: object) -> Parameters:
        """Inverse of :meth:`to_json`; also takes a mapping ``{name: setting}``.

        Raises
        ------
        ParameterError
            Not a list or mapping of settings, or a setting of the wrong shape.
        """
        if isinstance(data, Mapping):
            return cls(Parameter.from_json(v, name=str(k)) for k, v in data.items())
        if isinstance(data, (list, tuple)):
            return cls(Parameter.from_json(v) for v in data)
        raise ParameterError(
            f"parameter settings must be a list of records or a mapping name -> setting, got "
            f"{type(data).__name__}."
        )

    # -------------------------------------------------------------------------- building
    @classmethod
    def for_model(cls, model: Model, values: Mapping[str, float] | None = None) -> Parameters:
        """The model's defaults and bounds, with ``values`` where given, nothing fixed.

        Values are taken as given (check them with :meth:`validated`, or bring them inside the
        bounds with :meth:`inside_bounds`).
        """
        given = values or {}
        return cls(
            Parameter(p.name, float(given.get(p.name, p.value)), p.lower, p.upper)
            for p in model.params
        )

    @classmethod
    def from_shorthand(
        cls,
        model: Model,
        *,
        start: Mapping[str, float] | None = None,
        fixed: Mapping[str, float] | Iterable[str] | None = None,
        bounds: Mapping[str, tuple[float | None, float | None]] | None = None,
        links: Mapping[str, str] | None = None,
        base: Parameters | None = None,
    ) -> Parameters:
        """Turn ``fit()``'s ``start=``, ``fixed=``, ``bounds=`` and ``links=`` into records.

        Parameters
        ----------
        model : Model
        start : mapping, optional
            Starting values by name.
        fixed : mapping or iterable of str, optional
            ``{name: value}``, or names held at their start value.
        bounds : mapping, optional
            ``{name: (lower, upper)}`` with None for no bound; they replace the model's bounds.
        links : mapping, optional
            ``{name: "expression of other parameters"}``.
        base : Parameters, optional
            Records to start from instead of the model's defaults.

        Raises
        ------
        ParameterError
            An argument of the wrong shape or type, or a name the model does not have (with a
            spelling hint). Consistency (bounds, links, positivity) is :meth:`validated`'s job.
        """
        recs = dict(base if base is not None else cls.for_model(model))
        where = f"model {model.name!r}"

        def check(names: Iterable[str], arg: str) -> None:
            for n in names:
                if n not in recs:
                    raise ParameterError(
                        unknown_name_message(str(n), list(recs), f"{where} (in {arg}=)")
                    )

        if start is not None:
            if not isinstance(start, Mapping):
                raise ParameterError(
                    f"start must be a mapping {{name: value}}, got {type(start).__name__}."
                )
            check(start, "start")
            for k, v in start.items():
                recs[k] = replace(recs[k], value=as_number(v, f"start value of {k!r}"))
        if bounds is not None:
            if not isinstance(bounds, Mapping):
                raise ParameterError(
                    "bounds must be a mapping {name: (lower, upper)}, e.g. {'k': (0, None)}; "
                    f"got {type(bounds).__name__}."
                )
            check(bounds, "bounds")
            for k, pair in bounds.items():
                if not isinstance(pair, (tuple, list)) or len(pair) != 2:
                    raise ParameterError(
                        f"bounds[{k!r}] must be a pair (lower, upper) with None for no bound; "
                        f"got {pair!r}."
                    )
                lo = _bound(pair[0], -math.inf, f"lower bound of {k!r}")
                hi = _bound(pair[1], math.inf, f"upper bound of {k!r}")
                recs[k] = replace(recs[k], lower=lo, upper=hi)
        if fixed is not None:
            held: Mapping[str, object]
            if isinstance(fixed, str):
                held = {fixed: None}
            elif isinstance(fixed, Mapping):
                held = fixed
            else:
                held = dict.fromkeys(fixed)
            check(held, "fixed")
            for k, raw in held.items():
                # Held by name: at its start, or the model's default where no start is set.
                now = recs[k].value if math.isfinite(recs[k].value) else model.param(k).value
                value = now if raw is None else as_number(raw, f"fixed value of {k!r}")
                recs[k] = replace(recs[k], value=value, fixed=True)
        if links:
            if not isinstance(links, Mapping):
                raise ParameterError(
                    "links must be a mapping {name: 'expression of other parameters'}, e.g. "
                    f"{{'high': '2*low'}}; got {type(links).__name__}."
                )
            check(links, "links")
            for k, text in links.items():
                if not isinstance(text, str):
                    raise ParameterError(
                        f"links[{k!r}] must be an expression text such as '2*low', got {text!r}."
                    )
                recs[k] = replace(recs[k], link=text.strip())
        return cls(recs.values())

    # -------------------------------------------------------------------------- rules
    def validated(self, model: Model, *, allow_unset: bool = False) -> Parameters:
        """The one validator: these records are a consistent setting of ``model``'s parameters.

        Checks every parameter is present and no other; values finite (a linked value may be
        NaN until computed); bounds numbers with lower <= upper; a parameter the model declares
        positive has no negative value or lower bound; a free value inside its bounds; a link
        parses, uses only other parameters that are not themselves linked, never ``x``, and is
        not also fixed. Returns the records in the model's order.

        Parameters
        ----------
        model : Model
        allow_unset : bool
            Let a free value be NaN: no start given, a guided start will choose it (``fit()``).

        Raises
        ------
        ParameterError
            The first inconsistency found, with what to change.
        """
        where = f"model {model.name!r}"
        for n in self._records:
            if n not in model.param_names:
                raise ParameterError(unknown_name_message(n, model.param_names, where))
        missing = [n for n in model.param_names if n not in self._records]
        if missing:
            raise ParameterError(
                f"settings for {missing} are missing; every parameter of {where} needs one."
            )
        links = self.links
        for n in model.param_names:
            r, p = self._records[n], model.param(n)
            what = f"Parameter {n!r}"
            if r.scope not in SCOPES:
                raise ParameterError(f"{what}: scope must be one of {SCOPES}, got {r.scope!r}.")
            if math.isnan(r.lower) or math.isnan(r.upper):
                raise ParameterError(f"{what}: bounds must be numbers (or none), not NaN.")
            if r.lower > r.upper:
                raise ParameterError(
                    f"{what}: lower bound {r.lower:g} is above upper bound {r.upper:g}; swap "
                    "them or widen the range."
                )
            if p.positive and r.lower < 0:
                raise ParameterError(
                    f"{what}: the model declares it positive ({p.description or 'by its meaning'}"
                    f"), so its lower bound cannot be {r.lower:g}; use 0 or more."
                )
            if r.link is not None:
                if r.fixed:
                    raise ParameterError(
                        f"{n!r} is both fixed and linked; choose one (remove it from fixed= or "
                        "links=)."
                    )
                check_link(model, n, r.link, links)
                continue
            kind = "fixed value" if r.fixed else "value"
            if allow_unset and not r.fixed and math.isnan(r.value):
                continue
            if not math.isfinite(r.value):
                raise ParameterError(f"{what}: {kind} must be a finite number, got {r.value}.")
            if p.positive and r.value < 0:
                raise ParameterError(
                    f"{what}: the model declares it positive, so its {kind} cannot be {r.value:g}."
                )
            if not r.fixed and not r.lower <= r.value <= r.upper:
                raise ParameterError(
                    f"{what}: start value {r.value:g} lies outside its bounds [{r.lower:g}, "
                    f"{r.upper:g}]; give a start inside them or widen the bounds."
                )
        return Parameters(self._records[n] for n in model.param_names)

    def inside_bounds(
        self, only: Collection[str] | None = None
    ) -> tuple[Parameters, tuple[Moved, ...]]:
        """Free values moved inside their bounds by :func:`move_inside`, with a note per move.

        Fixed and linked parameters are left alone (a fixed value is the user's statement; a
        linked value is computed).

        Parameters
        ----------
        only : collection of str, optional
            Move only these parameters' values (e.g. the ones a guided start chose, never a
            user's); by default every free one.
        """
        notes: list[Moved] = []
        out: list[Parameter] = []
        for r in self._records.values():
            if (
                r.free
                and (only is None or r.name in only)
                and math.isfinite(r.value)
                and not r.lower <= r.value <= r.upper
            ):
                v = move_inside(r.lower, r.upper, r.value)
                text = (
                    f"The start of {r.name!r} ({r.value:.6g}) lay outside its bounds "
                    f"[{r.lower:g}, {r.upper:g}] and was moved to {v:.6g}."
                )
                notes.append(Moved(r.name, r.value, v, r.lower, r.upper, text))
                out.append(replace(r, value=v))
            else:
                out.append(r)
        return Parameters(out), tuple(notes)


def check_link(model: Model, name: str, text: str, links: Iterable[str]) -> Expr:
    """Parse one link and check what it uses (the one link rule; :class:`ParameterError`)."""
    try:
        e = Expr.parse(text)
    except FormulaError as exc:
        raise ParameterError(f"links[{name!r}] = {text!r} cannot be parsed: {exc}") from exc
    for used in e.names:
        if used == "x":
            raise ParameterError(
                f"links[{name!r}] = {text!r} uses x; a link may use only other parameters."
            )
        if used not in model.param_names:
            raise ParameterError(
                f"links[{name!r}] = {text!r}: "
                + unknown_name_message(used, model.param_names, f"model {model.name!r}")
            )
        if used == name or used in links:
            raise ParameterError(
                f"links[{name!r}] = {text!r} uses {used!r}, which is itself linked; write every "
                "link in terms of free or fixed parameters."
            )
    return e
