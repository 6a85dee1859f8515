"""The built-in models, browsable with :func:`catalog`, and :func:`polynomial` of any degree 1-10.

Every model is a formula (so the front end can preview it) with parameters named in the trade's
terms, bounds where the quantity is physical, derived quantities, draggable handles and a
data-driven starting-value rule from :mod:`curvewright.start`. Dose-response models take the
midpoint as ``log_ec50``/``log_ic50`` (log10 units; a concentration spans decades, and the fit is
far better conditioned in its logarithm) and their levels as ``zero_dose`` (no compound) and
``full_effect`` (a saturating dose); they take ``x`` itself, so zero-dose controls (x = 0) are
valid data.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping
from dataclasses import replace
from functools import cache
from types import MappingProxyType

import numpy as np

from .errors import ModelError
from .expr import Expr
from .models import Derived, Domain, Handle, Model, Param, register_builtin_resolver
from .start import (
    GridFn,
    PolynomialRule,
    SeedFn,
    SeparableRule,
    finish_biexponential,
    finish_boltzmann,
    grid_biexponential,
    grid_boltzmann,
    grid_conc,
    grid_growth,
    grid_hill,
    grid_logistic,
    grid_peak,
    grid_power,
    grid_rate,
    seed_biexponential,
    seed_boltzmann,
    seed_decay,
    seed_gauss,
    seed_gompertz,
    seed_growth,
    seed_hill,
    seed_logistic,
    seed_logistic_growth,
    seed_lorentz,
    seed_mm,
    seed_power,
    seed_rise,
    seed_substrate_inhibition,
)

__all__ = ["catalog", "find_builtin", "polynomial"]

_INF = math.inf
MAX_DEGREE = 10


def _p(
    name: str,
    value: float,
    unit: str,
    description: str,
    *,
    lower: float = -_INF,
    upper: float = _INF,
    positive: bool = False,
    log_scale: bool = False,
) -> Param:
    return Param(
        name,
        value=value,
        lower=lower,
        upper=upper,
        positive=positive,
        log_scale=log_scale,
        unit=unit,
        description=description,
    )


def _pos(name: str, value: float, unit: str, description: str, *, log_scale: bool = True) -> Param:
    return _p(name, value, unit, description, lower=0.0, positive=True, log_scale=log_scale)


def _d(name: str, formula: str, description: str, unit: str, axis: str | None = None) -> Derived:
    return Derived(
        name,
        Expr.parse(formula),
        description=description,
        unit=unit,
        axis="x" if axis == "x" else "y" if axis == "y" else None,
    )


def _h(name: str, label: str, x: str, y: str, *moves: str) -> Handle:
    return Handle(name, label, Expr.parse(x), Expr.parse(y), tuple(moves))


def _model(
    name: str,
    formula: str,
    params: list[Param],
    description: str,
    *,
    derived: list[Derived] | None = None,
    handles: list[Handle] | None = None,
    seed: SeedFn,
    linear: tuple[str, ...] = (),
    grid: GridFn | None = None,
    domain: Domain = "all",
    finish: Callable[[dict[str, float]], dict[str, float]] | None = None,
) -> Model:
    m = Model.from_formula(
        formula,
        name=name,
        params=params,
        derived=derived or [],
        handles=handles or [],
        domain=domain,
        description=description,
    )
    rule = SeparableRule(seed, linear, grid, finish).bind(m)
    return replace(m, start_rule=rule)


def polynomial(degree: int) -> Model:
    """The polynomial ``c0 + c1*x + ... + ck*x**k`` of degree ``k`` (1 to 10).

    Solved by linear least squares (``polynomial_degree`` is set); its start rule is the same
    linear solution.

    Parameters
    ----------
    degree : int
        1 to 10.

    Raises
    ------
    ModelError
        ``degree`` is not a whole number from 1 to 10.
    """
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)):
        raise ModelError(
            f"polynomial degree must be a whole number from 1 to {MAX_DEGREE}, got "
            f"{degree!r} ({type(degree).__name__})."
        )
    k = int(degree)
    if not 1 <= k <= MAX_DEGREE:
        raise ModelError(
            f"polynomial degree must be from 1 to {MAX_DEGREE}, got {k}. For a constant use "
            "Model.from_formula('c0 + 0*x'); beyond degree 10 the fit cannot be trusted."
        )
    return _polynomial_cached(k)


@cache
def _polynomial_cached(k: int) -> Model:
    names = tuple(f"c{j}" for j in range(k + 1))
    terms = ["c0", "c1*x"] + [f"c{j}*x**{j}" for j in range(2, k + 1)]
    params = [
        _p(
            n,
            1.0 if j == 1 else 0.0,
            "y" if j == 0 else "y/x" if j == 1 else f"y/x**{j}",
            "value at x = 0"
            if j == 0
            else f"coefficient of x**{j}"
            if j > 1
            else "coefficient of x",
        )
        for j, n in enumerate(names)
    ]
    m = Model.from_formula(
        " + ".join(terms),
        name=f"polynomial_{k}",
        params=params,
        description=f"Polynomial of degree {k}, solved by linear least squares.",
    )
    return replace(m, polynomial_degree=k, start_rule=PolynomialRule(names).bind(m))


def _straight_line() -> Model:
    m = Model.from_formula(
        "intercept + slope*x",
        name="straight_line",
        params=[
            _p("intercept", 0.0, "y", "value at x = 0"),
            _p("slope", 1.0, "y/x", "change in y per unit x"),
        ],
        derived=[
            _d("x_intercept", "-intercept/slope", "x where the line crosses y = 0", "x", "x"),
        ],
        handles=[_h("intercept", "value at x = 0", "0", "intercept", "intercept")],
        description="Straight line, solved by linear least squares (a calibration line).",
    )
    return replace(
        m, polynomial_degree=1, start_rule=PolynomialRule(("intercept", "slope")).bind(m)
    )


# ----------------------------------------------------------------------- dose-response pieces
# The dose-response family is written with the level at zero dose and the level at a saturating
# dose, so one formula serves stimulation (the response climbs to full_effect) and inhibition
# (it falls to full_effect): the Hill term (x/c50)**n_h grows from 0 at zero dose to infinity at a
# saturating one either way (c50 = 10**log_ic50 or 10**log_ec50).
def _dose_params(mid: str, *, asymmetry: bool = False, zero_dose: bool = True) -> list[Param]:
    what = "inhibitor" if mid == "log_ic50" else "agonist"
    ps = []
    if zero_dose:
        ps.append(
            _p("zero_dose", 0.0, "y", "response with no compound (the level at very low doses)")
        )
    ps += [
        _p(
            "full_effect",
            100.0,
            "y",
            "response at a saturating dose (the level at very high doses)",
        ),
        _p(
            mid,
            0.0,
            "log10(x)",
            f"log10 of the {what} concentration giving a response halfway from zero_dose to "
            "full_effect",
        ),
        _p(
            "n_h",
            1.0,
            "",
            "Hill coefficient: steepness (positive; at 1 the response covers 10% to 90% of its "
            "change over 1.9 decades of dose)",
            lower=0.0,
            positive=True,
            log_scale=True,
        ),
    ]
    if asymmetry:
        ps.append(
            _p(
                "g",
                1.0,
                "",
                "asymmetry exponent (1 gives the symmetric 4PL; above or below 1 one end of "
                "the curve bends more sharply than the other)",
                lower=0.0,
                positive=True,
                log_scale=True,
            )
        )
    return ps


def _dose_models() -> list[Model]:
    out = []
    for kind, mid in (("inhibition", "log_ic50"), ("stimulation", "log_ec50")):
        c = mid[4:]  # ic50 / ec50
        # the Hill term (x/c50)**n_h as a ratio, not 10**(n_h*(log10(x) - mid)): the same
        # curve for one power instead of a logarithm and a power per point, on the hot path
        hill = f"(x/10**{mid})**n_h"
        f4 = f"full_effect + (zero_dose - full_effect)/(1 + {hill})"
        if kind == "inhibition":
            amplitude = _d(
                "amplitude",
                "zero_dose - full_effect",
                "how far a saturating dose lowers the response (zero_dose - full_effect)",
                "y",
                "y",
            )
        else:
            amplitude = _d(
                "amplitude",
                "full_effect - zero_dose",
                "how far a saturating dose raises the response (full_effect - zero_dose)",
                "y",
                "y",
            )
        derived = [
            _d(
                c, f"10**{mid}", f"concentration giving a half-way response ({c.upper()})", "x", "x"
            ),
            amplitude,
        ]
        midpoint = _h("midpoint", c.upper(), f"10**{mid}", "(zero_dose + full_effect)/2", mid)
        # a quarter of the way from the full-effect level: the Hill term is 3 there
        handles4 = [
            _h("zero_dose", "zero-dose level", f"10**({mid} - 1.5/n_h)", "zero_dose", "zero_dose"),
            _h(
                "full_effect",
                "full-effect level",
                f"10**({mid} + 1.5/n_h)",
                "full_effect",
                "full_effect",
            ),
            midpoint,
            _h(
                "steepness",
                "Hill coefficient",
                f"10**{mid}*3**(1/n_h)",
                "full_effect + (zero_dose - full_effect)/4",
                "n_h",
            ),
        ]
        direction = "falls" if kind == "inhibition" else "climbs"
        out.append(
            _model(
                f"{kind}_4pl",
                f4,
                _dose_params(mid),
                f"Four-parameter logistic for {kind}: the response {direction} from zero_dose "
                f"(no compound) to full_effect (a saturating dose), half-way at "
                f"{c} = 10**{mid} with Hill coefficient n_h; zero-dose controls are valid data.",
                derived=derived,
                handles=handles4,
                seed=seed_logistic(kind),
                linear=("zero_dose", "full_effect"),
                grid=grid_logistic(mid),
                domain="x>=0",
            )
        )
        # The five-parameter logistic with asymmetry exponent g, written so that 10**mid is the
        # true half-way concentration: at x = 10**mid the denominator is
        # (1 + (2**(1/g) - 1))**g = 2 for every g, so the derived concentration is exact.
        w5 = f"(1 + (2**(1/g) - 1)*{hill})**g"
        f5 = f"full_effect + (zero_dose - full_effect)/{w5}"
        # the x where the denominator w5 equals v
        at5 = f"10**{mid}*(({{v}}**(1/g) - 1)/(2**(1/g) - 1))**(1/n_h)"
        # the level handles where the curve is 1/32 of its change from each level (w5 = 32/31 and
        # w5 = 32), about where the 4PL's +-1.5/n_h decades put them; with g != 1 the two ends
        # approach their levels at different speeds, so fixed decades would not do
        handles5 = [
            _h("zero_dose", "zero-dose level", at5.format(v="(32/31)"), "zero_dose", "zero_dose"),
            _h(
                "full_effect", "full-effect level", at5.format(v="32"), "full_effect", "full_effect"
            ),
            midpoint,
            _h(
                "steepness",
                "Hill coefficient",
                at5.format(v="4"),
                "full_effect + (zero_dose - full_effect)/4",
                "n_h",
            ),
            _h(
                "asymmetry",
                "asymmetry",
                at5.format(v="(4/3)"),
                "full_effect + 3*(zero_dose - full_effect)/4",
                "g",
            ),
        ]
        out.append(
            _model(
                f"{kind}_5pl",
                f5,
                _dose_params(mid, asymmetry=True),
                f"Five-parameter logistic for {kind}: {kind}_4pl with an asymmetry exponent g "
                f"on the denominator (g = 1 is the 4PL), scaled so that {c} = 10**{mid} stays "
                "the exact half-way concentration for every g.",
                derived=derived,
                handles=handles5,
                seed=seed_logistic(kind),
                linear=("zero_dose", "full_effect"),
                grid=grid_logistic(mid, asymmetry=True),
                domain="x>=0",
            )
        )
    out.append(
        _model(
            "stimulation_3pl",
            "full_effect/(1 + (10**log_ec50/x)**n_h)",
            _dose_params("log_ec50", zero_dose=False),
            "Three-parameter logistic for stimulation from a zero response at zero dose (e.g. "
            "blank-subtracted signals) up to full_effect, half-way at ec50 = 10**log_ec50 with "
            "Hill coefficient n_h.",
            derived=[
                _d("ec50", "10**log_ec50", "concentration giving half of full_effect", "x", "x")
            ],
            handles=[
                _h(
                    "full_effect",
                    "full-effect level",
                    "10**(log_ec50 + 1.5/n_h)",
                    "full_effect",
                    "full_effect",
                ),
                _h("midpoint", "EC50", "10**log_ec50", "full_effect/2", "log_ec50"),
                _h(
                    "steepness",
                    "Hill coefficient",
                    "10**log_ec50*3**(1/n_h)",
                    "3*full_effect/4",
                    "n_h",
                ),
            ],
            seed=seed_logistic("three"),
            linear=("full_effect",),
            grid=grid_logistic("log_ec50"),
            domain="x>=0",
        )
    )
    return out


# ------------------------------------------------------------------------------- the rest
def _exponential_models() -> list[Model]:
    rate = "rate constant (1/x units of x)"
    decay = _model(
        "exponential_decay",
        "baseline + amplitude*exp(-k*x)",
        [
            _p("baseline", 0.0, "y", "level the curve settles to at long times"),
            _p(
                "amplitude",
                1.0,
                "y",
                "value at x = 0 above the baseline (negative for a curve rising to the baseline)",
            ),
            _pos("k", 1.0, "1/x", rate),
        ],
        "Single exponential decay toward a baseline, y = baseline + amplitude*exp(-k*x) (a "
        "negative amplitude gives an approach from below).",
        derived=[
            _d(
                "half_life", "log(2)/k", "time to cover half the distance to the baseline", "x", "x"
            ),
            _d("mean_lifetime", "1/k", "mean lifetime (time constant) 1/k", "x", "x"),
            _d("value_at_0", "baseline + amplitude", "value at x = 0", "y", "y"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "baseline + amplitude", "amplitude"),
            _h("baseline", "baseline", "5/k", "baseline", "baseline"),
            _h("half_life", "half-life", "log(2)/k", "baseline + amplitude/2", "k"),
        ],
        seed=seed_decay,
        linear=("baseline", "amplitude"),
        grid=grid_rate("k"),
    )
    biexp = _model(
        "biexponential_decay",
        "baseline + a1*exp(-k1*x) + a2*exp(-k2*x)",
        [
            _p("baseline", 0.0, "y", "level the curve settles to at long times"),
            _p("a1", 1.0, "y", "amplitude of phase 1 (the faster phase)"),
            _pos("k1", 3.0, "1/x", "rate constant of phase 1 (the larger of the two)"),
            _p("a2", 1.0, "y", "amplitude of phase 2 (the slower phase)"),
            _pos("k2", 0.3, "1/x", "rate constant of phase 2 (the smaller of the two)"),
        ],
        "Biexponential decay toward a baseline, y = baseline + a1*exp(-k1*x) + a2*exp(-k2*x) "
        "(two compartments or two processes); phase 1 is the faster one (the start rule keeps "
        "k1 >= k2).",
        derived=[
            _d("t_half_1", "log(2)/k1", "half-life of phase 1", "x", "x"),
            _d("t_half_2", "log(2)/k2", "half-life of phase 2", "x", "x"),
            _d("share_1", "a1/(a1 + a2)", "phase 1's share of the total amplitude", ""),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "baseline + a1 + a2", "a1"),
            _h("baseline", "baseline", "5/k2", "baseline", "baseline"),
            # on the curve at each phase's half-life (the other phase's share included), so a
            # dragged point stays under the pointer
            _h(
                "t_half_1",
                "half-life of phase 1",
                "log(2)/k1",
                "baseline + a1/2 + a2*exp(-k2*log(2)/k1)",
                "k1",
            ),
            _h(
                "t_half_2",
                "half-life of phase 2",
                "log(2)/k2",
                "baseline + a2/2 + a1*exp(-k1*log(2)/k2)",
                "k2",
            ),
        ],
        seed=seed_biexponential,
        linear=("baseline", "a1", "a2"),
        grid=grid_biexponential,
        finish=finish_biexponential,
    )
    rise = _model(
        "exponential_rise",
        "baseline + amplitude*(1 - exp(-k*x))",
        [
            _p("baseline", 0.0, "y", "value at x = 0 (fix it at 0 for a curve through the origin)"),
            _p("amplitude", 1.0, "y", "total rise: the curve levels off at baseline + amplitude"),
            _pos("k", 1.0, "1/x", rate),
        ],
        "Exponential rise from a baseline at x = 0 by an amplitude, y = baseline + "
        "amplitude*(1 - exp(-k*x)), as in first-order binding or product formation.",
        derived=[
            _d("half_life", "log(2)/k", "time to cover half the rise", "x", "x"),
            _d("mean_lifetime", "1/k", "mean lifetime (time constant) 1/k", "x", "x"),
            _d("plateau", "baseline + amplitude", "level the curve rises to", "y", "y"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "baseline", "baseline"),
            _h("plateau", "plateau", "5/k", "baseline + amplitude", "amplitude"),
            _h("half_life", "half-life", "log(2)/k", "baseline + amplitude/2", "k"),
        ],
        seed=seed_rise,
        linear=("baseline", "amplitude"),
        grid=grid_rate("k"),
    )
    growth = _model(
        "exponential_growth",
        "y0*exp(k*x)",
        [
            _p("y0", 1.0, "y", "value at x = 0"),
            _pos("k", 1.0, "1/x", "growth rate constant"),
        ],
        "Unlimited exponential growth.",
        derived=[_d("doubling_time", "log(2)/k", "time for y to double", "x", "x")],
        handles=[
            _h("start", "value at x = 0", "0", "y0", "y0"),
            _h("doubling", "doubling time", "log(2)/k", "2*y0", "k"),
        ],
        seed=seed_growth,
        linear=("y0",),
        grid=grid_rate("k"),
    )
    return [decay, biexp, rise, growth]


def _enzyme_models() -> list[Model]:
    vmax = _pos("Vmax", 1.0, "y", "maximal rate at saturating substrate", log_scale=True)
    km = _pos("Km", 1.0, "x", "Michaelis constant: substrate concentration giving Vmax/2")
    mm = _model(
        "michaelis_menten",
        "Vmax*x/(Km + x)",
        [vmax, km],
        "Michaelis-Menten enzyme kinetics: rate against substrate concentration.",
        derived=[
            _d("efficiency", "Vmax/Km", "Vmax/Km: the slope at low substrate", "y/x"),
        ],
        handles=[
            _h("vmax", "Vmax asymptote", "10*Km", "Vmax", "Vmax"),
            _h("km", "Km (half Vmax)", "Km", "Vmax/2", "Km"),
        ],
        seed=seed_mm,
        linear=("Vmax",),
        grid=grid_conc("Km"),
        domain="x>=0",
    )
    si = _model(
        "substrate_inhibition",
        "Vmax*x/(Km + x + x**2/Ki)",
        [
            vmax,
            km,
            _pos("Ki", 10.0, "x", "substrate inhibition constant"),
        ],
        "Substrate inhibition in Haldane's form, v = Vmax*S/(Km + S + S**2/Ki): the rate rises "
        "as for Michaelis-Menten, peaks at S = sqrt(Km*Ki) and falls at excess substrate.",
        derived=[
            _d("x_peak", "sqrt(Km*Ki)", "substrate concentration of the highest rate", "x", "x"),
            _d("y_peak", "Vmax/(1 + 2*sqrt(Km/Ki))", "highest rate", "y", "y"),
        ],
        handles=[
            _h("peak", "highest rate", "sqrt(Km*Ki)", "Vmax/(1 + 2*sqrt(Km/Ki))", "Vmax", "Ki"),
            # the curve at S = Km: Vmax/2 without inhibition, a little less with it
            _h("km", "rate at S = Km", "Km", "Vmax/(2 + Km/Ki)", "Km"),
        ],
        seed=seed_substrate_inhibition,
        linear=("Vmax",),
        grid=grid_conc("Km", "Ki"),
        domain="x>=0",
    )
    hill = _model(
        "hill",
        "Vmax*x**n_h/(K05**n_h + x**n_h)",
        [
            vmax,
            _pos("K05", 1.0, "x", "K0.5: the concentration giving half of Vmax"),
            _pos("n_h", 1.0, "", "Hill coefficient (cooperativity; 1 = Michaelis-Menten)"),
        ],
        "Hill equation: cooperative binding or kinetics, rising from 0 to Vmax, half-way at "
        "K05 with Hill coefficient n_h.",
        derived=[],
        handles=[
            _h("vmax", "Vmax asymptote", "10*K05", "Vmax", "Vmax"),
            _h("k05", "K0.5 (half Vmax)", "K05", "Vmax/2", "K05"),
            _h("steepness", "Hill coefficient", "K05*3**(1/n_h)", "3*Vmax/4", "n_h"),
        ],
        seed=seed_hill,
        linear=("Vmax",),
        grid=grid_hill,
        domain="x>=0",
    )
    return [mm, si, hill]


def _growth_models() -> list[Model]:
    n0 = _pos("N0", 1.0, "y", "population at x = 0")
    K = _pos("K", 100.0, "y", "carrying capacity (the upper asymptote)")
    r = _pos("r", 1.0, "1/x", "intrinsic growth rate")
    logistic = _model(
        "logistic_growth",
        "K/(1 + (K/N0 - 1)*exp(-r*x))",
        [n0, K, r],
        "Logistic (Verhulst) growth from N0 to the carrying capacity K.",
        derived=[
            _d("doubling_time", "log(2)/r", "early doubling time", "x", "x"),
            _d("x_inflection", "log(K/N0 - 1)/r", "time of fastest growth (y = K/2)", "x", "x"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "N0", "N0"),
            _h("capacity", "carrying capacity", "(log(K/N0 - 1) + 4)/r", "K", "K"),
            _h("inflection", "fastest growth", "log(K/N0 - 1)/r", "K/2", "r"),
        ],
        seed=seed_logistic_growth,
        grid=grid_growth,
    )
    gompertz = _model(
        "gompertz_growth",
        "K*exp(log(N0/K)*exp(-r*x))",
        [n0, K, r],
        "Gompertz growth in the N0/K/r form, N(x) = K*exp(ln(N0/K)*exp(-r*x)): N(0) = N0, "
        "N -> K, and the relative growth rate decays exponentially at rate r.",
        derived=[
            _d("x_inflection", "log(log(K/N0))/r", "time of fastest growth (y = K/e)", "x", "x"),
            _d("max_rate", "r*K/exp(1)", "highest growth rate dy/dx", "y/x", "y"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "N0", "N0"),
            _h("capacity", "carrying capacity", "(log(log(K/N0)) + 3)/r", "K", "K"),
            _h("inflection", "fastest growth", "log(log(K/N0))/r", "K/exp(1)", "r"),
        ],
        seed=seed_gompertz,
        grid=grid_growth,
    )
    return [logistic, gompertz]


def _peak_models() -> list[Model]:
    base = _p("baseline", 0.0, "y", "level away from the peak")
    amp = _p("amplitude", 1.0, "y", "height of the peak above the baseline (negative for a dip)")
    ctr = _p("center", 0.0, "x", "position of the peak")
    gauss = _model(
        "gaussian_peak",
        "baseline + amplitude*exp(-(x - center)**2/(2*sigma**2))",
        [base, amp, ctr, _pos("sigma", 1.0, "x", "width: standard deviation of the Gaussian")],
        "Gaussian peak on a constant baseline.",
        derived=[
            _d("fwhm", "2*sqrt(2*log(2))*sigma", "full width at half maximum", "x"),
            _d("area", "amplitude*sigma*sqrt(2*pi)", "area under the peak above the baseline", ""),
        ],
        handles=[
            _h("apex", "apex", "center", "baseline + amplitude", "center", "amplitude"),
            _h(
                "width",
                "half maximum",
                "center + sqrt(2*log(2))*sigma",
                "baseline + amplitude/2",
                "sigma",
            ),
            _h("baseline", "baseline", "center + 4*sigma", "baseline", "baseline"),
        ],
        seed=seed_gauss,
        linear=("baseline", "amplitude"),
        grid=grid_peak("sigma"),
    )
    lorentz = _model(
        "lorentzian_peak",
        "baseline + amplitude/(1 + ((x - center)/hwhm)**2)",
        [base, amp, ctr, _pos("hwhm", 1.0, "x", "half width at half maximum")],
        "Lorentzian (Cauchy) peak on a constant baseline.",
        derived=[
            _d("fwhm", "2*hwhm", "full width at half maximum", "x"),
            _d("area", "pi*amplitude*hwhm", "area under the peak above the baseline", ""),
        ],
        handles=[
            _h("apex", "apex", "center", "baseline + amplitude", "center", "amplitude"),
            _h("width", "half maximum", "center + hwhm", "baseline + amplitude/2", "hwhm"),
            _h("baseline", "baseline", "center + 6*hwhm", "baseline", "baseline"),
        ],
        seed=seed_lorentz,
        linear=("baseline", "amplitude"),
        grid=grid_peak("hwhm"),
    )
    return [gauss, lorentz]


def _other_models() -> list[Model]:
    boltz = _model(
        "boltzmann",
        "low + (high - low)/(1 + exp((x_half - x)/width))",
        [
            _p("low", 0.0, "y", "the lower level"),
            _p("high", 1.0, "y", "the upper level"),
            _p(
                "x_half",
                0.0,
                "x",
                "x half-way between the levels, e.g. the half-activation voltage",
            ),
            _p(
                "width",
                1.0,
                "x",
                "slope factor: the change in x that changes the odds e-fold; positive for a "
                "rise with x (activation), negative for a fall (inactivation)",
            ),
        ],
        "Boltzmann function of x (e.g. channel activation against membrane voltage). The "
        "curve is unchanged when low and high swap and width changes sign; the start rule "
        "keeps low <= high, so the sign of width tells a rise from a fall.",
        derived=[],
        handles=[
            _h("midpoint", "midpoint", "x_half", "(low + high)/2", "x_half"),
            _h("low", "lower level", "x_half - 5*width", "low", "low"),
            _h("high", "upper level", "x_half + 5*width", "high", "high"),
            _h(
                "steepness",
                "slope factor",
                "x_half + width*log(3)",
                "low + 3*(high - low)/4",
                "width",
            ),
        ],
        seed=seed_boltzmann,
        linear=("low", "high"),
        grid=grid_boltzmann,
        finish=finish_boltzmann,
    )
    power = _model(
        "power_law",
        "a*x**b",
        [
            _p("a", 1.0, "y", "value at x = 1 (prefactor)"),
            _p("b", 1.0, "", "exponent: slope on log-log axes"),
        ],
        "Power law y = a*x**b (a straight line on log-log axes); needs x > 0.",
        derived=[],
        handles=[],
        seed=seed_power,
        linear=("a",),
        grid=grid_power,
        domain="x>0",
    )
    return [boltz, power]


@cache
def _build() -> Mapping[str, Model]:
    models: list[Model] = [
        _straight_line(),
        polynomial(2),
        polynomial(3),
        *_exponential_models(),
        *_enzyme_models(),
        *_dose_models(),
        *_growth_models(),
        *_peak_models(),
        *_other_models(),
    ]
    return MappingProxyType({m.name: m for m in models})


def catalog() -> Mapping[str, Model]:
    """Every built-in model by name, as a read-only mapping.

    Grouped: lines and polynomials, exponentials, enzyme kinetics, dose-response, growth,
    peaks, other. Each model exposes ``.formula``, ``.param_names``, ``.description``,
    ``.derived`` and ``.handles``; ``polynomial(k)`` gives any degree from 1 to 10.
    """
    return _build()


_POLY = re.compile(r"polynomial_(\d+)\Z")


def find_builtin(name: str, formula: str | None) -> Model | None:
    """The built-in model called ``name`` if it has this formula, else ``None``.

    Used by :meth:`Model.from_dict` to give a saved catalog model back its start rule.
    """
    if formula is None:
        return None
    cand = catalog().get(name)
    if cand is None:
        m = _POLY.match(name)
        if m is not None and 1 <= int(m.group(1)) <= MAX_DEGREE:
            cand = polynomial(int(m.group(1)))
    if cand is None or cand.expr is None:
        return None
    try:
        same = Expr.parse(formula).to_json() == cand.expr.to_json()
    except Exception:  # a formula that does not parse is simply not ours
        return None
    return cand if same else None


register_builtin_resolver(find_builtin)
