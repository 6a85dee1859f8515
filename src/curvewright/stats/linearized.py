"""Linearised fits: the classic straight-line plots, back-transformed and set beside least squares.

Each transform turns a curve into a straight line ``z = a + b*t``, fits that line by ordinary
least squares, and reads the curve's parameters off ``a`` and ``b``:

===================  ===============  ===============  ==========================================
transform            t (abscissa)     z (ordinate)     parameters
===================  ===============  ===============  ==========================================
lineweaver_burk      1/x              1/y              Vmax = 1/a, Km = b/a
hanes_woolf          x                x/y              Vmax = 1/b, Km = a/b
eadie_hofstee        y/x              y                Vmax = a, Km = -b
semilog              x                ln|y - base|     amplitude = +-exp(a), k = -b (y0, k: growth)
loglog               ln x             ln y             a = exp(a), b = b
logit                log10 x (or x)   log10(f/(1-f))   midpoint = -a/b, slope = b
===================  ===============  ===============  ==========================================

The point estimates are those of the linearisation helpers in :mod:`curvewright.start` (which
also serve as starting values); this module adds the line's statistics, delta-method standard
errors of the back-transformed parameters, the weights the transform implicitly gives each
point, and the nonlinear least-squares estimates of the same model side by side.

Why the nonlinear estimate is the one to report: ordinary least squares on ``z = g(y)`` treats
every transformed point as equally precise. If y has constant error, ``g(y)`` has error about
``|g'(y)| sd(y)``, so the line weights point i, in effect, by ``1/g'(y_i)**2`` relative to a fit
of y itself: a transform reweights the data according to its own shape, not to how the data
were measured. Nonlinear least squares fits y on the scale it was measured (with the weights
you chose), and its standard errors describe that fit; the line's standard errors describe a
different, distorted fit (common practice; e.g. Bates and Watts 1988, section 2.1, and
Cornish-Bowden, *Fundamentals of Enzyme Kinetics*, on the double-reciprocal plot, from memory).
"""

from __future__ import annotations

import html
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from curvewright import start as _start
from curvewright.errors import DataError, FitError, ParameterError
from curvewright.inference import delta_method_se
from curvewright.numerics import finite_difference_jacobian

if TYPE_CHECKING:
    from curvewright.result import FitResult

__all__ = ["TRANSFORMS", "LinearizedFit", "linearized_fit", "linearized_fits"]

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

_LN10 = math.log(10.0)

#: Fraction of the distance to the baseline (semilog) or of the change between the levels
#: (logit) below which points are left out of the line: their logarithm is dominated by noise.
#: The same rule as the helpers in :mod:`curvewright.start`.
_SEMILOG_TRIM = 0.05
_LOGIT_TRIM = 0.05


# ----------------------------------------------------------------------------------- records
@dataclass(frozen=True)
class LinearizedFit:
    """One straight-line plot, its back-transformed parameters, and the nonlinear estimates.

    Attributes
    ----------
    transform : str
        One of :data:`TRANSFORMS`.
    model_name : str
        The catalog model whose parameters the line estimates (e.g. ``"michaelis_menten"``).
    t, z : ndarray
        The transformed points the line was fitted to (abscissa, ordinate).
    used : ndarray of bool
        Over the input points: which ones the line used (the transform needs x > 0 and/or
        y > 0, or y strictly between the two levels).
    intercept, slope : float
        The ordinary least-squares line ``z = intercept + slope * t``.
    intercept_se, slope_se : float
        Their standard errors (ordinary least squares on the transformed scale).
    line_r2 : float
        R² of the line on the transformed scale (not comparable with a curve's R²).
    held : mapping of str to float
        Quantities the transform needs and takes as known (baseline, zero_dose, full_effect, K).
    table : pandas.DataFrame
        One row per parameter: ``linearized``, ``linearized_se`` (delta method from the line's
        covariance), ``nonlinear``, ``nonlinear_se``, ``difference_pct`` (100 (lin - nls)/nls).
    effective_weights : ndarray or None
        Over the used points, the weight the line implicitly gives each y relative to an
        unweighted fit of y itself, ``1/g'(y)**2`` scaled to mean 1 (None for Eadie-Hofstee,
        whose y sits on both axes).
    note : str
        How the transform reweights the errors, and why the nonlinear estimate is the one to
        report.
    nonlinear : FitResult or None
        The nonlinear least-squares fit set beside the line (None when not requested).
    """

    transform: str
    model_name: str
    t: FloatArray
    z: FloatArray
    used: BoolArray
    intercept: float
    slope: float
    intercept_se: float
    slope_se: float
    line_r2: float
    held: Mapping[str, float]
    table: pd.DataFrame
    effective_weights: FloatArray | None
    note: str
    nonlinear: FitResult | None = field(default=None, repr=False)

    @property
    def estimates(self) -> dict[str, float]:
        """The back-transformed parameters (linearised estimates) by name."""
        return {str(k): float(v) for k, v in self.table["linearized"].items()}

    @property
    def n(self) -> int:
        """Points used by the line."""
        return int(self.t.size)

    def summary(self) -> str:
        """Plain-text report: the line, the parameters side by side and the note."""
        head = f"linearised fit: {self.transform.replace('_', ' ')} ({self.model_name})"
        lines = [head, "=" * len(head)]
        lines.append(
            f"line: z = {self.intercept:.6g} + {self.slope:.6g} t  "
            f"(SE {self.intercept_se:.3g}, {self.slope_se:.3g}; {self.n} points; "
            f"R^2 on the transformed scale {self.line_r2:.4f})"
        )
        if self.held:
            lines.append(
                "held as known: " + ", ".join(f"{k} = {v:.6g}" for k, v in self.held.items())
            )
        lines.append("")
        lines.append(self.table.to_string(float_format=lambda v: f"{v:.6g}"))
        lines.append("")
        lines.append(self.note)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()

    def _repr_html_(self) -> str:
        e = html.escape
        table: str = self.table.to_html(float_format=lambda v: f"{v:.6g}", na_rep="")
        held = (
            "<div>held as known: "
            + e(", ".join(f"{k} = {v:.6g}" for k, v in self.held.items()))
            + "</div>"
            if self.held
            else ""
        )
        return (
            "<div class='cw-linearized' style='font-family:sans-serif;font-size:13px'>"
            f"<div><b>{e(self.transform.replace('_', ' '))}</b> ({e(self.model_name)}): "
            f"line z = {self.intercept:.6g} + {self.slope:.6g} t, {self.n} points</div>"
            f"{held}{table}<p>{e(self.note)}</p></div>"
        )


# ----------------------------------------------------------------------------- transforms
@dataclass(frozen=True)
class _Spec:
    """How one transform maps data to a line and the line back to parameters."""

    model_name: str
    params: tuple[str, ...]
    # (x, y, held) -> (t, z, used mask over the input)
    points: Callable[
        [FloatArray, FloatArray, Mapping[str, float]], tuple[FloatArray, FloatArray, BoolArray]
    ]
    # (intercept, slope, held) -> parameter values in ``params`` order
    back: Callable[[float, float, Mapping[str, float]], tuple[float, ...]]
    # dz/dy at the used points (None: y on both axes)
    dzdy: Callable[[FloatArray, FloatArray, Mapping[str, float]], FloatArray] | None
    # the same estimate from the start helper (reuse; also a consistency check)
    helper: Callable[[FloatArray, FloatArray, Mapping[str, float]], tuple[float, ...]]
    note: str


def _pos_mask(x: FloatArray, y: FloatArray) -> BoolArray:
    return np.asarray(np.isfinite(x) & np.isfinite(y) & (x > 0) & (y > 0), dtype=bool)


def _lb_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    m = _pos_mask(x, y)
    return 1.0 / x[m], 1.0 / y[m], m


def _hw_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    m = _pos_mask(x, y)
    return x[m], x[m] / y[m], m


def _eh_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    m = _pos_mask(x, y)
    return y[m] / x[m], y[m], m


def _semilog_sign(y: FloatArray, baseline: float) -> float:
    d = y - baseline
    return 1.0 if np.sum(d > 0) >= np.sum(d < 0) else -1.0


def _semilog_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    baseline = h["baseline"]
    fin = np.isfinite(x) & np.isfinite(y)
    sign = _semilog_sign(y[fin], baseline)
    dist = np.where(fin, sign * (y - baseline), -np.inf)
    m = dist > 0
    if np.any(m):
        m &= dist > _SEMILOG_TRIM * float(np.max(dist[m]))
    return x[m], np.log(dist[m]), np.asarray(m, dtype=bool)


def _loglog_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    m = _pos_mask(x, y)
    return np.log(x[m]), np.log(y[m]), m


def _logit_points(
    x: FloatArray, y: FloatArray, h: Mapping[str, float]
) -> tuple[FloatArray, FloatArray, BoolArray]:
    lo, hi, log_x = h["low_level"], h["high_level"], bool(h["log_x"])
    m = np.isfinite(x) & np.isfinite(y)
    if log_x:
        m &= x > 0
    with np.errstate(all="ignore"):
        f = (y - lo) / (hi - lo)
    m &= (f > _LOGIT_TRIM) & (f < 1.0 - _LOGIT_TRIM)
    fu = f[m]
    t = np.log10(x[m]) if log_x else x[m]
    return t, np.log10(fu / (1.0 - fu)), np.asarray(m, dtype=bool)


def _logit_dzdy(x: FloatArray, y: FloatArray, h: Mapping[str, float]) -> FloatArray:
    lo, hi = h["low_level"], h["high_level"]
    f = (y - lo) / (hi - lo)
    return 1.0 / (_LN10 * f * (1.0 - f) * (hi - lo))


def _semilog_back(a: float, b: float, h: Mapping[str, float]) -> tuple[float, ...]:
    # exponential_decay: baseline + amplitude*exp(-k*x); exponential_growth: y0*exp(k*x)
    return (h["sign"] * math.exp(a), b if h.get("growth") else -b)


def _semilog_helper(x: FloatArray, y: FloatArray, h: Mapping[str, float]) -> tuple[float, ...]:
    amplitude, k = _start.semilog_rate(x, y, h["baseline"])
    return (amplitude, -k if h.get("growth") else k)


def _logit_back(a: float, b: float, h: Mapping[str, float]) -> tuple[float, ...]:
    mid = -a / b if b != 0 else math.nan
    if not h["growth"]:
        # dose-response, stimulation or inhibition: f runs from zero_dose to full_effect, so
        # the slope is +n_h either way
        return (mid, b)
    # logistic growth, log10(f/(1-f)) = (r/ln 10)(x - x_inflection) with f = y/K
    r = b * _LN10
    K = h["high_level"]
    return (K / (1.0 + math.exp(r * mid)), r)


def _logit_helper(x: FloatArray, y: FloatArray, h: Mapping[str, float]) -> tuple[float, ...]:
    est = _start.logit_line(
        x, y, h["low_level"], h["high_level"], log_x=bool(h["log_x"]), trim=_LOGIT_TRIM
    )
    b = est.slope
    a = -est.mid * b
    return _logit_back(a, b, h)


_REPORT = (
    " Report the nonlinear least-squares estimates: they fit y on the scale it was measured, "
    "where the residual plot can check the error assumptions, and their standard errors belong "
    "to that fit. Use the line to look at the data or as a starting point."
)

_SPECS: dict[str, _Spec] = {
    "lineweaver_burk": _Spec(
        "michaelis_menten",
        ("Vmax", "Km"),
        _lb_points,
        lambda a, b, h: (1.0 / a, b / a),
        lambda x, y, h: -1.0 / y**2,
        lambda x, y, h: tuple(_start.lineweaver_burk(x, y)),
        "Double-reciprocal plot (1/y against 1/x). The error of 1/y is about sd(y)/y^2, so the "
        "line weights each rate by about y^4: the smallest rates, whose reciprocals carry the "
        "largest errors, dominate, and 1/x throws the lowest concentrations far out where "
        "they set the slope. It is the least reliable of the three classical plots." + _REPORT,
    ),
    "hanes_woolf": _Spec(
        "michaelis_menten",
        ("Vmax", "Km"),
        _hw_points,
        lambda a, b, h: (1.0 / b, a / b),
        lambda x, y, h: -x / y**2,
        lambda x, y, h: tuple(_start.hanes_woolf(x, y)),
        "Hanes-Woolf plot (x/y against x). The error of x/y is about x sd(y)/y^2, so the line "
        "weights each rate by about y^4/x^2, which is far more even over the range than the "
        "double-reciprocal plot (y/x is nearly constant at low x), and the abscissa keeps the "
        "natural spacing of the concentrations. It is the best of the classical plots, still not "
        "a substitute for fitting the curve." + _REPORT,
    ),
    "eadie_hofstee": _Spec(
        "michaelis_menten",
        ("Vmax", "Km"),
        _eh_points,
        lambda a, b, h: (a, -b),
        None,
        lambda x, y, h: tuple(_start.eadie_hofstee(x, y)),
        "Eadie-Hofstee plot (y against y/x). The rate appears on both axes, so its error moves "
        "each point along a line through the origin; ordinary least squares assumes an exact "
        "abscissa and is biased, and the weights are not defined. Its merit is visual: "
        "departures from Michaelis-Menten show up clearly as curvature." + _REPORT,
    ),
    "semilog": _Spec(
        "exponential_decay",
        ("amplitude", "k"),
        _semilog_points,
        _semilog_back,
        lambda x, y, h: 1.0 / (y - h["baseline"]),
        _semilog_helper,
        "Semi-logarithmic plot (ln|y - baseline| against x), with the baseline taken as known. "
        "The error of the logarithm is about sd(y)/|y - baseline|, so the line weights each "
        "point by (y - baseline)^2: it assumes the error is proportional to the distance from "
        "the baseline, and points near the baseline, whose logarithm is mostly noise, would "
        "dominate (points within 5% of the largest distance are left out for that reason). "
        "Back-transforming the intercept with exp() also biases the amplitude low when the "
        "log-scale scatter is large." + _REPORT,
    ),
    "loglog": _Spec(
        "power_law",
        ("a", "b"),
        _loglog_points,
        lambda a, b, h: (math.exp(a), b),
        lambda x, y, h: 1.0 / y,
        lambda x, y, h: tuple(_start.loglog_power(x, y)),
        "Log-log plot (ln y against ln x). The error of ln y is about sd(y)/y, so the line "
        "weights each point by y^2: it is the right fit only when the error is multiplicative "
        "(constant relative error, log-normal scatter); with constant absolute error the small "
        "values dominate. exp(intercept) estimates the median, not the mean, of y at x = 1."
        + _REPORT,
    ),
    "logit": _Spec(
        "stimulation_4pl",
        ("log_ec50", "n_h"),
        _logit_points,
        _logit_back,
        _logit_dzdy,
        _logit_helper,
        "Logit plot (log10(f/(1-f)) with f the fraction of the way from the low-x level to the "
        "high-x level, against log10 x or x), with both levels taken as known. The error of the "
        "logit is about sd(y)/(ln 10 f(1-f) |change|), so the line weights each point by "
        "(f(1-f))^2: points half-way carry most weight and points near the levels, where "
        "f(1-f) is small and the logit is mostly noise, are down-weighted only if they are left "
        "out (those within 5% of the change from a level are). An error in the assumed levels "
        "bends the line." + _REPORT,
    ),
}

#: The available transforms.
TRANSFORMS: tuple[str, ...] = tuple(_SPECS)

#: Which transforms apply to which catalog model (for :func:`linearized_fits`).
_FAMILIES: dict[str, tuple[str, ...]] = {
    "michaelis_menten": ("lineweaver_burk", "eadie_hofstee", "hanes_woolf"),
    "exponential_decay": ("semilog",),
    "exponential_growth": ("semilog",),
    "power_law": ("loglog",),
    "stimulation_4pl": ("logit",),
    "stimulation_3pl": ("logit",),
    "inhibition_4pl": ("logit",),
    "logistic_growth": ("logit",),
}


# ------------------------------------------------------------------------------- helpers
def _vectors(x: ArrayLike, y: ArrayLike) -> tuple[FloatArray, FloatArray]:
    try:
        xa = np.asarray(x, dtype=float).ravel()
        ya = np.asarray(y, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise DataError(f"linearized_fit: x and y must be numeric arrays ({exc}).") from exc
    if xa.shape != ya.shape:
        raise DataError(
            f"linearized_fit: x and y must have the same length; got {xa.size} x values and "
            f"{ya.size} y values."
        )
    return xa, ya


def _ols(t: FloatArray, z: FloatArray, what: str) -> tuple[float, float, FloatArray, float]:
    """Intercept, slope, their covariance and R² of the OLS line ``z = a + b t``."""
    n = t.size
    if n < 3:
        raise DataError(
            f"{what}: the straight line needs at least 3 usable points for its standard errors; "
            f"got {n}. The transform keeps only points it can take (see the note on the "
            "transform): check signs, zeros and the levels."
        )
    tm, zm = float(np.mean(t)), float(np.mean(z))
    dt = t - tm
    sxx = float(dt @ dt)
    if not sxx > 0:
        raise DataError(f"{what}: all usable points share one abscissa; no line can be fitted.")
    b = float(dt @ (z - zm)) / sxx
    a = zm - b * tm
    res = z - a - b * t
    s2 = float(res @ res) / (n - 2)
    cov = s2 * np.array([[1.0 / n + tm**2 / sxx, -tm / sxx], [-tm / sxx, 1.0 / sxx]])
    szz = float((z - zm) @ (z - zm))
    r2 = 1.0 - float(res @ res) / szz if szz > 0 else math.nan
    return a, b, cov, r2


def _check_transform(transform: str) -> _Spec:
    if transform not in _SPECS:
        import difflib

        close = difflib.get_close_matches(str(transform), TRANSFORMS, n=1)
        hint = f" Did you mean {close[0]!r}?" if close else ""
        raise ParameterError(
            f"transform must be one of {', '.join(map(repr, TRANSFORMS))}; got {transform!r}."
            + hint
        )
    return _SPECS[transform]


def _finite(v: float | None, name: str) -> float:
    if v is None:
        raise ParameterError(f"{name} must be given (a number).")
    f = float(v)
    if not math.isfinite(f):
        raise ParameterError(f"{name} must be a finite number, got {v!r}.")
    return f


# ---------------------------------------------------------------------------------- main
def linearized_fit(
    transform: str,
    x: ArrayLike | str | None = None,
    y: ArrayLike | str | None = None,
    *,
    data: pd.DataFrame | Mapping[str, Any] | None = None,
    result: FitResult | None = None,
    nonlinear: bool = True,
    baseline: float = 0.0,
    zero_dose: float | None = None,
    full_effect: float | None = None,
    K: float | None = None,
    model: str | None = None,
) -> LinearizedFit:
    """Fit one classical straight-line plot and set it beside the nonlinear fit.

    Parameters
    ----------
    transform : str
        ``"lineweaver_burk"``, ``"hanes_woolf"``, ``"eadie_hofstee"`` (Michaelis-Menten),
        ``"semilog"`` (exponential decay to a known baseline, or growth), ``"loglog"`` (power
        law) or ``"logit"`` (logistic dose-response or growth, levels known).
    x, y : array_like or str
        The data, or column names of ``data``. Leave out when ``result`` is given.
    data : DataFrame or mapping, optional
        Table holding the columns named by ``x`` and ``y``.
    result : FitResult, optional
        A nonlinear fit of the matching model already made: its data (the points it used) are
        linearised and its estimates set beside the line's.
    nonlinear : bool
        Without ``result``: whether to fit the model by nonlinear least squares
        (:func:`curvewright.fit`, started from the line's estimates) for the side-by-side table.
    baseline : float
        ``semilog`` only: the level the curve approaches, taken as known (0 for pure decay or
        growth). The nonlinear fit holds it at the same value so the two answer one question.
    zero_dose, full_effect : float, optional
        ``logit`` with a dose-response model: the response with no compound and at a saturating
        dose (``stimulation_3pl`` has ``zero_dose`` 0). Default: the nonlinear fit's levels.
    K : float, optional
        ``logit`` with ``logistic_growth``: the carrying capacity (the lower level is 0).
        Default: the nonlinear fit's K.
    model : str, optional
        ``logit`` only: ``"stimulation_4pl"`` (default), ``"stimulation_3pl"``,
        ``"inhibition_4pl"`` or ``"logistic_growth"`` (logit against x itself, from 0 to K).
        ``semilog``: ``"exponential_decay"`` (default; a falling or rising approach) or
        ``"exponential_growth"`` (``y0*exp(k*x)``, baseline 0).

    Returns
    -------
    LinearizedFit

    Raises
    ------
    ParameterError
        Unknown transform or model, or levels that are missing, equal or not the model's.
    DataError
        Fewer than three points the transform can use.
    FitError
        ``result`` is a fit of a model the transform does not estimate, or used a robust loss.

    Notes
    -----
    The standard errors of the back-transformed parameters are delta-method errors from the
    line's covariance on the transformed scale; they inherit the line's distorted weighting
    and are shown only to compare, not to report.
    """
    spec = _check_transform(transform)
    model_name = _resolve_model(transform, spec, model, result)
    if result is not None:
        if x is not None or y is not None or data is not None:
            raise ParameterError(
                "Give either result= (its data are used) or x=/y=/data=, not both."
            )
        if result.loss != "squared":
            raise FitError(
                f"The nonlinear fit used the robust {result.loss!r} loss; the side-by-side "
                "table compares least-squares estimates. Refit with loss='squared'."
            )
        xa, ya = np.asarray(result.x, dtype=float), np.asarray(result.y, dtype=float)
    else:
        if x is None or y is None:
            raise ParameterError("linearized_fit needs x and y (or result=).")
        xa, ya = _vectors(*_columns(x, y, data))

    nls: FitResult | None = result
    held: dict[str, float] = {}
    hspec: dict[str, float] = {}
    if transform != "semilog" and baseline != 0.0:
        raise ParameterError(f"baseline= belongs to the semilog transform, not to {transform}.")
    if transform != "logit" and (zero_dose, full_effect, K) != (None, None, None):
        raise ParameterError(
            f"zero_dose=, full_effect= and K= belong to the logit transform, not to {transform}."
        )
    if transform == "semilog":
        p = _finite(baseline, "baseline")
        fin = np.isfinite(xa) & np.isfinite(ya)
        hspec = {
            "baseline": p,
            "sign": _semilog_sign(ya[fin], p),
            "growth": 1.0 if model_name == "exponential_growth" else 0.0,
        }
        held = {"baseline": p}
        if result is not None and "baseline" in result.values:
            rp = result.values["baseline"]
            if "baseline" not in result.fixed or rp != p:
                raise FitError(
                    f"The semi-log line takes the baseline as known ({p:g}) but the nonlinear "
                    "fit given "
                    + ("estimated it" if "baseline" not in result.fixed else f"held it at {rp:g}")
                    + f"; refit with fixed={{'baseline': {p:g}}} or pass baseline={rp:g}."
                )
        if model_name == "exponential_growth" and p != 0.0:
            raise ParameterError(
                "exponential_growth (y0*exp(k*x)) has no baseline; use baseline=0 or "
                "model='exponential_decay'."
            )
    if transform == "logit":
        hspec, held, nls = _logit_levels(
            xa,
            ya,
            model_name,
            {"zero_dose": zero_dose, "full_effect": full_effect, "K": K},
            nls,
            nonlinear,
        )

    t, z, used = spec.points(xa, ya, hspec)
    a, b, cov, r2 = _ols(t, z, transform)
    back = spec.back
    names = _param_names(transform, model_name)
    # The estimates come from the start helpers (one home for each transform's formula); the
    # line's covariance gives their delta-method standard errors through ``back``.
    est = np.array(spec.helper(xa, ya, hspec), dtype=float)
    with np.errstate(all="ignore"):
        J = finite_difference_jacobian(
            lambda ab: np.array(back(float(ab[0]), float(ab[1]), hspec), dtype=float),
            np.array([a, b]),
        )
    se = delta_method_se(J, cov)

    if nls is None and nonlinear:
        nls = _nonlinear_fit(model_name, xa, ya, names, est, held)
    table = _side_by_side(names, est, se, nls)
    if spec.dzdy is None:
        eff = None
    else:
        with np.errstate(all="ignore"):
            w = 1.0 / spec.dzdy(xa[used], ya[used], hspec) ** 2
        eff = np.asarray(w / np.mean(w), dtype=float)
        eff.setflags(write=False)
    for arr in (t, z, used):
        arr.setflags(write=False)
    return LinearizedFit(
        transform=transform,
        model_name=model_name,
        t=t,
        z=z,
        used=used,
        intercept=a,
        slope=b,
        intercept_se=float(math.sqrt(cov[0, 0])),
        slope_se=float(math.sqrt(cov[1, 1])),
        line_r2=r2,
        held=MappingProxyType(held),
        table=table,
        effective_weights=eff,
        note=spec.note
        if nls is None or nls.success
        else spec.note + f" Caution: the nonlinear fit did not converge ({nls.message}).",
        nonlinear=nls,
    )


def linearized_fits(
    x: ArrayLike | str | None = None,
    y: ArrayLike | str | None = None,
    *,
    model: str = "michaelis_menten",
    data: pd.DataFrame | Mapping[str, Any] | None = None,
    result: FitResult | None = None,
    **options: Any,
) -> pd.DataFrame:
    """Every classical line for one model, side by side with the nonlinear estimates.

    Parameters
    ----------
    x, y, data, result
        As for :func:`linearized_fit`.
    model : str
        ``"michaelis_menten"`` (Lineweaver-Burk, Eadie-Hofstee, Hanes-Woolf), or a model with
        one transform (``exponential_decay``, ``exponential_growth``, ``power_law``,
        ``stimulation_4pl``, ``inhibition_4pl``, ``logistic_growth``).
    **options
        Passed to :func:`linearized_fit` (``baseline``, ``zero_dose``, ``full_effect``, ``K``).

    Returns
    -------
    DataFrame
        Index: parameter; one column per transform (back-transformed estimate) and a last
        column ``nonlinear`` with the least-squares estimate. The nonlinear fit is made once.
    """
    if result is not None:
        model = result.model.name if model == "michaelis_menten" else model
    if model not in _FAMILIES:
        raise ParameterError(
            f"model must be one of {', '.join(map(repr, _FAMILIES))}; got {model!r}."
        )
    cols: dict[str, pd.Series] = {}
    nls = result
    for tr in _FAMILIES[model]:
        kw = dict(options)
        if tr in ("logit", "semilog"):
            kw["model"] = model
        if nls is None:
            lf = linearized_fit(tr, x, y, data=data, **kw)
        else:
            lf = linearized_fit(tr, result=nls, **kw)
        nls = lf.nonlinear
        cols[tr] = lf.table["linearized"]
        if lf.nonlinear is not None:
            cols["nonlinear"] = lf.table["nonlinear"]
    if "nonlinear" in cols:
        cols["nonlinear"] = cols.pop("nonlinear")
    out: pd.DataFrame = pd.DataFrame(cols)
    out.index.name = "parameter"
    return out


# ------------------------------------------------------------------------ internal pieces
def _columns(
    x: ArrayLike | str, y: ArrayLike | str, data: pd.DataFrame | Mapping[str, Any] | None
) -> tuple[ArrayLike, ArrayLike]:
    if isinstance(x, str) or isinstance(y, str):
        if data is None:
            raise ParameterError(
                f"x and y were given as column names ({x!r}, {y!r}) but data= was not given."
            )
        frame = pd.DataFrame(data)
        for name in (x, y):
            if isinstance(name, str) and name not in frame.columns:
                raise DataError(
                    f"column {name!r} is not in data; its columns are {list(frame.columns)}."
                )
        xa: ArrayLike = frame[x].to_numpy(dtype=float) if isinstance(x, str) else x
        ya: ArrayLike = frame[y].to_numpy(dtype=float) if isinstance(y, str) else y
        return xa, ya
    return x, y


def _resolve_model(transform: str, spec: _Spec, model: str | None, result: FitResult | None) -> str:
    allowed = {
        "logit": ("stimulation_4pl", "stimulation_3pl", "inhibition_4pl", "logistic_growth"),
        "semilog": ("exponential_decay", "exponential_growth"),
    }.get(transform, (spec.model_name,))
    name = model
    if name is None and result is not None and result.model.name in allowed:
        name = result.model.name
    if name is None:
        name = spec.model_name
    if name not in allowed:
        raise ParameterError(
            f"the {transform} transform estimates the model(s) "
            f"{', '.join(map(repr, allowed))}; got model={name!r}."
        )
    if result is not None:
        want = set(_param_names(transform, name))
        if not want <= set(result.values):
            raise FitError(
                f"result is a fit of {result.model.name!r} (parameters "
                f"{list(result.values)}), but the {transform} transform estimates {name!r} "
                f"({sorted(want)}); fit that model, or leave result= out."
            )
    return name


def _param_names(transform: str, model_name: str) -> tuple[str, ...]:
    if transform == "logit":
        return {
            "stimulation_4pl": ("log_ec50", "n_h"),
            "stimulation_3pl": ("log_ec50", "n_h"),
            "inhibition_4pl": ("log_ic50", "n_h"),
            "logistic_growth": ("N0", "r"),
        }[model_name]
    if transform == "semilog" and model_name == "exponential_growth":
        return ("y0", "k")
    return _SPECS[transform].params


def _logit_levels(
    x: FloatArray,
    y: FloatArray,
    model_name: str,
    given: Mapping[str, float | None],
    nls: FitResult | None,
    nonlinear: bool,
) -> tuple[dict[str, float], dict[str, float], FitResult | None]:
    """The two levels of the logit line: given, or the nonlinear fit's."""
    growth = model_name == "logistic_growth"
    # the levels the model has, low-x level first; a missing one is structurally zero
    names = {"logistic_growth": ("K",), "stimulation_3pl": ("full_effect",)}.get(
        model_name, ("zero_dose", "full_effect")
    )
    extra = [k for k, v in given.items() if v is not None and k not in names]
    if extra:
        zero = " (its response at zero dose is 0)" if model_name == "stimulation_3pl" else ""
        raise ParameterError(
            f"{model_name} takes the logit level(s) {', '.join(map(repr, names))}{zero}; leave "
            f"{', '.join(extra)} out."
        )
    if any(given[k] is None for k in names) and nls is None:
        if not nonlinear:
            raise ParameterError(
                "The logit line needs the levels: give "
                + " and ".join(f"{k}=" for k in names)
                + " (or allow the nonlinear fit, whose levels are then used)."
            )
        nls = _nonlinear_fit(model_name, x, y, (), np.zeros(0), {})
    held = {}
    for k in names:
        v = given[k]
        held[k] = _finite(v if v is not None else (nls.values[k] if nls else None), k)
    if len(names) == 2:
        lo, hi = held["zero_dose"], held["full_effect"]
    else:
        lo, hi = 0.0, held[names[0]]
    if lo == hi:
        raise ParameterError(f"the two levels must differ; both are {lo:g}.")
    hspec = {
        "low_level": lo,
        "high_level": hi,
        "log_x": 0.0 if growth else 1.0,
        "growth": 1.0 if growth else 0.0,
    }
    return hspec, held, nls


def _nonlinear_fit(
    model_name: str,
    x: FloatArray,
    y: FloatArray,
    names: Sequence[str],
    est: FloatArray,
    held: Mapping[str, float],
) -> FitResult:
    """The nonlinear least-squares fit of the model, started from the line where sensible."""
    from curvewright.catalog import catalog
    from curvewright.fitting import fit

    m = catalog()[model_name]
    fixed = {k: v for k, v in held.items() if k == "baseline" and k in m.param_names}
    start: dict[str, float] = {}
    for n, v in zip(names, est, strict=True):
        p = m.param(n)
        if math.isfinite(v) and p.lower < v < p.upper and n not in fixed:
            start[n] = float(v)
    keep = np.isfinite(x) & np.isfinite(y)
    bounds: dict[str, tuple[float | None, float | None]] | None = None
    if model_name == "exponential_decay" and "k" in start and start["k"] < 0:
        # a growth curve on the decay model: let k go negative
        bounds = {"k": (None, None)}
    return fit(m, x[keep], y[keep], start=start or None, fixed=fixed or None, bounds=bounds)


def _side_by_side(
    names: Sequence[str], est: FloatArray, se: FloatArray, nls: FitResult | None
) -> pd.DataFrame:
    cols: dict[str, Any] = {"linearized": est, "linearized_se": se}
    if nls is not None:
        nv = np.array([nls.values[n] for n in names])
        ns = np.array([nls.stderr[n] for n in names])
        cols["nonlinear"] = nv
        cols["nonlinear_se"] = ns
        with np.errstate(all="ignore"):
            cols["difference_pct"] = np.where(nv != 0, 100.0 * (est - nv) / np.abs(nv), np.nan)
    out: pd.DataFrame = pd.DataFrame(cols, index=pd.Index(list(names), name="parameter"))
    return out
