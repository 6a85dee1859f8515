"""Compiled batched starts of the dose-response family: the whole guided-start search per group.

One job: for the sigmoid dose-response models (4PL, 5PL, 3PL), run the batched start of
:mod:`curvewright.start_batch` (the data's seeds, the trial grid, the linear solve by three
sums per trial, the choice of the best trial and the refinement rounds) one group at a time in
one loop compiled by numba, with no ``(groups, trials, points)`` arrays. The numpy path of
:mod:`curvewright.start_batch` is the reference and the fallback: the same rules in the same
order of operations, but sums are taken one point after another (numpy adds in pairs and in
vector lanes), so values agree to rounding, not bit for bit.

This module imports numba; :mod:`curvewright.start_batch` imports it only when numba is
installed. ``cache=True`` keeps the machine code beside this file in ``__pycache__`` (or, where
the package folder is read-only, in numba's own cache folder; ``NUMBA_CACHE_DIR`` moves it),
so only the first process ever compiles it (seconds); later ones load it.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, TypeVar, cast

import numpy as np
from numba import njit
from numpy.typing import NDArray

__all__ = ["dose_starts"]

_LN10 = math.log(10.0)
#: Which dose curve: the 4PL and 5PL's ``(x/c50)**n_h`` or the 3PL's ``(c50/x)**n_h``.
FOUR, THREE = 0, 1

_F = TypeVar("_F", bound=Callable[..., Any])


def _jit(f: _F) -> _F:
    """numba's ``njit``, with the function's own type for the checker (numba has none)."""
    return cast(_F, njit(cache=True, error_model="numpy", nogil=True)(f))


@_jit
def _inside(v: float, lo: float, hi: float, pval: float, plow: float, ppos: bool) -> float:
    # start_batch._Search._clip then move_inside_batch, on one value
    if not math.isfinite(v):
        v = pval
    if plow >= 0.0 and ppos and not v > 0.0:
        v = max(lo, max(abs(pval) * 1e-6, 1e-12))
    if lo <= v <= hi:
        return v
    below = v < lo
    if math.isfinite(lo) and math.isfinite(hi):
        step = 0.01 * (hi - lo)
        return lo + step if below else hi - step
    if below:
        return lo + max(abs(lo) * 0.1, 1e-3)
    return hi - max(abs(hi) * 0.1, 1e-3)


#: Powers of x kept per group, for the last distinct values of n_h (a refinement round's
#: trials take three, one of them its centre's).
_SLOTS = 8


@_jit
def _powers(sn: float, nd: int, lnxc: NDArray[np.float64], seen: NDArray[np.float64],
            pw: NDArray[np.float64], state: NDArray[np.intp]) -> int:  # fmt: skip
    """The slot of ``pw`` holding ``exp(sn*lnxc)`` at the distinct x, computed if not seen."""
    for q in range(state[0]):
        if seen[q] == sn:
            return q
    q = int(state[1])
    state[1] = (q + 1) % _SLOTS
    state[0] = min(state[0] + 1, _SLOTS)
    seen[q] = sn
    for j in range(nd):
        pw[q, j] = math.exp(sn * lnxc[j])
    return q


@_jit
def _trial(
    mid: float,
    nh: float,
    gg: float,
    nd: int,
    lnxc: NDArray[np.float64],
    cnt: NDArray[np.float64],
    ysum: NDArray[np.float64],
    ycsum: NDArray[np.float64],
    seen: NDArray[np.float64],
    pw: NDArray[np.float64],
    state: NDArray[np.intp],
    ref: float,
    kind: int,
    asym: bool,
    n: float,
    ybar: float,
    syy: float,
    syyc: float,
    clo: float,
    chi: float,
    lin: NDArray[np.float64],
) -> float:
    """The residual sum of squares of one trial (inf if degenerate); its levels into ``lin``.

    The curve is evaluated once per distinct x: each point's sums are its x's, times the
    number of replicates (``cnt``), and against their sums of y (``ysum``, ``ycsum``).
    """
    sn = -nh if kind == THREE else nh
    e = sn * (ref - _LN10 * mid)
    fac = math.exp(min(max(e, -700.0), 700.0))
    shape = 2.0 ** (1.0 / gg) - 1.0 if asym else 1.0  # as the model's formula computes it
    q = _powers(sn, nd, lnxc, seen, pw, state)
    if kind == THREE:
        sss = 0.0
        ssy = 0.0
        for j in range(nd):
            s = 1.0 / (pw[q, j] * fac + 1.0)
            sss += cnt[j] * s * s
            ssy += s * ysum[j]
        c = ssy / sss
        if c < clo:
            c = clo
        elif c > chi:
            c = chi
        ssr = syy - 2.0 * c * ssy + c * c * sss
        lin[0] = c
        good = sss > 0.0
    else:
        # sums of s less its value at the first x (start_batch._Search._moments)
        s0 = 0.0
        sdd = 0.0
        sd = 0.0
        ssy = 0.0
        for j in range(nd):
            h = pw[q, j] * fac
            s = math.exp(math.log1p(h * shape) * -gg) if asym else 1.0 / (h + 1.0)
            if j == 0:
                s0 = s
            dj = s - s0
            cd = cnt[j] * dj
            sdd += cd * dj
            sd += cd
            ssy += dj * ycsum[j]
        var = sdd - sd * sd / n
        c = ssy / var
        a = ybar - c * (sd / n + s0)
        ssr = syyc - c * ssy
        lin[0] = a + c  # zero_dose
        lin[1] = a  # full_effect
        sss = sdd + s0 * (2.0 * sd + n * s0)
        good = var > 1e-12 * sss
    if good and math.isfinite(ssr):
        return max(ssr, 0.0)
    return math.inf


@_jit
def _dose_starts(
    X: NDArray[np.float64],
    Y: NDArray[np.float64],
    M: NDArray[np.bool_],
    LO: NDArray[np.float64],
    HI: NDArray[np.float64],
    HV: NDArray[np.float64],
    held: NDArray[np.bool_],
    kind: int,
    asym: bool,
    cols: NDArray[np.intp],
    pval: NDArray[np.float64],
    plow: NDArray[np.float64],
    ppos: NDArray[np.bool_],
    frac: NDArray[np.float64],
    gaxis: NDArray[np.float64],
    steps: NDArray[np.float64],
    offs: NDArray[np.float64],
    rounds: int,
    max_scale: float,
    flat: float,
    OUT: NDArray[np.float64],
    SSR: NDArray[np.float64],
    SIZE: NDArray[np.float64],
    USABLE: NDArray[np.bool_],
) -> None:
    N = X.shape[1]
    D = 3 if asym else 2  # coordinates: mid, n_h (, g), in cols[0:D]
    ilin0, ilin1 = cols[3], cols[4]  # zero_dose, full_effect (3PL: -1, full_effect)
    order = np.empty(N, dtype=np.intp)
    xs = np.empty(N)
    ys = np.empty(N)
    pid = np.empty(N, dtype=np.intp)
    selt = np.empty(N)
    selz = np.empty(N)
    lnxc = np.empty(N)
    ux = np.empty(N)
    my = np.empty(N)
    tl = np.empty(N)
    cnt = np.empty(N)
    ysum = np.empty(N)
    ycsum = np.empty(N)
    seen = np.empty(_SLOTS)
    pw = np.empty((_SLOTS, N))
    state = np.zeros(2, dtype=np.intp)
    v = np.empty(3)
    rbest = np.empty(3)
    rlin = np.empty(2)
    best = np.empty(3)
    lin = np.empty(2)
    blin = np.empty(2)
    free = np.empty(3, dtype=np.intp)
    grow = np.ones((3, 3))
    move = np.zeros((3, 3))
    nfree = 0
    for d in range(D):
        if not held[cols[d]]:
            free[nfree] = d
            nfree += 1
    for gi in range(X.shape[0]):
        # the real points, sorted by x (stable, as numpy's argsort of the padded row); a group
        # is served as by start_batch._usable: finite points, two distinct x, x >= 0
        k = 0
        fine = True
        xlo = math.inf
        xhi = -math.inf
        for j in range(N):
            if M[gi, j]:
                order[k] = j
                k += 1
                xj = X[gi, j]
                fine = fine and math.isfinite(xj) and math.isfinite(Y[gi, j])
                xlo = min(xlo, xj)
                xhi = max(xhi, xj)
        USABLE[gi] = fine and k >= 2 and xhi > xlo and xlo >= 0.0
        if not USABLE[gi]:
            continue
        if k > 32:
            # a long row out of order: numba's stable sort (an insertion sort is quadratic)
            for j in range(k):
                xs[j] = X[gi, order[j]]
            srt = np.argsort(xs[:k], kind="mergesort")
            for j in range(k):
                pid[j] = order[srt[j]]
            for j in range(k):
                order[j] = pid[j]
        else:
            for a in range(1, k):
                o = order[a]
                key = X[gi, o]
                b = a - 1
                while b >= 0 and X[gi, order[b]] > key:
                    order[b + 1] = order[b]
                    b -= 1
                order[b + 1] = o
        n = float(k)
        sy = 0.0
        syy = 0.0
        ymax = 0.0
        for j in range(k):
            xs[j] = X[gi, order[j]]
            yv = Y[gi, order[j]]
            ys[j] = yv
            sy += yv
            syy += yv * yv
            ymax = max(ymax, abs(yv))
        ybar = sy / n
        # the distinct x (start_batch._prepare): replicates, their sums and means, log10 x
        nd = 0
        j = 0
        syyc = 0.0
        while j < k:
            x0 = xs[j]
            tot = 0.0
            totc = 0.0
            c1 = 0.0
            while j < k and xs[j] == x0:
                tot += ys[j]
                yv = ys[j] - ybar
                totc += yv
                syyc += yv * yv
                c1 += 1.0
                pid[j] = nd
                j += 1
            ux[nd] = x0
            cnt[nd] = c1
            ysum[nd] = tot
            ycsum[nd] = totc
            my[nd] = tot / c1
            tl[nd] = math.log10(x0) if x0 > 0.0 else 0.0
            nd += 1
        # end levels (start_batch._end_levels)
        ke = max(1, int(np.rint(0.15 * nd)))
        low = 0.0
        high = 0.0
        for j in range(ke):
            low += my[j]
            high += my[nd - ke + j]
        low /= ke
        high /= ke
        if kind == THREE:
            low = 0.0
        # the logit line over the points with x > 0 (start_batch._logit, _ols)
        kl = 0
        st = 0.0
        stt = 0.0
        sz = 0.0
        for j in range(k):
            f = (ys[j] - low) / (high - low)
            if xs[j] > 0.0 and f > 0.05 and f < 0.95:
                tj = tl[pid[j]]
                zj = math.log10(f / (1.0 - f))
                selt[kl] = tj
                selz[kl] = zj
                kl += 1
                st += tj
                stt += tj * tj
                sz += zj
        kk = max(kl, 1)
        tm = st / kk
        zm = sz / kk
        sxx = 0.0
        sxz = 0.0
        for j in range(kl):
            dt = selt[j] - tm
            sxx += dt * dt
            sxz += dt * (selz[j] - zm)
        slope = sxz / (sxx if sxx > 0.0 else 1.0)
        icpt = zm - slope * tm
        lok = kl >= 2 and sxx > 0.0 and sxx > flat * stt
        lok = lok and math.isfinite(icpt) and math.isfinite(slope)
        mid0 = -icpt / slope
        lok = lok and slope != 0.0 and math.isfinite(mid0) and high != low
        # where the means first cross halfway (start_batch._half_crossing); x ascending, so the
        # positive x are a tail of the distinct ones
        half = 0.5 * (low + high)
        p0 = 0
        while p0 < nd and not ux[p0] > 0.0:
            p0 += 1
        has = False
        cross = 0.0
        for j in range(p0, nd - 1):
            d0 = my[j] - half
            d1 = my[j + 1] - half
            if np.sign(d0) * np.sign(d1) <= 0.0:
                t0 = tl[j]
                t1 = tl[j + 1]
                cross = t0 if d1 == d0 else t0 + (t1 - t0) * d0 / (d0 - d1)
                has = True
                break
        if not has and p0 < nd:
            ku = nd - p0
            cross = 0.5 * (tl[p0 + (ku - 1) // 2] + tl[p0 + ku // 2])
        if lok:
            m0 = mid0
            nh0 = min(max(abs(slope), 0.2), 5.0)
        else:
            m0 = cross
            nh0 = 1.0
        # the log10 range of the positive x (start_batch._log_range_clipped)
        if p0 < nd:
            lmin = tl[p0]
            lmax = tl[nd - 1]
        else:
            lmin, lmax = -3.0, 3.0
        if not lmax > lmin:
            lmin, lmax = lmin - 1.0, lmax + 1.0
        # ln x centred on the mean ln x of the positive x (start_batch._Block.lnx_centred)
        sl = 0.0
        npos = 0.0
        for j in range(nd):
            lnxc[j] = math.log(ux[j])
            if ux[j] > 0.0:
                sl += cnt[j] * lnxc[j]
                npos += cnt[j]
        ref = sl / npos if npos > 0.0 else math.nan
        if not math.isfinite(ref):
            ref = 0.0
        for j in range(nd):
            lnxc[j] = lnxc[j] - ref
        state[0] = 0  # no powers of this group's x yet
        state[1] = 0
        c_lo = LO[gi, ilin1]
        c_hi = HI[gi, ilin1]
        # the first trials: two seeds, then the grid (start_batch._dose_trials)
        ng = gaxis.shape[0] if asym else 1
        ntr = 2 + frac.shape[0] * ng
        bssr = math.inf
        for t in range(ntr):
            if t < 2:
                v[0] = m0 if t == 0 else cross
                v[1] = nh0
                v[2] = 1.0
            else:
                q = t - 2
                v[0] = lmin + (lmax - lmin) * frac[q // ng]
                v[1] = 1.0
                v[2] = gaxis[q % ng] if asym else 1.0
            for d in range(D):
                c = cols[d]
                if held[c]:
                    v[d] = HV[gi, c]
                else:
                    v[d] = _inside(v[d], LO[gi, c], HI[gi, c], pval[c], plow[c], ppos[c])
            s = _trial(
                v[0], v[1], v[2], nd, lnxc, cnt, ysum, ycsum, seen, pw, state, ref, kind,
                asym, n, ybar, syy, syyc, c_lo, c_hi, lin,
            )  # fmt: skip
            if t == 0 or s < bssr:
                bssr = s
                for d in range(3):
                    best[d] = v[d]
                blin[0] = lin[0]
                blin[1] = lin[1]
        # refinement rounds (start_batch._Search.refine) over the coordinates not held: every
        # trial of a round moves from its centre, the best so far
        scale = 1.0
        if nfree > 0:
            for _ in range(rounds):
                rssr = math.inf
                for q in range(nfree):
                    # exp(step) of the three offsets: the same doubles as per trial
                    sq = steps[q] * scale
                    grow[q, 0] = math.exp(-sq)
                    grow[q, 2] = math.exp(sq)
                    move[q, 0] = -sq
                    move[q, 2] = sq
                for t in range(offs.shape[0]):
                    for d in range(3):
                        v[d] = best[d]
                    for q in range(nfree):
                        d = free[q]
                        oi = int(offs[t, q]) + 1
                        if oi == 1:
                            pass  # offset 0: c + 0.0 and c*exp(0.0) are c
                        elif d == 0:
                            v[d] = best[d] + move[q, oi]
                        else:
                            v[d] = best[d] * grow[q, oi]
                        c = cols[d]
                        v[d] = _inside(v[d], LO[gi, c], HI[gi, c], pval[c], plow[c], ppos[c])
                    s = _trial(
                        v[0], v[1], v[2], nd, lnxc, cnt, ysum, ycsum, seen, pw, state, ref,
                        kind, asym, n, ybar, syy, syyc, c_lo, c_hi, lin,
                    )  # fmt: skip
                    if t == 0 or s < rssr:
                        rssr = s
                        for d in range(3):
                            rbest[d] = v[d]
                        rlin[0] = lin[0]
                        rlin[1] = lin[1]
                if rssr < bssr:
                    bssr = rssr
                    for d in range(3):
                        best[d] = rbest[d]
                    blin[0] = rlin[0]
                    blin[1] = rlin[1]
                    scale = min(2.0 * scale, max_scale)
                else:
                    scale = 0.5 * scale
        for d in range(D):
            OUT[gi, cols[d]] = best[d]
        if ilin0 >= 0:
            OUT[gi, ilin0] = blin[0]
            OUT[gi, ilin1] = blin[1]
        else:
            OUT[gi, ilin1] = blin[0]
        SSR[gi] = bssr
        SIZE[gi] = 1e6 * (ymax + math.sqrt(syyc / n) + 1e-300)


def dose_starts(
    X: NDArray[np.float64],
    Y: NDArray[np.float64],
    M: NDArray[np.bool_],
    LO: NDArray[np.float64],
    HI: NDArray[np.float64],
    HV: NDArray[np.float64],
    held: NDArray[np.bool_],
    kind: int,
    asym: bool,
    cols: NDArray[np.intp],
    param: tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]],
    grid: tuple[NDArray[np.float64], NDArray[np.float64]],
    search: tuple[NDArray[np.float64], NDArray[np.float64], int, float, float],
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]]:
    """Starts of every group of a padded batch (``X, Y, M`` of shape (G, N), C-contiguous).

    ``LO, HI`` are the bounds and ``HV`` the fixed values (G, P), ``held`` which parameters are
    fixed; ``cols`` the columns of the mid-point, ``n_h``, ``g`` (-1 without), ``zero_dose``
    (-1 for the 3PL) and ``full_effect``; ``param`` each parameter's default value, lower
    bound and whether it must be positive; ``grid`` the first grid's fractions of the log x
    range and its ``g`` values; ``search`` the steps of the coordinates not held, the
    refinement offsets among them, the rounds, the largest step scale and the share of the sum
    of t**2 below which a line's spread of t is rounding (start_batch._FLAT).

    Returns
    -------
    values, ssr, size, usable : ndarray
        Per group: the parameter values (P columns), the residual sum of squares of the chosen
        trial (inf if none was usable), a million times the data's size (the bound start_batch
        puts on a level), and whether the group could be searched at all (finite points, two
        distinct x, x >= 0); values, ssr and size are NaN where it could not.
    """
    G, P = HV.shape
    out = np.full((G, P), np.nan)
    ssr = np.full(G, np.nan)
    size = np.full(G, np.nan)
    usable = np.zeros(G, dtype=np.bool_)
    pval, plow, ppos = param
    frac, gaxis = grid
    steps, offs, rounds, max_scale, flat = search
    _dose_starts(
        X, Y, M, LO, HI, HV, held, kind, asym, cols, pval, plow, ppos, frac, gaxis, steps, offs,
        rounds, max_scale, flat, out, ssr, size, usable,
    )  # fmt: skip
    return out, ssr, size, usable
