"""Seeded synthetic batches for every catalog family, and the comparison of fits from two starts.

Shared by tests/test_start_batch.py and benchmarks/starts.py. Each batch is invented data from
known parameters (seeded, so reproducible): ragged group sizes, replicates, realistic noise
(1 to 5 % of the curve's change), decreasing and increasing curves, and for the sigmoids designs
that miss the top or the bottom plateau. The minimum to reach is taken from outside the batched
rule: the per-curve guided start followed by a fit, and scipy's ``least_squares`` started at the
true parameters (reference library).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import least_squares

from curvewright.catalog import catalog, polynomial
from curvewright.fitting import fit
from curvewright.models import Model

FloatArray = NDArray[np.float64]
Rng = np.random.Generator
Truth = dict[str, float]
Maker = Callable[[Rng], tuple[FloatArray, Truth, float]]  # design x, truth, curve change


def _u(rng: Rng, lo: float, hi: float) -> float:
    return float(rng.uniform(lo, hi))


def _logu(rng: Rng, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _sign(rng: Rng) -> float:
    return 1.0 if rng.random() < 0.5 else -1.0


def _dose(kind: str, asym: bool) -> Maker:
    mid = "log_ic50" if kind == "inhibition" else "log_ec50"

    def make(rng: Rng) -> tuple[FloatArray, Truth, float]:
        lo = _u(rng, -10.0, -8.0)
        decades = _u(rng, 4.0, 6.0)
        n = int(rng.integers(7, 13))
        t = np.linspace(lo, lo + decades, n)
        scenario = rng.integers(0, 4)
        if scenario == 0:  # the top (high-dose) plateau missing
            m = lo + decades - _u(rng, 0.0, 0.4)
        elif scenario == 1:  # the low-dose plateau missing
            m = lo + _u(rng, 0.0, 0.4)
        else:
            m = lo + decades * _u(rng, 0.3, 0.7)
        x = 10.0**t
        if rng.random() < 0.3:
            x = np.concatenate([[0.0], x])  # zero-dose controls
        top, bottom = _u(rng, 80.0, 120.0), _u(rng, -5.0, 20.0)
        z, f = (top, bottom) if rng.random() < 0.5 else (bottom, top)
        truth = {"zero_dose": z, "full_effect": f, mid: m, "n_h": _u(rng, 0.6, 2.5)}
        if asym:
            truth["g"] = _logu(rng, 0.4, 2.5)
        if kind == "three":
            truth = {"full_effect": _sign(rng) * _u(rng, 50.0, 150.0), mid: m, "n_h": truth["n_h"]}
            return x, truth, abs(truth["full_effect"])
        return x, truth, abs(z - f)

    return make


def _decay(kind: str) -> Maker:
    def make(rng: Rng) -> tuple[FloatArray, Truth, float]:
        xmax = _logu(rng, 1.0, 100.0)
        x = np.linspace(0.0, xmax, int(rng.integers(8, 21)))
        k = _u(rng, 1.0, 6.0) / xmax
        if kind == "growth":
            return x, {"y0": _sign(rng) * _u(rng, 1.0, 10.0), "k": _u(rng, 0.7, 3.0) / xmax}, 1.0
        amp = _sign(rng) * _u(rng, 20.0, 100.0)
        return x, {"baseline": _u(rng, -10.0, 10.0), "amplitude": amp, "k": k}, abs(amp)

    return make


def _growth_scale(truth: Truth, x: FloatArray) -> float:
    return abs(truth["y0"]) * math.exp(truth["k"] * float(x.max()))


def _biexp(rng: Rng) -> tuple[FloatArray, Truth, float]:
    xmax = _logu(rng, 1.0, 100.0)
    x = np.geomspace(xmax / 200.0, xmax, int(rng.integers(14, 26)))
    k2 = _u(rng, 1.0, 3.0) / xmax
    k1 = k2 * _u(rng, 6.0, 20.0)
    a1, a2 = _u(rng, 20.0, 60.0), _u(rng, 20.0, 60.0)
    return x, {"baseline": _u(rng, -5, 5), "a1": a1, "k1": k1, "a2": a2, "k2": k2}, a1 + a2


def _mm(rng: Rng) -> tuple[FloatArray, Truth, float]:
    km = _logu(rng, 0.01, 100.0)
    x = km * np.geomspace(_u(rng, 0.05, 0.3), _u(rng, 3.0, 20.0), int(rng.integers(6, 12)))
    v = _u(rng, 10.0, 200.0)
    return x, {"Vmax": v, "Km": km}, v


def _si(rng: Rng) -> tuple[FloatArray, Truth, float]:
    km = _logu(rng, 0.01, 100.0)
    ki = km * _logu(rng, 20.0, 200.0)
    x = km * np.geomspace(0.1, 3.0 * ki / km, int(rng.integers(9, 16)))
    v = _u(rng, 10.0, 200.0)
    return x, {"Vmax": v, "Km": km, "Ki": ki}, v / (1 + 2 * math.sqrt(km / ki))


def _hill(rng: Rng) -> tuple[FloatArray, Truth, float]:
    k = _logu(rng, 0.01, 100.0)
    x = k * np.geomspace(_u(rng, 0.05, 0.3), _u(rng, 3.0, 20.0), int(rng.integers(7, 13)))
    v = _u(rng, 10.0, 200.0)
    return x, {"Vmax": v, "K05": k, "n_h": _u(rng, 0.7, 3.0)}, v


def _growth_model(rng: Rng) -> tuple[FloatArray, Truth, float]:
    xmax = _logu(rng, 5.0, 100.0)
    x = np.linspace(0.0, xmax, int(rng.integers(10, 22)))
    K = _u(rng, 50.0, 200.0)
    N0 = K * _logu(rng, 0.005, 0.1)
    # the inflection inside the range; with late inflections the top is not reached
    r = _u(rng, 5.0, 12.0) / xmax
    return x, {"N0": N0, "K": K, "r": r}, K


def _peak(width: str) -> Maker:
    def make(rng: Rng) -> tuple[FloatArray, Truth, float]:
        lo = _u(rng, -50.0, 50.0)
        span = _logu(rng, 1.0, 100.0)
        x = np.linspace(lo, lo + span, int(rng.integers(20, 41)))
        amp = _sign(rng) * _u(rng, 10.0, 100.0)
        c = lo + span * _u(rng, 0.2, 0.8)
        w = span * _u(rng, 0.04, 0.15)
        return (
            x,
            {"baseline": _u(rng, -5.0, 5.0), "amplitude": amp, "center": c, width: w},
            abs(amp),
        )

    return make


def _boltzmann(rng: Rng) -> tuple[FloatArray, Truth, float]:
    x = np.linspace(-100.0, 40.0, int(rng.integers(10, 18)))
    low, high = _u(rng, -0.1, 0.1), _u(rng, 0.8, 1.2)
    w = _sign(rng) * _u(rng, 4.0, 15.0)
    return x, {"low": low, "high": high, "x_half": _u(rng, -70.0, 10.0), "width": w}, high - low


def _power(rng: Rng) -> tuple[FloatArray, Truth, float]:
    x = np.geomspace(_u(rng, 0.1, 1.0), _u(rng, 20.0, 200.0), int(rng.integers(8, 15)))
    a, b = _sign(rng) * _u(rng, 0.5, 5.0), _u(rng, -2.0, 2.0)
    vals = np.abs(a * x**b)
    return x, {"a": a, "b": b}, float(vals.max() - vals.min())


def _poly(deg: int) -> Maker:
    def make(rng: Rng) -> tuple[FloatArray, Truth, float]:
        x = np.linspace(_u(rng, -5.0, 0.0), _u(rng, 1.0, 5.0), int(rng.integers(deg + 4, 20)))
        names = ["intercept", "slope"] if deg == 0 else [f"c{j}" for j in range(deg + 1)]
        truth = {n: _u(rng, -3.0, 3.0) for n in names}
        return x, truth, 10.0

    return make


MAKERS: dict[str, Maker] = {
    "straight_line": _poly(0),
    "polynomial_2": _poly(2),
    "polynomial_3": _poly(3),
    "exponential_decay": _decay("decay"),
    "biexponential_decay": _biexp,
    "exponential_rise": _decay("rise"),
    "exponential_growth": _decay("growth"),
    "michaelis_menten": _mm,
    "substrate_inhibition": _si,
    "hill": _hill,
    "inhibition_4pl": _dose("inhibition", False),
    "inhibition_5pl": _dose("inhibition", True),
    "stimulation_4pl": _dose("stimulation", False),
    "stimulation_5pl": _dose("stimulation", True),
    "stimulation_3pl": _dose("three", False),
    "logistic_growth": _growth_model,
    "gompertz_growth": _growth_model,
    "gaussian_peak": _peak("sigma"),
    "lorentzian_peak": _peak("hwhm"),
    "boltzmann": _boltzmann,
    "power_law": _power,
}


def model_of(name: str) -> Model:
    """The catalog model (or polynomial) of this name."""
    if name.startswith("polynomial_"):
        return polynomial(int(name.rsplit("_", 1)[1]))
    return catalog()[name]


@dataclass
class Batch:
    """A padded batch: x, y, mask of shape (G, N) and each group's true parameters."""

    model: Model
    x: FloatArray
    y: FloatArray
    mask: NDArray[np.bool_]
    truths: list[Truth]

    def group(self, g: int) -> tuple[FloatArray, FloatArray]:
        """The real points of group ``g``."""
        m = self.mask[g]
        return self.x[g][m], self.y[g][m]


def make_batch(name: str, groups: int, seed: int) -> Batch:
    """``groups`` seeded synthetic groups of the family ``name`` (see the module docstring)."""
    rng = np.random.default_rng(seed)
    model = model_of(name)
    xs, ys, truths = [], [], []
    for _ in range(groups):
        x0, truth, change = MAKERS[name](rng)
        if name == "exponential_growth":
            change = _growth_scale(truth, x0)
        reps = int(rng.integers(1, 4))
        x = np.repeat(x0, reps)
        keep = rng.random(x.size) < _u(rng, 0.75, 1.0)  # ragged: points missing at random
        if keep.sum() < len(truth) + 3:
            keep[:] = True
        x = x[keep]
        clean = model.eval(x, truth)
        y = clean + rng.normal(0.0, _u(rng, 0.01, 0.05) * change, x.size)
        order = rng.permutation(x.size)  # any order
        xs.append(x[order])
        ys.append(y[order])
        truths.append(truth)
    n = max(v.size for v in xs)
    X = np.full((groups, n), np.nan)
    Y = np.full((groups, n), np.nan)
    M = np.zeros((groups, n), dtype=bool)
    for g, (x, y) in enumerate(zip(xs, ys, strict=True)):
        X[g, : x.size], Y[g, : y.size], M[g, : x.size] = x, y, True
    return Batch(model, X, Y, M, truths)


def _scipy_ssr(model: Model, x: FloatArray, y: FloatArray, truth: Truth) -> float:
    """SSR of scipy's least_squares (trust-region reflective) from the true parameters."""
    names = model.param_names
    lo = np.array([p.lower for p in model.params])
    hi = np.array([p.upper for p in model.params])
    p0 = np.clip(np.array([truth[n] for n in names]), lo + 1e-12, hi)

    def resid(p: FloatArray) -> FloatArray:
        with np.errstate(all="ignore"):
            r = model.func(x, *p) - y
        return np.where(np.isfinite(r), r, 1e10)

    sol = least_squares(resid, p0, bounds=(lo, hi), method="trf", xtol=1e-15, ftol=1e-15)
    return float(np.dot(sol.fun, sol.fun))


@dataclass
class Outcome:
    """One group: SSR of the fits from the batched start and from the per-curve guided start,
    and scipy's SSR from the truth."""

    batched: float
    guided: float
    scipy: float

    @property
    def reference(self) -> float:
        return min(self.guided, self.scipy)

    def same(self, rtol: float = 1e-6) -> bool:
        """The fit from the batched start reached the reference minimum (or lower)."""
        return self.batched <= self.reference * (1 + rtol) + 1e-300


def compare(batch: Batch, starts: FloatArray, groups: list[int] | None = None) -> list[Outcome]:
    """Fit each group from the batched start and from the per-curve guided start."""
    m = batch.model
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for g in groups if groups is not None else range(batch.x.shape[0]):
            x, y = batch.group(g)
            r1 = fit(m, x, y, start=dict(zip(m.param_names, starts[g].tolist(), strict=True)))
            r0 = fit(m, x, y)  # from the per-curve guided start
            out.append(Outcome(r1.ssr, r0.ssr, _scipy_ssr(m, x, y, batch.truths[g])))
    return out
