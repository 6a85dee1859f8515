"""The batch engine's compiled kernel: the per-group Levenberg-Marquardt loop in machine code.

Its one job is to run, for one formula model, the same algorithm as the numpy path of
:func:`curvewright.fitting.batch_engine.solve_batch` one group at a time in code compiled by
numba. The model's value and analytic derivatives are generated as scalar code from the
expression tree (the straight-line statements :mod:`curvewright.expr` generates for numpy, run
on floats, with the statements that do not depend on x hoisted out of the loop over points);
the solver loop (normal equations, Cholesky solve, bounded step, convergence tests, restart on
stale scaling) is a fixed template. Both are written as one small module per model into
:func:`cache_dir` and imported from there, so numba's on-disk cache serves later processes
(compiling takes seconds; loading, a fraction of one). numba is optional at run time:
:func:`kernel_for` returns None when it is missing or refuses the model, and the caller keeps
the numpy path.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import importlib.util
import os
import re
import sys
import tempfile
import weakref
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from ..expr import _codegen_many
from ..models import Model

__all__ = [
    "STATUS",
    "available",
    "jacobian_kernel_for",
    "kernel_for",
    "normals_kernel_for",
    "parallel_kernel_for",
    "serial",
    "symmetric_inverse_for",
    "threads",
]

#: The kernel's outcome codes per group, as the reasons the numpy path gives.
STATUS = ("", "iteration limit", "non-finite model values", "singular system")


@functools.cache
def _numba() -> Any:
    try:
        import numba
    except ImportError:
        return None
    return numba


def available() -> bool:
    """True when numba can be imported."""
    return _numba() is not None


_TOKEN = re.compile(r"\b(_t\d+|x)\b")
_SQUARE = re.compile(r"^_pow\((\w+), 2\.0\)$")
_MINUS_ONE = re.compile(r"^_sub\((\w+), 1\.0\)$")
_POWER = re.compile(r"^_pow\((\w+), (\w+)\)$")
_LOG = re.compile(r"^(_t\d+) = _fn_log\((\w+)\)$")
_NAME = re.compile(r"^[A-Za-z_]\w*$")


def _classify(
    temp: str,
    line: str,
    lines: list[tuple[str, str]],
    varying: set[str],
    point_lines: list[str],
    fixed_lines: list[str],
) -> None:
    """Add a statement: to the per-point loop if it depends on x, else before the loop."""
    lines.append((temp, line))
    if any(tok in varying for tok in _TOKEN.findall(line.split(" = ", 1)[1])):
        varying.add(temp)
        point_lines.append(line)
    else:
        fixed_lines.append(line)


def _sources(model: Model) -> str:
    """Scalar code for the model's value and derivatives, from its expression tree.

    Two functions: ``_point(x, _cw_th, _cw_out)`` at one point (``_cw_out[0]`` the value,
    ``_cw_out[1 + j]`` d/d parameter j), and ``_points(_cw_xs, _cw_m, _cw_th, _cw_out)`` at
    every real point of a group into rows of ``_cw_out``, with the statements that do not
    depend on ``x`` (``10**log_ic50``, ``log(10)``) computed once before the loop. A square
    ``_pow(a, 2.0)`` is written ``a * a`` (the same correctly rounded double).
    """
    assert model.expr is not None
    names = model.param_names
    trees = (model.expr.tree, *(model.expr.derivative(n).tree for n in names))
    body, results = _codegen_many(trees)
    lines: list[tuple[str, str]] = []
    varying: set[str] = {"x"}
    fixed_lines: list[str] = []
    point_lines: list[str] = []
    minus_one: dict[str, str] = {}  # temp -> b, for temp = b - 1
    powers: dict[tuple[str, str], str] = {}  # (a, b) -> temp, for temp = a**b
    # temp = log(a) where a**b also occurs (a power's derivative in b): log(a) is computed
    # once, before the power, which then is exp(b * log(a)) for a finite a > 0.
    logs = {m.group(2): m.group(1) for m in map(_LOG.match, body) if m is not None}
    early: set[str] = set()
    for b in body:
        temp, code = b.split(" = ", 1)
        if temp in early:
            continue
        sq = _SQUARE.match(code)
        if sq:
            code = f"_mul({sq.group(1)}, {sq.group(1)})"
        sub = _MINUS_ONE.match(code)
        if sub:
            minus_one[temp] = sub.group(1)
        pw = _POWER.match(code)
        if pw:
            base, expo = pw.group(1), pw.group(2)
            known = powers.get((base, minus_one.get(expo, "")))
            if known is not None:
                # a**(b - 1) as a**b / a when a**b is already known (a power's derivative):
                # one transcendental call fewer per point; at a = 0 the power itself.
                code = f"(_div({known}, {base}) if {base} != 0.0 else {code})"
            else:
                powers[(base, expo)] = temp
                lg = logs.get(base)
                if lg is not None and _NAME.match(expo):
                    # one transcendental call fewer per point (pow costs about a log and an
                    # exp); within a few ulp of pow, and pow itself at 0, < 0 and inf.
                    early.add(lg)
                    _classify(lg, f"{lg} = _fn_log({base})", lines, varying, point_lines,
                              fixed_lines)  # fmt: skip
                    code = f"(_fn_exp(_mul({expo}, {lg})) if 0.0 < {base} < math.inf else {code})"
        _classify(temp, f"{temp} = {code}", lines, varying, point_lines, fixed_lines)
    unpack = [f"{n} = _cw_th[{j}]" for j, n in enumerate(names)]
    src = ["def _point(x, _cw_th, _cw_out):"]
    src += [f"    {u}" for u in unpack]
    src += [f"    {line}" for _, line in lines]
    src += [f"    _cw_out[{k}] = {r}" for k, r in enumerate(results)]
    src += ["", "", "def _points(_cw_xs, _cw_m, _cw_th, _cw_out):"]
    src += [f"    {u}" for u in unpack]
    src += [f"    {line}" for line in fixed_lines]
    src += [
        "    for _cw_i in range(_cw_xs.shape[0]):",
        "        if not _cw_m[_cw_i]:",
        "            continue",
    ]
    src += ["        x = _cw_xs[_cw_i]"]
    src += [f"        {line}" for line in point_lines]
    src += [f"        _cw_out[_cw_i, {k}] = {r}" for k, r in enumerate(results)]
    return "\n".join(src)


_HEADER = """\
# Generated by curvewright.fitting.batch_kernel for one model; safe to delete (it is rebuilt).
import math

import numpy as np
from numba import njit, prange

_add, _sub, _mul, _div = np.add, np.subtract, np.multiply, np.true_divide
_pow, _neg = np.power, np.negative
{functions}
_jit = njit(cache=True, error_model="numpy")
BLOCK = 128
"""


def _module_source(model: Model) -> str:
    from ..expr import FUNCTIONS

    functions = "\n".join(f"_fn_{k} = np.{v.__name__}" for k, v in FUNCTIONS.items())
    points = _sources(model).replace("def _point", "@_jit\ndef _point")
    return "\n".join([_HEADER.format(functions=functions), points, "", _TEMPLATE])


def cache_dir() -> Path:
    """Where generated kernels (and numba's cache of their machine code) are kept.

    ``$CURVEWRIGHT_CACHE`` if set, else ``~/.cache/curvewright/kernels``: numba caches compiled
    code beside a source file, so each model's kernel is written there once, and later
    processes load its machine code instead of compiling it again.
    """
    root = os.environ.get("CURVEWRIGHT_CACHE")
    base = Path(root) if root else Path.home() / ".cache" / "curvewright"
    return base / "kernels"


@functools.lru_cache(maxsize=64)
def _load(source: str) -> Any:
    digest = hashlib.sha256(source.encode()).hexdigest()[:20]
    name = f"cw_kernel_{digest}"
    try:
        folder = cache_dir()
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{name}.py"
        if not path.exists() or path.read_text(encoding="utf-8") != source:
            tmp = path.with_suffix(f".{os.getpid()}.tmp")
            tmp.write_text(source, encoding="utf-8")
            tmp.replace(path)  # atomic: another process may be loading the same kernel
    except OSError:
        # No writable cache: compile in memory (numba then compiles at every process start).
        folder = Path(tempfile.mkdtemp(prefix="curvewright-kernels-"))
        path = folder / f"{name}.py"
        path.write_text(source, encoding="utf-8")
    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:  # pragma: no cover - a .py file always has one
        raise ImportError(name)
    module = importlib.util.module_from_spec(spec)
    # numba's cache finds a function's globals through its module's entry in sys.modules
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


def kernel_for(model: Model) -> Callable[..., None] | None:
    """The compiled solver for ``model``, or None when numba is missing or refuses the model.

    The returned function is called as ``run(X, Y, W, M, FREE, TH, LO, HI, maxit, ftol, xtol,
    gtol, lambda0, accept, lambda_max, back, snap, stale, max_restarts, SSR, EVALS, ITERS,
    STATUS)`` on C-contiguous
    arrays; it updates ``TH`` in place and fills the last four (see :data:`STATUS`). Compiling
    happens at the first call (numba is lazy), so a model it cannot compile fails there: the
    caller then falls back to numpy.
    """
    return _kernel(model, "loop")


def parallel_kernel_for(model: Model) -> Callable[..., None] | None:
    """The same solver spread over numba's threads, or None as :func:`kernel_for`.

    Called as :func:`kernel_for`'s function. The groups go in fixed blocks to the threads, and
    each is solved by the serial code: the answers are the serial kernel's, bit for bit, for
    any number of threads (``NUMBA_NUM_THREADS`` sets it). Worth it only for many groups:
    the caller decides (:func:`threads`). Compiling can fail where numba has no threading
    layer; the caller then keeps the serial kernel.
    """
    return _kernel(model, "loop_parallel")


def jacobian_kernel_for(model: Model) -> Callable[..., None] | None:
    """The compiled weighted Jacobian of every group, or None as :func:`kernel_for`.

    Called as ``run(X, Y, W, M, TH, LO, HI, JAC, R, SSR)`` on C-contiguous arrays (``JAC`` of
    shape ``(G, N, P)``): fills ``JAC`` with ``w * df/dp`` at the real points (0 elsewhere),
    patched where a derivative is not finite by the rule of the solver's evaluations, ``R``
    with the weighted residuals and ``SSR`` (inf where something is not finite).
    """
    return _kernel(model, "jacobians")


def normals_kernel_for(model: Model) -> Callable[..., None] | None:
    """The compiled normal matrices of every group, or None as :func:`kernel_for`.

    Called as ``run(X, Y, W, M, TH, LO, HI, FI, NORMS, MAT, OK, SUPPORT)`` on C-contiguous
    arrays: fills ``NORMS`` (G, p) with the norms of the weighted Jacobian's free columns
    ``FI``, ``MAT`` (G, p, p) with ``A'A`` of the column-scaled Jacobian ``A``, ``OK`` (G,)
    where all of it is finite and no free column is zero, and ``SUPPORT`` (G, p) with how many
    points carry each column (``numerics.column_support``). Nothing of shape (G, N, P) is
    made.
    """
    return _kernel(model, "normals")


def symmetric_inverse_for(model: Model) -> Callable[..., None] | None:
    """The compiled eigenvalues and inverse of small symmetric matrices, or None.

    Called as ``run(MAT, INV, LMIN, LMAX)``: per group, ``INV = MAT^-1`` from the cyclic
    Jacobi eigen-decomposition, and the smallest and largest eigenvalues.
    """
    return _kernel(model, "symmetric_inverse")


def threads() -> int:
    """How many threads numba would use for :func:`parallel_kernel_for` (1 without numba).

    1 in a process forked from another (``multiprocessing`` with fork): numba's OpenMP
    threading layer is not fork-safe, and a forked child that starts its threads aborts.
    """
    nb = _numba()
    return 1 if nb is None or _FORKED[0] else int(nb.get_num_threads())


_FORKED = [False]
if hasattr(os, "register_at_fork"):  # not on Windows, which does not fork
    os.register_at_fork(after_in_child=lambda: _FORKED.__setitem__(0, True))


# Each model's loaded kernel module, so that a batch's chunks do not generate its source again
# (milliseconds a call); kept only while the model lives.
_MODULES: weakref.WeakKeyDictionary[Model, Any] = weakref.WeakKeyDictionary()


@contextlib.contextmanager
def serial() -> Iterator[None]:
    """Within this block, in this thread, :func:`threads` is 1 (the kernel runs serially).

    For the Dask backend's tasks: the workers, sized to the cores, are the parallelism, and
    threads inside each would compete with the others. numba's thread count is per thread,
    so other threads keep theirs.
    """
    nb = _numba()
    old = None
    if nb is not None:
        try:
            old = nb.get_num_threads()
            nb.set_num_threads(1)
        except Exception:  # no threading layer: the kernel is serial anyway
            old = None
    try:
        yield
    finally:
        if old is not None:
            nb.set_num_threads(old)


def _kernel(model: Model, name: str) -> Callable[..., None] | None:
    if _numba() is None or model.expr is None:
        return None
    try:
        module = _MODULES.get(model)
        if module is None:
            module = _load(_module_source(model))
            _MODULES[model] = module
        loop: Callable[..., None] = getattr(module, name)
    except Exception:  # numba and the import system raise many types
        return None
    return loop


_TEMPLATE = """
@_jit
def evaluate(x, y, w, m, th, lo, hi, jac, r, vals, up, dn):
    # The model at the group's real points: weighted residuals r, weighted Jacobian jac;
    # a derivative that is not finite where the value is gets central differences (the
    # step rule of numerics.finite_difference_jacobian), else 0. Returns ssr (inf if bad).
    n = x.shape[0]
    p = th.shape[0]
    base = 2.220446049250313e-16 ** (1.0 / 3.0)
    _points(x, m, th, vals)
    ssr = 0.0
    ok = True
    for i in range(n):
        if not m[i]:
            r[i] = 0.0
            for j in range(p):
                jac[i, j] = 0.0
            continue
        f = vals[i, 0]
        bad = False
        for j in range(p):
            if not math.isfinite(vals[i, j + 1]):
                bad = True
        if bad and math.isfinite(f):
            for j in range(p):
                t = th[j]
                h = base * max(max(abs(t), 1.0e-8 * (1.0 + abs(t))), 1e-300)
                cu = t + h <= hi[j]
                cd = t - h >= lo[j]
                fu = f
                fd = f
                width = 0.0
                if cu:
                    for k in range(p):
                        up[k] = th[k]
                    up[j] = t + h
                    _point(x[i], up[:p], up[p:])
                    fu = up[p]
                    width += h
                if cd:
                    for k in range(p):
                        dn[k] = th[k]
                    dn[j] = t - h
                    _point(x[i], dn[:p], dn[p:])
                    fd = dn[p]
                    width += h
                d = (fu - fd) / width if width > 0 else math.nan
                vals[i, j + 1] = d if math.isfinite(d) else 0.0
        ri = (y[i] - f) * w[i]
        r[i] = ri
        ssr += ri * ri
        for j in range(p):
            v = vals[i, j + 1] * w[i]
            jac[i, j] = v
            if not math.isfinite(v):
                ok = False
    if not math.isfinite(ssr) or not ok:
        return math.inf
    return ssr

@_jit
def jacobians(X, Y, W, M, TH, LO, HI, JAC, R, SSR):
    # Every group's weighted Jacobian, residuals and ssr at TH (the statistics' evaluation).
    N = X.shape[1]
    P = TH.shape[1]
    vals = np.zeros((N, P + 1))
    up = np.zeros(2 * P + 1)
    dn = np.zeros(2 * P + 1)
    for g in range(X.shape[0]):
        SSR[g] = evaluate(X[g], Y[g], W[g], M[g], TH[g], LO[g], HI[g], JAC[g], R[g], vals, up, dn)

@_jit
def normals(X, Y, W, M, TH, LO, HI, FI, NORMS, MAT, OK, SUPPORT):
    # The statistics' normal matrices without a (G, N, P) Jacobian: per group, the weighted
    # Jacobian at TH (evaluate's patching), the norms of its free columns FI, and A'A of the
    # column-scaled A in MAT; OK where every entry is finite and no free column is 0.
    # SUPPORT: how many points carry each column, (sum J**2)**2 / sum J**4 of the column
    # scaled by its largest entry (numerics.column_support), 0 for a zero column.
    G = X.shape[0]
    N = X.shape[1]
    P = TH.shape[1]
    p = FI.shape[0]
    vals = np.zeros((N, P + 1))
    up = np.zeros(2 * P + 1)
    dn = np.zeros(2 * P + 1)
    jac = np.zeros((N, P))
    r = np.zeros(N)
    for g in range(G):
        evaluate(X[g], Y[g], W[g], M[g], TH[g], LO[g], HI[g], jac, r, vals, up, dn)
        ok = True
        for a in range(p):
            s = 0.0
            big = 0.0
            finite = True
            for i in range(N):
                v = jac[i, FI[a]]
                if not math.isfinite(v):
                    finite = False
                    continue
                s += v * v
                if abs(v) > big:
                    big = abs(v)
            nrm = math.sqrt(s)
            NORMS[g, a] = nrm
            if not finite or not nrm > 0.0:
                ok = False
            s2 = 0.0
            s4 = 0.0
            if finite and big > 0.0:
                for i in range(N):
                    u = jac[i, FI[a]] / big
                    s2 += u * u
                    s4 += u * u * u * u
            # NaN (not judged) for a column that is not finite, as the single fit does
            SUPPORT[g, a] = (s2 * s2 / s4 if s4 > 0.0 else 0.0) if finite else math.nan
        OK[g] = ok
        if not ok:
            continue
        for a in range(p):
            for b in range(a + 1):
                s = 0.0
                for i in range(N):
                    s += (jac[i, FI[a]] / NORMS[g, a]) * (jac[i, FI[b]] / NORMS[g, b])
                MAT[g, a, b] = s
                MAT[g, b, a] = s

@_jit
def symmetric_inverse(MAT, INV, LMIN, LMAX):
    # Per group, the eigenvalues of the small symmetric MAT by cyclic Jacobi rotations
    # (accurate to about eps * the largest, as a library's symmetric eigensolver), and
    # INV = V diag(1 / lambda) V'. The smallest and largest eigenvalues go to LMIN, LMAX.
    G = MAT.shape[0]
    p = MAT.shape[1]
    a = np.empty((p, p))
    v = np.empty((p, p))
    for g in range(G):
        for i in range(p):
            for j in range(p):
                a[i, j] = MAT[g, i, j]
                v[i, j] = 1.0 if i == j else 0.0
        for _sweep in range(60):
            turned = False
            for i in range(p):
                for j in range(i + 1, p):
                    # an entry below eps of its diagonal's geometric mean changes no
                    # eigenvalue beyond rounding, even the smallest (relative accuracy)
                    if not abs(a[i, j]) > 2.220446049250313e-16 * math.sqrt(
                        abs(a[i, i] * a[j, j])
                    ):
                        continue
                    turned = True
                    theta = (a[j, j] - a[i, i]) / (2.0 * a[i, j])
                    t = 1.0 / (abs(theta) + math.sqrt(theta * theta + 1.0))
                    if theta < 0.0:
                        t = -t
                    c = 1.0 / math.sqrt(t * t + 1.0)
                    sn = t * c
                    for k in range(p):
                        aki = a[k, i]
                        akj = a[k, j]
                        a[k, i] = c * aki - sn * akj
                        a[k, j] = sn * aki + c * akj
                    for k in range(p):
                        aik = a[i, k]
                        ajk = a[j, k]
                        a[i, k] = c * aik - sn * ajk
                        a[j, k] = sn * aik + c * ajk
                    for k in range(p):
                        vki = v[k, i]
                        vkj = v[k, j]
                        v[k, i] = c * vki - sn * vkj
                        v[k, j] = sn * vki + c * vkj
                    a[i, j] = 0.0  # what the rotation was chosen to do, without its rounding
                    a[j, i] = 0.0
            if not turned:
                break
        lo = math.inf
        hi = -math.inf
        for i in range(p):
            lo = min(lo, a[i, i])
            hi = max(hi, a[i, i])
        LMIN[g] = lo
        LMAX[g] = hi
        for i in range(p):
            for j in range(i + 1):
                s = 0.0
                for k in range(p):
                    s += v[i, k] * v[j, k] / a[k, k]
                INV[g, i, j] = s
                INV[g, j, i] = s

@_jit
def cholesky_solve(mat, rhs, out, low):
    p = rhs.shape[0]
    for i in range(p):
        for j in range(i + 1):
            s = mat[i, j]
            for k in range(j):
                s -= low[i, k] * low[j, k]
            if i == j:
                if not (s > 0.0) or not math.isfinite(s):
                    return False
                low[i, i] = math.sqrt(s)
            else:
                low[i, j] = s / low[j, j]
    for i in range(p):
        s = rhs[i]
        for k in range(i):
            s -= low[i, k] * out[k]
        out[i] = s / low[i, i]
    for i in range(p - 1, -1, -1):
        s = out[i]
        for k in range(i + 1, p):
            s -= low[k, i] * out[k]
        out[i] = s / low[i, i]
    for i in range(p):
        if not math.isfinite(out[i]):
            return False
    return True

@_jit
def loop(
    X, Y, W, M, FREE, TH, LO, HI, maxit, ftol, xtol, gtol,
    lambda0, accept_ratio, lambda_max, back, snap, stale, max_restarts, SSR, EVALS, ITERS, STATUS,
):
    groups(
        0, X.shape[0], X, Y, W, M, FREE, TH, LO, HI, maxit, ftol, xtol, gtol, lambda0,
        accept_ratio, lambda_max, back, snap, stale, max_restarts, SSR, EVALS, ITERS, STATUS,
    )

@njit(cache=True, error_model="numpy", parallel=True)
def loop_parallel(
    X, Y, W, M, FREE, TH, LO, HI, maxit, ftol, xtol, gtol,
    lambda0, accept_ratio, lambda_max, back, snap, stale, max_restarts, SSR, EVALS, ITERS, STATUS,
):
    # Fixed blocks of groups over numba's threads: every group is solved by the same serial
    # code with its own workspace, so the answers are those of loop, whatever the threads.
    G = X.shape[0]
    nb = (G + BLOCK - 1) // BLOCK
    for b in prange(nb):
        groups(
            b * BLOCK, min(G, (b + 1) * BLOCK), X, Y, W, M, FREE, TH, LO, HI, maxit, ftol,
            xtol, gtol, lambda0, accept_ratio, lambda_max, back, snap, stale, max_restarts, SSR,
            EVALS, ITERS, STATUS,
        )

@_jit
def groups(
    g0, g1, X, Y, W, M, FREE, TH, LO, HI, maxit, ftol, xtol, gtol,
    lambda0, accept_ratio, lambda_max, back, snap, stale, max_restarts, SSR, EVALS, ITERS, STATUS,
):
    N = X.shape[1]
    P = TH.shape[1]
    jac = np.zeros((N, P))
    jac_t = np.zeros((N, P))
    r = np.zeros(N)
    r_t = np.zeros(N)
    vals = np.zeros((N, P + 1))
    up = np.zeros(2 * P + 1)
    dn = np.zeros(2 * P + 1)
    a = np.zeros((P, P))
    mat = np.zeros((P, P))
    low = np.zeros((P, P))
    gv = np.zeros(P)
    rhs = np.zeros(P)
    delta = np.zeros(P)
    trial = np.zeros(P)
    scale = np.zeros(P)
    frozen = np.zeros(P, dtype=np.bool_)
    for g in range(g0, g1):
        th = TH[g]
        lo = LO[g]
        hi = HI[g]
        ssr = evaluate(X[g], Y[g], W[g], M[g], th, lo, hi, jac, r, vals, up, dn)
        evals = 1
        iters = 0
        status = 1
        if not math.isfinite(ssr):
            SSR[g] = math.nan
            EVALS[g] = evals
            ITERS[g] = 0
            STATUS[g] = 2
            continue
        lam = lambda0
        nu = 2.0
        restarts = 0
        for j in range(P):
            scale[j] = 0.0
        for _ in range(maxit):
            iters += 1
            for i in range(P):
                s = 0.0
                for n in range(N):
                    s += jac[n, i] * r[n]
                gv[i] = s
                for j in range(i + 1):
                    s = 0.0
                    for n in range(N):
                        s += jac[n, i] * jac[n, j]
                    a[i, j] = s
                    a[j, i] = s
            cmax = 0.0
            for j in range(P):
                if a[j, j] > scale[j]:
                    scale[j] = a[j, j]
                frozen[j] = (
                    (not FREE[j])
                    or (th[j] <= lo[j] and gv[j] <= 0.0)
                    or (th[j] >= hi[j] and gv[j] >= 0.0)
                )
                if not frozen[j] and a[j, j] != 0.0:
                    c = abs(gv[j]) / math.sqrt(a[j, j] * ssr)
                    if not (c <= cmax):
                        cmax = c
            if cmax <= gtol or ssr == 0.0:
                status = 0
                break
            for i in range(P):
                for j in range(P):
                    mat[i, j] = 0.0 if (frozen[i] or frozen[j]) else a[i, j]
                if frozen[i]:
                    mat[i, i] = 1.0
                    rhs[i] = 0.0
                else:
                    mat[i, i] += lam * max(scale[i], 2.2250738585072014e-308)
                    rhs[i] = gv[i]
            solved = cholesky_solve(mat, rhs, delta, low)
            # the bounded step (batch_engine._bounded_step)
            amin = math.inf
            for j in range(P):
                d = delta[j] if solved else 0.0
                delta[j] = d
                frac = math.inf
                if d > 0:
                    frac = (hi[j] - th[j]) / d
                elif d < 0:
                    frac = (lo[j] - th[j]) / d
                if frac < 1.0 and frac <= snap:
                    frac = math.inf
                if frac < amin:
                    amin = frac
            alpha = min(1.0, back * amin)
            for j in range(P):
                d = delta[j]
                t = th[j] + alpha * d
                frac = math.inf
                if d > 0:
                    frac = (hi[j] - th[j]) / d
                elif d < 0:
                    frac = (lo[j] - th[j]) / d
                if frac < 1.0 and frac <= snap:
                    t = hi[j] if d > 0 else lo[j]
                t = min(max(t, lo[j]), hi[j])
                trial[j] = t if FREE[j] else th[j]
            pred = 0.0
            for i in range(P):
                si = trial[i] - th[i]
                pred += 2.0 * si * gv[i]
                for j in range(P):
                    pred -= si * a[i, j] * (trial[j] - th[j])
            ssr_t = evaluate(
                X[g], Y[g], W[g], M[g], trial, lo, hi, jac_t, r_t, vals, up, dn
            )
            evals += 1
            ok_t = math.isfinite(ssr_t)
            act = ssr - ssr_t
            rho = act / pred if pred > 0 else -1.0
            accepted = ok_t and solved and rho > accept_ratio
            xnorm = 0.0
            snorm = 0.0
            for j in range(P):
                dj = scale[j] if not frozen[j] else 1.0
                dj = max(dj, 2.2250738585072014e-308)
                xnorm += dj * th[j] * th[j]
                snorm += dj * (trial[j] - th[j]) ** 2
            small = math.sqrt(snorm) <= xtol * math.sqrt(xnorm)
            done_f = accepted and lam <= 1.0 and abs(act) <= ftol * ssr and pred <= ftol * ssr
            if accepted:
                t3 = 2.0 * rho - 1.0
                lam *= max(1.0 / 3.0, 1.0 - t3 * t3 * t3)
                nu = 2.0
                for j in range(P):
                    th[j] = trial[j]
                jac, jac_t = jac_t, jac
                r, r_t = r_t, r
                ssr = ssr_t
            else:
                lam *= nu
                nu *= 2.0
            done_x = small and (accepted or (ok_t and solved))
            if (done_f or done_x) and restarts < max_restarts:
                # stale scaling (batch_engine's _STALE): start again from here, fresh
                worst = 1.0
                for j in range(P):
                    if not frozen[j] and a[j, j] > 0 and scale[j] / a[j, j] > worst:
                        worst = scale[j] / a[j, j]
                if worst > stale:
                    restarts += 1
                    lam = lambda0
                    nu = 2.0
                    for j in range(P):
                        scale[j] = 0.0
                    continue
            if done_f or done_x:
                status = 0
                break
            if lam > lambda_max:
                status = 0 if (ok_t and solved) else (2 if not ok_t else 3)
                break
        SSR[g] = ssr
        EVALS[g] = evals
        ITERS[g] = iters
        STATUS[g] = status
"""
