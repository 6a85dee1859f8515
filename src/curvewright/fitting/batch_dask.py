"""The Dask backend of :func:`fit_groups`: partitions of whole groups, one task each.

Each task runs the local batch code (:func:`.batch.run_table`) on a pandas table holding whole
groups, thousands per task (Dask's overhead is about a millisecond per task, so never one task
per group). A task that raises (a worker that cannot read its partition, a worker lost) fails
the groups of that partition with the reason; the others come back. The parts are joined in
the local backend's group order, so the result is the local one.
"""

from __future__ import annotations

import contextlib
import math
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..batch_result import BatchResult, combine
from ..data import check_group_columns, labels_of, plain_key
from ..errors import DataError, DependencyError, ParameterError
from .batch_kernel import serial
from .batch_run import _Request, check_frame, failed_part, run_table

__all__ = ["run_dask"]

_EXCLUDE = "__curvewright_exclude__"
_SIGMA = "__curvewright_sigma__"

INSTALL = 'pip install "curvewright[dask]"'


def _modules() -> tuple[Any, Any]:
    try:
        import dask.dataframe as dd
        import distributed
    except ImportError as exc:
        raise DependencyError(
            f"backend='dask' needs the dask and distributed packages ({exc}); install them "
            f"with: {INSTALL}"
        ) from exc
    return dd, distributed


def run_dask(
    req: _Request,
    data: Any,
    *,
    sigma: ArrayLike | str | None,
    exclude: ArrayLike | None,
    client: Any,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    progress: bool,
    groups_per_task: int,
) -> BatchResult:
    """Fit the groups of ``data`` (pandas or dask DataFrame) on a dask.distributed cluster."""
    dd, distributed = _modules()
    by = list(req.by)
    is_dask = isinstance(data, dd.DataFrame)
    if not is_dask and not isinstance(data, pd.DataFrame):
        raise DataError(
            "fit_groups needs data= as a pandas or dask DataFrame holding the x, y and group "
            f"columns; got {type(data).__name__}."
        )
    for c in [*by, req.x, req.y, *([sigma] if isinstance(sigma, str) else [])]:
        if c not in data.columns:
            raise DataError(
                f"{c!r} is not a column of data; its columns are {[str(k) for k in data.columns]}."
            )
    own = None
    if client is None:
        # A cluster for this call only: its dashboard on a free port, not a fixed one in use.
        own = distributed.Client(distributed.LocalCluster(processes=True, dashboard_address=":0"))
        client = own
    try:
        if is_dask:
            return _run_dask_frame(
                req,
                data,
                dd,
                distributed,
                client,
                sigma,
                exclude,
                deadline,
                cancel,
                progress,
                groups_per_task,
            )
        return _run_pandas(
            req,
            data,
            distributed,
            client,
            sigma,
            exclude,
            deadline,
            cancel,
            progress,
            groups_per_task,
        )
    finally:
        if own is not None:
            cluster = own.cluster
            own.close()
            if cluster is not None:
                cluster.close()


def _work_table(
    req: _Request, data: pd.DataFrame, sigma: ArrayLike | str | None, exclude: ArrayLike | None
) -> tuple[pd.DataFrame, str | None, str | None]:
    """The columns the tasks need, with array sigma and exclusions as columns."""
    cols = [*req.by, req.x, req.y] + ([sigma] if isinstance(sigma, str) else [])
    work = data[list(dict.fromkeys(cols))].copy()
    sig_col = sigma if isinstance(sigma, str) else None
    ex_col = None
    n = len(work)
    if sigma is not None and not isinstance(sigma, str):
        s = np.asarray(sigma, dtype=float).ravel()
        if s.size != n:
            raise DataError(f"sigma needs one value per table row ({n}), got {s.size}.")
        work[_SIGMA] = s
        sig_col = _SIGMA
    if exclude is not None:
        ex = np.asarray(exclude)
        mask = np.zeros(n, dtype=bool)
        if ex.dtype == bool:
            if ex.shape != (n,):
                raise DataError(f"exclude as a mask needs one value per table row ({n}).")
            mask = ex.copy()
        else:
            idx = ex.astype(int).ravel()
            if idx.size and (idx.min() < -n or idx.max() >= n):
                raise DataError(f"exclude has row positions outside 0..{n - 1}.")
            mask[idx] = True
        work[_EXCLUDE] = mask
        ex_col = _EXCLUDE
    return work, sig_col, ex_col


def _task(
    req: _Request,
    part: pd.DataFrame,
    ex_col: str | None,
    sig_col: str | None,
    deadline: float | None,
) -> BatchResult:
    with serial():  # the workers are the parallelism: no engine threads inside a task
        return run_table(req, part, exclude_col=ex_col, sigma_col=sig_col, deadline=deadline)


def _gather(
    distributed: Any,
    client: Any,
    futures: list[Any],
    total: int,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    progress: bool,
) -> list[BatchResult | str]:
    """Wait for the tasks: each one's part, or why it has none (it raised, or was stopped)."""
    from tqdm.auto import tqdm

    out: list[BatchResult | str] = ["not run"] * len(futures)
    pending = set(range(len(futures)))
    with tqdm(total=total, disable=not progress, desc="fitting groups", unit="group") as bar:
        while pending:
            stopped = None
            if cancel is not None and cancel():
                stopped = "cancelled"
            elif deadline is not None and time.time() >= deadline:
                stopped = "timed out"
            if stopped:
                client.cancel([futures[i] for i in pending])
                for i in pending:
                    out[i] = f"not run: {stopped}"
                break
            # Short waits, so cancel and the time limit are seen while tasks run.
            with contextlib.suppress(TimeoutError):
                distributed.wait(
                    [futures[i] for i in pending], timeout=0.2, return_when="FIRST_COMPLETED"
                )
            for i in sorted(pending):
                f = futures[i]
                if f.status == "finished":
                    part = f.result()
                    out[i] = part
                    bar.update(len(part))
                elif f.status in ("error", "cancelled", "lost"):
                    try:
                        exc = f.exception()
                        first = (str(exc).strip().splitlines() or [""])[0]
                        why = f"{type(exc).__name__}: {first}"
                    except Exception as e:  # a cancelled future has no exception to give
                        why = type(e).__name__
                    out[i] = f"the Dask task of this partition failed ({why})"
                else:
                    continue
                pending.discard(i)
    return out


def _run_pandas(
    req: _Request,
    data: pd.DataFrame,
    distributed: Any,
    client: Any,
    sigma: ArrayLike | str | None,
    exclude: ArrayLike | None,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    progress: bool,
    groups_per_task: int,
) -> BatchResult:
    if len(data) == 0:
        raise DataError("data= is an empty table: there are no rows to fit.")
    check_group_columns(data, req.by)
    work, sig_col, ex_col = _work_table(req, data, sigma, exclude)
    grouped = work.groupby(list(req.by), sort=True, dropna=False).indices
    several = len(req.by) > 1
    keys = [plain_key(k, several) for k in grouped]
    if req.frame is not None:
        check_frame(req.frame, keys, labels_of(keys))
    positions = list(grouped.values())
    futures, part_keys = [], []
    req_f = client.scatter(req, broadcast=True)
    for a in range(0, len(keys), groups_per_task):
        rows = np.concatenate(positions[a : a + groups_per_task])
        part = work.iloc[np.sort(rows)]
        futures.append(
            client.submit(_task, req_f, part, ex_col, sig_col, deadline, pure=False, retries=0)
        )
        part_keys.append(keys[a : a + groups_per_task])
    got = _gather(distributed, client, futures, len(keys), deadline, cancel, progress)
    return combine(
        [
            p if isinstance(p, BatchResult) else failed_part(req, k, p)
            for p, k in zip(got, part_keys, strict=True)
        ]
    )


def _run_dask_frame(
    req: _Request,
    data: Any,
    dd: Any,
    distributed: Any,
    client: Any,
    sigma: ArrayLike | str | None,
    exclude: ArrayLike | None,
    deadline: float | None,
    cancel: Callable[[], bool] | None,
    progress: bool,
    groups_per_task: int,
) -> BatchResult:
    if exclude is not None:
        raise ParameterError(
            "exclude= takes row positions, which a dask DataFrame does not have; drop the rows "
            "(ddf[~ddf.bad]) before calling fit_groups."
        )
    if sigma is not None and not isinstance(sigma, str):
        raise ParameterError("with a dask DataFrame give sigma= as a column name.")
    by = list(req.by)
    cols = list(dict.fromkeys([*by, req.x, req.y] + ([sigma] if isinstance(sigma, str) else [])))
    ddf = data[cols]
    key_table = ddf[by].drop_duplicates().compute()
    if len(key_table) == 0:
        raise DataError("data= is an empty table: there are no rows to fit.")
    if key_table.isna().any().any():
        raise DataError("a group column is empty (NaN) in some rows: every row needs a group.")
    key_table = key_table.sort_values(by).reset_index(drop=True)
    several = len(by) > 1
    keys = [plain_key(tuple(r), several) for r in key_table.itertuples(index=False)]
    if req.frame is not None:
        check_frame(req.frame, keys, labels_of(keys))
    nparts = max(1, math.ceil(len(keys) / groups_per_task))
    shuffled = ddf.shuffle(on=by, npartitions=nparts)
    req_f = client.scatter(req, broadcast=True)
    futures = [
        client.submit(_task, req_f, p, None, sigma, deadline, pure=False, retries=0)
        for p in client.compute(shuffled.to_delayed())
    ]
    got = _gather(distributed, client, futures, len(keys), deadline, cancel, progress)
    # Which groups a partition holds is known only once it is computed: the groups no part
    # returned were in the partitions that failed.
    parts = [p for p in got if isinstance(p, BatchResult) and len(p)]
    seen = {k for p in parts for k in p.keys}
    missing = [k for k in keys if k not in seen]
    if missing:
        why = next((p for p in got if isinstance(p, str)), "not returned by any task")
        parts.append(failed_part(req, missing, why))
    whole = combine(parts)
    order = {k: i for i, k in enumerate(keys)}
    return whole.take(sorted(range(len(whole)), key=lambda i: order[whole.keys[i]]))
