"""The built-in models, browsable with :func:`catalog`, and :func:`polynomial` of any degree 1-10.

Every model is a formula (so the front end can preview it) with parameters named in the trade's
terms, bounds where the quantity is physical, derived quantities, draggable handles and a
data-driven starting-value rule from :mod:`curvewright.start`. Dose-response models take the
midpoint as ``logEC50``/``logIC50`` (log10 units; a concentration spans decades, and the fit is
far better conditioned in its logarithm) yet are written in ``x`` itself, so zero-dose controls
(x = 0) are valid data.
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
    finish_boltzmann,
    finish_two_phase,
    grid_boltzmann,
    grid_conc,
    grid_growth,
    grid_hill,
    grid_logistic,
    grid_peak,
    grid_power,
    grid_rate,
    grid_two_phase,
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
    seed_two_phase,
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
def _dose_params(mid: str, *, asymmetry: bool = False, bottom: bool = True) -> list[Param]:
    what = "inhibitor" if mid == "logIC50" else "agonist"
    ps = []
    if bottom:
        ps.append(_p("bottom", 0.0, "y", "response plateau at high (inhibition) or low dose"))
    ps += [
        _p("top", 100.0, "y", "response plateau at low (inhibition) or high dose"),
        _p(
            mid,
            0.0,
            "log10(x)",
            f"log10 of the {what} concentration giving a response halfway between the plateaus",
        ),
        _p(
            "hill",
            1.0,
            "",
            "Hill slope: steepness (positive; at 1 the response moves from 10% to 90% of the "
            "way over 1.9 decades of dose)",
            lower=0.0,
            positive=True,
            log_scale=True,
        ),
    ]
    if asymmetry:
        ps.append(
            _p(
                "s",
                1.0,
                "",
                "asymmetry factor (1 = symmetric 4PL; other values stretch one end)",
                lower=0.0,
                positive=True,
                log_scale=True,
            )
        )
    return ps


def _dose_models() -> list[Model]:
    out = []
    mid_hi = "10**({m} + 1.5/hill)"
    mid_lo = "10**({m} - 1.5/hill)"
    for kind, mid in (("inhibition", "logIC50"), ("stimulation", "logEC50")):
        c = mid[3:]
        u = f"(x/10**{mid})**hill"
        if kind == "inhibition":
            f4 = f"bottom + (top - bottom)/(1 + {u})"
            low, high = "top", "bottom"
        else:
            f4 = f"top + (bottom - top)/(1 + {u})"
            low, high = "bottom", "top"
        # quarter point: a quarter of the way from the high-dose plateau, x = C * 3**(1/hill)
        q4 = f"10**{mid}*3**(1/hill)"
        handles4 = [
            _h(f"{low}_plateau", f"plateau at low dose ({low})", mid_lo.format(m=mid), low, low),
            _h(
                f"{high}_plateau",
                f"plateau at high dose ({high})",
                mid_hi.format(m=mid),
                high,
                high,
            ),
            _h("midpoint", c, f"10**{mid}", "(top + bottom)/2", mid),
            _h("steepness", "Hill slope", q4, f"{high} + ({low} - {high})/4", "hill"),
        ]
        derived = [
            _d(c, f"10**{mid}", f"concentration giving a half-way response ({c})", "x", "x"),
            _d("span", "top - bottom", "distance between the plateaus", "y", "y"),
        ]
        out.append(
            _model(
                f"{kind}_4pl",
                f4,
                _dose_params(mid),
                f"Four-parameter logistic dose-response, {kind}: the response goes from "
                f"{low} at zero dose to {high} at high dose with midpoint {c} = 10**{mid}; "
                "zero-dose controls are valid data.",
                derived=derived,
                handles=handles4,
                seed=seed_logistic(kind),
                linear=("bottom", "top"),
                grid=grid_logistic(mid),
                domain="x>=0",
            )
        )
        # 5PL written with the true half-way concentration as its parameter: at x = 10**mid the
        # denominator is (1 + (2**(1/s) - 1))**s = 2 for every s, so the derived C is exact.
        w = f"(1 + (2**(1/s) - 1)*{u})**s"
        f5 = f"bottom + (top - bottom)/{w}" if kind == "inhibition" else f"top + (bottom - top)/{w}"
        # a quarter of the way from the high-dose plateau: w = 4 there
        q5 = f"10**{mid}*((4**(1/s) - 1)/(2**(1/s) - 1))**(1/hill)"
        t5 = f"10**{mid}*(((4/3)**(1/s) - 1)/(2**(1/s) - 1))**(1/hill)"
        # plateau handles where the curve is 1/32 of the span from its plateau (w = 32/31 and
        # w = 32), as the 4PL's +-1.5/hill decades nearly are; with s != 1 the two ends approach
        # their plateaus at different speeds, so fixed decades would not do
        p5 = f"10**{mid}*(({{w}}**(1/s) - 1)/(2**(1/s) - 1))**(1/hill)"
        handles5 = [
            _h(f"{low}_plateau", f"plateau at low dose ({low})", p5.format(w="(32/31)"), low, low),
            _h(f"{high}_plateau", f"plateau at high dose ({high})", p5.format(w="32"), high, high),
            handles4[2],
            _h("steepness", "Hill slope", q5, f"{high} + ({low} - {high})/4", "hill"),
            _h("asymmetry", "asymmetry", t5, f"{high} + 3*({low} - {high})/4", "s"),
        ]
        out.append(
            _model(
                f"{kind}_5pl",
                f5,
                _dose_params(mid, asymmetry=True),
                f"Five-parameter (asymmetric) logistic dose-response, {kind}: like {kind}_4pl "
                f"with an asymmetry factor s (s = 1 gives the 4PL). Parameterised so that "
                f"{c} = 10**{mid} is exactly the half-way concentration for any s.",
                derived=derived,
                handles=handles5,
                seed=seed_logistic(kind),
                linear=("bottom", "top"),
                grid=grid_logistic(mid, asymmetry=True),
                domain="x>=0",
            )
        )
    u = "(x/10**logEC50)**hill"
    out.append(
        _model(
            "stimulation_3pl",
            f"top - top/(1 + {u})",
            _dose_params("logEC50", bottom=False),
            "Three-parameter logistic: a rise from 0 (bottom fixed at zero, e.g. after "
            "subtracting the blank) to top, with midpoint EC50 = 10**logEC50 and Hill slope.",
            derived=[_d("EC50", "10**logEC50", "concentration giving half of top", "x", "x")],
            handles=[
                _h("top_plateau", "plateau (top)", "10**(logEC50 + 1.5/hill)", "top", "top"),
                _h("midpoint", "EC50", "10**logEC50", "top/2", "logEC50"),
                _h("steepness", "Hill slope", "10**logEC50*3**(1/hill)", "3*top/4", "hill"),
            ],
            seed=seed_logistic("three"),
            linear=("top",),
            grid=grid_logistic("logEC50"),
            domain="x>=0",
        )
    )
    return out


# ------------------------------------------------------------------------------- the rest
def _exponential_models() -> list[Model]:
    rate = "rate constant (1/x units of x)"
    decay = _model(
        "decay_to_plateau",
        "plateau + span*exp(-k*x)",
        [
            _p("plateau", 0.0, "y", "level the curve decays to"),
            _p("span", 1.0, "y", "value at x = 0 minus the plateau"),
            _pos("k", 1.0, "1/x", rate),
        ],
        "Single exponential decay (or rise, with a negative span) to a plateau.",
        derived=[
            _d("half_life", "log(2)/k", "time to fall half-way to the plateau", "x", "x"),
            _d("tau", "1/k", "time constant", "x", "x"),
            _d("y_at_0", "plateau + span", "value at x = 0", "y", "y"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "plateau + span", "span"),
            _h("plateau", "plateau", "5/k", "plateau", "plateau"),
            _h("half_life", "half-life", "log(2)/k", "plateau + span/2", "k"),
        ],
        seed=seed_decay,
        linear=("plateau", "span"),
        grid=grid_rate("k"),
    )
    two = _model(
        "two_phase_decay",
        "plateau + span_fast*exp(-k_fast*x) + span_slow*exp(-k_slow*x)",
        [
            _p("plateau", 0.0, "y", "level the curve decays to"),
            _p("span_fast", 1.0, "y", "amplitude of the fast phase"),
            _pos("k_fast", 3.0, "1/x", "rate constant of the fast phase"),
            _p("span_slow", 1.0, "y", "amplitude of the slow phase"),
            _pos("k_slow", 0.3, "1/x", "rate constant of the slow phase"),
        ],
        "Sum of two exponential decays to a plateau (the start rule names the faster rate k_fast).",
        derived=[
            _d("half_life_fast", "log(2)/k_fast", "half-life of the fast phase", "x", "x"),
            _d("half_life_slow", "log(2)/k_slow", "half-life of the slow phase", "x", "x"),
            _d(
                "fraction_fast",
                "span_fast/(span_fast + span_slow)",
                "share of the total span in the fast phase",
                "",
            ),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "plateau + span_fast + span_slow", "span_fast"),
            _h("plateau", "plateau", "5/k_slow", "plateau", "plateau"),
            # on the curve at each phase's half-life (the other phase's share included), so a
            # dragged point stays under the pointer
            _h(
                "half_life_fast",
                "fast half-life",
                "log(2)/k_fast",
                "plateau + span_fast/2 + span_slow*exp(-k_slow*log(2)/k_fast)",
                "k_fast",
            ),
            _h(
                "half_life_slow",
                "slow half-life",
                "log(2)/k_slow",
                "plateau + span_slow/2 + span_fast*exp(-k_fast*log(2)/k_slow)",
                "k_slow",
            ),
        ],
        seed=seed_two_phase,
        linear=("plateau", "span_fast", "span_slow"),
        grid=grid_two_phase,
        finish=finish_two_phase,
    )
    rise = _model(
        "rise_to_plateau",
        "y0 + (plateau - y0)*(1 - exp(-k*x))",
        [
            _p("y0", 0.0, "y", "value at x = 0"),
            _p("plateau", 1.0, "y", "level the curve rises to"),
            _pos("k", 1.0, "1/x", rate),
        ],
        "Exponential association: a rise from y0 at x = 0 to a plateau (fix y0 = 0 for a curve "
        "through the origin).",
        derived=[
            _d("half_life", "log(2)/k", "time to rise half-way to the plateau", "x", "x"),
            _d("tau", "1/k", "time constant", "x", "x"),
        ],
        handles=[
            _h("start", "value at x = 0", "0", "y0", "y0"),
            _h("plateau", "plateau", "5/k", "plateau", "plateau"),
            _h("half_life", "half-life", "log(2)/k", "(y0 + plateau)/2", "k"),
        ],
        seed=seed_rise,
        linear=("y0", "plateau"),
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
    return [decay, two, rise, growth]


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
        "Vmax*x/(Km + x*(1 + x/Ki))",
        [
            vmax,
            km,
            _pos("Ki", 10.0, "x", "substrate inhibition constant"),
        ],
        "Michaelis-Menten with inhibition by excess substrate: v = Vmax*S/(Km + S + S**2/Ki); "
        "the rate peaks at S = sqrt(Km*Ki).",
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
        "Vmax*x**n_hill/(K_half**n_hill + x**n_hill)",
        [
            vmax,
            _pos("K_half", 1.0, "x", "concentration giving half of Vmax"),
            _pos("n_hill", 1.0, "", "Hill coefficient (cooperativity; 1 = Michaelis-Menten)"),
        ],
        "Hill equation: cooperative binding or kinetics, rising from 0 to Vmax.",
        derived=[],
        handles=[
            _h("vmax", "Vmax asymptote", "10*K_half", "Vmax", "Vmax"),
            _h("k_half", "half saturation", "K_half", "Vmax/2", "K_half"),
            _h("steepness", "Hill coefficient", "K_half*3**(1/n_hill)", "3*Vmax/4", "n_hill"),
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
        "boltzmann_sigmoid",
        "bottom + (top - bottom)/(1 + exp((V50 - x)/slope))",
        [
            _p("bottom", 0.0, "y", "the lower level"),
            _p("top", 1.0, "y", "the upper level"),
            _p("V50", 0.0, "x", "x at the midpoint, e.g. half-activation voltage"),
            _p(
                "slope",
                1.0,
                "x",
                "slope factor: x change for an e-fold change of the odds; positive for a rise "
                "(activation), negative for a fall (inactivation)",
            ),
        ],
        "Boltzmann sigmoid in x (e.g. channel activation against voltage). Swapping bottom and "
        "top while negating the slope gives the same curve; the start rule keeps bottom <= top, "
        "so the sign of the slope tells a rise from a fall.",
        derived=[],
        handles=[
            _h("midpoint", "midpoint", "V50", "(top + bottom)/2", "V50"),
            _h("bottom", "bottom", "V50 - 5*slope", "bottom", "bottom"),
            _h("top", "top", "V50 + 5*slope", "top", "top"),
            _h("steepness", "slope", "V50 + slope*log(3)", "bottom + 3*(top - bottom)/4", "slope"),
        ],
        seed=seed_boltzmann,
        linear=("bottom", "top"),
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
