"""FitResult: the immutable record of one fit, with its statistics, text, HTML and exact JSON.

A result is made by :func:`curvewright.fit` and never changes afterwards: arrays are read-only,
mappings are read-only views, and assigning an attribute raises. Everything later cells need
(values, standard errors, covariance, the Jacobian at the solution for bands and the delta
method, residuals, diagnostics, the log of solver attempts) is stored here, and the JSON form
holds all of it, so ``FitResult.from_json(r.to_json())`` is the same result to the last bit.
"""

from __future__ import annotations

import html
import json
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .data import Dataset
from .errors import CurvewrightError, ModelError
from .inference import correlation_matrix, derived_value_and_se, quantile
from .models import Derived, Model, Param
from .parameters import Parameter, Parameters
from .thresholds import CAUTION, HIGH_CORRELATION, NOT_IDENTIFIED_RSE

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "CAUTION",
    "HIGH_CORRELATION",
    "NOT_IDENTIFIED_RSE",
    "Attempt",
    "Diagnostic",
    "FitResult",
    "register_reports",
    "register_statistics",
]

FloatArray = NDArray[np.float64]
Severity = Literal["info", "warning", "error"]

# CAUTION, HIGH_CORRELATION and NOT_IDENTIFIED_RSE live in curvewright.thresholds; they are
# imported above and stay importable from here.

_FORMAT = "curvewright.FitResult"
#: Version of the saved form. 2: the catalog's own model and parameter names, the solver option
#: names levenberg_marquardt / trust_region / pseudo_huber and ``evaluations`` for the
#: evaluation counts; results saved as version 1 used other names and cannot be read.
#: 3: adds ``parameters``, the parameter records used (params_spec.json). Version 2 is read
#: too: its records are rebuilt from values, bounds, fixed and linked (the model's bounds for
#: fixed and linked parameters, scope "shared"), which is all version 2 knew.
_VERSION = 3
_READABLE = (2, 3)


# ------------------------------------------------------------------------------- records
@dataclass(frozen=True)
class Diagnostic:
    """One finding about a fit.

    Attributes
    ----------
    code : str
        Stable identifier, e.g. ``"at_bound"``, ``"not_identified"``, ``"extrapolation"``.
    severity : {"info", "warning", "error"}
        ``error``: the numbers should not be used as they are (not converged, singular);
        ``warning``: use with care; ``info``: a note about the data or the procedure.
    text : str
        One or two plain sentences, for people; code reads the fields, never the text.
    params : tuple of str
        The parameters the finding is about (e.g. the one at a bound, the correlated pair).
    extra : mapping
        Numbers and words that qualify it, JSON-ready: ``side`` and ``bound`` for
        ``at_bound``, ``r`` for ``high_correlation``, ``condition`` for ``near_singular``,
        ``quantity``, ``value`` and ``range`` for ``extrapolation``, ``stderr`` and ``value``
        for ``not_identified``; ``reasons`` (a list of ``"singular"``, ``"near_singular"``,
        ``"runaway"``, ``"undetermined"``) for ``degenerate_stop``; ``value`` and ``largest``
        for ``runaway``; ``reasons``, ``used``, ``user_objective`` and ``search_objective`` for
        ``global_search`` (the answer came from the search when ``used``).
    """

    code: str
    severity: Severity
    text: str
    params: tuple[str, ...] = ()
    extra: Mapping[str, Any] = field(default_factory=dict, hash=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {
            "code": self.code,
            "severity": self.severity,
            "text": self.text,
            "params": list(self.params),
            "extra": {k: _enc(v) if isinstance(v, float) else v for k, v in self.extra.items()},
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Diagnostic:
        """Inverse of :meth:`to_dict`."""
        extra = {
            k: _dec(v) if k in _FLOAT_EXTRAS else v for k, v in dict(d.get("extra", {})).items()
        }
        return cls(
            code=str(d["code"]),
            severity=d["severity"],
            text=str(d["text"]),
            params=tuple(str(n) for n in d.get("params", ())),
            extra=extra,
        )


# Entries of Diagnostic.extra that are floats (encoded like every other float in the JSON).
_FLOAT_EXTRAS = frozenset(
    {
        "bound",
        "r",
        "condition",
        "value",
        "stderr",
        "before",
        "after",
        "lower",
        "upper",
        "largest",
        "user_objective",
        "search_objective",
    }
)


@dataclass(frozen=True)
class Attempt:
    """One solver run in the fallback ladder of :func:`curvewright.fit`.

    Attributes
    ----------
    strategy : str
        Why this run was made: ``"first run"``, ``"restart from best point"``,
        ``"switch method"``, ``"rescaled parameters"``, ``"multi-start"``, ``"global search:
        start rule"``, ``"global search: multi-start"`` and ``"global search: polish"`` (after
        a suspect stop, from starts that ignore the given ones), ``"polish"`` (the
        last run, from the best point, with the analytic Jacobian for a formula) or
        ``"linear"``.
    method : str
        ``"levenberg_marquardt"`` (MINPACK), ``"trust_region"`` (the trust-region reflective
        method of ``scipy.optimize.least_squares``) or ``"linear"`` (QR, no iteration).
    evaluations : int
        Model evaluations this run used (finite-difference evaluations included).
    ssr : float
        Weighted sum of squared residuals at the run's end point.
    objective : float
        What the run minimised: ``ssr`` for the squared loss, else the robust loss sum.
    code : str
        Outcome code (see :mod:`curvewright.messages`).
    message : str
        The outcome's plain text.
    """

    strategy: str
    method: str
    evaluations: int
    ssr: float
    objective: float
    code: str
    message: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (non-finite numbers encoded as strings)."""
        return {
            "strategy": self.strategy,
            "method": self.method,
            "evaluations": self.evaluations,
            "ssr": _enc(self.ssr),
            "objective": _enc(self.objective),
            "code": self.code,
            "message": self.message,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Attempt:
        """Inverse of :meth:`to_dict`."""
        return cls(
            strategy=str(d["strategy"]),
            method=str(d["method"]),
            evaluations=int(d["evaluations"]),
            ssr=_dec(d["ssr"]),
            objective=_dec(d["objective"]),
            code=str(d["code"]),
            message=str(d["message"]),
        )


# ----------------------------------------------------------------------- JSON encoding
# JSON has no NaN or infinities; they are written as these strings and read back exactly.
# Finite floats go through Python's repr, which round-trips every IEEE double.
_NONFINITE = {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf}


def _enc(v: float | None) -> float | str | None:
    if v is None:
        return None
    f = float(v)
    if math.isnan(f):
        return "NaN"
    if math.isinf(f):
        return "Infinity" if f > 0 else "-Infinity"
    return f


def _dec(v: Any) -> float:
    if isinstance(v, str):
        if v not in _NONFINITE:
            raise ValueError(f"not an encoded number: {v!r}")
        return _NONFINITE[v]
    return float(v)


def _enc_array(a: FloatArray | None) -> dict[str, Any] | None:
    if a is None:
        return None
    return {"shape": list(a.shape), "data": [_enc(v) for v in a.ravel().tolist()]}


def _dec_array(d: Mapping[str, Any] | None) -> FloatArray | None:
    if d is None:
        return None
    shape = tuple(int(s) for s in d["shape"])
    flat = np.array([_dec(v) for v in d["data"]], dtype=float)
    return flat.reshape(shape)


def _enc_map(m: Mapping[str, float]) -> dict[str, Any]:
    return {k: _enc(v) for k, v in m.items()}


def _dec_map(d: Mapping[str, Any]) -> dict[str, float]:
    return {str(k): _dec(v) for k, v in d.items()}


def _ro(a: ArrayLike | None) -> Any:
    if a is None:
        return None
    arr = np.array(a, dtype=float, copy=True)
    arr.setflags(write=False)
    return arr


# ----------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class FitResult:
    """The outcome of :func:`curvewright.fit`; immutable.

    Arrays over data points (``fitted``, ``residuals``, ``weights``, ``jacobian``) cover the
    points used in the fit (excluded points left out), in dataset order, datasets one after
    another. Arrays over parameters (``covariance``, ``jacobian`` columns) follow ``cov_names``,
    the free parameters in model order.

    Attributes
    ----------
    model : Model
    datasets : tuple of Dataset
        What was fitted (one for :func:`curvewright.fit`); ``dataset`` is the first.
    values : mapping of str to float
        Every parameter's value (free, fixed and linked) in model order.
    stderr : mapping of str to float
        Asymptotic standard errors; NaN for fixed parameters and where the covariance is
        singular. Linked parameters get theirs by the delta method.
    free, fixed : tuple of str
        Names of the estimated and the held parameters.
    linked : mapping of str to str
        Linked parameters and their expressions.
    start : mapping of str to float
        The starting values of the first solver run.
    bounds : mapping of str to (float, float)
        Bounds in force for each free parameter (``-inf``/``inf`` for none).
    covariance : ndarray, shape (nfree, nfree)
        Covariance of the free parameters, scaled by the residual variance ``ssr / dof`` unless
        ``absolute_sigma`` (then the weights are taken as exact ``1/sigma**2``).
    ssr : float
        Weighted sum of squared residuals ``sum(((y - f) / sigma)**2)``: the quantity that
        least squares minimises, used by F tests, AICc and BIC. Without weights it is the
        plain residual sum of squares.
    rss : float
        Unweighted residual sum of squares ``sum((y - f)**2)`` in data units.
    n, nfree, dof : int
        Points used, free parameters, residual degrees of freedom ``n - nfree``.
    sigma_resid : float
        Residual standard deviation ``sqrt(ssr / dof)`` (in y units without weights; a
        dimensionless scale factor with weights).
    r2 : float
        ``1 - ssr / sst`` with ``sst`` the weighted total sum of squares about the weighted
        mean of y (the ordinary R² without weights). For a nonlinear model it is a descriptive
        number, not a test.
    aicc, bic : float
        Small-sample AIC and BIC from ``ssr`` with K = nfree + 1 (the residual variance counts).
    condition : float
        2-norm condition number of the weighted Jacobian after scaling each column to unit
        norm (``inf`` when singular).
    fitted, residuals : ndarray, shape (n,)
        Curve at the data and ``y - fitted`` in data units.
    weights : ndarray or None
        ``1/sigma`` used for each point (None when unweighted).
    jacobian : ndarray, shape (n, nfree)
        ``d f / d p`` at the solution, unweighted, for confidence bands and the delta method.
    param_jacobian : ndarray, shape (n_params, nfree)
        ``d value / d free parameter`` for every parameter in model order (identity rows for
        free parameters, zero rows for fixed ones, the link's gradient for linked ones).
    success : bool
    code, message : str
        The outcome code and its plain text (see :mod:`curvewright.messages`).
    messages : tuple of (str, str)
        The outcome rows of every solver attempt, in order.
    diagnostics : tuple of Diagnostic
    attempts : tuple of Attempt
    weighting : str
        ``"none"``, ``"sigma"``, ``"relative"`` or ``"poisson"`` (after resolving "auto").
    loss : str
    loss_scale : float or None
        The robust loss's residual scale (None for the squared loss).
    absolute_sigma : bool
    method : str
        Method of the attempt whose solution was kept.
    evaluations : int
        Model evaluations over all attempts.
    parameters : Parameters
        The parameter records of the fit: the fitted values with the bounds, fixed flags,
        links and scopes used (``fit(params=result.parameters)`` refits from the solution).
    """

    model: Model
    datasets: tuple[Dataset, ...]
    values: Mapping[str, float]
    stderr: Mapping[str, float]
    free: tuple[str, ...]
    fixed: tuple[str, ...]
    linked: Mapping[str, str]
    start: Mapping[str, float]
    bounds: Mapping[str, tuple[float, float]]
    covariance: FloatArray
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
    fitted: FloatArray
    residuals: FloatArray
    weights: FloatArray | None
    jacobian: FloatArray
    param_jacobian: FloatArray
    success: bool
    code: str
    message: str
    messages: tuple[tuple[str, str], ...]
    diagnostics: tuple[Diagnostic, ...]
    attempts: tuple[Attempt, ...]
    weighting: str
    loss: str
    loss_scale: float | None
    absolute_sigma: bool
    method: str
    evaluations: int
    # Made from the fields above when not given (a result built by hand, or read from format 2).
    parameters: Parameters = field(default_factory=lambda: Parameters(()), repr=False)
    _lmfit: Any = field(default=None, repr=False, compare=False)

    def __post_init__(self) -> None:
        # Freeze everything: copies, so the caller's arrays and dicts stay theirs.
        put = object.__setattr__
        put(self, "datasets", tuple(self.datasets))
        put(self, "values", MappingProxyType({k: float(v) for k, v in self.values.items()}))
        put(self, "stderr", MappingProxyType({k: float(v) for k, v in self.stderr.items()}))
        put(self, "free", tuple(self.free))
        put(self, "fixed", tuple(self.fixed))
        put(self, "linked", MappingProxyType(dict(self.linked)))
        put(self, "start", MappingProxyType({k: float(v) for k, v in self.start.items()}))
        put(
            self,
            "bounds",
            MappingProxyType({k: (float(a), float(b)) for k, (a, b) in self.bounds.items()}),
        )
        for name in ("covariance", "fitted", "residuals", "weights", "jacobian", "param_jacobian"):
            put(self, name, _ro(getattr(self, name)))
        put(self, "messages", tuple((str(c), str(t)) for c, t in self.messages))
        put(self, "diagnostics", tuple(self.diagnostics))
        put(self, "attempts", tuple(self.attempts))
        if not isinstance(self.parameters, Parameters):
            put(self, "parameters", Parameters(self.parameters))
        if not len(self.parameters) and self.model.params:
            put(self, "parameters", self._records_from_fields())

    def _records_from_fields(self) -> Parameters:
        return Parameters(
            Parameter(
                p.name,
                float(self.values[p.name]),
                *self.bounds.get(p.name, (p.lower, p.upper)),
                fixed=p.name in self.fixed,
                link=self.linked.get(p.name),
            )
            for p in self.model.params
        )

    # ------------------------------------------------------------------ properties
    @property
    def dataset(self) -> Dataset:
        """The (first) dataset fitted."""
        return self.datasets[0]

    @property
    def cov_names(self) -> tuple[str, ...]:
        """Names of the rows and columns of ``covariance`` (the free parameters)."""
        return self.free

    @property
    def correlation(self) -> FloatArray:
        """Correlation matrix of the free parameters (NaN where a variance is 0 or NaN)."""
        corr = correlation_matrix(self.covariance)
        corr.setflags(write=False)
        return corr

    @property
    def x(self) -> FloatArray:
        """x of the points used in the fit, datasets one after another."""
        out = np.concatenate([d.x_used for d in self.datasets])
        out.setflags(write=False)
        return out

    @property
    def y(self) -> FloatArray:
        """y of the points used in the fit."""
        out = np.concatenate([d.y_used for d in self.datasets])
        out.setflags(write=False)
        return out

    @property
    def weighted_residuals(self) -> FloatArray:
        """``(y - fitted) / sigma`` (the residuals themselves when unweighted)."""
        out = self.residuals if self.weights is None else self.residuals * self.weights
        out = np.array(out)
        out.setflags(write=False)
        return out

    @property
    def weighted_jacobian(self) -> FloatArray:
        """The Jacobian with each row multiplied by ``1/sigma`` (as least squares sees it)."""
        out = self.jacobian if self.weights is None else self.jacobian * self.weights[:, None]
        out = np.array(out)
        out.setflags(write=False)
        return out

    @property
    def n_params(self) -> int:
        """Number of model parameters (free, fixed and linked)."""
        return len(self.model.params)

    @property
    def lmfit_result(self) -> Any:
        """An ``lmfit.MinimizerResult`` at the solution, for power users.

        The best lmfit run of the fallback ladder when there was one; otherwise (the fast
        analytic path runs no lmfit) made on first access by a short lmfit run started at the
        solution. None for linear fits, for runs cut short (time limit, evaluation limit,
        cancel), for a fast-path fit that did not converge, and after :meth:`from_dict`. Treat
        it as read-only: curvewright computed its own covariance and statistics from its own
        Jacobian, so lmfit's may differ in the last digits.
        """
        if callable(self._lmfit):  # made when first asked for, then kept
            object.__setattr__(self, "_lmfit", self._lmfit())
        return self._lmfit

    @property
    def at_bound(self) -> dict[str, str]:
        """Free parameters at a bound: name -> ``"lower"`` or ``"upper"``."""
        return {d.params[0]: str(d.extra["side"]) for d in self.diagnostics if d.code == "at_bound"}

    # ------------------------------------------------------------------ evaluation
    def predict(self, x: ArrayLike) -> FloatArray:
        """The fitted curve at new ``x``.

        Parameters
        ----------
        x : array_like

        Returns
        -------
        ndarray
            Same shape as ``x``.
        """
        return self.model.eval(x, dict(self.values))

    def _quantile(self, level: float) -> float:
        # sigma taken as known: the variance is not estimated, so the normal quantile.
        return quantile(level, self.dof, known_sigma=self.absolute_sigma)

    def ci(self, level: float = 0.95) -> pd.DataFrame:
        """Asymptotic (Wald) confidence intervals of the parameters.

        ``value ± q * stderr`` with ``q`` the Student t quantile on ``dof`` degrees of freedom,
        or the normal quantile when ``absolute_sigma`` (common practice for known sigma).
        These intervals assume the model is close to linear in its parameters near the
        solution; profile-likelihood intervals are more faithful for strongly curved models.

        Parameters
        ----------
        level : float
            Coverage, between 0 and 1.

        Returns
        -------
        pandas.DataFrame
            Indexed by parameter name, columns ``value, stderr, lower, upper``; NaN bounds for
            fixed parameters.
        """
        q = self._quantile(level)
        names = list(self.model.param_names)
        value = np.array([self.values[n] for n in names])
        se = np.array([self.stderr[n] for n in names])
        out: pd.DataFrame = pd.DataFrame(
            {"value": value, "stderr": se, "lower": value - q * se, "upper": value + q * se},
            index=pd.Index(names, name="parameter"),
        )
        return out

    def derived(self, level: float = 0.95) -> pd.DataFrame:
        """Derived quantities (half-life, EC50, ...) with delta-method standard errors.

        The standard error of ``g(p)`` is ``sqrt(grad' C grad)`` with ``grad`` the gradient of
        ``g`` with respect to the free parameters (symbolic, through any links) and ``C`` the
        covariance (common practice: the first-order delta method). Intervals are
        ``value ± q * stderr`` as in :meth:`ci`, except for a quantity that is ``10**p`` or
        ``exp(p)`` of one free parameter (an EC50 from its log), whose interval is the
        parameter's interval transformed (asymmetric, always positive).

        Parameters
        ----------
        level : float
            Coverage of the intervals.

        Returns
        -------
        pandas.DataFrame
            Indexed by name, columns ``value, stderr, lower, upper, unit, axis, in_data_range,
            description``. ``in_data_range`` is True/False for x-axis quantities (EC50, Km,
            half-life) and None for others.
        """
        q = self._quantile(level)
        rows = [self._derived_row(d, q) for d in self.model.derived]
        cols = ["value", "stderr", "lower", "upper", "unit", "axis", "in_data_range", "description"]
        df = pd.DataFrame(rows, columns=["name", *cols])
        out: pd.DataFrame = df.set_index("name")
        return out

    def _derived_row(self, d: Derived, q: float) -> dict[str, Any]:
        value, se = derived_value_and_se(
            d.expr, self.model.param_names, self.values, self.param_jacobian, self.covariance
        )
        inside: bool | None = None
        if d.axis == "x":
            inside = bool(_in_range(value, self.x))
        lower, upper = value - q * se, value + q * se
        base_param = _power_of(d)
        if base_param is not None and base_param[1] in self.free:
            # ec50 = 10**log_ec50 (or exp): the interval is the parameter's interval carried
            # through the transform (common practice), asymmetric and never negative, where
            # the symmetric delta-method interval could cross zero.
            base, name = base_param
            v, s = self.values[name], self.stderr[name]
            # numpy's power: a huge standard error gives an infinite bound, not OverflowError
            with np.errstate(over="ignore"):
                lower = float(np.power(base, v - q * s))
                upper = float(np.power(base, v + q * s))
        return {
            "name": d.name,
            "value": value,
            "stderr": se,
            "lower": lower,
            "upper": upper,
            "unit": d.unit,
            "axis": d.axis,
            "in_data_range": inside,
            "description": d.description,
        }

    def to_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per parameter, in model order.

        Columns: ``value, stderr, rel_stderr, ci_low, ci_high`` (Wald, see :meth:`ci`),
        ``status`` ("free", "fixed" or "linked"), ``fixed`` (bool), ``link`` (the expression
        or ""), ``lower, upper`` (bounds in force), ``at_lower, at_upper`` (bool),
        ``not_identified`` (bool, relative SE above :data:`NOT_IDENTIFIED_RSE`), ``start``,
        ``unit``, ``description``.
        """
        ci = self.ci(level)
        ci_lo, ci_hi = _bounds_of(ci)
        at = self.at_bound
        flagged = {n for d in self.diagnostics if d.code == "not_identified" for n in d.params}
        rows = []
        for p in self.model.params:
            n = p.name
            status = "fixed" if n in self.fixed else ("linked" if n in self.linked else "free")
            lo, hi = self.bounds.get(n, (p.lower, p.upper))
            v, se = self.values[n], self.stderr[n]
            rows.append(
                {
                    "parameter": n,
                    "value": v,
                    "stderr": se,
                    "rel_stderr": abs(se / v) if v != 0 else math.inf if se > 0 else math.nan,
                    "ci_low": ci_lo[n],
                    "ci_high": ci_hi[n],
                    "status": status,
                    "fixed": status == "fixed",
                    "link": self.linked.get(n, ""),
                    "lower": lo,
                    "upper": hi,
                    "at_lower": at.get(n) == "lower",
                    "at_upper": at.get(n) == "upper",
                    "not_identified": n in flagged,
                    "start": self.start.get(n, math.nan),
                    "unit": p.unit,
                    "description": p.description,
                }
            )
        out: pd.DataFrame = pd.DataFrame(rows).set_index("parameter")
        return out

    # ------------------------------------------------------ reports (curvewright.reports)
    def report(
        self,
        format: Literal["html", "markdown"] = "html",
        *,
        level: float = 0.95,
        figure: bool = True,
        path: str | Any = None,
        comparison: Any = None,
        intervals: Literal["wald", "profile"] = "wald",
    ) -> Any:
        """A self-contained report of the fit (HTML or Markdown), ready to save or show.

        See :func:`curvewright.reports.report`.
        """
        return report_function("report")(
            self,
            format,
            level=level,
            figure=figure,
            path=path,
            comparison=comparison,
            intervals=intervals,
        )

    def methods(self, level: float = 0.95, intervals: Literal["wald", "profile"] = "wald") -> str:
        """A methods paragraph saying what was done, to paste into a paper.

        See :func:`curvewright.reports.methods`.
        """
        out: str = report_function("methods")(self, level=level, intervals=intervals)
        return out

    def to_excel(self, path: str | Any, *, level: float = 0.95) -> Any:
        """Write the parameters, derived quantities, diagnostics and data to an .xlsx file.

        See :func:`curvewright.reports.to_excel` (needs ``pip install "curvewright[excel]"``).
        """
        return report_function("to_excel")(self, path, level=level)

    # ------------------------------------------------------ uncertainty (curvewright.stats)
    # Thin delegates to the statistics layer, which sits above this record and imports it, so
    # the record cannot import it back (not even late): curvewright.stats registers the
    # functions behind these methods when it is imported (see register_statistics).
    def parameter_table(self, level: float = 0.95) -> pd.DataFrame:
        """Estimates with standard error, t, p and Wald interval.

        See :func:`curvewright.stats.uncertainty.parameter_table`.
        """
        out: pd.DataFrame = _statistic("parameter_table")(self, level)
        return out

    def profile_ci(self, names: Sequence[str] | None = None, level: float = 0.95) -> pd.DataFrame:
        """Profile-likelihood intervals.

        See :func:`curvewright.stats.uncertainty.profile_intervals`.
        """
        out: pd.DataFrame = _statistic("profile_intervals")(self, names, level)
        return out

    def correlation_report(self, threshold: float = HIGH_CORRELATION) -> Any:
        """Correlation matrix with a warning per pair above ``threshold``.

        See :func:`curvewright.stats.uncertainty.correlation`.
        """
        return _statistic("correlation")(self, threshold)

    def derived_table(self, level: float = 0.95) -> pd.DataFrame:
        """Derived quantities with delta-method errors and extrapolation flags.

        See :func:`curvewright.stats.uncertainty.derived_table`.
        """
        out: pd.DataFrame = _statistic("derived_table")(self, level)
        return out

    def derive(self, expression: str, level: float = 0.95, *, axis: str | None = None) -> Any:
        """Any function of the parameters with a delta-method error.

        See :func:`curvewright.stats.uncertainty.derived_quantity`.
        """
        return _statistic("derived_quantity")(self, expression, level, axis=axis)

    def confidence_band(self, x: ArrayLike, level: float = 0.95) -> pd.DataFrame:
        """Pointwise confidence band of the curve.

        See :func:`curvewright.stats.uncertainty.confidence_band`.
        """
        out: pd.DataFrame = _statistic("confidence_band")(self, x, level)
        return out

    def prediction_band(
        self,
        x: ArrayLike,
        level: float = 0.95,
        *,
        sigma: ArrayLike | float | None = None,
        replicates: int = 1,
    ) -> pd.DataFrame:
        """Pointwise prediction band for new observations.

        See :func:`curvewright.stats.uncertainty.prediction_band`.
        """
        out: pd.DataFrame = _statistic("prediction_band")(
            self, x, level, sigma=sigma, replicates=replicates
        )
        return out

    def inverse_predict(
        self,
        y: ArrayLike,
        level: float = 0.95,
        *,
        replicates: int = 1,
        sigma: ArrayLike | float | None = None,
    ) -> pd.DataFrame:
        """x for observed y off this standard curve, with a calibration interval.

        See :func:`curvewright.stats.uncertainty.inverse_predict`.
        """
        out: pd.DataFrame = _statistic("inverse_predict")(
            self, y, level, replicates=replicates, sigma=sigma
        )
        return out

    def residual_diagnostics(self, alpha: float = 0.05) -> Any:
        """Residual plots' data, normality, runs and lack-of-fit tests, outliers, influence.

        See :func:`curvewright.stats.diagnostics.residual_diagnostics`.
        """
        return _statistic("residual_diagnostics")(self, alpha)

    # --------------------------------------------------------------------- text
    def plot(
        self,
        ax: Axes | None = None,
        *,
        bands: Literal["confidence", "prediction"] | tuple[str, ...] | None = "confidence",
        level: float = 0.95,
        residuals: bool | None = None,
        log_x: bool | None = None,
        **opts: Any,
    ) -> Figure:
        """Draw the fit: data (mean ± SD at repeated x), curve, band, excluded points, residuals.

        See :func:`curvewright.figures.plot_fit` for the options.
        """
        out: Figure = figure_function("fit")(
            self, ax, bands=bands, level=level, residuals=residuals, log_x=log_x, **opts
        )
        return out

    def summary(self) -> str:
        """A readable plain-text report of the fit.

        Outcome, parameters, derived quantities, fit statistics, diagnostics and the
        research-use caution.
        """
        m = self.model
        lines: list[str] = []
        head = f"curvewright fit of {m.name!r}"
        lines.append(head)
        lines.append("=" * len(head))
        lines.append(
            f"curve:      y = {m.formula}"
            if m.formula
            else "curve:      a Python function (no formula)"
        )
        used = sum(d.n for d in self.datasets)
        excluded = sum(int((~d.include).sum()) for d in self.datasets)
        dropped = sum(d.n_dropped for d in self.datasets)
        extra = []
        if excluded:
            extra.append(f"{excluded} excluded")
        if dropped:
            extra.append(f"{dropped} row(s) with NaN dropped")
        lines.append(
            f"data:       {used} points used" + (f" ({', '.join(extra)})" if extra else "")
        )
        wt = {
            "none": "none (equal weights)",
            "sigma": "1/sigma^2 from the given sigma",
            "relative": "relative, 1/y^2",
            "poisson": "Poisson, 1/|y|",
        }[self.weighting]
        lines.append(
            f"weighting:  {wt}" + ("; sigma taken as exact" if self.absolute_sigma else "")
        )
        if self.loss != "squared":
            lines.append(f"loss:       {self.loss} (residual scale {self.loss_scale:.6g})")
        verdict = (
            "OK"
            if self.success
            else ("DEGENERATE" if self.code == "degenerate_stop" else "NOT CONVERGED")
        )
        lines.append(f"outcome:    {verdict} - {self.message}")
        lines.append(
            f"            method {self.method}, {self.evaluations} model evaluations, "
            f"{len(self.attempts)} solver run(s)"
        )
        lines.append("")
        level_pct = "95%"
        ci = self.ci(0.95)
        ci_lo, ci_hi = _bounds_of(ci)
        w = max([len(n) for n in m.param_names] + [9])
        lines.append(
            f"{'parameter':<{w}}  {'value':>13}  {'std. error':>11}  "
            f"{level_pct + ' interval':>29}  note"
        )
        at = self.at_bound
        for p in m.params:
            n = p.name
            note = []
            if n in self.fixed:
                note.append("held fixed")
            if n in self.linked:
                note.append(f"= {self.linked[n]}")
            if n in at:
                note.append(f"at {at[n]} bound")
            lo, hi = ci_lo[n], ci_hi[n]
            interval = "" if n in self.fixed else f"[{_num(lo)}, {_num(hi)}]"
            lines.append(
                f"{n:<{w}}  {_num(self.values[n]):>13}  "
                f"{'' if n in self.fixed else _num(self.stderr[n]):>11}  {interval:>29}  "
                + "; ".join(note)
            )
        if m.derived:
            lines.append("")
            lines.append("derived quantities (delta-method standard errors)")
            df = self.derived(0.95)
            wd = max([len(d.name) for d in m.derived] + [9])
            for name, row in df.iterrows():
                flag = ""
                if row["in_data_range"] is False:
                    flag = "EXTRAPOLATED: outside the range of x in the data"
                lines.append(
                    f"{name!s:<{wd}}  {_num(row['value']):>13}  {_num(row['stderr']):>11}  "
                    f"{'[' + _num(row['lower']) + ', ' + _num(row['upper']) + ']':>29}  {flag}"
                )
        lines.extend(fit_quality_lines(self, "goodness of fit"))
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def __repr__(self) -> str:
        vals = ", ".join(f"{k}={_num(v)}" for k, v in self.values.items())
        state = "ok" if self.success else "not converged"
        return f"<FitResult {self.model.name!r} {state}: {vals}; ssr={_num(self.ssr)}>"

    def _repr_html_(self) -> str:
        e = html.escape
        ci = self.ci(0.95)
        ci_lo, ci_hi = _bounds_of(ci)
        at = self.at_bound
        rows = []
        for p in self.model.params:
            n = p.name
            if n in self.fixed:
                se, interval, note = "", "", "fixed"
            else:
                se = _num(self.stderr[n])
                interval = f"{_num(ci_lo[n])} to {_num(ci_hi[n])}"
                note = f"= {self.linked[n]}" if n in self.linked else ""
                if n in at:
                    note = (note + "; " if note else "") + f"at {at[n]} bound"
            rows.append(
                f"<tr><th>{e(n)}</th><td>{e(_num(self.values[n]))}</td><td>{e(se)}</td>"
                f"<td>{e(interval)}</td><td>{e(note)}</td></tr>"
            )
        for d in self.model.derived:
            value, sd = derived_value_and_se(
                d.expr, self.model.param_names, self.values, self.param_jacobian, self.covariance
            )
            rows.append(
                f"<tr class='cw-derived'><th>{e(d.name)}</th><td>{e(_num(value))}</td>"
                f"<td>{e(_num(sd))}</td><td></td><td>derived</td></tr>"
            )
        diag = "".join(
            f"<li class='cw-{e(d.severity)}'>{e(d.text)}</li>"
            for d in self.diagnostics
            if d.severity != "info"
        )
        status = "converged" if self.success else "not converged"
        return (
            "<div class='cw-result' style='font-family:sans-serif;font-size:13px'>"
            f"<div><b>{e(self.model.name)}</b> &middot; {e(status)}: {e(self.message)}</div>"
            "<table style='border-collapse:collapse'>"
            "<thead><tr><th>parameter</th><th>value</th><th>std. error</th>"
            "<th>95% interval</th><th></th></tr></thead><tbody>"
            + "".join(rows)
            + "</tbody></table>"
            f"<div>n = {self.n}, dof = {self.dof}, SSR = {e(_num(self.ssr))}, "
            f"R&sup2; = {e(_num(self.r2))}, AICc = {e(_num(self.aicc))}</div>"
            + (f"<ul>{diag}</ul>" if diag else "")
            + f"<div style='font-size:11px;opacity:0.75'>{e(CAUTION)}</div></div>"
        )

    # ----------------------------------------------------------------- JSON
    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict holding the whole result (not the lmfit object).

        Non-finite numbers are encoded as the strings ``"NaN"``, ``"Infinity"`` and
        ``"-Infinity"``; arrays as ``{"shape": [...], "data": [...]}`` in C order.
        """
        return {
            "format": _FORMAT,
            "version": _VERSION,
            "model": self.model.to_dict(),
            "datasets": [d.to_dict() for d in self.datasets],
            "values": _enc_map(self.values),
            "stderr": _enc_map(self.stderr),
            "free": list(self.free),
            "fixed": list(self.fixed),
            "linked": dict(self.linked),
            "start": _enc_map(self.start),
            "bounds": {k: [_enc(a), _enc(b)] for k, (a, b) in self.bounds.items()},
            "covariance": _enc_array(self.covariance),
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
            "fitted": _enc_array(self.fitted),
            "residuals": _enc_array(self.residuals),
            "weights": _enc_array(self.weights),
            "jacobian": _enc_array(self.jacobian),
            "param_jacobian": _enc_array(self.param_jacobian),
            "success": self.success,
            "code": self.code,
            "message": self.message,
            "messages": [list(m) for m in self.messages],
            "diagnostics": [d.to_dict() for d in self.diagnostics],
            "attempts": [a.to_dict() for a in self.attempts],
            "weighting": self.weighting,
            "loss": self.loss,
            "loss_scale": _enc(self.loss_scale),
            "absolute_sigma": self.absolute_sigma,
            "method": self.method,
            "evaluations": self.evaluations,
            "parameters": self.parameters.to_json(),
        }

    def to_json(self, **kwargs: Any) -> str:
        """The result as a JSON string (strict JSON: no NaN literals).

        Parameters
        ----------
        **kwargs
            Passed to :func:`json.dumps` (e.g. ``indent=2``).
        """
        return json.dumps(self.to_dict(), allow_nan=False, **kwargs)

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # Pickled through the exact JSON form (so a process pool or a cluster carries what a
        # saved result carries), with the model alongside: it pickles itself, and a Python
        # callable travels by reference.
        return (_result_from_pickle, (self.to_json(), self.model))

    @classmethod
    def from_dict(
        cls, d: Mapping[str, Any], *, model: Model | Callable[..., Any] | None = None
    ) -> FitResult:
        """Rebuild a result from :meth:`to_dict` output.

        Parameters
        ----------
        d : mapping
        model : Model or callable, optional
            Required when the fit used a Python function: pass that function (or the Model
            made from it). Formula models are rebuilt from the JSON.

        Raises
        ------
        ModelError
            Not a saved result, or saved in another format version (format 1 used older
            names: refit); the result came from a Python function and ``model`` was not given,
            or the given model does not match the stored one.
        """
        if d.get("format") != _FORMAT:
            raise ModelError(
                f"this is not a saved curvewright fit result (format {d.get('format')!r}); "
                "load the output of FitResult.to_json()."
            )
        version = d.get("version")
        if version not in _READABLE:
            if version == 1:
                raise ModelError(
                    "this result was saved in curvewright result format 1, which used older "
                    "model, parameter and option names; it cannot be read by this version. "
                    "Refit the data with this version and save the new result."
                )
            raise ModelError(
                f"this result was saved in curvewright result format {version!r}; this version "
                f"reads formats {' and '.join(map(str, _READABLE))} only. Refit the data with "
                "this version, or load the result with the curvewright version that saved it."
            )
        try:
            return cls._from_dict(d, model)
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            if isinstance(exc, CurvewrightError):
                raise
            raise ModelError(
                f"the saved fit result is incomplete or corrupted ({type(exc).__name__}: {exc}); "
                "load an unmodified output of FitResult.to_json()."
            ) from exc

    @classmethod
    def _from_dict(
        cls, d: Mapping[str, Any], model: Model | Callable[..., Any] | None
    ) -> FitResult:
        mdict = d["model"]
        rebuilt = _restore_model(mdict, model)
        lin = {str(k): str(v) for k, v in d["linked"].items()}
        values = _dec_map(d["values"])
        # JSON writes a non-finite value as null; the exact values are in "values".
        records = (
            Parameters(())  # format 2: rebuilt from the other fields
            if d["version"] == 2
            else Parameters.from_json(d["parameters"]).with_values(values)
        )
        return cls(
            model=rebuilt,
            datasets=tuple(Dataset.from_dict(x) for x in d["datasets"]),
            values=values,
            stderr=_dec_map(d["stderr"]),
            free=tuple(d["free"]),
            fixed=tuple(d["fixed"]),
            linked=lin,
            start=_dec_map(d["start"]),
            bounds={k: (_dec(a), _dec(b)) for k, (a, b) in d["bounds"].items()},
            covariance=_need(_dec_array(d["covariance"])),
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
            fitted=_need(_dec_array(d["fitted"])),
            residuals=_need(_dec_array(d["residuals"])),
            weights=_dec_array(d["weights"]),
            jacobian=_need(_dec_array(d["jacobian"])),
            param_jacobian=_need(_dec_array(d["param_jacobian"])),
            success=bool(d["success"]),
            code=str(d["code"]),
            message=str(d["message"]),
            messages=tuple((str(c), str(t)) for c, t in d["messages"]),
            diagnostics=tuple(Diagnostic.from_dict(x) for x in d["diagnostics"]),
            attempts=tuple(Attempt.from_dict(x) for x in d["attempts"]),
            weighting=str(d["weighting"]),
            loss=str(d["loss"]),
            loss_scale=None if d["loss_scale"] is None else _dec(d["loss_scale"]),
            absolute_sigma=bool(d["absolute_sigma"]),
            method=str(d["method"]),
            evaluations=int(d["evaluations"]),
            parameters=records,
        )

    @classmethod
    def from_json(cls, text: str, *, model: Model | Callable[..., Any] | None = None) -> FitResult:
        """Rebuild a result from :meth:`to_json` output (see :meth:`from_dict`)."""
        return cls.from_dict(json.loads(text), model=model)


# ------------------------------------------------------------------------ helpers
def _result_from_pickle(text: str, model: Model) -> FitResult:
    return FitResult.from_json(text, model=model)


def _need(a: FloatArray | None) -> FloatArray:
    if a is None:
        raise ModelError("a saved fit result is missing an array; the file is damaged.")
    return a


def _restore_model(mdict: Mapping[str, Any], given: Model | Callable[..., Any] | None) -> Model:
    if mdict.get("formula") is not None:
        rebuilt = Model.from_dict(mdict)
        if isinstance(given, Model) and not given.same_form(rebuilt):
            raise ModelError(
                f"the model given ({given!r}) is not the one this result was fitted with "
                f"({rebuilt!r}); leave model= out for formula models."
            )
        return rebuilt
    name = mdict.get("name")
    if given is None:
        raise ModelError(
            f"this result was fitted with the Python function {name!r}, which JSON cannot "
            "hold; pass it again: FitResult.from_json(text, model=that_function)."
        )
    params = [Param.from_dict(p) for p in mdict["params"]]
    if isinstance(given, Model):
        m = given
    elif callable(given):
        m = Model.from_callable(
            given,
            name=str(name),
            params=params,
            derived=[Derived.from_dict(x) for x in mdict.get("derived", [])],
            domain=mdict.get("domain", "all"),
            description=mdict.get("description", ""),
        )
    else:
        raise ModelError(f"model= must be a Model or a callable, got {type(given).__name__}.")
    stored = [p["name"] for p in mdict["params"]]
    if list(m.param_names) != stored:
        raise ModelError(
            f"the function given takes parameters {list(m.param_names)}, but the result was "
            f"fitted with {stored}; pass the same function."
        )
    return m


def _power_of(d: Derived) -> tuple[float, str] | None:
    """``(base, parameter)`` when ``d`` is ``10**p`` or ``exp(p)`` of one parameter, else None."""
    t = d.expr.to_json()
    if t.get("type") == "call" and t.get("fn") == "exp":
        arg = t["args"][0]
        if arg.get("type") == "name":
            return math.e, str(arg["id"])
    if t.get("type") == "bin" and t.get("op") == "**":
        left, right = t["left"], t["right"]
        if right.get("type") == "name" and left.get("type") in ("num", "const"):
            base = float(left["value"]) if left["type"] == "num" else math.e
            if left["type"] == "const" and left.get("id") != "e":
                return None
            if base > 0:
                return base, str(right["id"])
    return None


def _bounds_of(ci: pd.DataFrame) -> tuple[dict[str, float], dict[str, float]]:
    names = [str(n) for n in ci.index]
    lo = ci["lower"].to_numpy(dtype=float)
    hi = ci["upper"].to_numpy(dtype=float)
    return dict(zip(names, lo.tolist(), strict=True)), dict(zip(names, hi.tolist(), strict=True))


def _num(v: float) -> str:
    """Compact number text for tables: 6 significant digits."""
    f = float(v)
    if math.isnan(f):
        return "nan"
    if math.isinf(f):
        return "inf" if f > 0 else "-inf"
    return f"{f:.6g}"


def _in_range(value: float, x: FloatArray) -> bool:
    if not math.isfinite(value) or x.size == 0:
        return True
    return bool(float(np.min(x)) <= value <= float(np.max(x)))


# --------------------------------------------------------------- upper-layer registry
# The statistics (curvewright.stats), the figures and the reports are built on this module, so
# it cannot import them; each registers, when imported, the functions behind the results'
# convenience methods (as the catalog registers itself with the models). Importing anything
# from curvewright runs the package's __init__, which imports all three. One table per package.
_REGISTRY: dict[str, dict[str, Callable[..., Any]]] = {
    "curvewright.stats": {},
    "curvewright.reports": {},
    "curvewright.figures": {},
}


def _registered(package: str, name: str) -> Callable[..., Any]:
    try:
        return _REGISTRY[package][name]
    except KeyError:
        raise CurvewrightError(
            f"the results need {package} for {name}, and it has not been imported; "
            f"import curvewright (or {package}) first."
        ) from None


def register_statistics(**functions: Callable[..., Any]) -> None:
    """Tell FitResult's convenience methods where their statistics live (called by the stats)."""
    _REGISTRY["curvewright.stats"].update(functions)


def _statistic(name: str) -> Callable[..., Any]:
    return _registered("curvewright.stats", name)


def register_reports(**functions: Callable[..., Any]) -> None:
    """Tell the results' ``report``, ``methods`` and ``to_excel`` where they live."""
    _REGISTRY["curvewright.reports"].update(functions)


def report_function(name: str) -> Callable[..., Any]:
    """The registered reports function ``name`` (``report``, ``methods``, ``to_excel``)."""
    return _registered("curvewright.reports", name)


def register_figures(**functions: Callable[..., Any]) -> None:
    """Tell the results' ``plot`` methods where their drawing lives (called by the figures)."""
    _REGISTRY["curvewright.figures"].update(functions)


def figure_function(name: str) -> Callable[..., Any]:
    """The registered drawing function ``name`` (``fit``, ``global_fit``, ``batch``, ``forest``)."""
    return _registered("curvewright.figures", name)


def fit_quality_lines(r: Any, title: str) -> list[str]:
    """A summary's end: goodness of fit, the notes and the caution (FitResult, GlobalResult)."""
    ss_name = "weighted SSR" if r.weights is not None else "SSR"
    lines = [
        "",
        title,
        f"  {ss_name} {_num(r.ssr)}, residual SD {_num(r.sigma_resid)}, R^2 {_num(r.r2)}",
        f"  n {r.n}, free parameters {r.nfree}, degrees of freedom {r.dof}",
        f"  AICc {_num(r.aicc)}, BIC {_num(r.bic)}",
    ]
    if r.diagnostics:
        lines += ["", "notes", *(f"  [{d.severity}] {d.text}" for d in r.diagnostics)]
    return [*lines, "", CAUTION]
