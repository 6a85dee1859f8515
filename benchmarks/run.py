"""Speed of curvewright's fit against scipy's curve_fit and a bare lmfit Minimizer, in one run.

Run with ``make bench`` (or ``python benchmarks/run.py [--repeat N] [--only TEXT]``). Prints a table
of median times per fit and the ratios to scipy and lmfit, all measured in the same run; the
README's performance section records these figures. Nothing here is a test: timings are never
asserted.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path

import lmfit
import numpy as np
from scipy.optimize import curve_fit

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from curvewright.catalog import catalog
from curvewright.fitting import fit


def _median_times(fns: list[Callable[[], object]], repeat: int) -> list[float]:
    """Median wall time of each function; the calls are interleaved so load hits all alike."""
    for fn in fns:
        for _ in range(3):
            fn()  # warm-up (compilation of the formula, imports, caches)
    times: list[list[float]] = [[] for _ in fns]
    for _ in range(repeat):
        for fn, ts in zip(fns, times, strict=True):
            t0 = time.perf_counter()
            fn()
            ts.append(time.perf_counter() - t0)
    return [statistics.median(ts) for ts in times]


def _problems() -> list[tuple[str, str, np.ndarray, np.ndarray, dict[str, float]]]:
    rng = np.random.default_rng(20261201)
    out = []
    truth = {"zero_dose": 100.0, "full_effect": 5.0, "log_ic50": -6.5, "n_h": 1.2}
    # Invented demo-style data (speed only; accuracy is checked in tests/ against references).
    # A typical plate layout first: 8 concentrations in triplicate.
    x24 = np.repeat(np.logspace(-9, -4, 8), 3)
    y24 = catalog()["inhibition_4pl"].eval(x24, truth) + rng.normal(0, 2.0, x24.size)
    out.append(("4PL inhibition, n=24", "inhibition_4pl", x24, y24, truth))
    for n in (50, 5000):
        x = np.logspace(-9, -4, n)
        y = catalog()["inhibition_4pl"].eval(x, truth) + rng.normal(0, 2.0, n)
        out.append((f"4PL inhibition, n={n}", "inhibition_4pl", x, y, truth))
        xd = np.linspace(0, 30, n)
        td = {"baseline": 10.0, "amplitude": 90.0, "k": 0.25}
        yd = catalog()["exponential_decay"].eval(xd, td) + rng.normal(0, 1.0, n)
        out.append((f"exponential decay, n={n}", "exponential_decay", xd, yd, td))
    return out


def _time_problem(
    name: str, x: np.ndarray, y: np.ndarray, truth: dict[str, float], repeat: int
) -> tuple[float, float, float, float]:
    model = catalog()[name]
    p0 = {k: v * 1.3 for k, v in truth.items()}
    names = list(model.param_names)

    def f(xx: np.ndarray, *p: float) -> np.ndarray:
        return model.func(xx, *p)

    def run_scipy() -> object:
        return curve_fit(f, x, y, p0=[p0[k] for k in names])

    def run_lmfit() -> object:
        params = lmfit.Parameters()
        for k in names:
            params.add(k, value=p0[k])

        def resid(ps: lmfit.Parameters) -> np.ndarray:
            return model.func(x, *(ps[k].value for k in names)) - y

        return lmfit.minimize(resid, params, method="leastsq")  # lmfit's Levenberg-Marquardt

    def run_ours_start() -> object:
        return fit(model, x, y, start=p0)

    def run_ours_guided() -> object:
        return fit(model, x, y)

    t_s, t_l, t_o, t_g = _median_times(
        [run_scipy, run_lmfit, run_ours_start, run_ours_guided], repeat
    )
    return t_s, t_l, t_o, t_g


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=101, help="timed calls per figure (median)")
    ap.add_argument("--only", default="", help="run only problems whose label contains this")
    args = ap.parse_args(argv)
    rows = [
        (label, *_time_problem(name, x, y, truth, args.repeat))
        for label, name, x, y, truth in _problems()
        if args.only in label
    ]
    print(
        f"{'problem':28s} {'scipy ms':>9s} {'lmfit ms':>9s} {'ours ms':>9s} {'guided ms':>10s}"
        f" {'ours/scipy':>10s} {'ours/lmfit':>10s}"
    )
    for label, t_s, t_l, t_o, t_g in rows:
        print(
            f"{label:28s} {t_s * 1e3:9.2f} {t_l * 1e3:9.2f} {t_o * 1e3:9.2f} {t_g * 1e3:10.2f}"
            f" {t_o / t_s:10.2f} {t_o / t_l:10.2f}"
        )
    print(
        f"\nMedian of {args.repeat} interleaved calls each. 'ours' = curvewright.fit from the"
        " same start as scipy/lmfit (includes result building: covariance, diagnostics, derived"
        " quantities); 'guided' adds the data-driven start."
    )


if __name__ == "__main__":
    main()
