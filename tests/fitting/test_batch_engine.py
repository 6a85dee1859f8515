"""Tests of the batch engine (fitting/batch_engine.py, fitting/batch_kernel.py).

Outside references: scipy.optimize.least_squares (MINPACK's Levenberg-Marquardt, ``method="lm"``,
and the trust-region reflective method with bounds, ``method="trf"``) run group by group on the
same data from the same start, and statsmodels WLS for the straight line and the polynomials
(standard errors of a linear model). The single fit ``curvewright.fit`` is the other yardstick:
the batch must reach its answer, since both claim to minimise the same sum of squares. Data are
seeded synthetic groups of every catalog model (the designs of tests/test_catalog.py, each group
with its own true values, noise, ragged subset of points and start). Iterative results are
compared to the accuracy the solvers promise: the sum of squares to 1e-6 relative (never worse
than the reference), values to 1e-6 relative plus 1e-4 standard errors where identified.
Nothing here is timed.
"""

from __future__ import annotations

import math
import warnings
import zlib
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
import scipy.optimize
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

import curvewright as cw
from curvewright.catalog import catalog
from curvewright.errors import ModelError
from curvewright.fitting.batch_engine import (
    BatchProblem,
    BatchSolution,
    BatchStatistics,
    batch_derived,
    batch_statistics,
    solve_batch,
)
from curvewright.fitting.batch_kernel import available
from curvewright.fitting.batch_run import _runaway
from curvewright.models import Model
from curvewright.start import location_parameters, x_span
from curvewright.thresholds import NOT_IDENTIFIED_RSE
from test_catalog import CASES, EXTRA_CASES, Case

FloatArray = np.ndarray[Any, np.dtype[np.float64]]
ALL_CASES: dict[str, tuple[str, Case]] = {k: (k, c) for k, c in CASES.items()}
ALL_CASES.update(EXTRA_CASES)
KERNELS = ["numpy", "compiled"]
# The compiled kernel costs numba a compile per model (seconds, cached on disk after the first
# run); the families it is checked on cover bounds, zero-dose controls and peaks.
COMPILED_FAMILIES = ("inhibition_4pl", "exponential_decay", "gaussian_peak", "michaelis_menten")


def _kernel_ok(kernel: str) -> None:
    if kernel == "compiled" and not available():  # pragma: no cover - numba is a dependency
        pytest.fail("numba is a dependency of curvewright and must be importable")


# ----------------------------------------------------------------------------- synthetic data
def _groups(
    label: str, g: int, *, weighted: bool, spread: float = 0.05, start_spread: float = 0.03
) -> tuple[Model, list[FloatArray], list[FloatArray], list[FloatArray] | None, FloatArray]:
    """``g`` seeded groups of one catalog case: ragged x, y, optional 1/sigma, and starts."""
    name, case = ALL_CASES[label]
    m = catalog()[name]
    rng = np.random.default_rng(zlib.crc32(label.encode()) + (1 if weighted else 0))
    names = m.param_names
    lo = np.array([p.lower for p in m.params])
    hi = np.array([p.upper for p in m.params])
    truth = np.array([case.truth[n] for n in names])
    tr = np.clip(truth * (1 + spread * rng.normal(size=(g, len(names)))), lo, hi)
    xs, ys, sws = [], [], []
    for t in tr:
        k = int(rng.integers(max(len(names) + 3, case.x.size - 5), case.x.size + 1))
        x = np.sort(rng.choice(case.x, size=k, replace=False))
        f = np.asarray(m.func(x, *t))
        sd = 0.03 * (np.ptp(np.asarray(m.func(case.x, *t))) + 1e-9)
        sig = sd * rng.uniform(0.5, 2.0, k) if weighted else np.full(k, sd)
        xs.append(x)
        ys.append(f + rng.normal(0.0, 1.0, k) * sig)
        sws.append(1.0 / sig)
    start = tr * (1 + start_spread * rng.normal(size=tr.shape))
    if "center" in names:
        # a peak's position is perturbed on the scale of its width, not of its value (3% of
        # 512 nm would put the start four half-widths away, outside every local basin)
        c = names.index("center")
        width = tr[:, names.index("sigma" if "sigma" in names else "hwhm")]
        start[:, c] = tr[:, c] + 0.3 * width * rng.normal(size=g)
    start = np.clip(start, lo, hi)
    return m, xs, ys, (sws if weighted else None), start


def _single(
    m: Model,
    x: FloatArray,
    y: FloatArray,
    sw: FloatArray | None,
    start: FloatArray,
    **kw: Any,
) -> cw.FitResult:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cw.fit(
            m,
            x,
            y,
            sigma=None if sw is None else 1.0 / sw,
            start=dict(zip(m.param_names, start.tolist(), strict=True)),
            **kw,
        )


def _identified(r: cw.FitResult) -> bool:
    bad = {"not_identified", "singular", "near_singular", "at_bound", "not_converged"}
    return r.success and not any(d.code in bad for d in r.diagnostics)


def _at_infinity(r: cw.FitResult) -> bool:
    """A parameter whose standard error is ten times its value: the sum of squares
    keeps falling as it runs off to infinity (e.g. a 5PL asymmetry), so there is no minimum
    at finite values for two solvers to agree on; each stops somewhere along that valley."""
    return any(
        d.code == "not_identified" and d.extra["stderr"] > 10.0 * abs(d.extra["value"])
        for d in r.diagnostics
    )


def _check_against_single(
    m: Model,
    sol: BatchSolution,
    i: int,
    r: cw.FitResult,
    stats: BatchStatistics | None = None,
) -> None:
    """The batch's group ``i`` reached the single fit's minimum (sum of squares, values)."""
    assert sol.settled[i], sol.reason[i]
    if r.code == "degenerate_stop":
        # The single fit found no finite minimum from this start, even after its global search
        # (e.g. a 5PL asymmetry running off to 1e14). The batch's statistics must see the same
        # degeneracy, which is what sends such a group to the per-group fit in fit_groups.
        if stats is not None:
            free = np.ones(len(m.param_names), dtype=bool)
            one = BatchProblem.from_groups(m, [r.x], [r.y], start=sol.values[i : i + 1])
            assert (
                stats.singular[i]
                or stats.near_singular[i]
                or bool(_runaway(one, sol.values[i : i + 1], stats.stderr[i : i + 1], free)[0])
            ), (i, r.message)
        return
    if _at_infinity(r):
        # Both must then say so: the batch's statistics flag the same parameter.
        if stats is not None:
            flagged = {d.params[0] for d in r.diagnostics if d.code == "not_identified"}
            ours = {n for j, n in enumerate(m.param_names) if stats.not_identified[i, j]}
            assert flagged & ours, (i, flagged, ours)
        return
    assert sol.ssr[i] <= r.ssr * (1 + 1e-6) + 1e-300, (i, sol.ssr[i], r.ssr)
    same_minimum = sol.ssr[i] >= r.ssr * (1 - 1e-6)  # else the batch found a lower one
    if same_minimum and _identified(r):
        ref = np.array([r.values[n] for n in m.param_names])
        se = np.array([r.stderr[n] for n in m.param_names])
        tol = 1e-6 * np.abs(ref) + 1e-4 * np.nan_to_num(se, nan=0.0)
        assert np.all(np.abs(sol.values[i] - ref) <= tol), (i, sol.values[i], ref)


# ----------------------------------------------------------------- the same answer as fit()
@pytest.mark.slow
@pytest.mark.parametrize("label", sorted(ALL_CASES))
def test_every_catalog_family_reaches_the_single_fits_minimum(label: str) -> None:
    # 80 groups per case x 25 cases = 2000 groups; half the cases weighted by 1/sigma.
    weighted = zlib.crc32(label.encode()) % 2 == 1
    m, xs, ys, sws, start = _groups(label, 80, weighted=weighted)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob, kernel="numpy")
    stats = batch_statistics(prob, sol)
    for i in range(prob.groups):
        r = _single(m, xs[i], ys[i], None if sws is None else sws[i], start[i])
        _check_against_single(m, sol, i, r, stats)


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("label", COMPILED_FAMILIES)
def test_both_kernels_reach_the_single_fits_minimum(label: str, kernel: str) -> None:
    _kernel_ok(kernel)
    m, xs, ys, sws, start = _groups(label, 60, weighted=True)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
    for i in range(prob.groups):
        _check_against_single(
            m, sol, i, _single(m, xs[i], ys[i], sws[i] if sws else None, start[i])
        )


@pytest.mark.parametrize("label", COMPILED_FAMILIES)
def test_the_compiled_kernel_runs_the_numpy_algorithm(label: str) -> None:
    # The same steps in two implementations: the same minimum to far below the tolerances
    # (rounding differs: scalar code against numpy's vectorised functions).
    _kernel_ok("compiled")
    m, xs, ys, sws, start = _groups(label, 200, weighted=False)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    a = solve_batch(prob, kernel="numpy")
    b = solve_batch(prob, kernel="compiled")
    assert np.array_equal(a.settled, b.settled)
    np.testing.assert_allclose(b.ssr, a.ssr, rtol=1e-9)
    st_ = batch_statistics(prob, a)
    se = np.nan_to_num(st_.stderr, nan=0.0)
    assert np.all(np.abs(b.values - a.values) <= 1e-7 * np.abs(a.values) + 1e-4 * se)


def test_the_threaded_kernel_gives_the_serial_kernels_answers_bit_for_bit(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The groups are independent; spreading them over threads must not change one bit of any
    # answer (reference: the serial compiled kernel, itself checked against numpy above).
    _kernel_ok("compiled")
    from curvewright.fitting import batch_engine

    m, xs, ys, sws, start = _groups("inhibition_4pl", 700, weighted=True)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    monkeypatch.setattr(batch_engine, "_PARALLEL_FROM", 10**9)
    serial = solve_batch(prob, kernel="compiled")
    ran: list[int] = []
    real = batch_engine.parallel_kernel_for

    def spy(model: Model) -> Callable[..., None] | None:
        run = real(model)
        assert run is not None, "numba has no threading layer here"

        def counted(*args: Any) -> None:
            run(*args)
            ran.append(args[0].shape[0])

        return counted

    monkeypatch.setattr(batch_engine, "parallel_kernel_for", spy)
    monkeypatch.setattr(batch_engine, "threads", lambda: 2)
    monkeypatch.setattr(batch_engine, "_PARALLEL_FROM", 1)
    threaded = solve_batch(prob, kernel="compiled")
    assert ran == [700]
    for field in ("values", "ssr", "evaluations", "iterations", "settled", "reason"):
        assert np.array_equal(
            np.asarray(getattr(serial, field)), np.asarray(getattr(threaded, field))
        ), field


@pytest.mark.parametrize("label", COMPILED_FAMILIES)
def test_statistics_from_the_compiled_jacobian_equal_the_numpy_ones(
    label: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    # The statistics evaluate the Jacobian, the normal matrices and their inverses (Jacobi
    # eigenvalues) in compiled code when numba serves the model; the numpy evaluation and
    # numpy.linalg (eigvalsh, inv, svd; checked against the single fit above) must agree,
    # zero-dose controls included (a derivative patched by central differences there).
    _kernel_ok("compiled")
    from curvewright.fitting import batch_engine

    m, xs, ys, sws, start = _groups(label, 300, weighted=True)
    if label == "inhibition_4pl":
        xs = [np.concatenate([[0.0], x]) for x in xs]
        ys = [np.concatenate([[y[0]], y]) for y in ys]
        assert sws is not None
        sws = [np.concatenate([[s[0]], s]) for s in sws]
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob)
    assert batch_engine.jacobian_kernel_for(m) is not None
    assert batch_engine._compiled_inverse(prob, sol.values, np.flatnonzero(prob.free))[0].any()
    compiled = batch_statistics(prob, sol)
    monkeypatch.setattr(batch_engine, "jacobian_kernel_for", lambda model: None)
    monkeypatch.setattr(batch_engine, "normals_kernel_for", lambda model: None)
    plain = batch_statistics(prob, sol)
    np.testing.assert_allclose(compiled.covariance, plain.covariance, rtol=1e-9, atol=0.0)
    assert np.isfinite(plain.stderr).sum() > 0.9 * plain.stderr.size
    np.testing.assert_allclose(compiled.stderr, plain.stderr, rtol=1e-9)
    np.testing.assert_allclose(compiled.condition, plain.condition, rtol=1e-9)
    for flag in ("singular", "near_singular", "high_correlation", "not_identified"):
        assert np.array_equal(getattr(compiled, flag), getattr(plain, flag)), flag


@pytest.mark.parametrize("label", ["inhibition_4pl", "exponential_rise", "boltzmann", "hill"])
def test_sum_of_squares_never_worse_than_scipy_minpack(label: str) -> None:
    # Reference: scipy.optimize.least_squares(method="lm") (MINPACK lmdif, its own differences)
    # from the same start; these cases' minima lie inside the bounds, so the unbounded
    # reference applies.
    m, xs, ys, sws, start = _groups(label, 60, weighted=False)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob)
    for i in range(prob.groups):
        x, y = xs[i], ys[i]

        def resid(p: FloatArray, x: FloatArray = x, y: FloatArray = y) -> FloatArray:
            return np.asarray(m.func(x, *p)) - y

        with np.errstate(all="ignore"):
            ref = scipy.optimize.least_squares(resid, start[i], method="lm", xtol=1e-15, ftol=1e-15)
        ssr_ref = float(ref.fun @ ref.fun)
        assert sol.settled[i]
        assert sol.ssr[i] <= ssr_ref * (1 + 1e-6), (i, sol.ssr[i], ssr_ref)


# ------------------------------------------------------------------- bounds, fixed, weights
@pytest.mark.parametrize("kernel", KERNELS)
def test_a_minimum_on_a_bound_is_reached_on_the_bound(kernel: str) -> None:
    # Exponential decay whose baseline is held above its true value: the constrained minimum
    # lies on that bound. References: scipy least_squares(method="trf") with the same bounds,
    # and the single fit (whose polish for this case is that bounded method).
    _kernel_ok(kernel)
    m, xs, ys, _, start = _groups("exponential_decay", 40, weighted=False)
    names = m.param_names
    ib = names.index("baseline")
    lower = np.array([p.lower for p in m.params])[None, :].repeat(40, axis=0)
    upper = np.array([p.upper for p in m.params])[None, :].repeat(40, axis=0)
    # three units above the start (itself within 3% of the true baseline): the data want it lower
    lower[:, ib] = start[:, ib] + 3.0
    start = start.copy()
    start[:, ib] = lower[:, ib] + 1.0
    prob = BatchProblem.from_groups(m, xs, ys, None, start=start, lower=lower, upper=upper)
    sol = solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
    stats = batch_statistics(prob, sol)
    for i in range(40):
        x, y = xs[i], ys[i]

        def resid(p: FloatArray, x: FloatArray = x, y: FloatArray = y) -> FloatArray:
            return np.asarray(m.func(x, *p)) - y

        ref = scipy.optimize.least_squares(
            resid, start[i], bounds=(lower[i], upper[i]), method="trf", xtol=1e-15, ftol=1e-15
        )
        assert sol.settled[i], sol.reason[i]
        assert sol.values[i, ib] == lower[i, ib]  # exactly on it
        assert stats.at_lower[i, ib] and stats.at_bound[i, ib]
        assert sol.ssr[i] <= float(ref.fun @ ref.fun) * (1 + 1e-6)
        bounds = {n: (float(lower[i, j]), float(upper[i, j])) for j, n in enumerate(names)}
        r = _single(m, x, y, None, start[i], bounds=bounds)
        assert sol.ssr[i] <= r.ssr * (1 + 1e-6)
        assert any(d.code == "at_bound" for d in r.diagnostics)


@pytest.mark.parametrize("kernel", KERNELS)
def test_fixed_parameters_are_held_and_match_the_single_fit(kernel: str) -> None:
    _kernel_ok(kernel)
    m, xs, ys, sws, start = _groups("inhibition_4pl", 50, weighted=True)
    names = m.param_names
    free = np.array([n != "n_h" for n in names])
    start = start.copy()
    start[:, names.index("n_h")] = 1.0
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start, free=free)
    sol = solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
    stats = batch_statistics(prob, sol)
    assert np.all(sol.values[:, names.index("n_h")] == 1.0)
    assert np.all(np.isnan(stats.stderr[:, names.index("n_h")]))
    assert np.all(np.isnan(stats.covariance[:, names.index("n_h"), :]))
    assert np.all(stats.dof == prob.n - 3)
    for i in range(50):
        assert sws is not None
        r = _single(m, xs[i], ys[i], sws[i], start[i], fixed=["n_h"])
        _check_against_single(m, sol, i, r)


# ------------------------------------------------------------------------------- statistics
@pytest.mark.parametrize("absolute_sigma", [False, True])
@pytest.mark.parametrize("label", ["inhibition_4pl", "exponential_decay", "michaelis_menten"])
def test_statistics_and_derived_match_the_single_fit(label: str, absolute_sigma: bool) -> None:
    m, xs, ys, sws, start = _groups(label, 30, weighted=True)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob)
    stats = batch_statistics(prob, sol, absolute_sigma=absolute_sigma)
    der = batch_derived(prob, sol, stats, level=0.9)
    names = m.param_names
    for i in range(prob.groups):
        assert sws is not None
        r = _single(m, xs[i], ys[i], sws[i], start[i], absolute_sigma=absolute_sigma)
        if not _identified(r):
            continue
        se = np.array([r.stderr[n] for n in names])
        np.testing.assert_allclose(stats.stderr[i], se, rtol=1e-6)
        np.testing.assert_allclose(
            stats.covariance[i], r.covariance, rtol=1e-6, atol=1e-12 * se.max() ** 2
        )
        assert stats.dof[i] == r.dof
        assert stats.condition[i] == pytest.approx(r.condition, rel=1e-5)
        ref = r.derived(0.9)
        for q, cols in der.items():
            for col in ("value", "stderr", "lower", "upper"):
                assert getattr(cols, col)[i] == pytest.approx(float(ref.loc[q, col]), rel=1e-6), (
                    q,
                    col,
                )
            if ref.loc[q, "in_data_range"] is not None:
                assert cols.in_data_range is not None
                assert bool(cols.in_data_range[i]) == bool(ref.loc[q, "in_data_range"])
        flagged = {d.params[0] for d in r.diagnostics if d.code == "not_identified"}
        assert {n for j, n in enumerate(names) if stats.not_identified[i, j]} == flagged


@pytest.mark.parametrize("label", ["straight_line", "polynomial_2", "polynomial_3"])
def test_linear_models_match_statsmodels_wls(label: str) -> None:
    # Reference: statsmodels WLS on the design [1, x, x**2, ...] with weights 1/sigma**2.
    m, xs, ys, sws, start = _groups(label, 40, weighted=True)
    assert sws is not None
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob)
    stats = batch_statistics(prob, sol)
    for i in range(prob.groups):
        k = len(m.param_names)
        design = np.vander(xs[i], k, increasing=True)
        ref = sm.WLS(ys[i], design, weights=sws[i] ** 2).fit()
        np.testing.assert_allclose(
            sol.values[i], ref.params, rtol=1e-6, atol=1e-9 * np.abs(ref.params).max()
        )
        np.testing.assert_allclose(stats.stderr[i], ref.bse, rtol=1e-6)
        assert sol.ssr[i] == pytest.approx(float(ref.ssr), rel=1e-9)


def test_flags_follow_the_thresholds() -> None:
    m, xs, ys, sws, start = _groups("inhibition_4pl", 40, weighted=False)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob)
    stats = batch_statistics(prob, sol)
    # Not identified: a standard error above its value, except for positions on the x axis
    # (here log_ic50), whose standard error is held against the group's span along x in
    # decades (start.location_parameters; the single fit's rule in assemble._diagnostics).
    # Levels in y's unit that may take either sign (the two plateaus) against the group's span
    # of y.
    expected = stats.stderr / np.abs(sol.values) > NOT_IDENTIFIED_RSE
    where = location_parameters(m)
    assert where == {"log_ic50": "log", "zero_dose": "y", "full_effect": "y"}
    for j, name in enumerate(m.param_names):
        for i in range(prob.groups):
            if where.get(name) == "log":
                span = x_span(xs[i], "log")
            elif where.get(name) == "y":
                span = float(np.ptp(ys[i]))
            else:
                continue
            expected[i, j] = stats.stderr[i, j] > NOT_IDENTIFIED_RSE * span
    assert np.array_equal(stats.not_identified, expected)
    for i in range(prob.groups):
        c = stats.covariance[i]
        d = np.sqrt(np.diag(c))
        corr = c / np.outer(d, d)
        off = np.abs(corr[~np.eye(len(d), dtype=bool)])
        assert stats.max_correlation[i] == pytest.approx(off.max(), rel=1e-12)


# --------------------------------------------------------------------- groups that fail alone
def test_a_bad_group_gets_a_reason_and_the_others_are_fitted() -> None:
    m = catalog()["power_law"]  # a * x**b: NaN at negative x for a fractional b
    rng = np.random.default_rng(5)
    x = np.geomspace(0.1, 100, 12)
    ys = [3.0 * x**0.7 + rng.normal(0, 0.1, x.size) for _ in range(4)]
    xs = [x, -x, x, x[:2]]
    ys[3] = ys[3][:2]
    start = np.array([[3.0, 0.7], [3.0, 0.7], [3.0, -0.5], [3.0, 0.7]])
    lower = np.array([[-np.inf, -np.inf]] * 3 + [[-np.inf, -np.inf]])
    upper = np.array([[np.inf, np.inf], [np.inf, np.inf], [np.inf, -1.0], [np.inf, np.inf]])
    prob = BatchProblem.from_groups(m, xs, ys, None, start=start, lower=lower, upper=upper)
    for kernel in KERNELS:
        sol = solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
        assert sol.settled.tolist() == [True, False, False, False]
        assert sol.reason[0] == ""
        assert sol.reason[1] == "non-finite model values at the start"
        assert sol.reason[2] == "start outside the bounds or not finite"
        assert sol.reason[3] == "no more points than free parameters"
        assert sol.values[0] == pytest.approx([3.0, 0.7], rel=0.05)


@pytest.mark.parametrize("kernel", KERNELS)
def test_iteration_limit_and_cancel_are_reasons(kernel: str) -> None:
    _kernel_ok(kernel)
    m, xs, ys, sws, start = _groups("inhibition_4pl", 20, weighted=False, start_spread=0.2)
    prob = BatchProblem.from_groups(m, xs, ys, sws, start=start)
    sol = solve_batch(prob, max_iterations=1, kernel=kernel)  # type: ignore[arg-type]
    assert not sol.settled.any()
    assert set(sol.reason) == {"iteration limit"}
    assert np.all(sol.iterations == 1)
    stopped = solve_batch(prob, cancel=lambda: True, kernel=kernel)  # type: ignore[arg-type]
    assert set(stopped.reason) == {"cancelled"} and not stopped.settled.any()


def test_a_callable_model_is_refused_with_our_error() -> None:
    m = Model.from_callable(lambda x, a, b: a * x + b)
    with pytest.raises(ModelError, match="formula model"):
        BatchProblem.from_groups(m, [np.arange(5.0)], [np.arange(5.0)])


# ---------------------------------------------------------------- padding and bookkeeping
_M4 = catalog()["inhibition_4pl"]
_XS, _YS, _SWS, _S = _groups("inhibition_4pl", 12, weighted=True)[1:]


def _solve_all(prob: BatchProblem, kernel: str) -> BatchSolution:
    return solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]


@settings(max_examples=25)
@given(
    fill=st.sampled_from([np.nan, np.inf, -np.inf, 0.0, -1e300, 1e300, 7.0]),
    seed=st.integers(0, 2**32 - 1),
    kernel=st.sampled_from(KERNELS),
)
def test_padding_values_never_change_the_answer(fill: float, seed: int, kernel: str) -> None:
    # Whatever the padded cells hold (even NaN or inf), every group's answer is identical.
    base = BatchProblem.from_groups(_M4, _XS, _YS, _SWS, start=_S)
    rng = np.random.default_rng(seed)
    pad = ~base.mask
    noise = rng.normal(size=base.x.shape) * 1e3
    x = np.where(pad, fill if seed % 2 else noise, base.x)
    y = np.where(pad, noise if seed % 2 else fill, base.y)
    assert base.sw is not None
    sw = np.where(pad, fill, base.sw)
    other = BatchProblem(
        model=_M4, x=x, y=y, mask=base.mask, sw=sw, free=base.free,
        start=base.start, lower=base.lower, upper=base.upper,
    )  # fmt: skip
    a, b = _solve_all(base, kernel), _solve_all(other, kernel)
    assert np.array_equal(a.values, b.values)
    assert np.array_equal(a.ssr, b.ssr)
    assert a.reason == b.reason


@settings(max_examples=20)
@given(
    order=st.permutations(list(range(12))),
    extra=st.integers(0, 9),
    kernel=st.sampled_from(KERNELS),
)
def test_group_order_and_padding_width_do_not_matter(
    order: list[int], extra: int, kernel: str
) -> None:
    # Groups are independent: reordering them, or padding all to a wider array, gives each
    # the same answer, to the solver's accuracy (a reduction over a longer row may round
    # differently, and the run then stops at another point within its tolerances).
    base = _solve_all(BatchProblem.from_groups(_M4, _XS, _YS, _SWS, start=_S), kernel)
    xs = [_XS[i] for i in order]
    ys = [_YS[i] for i in order]
    sws = [_SWS[i] for i in order] if _SWS is not None else None
    prob = BatchProblem.from_groups(_M4, xs, ys, sws, start=_S[order])
    if extra:
        n = prob.x.shape[1] + extra
        grow: Callable[[FloatArray, float], FloatArray] = lambda a, v: np.pad(  # noqa: E731
            a, ((0, 0), (0, extra)), constant_values=v
        )
        assert prob.sw is not None
        prob = BatchProblem(
            model=_M4, x=grow(prob.x, 1.0), y=grow(prob.y, 0.0),
            mask=np.pad(prob.mask, ((0, 0), (0, extra))), sw=grow(prob.sw, 1.0),
            free=prob.free, start=prob.start, lower=prob.lower, upper=prob.upper,
        )  # fmt: skip
        assert prob.x.shape[1] == n
    sol = _solve_all(prob, kernel)
    np.testing.assert_allclose(sol.values, base.values[order], rtol=1e-6)
    np.testing.assert_allclose(sol.ssr, base.ssr[order], rtol=1e-10)
    assert list(sol.settled) == list(base.settled[order])


@settings(max_examples=30)
@given(sizes=st.lists(st.integers(0, 9), min_size=1, max_size=6))
def test_from_groups_pads_ragged_groups(sizes: list[int]) -> None:
    m = catalog()["straight_line"]
    xs = [np.arange(float(k)) + 1.0 for k in sizes]
    ys = [2.0 * x for x in xs]
    prob = BatchProblem.from_groups(m, xs, ys, [np.ones(k) for k in sizes])
    assert prob.x.shape == (len(sizes), max(sizes))
    assert prob.n.tolist() == sizes
    for i, k in enumerate(sizes):
        assert np.array_equal(prob.x[i, :k], xs[i]) and np.array_equal(prob.y[i, :k], ys[i])
        assert not prob.mask[i, k:].any()
    assert prob.start.shape == prob.lower.shape == (len(sizes), 2)
    assert np.all(np.isinf(prob.lower)) and math.isinf(float(prob.upper.max()))


def test_the_compiled_kernel_is_kept_on_disk_for_later_processes(
    tmp_path: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    # numba's cache lives beside the generated module: after one solve both are in the cache
    # directory, and a second process would load the machine code instead of compiling it.
    _kernel_ok("compiled")
    monkeypatch.setenv("CURVEWRIGHT_CACHE", str(tmp_path))
    m = Model.from_formula("base + amp*exp(-rate*x)")  # a model no other test compiles
    x = np.linspace(0.0, 5.0, 15)
    y = 1.0 + 4.0 * np.exp(-0.7 * x)
    prob = BatchProblem.from_groups(m, [x], [y], None, start=[0.8, 3.5, 0.5])
    sol = solve_batch(prob, kernel="compiled")
    assert sol.settled[0]
    np.testing.assert_allclose(sol.values[0], [1.0, 4.0, 0.7], rtol=1e-8)
    folder = tmp_path / "kernels"
    modules = list(folder.glob("cw_kernel_*.py"))
    assert len(modules) == 1 and "def _points" in modules[0].read_text(encoding="utf-8")
    assert list((folder / "__pycache__").glob("*.nbi")), "numba wrote no cache index"


@pytest.mark.parametrize("expo", [2.0, 1.5, -1.0, 0.0, 3.0])
def test_compiled_powers_follow_numpy_power_at_zero_negative_and_infinite_bases(
    expo: float,
) -> None:
    # The compiled kernel writes a**b as exp(b * log(a)) where the model also needs log(a)
    # (the derivative in b) and a is finite and positive, and keeps pow elsewhere. Reference:
    # numpy's power, through the model's own numpy value and derivatives, at bases of 0, < 0,
    # tiny and large: the same values (to a few ulp), and NaN/inf exactly where numpy's. (No
    # infinite x: a dataset refuses it; nor a**b that underflows: a**(b - 1) is written
    # a**b / a, which is NaN at a = inf and 0 where a**b underflows.)
    _kernel_ok("compiled")
    from curvewright.fitting.batch_kernel import _load, _module_source

    model = Model.from_formula("a * (x - c)**b + d", params=["a", "b", "c", "d"])
    mod = _load(_module_source(model))
    xs = np.array([-2.0, -0.5, 0.0, 1e-100, 1e-8, 0.3, 1.0, 7.0, 1e30])
    th = np.array([1.7, expo, 0.0, -0.4])  # a, b, c, d in the model's order
    assert model.param_names == ("a", "b", "c", "d")
    got = np.zeros((xs.size, 5))
    with np.errstate(all="ignore"):
        mod._points(xs, np.ones(xs.size, dtype=np.bool_), th, got)
        out = model._value_and_gradient(xs, *th)
    want = np.column_stack([np.broadcast_to(np.asarray(o, dtype=float), xs.shape) for o in out])
    assert np.array_equal(np.isnan(got), np.isnan(want))
    assert np.array_equal(np.isinf(got), np.isinf(want))
    ok = np.isfinite(want)
    np.testing.assert_allclose(got[ok], want[ok], rtol=1e-13, atol=0.0)
    assert "_fn_exp(_mul(b," in _module_source(model)  # the rewrite is in use here
