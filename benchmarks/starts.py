"""Speed and quality of the batched guided starts (curvewright.start_batch), in one run.

Run with ``python benchmarks/starts.py [--groups G] [--repeat R] [--quality N]``. Speed: G
invented 4PL inhibition curves of 24 points (8 concentrations in triplicate); microseconds per
curve for ``guided_starts`` on the whole batch (median of R calls) against the per-curve
``guided_start`` and a scipy ``curve_fit`` loop (each on a sample of the curves, per curve),
measured in the same run. Quality (``--quality N``): N seeded synthetic groups of every catalog
family (tests/start_batch_cases.py), the share whose fit from the batched start reaches the
minimum of the fit from the per-curve guided start and of scipy's least_squares from the truth.
Nothing here is a test: timings are never asserted.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy.optimize import curve_fit

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))
sys.path.insert(0, str(ROOT / "tests"))

from curvewright.catalog import catalog  # noqa: E402
from curvewright.start import guided_start  # noqa: E402
from curvewright.start_batch import guided_starts  # noqa: E402
from start_batch_cases import MAKERS, compare, make_batch  # noqa: E402


def _plate(groups: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Invented plate-style 4PL inhibition data: 8 concentrations in triplicate per curve."""
    rng = np.random.default_rng(seed)
    m = catalog()["inhibition_4pl"]
    x = np.tile(np.repeat(np.logspace(-9, -4, 8), 3), (groups, 1))
    truth = {
        "zero_dose": rng.uniform(80, 120, (groups, 1)),
        "full_effect": rng.uniform(-5, 20, (groups, 1)),
        "log_ic50": rng.uniform(-8, -5, (groups, 1)),
        "n_h": rng.uniform(0.6, 2.5, (groups, 1)),
    }
    y = m.func(x, *(truth[n] for n in m.param_names))
    y = y + rng.normal(0.0, 3.0, x.shape)
    return x, y, np.ones(x.shape, dtype=bool)


def speed(groups: int, repeat: int, sample: int) -> None:
    m = catalog()["inhibition_4pl"]
    x, y, mask = _plate(groups, 20261202)
    guided_starts(m, x[:50], y[:50], mask[:50])  # warm-up
    batch = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        guided_starts(m, x, y, mask)
        batch.append(time.perf_counter() - t0)
    idx = np.linspace(0, groups - 1, sample).astype(int)
    per_curve, scipy_fit = [], []
    names = m.param_names

    def f(xx: np.ndarray, *p: float) -> np.ndarray:
        return np.asarray(m.func(xx, *p))

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for g in idx:
            t0 = time.perf_counter()
            s = guided_start(m, x[g], y[g])
            per_curve.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            curve_fit(f, x[g], y[g], p0=[s[n] for n in names], maxfev=2000)
            scipy_fit.append(time.perf_counter() - t0)
    t_b = statistics.median(batch) / groups * 1e6
    t_p = statistics.median(per_curve) * 1e6
    t_s = statistics.median(scipy_fit) * 1e6
    print(f"4PL inhibition, {groups} curves of 24 points")
    print(f"  batched guided_starts     {t_b:10.2f} us/curve (median of {repeat} calls)")
    print(f"  per-curve guided_start    {t_p:10.1f} us/curve (median of {sample} curves)")
    print(f"  scipy curve_fit loop      {t_s:10.1f} us/curve (from the guided start)")
    print(f"  per-curve / batched       {t_p / t_b:10.0f} x")
    print(f"  batched start / curve_fit {t_b / t_s:10.3f} (share of one scipy fit)")


def quality(n: int) -> None:
    print(f"\nfamily                  ok  reaches the reference minimum (of {n})")
    for name in MAKERS:
        batch = make_batch(name, n, seed=99)
        starts, ok = guided_starts(batch.model, batch.x, batch.y, batch.mask)
        rows = [g for g in range(n) if ok[g]]
        outs = compare(batch, starts, rows)
        same = sum(o.same() for o in outs)
        print(f"{name:22s} {ok.sum():4d}  {same:4d}  ({100.0 * same / n:5.1f} %)", flush=True)


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--sample", type=int, default=100, help="curves timed one by one")
    ap.add_argument("--quality", type=int, default=0, help="groups per family (0: skip)")
    args = ap.parse_args(argv)
    speed(args.groups, args.repeat, args.sample)
    if args.quality:
        quality(args.quality)


if __name__ == "__main__":
    main()
