"""Speed of the whole fit_groups call against a loop of scipy's curve_fit, in one run.

Run with ``python benchmarks/fit_groups.py [--sizes 1000,10000] [--loop 500] [--dask]``.
Invented 4PL dose-response curves (8 doses in triplicate, 24 points) in one long table. The
batch is timed from the table to the BatchResult: split, guided starts, the engine, statistics,
derived quantities and statuses included. The reference is a scipy ``curve_fit`` loop over
``--loop`` of the curves, started near each truth (an easier job than a guided start), scaled
to the batch's size; both are measured in this run, and the ratio is printed. ``--repeat``
times the batch that many times (the loop once before and once after) and prints the median
and the range, and the same in process CPU time (less sensitive to other work on a shared
machine; it adds up the engine's threads). ``--dask`` also times ``backend="dask"`` on a
one-worker and on a two-worker LocalCluster (processes, one thread each) started
beforehand. The 1-minute load average is printed with every figure: the machine may be
shared. Nothing here is a test: timings are never asserted.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))

import curvewright as cw
from curvewright.catalog import catalog

MODEL = catalog()["inhibition_4pl"]
DOSES = np.repeat(np.logspace(-9, -4, 8), 3)
TRUTH = np.array([100.0, 5.0, -6.5, 1.2])
SPREAD = np.array([5.0, 3.0, 0.3, 0.15])


def _table(g: int, seed: int) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(seed)
    truth = TRUTH + SPREAD * rng.normal(size=(g, 4))
    y = np.stack([MODEL.func(DOSES, *t) for t in truth]) + rng.normal(0, 2.0, (g, DOSES.size))
    df = pd.DataFrame(
        {"well": np.repeat(np.arange(g), DOSES.size), "conc": np.tile(DOSES, g), "resp": y.ravel()}
    )
    return df, truth


def _loop(df: pd.DataFrame, truth: np.ndarray, n: int) -> tuple[float, float]:
    """Seconds per curve of a curve_fit loop started at the truth: wall and process CPU."""
    y = df["resp"].to_numpy().reshape(-1, DOSES.size)
    f = MODEL.func
    t0, c0 = time.perf_counter(), time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for i in range(n):
            curve_fit(lambda x, *p: f(x, *p), DOSES, y[i], p0=truth[i], maxfev=4000)
    return (time.perf_counter() - t0) / n, (time.process_time() - c0) / n


def _cluster(workers: int) -> Any:
    import distributed

    return distributed.Client(
        distributed.LocalCluster(n_workers=workers, threads_per_worker=1, dashboard_address=":0")
    )


def _close(client: Any) -> None:
    cluster = client.cluster
    client.close()
    if cluster is not None:
        cluster.close()


def _dask_time(client: Any, df: pd.DataFrame) -> float:
    t0 = time.perf_counter()
    cw.fit_groups(
        MODEL, data=df, x="conc", y="resp", by="well", backend="dask", client=client,
        progress=False,
    )  # fmt: skip
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1000,10000")
    ap.add_argument("--loop", type=int, default=500)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--dask", action="store_true")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    warm, _ = _table(50, 0)
    cw.fit_groups(MODEL, data=warm, x="conc", y="resp", by="well", progress=False)  # compile
    big, _ = _table(2048, 0)  # the threaded kernel compiles at its first call with many groups
    cw.fit_groups(MODEL, data=big, x="conc", y="resp", by="well", progress=False)
    for g in sizes:
        df, truth = _table(g, 1)
        loops = [_loop(df, truth, min(args.loop, g))]
        times, cpus = [], []
        for _ in range(args.repeat):
            t0, c0 = time.perf_counter(), time.process_time()
            batch = cw.fit_groups(MODEL, data=df, x="conc", y="resp", by="well", progress=False)
            times.append(time.perf_counter() - t0)
            cpus.append(time.process_time() - c0)
        loops.append(_loop(df, truth, min(args.loop, g)))
        per_curve = float(np.mean([w for w, _ in loops]))
        cpu_curve = float(np.mean([c for _, c in loops]))
        dt = float(np.median(times))
        dc = float(np.median(cpus))
        # memory in a second call: tracing slows Python down, so it is not timed
        tracemalloc.start()
        cw.fit_groups(MODEL, data=df, x="conc", y="resp", by="well", progress=False)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        c = batch.counts
        spread = f" [{min(times):.2f}-{max(times):.2f}]" if len(times) > 1 else ""
        print(
            f"{g:>7} curves: fit_groups {dt:7.2f} s{spread} ({g / dt:8.0f} fits/s), curve_fit "
            f"loop {per_curve * g:7.2f} s ({1 / per_curve:6.0f} fits/s): "
            f"{per_curve * g / dt:5.1f}x; "
            f"peak traced memory {peak / 2**20:6.1f} MiB; {c['ok']} ok, {c['flagged']} "
            f"flagged, {c['failed']} failed; load {os.getloadavg()[0]:.2f}\n"
            f"{'':>15}process CPU: fit_groups {dc:7.2f} s, curve_fit loop "
            f"{cpu_curve * g:7.2f} s: {cpu_curve * g / dc:5.1f}x (all threads' CPU counts)"
        )
    if args.dask:
        for workers in (1, 2):
            client = _cluster(workers)
            try:
                _dask_time(client, warm)  # the workers load (or compile) the kernel
                for g in sizes:
                    df, _ = _table(g, 1)
                    dd = _dask_time(client, df)
                    print(
                        f"{g:>7} curves: dask, {workers} worker(s) {dd:7.2f} s ({g / dd:8.0f} "
                        f"fits/s); load {os.getloadavg()[0]:.2f}"
                    )
            finally:
                _close(client)


if __name__ == "__main__":
    main()
