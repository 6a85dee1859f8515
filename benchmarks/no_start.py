"""Fits with no starting values: time to solve each NIST problem, and many-peak formula curves.

Run with ``python benchmarks/no_start.py [--repeat N] [--only TEXT] [--curves N]``. Two tables:

1. Every NIST StRD nonlinear problem in tests/data/nist_nonlinear fitted by
   ``curvewright.fit(model, x, y)`` with no start: median time, whether it reached the
   certified values (LRE >= 6 after putting interchangeable terms in NIST's order, as
   tests/test_start.py does) and the ratio to scipy's ``curve_fit`` from NIST's first start,
   measured in the same run (scipy needs the start; ours does not).
2. Three overlapping Gaussian peaks on a straight baseline (10 parameters), ``--curves``
   invented curves with different peaks and noise: median time per curve with no start and
   how many reached the least-squares minimum that scipy's ``least_squares`` finds from the
   true parameters (the reference; a lower one found by us counts as reached too).

Wall time, and for the curves also CPU time (``time.process_time``: on a shared machine the
wall time includes waiting for a core). Nothing here is a test: timings are never asserted.
"""

from __future__ import annotations

import argparse
import functools
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy.optimize import curve_fit, least_squares

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

from curvewright.fitting import fit  # noqa: E402
from curvewright.models import Model  # noqa: E402
from nist_nonlinear import FORMULAS, lre, read  # noqa: E402
from test_start import NIST_GENERIC, _in_nist_order  # noqa: E402

GROUPS = NIST_GENERIC
PEAKS = (
    "c0 + c1*x + a1*exp(-(x - m1)**2/(2*s1**2)) + a2*exp(-(x - m2)**2/(2*s2**2))"
    " + a3*exp(-(x - m3)**2/(2*s3**2))"
)


def _median(fn: object, repeat: int) -> tuple[float, object, float]:
    """Median wall time, the last result and the median CPU time of ``repeat`` calls."""
    times, cpu, out = [], [], None
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()  # type: ignore[operator]
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(times), out, statistics.median(cpu)


def _curve_fit_from(model: Model, x: np.ndarray, y: np.ndarray, p0: list[float]) -> object:
    def f(xx: np.ndarray, *b: float) -> np.ndarray:
        return np.asarray(model.func(xx, *b), dtype=float)

    return curve_fit(f, x, y, p0=p0, maxfev=20000)


def nist_table(repeat: int, only: str) -> None:
    head = ("problem", "no start s", "CPU s", "solved", "min LRE", "scipy ms", "ratio")
    print(
        f"{head[0]:10s} {head[1]:>10s} {head[2]:>6s} {head[3]:>6s} {head[4]:>7s} "
        f"{head[5]:>9s} {head[6]:>7s}"
    )
    for name in sorted(FORMULAS):
        if only not in name:
            continue
        p = read(name)
        model = Model.from_formula(FORMULAS[name], params=list(p.names))
        t, r, c = _median(functools.partial(fit, model, p.x, p.y), repeat)
        got = _in_nist_order(name, dict(r.values), GROUPS[name])  # type: ignore[attr-defined]
        low = min(lre(got[b], c) for b, c in zip(p.names, p.certified, strict=True))
        ts, _, _ = _median(
            functools.partial(_curve_fit_from, model, p.x, p.y, list(p.start1)), repeat
        )
        ok = "yes" if bool(r.success) and low >= 6 else "no"  # type: ignore[attr-defined]
        print(f"{name:10s} {t:10.3f} {c:6.3f} {ok:>6s} {low:7.1f} {ts * 1e3:9.2f} {t / ts:7.0f}")


def _residual(model: Model, x: np.ndarray, y: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.asarray(model.func(x, *b), dtype=float) - y


def peak_table(curves: int) -> None:
    model = Model.from_formula(PEAKS)
    names = list(model.param_names)
    times, cpu, reached = [], [], 0
    for k in range(curves):
        rng = np.random.default_rng(1000 + k)
        x = np.linspace(0.0, 100.0, 200)
        m1 = rng.uniform(25, 40)
        truth = {
            "c0": rng.uniform(1, 5),
            "c1": rng.uniform(-0.02, 0.02),
            "a1": rng.uniform(20, 60),
            "m1": m1,
            "s1": rng.uniform(4, 8),
            "a2": rng.uniform(20, 60),
            "m2": m1 + rng.uniform(10, 18),
            "s2": rng.uniform(4, 8),
            "a3": rng.uniform(20, 60),
            "m3": m1 + rng.uniform(28, 40),
            "s3": rng.uniform(4, 8),
        }
        truth = {n: truth[n] for n in names}
        y = model.eval(x, truth) + rng.normal(0, 1.0, x.size)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = least_squares(
                functools.partial(_residual, model, x, y),
                [truth[n] for n in names],
                xtol=1e-15,
                ftol=1e-15,
            )
        ref_ssr = 2.0 * float(ref.cost)
        t0, c0 = time.perf_counter(), time.process_time()
        r = fit(model, x, y)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        if r.success and r.ssr <= ref_ssr * (1 + 1e-6):
            reached += 1
    print(
        f"three overlapping peaks + line (10 parameters), {curves} curves: median "
        f"{statistics.median(times):.3f} s (CPU {statistics.median(cpu):.3f} s), max "
        f"{max(times):.3f} s, reached the reference "
        f"minimum {reached} of {curves}"
    )


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3, help="timed calls per figure (median)")
    ap.add_argument("--only", default="", help="run only NIST problems whose name contains this")
    ap.add_argument("--curves", type=int, default=20, help="invented peak curves (0: none)")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    nist_table(args.repeat, args.only)
    if args.curves:
        peak_table(args.curves)


if __name__ == "__main__":
    main()
