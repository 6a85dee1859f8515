"""Seeded simulations: the F test's p value is uniform under H0 and the bands cover their
nominal share. The truth is the reference (data generated here from known curves)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

import curvewright as cw
from curvewright.stats import compare

# Substrate concentrations of a typical enzyme assay, in triplicate (invented design).
CONC = np.repeat(np.array([0.02, 0.06, 0.11, 0.22, 0.56, 1.1]), 3)


def mm(x: np.ndarray, vmax: float = 200.0, km: float = 0.07) -> np.ndarray:
    return vmax * x / (km + x)


def ks_uniform(p: list[float]) -> float:
    """p value of the Kolmogorov-Smirnov test of uniformity on [0, 1] (scipy reference)."""
    return float(scipy.stats.kstest(np.asarray(p), "uniform").pvalue)


@pytest.mark.slow
def test_f_test_p_uniform_under_h0_for_nested_polynomials() -> None:
    # Exact case: straight line true, line vs quadratic. Under H0 the p value is U(0, 1)
    # exactly (normal errors, linear models); KS test at the 1% level, fixed seed.
    rng = np.random.default_rng(20261201)
    x = np.linspace(0.0, 10.0, 15)
    ps = []
    for _ in range(300):
        y = 2.0 + 0.7 * x + rng.normal(0.0, 1.0, x.size)
        c = compare(cw.fit("straight_line", x, y), cw.fit(cw.polynomial(2), x, y))
        ps.append(float(c.f_tests["p"].iloc[0]))
    assert ks_uniform(ps) > 0.01
    # and the test's size: about 5% rejections at alpha = 0.05 (binomial 3-sigma band)
    rate = float(np.mean(np.asarray(ps) < 0.05))
    assert abs(rate - 0.05) < 3 * np.sqrt(0.05 * 0.95 / len(ps))


@pytest.mark.slow
def test_f_test_p_nearly_uniform_under_h0_for_michaelis_menten_in_hill() -> None:
    # Nonlinear case (approximate F): Michaelis-Menten true, compared with the Hill equation
    # (n_h = 1 gives Michaelis-Menten). KS test at the 1% level, fixed seed.
    rng = np.random.default_rng(7)
    ps = []
    refused = 0
    for _ in range(300):
        y = mm(CONC) + rng.normal(0.0, 8.0, CONC.size)
        try:
            c = compare(cw.fit("michaelis_menten", CONC, y), cw.fit("hill", CONC, y))
        except cw.ComparisonError:
            refused += 1  # a fit that did not converge is refused, not compared
            continue
        ps.append(float(c.f_tests["p"].iloc[0]))
    assert refused <= 3
    assert ks_uniform(ps) > 0.01


@pytest.mark.slow
def test_band_coverage_near_nominal_michaelis_menten() -> None:
    # Pointwise coverage of the 95% confidence band (does it contain the true curve?) and of
    # the 95% prediction band (does it contain a new observation?), 400 simulated data sets.
    # Nonlinear bands are first-order, so coverage is near, not exactly, 95%: allow 3.5
    # binomial standard errors at each grid point.
    rng = np.random.default_rng(11)
    grid = np.array([0.03, 0.1, 0.3, 0.8])
    truth = mm(grid)
    n_sim = 400
    hit_conf = np.zeros(grid.size)
    hit_pred = np.zeros(grid.size)
    for _ in range(n_sim):
        y = mm(CONC) + rng.normal(0.0, 8.0, CONC.size)
        r = cw.fit("michaelis_menten", CONC, y)
        cb = r.confidence_band(grid)
        pb = r.prediction_band(grid)
        new = truth + rng.normal(0.0, 8.0, grid.size)
        hit_conf += (np.asarray(cb["lower"]) <= truth) & (truth <= np.asarray(cb["upper"]))
        hit_pred += (np.asarray(pb["lower"]) <= new) & (new <= np.asarray(pb["upper"]))
    tol = 3.5 * np.sqrt(0.95 * 0.05 / n_sim)
    np.testing.assert_array_less(np.abs(hit_conf / n_sim - 0.95), tol)
    np.testing.assert_array_less(np.abs(hit_pred / n_sim - 0.95), tol)


def test_band_coverage_exact_for_a_line() -> None:
    # Linear model: the t-based bands are exact; 400 simulations, 3.5 binomial SEs.
    rng = np.random.default_rng(3)
    x = np.linspace(0.0, 10.0, 12)
    grid = np.array([-2.0, 0.0, 5.0, 12.0])
    truth = 1.0 + 0.5 * grid
    n_sim = 400
    hit_conf = np.zeros(grid.size)
    hit_pred = np.zeros(grid.size)
    for _ in range(n_sim):
        y = 1.0 + 0.5 * x + rng.normal(0.0, 0.4, x.size)
        r = cw.fit("straight_line", x, y)
        cb = r.confidence_band(grid, level=0.9)
        pb = r.prediction_band(grid, level=0.9)
        new = truth + rng.normal(0.0, 0.4, grid.size)
        hit_conf += (np.asarray(cb["lower"]) <= truth) & (truth <= np.asarray(cb["upper"]))
        hit_pred += (np.asarray(pb["lower"]) <= new) & (new <= np.asarray(pb["upper"]))
    tol = 3.5 * np.sqrt(0.9 * 0.1 / n_sim)
    np.testing.assert_array_less(np.abs(hit_conf / n_sim - 0.9), tol)
    np.testing.assert_array_less(np.abs(hit_pred / n_sim - 0.9), tol)
