"""Models as data: parameters, derived quantities, curve handles and the Model itself.

A model is either a formula in the safe expression language of :mod:`curvewright.expr` (which
the front end can evaluate for live preview) or a plain Python callable ``f(x, a, b, ...)``.
Models are immutable; ``replace``/``with_param`` return new ones.
"""

from __future__ import annotations

import difflib
import functools
import inspect
import math
import pickle
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import DomainError, FormulaError, ModelError, ParameterError
from .expr import Expr, compile_many

__all__ = ["Derived", "Domain", "Handle", "Model", "Param", "StartRule", "as_number"]

Domain = Literal["all", "x>0", "x>=0"]
StartRule = Callable[[NDArray[np.float64], NDArray[np.float64]], Mapping[str, float]]
FloatArray = NDArray[np.float64]

_DOMAINS: tuple[Domain, ...] = ("all", "x>0", "x>=0")


def as_number(v: object, what: str, *, allow_nan: bool = False) -> float:
    """``v`` as a float, or :class:`ParameterError` naming ``what`` (bools are not numbers).

    Parameters
    ----------
    v : object
        The value a user gave.
    what : str
        How to name it in the message, e.g. ``"start value of 'k'"``.
    allow_nan : bool
        Accept NaN (otherwise it is an error, since no fit can use it).
    """
    if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
        raise ParameterError(f"{what} must be a number, got {v!r} ({type(v).__name__}).")
    f = float(v)
    if math.isnan(f) and not allow_nan:
        raise ParameterError(f"{what} is NaN; give a finite number.")
    return f


def _check_identifier(name: str, what: str) -> None:
    if not isinstance(name, str) or not name.isidentifier() or name.startswith("_"):
        raise ParameterError(
            f"{what} name {name!r} is not valid: use a letter followed by letters, digits or "
            "underscores, not starting with '_'."
        )


@dataclass(frozen=True)
class Param:
    """One model parameter and what a guided interface needs to edit it.

    Parameters
    ----------
    name : str
        Identifier used in the formula.
    value : float
        Default value, used when no better starting value is known.
    lower, upper : float
        Bounds (``-inf``/``inf`` for none). ``positive=True`` implies ``lower >= 0``.
    positive : bool
        The parameter is physically positive (a rate constant, Km, a width).
    log_scale : bool
        Best dragged and sampled on a log scale (it spans decades).
    unit : str
        A unit hint, e.g. ``"x"`` (same unit as x), ``"y"``, ``"1/x"``, ``"y/x"``.
    description : str
        One line a scientist understands.
    """

    name: str
    value: float = 1.0
    lower: float = -math.inf
    upper: float = math.inf
    positive: bool = False
    log_scale: bool = False
    unit: str = ""
    description: str = ""

    def __post_init__(self) -> None:
        _check_identifier(self.name, "Parameter")
        for attr in ("value", "lower", "upper"):
            v = getattr(self, attr)
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)):
                raise ParameterError(
                    f"Parameter {self.name!r}: {attr} must be a number, got {type(v).__name__}."
                )
            object.__setattr__(self, attr, float(v))
        if math.isnan(self.value) or math.isinf(self.value):
            raise ParameterError(
                f"Parameter {self.name!r}: value must be finite, got {self.value}."
            )
        if math.isnan(self.lower) or math.isnan(self.upper):
            raise ParameterError(f"Parameter {self.name!r}: bounds must not be NaN.")
        if self.positive and self.lower < 0:
            object.__setattr__(self, "lower", 0.0)
        if self.lower > self.upper:
            raise ParameterError(
                f"Parameter {self.name!r}: lower bound {self.lower:g} is above upper bound "
                f"{self.upper:g}; swap them or widen the range."
            )
        if not (self.lower <= self.value <= self.upper):
            raise ParameterError(
                f"Parameter {self.name!r}: value {self.value:g} lies outside its bounds "
                f"[{self.lower:g}, {self.upper:g}]; give a value inside them or change the bounds."
            )

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict (infinite bounds as ``None``)."""
        return {
            "name": self.name,
            "value": self.value,
            "lower": None if math.isinf(self.lower) else self.lower,
            "upper": None if math.isinf(self.upper) else self.upper,
            "positive": self.positive,
            "log_scale": self.log_scale,
            "unit": self.unit,
            "description": self.description,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Param:
        """Inverse of :meth:`to_dict`."""
        lower = d.get("lower")
        upper = d.get("upper")
        return cls(
            name=d["name"],
            value=d.get("value", 1.0),
            lower=-math.inf if lower is None else lower,
            upper=math.inf if upper is None else upper,
            positive=bool(d.get("positive", False)),
            log_scale=bool(d.get("log_scale", False)),
            unit=str(d.get("unit", "")),
            description=str(d.get("description", "")),
        )


@dataclass(frozen=True)
class Derived:
    """A quantity computed from the parameters, e.g. half-life = ln 2 / k.

    ``axis="x"`` marks a position on the x axis (EC50, Km, a half-life): it is checked against
    the range of the data and flagged as an extrapolation when outside it.
    """

    name: str
    expr: Expr
    description: str = ""
    unit: str = ""
    axis: Literal["x", "y"] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict."""
        return {
            "name": self.name,
            "formula": self.expr.text,
            "tree": self.expr.to_json(),
            "description": self.description,
            "unit": self.unit,
            "axis": self.axis,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Derived:
        """Inverse of :meth:`to_dict`."""
        return cls(
            name=d["name"],
            expr=Expr.parse(d["formula"]),
            description=d.get("description", ""),
            unit=d.get("unit", ""),
            axis=d.get("axis"),
        )


@dataclass(frozen=True)
class Handle:
    """A feature of the curve the user can drag.

    Its (x, y) position is a pair of expressions of the parameters; ``moves`` names the
    parameters a drag changes.
    Examples: a plateau (moves the plateau level), a midpoint (moves EC50 and the plateaus
    stay), the value at x = 0, a half-life point, a peak apex.
    """

    name: str
    label: str
    x: Expr
    y: Expr
    moves: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict with both formulas and trees (the front end uses trees)."""
        return {
            "name": self.name,
            "label": self.label,
            "x_formula": self.x.text,
            "y_formula": self.y.text,
            "x": self.x.to_json(),
            "y": self.y.to_json(),
            "moves": list(self.moves),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Handle:
        """Inverse of :meth:`to_dict`."""
        return cls(
            name=d["name"],
            label=d.get("label", d["name"]),
            x=Expr.parse(d["x_formula"]),
            y=Expr.parse(d["y_formula"]),
            moves=tuple(d["moves"]),
        )

    def position(self, values: Mapping[str, float]) -> tuple[float, float]:
        """The handle's (x, y) for the given parameter values."""
        return float(self.x.evaluate(values)), float(self.y.evaluate(values))


def _as_expr(e: Expr | str) -> Expr:
    return e if isinstance(e, Expr) else Expr.parse(e)


@dataclass(frozen=True, eq=False)
class Model:
    """A curve y = f(x; parameters) with everything needed to start, fit and explain it.

    Build one with :meth:`from_formula`, :meth:`from_callable`, :func:`curvewright.polynomial`
    or pick one from :func:`curvewright.catalog`.

    Attributes
    ----------
    name : str
        A short identifier.
    params : tuple of Param
        The parameters in the order the function takes them.
    expr : Expr or None
        The formula, when the model is one (enables client-side preview and analytic Jacobians).
    func : callable
        Vectorised ``func(x, *values)`` in ``param_names`` order.
    derived : tuple of Derived
    handles : tuple of Handle
    start_rule : callable or None
        ``start_rule(x, y) -> {name: value}``: data-driven starting values.
    domain : {"all", "x>0", "x>=0"}
        Where the model is defined in x.
    polynomial_degree : int or None
        Set for polynomials (and the straight line): they are solved by linear least squares.
    description : str
    """

    name: str
    params: tuple[Param, ...]
    func: Callable[..., Any]
    expr: Expr | None = None
    derived: tuple[Derived, ...] = ()
    handles: tuple[Handle, ...] = ()
    start_rule: StartRule | None = field(default=None, repr=False)
    domain: Domain = "all"
    polynomial_degree: int | None = None
    description: str = ""

    def __post_init__(self) -> None:
        names = [p.name for p in self.params]
        if not names:
            raise ModelError(f"Model {self.name!r} has no parameters; a model needs at least one.")
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ModelError(f"Model {self.name!r}: parameter names repeat: {dupes}.")
        if "x" in names:
            raise ModelError(
                f"Model {self.name!r}: 'x' is the independent variable, not a parameter."
            )
        if self.domain not in _DOMAINS:
            raise ModelError(
                f"Model {self.name!r}: domain must be one of {_DOMAINS}, got {self.domain!r}."
            )
        known = set(names)
        for d in self.derived:
            self._check_names(d.expr, known, f"derived quantity {d.name!r}")
        for h in self.handles:
            for e in (h.x, h.y):
                self._check_names(e, known, f"handle {h.name!r}")
            bad = [m for m in h.moves if m not in known]
            if bad or not h.moves:
                raise ModelError(
                    f"Model {self.name!r}: handle {h.name!r} must move at least one of the "
                    f"model's parameters {names}; got {list(h.moves)}."
                )

    def _check_names(self, e: Expr, known: set[str], what: str) -> None:
        unknown = [n for n in e.names if n not in known]
        if unknown:
            raise ModelError(
                f"Model {self.name!r}: {what} uses unknown names {unknown}; it may use only the "
                f"parameters {sorted(known)}."
            )

    # ----------------------------------------------------------------- construction
    @classmethod
    def from_formula(
        cls,
        formula: str,
        *,
        name: str | None = None,
        params: Sequence[str] | Sequence[Param] | Mapping[str, Mapping[str, Any]] | None = None,
        derived: Mapping[str, str] | Iterable[Derived] = (),
        handles: Iterable[Handle] = (),
        start_rule: StartRule | None = None,
        domain: Domain | None = None,
        description: str = "",
    ) -> Model:
        """Make a model from a formula such as ``"baseline + amplitude*exp(-k*x)"``.

        Parameters
        ----------
        formula : str
            An expression in ``x`` and parameter names (see DEVELOPERS.md for the language).
        params : sequence of names, sequence of Param, or mapping name -> Param keywords, optional
            The parameter order and settings; by default the free names other than ``x`` in
            order of appearance, each with default value 1 and no bounds.
        derived : mapping name -> formula, or Derived records
        domain : {"all", "x>0", "x>=0"}, optional
            Defaults to ``"x>0"`` when the formula takes ``log(x)``, ``log10(x)`` or ``sqrt(x)``
            of a bare ``x``, else ``"all"``.

        Raises
        ------
        FormulaError
            Syntax errors, forbidden constructs, unknown functions, or no parameters.
        """
        e = Expr.parse(formula)
        free = [n for n in e.names if n != "x"]
        if not free:
            raise FormulaError(
                f"Formula {formula!r} has no parameters: add at least one name besides x, "
                "e.g. 'a*x + b'."
            )
        plist = _param_list(params, free, formula)
        pnames = [p.name for p in plist]
        extra = [n for n in free if n not in pnames]
        if extra:
            raise FormulaError(
                f"Formula {formula!r} uses names {extra} that are not in params {pnames}; "
                "list every parameter or leave params out."
            )
        func = e.compile(["x", *pnames])
        ders = _derived_list(derived)
        return cls(
            name=name or "custom",
            params=tuple(plist),
            func=func,
            expr=e,
            derived=ders,
            handles=tuple(handles),
            start_rule=start_rule,
            domain=domain if domain is not None else _guess_domain(e),
            description=description,
        )

    @classmethod
    def from_callable(
        cls,
        func: Callable[..., Any],
        *,
        name: str | None = None,
        params: Sequence[str] | Sequence[Param] | Mapping[str, Mapping[str, Any]] | None = None,
        derived: Mapping[str, str] | Iterable[Derived] = (),
        start_rule: StartRule | None = None,
        domain: Domain = "all",
        description: str = "",
    ) -> Model:
        """Make a model from a Python function ``f(x, a, b, ...)``.

        Parameter names come from the signature after the first argument. Such a model has no
        client-side preview (the widget previews it through the kernel).
        """
        if not callable(func):
            raise ModelError(f"Expected a callable f(x, a, b, ...), got {type(func).__name__}.")
        try:
            sig = inspect.signature(func)
        except (TypeError, ValueError) as exc:
            raise ModelError(
                f"Cannot read the signature of {func!r}; pass params=[...] names explicitly."
            ) from exc
        argnames = [
            p.name
            for p in sig.parameters.values()
            if p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)
        ]
        if params is None and len(argnames) < 2:
            raise ModelError(
                f"{getattr(func, '__name__', func)!r} must take x and at least one parameter, "
                "e.g. def f(x, a, b): ..."
            )
        plist = _param_list(params, argnames[1:], getattr(func, "__name__", "callable"))
        sig_names = argnames[1:]
        if sig_names and [p.name for p in plist] != sig_names[: len(plist)]:
            raise ParameterError(
                f"params {[p.name for p in plist]} do not match the signature of "
                f"{getattr(func, '__name__', func)!r}, which takes x, {', '.join(sig_names)}; "
                "give them in the same order."
            )
        return cls(
            name=name or str(getattr(func, "__name__", "callable")),
            params=tuple(plist),
            func=_guard_callable(func),
            expr=None,
            derived=_derived_list(derived),
            start_rule=start_rule,
            domain=domain,
            description=description,
        )

    # ------------------------------------------------------------------ properties
    @property
    def param_names(self) -> tuple[str, ...]:
        """Parameter names in the order ``func`` takes them."""
        return tuple(p.name for p in self.params)

    @property
    def formula(self) -> str | None:
        """The formula text, or ``None`` for a callable model."""
        return self.expr.text if self.expr is not None else None

    @property
    def has_preview(self) -> bool:
        """Whether the front end can evaluate this model itself (formula models)."""
        return self.expr is not None

    def param(self, name: str) -> Param:
        """The :class:`Param` called ``name``."""
        for p in self.params:
            if p.name == name:
                return p
        raise ParameterError(unknown_name_message(name, self.param_names, f"model {self.name!r}"))

    def defaults(self) -> dict[str, float]:
        """Default parameter values."""
        return {p.name: p.value for p in self.params}

    # ------------------------------------------------------------------ evaluation
    def eval(
        self, x: ArrayLike, values: Mapping[str, float] | None = None, **kw: float
    ) -> FloatArray:
        """Evaluate the curve at ``x`` (defaults for any parameter not given)."""
        vals = self.defaults()
        given = {**(values or {}), **kw}
        for k in given:
            if k not in vals:
                raise ParameterError(
                    unknown_name_message(k, self.param_names, f"model {self.name!r}")
                )
        vals.update({k: float(v) for k, v in given.items()})
        xa = np.asarray(x, dtype=float)
        with np.errstate(all="ignore"):
            out = self.func(xa, *(vals[n] for n in self.param_names))
        res: FloatArray = np.broadcast_to(np.asarray(out, dtype=float), xa.shape).copy()
        return res

    def __call__(self, x: ArrayLike, **values: float) -> FloatArray:
        """Shorthand for :meth:`eval`."""
        return self.eval(x, values)

    @functools.cached_property
    def _value_and_gradient(self) -> Callable[..., tuple[Any, ...]] | None:
        # Differentiated and compiled once per Model (not once per fit): a batch of fits, a
        # drag or a profile reuses it. None for a Python callable.
        if self.expr is None:
            return None
        family = [self.expr, *(self.expr.derivative(n) for n in self.param_names)]
        return compile_many(family, ["x", *self.param_names])

    @property
    def has_jacobian(self) -> bool:
        """Whether :meth:`value_and_jacobian` is analytic (formula models)."""
        return self.expr is not None

    def value_and_jacobian(
        self, x: NDArray[np.float64], theta: Sequence[float]
    ) -> tuple[FloatArray, FloatArray]:
        """The curve at ``x`` and its analytic partial derivatives, in one evaluation.

        Parameters
        ----------
        x : ndarray
            Points, float64.
        theta : sequence of float
            Every parameter's value, in ``param_names`` order.

        Returns
        -------
        (ndarray, ndarray)
            ``f`` of shape ``x.shape`` and ``J`` of shape ``(x.size, len(params))`` (C order).
            Non-finite entries are left as they are; the caller decides what they mean.

        Raises
        ------
        ModelError
            For a Python-callable model, which has no analytic derivatives.
        """
        fn = self._value_and_gradient
        if fn is None:
            raise ModelError(
                f"Model {self.name!r} is a Python callable; it has no analytic Jacobian "
                "(use finite differences)."
            )
        out = fn(x, *theta)
        n = x.size
        J = np.empty((n, len(out) - 1))
        for j, col in enumerate(out[1:]):
            J[:, j] = col  # broadcasts a constant derivative (e.g. d/d baseline = 1)
        return np.broadcast_to(out[0], x.shape).astype(float, copy=True), J

    def derived_values(self, values: Mapping[str, float]) -> dict[str, float]:
        """Evaluate every derived quantity at the given parameter values."""
        with np.errstate(all="ignore"):
            return {d.name: float(d.expr.evaluate(values)) for d in self.derived}

    def check_domain(self, x: NDArray[np.float64]) -> None:
        """Raise :class:`DomainError` if some x lie outside the model's domain."""
        if self.domain == "all":
            return
        bad = x <= 0 if self.domain == "x>0" else x < 0
        if np.any(bad):
            vals = ", ".join(f"{v:g}" for v in x[bad][:5])
            need = "positive" if self.domain == "x>0" else "non-negative"
            raise DomainError(
                f"Model {self.name!r} needs {need} x ({self.domain}) but {int(bad.sum())} "
                f"value(s) are not: {vals}{', ...' if bad.sum() > 5 else ''}. Exclude those "
                "points (exclude=...) or choose a model defined there."
            )

    # -------------------------------------------------------------------- changes
    def with_param(self, name: str, **changes: Any) -> Model:
        """A copy with one parameter's settings changed, e.g. ``with_param("k", lower=0)``."""
        p = self.param(name)
        new = replace(p, **changes)
        return replace(self, params=tuple(new if q.name == name else q for q in self.params))

    def renamed(self, name: str) -> Model:
        """A copy with another name."""
        return replace(self, name=name)

    # -------------------------------------------------------------- serialisation
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready description (the widget and saved results use it).

        Callable models serialise their metadata only; they cannot be rebuilt from it.
        """
        return {
            "name": self.name,
            "formula": self.formula,
            "tree": self.expr.to_json() if self.expr is not None else None,
            "params": [p.to_dict() for p in self.params],
            "derived": [d.to_dict() for d in self.derived],
            "handles": [h.to_dict() for h in self.handles],
            "domain": self.domain,
            "polynomial_degree": self.polynomial_degree,
            "description": self.description,
            "has_preview": self.has_preview,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Model:
        """Rebuild a formula model from :meth:`to_dict` output.

        Catalog models come back with their starting-value rule when the name and formula match
        a built-in one.
        """
        if d.get("formula") is None:
            raise ModelError(
                f"Model {d.get('name')!r} was a Python callable; it cannot be rebuilt from JSON. "
                "Pass the callable again."
            )
        builtin = _builtin_resolver(d["name"], d["formula"]) if _builtin_resolver else None
        params = [Param.from_dict(p) for p in d["params"]]
        model = cls.from_formula(
            d["formula"],
            name=d["name"],
            params=params,
            derived=[Derived.from_dict(x) for x in d.get("derived", [])],
            handles=[Handle.from_dict(h) for h in d.get("handles", [])],
            start_rule=builtin.start_rule if builtin is not None else None,
            domain=d.get("domain", "all"),
            description=d.get("description", ""),
        )
        if d.get("polynomial_degree") is not None:
            model = replace(model, polynomial_degree=int(d["polynomial_degree"]))
        return model

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # Pickled through the exact JSON form, so process pools and a cluster carry what a saved
        # result carries. A callable model carries its function by reference (pickle imports it
        # by name), and a start rule that is not the built-in one is carried the same way.
        inner = getattr(self.func, "__wrapped__", self.func) if self.expr is None else None
        rule = self.start_rule
        if self.expr is not None and rule is not None:
            builtin = _builtin_resolver(self.name, self.formula) if _builtin_resolver else None
            if builtin is not None and builtin.start_rule is rule:
                rule = None  # from_dict gives it back
        for what, obj in (("function", inner), ("start rule", rule)):
            if obj is not None:
                try:
                    pickle.dumps(obj)
                except (pickle.PicklingError, AttributeError, TypeError) as exc:
                    raise ModelError(
                        f"Model {self.name!r} cannot be pickled: its {what} {obj!r} cannot be "
                        "pickled by reference (a lambda, or a function defined inside another "
                        "function). Define it at module level in an importable module."
                    ) from exc
        return (_model_from_pickle, (self.to_dict(), inner, rule))

    def same_form(self, other: Model) -> bool:
        """Whether two models have the same function (same formula tree and parameter names)."""
        if self.expr is None or other.expr is None:
            return self is other or self.func is other.func
        return self.expr.to_json() == other.expr.to_json() and self.param_names == other.param_names

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Model):
            return NotImplemented
        if self.expr is None or other.expr is None:
            return self is other
        return self.to_dict() == other.to_dict()

    def __hash__(self) -> int:
        return hash((self.name, self.formula, self.param_names))

    def __repr__(self) -> str:
        inner = getattr(self.func, "__wrapped__", self.func)
        body = self.formula if self.formula is not None else f"<callable {inner!r}>"
        return f"Model({self.name!r}: y = {body})"


# ---------------------------------------------------------------------- helpers
# The catalog is built on this module, so this module cannot import it; instead the catalog
# registers how to find a built-in model by name and formula (to give a saved built-in model its
# start rule back) when it is imported.
_builtin_resolver: Callable[[str, str | None], Model | None] | None = None


def register_builtin_resolver(resolve: Callable[[str, str | None], Model | None]) -> None:
    """Tell :meth:`Model.from_dict` how to find a built-in model (called by the catalog)."""
    global _builtin_resolver
    _builtin_resolver = resolve


def _model_from_pickle(
    d: Mapping[str, Any], func: Callable[..., Any] | None, rule: StartRule | None
) -> Model:
    if func is None:
        m = Model.from_dict(d)
        return m if rule is None else replace(m, start_rule=rule)
    return Model.from_callable(
        func,
        name=str(d["name"]),
        params=[Param.from_dict(p) for p in d["params"]],
        derived=[Derived.from_dict(x) for x in d.get("derived", [])],
        start_rule=rule,
        domain=d.get("domain", "all"),
        description=str(d.get("description", "")),
    )


def unknown_name_message(
    name: str, known: Sequence[str], where: str, *, kind: str = "parameter"
) -> str:
    """Message for an unknown name (a parameter unless ``kind`` says), with a spelling hint."""
    # the commonest slip with trade names (Km, EC50, Vmax) is the case of a letter
    same_case = [k for k in known if k.lower() == name.lower()]
    hint = same_case or difflib.get_close_matches(name, list(known), n=1)
    did = f" Did you mean {hint[0]!r}?" if hint else ""
    return f"{name!r} is not a {kind} of {where}; its {kind}s are {list(known)}.{did}"


def _param_list(
    params: Sequence[str] | Sequence[Param] | Mapping[str, Mapping[str, Any]] | None,
    default_names: Sequence[str],
    where: str,
) -> list[Param]:
    if params is None:
        return [Param(n) for n in default_names]
    if isinstance(params, Mapping):
        out = []
        for n, kw in params.items():
            if not isinstance(kw, Mapping):
                raise ParameterError(
                    f"params[{n!r}] must be a mapping of Param settings (value, lower, upper, "
                    f"...), got {type(kw).__name__}."
                )
            out.append(Param(n, **kw))
        names = [p.name for p in out]
        # names the mapping leaves out keep their defaults, in formula order
        return out + [Param(n) for n in default_names if n not in names]
    out = []
    for p in params:
        if isinstance(p, Param):
            out.append(p)
        elif isinstance(p, str):
            out.append(Param(p))
        else:
            raise ParameterError(
                f"{where}: params must be names or Param records, got {type(p).__name__}."
            )
    return out


def _derived_list(derived: Mapping[str, str] | Iterable[Derived]) -> tuple[Derived, ...]:
    if isinstance(derived, Mapping):
        return tuple(Derived(n, _as_expr(f)) for n, f in derived.items())
    return tuple(derived)


def _guess_domain(e: Expr) -> Domain:
    tree = e.to_json()
    found: list[bool] = []

    def walk(n: Mapping[str, Any]) -> None:
        if n.get("type") == "call" and n.get("fn") in ("log", "log10", "sqrt"):
            arg = n["args"][0]
            if arg.get("type") == "name" and arg.get("id") == "x":
                found.append(True)
        for key in ("arg", "left", "right"):
            if key in n:
                walk(n[key])
        for a in n.get("args", []):
            walk(a)

    walk(tree)
    return "x>0" if found else "all"


def _guard_callable(func: Callable[..., Any]) -> Callable[..., Any]:
    """Wrap a user callable so its failures and wrong shapes become :class:`ModelError`."""

    def guarded(x: NDArray[np.float64], *values: float) -> NDArray[np.float64]:
        try:
            out = func(x, *values)
        except Exception as exc:
            raise ModelError(
                f"The model function {getattr(func, '__name__', func)!r} raised "
                f"{type(exc).__name__}: {exc}. Check it runs on a numpy array x."
            ) from exc
        try:
            arr = np.asarray(out, dtype=float)
        except (TypeError, ValueError) as exc:
            raise ModelError(
                f"The model function {getattr(func, '__name__', func)!r} returned "
                f"{type(out).__name__}, which is not numeric."
            ) from exc
        if arr.shape not in ((), np.shape(x)):
            raise ModelError(
                f"The model function {getattr(func, '__name__', func)!r} returned shape "
                f"{arr.shape} for x of shape {np.shape(x)}; it must return one value per x."
            )
        return np.broadcast_to(arr, np.shape(x))

    guarded.__wrapped__ = func  # type: ignore[attr-defined]
    return guarded
