"""Tests of batch_run's array helpers against the per-group definitions they replace.

References: ``_unfittable`` (one group's reason from its Dataset, the per-group check the
batch made before) and ``fitting.problem.point_weights`` (the weights ``fit()`` uses), on
seeded random tables with NaN, inf, constant, too small and out-of-domain groups (invented
data, checked against those per-group references).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from curvewright.catalog import catalog
from curvewright.data import split_groups
from curvewright.errors import CurvewrightError
from curvewright.fitting.batch_run import (
    _chunk_weights,
    _Out,
    _unfittable,
    unfittable_reasons,
)
from curvewright.fitting.problem import point_weights


def _table(seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 120))
    df = pd.DataFrame(
        {
            "g": rng.integers(0, 12, n),
            "x": rng.choice([-1.0, 0.0, 0.5, 1.0, 2.0, 5.0], n),
            "y": rng.choice([0.0, 1.0, 2.5, -3.0], n),
            "s": rng.uniform(0.5, 2, n),
        }
    )
    for col in ("x", "y"):
        df.loc[rng.random(n) < 0.1, col] = np.nan
    df.loc[df["g"] == 3, "y"] = 7.0  # constant response
    if rng.random() < 0.4:
        df.loc[int(rng.integers(n)), "y"] = np.inf
    if rng.random() < 0.5:
        df.loc[df["g"] == 4, "x"] = np.abs(df.loc[df["g"] == 4, "x"]) + 1  # inside x>0
    return df


@settings(max_examples=40)
@given(
    seed=st.integers(0, 2**32 - 1),
    model=st.sampled_from(["inhibition_4pl", "straight_line", "michaelis_menten"]),
    nfree=st.integers(0, 5),
    with_exclude=st.booleans(),
)
def test_unfittable_reasons_equal_the_per_group_checks(
    seed: int, model: str, nfree: int, with_exclude: bool
) -> None:
    m = catalog()[model]
    df = _table(seed)
    ex = np.random.default_rng(seed + 1).random(len(df)) < 0.2 if with_exclude else None
    groups = split_groups(df, "x", "y", ["g"], exclude=ex, errors="keep")
    got = unfittable_reasons(m, groups, nfree)
    for g in range(len(groups)):
        ds, err = groups.datasets[g], groups.errors[g]
        want = str(err) if ds is None else _unfittable(m, ds, nfree)
        assert got[g] == want


@settings(max_examples=40)
@given(
    seed=st.integers(0, 2**32 - 1),
    weights=st.sampled_from([None, "none", "sigma", "relative", "poisson"]),
    with_sigma=st.booleans(),
)
def test_chunk_weights_equal_point_weights_group_by_group(
    seed: int, weights: str | None, with_sigma: bool
) -> None:
    df = _table(seed)
    groups = split_groups(df, "x", "y", ["g"], sigma="s" if with_sigma else None, errors="keep")
    ready = np.array([g for g, d in enumerate(groups.datasets) if d is not None], dtype=np.intp)
    if not ready.size:
        return
    out = _Out(len(groups), 1, 0)
    take, sw = _chunk_weights(weights, groups, ready, out)
    kept = set(take.tolist())
    _, _, _, mask = groups.padded(take, fill="first")
    for g in ready.tolist():
        ds = groups.datasets[g]
        assert ds is not None
        try:
            _, w = point_weights(weights, (ds,))
        except CurvewrightError as exc:
            assert g not in kept and out.status[g] == "failed" and out.reason[g] == str(exc)
            continue
        assert g in kept and out.reason[g] == ""
        if w is None:
            assert sw is None
            continue
        assert sw is not None
        r = int(np.flatnonzero(take == g)[0])
        assert np.array_equal(sw[r][mask[r]], w)
        assert (sw[r][~mask[r]] == 1.0).all()


def test_flagged_reasons_equal_the_per_group_fits_words() -> None:
    # Reference: the per-group path's words (_row_of_fit on fit() of the group from the same
    # start, which batch[group] runs) for every group the engine flagged. Seeded synthetic
    # 4PL curves (invented), a bound that some fits reach and midpoints beyond the doses.
    import curvewright as cw
    from curvewright.fitting.batch_run import _row_of_fit

    rng = np.random.default_rng(7)
    m = catalog()["inhibition_4pl"]
    x = np.repeat(np.logspace(-3, 1, 6), 2)
    rows = []
    for g in range(40):
        t = [100 + 5 * rng.normal(), 5 + 3 * rng.normal(), rng.uniform(-3.5, 1.5), 1.2]
        y = m.func(x, *t) + rng.normal(0, 2, x.size)
        rows.append(pd.DataFrame({"g": g, "x": x, "y": y}))
    df = pd.concat(rows, ignore_index=True)
    names = m.param_names
    bounds = {names[1]: (4.0, None)}
    batch = cw.fit_groups(m, data=df, x="x", y="y", by="g", bounds=bounds, progress=False)
    seen = correlated = 0
    for i, (s, p) in enumerate(zip(batch.statuses, batch.paths, strict=True)):
        if s != "flagged" or p != "vectorised":
            continue
        want = _row_of_fit(batch[i], batch.level)
        assert batch.flags[i] == want.flags
        # Correlated parameters are named alike too (the engine knows which are in a pair).
        assert batch.reasons[i] == want.reason
        seen += 1
        correlated += "high_correlation" in want.flags
    assert seen >= 3
    assert correlated >= 1
