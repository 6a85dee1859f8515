"""The Dask backend of fit_groups on a real two-worker LocalCluster (processes, not threads).

The reference is the local backend on the same table: the results must be identical (the same
JSON). Data: R's DNase (tests/data/r_datasets, SOURCES.md) and seeded synthetic 4PL plates.
One cluster serves the module; nothing here is timed.
"""

from __future__ import annotations

import operator
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

import curvewright as cw
from curvewright.catalog import catalog

distributed = pytest.importorskip("distributed")
dd = pytest.importorskip("dask.dataframe")

DATA = Path(__file__).resolve().parents[1] / "data" / "r_datasets"


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    )
    c = distributed.Client(cluster)
    try:
        yield c
    finally:
        c.close()
        cluster.close()


def _plate(n: int, seed: int = 0) -> pd.DataFrame:
    m = catalog()["inhibition_4pl"]
    conc = np.repeat(np.logspace(-9, -4, 8), 3)
    rng = np.random.default_rng(seed)
    rows = []
    for g in range(n):
        p = {"zero_dose": 100.0, "full_effect": 5.0, "log_ic50": rng.uniform(-8, -5), "n_h": 1.2}
        y = m.eval(conc, p) + rng.normal(0, 2.0, conc.size)
        rows += [
            {"plate": g % 3, "well": f"w{g:03d}", "conc": c, "resp": v}
            for c, v in zip(conc, y, strict=True)
        ]
    return pd.DataFrame(rows)


def test_dask_results_are_the_local_ones(client: Any) -> None:
    df = pd.read_csv(DATA / "DNase.csv")
    local = cw.fit_groups(
        "stimulation_4pl", data=df, x="conc", y="density", by="Run", progress=False
    )
    remote = cw.fit_groups(
        "stimulation_4pl",
        data=df,
        x="conc",
        y="density",
        by="Run",
        backend="dask",
        client=client,
        groups_per_task=4,  # three tasks for eleven groups
        progress=False,
    )
    assert remote.to_json() == local.to_json()
    # a dask DataFrame, partitioned across group boundaries on purpose, gives the same
    plate = _plate(30)
    ddf = dd.from_pandas(plate, npartitions=4)
    here = cw.fit_groups(
        "inhibition_4pl", data=plate, x="conc", y="resp", by=["plate", "well"], progress=False
    )
    there = cw.fit_groups(
        "inhibition_4pl",
        data=ddf,
        x="conc",
        y="resp",
        by=["plate", "well"],
        backend="dask",
        client=client,
        groups_per_task=10,
        progress=False,
    )
    assert there.to_json() == here.to_json()


class _Unreadable:
    """A cell that pickles fine but cannot be read back: unpickling divides one by zero."""

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        return (operator.truediv, (1, 0))


def test_a_partition_whose_task_raises_fails_its_groups_only(client: Any) -> None:
    df = _plate(12)
    df["resp"] = df["resp"].astype(object)
    first_of_last_group = df.index[df["well"] == "w011"][0]
    df.loc[first_of_last_group, "resp"] = _Unreadable()  # the worker's unpickling raises
    batch = cw.fit_groups(
        "inhibition_4pl",
        data=df,
        x="conc",
        y="resp",
        by="well",
        backend="dask",
        client=client,
        groups_per_task=4,
        progress=False,
    )
    assert len(batch) == 12
    bad = [f"w{g:03d}" for g in range(8, 12)]  # the third task's four groups
    for lab in batch.labels:
        i = batch.labels.index(lab)
        if lab in bad:
            assert batch.statuses[i] == "failed"
            assert "Dask task of this partition failed" in batch.reasons[i]
            assert "deserialization" in batch.reasons[i]
        else:
            assert batch.statuses[i] != "failed", batch.reasons[i]


def test_without_dask_the_error_says_how_to_install(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as when not installed
    with pytest.raises(cw.DependencyError, match=r'pip install "curvewright\[dask\]"'):
        cw.fit_groups(
            "inhibition_4pl", data=_plate(1), x="conc", y="resp", by="well", backend="dask"
        )


def test_without_a_client_a_local_cluster_is_started_for_the_call() -> None:
    plate = _plate(3)
    local = cw.fit_groups(
        "inhibition_4pl", data=plate, x="conc", y="resp", by="well", progress=False
    )
    remote = cw.fit_groups(
        "inhibition_4pl", data=plate, x="conc", y="resp", by="well", backend="dask", progress=False
    )
    assert remote.to_json() == local.to_json()
