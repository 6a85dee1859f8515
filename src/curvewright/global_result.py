"""GlobalResult: the immutable record of a global fit (several groups, shared and own parameters).

A global fit estimates one value of each *shared* parameter for every group and one value of
each other free parameter per group. Its free parameters carry expanded names: a shared
parameter keeps its own name (``"full_effect"``), a per-group one gets the group label in
brackets (``"log_ic50[compound A]"``; see :func:`expanded_name`). The joint covariance is over
these names.

``result[group]`` is a :class:`GroupFit`, a :class:`FitResult` on that group's own data whose
covariance is the joint covariance restricted to the group's parameters (shared and own) and
whose degrees of freedom and residual variance are the joint fit's, so its bands, intervals and
derived quantities account for everything the other groups taught about the shared parameters.
"""

from __future__ import annotations

import html
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import pandas as pd

from .data import group_label
from .errors import CurvewrightError, ModelError, ParameterError
from .expr import Expr
from .models import Model
from .parameters import Parameter, Parameters
from .result import (
    Attempt,
    Diagnostic,
    FitResult,
    _dec,
    _dec_array,
    _dec_map,
    _enc,
    _enc_array,
    _enc_map,
    _need,
    _num,
    _restore_model,
    _ro,
    _statistic,
    figure_function,
    fit_quality_lines,
    report_function,
)
from .thresholds import CAUTION

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from .stats.diagnostics import Diagnostics
    from .stats.groups import GroupComparison, SharedTest

__all__ = ["GlobalResult", "GroupFit", "expanded_name", "group_label"]

FloatArray = Any
_FORMAT = "curvewright.GlobalResult"
_VERSION = 1


def expanded_name(param: str, label: str) -> str:
    """The name of a per-group parameter in a global fit: ``"param[label]"``.

    Shared parameters keep their plain name.
    """
    return f"{param}[{label}]"


def _key_to_json(key: object) -> Any:
    if isinstance(key, tuple):
        return {"tuple": [_key_to_json(k) for k in key]}
    if isinstance(key, (bool, np.bool_)):
        return bool(key)
    if isinstance(key, (int, np.integer)):
        return int(key)
    if isinstance(key, (float, np.floating)):
        return _enc(float(key))
    return str(key)


def _key_from_json(v: Any) -> object:
    if isinstance(v, dict):
        return tuple(_key_from_json(k) for k in v["tuple"])
    if isinstance(v, str) and v in ("NaN", "Infinity", "-Infinity"):
        return _dec(v)
    return v


# ----------------------------------------------------------------------------- group view
@dataclass(frozen=True, eq=False)
class GroupFit(FitResult):
    """One group of a global fit, seen as a :class:`FitResult` on that group's own data.

    ``x``, ``y``, ``fitted``, ``residuals``, ``weights`` and ``jacobian`` are the group's;
    ``covariance`` is the joint covariance restricted to the group's free parameters (shared
    and own, in model order); ``ssr``, ``rss``, ``dof``, ``sigma_resid``, ``aicc``, ``bic`` and
    ``condition`` are the joint fit's, so :meth:`predict`, :meth:`confidence_band`,
    :meth:`prediction_band`, :meth:`ci` and :meth:`derived` use the joint residual variance and
    the joint degrees of freedom. ``r2`` and :attr:`group_ssr` are the group's own.

    Attributes
    ----------
    group : str
        The group's label.
    shared : tuple of str
        The free parameters this group shares with the others.
    constants : tuple of str
        Parameters held at this group's value of a column.
    """

    group: str = ""
    shared: tuple[str, ...] = ()
    constants: tuple[str, ...] = ()

    @property
    def group_ssr(self) -> float:
        """The group's own (weighted) sum of squared residuals."""
        r = np.asarray(self.weighted_residuals)
        return float(r @ r)

    def __post_init__(self) -> None:
        super().__post_init__()
        # The record's scope says, per parameter, whether this group shares it.
        object.__setattr__(self, "parameters", self._group_records())

    def _group_records(self) -> Parameters:
        """The group's parameter records after the fit (estimate, bounds, holds, scope).

        ``scope`` is "shared" for the parameters shared with the other groups and for those
        fixed at one value for all; "per_group" for the group's own estimates, for constants
        taken from its column (held, with this group's value) and for links that use any of
        them.
        """
        recs = []
        for p in self.model.params:
            n = p.name
            lo, hi = self.bounds.get(n, (p.lower, p.upper))
            own = n not in self.shared and (n in self.free or n in self.constants)
            if n in self.linked:
                uses = Expr.parse(self.linked[n]).names
                own = any(
                    m not in self.shared and (m not in self.fixed or m in self.constants)
                    for m in uses
                )
            recs.append(
                Parameter(
                    n,
                    float(self.values[n]),
                    lo,
                    hi,
                    fixed=n in self.fixed,
                    link=self.linked.get(n),
                    scope="per_group" if own else "shared",
                )
            )
        return Parameters(recs)

    def profile_ci(self, names: Sequence[str] | None = None, level: float = 0.95) -> pd.DataFrame:
        """Not available for one group of a global fit.

        A profile re-optimises every other parameter of the joint fit, over every group's
        data; a view of one group holds only its own.

        Raises
        ------
        FitError
            Always, with what to use instead.
        """
        from .errors import FitError

        raise FitError(
            f"profile intervals are not available for group {self.group!r} of a global fit: "
            "they would re-optimise the shared parameters on this group's points alone. Use "
            "ci() (Wald intervals on the joint covariance), or fit this group alone with "
            "curvewright.fit for its own profile."
        )

    def residual_diagnostics(self, alpha: float = 0.05) -> Diagnostics:
        """Residual diagnostics of this group's points, given the shared parameters.

        The group is treated as if fitted alone with the shared parameters held at their joint
        values: leverages come from the Jacobian of its own free parameters, and the residual
        degrees of freedom are its points minus those parameters. See
        :func:`curvewright.stats.diagnostics.diagnose_arrays`.

        Raises
        ------
        DataError
            The group has no more points than its own free parameters.
        """
        from .errors import DataError

        diagnose_arrays = _statistic("diagnose_arrays")
        own = [i for i, n in enumerate(self.free) if n not in self.shared]
        dof = self.n - len(own)
        if dof < 1:
            raise DataError(
                f"group {self.group!r} has {self.n} point(s) and {len(own)} parameter(s) of its "
                "own, so its residuals alone cannot be judged; look at the residuals of the "
                "whole fit instead, or add points to this group."
            )
        ds = self.dataset
        w = None if self.weights is None else np.asarray(self.weights, dtype=float) ** 2
        out: Diagnostics = diagnose_arrays(
            ds.x_used,
            ds.y_used,
            self.fitted,
            np.asarray(self.jacobian)[:, own],
            dof,
            weights=w,
            rows=ds.row[ds.include],
            linear=False,
            alpha=alpha,
        )
        return out

    def _group_note(self) -> str:
        return (
            f"group {self.group!r} of a global fit: parameters {', '.join(self.shared) or 'none'} "
            "are shared with the other groups; SSR, residual SD, degrees of freedom and AICc "
            "below are those of the joint fit"
        )

    def summary(self) -> str:
        """The group's report (see :meth:`FitResult.summary`), headed by what it is part of."""
        return self._group_note() + "\n\n" + super().summary()

    def _repr_html_(self) -> str:
        return (
            f"<div class='cw-group'><i>{html.escape(self._group_note())}</i></div>"
            + super()._repr_html_()
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form: the FitResult's, with the group label and the shared names."""
        d = super().to_dict()
        d["group"] = self.group
        d["shared"] = list(self.shared)
        d["constants"] = list(self.constants)
        return d

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # Through the exact JSON form, as FitResult does, so a GroupFit comes back a GroupFit.
        return (_group_from_pickle, (self.to_json(), self.model))

    @classmethod
    def _group_from_dict(cls, d: Mapping[str, Any], model: Model) -> GroupFit:
        base = cls._from_dict(d, model)
        assert isinstance(base, GroupFit)
        return replace(
            base,
            group=str(d["group"]),
            shared=tuple(str(s) for s in d["shared"]),
            constants=tuple(str(s) for s in d["constants"]),
        )


# ----------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class GlobalResult:
    """The outcome of :func:`curvewright.fit_global`; immutable.

    Attributes
    ----------
    model : Model
        The model fitted to every group.
    by : tuple of str
        The grouping column(s).
    keys : tuple
        The group keys (values of ``by``; tuples when ``by`` names several columns), in order.
    labels : tuple of str
        Their display labels (see :func:`group_label`), used in expanded names.
    shared : tuple of str
        Model parameters estimated once for all groups.
    per_group : tuple of str
        Model parameters estimated once per group.
    constants : tuple of str
        Model parameters taken from a column, constant within each group (held fixed).
    fixed : tuple of str
        Model parameters held fixed at one value for every group.
    linked : mapping of str to str
        Linked parameters and their expressions (evaluated within each group).
    free : tuple of str
        Expanded names of the estimated parameters (shared names plain, per-group ones as
        ``"name[label]"``), in the order of the rows and columns of the covariance.
    estimates : mapping of str to float
        Value of each expanded free parameter.
    cov : ndarray
        Joint covariance of ``free`` (see :attr:`covariance` for the labelled table).
    ssr, rss : float
        Weighted and unweighted residual sums of squares over all groups.
    n, nfree, dof : int
        Points used, free parameters, residual degrees of freedom.
    sigma_resid, r2, aicc, bic, condition : float
        As in :class:`FitResult`, for the joint fit.
    success : bool
    code, message : str
    attempts : tuple of Attempt
    diagnostics : tuple of Diagnostic
        Findings of the joint fit; a finding about one group names it (``extra["group"]``).
    weighting, loss : str
    loss_scale : float or None
    absolute_sigma : bool
    method : str
    evaluations : int
    groups : tuple of GroupFit
        The per-group views, in group order (also ``result[key]`` or ``result[label]``).
    options : mapping
        The fit options (fixed values, bounds, links, weights, loss, method) that a refit with
        another choice of shared parameters (:meth:`test_shared`) repeats.
    """

    model: Model
    by: tuple[str, ...]
    keys: tuple[Any, ...]
    labels: tuple[str, ...]
    shared: tuple[str, ...]
    per_group: tuple[str, ...]
    constants: tuple[str, ...]
    fixed: tuple[str, ...]
    linked: Mapping[str, str]
    free: tuple[str, ...]
    estimates: Mapping[str, float]
    cov: FloatArray
    ssr: float
    rss: float
    n: int
    nfree: int
    dof: int
    sigma_resid: float
    r2: float
    aicc: float
    bic: float
    condition: float
    success: bool
    code: str
    message: str
    attempts: tuple[Attempt, ...]
    diagnostics: tuple[Diagnostic, ...]
    weighting: str
    loss: str
    loss_scale: float | None
    absolute_sigma: bool
    method: str
    evaluations: int
    groups: tuple[GroupFit, ...]
    options: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        put = object.__setattr__
        put(self, "linked", MappingProxyType(dict(self.linked)))
        put(self, "estimates", MappingProxyType({k: float(v) for k, v in self.estimates.items()}))
        put(self, "cov", _ro(self.cov))
        put(self, "options", MappingProxyType(dict(self.options)))
        for name in ("by", "keys", "labels", "shared", "per_group", "constants", "fixed", "free"):
            put(self, name, tuple(getattr(self, name)))
        put(self, "groups", tuple(self.groups))
        put(self, "attempts", tuple(self.attempts))
        put(self, "diagnostics", tuple(self.diagnostics))

    # ------------------------------------------------------------------ access
    def __getitem__(self, group: object) -> GroupFit:
        """The view of one group, by key (e.g. ``"A"``, ``("A", 2)``) or by label."""
        for k, lab, g in zip(self.keys, self.labels, self.groups, strict=True):
            if group == k or (isinstance(group, str) and group == lab):
                return g
        shown = repr(group) if isinstance(group, (str, int, float, tuple)) else type(group).__name__
        raise ParameterError(
            f"no group {shown} in this fit; the groups are {list(self.labels)} (by key or label)."
        )

    def __iter__(self) -> Any:
        return iter(self.groups)

    def __len__(self) -> int:
        return len(self.groups)

    def _table(self, what: str) -> pd.DataFrame:
        rows = [
            [float((g.values if what == "values" else g.stderr)[n]) for n in self.model.param_names]
            for g in self.groups
        ]
        out: pd.DataFrame = pd.DataFrame(
            rows,
            index=pd.Index(list(self.labels), name="group"),
            columns=pd.Index(list(self.model.param_names), name="parameter"),
        )
        return out

    @property
    def values(self) -> pd.DataFrame:
        """Every model parameter's value, one row per group (shared values repeat).

        Constants and fixed parameters are shown too (their standard error is NaN).
        """
        return self._table("values")

    @property
    def stderr(self) -> pd.DataFrame:
        """Standard errors like :attr:`values` (NaN for constants and fixed parameters)."""
        return self._table("stderr")

    @property
    def covariance(self) -> pd.DataFrame:
        """The joint covariance, labelled by the expanded free-parameter names."""
        names = pd.Index(list(self.free), name="parameter")
        out: pd.DataFrame = pd.DataFrame(np.array(self.cov), index=names, columns=names)
        return out

    @property
    def x(self) -> FloatArray:
        """x of the points used, groups one after another."""
        out = np.concatenate([np.asarray(g.x) for g in self.groups])
        out.setflags(write=False)
        return out

    @property
    def y(self) -> FloatArray:
        """y of the points used, groups one after another."""
        out = np.concatenate([np.asarray(g.y) for g in self.groups])
        out.setflags(write=False)
        return out

    @property
    def weights(self) -> FloatArray | None:
        """``1/sigma`` of each point used (None when unweighted)."""
        if self.groups[0].weights is None:
            return None
        out = np.concatenate([np.asarray(g.weights) for g in self.groups])
        out.setflags(write=False)
        return out

    @property
    def residuals(self) -> FloatArray:
        """``y - fitted`` of the points used, groups one after another."""
        out = np.concatenate([np.asarray(g.residuals) for g in self.groups])
        out.setflags(write=False)
        return out

    # ------------------------------------------------------------------ tables
    def to_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per group and model parameter: value, stderr, Wald interval, scope.

        Columns ``group, parameter, scope`` ("shared", "per_group", "constant", "fixed" or
        "linked"), ``value, stderr, ci_low, ci_high`` (t quantile on the joint degrees of
        freedom), ``estimate`` (the expanded free name, "" when not estimated).
        """
        rows = []
        for lab, g in zip(self.labels, self.groups, strict=True):
            ci = g.ci(level)
            lookup = {
                (str(n), str(c)): float(v)
                for n, row in zip(ci.index, ci.to_numpy(dtype=float), strict=True)
                for c, v in zip(ci.columns, row, strict=True)
            }
            for n in self.model.param_names:
                scope = (
                    "shared"
                    if n in self.shared
                    else "per_group"
                    if n in self.per_group
                    else "constant"
                    if n in self.constants
                    else "fixed"
                    if n in self.fixed
                    else "linked"
                )
                est = n if scope == "shared" else (f"{n}[{lab}]" if scope == "per_group" else "")
                rows.append(
                    {
                        "group": lab,
                        "parameter": n,
                        "scope": scope,
                        "value": lookup[(n, "value")],
                        "stderr": lookup[(n, "stderr")],
                        "ci_low": lookup[(n, "lower")],
                        "ci_high": lookup[(n, "upper")],
                        "estimate": est,
                    }
                )
        out: pd.DataFrame = pd.DataFrame(rows)
        return out

    def report(
        self,
        format: Literal["html", "markdown"] = "html",
        *,
        level: float = 0.95,
        figure: bool = True,
        path: str | Any = None,
        comparison: Any = None,
    ) -> Any:
        """A self-contained report of the global fit (HTML or Markdown).

        See :func:`curvewright.reports.report`.
        """
        return report_function("report")(
            self, format, level=level, figure=figure, path=path, comparison=comparison
        )

    def methods(self, level: float = 0.95) -> str:
        """A methods paragraph saying what was done (see :func:`curvewright.reports.methods`)."""
        out: str = report_function("methods")(self, level=level)
        return out

    def to_excel(self, path: str | Any, *, level: float = 0.95) -> Any:
        """Write parameters, derived quantities, diagnostics and data to an .xlsx file.

        See :func:`curvewright.reports.to_excel` (needs ``pip install "curvewright[excel]"``).
        """
        return report_function("to_excel")(self, path, level=level)

    # ------------------------------------------------------------------ questions
    def test_shared(self, name: str, alpha: float = 0.05) -> SharedTest:
        """Do the groups differ in ``name``? Refit with it shared and per group, and compare.

        See :func:`curvewright.stats.groups.shared_or_separate`.
        """
        out: SharedTest = _statistic("shared_or_separate")(self, name, alpha)
        return out

    def compare_groups(
        self, name: str, *, correction: str = "holm", alpha: float = 0.05
    ) -> GroupComparison:
        """Pairwise Wald tests of a per-group parameter between groups.

        See :func:`curvewright.stats.groups.compare_groups`.
        """
        out: GroupComparison = _statistic("compare_groups")(
            self, name, correction=correction, alpha=alpha
        )
        return out

    # ------------------------------------------------------------------ text
    def plot(
        self,
        ax: Axes | None = None,
        *,
        bands: Literal["confidence", "prediction"] | None = None,
        level: float = 0.95,
        residuals: bool = False,
        log_x: bool | None = None,
        groups: Sequence[str] | None = None,
        **opts: Any,
    ) -> Figure:
        """Draw every group (or the ``groups`` named) on one axes, one colour each, with a legend.

        See :func:`curvewright.figures.plot_global` for the options.
        """
        out: Figure = figure_function("global_fit")(
            self,
            ax,
            bands=bands,
            level=level,
            residuals=residuals,
            log_x=log_x,
            groups=groups,
            **opts,
        )
        return out

    def summary(self) -> str:
        """A readable plain-text report: the design, the table of values, fit statistics."""
        m = self.model
        head = f"curvewright global fit of {m.name!r} to {len(self.groups)} groups"
        lines = [head, "=" * len(head)]
        lines.append(
            f"curve:      y = {m.formula}" if m.formula else "curve:      a Python function"
        )
        lines.append(f"groups by:  {', '.join(self.by)}: {', '.join(self.labels)}")
        lines.append(f"shared:     {', '.join(self.shared) or 'none'}")
        lines.append(f"per group:  {', '.join(self.per_group) or 'none'}")
        if self.constants:
            lines.append(f"constants:  {', '.join(self.constants)} (from the data, per group)")
        if self.fixed:
            lines.append(f"fixed:      {', '.join(self.fixed)}")
        lines.append(f"outcome:    {'OK' if self.success else 'NOT CONVERGED'} - {self.message}")
        lines.append(
            f"            method {self.method}, {self.evaluations} model evaluations, "
            f"{len(self.attempts)} solver run(s)"
        )
        lines.append("")
        lines.append("estimates (standard errors in brackets)")
        cols = [n for n in m.param_names if n not in self.fixed]
        w = max([len(lab) for lab in self.labels] + [5])
        lines.append(f"{'group':<{w}}  " + "  ".join(f"{c:>22}" for c in cols))
        for lab, g in zip(self.labels, self.groups, strict=True):
            cells = []
            for c in cols:
                v, s = g.values[c], g.stderr[c]
                cell = _num(v) if math.isnan(s) else f"{_num(v)} ({_num(s)})"
                cells.append(f"{cell:>22}")
            lines.append(f"{lab:<{w}}  " + "  ".join(cells))
        lines.extend(fit_quality_lines(self, "goodness of fit (all groups together)"))
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def __repr__(self) -> str:
        state = "ok" if self.success else "not converged"
        return (
            f"<GlobalResult {self.model.name!r} {state}: {len(self.groups)} groups, shared "
            f"{list(self.shared)}; ssr={_num(self.ssr)}>"
        )

    def _repr_html_(self) -> str:
        e = html.escape
        cols = [n for n in self.model.param_names if n not in self.fixed]
        head = "".join(f"<th>{e(c)}{' (shared)' if c in self.shared else ''}</th>" for c in cols)
        body = []
        for lab, g in zip(self.labels, self.groups, strict=True):
            cells = []
            for c in cols:
                v, s = g.values[c], g.stderr[c]
                txt = _num(v) if math.isnan(s) else f"{_num(v)} ± {_num(s)}"
                cells.append(f"<td>{e(txt)}</td>")
            body.append(f"<tr><th>{e(lab)}</th>{''.join(cells)}</tr>")
        diag = "".join(
            f"<li class='cw-{e(d.severity)}'>{e(d.text)}</li>"
            for d in self.diagnostics
            if d.severity != "info"
        )
        status = "converged" if self.success else "not converged"
        return (
            "<div class='cw-result cw-global' style='font-family:sans-serif;font-size:13px'>"
            f"<div><b>{e(self.model.name)}</b>, {len(self.groups)} groups &middot; "
            f"{e(status)}: {e(self.message)}</div>"
            "<table style='border-collapse:collapse'>"
            f"<thead><tr><th>{e(', '.join(self.by))}</th>{head}</tr></thead><tbody>"
            + "".join(body)
            + "</tbody></table>"
            f"<div>n = {self.n}, dof = {self.dof}, SSR = {e(_num(self.ssr))}, "
            f"R&sup2; = {e(_num(self.r2))}, AICc = {e(_num(self.aicc))}</div>"
            + (f"<ul>{diag}</ul>" if diag else "")
            + f"<div style='font-size:11px;opacity:0.75'>{e(CAUTION)}</div></div>"
        )

    # ------------------------------------------------------------------ JSON
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict holding the whole result (non-finite numbers as strings)."""
        opts = dict(self.options)
        return {
            "format": _FORMAT,
            "version": _VERSION,
            "model": self.model.to_dict(),
            "by": list(self.by),
            "keys": [_key_to_json(k) for k in self.keys],
            "labels": list(self.labels),
            "shared": list(self.shared),
            "per_group": list(self.per_group),
            "constants": list(self.constants),
            "fixed": list(self.fixed),
            "linked": dict(self.linked),
            "free": list(self.free),
            "estimates": _enc_map(self.estimates),
            "cov": _enc_array(np.asarray(self.cov)),
            "ssr": _enc(self.ssr),
            "rss": _enc(self.rss),
            "n": self.n,
            "nfree": self.nfree,
            "dof": self.dof,
            "sigma_resid": _enc(self.sigma_resid),
            "r2": _enc(self.r2),
            "aicc": _enc(self.aicc),
            "bic": _enc(self.bic),
            "condition": _enc(self.condition),
            "success": self.success,
            "code": self.code,
            "message": self.message,
            "attempts": [a.to_dict() for a in self.attempts],
            "diagnostics": [d.to_dict() for d in self.diagnostics],
            "weighting": self.weighting,
            "loss": self.loss,
            "loss_scale": _enc(self.loss_scale),
            "absolute_sigma": self.absolute_sigma,
            "method": self.method,
            "evaluations": self.evaluations,
            "groups": [g.to_dict() for g in self.groups],
            "options": _options_to_json(opts),
        }

    def to_json(self, **kwargs: Any) -> str:
        """The result as strict JSON text (``**kwargs`` go to :func:`json.dumps`)."""
        return json.dumps(self.to_dict(), allow_nan=False, **kwargs)

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # Pickled through the exact JSON form with the model alongside (a Python function
        # travels by reference), so a process pool carries what a saved result carries.
        return (_global_from_pickle, (self.to_json(), self.model))

    @classmethod
    def from_dict(
        cls, d: Mapping[str, Any], *, model: Model | Callable[..., Any] | None = None
    ) -> GlobalResult:
        """Rebuild a result from :meth:`to_dict` output.

        Raises
        ------
        ModelError
            Not a saved global result, another format version, damaged, or a Python-function
            model not passed again as ``model=``.
        """
        if d.get("format") != _FORMAT or d.get("version") != _VERSION:
            raise ModelError(
                f"this is not a saved curvewright global fit in format {_VERSION} (format "
                f"{d.get('format')!r}, version {d.get('version')!r}); load the output of "
                "GlobalResult.to_json() written by this version, or refit."
            )
        try:
            m = _restore_model(d["model"], model)
            return cls(
                model=m,
                by=tuple(str(b) for b in d["by"]),
                keys=tuple(_key_from_json(k) for k in d["keys"]),
                labels=tuple(str(s) for s in d["labels"]),
                shared=tuple(d["shared"]),
                per_group=tuple(d["per_group"]),
                constants=tuple(d["constants"]),
                fixed=tuple(d["fixed"]),
                linked={str(k): str(v) for k, v in d["linked"].items()},
                free=tuple(d["free"]),
                estimates=_dec_map(d["estimates"]),
                cov=_need(_dec_array(d["cov"])),
                ssr=_dec(d["ssr"]),
                rss=_dec(d["rss"]),
                n=int(d["n"]),
                nfree=int(d["nfree"]),
                dof=int(d["dof"]),
                sigma_resid=_dec(d["sigma_resid"]),
                r2=_dec(d["r2"]),
                aicc=_dec(d["aicc"]),
                bic=_dec(d["bic"]),
                condition=_dec(d["condition"]),
                success=bool(d["success"]),
                code=str(d["code"]),
                message=str(d["message"]),
                attempts=tuple(Attempt.from_dict(a) for a in d["attempts"]),
                diagnostics=tuple(Diagnostic.from_dict(x) for x in d["diagnostics"]),
                weighting=str(d["weighting"]),
                loss=str(d["loss"]),
                loss_scale=None if d["loss_scale"] is None else _dec(d["loss_scale"]),
                absolute_sigma=bool(d["absolute_sigma"]),
                method=str(d["method"]),
                evaluations=int(d["evaluations"]),
                groups=tuple(GroupFit._group_from_dict(g, m) for g in d["groups"]),
                options=_options_from_json(d["options"]),
            )
        except (KeyError, TypeError, ValueError, AttributeError, AssertionError) as exc:
            if isinstance(exc, CurvewrightError):
                raise
            raise ModelError(
                f"the saved global fit is incomplete or corrupted ({type(exc).__name__}: {exc}); "
                "load an unmodified output of GlobalResult.to_json()."
            ) from exc

    @classmethod
    def from_json(
        cls, text: str, *, model: Model | Callable[..., Any] | None = None
    ) -> GlobalResult:
        """Rebuild a result from :meth:`to_json` output (see :meth:`from_dict`)."""
        return cls.from_dict(json.loads(text), model=model)


def _group_from_pickle(text: str, model: Model) -> GroupFit:
    return GroupFit._group_from_dict(json.loads(text), model)


def _global_from_pickle(text: str, model: Model) -> GlobalResult:
    return GlobalResult.from_json(text, model=model)


def _options_to_json(opts: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in opts.items():
        if k == "fixed":
            out[k] = _enc_map(v)
        elif k == "bounds":
            out[k] = {n: [_enc(a), _enc(b)] for n, (a, b) in v.items()}
        elif k == "loss_scale":
            out[k] = _enc(v)
        else:
            out[k] = v
    return out


def _options_from_json(d: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in d.items():
        if k == "fixed":
            out[k] = _dec_map(v)
        elif k == "bounds":
            out[k] = {str(n): (_dec(a), _dec(b)) for n, (a, b) in v.items()}
        elif k == "loss_scale":
            out[k] = None if v is None else _dec(v)
        elif k == "links":
            out[k] = {str(a): str(b) for a, b in v.items()}
        else:
            out[k] = v
    return out
