"""Speed of the batch engine against a loop of scipy's curve_fit, in one run.

Run with ``python benchmarks/batch_engine.py [--sizes 1000,10000,100000] [--loop 1000]``.
Invented 4PL dose-response curves (8 doses in triplicate, 24 points), each fitted from a start
near its truth. Prints fits per second of a scipy ``curve_fit`` loop (started near the truth,
the same starts as ours), of the engine's numpy path and of its compiled (numba) kernel, the
ratios to the loop measured in the same run, numba's compile time cold (first call in this
process) and warm, and the peak memory traced by tracemalloc during one solve. Nothing here is
a test: timings are never asserted.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
from scipy.optimize import curve_fit

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

from curvewright.catalog import catalog
from curvewright.fitting.batch_engine import BatchProblem, solve_batch
from curvewright.fitting.batch_kernel import available

MODEL = catalog()["inhibition_4pl"]
DOSES = np.repeat(np.logspace(-9, -4, 8), 3)
TRUTH = np.array([100.0, 5.0, -6.5, 1.2])
SPREAD = np.array([5.0, 3.0, 0.3, 0.15])


def _data(g: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Truths, curves with noise (sd 2) and starts near each truth, for ``g`` groups."""
    rng = np.random.default_rng(seed)
    truth = TRUTH + SPREAD * rng.normal(size=(g, 4))
    truth[:, 3] = np.abs(truth[:, 3])
    cols = [truth[:, j : j + 1] for j in range(4)]
    y = np.asarray(MODEL.func(DOSES[None, :], *cols)) + rng.normal(0.0, 2.0, (g, DOSES.size))
    start = truth + 0.5 * SPREAD * rng.normal(size=(g, 4))
    start[:, 3] = np.abs(start[:, 3])
    return truth, y, start


def _problem(y: np.ndarray, start: np.ndarray) -> BatchProblem:
    g = y.shape[0]
    return BatchProblem.from_groups(MODEL, [DOSES] * g, list(y), None, start=start)


def _scipy_loop(y: np.ndarray, start: np.ndarray) -> float:
    """Fits per second of curve_fit (MINPACK, differenced Jacobian) one curve at a time."""
    names = MODEL.param_names

    def f(x: np.ndarray, *p: float) -> np.ndarray:
        return np.asarray(MODEL.func(x, *p))

    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for i in range(y.shape[0]):
            curve_fit(f, DOSES, y[i], p0=start[i], maxfev=2000 * (len(names) + 1))
    return y.shape[0] / (time.perf_counter() - t0)


def _rate(prob: BatchProblem, kernel: str) -> tuple[float, float]:
    """Fits per second of one solve and the fraction of groups settled."""
    t0 = time.perf_counter()
    sol = solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
    dt = time.perf_counter() - t0
    return prob.groups / dt, float(sol.settled.mean())


def _peak_mb(prob: BatchProblem, kernel: str) -> float:
    tracemalloc.start()
    solve_batch(prob, kernel=kernel)  # type: ignore[arg-type]
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 2**20


def _fresh_process_seconds() -> float:
    """Seconds a new Python process takes from importing the engine to a first compiled fit."""
    code = (
        "import time; t0 = time.perf_counter(); import sys; sys.path.insert(0, 'src');"
        "sys.path.insert(0, 'benchmarks'); import batch_engine as b;"
        "y, s = b._data(10, 1)[1:]; b.solve_batch(b._problem(y, s), kernel='compiled');"
        "print(time.perf_counter() - t0)"
    )
    root = Path(__file__).resolve().parents[1]
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=root, capture_output=True, text=True, check=True
    )
    return float(out.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1000,10000,100000", help="numbers of curves")
    ap.add_argument("--loop", type=int, default=1000, help="curves fitted by the scipy loop")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",")]
    kernels = ["numpy", *(["compiled"] if available() else [])]

    small_y, small_s = _data(10, 1)[1:]
    if "compiled" in kernels:
        t0 = time.perf_counter()
        solve_batch(_problem(small_y, small_s), kernel="compiled")
        cold = time.perf_counter() - t0
        t0 = time.perf_counter()
        solve_batch(_problem(small_y, small_s), kernel="compiled")
        warm = time.perf_counter() - t0
        fresh = _fresh_process_seconds()
        print(
            f"numba kernel + 10 fits: first compile {cold:.2f} s; a new process with the disk "
            f"cache warm {fresh:.2f} s (numba import and cache load included); warm in-process "
            f"{warm * 1e3:.2f} ms"
        )
    solve_batch(_problem(small_y, small_s), kernel="numpy")  # numpy path warm-up

    loop_y, loop_s = _data(args.loop, 2)[1:]
    head = ("curves", "kernel", "fits/s", "loop/s", "x loop", "settled", "peak MB")
    print(" ".join(f"{h:>{w}s}" for h, w in zip(head, (8, 9, 10, 8, 8, 8, 8), strict=True)))
    for g in sizes:
        y, s = _data(g, 3)[1:]
        prob = _problem(y, s)
        for k in kernels:
            # The loop is timed just before and after each solve and averaged: the machine's
            # load drifts, and a ratio is only fair against a loop measured at the same time.
            before = _scipy_loop(loop_y, loop_s)
            rate, settled = _rate(prob, k)
            after = _scipy_loop(loop_y, loop_s)
            loop_rate = 0.5 * (before + after)
            peak = _peak_mb(prob, k)
            print(
                f"{g:8d} {k:>9s} {rate:10.0f} {loop_rate:8.0f} {rate / loop_rate:8.1f}"
                f" {settled:8.3f} {peak:8.1f}"
            )
    print(
        f"\nEach figure is one timed solve of fresh data; 'loop/s' is the scipy curve_fit loop "
        f"({args.loop} curves) timed just before and after it, 'x loop' the ratio. Peak MB: "
        "tracemalloc's peak during a second solve (numpy allocations)."
    )


if __name__ == "__main__":
    main()
