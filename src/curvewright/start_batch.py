"""Batched guided starts: starting values for many padded groups of one catalog model at once.

One job: :func:`guided_starts` gives every group of a batch (``x, y`` of shape ``(G, N)`` with a
mask of the real points) a data-driven start for a catalog model in numpy array operations over
the group axis, with no Python loop per group. It follows the per-curve rules of
:mod:`curvewright.start` (seeds from the end levels, logit and semilog lines, separable least
squares for the parameters a model is affine in, a small grid over the others) but replaces
their short least-squares searches by a grid refined twice around its best point: each trial of
the nonlinear parameters has its linear parameters solved exactly (variable projection, Golub &
Pereyra 1973) and the trial with the smallest residual sum of squares wins.

A group the batched rule cannot serve (non-finite or too few points, x outside the model's
domain, a degenerate linear solve, a model without a batched rule) comes back with ``ok`` False;
the caller then uses the per-curve :func:`curvewright.start.guided_start` for it.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from itertools import product
from types import ModuleType
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .catalog import find_builtin
from .errors import DataError, ParameterError
from .models import Model, unknown_name_message

__all__ = ["batched_rule_models", "guided_starts", "move_inside_batch"]

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]
Values = dict[str, FloatArray]

_LN10 = math.log(10.0)
#: Elements of one (groups x trials x points) block: small enough to stay in cache, large
#: enough that the per-block array calls do not dominate.
_BLOCK = 1 << 18
#: A line's spread of t below this share of the sum of t**2 is rounding (a few ulp of t), not
#: data; also read by the compiled search (start_kernel).
_FLAT = 1e-20


# ============================================================================ bounds
def move_inside_batch(lower: ArrayLike, upper: ArrayLike, value: ArrayLike) -> FloatArray:
    """:func:`curvewright.parameters.move_inside`, element by element on arrays.

    A value inside ``[lower, upper]`` is kept. Outside a finite range it goes to the nearest
    bound moved 1 % of the range inwards; outside a one-sided range, to the bound moved inwards by
    a tenth of its size (at least 1e-3).

    Parameters
    ----------
    lower, upper, value : array_like
        Broadcast together.

    Returns
    -------
    ndarray
        The values inside their bounds.
    """
    lo = np.asarray(lower, dtype=float)
    hi = np.asarray(upper, dtype=float)
    v = np.asarray(value, dtype=float)
    with np.errstate(all="ignore"):
        finite = np.isfinite(lo) & np.isfinite(hi)
        step = 0.01 * (hi - lo)
        below = v < lo
        in_finite = np.where(below, lo + step, hi - step)
        in_open = np.where(
            below, lo + np.maximum(np.abs(lo) * 0.1, 1e-3), hi - np.maximum(np.abs(hi) * 0.1, 1e-3)
        )
        moved = np.where(finite, in_finite, in_open)
        out: FloatArray = np.where((lo <= v) & (v <= hi), v, moved)
    return out


# ============================================================================ the data of a block
@dataclass
class _Block:
    """Groups of one block: points sorted by x, replicate means, bounds and fixed values."""

    x: FloatArray  # (g, n) sorted by x; padding repeats the largest real x
    y: FloatArray  # (g, n); padding is 0
    w: FloatArray  # (g, n) 1.0 for a real point, 0.0 for padding
    ux: FloatArray  # (g, n) distinct x, ascending; padding repeats the largest
    my: FloatArray  # (g, n) mean y at each distinct x; padding 0
    uw: FloatArray  # (g, n) 1.0 for a distinct x, 0.0 for padding
    nd: NDArray[np.intp]  # (g,) number of distinct x
    lo: FloatArray  # (g, P)
    hi: FloatArray  # (g, P)
    held: Values  # name -> (g,)
    model: Model
    n: FloatArray  # (g,) number of real points
    ybar: FloatArray  # (g,) their mean
    yc: FloatArray  # (g, n) y - ybar, 0 in the padding
    syy: FloatArray  # (g,) sum of y**2
    syyc: FloatArray  # (g,) sum of (y - ybar)**2
    padded: bool  # whether any point of the block is padding
    cache: dict[str, FloatArray] = field(default_factory=dict)

    @property
    def g(self) -> int:
        return int(self.x.shape[0])

    def col(self, name: str) -> int:
        return self.model.param_names.index(name)

    @property
    def span(self) -> FloatArray:
        """The x range of each group (or the largest |x|, at least 1, when it is 0)."""
        s = self.ux[:, -1] - self.ux[:, 0]
        big = np.maximum(np.max(np.abs(self.ux), axis=1), 1.0)
        out: FloatArray = np.where(s > 0, s, big)
        return out

    def log_pos_range(self) -> tuple[FloatArray, FloatArray]:
        """log10 of the smallest and largest positive x (-3 and 3 when there is none)."""
        pos = (self.ux > 0) & (self.uw > 0)
        has = np.any(pos, axis=1)
        with np.errstate(all="ignore"):
            lmin = np.log10(np.min(np.where(pos, self.ux, np.inf), axis=1))
            lmax = np.log10(np.max(np.where(pos, self.ux, -np.inf), axis=1))
        return np.where(has, lmin, -3.0), np.where(has, lmax, 3.0)

    def lnx(self) -> FloatArray:
        if "lnx" not in self.cache:
            with np.errstate(all="ignore"):
                self.cache["lnx"] = np.log(self.x)
        return self.cache["lnx"]

    @property
    def lnx_ref(self) -> FloatArray:
        """(g,) the mean ln x over the positive x (0 when there is none)."""
        if "lnx_ref" not in self.cache:
            lnx = self.lnx()
            use = (self.x > 0) * self.w
            with np.errstate(all="ignore"):
                ref = np.sum(np.where(use > 0, lnx, 0.0), axis=1) / np.sum(use, axis=1)
            self.cache["lnx_ref"] = np.where(np.isfinite(ref), ref, 0.0)
        return self.cache["lnx_ref"]

    def lnx_centred(self) -> FloatArray:
        """ln x - lnx_ref (-inf at x = 0)."""
        if "lnx_c" not in self.cache:
            self.cache["lnx_c"] = self.lnx() - self.lnx_ref[:, None]
        return self.cache["lnx_c"]


def _prepare(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    m: BoolArray,
    lo: FloatArray,
    hi: FloatArray,
    held: Values,
) -> _Block:
    g, n = x.shape
    # padding sorts last and never reaches a value: every sum below is weighted by the mask
    key = np.where(m, x, np.inf)
    if np.all(key[:, 1:] >= key[:, :-1]):
        xs, ys, ms = x, y, m  # already in order (a plate layout usually is): no sort needed
    else:
        order = np.argsort(key, axis=1, kind="stable")
        xs = np.take_along_axis(x, order, axis=1)
        ys = np.take_along_axis(y, order, axis=1)
        ms = np.take_along_axis(m, order, axis=1)
    xmax = np.max(np.where(ms, xs, -np.inf), axis=1)
    xs = np.where(ms, xs, xmax[:, None])
    ys = np.where(ms, ys, 0.0)
    w = ms.astype(float)
    new = np.ones((g, n), dtype=bool)
    new[:, 1:] = xs[:, 1:] != xs[:, :-1]
    new &= ms
    nd = np.sum(new, axis=1)
    rank = np.cumsum(new, axis=1) - 1
    idx = (np.arange(g)[:, None] * n + np.maximum(rank, 0)).ravel()
    sums = np.bincount(idx, weights=(ys * w).ravel(), minlength=g * n).reshape(g, n)
    counts = np.bincount(idx, weights=w.ravel(), minlength=g * n).reshape(g, n)
    uw = (np.arange(n)[None, :] < nd[:, None]).astype(float)
    ux = np.repeat(xmax[:, None], n, axis=1)
    flat_new = new.ravel()
    ux.ravel()[idx[flat_new]] = xs.ravel()[flat_new]
    with np.errstate(all="ignore"):
        my = np.where(uw > 0, sums / np.where(counts > 0, counts, 1.0), 0.0)
    cnt = np.sum(w, axis=1)
    ybar = np.sum(ys, axis=1) / cnt
    yc = (ys - ybar[:, None]) * w
    return _Block(
        xs,
        ys,
        w,
        ux,
        my,
        uw,
        nd,
        lo,
        hi,
        held,
        model,
        cnt,
        ybar,
        yc,
        np.sum(ys * ys, axis=1),
        np.sum(yc * yc, axis=1),
        not bool(np.all(ms)),
    )


# ============================================================================ batched line fits
def _ols(t: FloatArray, z: FloatArray, use: FloatArray) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Least-squares line ``z = a + b*t`` per row over the points with ``use`` 1."""
    with np.errstate(all="ignore"):
        t = np.where(use > 0, t, 0.0)
        z = np.where(use > 0, z, 0.0)
        k = np.sum(use, axis=1)
        kk = np.maximum(k, 1.0)
        tm = np.sum(t * use, axis=1) / kk
        zm = np.sum(z * use, axis=1) / kk
        dt = (t - tm[:, None]) * use
        sxx = np.sum(dt * dt, axis=1)
        b = np.sum(dt * (z - zm[:, None]), axis=1) / np.where(sxx > 0, sxx, 1.0)
        a = zm - b * tm
        # t all one value but for rounding (replicates of one x): no line; the rounding of
        # ``log10`` (numpy's, libm's) would otherwise decide whether a slope comes out
        spread = sxx > _FLAT * np.sum(t * t * use, axis=1)
    ok = (k >= 2) & (sxx > 0) & spread & np.isfinite(a) & np.isfinite(b)
    return a, b, ok


def _end_levels(b: _Block, frac: float = 0.15) -> tuple[FloatArray, FloatArray]:
    """Mean response over the lowest and the highest ``frac`` of each group's distinct x."""
    k = np.maximum(1.0, np.round(frac * b.nd))[:, None]
    j = np.arange(b.ux.shape[1])[None, :]
    low = (j < k) * b.uw
    high = (j >= b.nd[:, None] - k) * b.uw
    return (
        np.sum(b.my * low, axis=1) / np.sum(low, axis=1),
        np.sum(b.my * high, axis=1) / np.sum(high, axis=1),
    )


def _semilog(
    t: FloatArray, v: FloatArray, use: FloatArray, baseline: FloatArray
) -> tuple[FloatArray, FloatArray, BoolArray]:
    """``v = baseline + amplitude*exp(-k*t)`` per row from the log-linear line (as semilog_rate)."""
    d = v - baseline[:, None]
    pos = np.sum((d > 0) * use, axis=1)
    neg = np.sum((d < 0) * use, axis=1)
    sign = np.where(pos >= neg, 1.0, -1.0)
    dist = sign[:, None] * d
    ok_pts = (dist > 0) & (use > 0)
    top = np.max(np.where(ok_pts, dist, 0.0), axis=1)
    sel = (ok_pts & (dist > 0.05 * top[:, None])).astype(float)
    with np.errstate(all="ignore"):
        a, slope, ok = _ols(t, np.log(np.where(sel > 0, dist, 1.0)), sel)
        amp = sign * np.exp(a)
    return amp, -slope, ok & np.isfinite(amp)


def _logit(
    t: FloatArray,
    v: FloatArray,
    use: FloatArray,
    low_level: FloatArray,
    high_level: FloatArray,
    trim: float = 0.05,
) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Midpoint and slope of ``log10(f/(1-f)) = slope*(t - mid)`` per row (as logit_line)."""
    with np.errstate(all="ignore"):
        f = (v - low_level[:, None]) / (high_level - low_level)[:, None]
        sel = ((f > trim) & (f < 1.0 - trim) & (use > 0)).astype(float)
        fs = np.where(sel > 0, f, 0.5)
        a, slope, ok = _ols(t, np.log10(fs / (1.0 - fs)), sel)
        mid = -a / slope
    ok &= (slope != 0) & np.isfinite(mid) & (high_level != low_level)
    return mid, slope, ok


def _half_crossing(b: _Block, lo: FloatArray, hi: FloatArray) -> FloatArray:
    """log10 of the x where the replicate means (x > 0) first cross halfway, interpolated."""
    use = (b.ux > 0) & (b.uw > 0)
    with np.errstate(all="ignore"):
        t = np.log10(np.where(use, b.ux, 1.0))
    d = b.my - (0.5 * (lo + hi))[:, None]
    s = np.sign(d)
    pair = (s[:, :-1] * s[:, 1:] <= 0) & use[:, :-1] & use[:, 1:]
    has = np.any(pair, axis=1)
    i = np.argmax(pair, axis=1)
    rows = np.arange(b.g)
    t0, t1 = t[rows, i], t[rows, i + 1]
    d0, d1 = d[rows, i], d[rows, i + 1]
    with np.errstate(all="ignore"):
        cross: FloatArray = np.where(d1 == d0, t0, t0 + (t1 - t0) * d0 / (d0 - d1))
    if np.all(has):
        return cross
    k = np.maximum(np.sum(use, axis=1), 1)
    med = np.where(use, t, np.inf)
    med.sort(axis=1)
    median = 0.5 * (med[rows, (k - 1) // 2] + med[rows, k // 2])
    out: FloatArray = np.where(has, cross, np.where(np.any(use, axis=1), median, 0.0))
    return out


# ============================================================================ trial sets
def _col(v: FloatArray | float, g: int) -> FloatArray:
    """A (g, 1) column of per-group values."""
    return np.broadcast_to(np.asarray(v, dtype=float).reshape(-1, 1), (g, 1)).astype(float)


def _grid(axes: Mapping[str, FloatArray]) -> Values:
    """Every combination of the per-group candidate axes (each (g, k_i)) as (g, prod k_i)."""
    names = list(axes)
    g = next(iter(axes.values())).shape[0]
    shapes = [axes[n].shape[1] for n in names]
    out: Values = {}
    for i, n in enumerate(names):
        shape = [g, *[1] * len(names)]
        shape[1 + i] = shapes[i]
        out[n] = np.broadcast_to(axes[n].reshape(shape), (g, *shapes)).reshape(g, -1)
    return out


def _join(*sets: Values) -> Values:
    names = list(sets[0])
    return {n: np.concatenate([s[n] for s in sets], axis=1) for n in names}


def _row(v: ArrayLike, g: int) -> FloatArray:
    """The same candidate values for every group: (g, k)."""
    a = np.asarray(v, dtype=float).ravel()
    return np.broadcast_to(a, (g, a.size))


# ============================================================================ families
#: For a coordinate, which distinct value each trial takes (trials sharing a value share work).
Share = Mapping[str, NDArray[np.intp]]
Single = Callable[[_Block, Values, Share], FloatArray]
Split = Callable[[FloatArray], Values]


@dataclass(frozen=True)
class _Family:
    """How to start one catalog model in a batch.

    ``coords`` are the searched coordinates (the model's nonlinear parameters unless ``native``
    maps other ones back), ``linear`` the parameters solved exactly for each trial, ``trials``
    the seeds and grid, ``steps`` the refinement step of each coordinate (in log units for the
    ``logged`` ones).

    Most catalog curves are ``a + c*s`` or ``c*s`` for one shape ``s`` of the nonlinear
    coordinates (``single``): then the linear solve needs three sums per trial. ``affine`` maps
    ``(a, c)`` to the linear parameters (None for the form ``c*s``, where ``c`` is
    ``linear[0]``); ``split`` gives each linear parameter's column of ``s`` for the general
    solve (fixed or bounded linear parameters). ``columns`` gives the columns directly for a
    model without one shape; without any of these the model's own function is evaluated.
    """

    coords: tuple[str, ...]
    linear: tuple[str, ...]
    trials: Callable[[_Block], Values]
    steps: Mapping[str, float]
    logged: frozenset[str]
    single: Single | None = None
    split: Split | None = None
    affine: Callable[[FloatArray, FloatArray], Values] | None = None
    columns: Callable[[_Block, Values], Values] | None = None
    native: Callable[[Values], Values] | None = None
    finish: Callable[[Values], Values] | None = None
    allows_fixed: bool = True
    rounds: int = 3
    max_scale: float = 4.0


#: The dose families' first grid (also read by the compiled search, start_kernel): fractions
#: of the log x range for the mid-point (n_h 1 on it), and the 5PL's asymmetries.
_DOSE_MID_GRID = np.linspace(-0.2, 1.2, 3)
_DOSE_G_GRID = np.array([0.1, 0.4, 2.5, 10.0])


def _dose_trials(mid: str, kind: str, asymmetry: bool) -> Callable[[_Block], Values]:
    def trials(b: _Block) -> Values:
        g = b.g
        low, high = _end_levels(b)
        if kind == "three":
            low = np.zeros(g)
        use = b.w * (b.x > 0)
        with np.errstate(all="ignore"):
            t = np.log10(np.where(use > 0, b.x, 1.0))
        m0, slope, ok = _logit(t, b.y, use, low, high)
        cross = _half_crossing(b, low, high)
        m0 = np.where(ok, m0, cross)
        nh0 = np.where(ok, np.clip(np.abs(slope), 0.2, 5.0), 1.0)
        lmin, lmax = _log_range_clipped(b)
        seeds: Values = {mid: np.column_stack([m0, cross]), "n_h": np.column_stack([nh0, nh0])}
        grid_axes = {
            mid: lmin[:, None] + (lmax - lmin)[:, None] * _DOSE_MID_GRID[None, :],
            "n_h": _row([1.0], g),
        }
        if asymmetry:
            seeds["g"] = np.ones((g, 2))
            grid_axes["g"] = _row(_DOSE_G_GRID, g)
        return _join(seeds, _grid(grid_axes))

    return trials


def _log_range_clipped(b: _Block) -> tuple[FloatArray, FloatArray]:
    lmin, lmax = b.log_pos_range()
    same = ~(lmax > lmin)
    return np.where(same, lmin - 1.0, lmin), np.where(same, lmax + 1.0, lmax)


def _powers(b: _Block, nh: FloatArray, sign: float) -> FloatArray:
    """``exp(sign*n_h*(ln x - ref))`` for the distinct trial values ``nh`` of shape (g, U, 1).

    A column whose value in every group is one of the block's previous call (each group may
    match a different one) is copied from it rather than recomputed: a refinement round's
    centre is the last round's best trial.
    """
    lnx = b.lnx_centred()[:, None, :]
    g, U = nh.shape[0], nh.shape[1]
    out = np.empty((g, U, lnx.shape[2]))
    seen_nh, seen = b.cache.get("nh_seen"), b.cache.get("powers_seen")
    rows = np.arange(g)
    todo: list[int] = []
    for u in range(U):
        if seen_nh is not None and seen is not None:
            match = nh[:, u, :] == seen_nh[:, :, 0]  # (g, K); NaN never matches
            if np.all(np.any(match, axis=1)):
                out[:, u, :] = seen[rows, np.argmax(match, axis=1), :]
                continue
        todo.append(u)
    if todo:
        out[:, todo, :] = np.exp(sign * nh[:, todo, :] * lnx)
    b.cache["nh_seen"], b.cache["powers_seen"] = nh, out
    return out


def _dose_single(mid: str, kind: str, asymmetry: bool) -> Single:
    def single(b: _Block, v: Values, share: Share) -> FloatArray:
        nh = v["n_h"]
        # (x/c50)**n_h = exp(n_h*(ln x - ref)) * exp(n_h*(ref - ln c50)), ref a typical ln x:
        # the first factor is the costly one, and trials sharing n_h share it
        idx = share.get("n_h")
        sign = -1.0 if kind == "three" else 1.0  # the 3PL takes (c50/x)**n_h
        with np.errstate(all="ignore"):
            lnx = b.lnx_centred()[:, None, :]
            if idx is not None:
                first = [int(np.argmax(idx == u)) for u in range(int(idx.max()) + 1)]
                h = _powers(b, nh[:, first, :], sign)[:, idx, :]
            else:
                h = np.multiply(sign * nh, lnx)
                np.exp(h, out=h)
            # the second factor kept finite and nonzero, so that 0*inf (NaN) cannot occur; only
            # a trial hundreds of decades off the data would notice
            h *= np.exp(np.clip(sign * nh * (b.lnx_ref[:, None, None] - _LN10 * v[mid]), -700, 700))
            if asymmetry:
                gg = v["g"]
                h *= 2.0 ** (1.0 / gg) - 1.0
                np.log1p(h, out=h)
                h *= -gg
                np.exp(h, out=h)
                return h
            h += 1.0
            np.reciprocal(h, out=h)
        return h

    return single


def _dose_ac(a: FloatArray, c: FloatArray) -> Values:
    # full_effect + (zero_dose - full_effect)*s
    return {"zero_dose": a + c, "full_effect": a}


def _dose_split(s: FloatArray) -> Values:
    return {"zero_dose": s, "full_effect": 1.0 - s}


def _rate_axis(b: _Block, n: int) -> FloatArray:
    s = b.span[:, None]
    return np.geomspace(0.03, 30.0, n)[None, :] / s


def _decay_trials(kind: str) -> Callable[[_Block], Values]:
    def trials(b: _Block) -> Values:
        _, tail = _end_levels(b)
        base = np.zeros(b.g) if kind == "growth" else tail
        _, k, ok = _semilog(b.x, b.y, b.w, base)
        k0 = np.where(ok & (k != 0), np.abs(k), 1.0 / b.span)
        return {"k": np.column_stack([k0, _rate_axis(b, 11)])}

    return trials


def _biexp_trials(b: _Block) -> Values:
    _, tail = _end_levels(b)
    half = (b.nd // 2)[:, None]
    j = np.arange(b.ux.shape[1])[None, :]
    late = b.uw * (j >= half)
    early = b.uw * (j < half)
    a2, k2, ok2 = _semilog(b.ux, b.my, late, tail)
    k2 = np.where(ok2, np.abs(k2), 1.0 / b.span)
    a2 = np.where(ok2, a2, 0.0)
    with np.errstate(all="ignore"):
        rest = b.my - tail[:, None] - a2[:, None] * np.exp(-k2[:, None] * b.ux)
    _, k1, ok1 = _semilog(b.ux, rest, early, np.zeros(b.g))
    k1 = np.where(ok1, np.abs(k1), 3.0 * k2)
    k1 = np.where(k1 < k2, 3.0 * k2, k1)
    r = _rate_axis(b, 8)
    i, jj = np.triu_indices(8, 1)  # k1 > k2 only: the phases are numbered afterwards anyway
    return {
        "k1": np.column_stack([k1, r[:, jj]]),
        "k2": np.column_stack([k2, r[:, i]]),
    }


def _finish_biexp(v: Values) -> Values:
    swap = v["k1"] < v["k2"]
    out = dict(v)
    for a, c in (("k1", "k2"), ("a1", "a2")):
        out[a] = np.where(swap, v[c], v[a])
        out[c] = np.where(swap, v[a], v[c])
    return out


def _conc_axis(b: _Block, n: int) -> FloatArray:
    lmin, lmax = b.log_pos_range()
    return 10.0 ** (lmin[:, None] - 1.0 + (lmax - lmin + 2.0)[:, None] * np.linspace(0, 1, n))


def _hanes_woolf(b: _Block, use: FloatArray) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Vmax, Km from the Hanes-Woolf line x/y on x over the means with x > 0 and y > 0."""
    sel = use * (b.ux > 0) * (b.my > 0)
    with np.errstate(all="ignore"):
        a, s, ok = _ols(b.ux, b.ux / np.where(sel > 0, b.my, 1.0), sel)
        vmax, km = 1.0 / s, a / s
    return vmax, km, ok & (vmax > 0) & (km > 0) & np.isfinite(vmax) & np.isfinite(km)


def _median_pos_x(b: _Block) -> FloatArray:
    use = (b.ux > 0) & (b.uw > 0)
    k = np.sum(use, axis=1)
    srt = np.sort(np.where(use, b.ux, np.inf), axis=1)
    r = np.arange(b.g)
    km = np.maximum(k, 1)
    med = 0.5 * (srt[r, (km - 1) // 2] + srt[r, km // 2])
    out: FloatArray = np.where(k > 0, med, 1.0)
    return out


def _mm_trials(b: _Block) -> Values:
    _, km, ok = _hanes_woolf(b, b.uw)
    km = np.where(ok, km, _median_pos_x(b))
    return {"Km": np.column_stack([km, _conc_axis(b, 13)])}


def _si_trials(b: _Block) -> Values:
    ipk = np.argmax(np.where(b.uw > 0, b.my, -np.inf), axis=1)
    j = np.arange(b.ux.shape[1])[None, :]
    rising = b.uw * (j <= np.maximum(ipk, 2)[:, None])
    _, km, ok = _hanes_woolf(b, rising)
    xpk = b.ux[np.arange(b.g), ipk]
    km = np.where(ok, km, np.maximum(xpk, 1e-12))
    inner = (ipk > 0) & (ipk < b.nd - 1) & (xpk > 0)
    ki = np.where(inner, xpk**2 / km, 100.0 * np.max(b.ux, axis=1))
    ki = np.maximum(ki, 1e-12)
    ax = _conc_axis(b, 8)
    grid = _grid({"Km": ax, "Ki": ax})
    return _join({"Km": km[:, None], "Ki": ki[:, None]}, grid)


def _hill_trials(b: _Block) -> Values:
    vmax = 1.05 * np.max(np.where(b.uw > 0, b.my, -np.inf), axis=1)
    use = b.uw * (b.ux > 0)
    with np.errstate(all="ignore"):
        t = np.log10(np.where(use > 0, b.ux, 1.0))
    mid, slope, ok = _logit(t, b.my, use, np.zeros(b.g), vmax)
    k05 = np.where(ok, 10.0**mid, _median_pos_x(b))
    nh = np.where(ok, np.maximum(np.abs(slope), 0.1), 1.0)
    grid = _grid({"K05": _conc_axis(b, 9), "n_h": _row([0.5, 1.0, 2.0, 4.0], b.g)})
    return _join({"K05": k05[:, None], "n_h": nh[:, None]}, grid)


def _hill_single(b: _Block, v: Values, share: Share) -> FloatArray:
    lnx = b.lnx()[:, None, :]
    with np.errstate(all="ignore"):
        out: FloatArray = 1.0 / (1.0 + np.exp(v["n_h"] * (np.log(v["K05"]) - lnx)))
    return out


# Growth models are searched in coordinates where the capacity K is linear: the logistic as
# K/(1 + exp(-r*(x - xi))) with xi the inflection time, the Gompertz as K*exp(-beta*exp(-r*x))
# with beta = log(K/N0); N0 follows from K and the coordinates.
def _logistic_trials(b: _Block) -> Values:
    top = 1.05 * np.max(np.where(b.uw > 0, b.my, -np.inf), axis=1)
    mid, slope, ok = _logit(b.ux, b.my, b.uw, np.zeros(b.g), top)
    r0 = np.where(ok, np.abs(slope) * _LN10, 4.0 / b.span)
    xi0 = np.where(ok, mid, b.ux[:, 0] + 0.5 * b.span)
    s = b.span[:, None]
    r_ax = np.column_stack([r0, r0 * 0.4, r0 * 2.5, np.geomspace(1.0, 60.0, 6)[None, :] / s])
    xi_ax = np.column_stack([xi0, b.ux[:, :1] + s * np.linspace(-0.25, 1.25, 7)[None, :]])
    return _grid({"r": r_ax, "xi": xi_ax})


def _logistic_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = 1.0 / (1.0 + np.exp(-v["r"] * (b.x[:, None, :] - v["xi"])))
    return out


def _logistic_native(v: Values) -> Values:
    with np.errstate(all="ignore"):
        n0 = v["K"] / (1.0 + np.exp(np.minimum(v["r"] * v["xi"], 700.0)))
    return {"N0": n0, "K": v["K"], "r": v["r"]}


def _gompertz_trials(b: _Block) -> Values:
    top = 1.05 * np.max(np.where(b.uw > 0, b.my, -np.inf), axis=1)
    pos = b.uw * (b.my > 0)
    with np.errstate(all="ignore"):
        lr = np.log(top[:, None] / np.where(pos > 0, b.my, 1.0))
    beta0, r0, ok = _semilog(b.ux, lr, pos, np.zeros(b.g))
    beta0 = np.where(ok, np.maximum(beta0, 1e-3), 2.0)
    r0 = np.where(ok & (r0 != 0), np.abs(r0), 3.0 / b.span)
    s = b.span[:, None]
    r_ax = np.column_stack([r0, r0 * 0.4, r0 * 2.5, np.geomspace(1.0, 60.0, 6)[None, :] / s])
    beta_ax = np.column_stack([beta0, _row(np.geomspace(0.05, 30.0, 7), b.g)])
    return _grid({"r": r_ax, "beta": beta_ax})


def _gompertz_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = np.exp(-v["beta"] * np.exp(-v["r"] * b.x[:, None, :]))
    return out


def _gompertz_native(v: Values) -> Values:
    with np.errstate(all="ignore"):
        return {"N0": v["K"] * np.exp(-v["beta"]), "K": v["K"], "r": v["r"]}


def _peak_seed(b: _Block) -> tuple[FloatArray, FloatArray]:
    """Centre and full width at half maximum of each group's largest excursion (as start.py)."""
    my, uw, nd = b.my, b.uw, b.nd
    n = my.shape[1]
    j = np.arange(n)[None, :]
    last = np.maximum(nd - 1, 0)[:, None]
    # a 3-point running median (ends repeated) keeps one noisy point from being the apex
    left = np.take_along_axis(my, np.maximum(j - 1, 0), axis=1)
    right = np.take_along_axis(my, np.minimum(j + 1, last), axis=1)
    med = np.median(np.stack([left, my, right]), axis=0)
    sm = np.where((nd >= 5)[:, None], med, my)
    edge = np.maximum(1, np.round(0.1 * nd))[:, None]
    ends = ((j < edge) | ((j >= nd[:, None] - edge) & (j < nd[:, None]))) & (uw > 0)
    vals = np.sort(np.where(ends, sm, np.inf), axis=1)
    k = np.sum(ends, axis=1)
    r = np.arange(b.g)
    km = np.maximum(k, 1)
    base = 0.5 * (vals[r, (km - 1) // 2] + vals[r, km // 2])
    dev = np.where(uw > 0, sm - base[:, None], 0.0)
    i = np.argmax(np.abs(dev), axis=1)
    amp = dev[r, i]
    centre = b.ux[r, i]
    above = (np.abs(dev) >= 0.5 * np.abs(amp)[:, None]) & (uw > 0)
    lbad = np.max(np.where(~above & (j < i[:, None]), j, -1), axis=1)
    rbad = np.min(np.where(~above & (j > i[:, None]) & (uw > 0), j, n), axis=1)
    lo_i = np.maximum(lbad + 1 - 1, 0)
    hi_i = np.minimum(np.minimum(rbad - 1, nd - 1) + 1, nd - 1)
    fwhm = (b.ux[r, hi_i] - b.ux[r, lo_i]) * 0.75
    fwhm = np.where(fwhm > 0, fwhm, 0.1 * b.span)
    return centre, fwhm


def _peak_trials(width: str, per_fwhm: float) -> Callable[[_Block], Values]:
    def trials(b: _Block) -> Values:
        c0, fwhm = _peak_seed(b)
        w0 = fwhm * per_fwhm
        s = b.span[:, None]
        centres = np.column_stack(
            [c0, b.ux[:, :1] + (b.ux[:, -1:] - b.ux[:, :1]) * np.linspace(0, 1, 7)[None, :]]
        )
        widths = np.column_stack([w0, s * np.array([[0.02, 0.1, 0.3]])])
        return _grid({"center": centres, width: widths})

    return trials


def _boltzmann_trials(b: _Block) -> Values:
    low, high = _end_levels(b)
    mid, slope, ok = _logit(b.x, b.y, b.w, low, high)
    with np.errstate(all="ignore"):
        w0 = np.where(ok, 1.0 / (slope * _LN10), 0.1 * b.span)
    xh0 = np.where(ok, mid, 0.5 * (b.ux[:, 0] + b.ux[:, -1]))
    s = b.span[:, None]
    mags = s * np.array([[0.02, 0.07, 0.3]])
    xh = np.column_stack(
        [xh0, b.ux[:, :1] + (b.ux[:, -1:] - b.ux[:, :1]) * np.linspace(0, 1, 7)[None, :]]
    )
    return _grid({"x_half": xh, "width": np.column_stack([w0, mags, -mags])})


def _finish_boltzmann(v: Values) -> Values:
    swap = v["high"] < v["low"]
    out = dict(v)
    out["low"] = np.where(swap, v["high"], v["low"])
    out["high"] = np.where(swap, v["low"], v["high"])
    out["width"] = np.where(swap, -v["width"], v["width"])
    return out


def _power_trials(b: _Block) -> Values:
    use = b.uw * (b.ux > 0)
    pos = np.sum((b.my > 0) * use, axis=1)
    neg = np.sum((b.my < 0) * use, axis=1)
    sign = np.where(pos >= neg, 1.0, -1.0)
    sel = use * (sign[:, None] * b.my > 0)
    with np.errstate(all="ignore"):
        _, b0, ok = _ols(
            np.log(np.where(sel > 0, b.ux, 1.0)),
            np.log(np.where(sel > 0, sign[:, None] * b.my, 1.0)),
            sel,
        )
    b0 = np.where(ok, b0, 1.0)
    return {"b": np.column_stack([b0, _row(np.linspace(-3.0, 3.0, 13), b.g)])}


def _no_trials(b: _Block) -> Values:
    return {}


def _x3(b: _Block) -> FloatArray:
    return b.x[:, None, :]


def _decay_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = np.exp(-v["k"] * _x3(b))
    return out


def _growth_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = np.exp(v["k"] * _x3(b))
    return out


def _biexp_columns(b: _Block, v: Values) -> Values:
    x = _x3(b)
    with np.errstate(all="ignore"):
        e1 = np.exp(-v["k1"] * x)
        e2 = np.exp(-v["k2"] * x)
    return {"baseline": np.ones_like(e1), "a1": e1, "a2": e2}


def _mm_single(b: _Block, v: Values, share: Share) -> FloatArray:
    x = _x3(b)
    with np.errstate(all="ignore"):
        out: FloatArray = x / (v["Km"] + x)
    return out


def _si_single(b: _Block, v: Values, share: Share) -> FloatArray:
    x = _x3(b)
    with np.errstate(all="ignore"):
        out: FloatArray = x / (v["Km"] + x + x * x / v["Ki"])
    return out


def _gauss_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        z = (_x3(b) - v["center"]) / v["sigma"]
        out: FloatArray = np.exp(-0.5 * z * z)
    return out


def _lorentz_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        z = (_x3(b) - v["center"]) / v["hwhm"]
        out: FloatArray = 1.0 / (1.0 + z * z)
    return out


def _boltzmann_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = 1.0 / (1.0 + np.exp((v["x_half"] - _x3(b)) / v["width"]))
    return out


def _power_single(b: _Block, v: Values, share: Share) -> FloatArray:
    with np.errstate(all="ignore"):
        out: FloatArray = np.exp(v["b"] * b.lnx()[:, None, :])
    return out


def _level_split(level: str, amplitude: str) -> Split:
    def split(s: FloatArray) -> Values:
        return {level: np.ones_like(s), amplitude: s}

    return split


def _level_ac(level: str, amplitude: str) -> Callable[[FloatArray, FloatArray], Values]:
    def ac(a: FloatArray, c: FloatArray) -> Values:
        return {level: a, amplitude: c}

    return ac


def _rise_split(s: FloatArray) -> Values:
    return {"baseline": np.ones_like(s), "amplitude": 1.0 - s}


def _rise_ac(a: FloatArray, c: FloatArray) -> Values:
    # baseline + amplitude*(1 - s) = (baseline + amplitude) - amplitude*s
    return {"baseline": a + c, "amplitude": -c}


def _boltzmann_split(s: FloatArray) -> Values:
    return {"low": 1.0 - s, "high": s}


def _boltzmann_ac(a: FloatArray, c: FloatArray) -> Values:
    return {"low": a, "high": a + c}


def _scale_split(name: str) -> Split:
    def split(s: FloatArray) -> Values:
        return {name: s}

    return split


def _families() -> dict[str, _Family]:
    fams: dict[str, _Family] = {}
    for kind, mid in (("inhibition", "log_ic50"), ("stimulation", "log_ec50")):
        for asym, suffix in ((False, "4pl"), (True, "5pl")):
            coords = (mid, "n_h", "g") if asym else (mid, "n_h")
            fams[f"{kind}_{suffix}"] = _Family(
                coords,
                ("zero_dose", "full_effect"),
                _dose_trials(mid, kind, asym),
                {mid: 0.2, "n_h": 0.35, "g": 0.35},
                frozenset({"n_h", "g"}),
                single=_dose_single(mid, kind, asym),
                split=_dose_split,
                affine=_dose_ac,
                # the 5PL's asymmetry trades off against the steepness along a long valley
                rounds=20 if asym else 1,
                max_scale=16.0 if asym else 4.0,
            )
    fams["stimulation_3pl"] = _Family(
        ("log_ec50", "n_h"),
        ("full_effect",),
        _dose_trials("log_ec50", "three", False),
        {"log_ec50": 0.2, "n_h": 0.35},
        frozenset({"n_h"}),
        single=_dose_single("log_ec50", "three", False),
        split=_scale_split("full_effect"),
    )
    rate = {"k": 0.35}
    k = frozenset({"k"})
    lin = ("baseline", "amplitude")
    fams["exponential_decay"] = _Family(
        ("k",),
        lin,
        _decay_trials("decay"),
        rate,
        k,
        single=_decay_single,
        split=_level_split(*lin),
        affine=_level_ac(*lin),
    )
    fams["exponential_rise"] = _Family(
        ("k",),
        lin,
        _decay_trials("rise"),
        rate,
        k,
        single=_decay_single,
        split=_rise_split,
        affine=_rise_ac,
    )
    fams["exponential_growth"] = _Family(
        ("k",),
        ("y0",),
        _decay_trials("growth"),
        rate,
        k,
        single=_growth_single,
        split=_scale_split("y0"),
    )
    fams["biexponential_decay"] = _Family(
        ("k1", "k2"),
        ("baseline", "a1", "a2"),
        _biexp_trials,
        {"k1": 0.35, "k2": 0.35},
        frozenset({"k1", "k2"}),
        columns=_biexp_columns,
        finish=_finish_biexp,
    )
    vmax = _scale_split("Vmax")
    fams["michaelis_menten"] = _Family(
        ("Km",), ("Vmax",), _mm_trials, {"Km": 0.35}, frozenset({"Km"}), _mm_single, vmax
    )
    fams["substrate_inhibition"] = _Family(
        ("Km", "Ki"),
        ("Vmax",),
        _si_trials,
        {"Km": 0.5, "Ki": 0.5},
        frozenset({"Km", "Ki"}),
        _si_single,
        vmax,
    )
    fams["hill"] = _Family(
        ("K05", "n_h"),
        ("Vmax",),
        _hill_trials,
        {"K05": 0.4, "n_h": 0.35},
        frozenset({"K05", "n_h"}),
        _hill_single,
        vmax,
    )
    fams["logistic_growth"] = _Family(
        ("r", "xi"),
        ("K",),
        _logistic_trials,
        {"r": 0.3, "xi": 0.05},
        frozenset({"r"}),
        _logistic_single,
        _scale_split("K"),
        native=_logistic_native,
        allows_fixed=False,
    )
    fams["gompertz_growth"] = _Family(
        ("r", "beta"),
        ("K",),
        _gompertz_trials,
        {"r": 0.3, "beta": 0.3},
        frozenset({"r", "beta"}),
        _gompertz_single,
        _scale_split("K"),
        native=_gompertz_native,
        allows_fixed=False,
    )
    peak = ("baseline", "amplitude")
    fams["gaussian_peak"] = _Family(
        ("center", "sigma"),
        peak,
        _peak_trials("sigma", 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))),
        {"center": 0.03, "sigma": 0.3},
        frozenset({"sigma"}),
        _gauss_single,
        _level_split(*peak),
        _level_ac(*peak),
    )
    fams["lorentzian_peak"] = _Family(
        ("center", "hwhm"),
        peak,
        _peak_trials("hwhm", 0.5),
        {"center": 0.03, "hwhm": 0.3},
        frozenset({"hwhm"}),
        _lorentz_single,
        _level_split(*peak),
        _level_ac(*peak),
    )
    fams["boltzmann"] = _Family(
        ("x_half", "width"),
        ("low", "high"),
        _boltzmann_trials,
        {"x_half": 0.03, "width": 0.3},
        frozenset(),
        _boltzmann_single,
        _boltzmann_split,
        _boltzmann_ac,
        finish=_finish_boltzmann,
    )
    fams["power_law"] = _Family(
        ("b",), ("a",), _power_trials, {"b": 0.15}, frozenset(), _power_single, _scale_split("a")
    )
    fams["straight_line"] = _Family((), ("intercept", "slope"), _no_trials, {}, frozenset())
    for deg in range(1, 11):
        fams[f"polynomial_{deg}"] = _Family(
            (), tuple(f"c{j}" for j in range(deg + 1)), _no_trials, {}, frozenset()
        )
    return fams


_FAMILIES = _families()
# steps that are relative to the x range of the data rather than absolute
_X_RELATIVE = frozenset({"center", "x_half", "xi"})
_WIDTH_LIKE = frozenset({"width"})


def batched_rule_models() -> tuple[str, ...]:
    """Names of the catalog models (and polynomials) :func:`guided_starts` serves."""
    return tuple(_FAMILIES)


# ============================================================================ the search
def _solve(S: FloatArray, bvec: FloatArray) -> tuple[FloatArray, BoolArray]:
    """Solve the stacked symmetric systems ``S c = b`` (K <= 3 explicitly, else by numpy)."""
    K = S.shape[-1]
    with np.errstate(all="ignore"):
        d = np.sqrt(np.einsum("...ii->...i", S))
        d = np.where(d > 0, d, 1.0)
        Ss = S / (d[..., :, None] * d[..., None, :])
        bs = bvec / d
        if K == 1:
            det = Ss[..., 0, 0]
            c = bs / Ss[..., 0, :]
        elif K == 2:
            a, bb, e = Ss[..., 0, 0], Ss[..., 0, 1], Ss[..., 1, 1]
            det = a * e - bb * bb
            c = np.stack([e * bs[..., 0] - bb * bs[..., 1], a * bs[..., 1] - bb * bs[..., 0]], -1)
            c = c / det[..., None]
        elif K == 3:
            cof = np.empty_like(Ss)
            for i, j in product(range(3), range(3)):
                r = [k for k in range(3) if k != i]
                q = [k for k in range(3) if k != j]
                minor = (
                    Ss[..., r[0], q[0]] * Ss[..., r[1], q[1]]
                    - Ss[..., r[0], q[1]] * Ss[..., r[1], q[0]]
                )
                cof[..., i, j] = minor if (i + j) % 2 == 0 else -minor
            det = np.einsum("...j,...j->...", Ss[..., 0, :], cof[..., 0, :])
            c = np.einsum("...ji,...j->...i", cof, bs) / det[..., None]
        else:
            det = np.linalg.det(Ss)
            good = np.abs(det) > 1e-12
            safe = np.where(good[..., None, None], Ss, np.eye(K))
            c = np.linalg.solve(safe, bs[..., None])[..., 0]
        c = c / d
    ok = (np.abs(det) > 1e-12) & np.all(np.isfinite(c), axis=-1)
    return c, ok


@dataclass
class _Search:
    """One family's search over a block: trial values in, best values and residuals out."""

    fam: _Family
    b: _Block
    free_linear: tuple[str, ...]
    fixed_linear: tuple[str, ...]
    coords: tuple[str, ...]  # searched coordinates that are not fixed
    fast: bool  # the linear solve by sums (one shape, no fixed or bounded level)

    def _clip(self, name: str, v: FloatArray) -> FloatArray:
        """Trial values inside their bounds (parameters of the model only)."""
        m = self.b.model
        if name not in m.param_names:
            if name in self.fam.logged:
                return np.where(v > 0, v, 1e-12)
            return v
        j = self.b.col(name)
        p = m.param(name)
        lo, hi = self.b.lo[:, j : j + 1], self.b.hi[:, j : j + 1]
        if np.all((lo < v) & (v <= hi)):
            return v  # the usual case: every trial inside (and positive where it must be)
        v = np.where(np.isfinite(v), v, p.value)
        if p.lower >= 0 and (p.positive or p.log_scale):
            v = np.where(v > 0, v, np.maximum(lo, max(abs(p.value) * 1e-6, 1e-12)))
        return move_inside_batch(lo, hi, v)

    def evaluate(self, trial: Values, share: Share | None = None) -> tuple[Values, FloatArray]:
        """Every trial's values (linear ones solved) and its residual sum of squares."""
        b = self.b
        g = b.g
        C = max([t.shape[1] for t in trial.values()], default=1)
        v3: Values = {}
        for n in self.fam.coords:
            if n in b.held:
                v3[n] = np.broadcast_to(b.held[n][:, None, None], (g, C, 1))
            else:
                v3[n] = self._clip(n, np.broadcast_to(trial[n], (g, C)))[:, :, None]
        out: Values = {n: v[:, :, 0] for n, v in v3.items()}
        if self.fast and self.fam.single is not None:
            return self._moments(self.fam.single(b, v3, self._share(share, C)), out)
        f0, cols = self._curve_parts(v3, C)
        r = b.y[:, None, :] - (f0 if f0 is not None else 0.0)
        for n in self.fixed_linear:
            r = r - b.held[n][:, None, None] * cols[n]
        w = b.w[:, None, :]
        K = len(self.free_linear)
        ok = np.ones((g, C), dtype=bool)
        with np.errstate(all="ignore"):
            if K:
                A = [cols[n] * w for n in self.free_linear]
                S = np.empty((g, C, K, K))
                bv = np.empty((g, C, K))
                for i in range(K):
                    bv[..., i] = np.einsum("gcn,gcn->gc", A[i], r)
                    for j in range(i, K):
                        S[..., i, j] = S[..., j, i] = np.einsum(
                            "gcn,gcn->gc", A[i], cols[self.free_linear[j]]
                        )
                c, ok = _solve(S, bv)
                c = self._bound_linear(c, S, bv)
                for i, n in enumerate(self.free_linear):
                    out[n] = c[..., i]
                    r = r - c[..., i, None] * cols[n]
            ssr = np.einsum("gcn,gcn->gc", r * w, r)
        ssr = np.where(ok & np.isfinite(ssr), ssr, np.inf)
        return out, ssr

    def _moments(self, s: FloatArray, out: Values) -> tuple[Values, FloatArray]:
        """The linear solve of ``c*s`` or ``a + c*s`` from three sums per trial."""
        b = self.b
        g, n = b.x.shape
        s = np.broadcast_to(s, (g, s.shape[1], n))
        with np.errstate(all="ignore"):
            # einsum over the short point axis: several times faster than sum(axis=2) here
            if self.fam.affine is None:
                if b.padded:
                    sss = np.einsum("gcn,gcn,gn->gc", s, s, b.w)
                else:
                    sss = np.einsum("gcn,gcn->gc", s, s)
                ssy = np.einsum("gcn,gn->gc", s, b.y)  # padding has y = 0
                name = self.free_linear[0]
                j = b.col(name)
                c = np.clip(ssy / sss, b.lo[:, j : j + 1], b.hi[:, j : j + 1])
                ssr = b.syy[:, None] - 2.0 * c * ssy + c * c * sss
                out[name] = c
                good = sss > 0
            else:
                # s less its value at the first point: a trial curve nearly flat over the data
                # (its feature far off) keeps its small variance, which the sums of s itself
                # lose to cancellation (then rounding, not the data, would rank such trials)
                s0 = s[:, :, :1]
                d = s - s0
                s0 = s0[:, :, 0]
                if b.padded:
                    sdd = np.einsum("gcn,gcn,gn->gc", d, d, b.w)
                else:
                    sdd = np.einsum("gcn,gcn->gc", d, d)
                sd = np.einsum("gcn,gn->gc", d, b.w)
                ssy = np.einsum("gcn,gn->gc", d, b.yc)  # centred y, 0 in the padding
                n = b.n[:, None]
                var = sdd - sd * sd / n
                c = ssy / var
                a = b.ybar[:, None] - c * (sd / n + s0)
                ssr = b.syyc[:, None] - c * ssy
                out.update(self.fam.affine(a, c))
                sss = sdd + s0 * (2.0 * sd + n * s0)  # the sum of s**2
                good = var > 1e-12 * sss
        ssr = np.where(good & np.isfinite(ssr), np.maximum(ssr, 0.0), np.inf)
        return out, ssr

    def _bound_linear(self, c: FloatArray, S: FloatArray, bv: FloatArray) -> FloatArray:
        """Linear parameters that leave their bounds go onto them; the others are re-solved."""
        idx = [self.b.col(n) for n in self.free_linear if n in self.b.model.param_names]
        if len(idx) != len(self.free_linear):
            return c
        lo = self.b.lo[:, None, idx]
        hi = self.b.hi[:, None, idx]
        if not (np.any(np.isfinite(lo)) or np.any(np.isfinite(hi))):
            return c
        out = np.clip(c, lo, hi)
        bad = (out != c) & np.isfinite(c)
        if not np.any(bad):
            return c
        K = c.shape[-1]
        if K > 1:
            # one round of an active-set step: clamp the violators, solve the others given them
            keep = ~bad
            S2 = np.where(keep[..., :, None] & keep[..., None, :], S, np.eye(K)[None, None] * 1.0)
            b2 = np.where(
                keep,
                bv
                - np.einsum("...ij,...j->...i", S * ~keep[..., None, :], np.where(bad, out, 0.0)),
                out,
            )
            # rows of the clamped ones are identity: their solution is their clamped value
            S2 = np.where(bad[..., :, None], np.eye(K)[None, None], S2)
            c2, _ = _solve(S2, b2)
            out = np.clip(np.where(np.isfinite(c2), c2, out), lo, hi)
        return out

    def _curve_parts(self, v3: Values, C: int) -> tuple[FloatArray | None, Values]:
        b = self.b
        if self.fam.columns is not None:
            return None, self.fam.columns(b, v3)
        if self.fam.single is not None and self.fam.split is not None:
            return None, self.fam.split(self.fam.single(b, v3, {}))
        m = b.model
        g, n = b.x.shape
        x3 = b.x[:, None, :]
        args: dict[str, FloatArray] = {}
        for name in m.param_names:
            if name in v3:
                args[name] = v3[name]
            elif name in self.fam.linear:
                args[name] = np.zeros((1, 1, 1))
            else:
                args[name] = np.broadcast_to(b.held[name][:, None, None], (g, 1, 1))

        def run(a: Mapping[str, FloatArray]) -> FloatArray:
            with np.errstate(all="ignore"):
                out = m.func(x3, *(a[k] for k in m.param_names))
            return np.broadcast_to(np.asarray(out, dtype=float), (g, C, n))

        f0 = run(args)
        cols: Values = {}
        for name in self.fam.linear:
            a = dict(args)
            a[name] = np.ones((1, 1, 1))
            cols[name] = run(a) - f0
        return f0, cols

    def _share(self, share: Share | None, C: int) -> Share:
        out = dict(share or {})
        for n in self.fam.coords:
            if n in self.b.held:
                out[n] = np.zeros(C, dtype=np.intp)  # a fixed value: one for every trial
        return out

    def best(self, trial: Values, share: Share | None = None) -> tuple[Values, FloatArray]:
        vals, ssr = self.evaluate(trial, share)
        i = np.argmin(ssr, axis=1)
        r = np.arange(self.b.g)
        return {n: v[r, i] for n, v in vals.items()}, ssr[r, i]

    def refine(self, vals: Values, ssr: FloatArray, rounds: int) -> tuple[Values, FloatArray]:
        """A pattern search around each group's best trial, ``3**d - 1`` trials a round.

        A group whose best point moves keeps its step (and may double it, up to four times the
        first), so a start can walk off a coarse grid; one whose best point stays halves it.
        """
        if not self.coords:
            return vals, ssr
        span = self.b.span[:, None]
        offs = np.array([o for o in product((-1.0, 0.0, 1.0), repeat=len(self.coords)) if any(o)])
        scale = np.ones((self.b.g, 1))
        for _ in range(rounds):
            trial: Values = {}
            for j, n in enumerate(self.coords):
                step = self.fam.steps[n] * scale * offs[None, :, j]
                c = vals[n][:, None]
                if n in self.fam.logged or n in _WIDTH_LIKE:
                    trial[n] = c * np.exp(step)
                elif n in _X_RELATIVE:
                    trial[n] = c + step * span
                else:
                    trial[n] = c + step
            # trials with the same offset in a coordinate share its value
            share = {n: (offs[:, j] + 1).astype(np.intp) for j, n in enumerate(self.coords)}
            nv, ns = self.best(trial, share)
            better = ns < ssr
            vals = {n: np.where(better, nv[n], vals[n]) for n in vals}
            ssr = np.where(better, ns, ssr)
            scale = np.where(
                better[:, None], np.minimum(2.0 * scale, self.fam.max_scale), 0.5 * scale
            )
        return vals, ssr


def _run_family(fam: _Family, b: _Block) -> tuple[Values, FloatArray]:
    coords = tuple(n for n in fam.coords if n not in b.held)
    fixed_linear = tuple(n for n in fam.linear if n in b.held)
    fast = fam.single is not None and not fixed_linear
    if fast and fam.affine is not None:
        j = [b.col(n) for n in fam.linear]
        fast = bool(np.all(np.isinf(b.lo[:, j])) and np.all(np.isinf(b.hi[:, j])))
    search = _Search(
        fam,
        b,
        tuple(n for n in fam.linear if n not in b.held),
        fixed_linear,
        coords,
        fast,
    )
    if coords:
        trial = fam.trials(b)
        first = {n: trial[n] for n in coords}
        vals, ssr = search.best(first, _repeats(first))
    else:
        vals, ssr = search.best({})
    vals, ssr = search.refine(vals, ssr, fam.rounds)
    if fam.native is not None:
        vals = fam.native(vals)
    if fam.finish is not None:
        # The search leaves out what the user fixed; the tidy-up reads every parameter.
        whole = {**{n: b.held[n] for n in b.held if n not in vals}, **vals}
        tidy = fam.finish(whole)
        # a tidy-up that would change a value the user fixed is not the same curve; skip it
        same = np.ones(b.g, dtype=bool)
        for n in b.held:
            if n in tidy:
                same &= tidy[n] == whole[n]
        vals = {n: np.where(same, tidy[n], vals[n]) for n in vals}
    return vals, ssr


def _repeats(trial: Values) -> dict[str, NDArray[np.intp]]:
    """Which distinct column each trial takes, for the coordinates whose trial columns repeat.

    Columns equal in every group count as one, numbered in order of first appearance: the seeds
    often share a value with each other or with a grid line, and a shared value's costly factor
    is then computed once.
    """
    out: dict[str, NDArray[np.intp]] = {}
    for n, v in trial.items():
        reps: list[int] = []  # the first column of each distinct value
        idx = np.empty(v.shape[1], dtype=np.intp)
        for j in range(v.shape[1]):
            for u, k in enumerate(reps):
                if np.array_equal(v[:, j], v[:, k]):
                    idx[j] = u
                    break
            else:
                idx[j] = len(reps)
                reps.append(j)
        if len(reps) < v.shape[1]:
            out[n] = idx
    return out


# ============================================================================ entry point
def _checked(
    model: Model,
    x: ArrayLike,
    y: ArrayLike,
    mask: ArrayLike,
) -> tuple[FloatArray, FloatArray, BoolArray]:
    try:
        xa = np.asarray(x, dtype=float)
        ya = np.asarray(y, dtype=float)
        ma = np.asarray(mask)
    except (TypeError, ValueError) as exc:
        raise DataError(f"guided_starts: x, y and mask must be numeric arrays ({exc}).") from exc
    if xa.ndim != 2 or ya.shape != xa.shape or ma.shape != xa.shape:
        raise DataError(
            "guided_starts: x, y and mask must be 2-d arrays of one shape (groups, points); "
            f"got {xa.shape}, {ya.shape} and {ma.shape}."
        )
    if ma.dtype != np.bool_:
        raise DataError(
            f"guided_starts: mask must be boolean (True = a real point), got {ma.dtype}."
        )
    return xa, ya, ma


def _checked_bounds(model: Model, bound: ArrayLike | None, g: int, which: str) -> FloatArray:
    P = len(model.params)
    default = np.array([p.lower if which == "lower" else p.upper for p in model.params])
    if bound is None:
        out: FloatArray = np.broadcast_to(default, (g, P)).copy()
        return out
    b = np.asarray(bound, dtype=float)
    try:
        out = np.broadcast_to(b, (g, P)).copy()
        return out
    except ValueError:
        raise ParameterError(
            f"guided_starts: {which} must have shape ({P},) or ({g}, {P}) (one value per "
            f"parameter {list(model.param_names)}); got shape {b.shape}."
        ) from None


def _checked_fixed(model: Model, fixed: Mapping[str, float | FloatArray] | None, g: int) -> Values:
    out: Values = {}
    for name, value in (fixed or {}).items():
        if name not in model.param_names:
            raise ParameterError(unknown_name_message(name, model.param_names, repr(model.name)))
        try:
            v = np.broadcast_to(np.asarray(value, dtype=float), (g,)).astype(float)
        except ValueError:
            raise ParameterError(
                f"guided_starts: fixed value of {name!r} must be a number or one per group "
                f"({g}); got shape {np.shape(value)}."
            ) from None
        if not np.all(np.isfinite(v)):
            raise ParameterError(f"Fixed value of {name!r} must be finite, got {value!r}.")
        out[name] = v
    return out


def _usable(model: Model, x: FloatArray, y: FloatArray, m: BoolArray) -> BoolArray:
    """Groups the batched rule can serve: finite real points, two distinct x, in the domain."""
    with np.errstate(all="ignore"):
        finite = np.all(~m | (np.isfinite(x) & np.isfinite(y)), axis=1)
        big = np.where(m, x, -np.inf).max(axis=1)
        small = np.where(m, x, np.inf).min(axis=1)
    ok = finite & (np.sum(m, axis=1) >= 2) & (big > small)
    if model.domain == "x>0":
        ok &= small > 0
    elif model.domain == "x>=0":
        ok &= small >= 0
    out: BoolArray = ok
    return out


def guided_starts(
    model: Model,
    x: FloatArray,
    y: FloatArray,
    mask: NDArray[np.bool_],
    fixed: Mapping[str, float | FloatArray] | None = None,
    lower: FloatArray | None = None,
    upper: FloatArray | None = None,
    *,
    kernel: Literal["auto", "compiled", "numpy"] = "auto",
) -> tuple[FloatArray, NDArray[np.bool_]]:
    """Data-driven starting values for every group of a padded batch, in array operations.

    Parameters
    ----------
    model : Model
        A catalog model (:func:`batched_rule_models` lists those served); any other model gives
        ``ok`` False for every group.
    x, y : ndarray, shape (G, N)
        The groups' points, padded to a common length N; padded entries may hold anything
        (NaN included): they never change a start.
    mask : ndarray of bool, shape (G, N)
        True for a real point.
    fixed : mapping, optional
        Parameters held at given values (a number, or one per group); the others are estimated
        given them.
    lower, upper : ndarray, shape (P,) or (G, P), optional
        Bounds in ``model.param_names`` order (default: the model's); starts are moved inside
        them by the rule of :func:`curvewright.parameters.move_inside`.
    kernel : {"auto", "compiled", "numpy"}, optional
        ``"compiled"`` runs the dose-response models' search (4PL, 5PL, 3PL) one group at a
        time in code compiled by numba (:mod:`curvewright.start_kernel`), several times faster;
        ``"numpy"`` runs every model in numpy array operations over blocks of groups (the
        reference: for the 4PL and 3PL both give the same starts to rounding; the 5PL's long
        search parts ways in a few groups in a hundred, to starts of similar residuals);
        ``"auto"`` (default) takes the compiled search for the 4PL and 3PL where numba is
        installed and the case is one it serves (no fixed level, unbounded levels but the
        3PL's), else numpy.

    Returns
    -------
    starts : ndarray, shape (G, P)
        In ``model.param_names`` order; fixed parameters hold their fixed value. Where ``ok`` is
        False the row holds the model's defaults (moved inside the bounds).
    ok : ndarray of bool, shape (G,)
        False where the batched rule gives no start: too few or non-finite points, fewer than
        two distinct x, x outside the model's domain, a degenerate solve, a level or amplitude
        over a million times the data's size (a feature far outside the data), a growth model
        with fixed parameters, or a model without a batched rule. Use
        :func:`curvewright.start.guided_start` for those groups.

    Raises
    ------
    DataError
        x, y and mask are not 2-d arrays of one shape, or the mask is not boolean.
    ParameterError
        ``fixed`` names an unknown parameter or gives a non-finite value; bounds of the wrong
        shape, NaN, or a lower bound above the upper one; ``kernel="compiled"`` for a case
        the compiled search does not serve, or without numba.
    """
    if kernel not in ("auto", "compiled", "numpy"):
        raise ParameterError(
            f"guided_starts: kernel must be 'auto', 'compiled' or 'numpy', got {kernel!r}."
        )
    xa, ya, ma = _checked(model, x, y, mask)
    G, N = xa.shape
    names = model.param_names
    P = len(names)
    held = _checked_fixed(model, fixed, G)
    lo = _checked_bounds(model, lower, G, "lower")
    hi = _checked_bounds(model, upper, G, "upper")
    crossed = ~(lo <= hi)  # NaN bounds count as crossed
    if np.any(crossed):
        g, j = (int(i[0]) for i in np.nonzero(crossed))
        raise ParameterError(
            f"guided_starts: bounds of {names[j]!r} in group {g} are [{lo[g, j]}, {hi[g, j]}]; "
            "the lower bound must not exceed the upper one (and neither may be NaN)."
        )
    starts = np.broadcast_to(np.array([p.value for p in model.params]), (G, P)).copy()
    ok = np.zeros(G, dtype=bool)
    fam = _family_of(model)
    if fam is not None and (fam.allows_fixed or not held) and G and N:
        compiled = None
        if kernel == "compiled" or (kernel == "auto" and model.name not in _DOSE_ASK):
            compiled = _compiled_dose(model, fam, xa, ya, ma, lo, hi, held)
            if compiled is None and kernel == "compiled":
                raise ParameterError(
                    f"guided_starts: kernel='compiled' serves the dose-response models "
                    f"{sorted(_DOSE_KERNEL)} with numba installed, no fixed level and (but for "
                    f"the 3PL) unbounded levels; use kernel='auto' for {model.name!r} here."
                )
        if compiled is not None:
            vals_c, ssr_c, size_c, usable = compiled
            good = usable & np.isfinite(ssr_c)
            for n in fam.linear:
                good &= np.abs(vals_c[:, names.index(n)]) <= size_c
            good &= np.all(np.isfinite(vals_c), axis=1)
            starts[usable] = vals_c[usable]
            ok = good
            use = np.zeros(0, dtype=np.intp)
        else:
            use = np.nonzero(_usable(model, xa, ya, ma))[0]
        C = _trial_count(fam, N)
        step = max(1, _BLOCK // max(1, C * N))
        for s in range(0, use.size, step):
            rows = use[s : s + step]
            bh = {k: v[rows] for k, v in held.items()}
            blk = _prepare(model, xa[rows], ya[rows], ma[rows], lo[rows], hi[rows], bh)
            vals, ssr = _run_family(fam, blk)
            good = np.isfinite(ssr)
            # a level or amplitude a million times the data's size: the best trial put the
            # curve's feature far outside the data; better the per-curve rule than that start
            size = 1e6 * (np.max(np.abs(blk.y), axis=1) + np.sqrt(blk.syyc / blk.n) + 1e-300)
            for n in fam.linear:
                if n in vals:
                    good &= np.abs(vals[n]) <= size
            for j, n in enumerate(names):
                v = vals.get(n)
                if v is not None:
                    starts[rows, j] = v
                    good &= np.isfinite(v)
            ok[rows] = good
    for n, v in held.items():
        starts[:, names.index(n)] = v
    starts = _inside(model, starts, lo, hi)
    for n, v in held.items():
        starts[:, names.index(n)] = v
    ok &= np.all(np.isfinite(starts), axis=1)
    return starts, ok


#: The dose-response models the compiled search serves: (curve kind, asymmetry); kind 0 is
#: ``(x/c50)**n_h`` with both levels, 1 the 3PL's ``(c50/x)**n_h`` with one.
_DOSE_KERNEL: dict[str, tuple[int, bool]] = {
    "inhibition_4pl": (0, False),
    "stimulation_4pl": (0, False),
    "inhibition_5pl": (0, True),
    "stimulation_5pl": (0, True),
    "stimulation_3pl": (1, False),
}


#: Served on request only: the 5PL's 20 refinement rounds walk flat valleys (its asymmetry
#: against the steepness), where trials differ by rounding, so the compiled and the numpy
#: search part ways in a few groups in a hundred (measured on tests/start_batch_cases.py data),
#: to starts of similar residuals. The 4PL and 3PL agree but for rounding.
_DOSE_ASK = frozenset({"inhibition_5pl", "stimulation_5pl"})


@functools.cache
def _start_kernel() -> ModuleType | None:
    """:mod:`curvewright.start_kernel`, or None without numba."""
    try:
        from . import start_kernel
    except ImportError:
        return None
    return start_kernel


def _compiled_dose(
    model: Model,
    fam: _Family,
    x: FloatArray,
    y: FloatArray,
    m: BoolArray,
    lo: FloatArray,
    hi: FloatArray,
    held: Values,
) -> tuple[FloatArray, FloatArray, FloatArray, BoolArray] | None:
    """The compiled search's values (P columns), ssr, level bound and usable groups.

    None where it does not serve the case (the numpy path then runs): numba missing, another
    model, a fixed level, or (but for the 3PL, whose one level is clipped) a bounded level,
    where the numpy path solves the levels with their bounds.
    """
    spec = _DOSE_KERNEL.get(model.name)
    mod = _start_kernel() if spec is not None else None
    if spec is None or mod is None or model.domain != "x>=0":
        return None
    if any(n in held for n in fam.linear):
        return None
    names = model.param_names
    kind, asym = spec
    jl = [names.index(n) for n in fam.linear]
    if fam.affine is not None and not (np.all(np.isinf(lo[:, jl])) and np.all(np.isinf(hi[:, jl]))):
        return None
    coords = fam.coords
    free = [n for n in coords if n not in held]
    offs = np.array([o for o in product((-1.0, 0.0, 1.0), repeat=len(free)) if any(o)])
    offs = offs.reshape(-1, len(free)) if free else np.zeros((0, 1))
    cols = [names.index(n) for n in coords] + ([] if asym else [-1])
    cols += [-1, jl[0]] if len(jl) == 1 else jl
    G, P = lo.shape
    hv = np.zeros((G, P))
    is_held = np.zeros(P, dtype=bool)
    for n, v in held.items():
        hv[:, names.index(n)] = v
        is_held[names.index(n)] = True
    params = model.params
    try:
        out: tuple[FloatArray, FloatArray, FloatArray, BoolArray] = mod.dose_starts(
            np.ascontiguousarray(x),
            np.ascontiguousarray(y),
            np.ascontiguousarray(m),
            lo,
            hi,
            hv,
            is_held,
            kind,
            asym,
            np.array(cols, dtype=np.intp),
            (
                np.array([p.value for p in params], dtype=float),
                np.array([p.lower for p in params], dtype=float),
                np.array([p.positive or p.log_scale for p in params], dtype=bool),
            ),
            (_DOSE_MID_GRID, _DOSE_G_GRID),
            (
                np.array([fam.steps[n] for n in free], dtype=float),
                offs,
                fam.rounds,
                fam.max_scale,
                _FLAT,
            ),
        )
    except Exception:  # numba's compile errors come at the first call, of many types
        return None
    return out


def _inside(model: Model, starts: FloatArray, lo: FloatArray, hi: FloatArray) -> FloatArray:
    """Starts inside their bounds (as start._clip_into_bounds: non-finite -> default, etc.)."""
    out = starts.copy()
    for j, p in enumerate(model.params):
        v = np.where(np.isfinite(out[:, j]), out[:, j], p.value)
        if p.lower >= 0 and (p.positive or p.log_scale):
            v = np.where(v > 0, v, np.maximum(p.lower, max(abs(p.value) * 1e-6, 1e-12)))
        out[:, j] = move_inside_batch(lo[:, j], hi[:, j], v)
    res: FloatArray = out
    return res


def _trial_count(fam: _Family, n: int) -> int:
    # the trials of one refinement round (the first round's grid may be larger), to size blocks
    return max(int(3 ** len(fam.coords)) - 1, 1)


@functools.lru_cache(maxsize=256)
def _is_builtin(name: str, formula: str | None) -> bool:
    # the check parses the formula (about a millisecond): once per model, not once per call
    return find_builtin(name, formula) is not None


def _family_of(model: Model) -> _Family | None:
    fam = _FAMILIES.get(model.name)
    if fam is None or model.expr is None:
        return None
    if not _is_builtin(model.name, model.formula):
        return None  # a user's model that only borrows a catalog name
    wanted = fam.linear if fam.native is not None else (*fam.linear, *fam.coords)
    if any(n not in model.param_names for n in wanted):
        return None
    return fam
