"""When is a parameter "not identified"? Scale parameters by their relative standard error,
positions on the x axis by the data's span along x.

A log10 midpoint of 0 (an IC50 of 1 in the data's unit) or a peak centre at x = 0 is a fine
estimate whose relative standard error is huge, so the relative rule would cry wolf on every
such curve; a position's interval is judged against how far the data reach instead. The
threshold (one span) is our own choice, stated in assemble._diagnostics.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.optimize

import curvewright as cw
from curvewright.start import location_parameters


def _four_pl(x: np.ndarray, full: float, zero: float, mid: float, n: float) -> np.ndarray:
    return full + (zero - full) / (1 + (x / 10**mid) ** n)


def _flagged(r: cw.FitResult) -> set[str]:
    return {p for d in r.diagnostics if d.code == "not_identified" for p in d.params}


def test_a_midpoint_at_zero_is_not_flagged_when_the_data_pin_it() -> None:
    rng = np.random.default_rng(11)
    x = np.repeat(10.0 ** np.linspace(-3, 3, 13), 2)
    y = _four_pl(x, 5.0, 95.0, 0.0, 1.1) + rng.normal(0, 2, x.size)
    # Rescale x so that the fitted midpoint is 0 (the model is equivariant: dividing x by 10**c
    # moves log_ic50 by -c and changes nothing else), making the relative rule's failure certain.
    first, _ = scipy.optimize.curve_fit(_four_pl, x, y, p0=[5, 95, 0.0, 1.0])
    x = x / 10 ** first[2]
    r = cw.fit("inhibition_4pl", x, y)
    # Reference: scipy least_squares (MINPACK LM) on the same data, with the usual covariance
    # s^2 (J'J)^-1 at its solution.
    ls = scipy.optimize.least_squares(
        lambda p: _four_pl(x, *p) - y, first * [1, 1, 0, 1], method="lm", xtol=1e-15, ftol=1e-15
    )
    popt = ls.x
    s2 = float(ls.fun @ ls.fun) / (x.size - 4)
    pcov = s2 * np.linalg.inv(ls.jac.T @ ls.jac)
    assert abs(r.values["log_ic50"] - popt[2]) < 1e-6
    se = float(np.sqrt(pcov[2, 2]))
    assert abs(r.stderr["log_ic50"] - se) < 1e-4 * se
    assert se > abs(popt[2])  # the relative rule would have flagged it
    assert "log_ic50" not in _flagged(r)


def test_a_midpoint_whose_interval_is_wider_than_the_data_is_flagged() -> None:
    # All doses far below the midpoint: the curve barely starts to fall, so the data reach
    # nowhere near log_ic50; its standard error exceeds the 3 decades the doses span.
    rng = np.random.default_rng(3)
    x = np.repeat(10.0 ** np.linspace(-9, -6, 7), 3)
    y = _four_pl(x, 0.0, 100.0, -4.0, 1.0) + rng.normal(0, 2, x.size)
    r = cw.fit("inhibition_4pl", x, y, fixed={"full_effect": 0.0})
    assert r.success
    assert r.stderr["log_ic50"] > 3.0
    assert "log_ic50" in _flagged(r)
    d = next(d for d in r.diagnostics if d.code == "not_identified" and d.params == ("log_ic50",))
    assert abs(d.extra["span"] - 3.0) < 1e-12


def test_the_batch_flags_follow_the_same_rule() -> None:
    rng = np.random.default_rng(12)
    x = np.repeat(10.0 ** np.linspace(-3, 3, 13), 2)
    frames = []
    for k, mid in enumerate([0.01, -0.02, 0.5, -1.0]):
        y = _four_pl(x, 5.0, 95.0, mid, 1.1) + rng.normal(0, 2, x.size)
        frames.append(pd.DataFrame({"g": k, "x": x, "y": y}))
    df = pd.concat(frames)
    batch = cw.fit_groups("inhibition_4pl", data=df, x="x", y="y", by="g", progress=False)
    for g in range(4):
        single = batch[g]
        assert ("not_identified" in batch.flags[batch.index_of(g)]) == bool(_flagged(single))
    assert "not_identified" not in batch.flags[batch.index_of(0)]


def test_which_parameters_are_positions() -> None:
    # Common practice: a dose-response midpoint (log10 units) and a peak centre are positions
    # on the x axis; a baseline, an amplitude and Km are sizes.
    cat = cw.catalog()
    # Levels in y's unit that may take either sign (plateaus, baselines) are measured on y.
    assert location_parameters(cat["inhibition_4pl"]) == {
        "log_ic50": "log",
        "zero_dose": "y",
        "full_effect": "y",
    }
    assert location_parameters(cat["gaussian_peak"]) == {
        "center": "lin",
        "baseline": "y",
        "amplitude": "y",
    }
    assert location_parameters(cat["michaelis_menten"]) == {}  # Vmax, Km: positive sizes
    assert location_parameters(cw.Model.from_formula("base + a*exp(-k*x)")) == {}


def test_a_plateau_at_zero_is_not_flagged_when_the_data_pin_it() -> None:
    # Complete inhibition to 0: full_effect near 0 with a small standard error against the
    # response's span is a good estimate (reference: scipy least_squares' standard error).
    rng = np.random.default_rng(21)
    x = np.repeat(10.0 ** np.linspace(-3, 3, 13), 2)
    y = _four_pl(x, 0.0, 100.0, 0.5, 1.0) + rng.normal(0, 2, x.size)
    r = cw.fit("inhibition_4pl", x, y)
    ls = scipy.optimize.least_squares(
        lambda p: _four_pl(x, *p) - y, [0.0, 100.0, 0.5, 1.0], method="lm", xtol=1e-15
    )
    s2 = float(ls.fun @ ls.fun) / (x.size - 4)
    se = float(np.sqrt((s2 * np.linalg.inv(ls.jac.T @ ls.jac))[0, 0]))
    assert abs(r.stderr["full_effect"] - se) < 1e-4 * se
    assert abs(r.values["full_effect"]) < se  # the relative rule would have flagged it
    assert "full_effect" not in _flagged(r)
