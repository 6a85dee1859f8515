"""Datasets: validated x, y and standard deviations with an exclusion mask.

A :class:`Dataset` is what a fit consumes, and the x-axis rules drawn on it (log or linear, the
sample grid of a curve). The fitting core takes a tuple of them so global fits
across several datasets can share parameters later; today's ``fit`` passes one.
:func:`split_groups` checks a long table and splits it into one Dataset per group (the input of
``fit_global`` and ``fit_groups``).
"""

from __future__ import annotations

import copy
import difflib
import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .errors import DataError

__all__ = [
    "SCALES",
    "Dataset",
    "GroupDatasets",
    "Groups",
    "group_label",
    "labels_of",
    "make_dataset",
    "Scale",
    "auto_x_scale",
    "check_scale",
    "sample_x",
    "split_groups",
]

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]

Scale = Literal["linear", "log"]
SCALES: tuple[Scale, ...] = ("linear", "log")


def _frozen(a: NDArray[Any]) -> NDArray[Any]:
    a = np.array(a, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Dataset:
    """One set of observations.

    Attributes
    ----------
    x, y : ndarray
        All finite observations, in the order given (rows with NaN already dropped).
    sigma : ndarray or None
        Standard deviation of each y, when known.
    include : ndarray of bool
        ``True`` for points used in the fit; excluded points stay here for display.
    row : ndarray of int
        Position of each point in the input the user gave (before NaN rows were dropped), so
        exclusions and residuals map back to the user's table.
    n_dropped : int
        How many input rows were dropped because x, y or sigma was NaN.
    n_input : int
        How many rows the user's input had, dropped ones included (the range of valid row
        numbers for exclusions).
    x_label, y_label, name : str
        Labels for display (column names when built from a DataFrame).
    notes : tuple of str
        What validation did to the input (e.g. how many NaN rows were dropped), for the summary.
    """

    x: FloatArray
    y: FloatArray
    include: BoolArray
    row: NDArray[np.int64]
    sigma: FloatArray | None = None
    n_dropped: int = 0
    n_input: int = 0
    x_label: str = "x"
    y_label: str = "y"
    name: str = ""
    notes: tuple[str, ...] = field(default=())

    @property
    def n(self) -> int:
        """Number of points used in the fit."""
        return int(self.include.sum())

    @property
    def x_used(self) -> FloatArray:
        """x of the included points."""
        return self.x[self.include]

    @property
    def y_used(self) -> FloatArray:
        """y of the included points."""
        return self.y[self.include]

    @property
    def sigma_used(self) -> FloatArray | None:
        """sigma of the included points, if known."""
        return None if self.sigma is None else self.sigma[self.include]

    @property
    def excluded_rows(self) -> list[int]:
        """Input rows excluded by the user."""
        return [int(r) for r in self.row[~self.include]]

    def with_exclusions(self, exclude: ArrayLike | None) -> Dataset:
        """A copy with a new exclusion (indices or boolean mask over the input rows)."""
        inc = _include_mask(exclude, self.row, self.n_input)
        return Dataset(
            x=self.x,
            y=self.y,
            include=_frozen(inc),
            row=self.row,
            sigma=self.sigma,
            n_dropped=self.n_dropped,
            n_input=self.n_input,
            x_label=self.x_label,
            y_label=self.y_label,
            name=self.name,
            notes=self.notes,
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (floats are kept exactly: JSON round-trips IEEE doubles)."""
        return {
            "x": self.x.tolist(),
            "y": self.y.tolist(),
            "include": self.include.tolist(),
            "row": self.row.tolist(),
            "sigma": None if self.sigma is None else self.sigma.tolist(),
            "n_dropped": self.n_dropped,
            "n_input": self.n_input,
            "x_label": self.x_label,
            "y_label": self.y_label,
            "name": self.name,
            "notes": list(self.notes),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Dataset:
        """Inverse of :meth:`to_dict`."""
        return cls(
            x=_frozen(np.asarray(d["x"], dtype=float)),
            y=_frozen(np.asarray(d["y"], dtype=float)),
            include=_frozen(np.asarray(d["include"], dtype=bool)),
            row=_frozen(np.asarray(d["row"], dtype=np.int64)),
            sigma=None if d.get("sigma") is None else _frozen(np.asarray(d["sigma"], dtype=float)),
            n_dropped=int(d.get("n_dropped", 0)),
            n_input=int(d.get("n_input", len(d["x"]))),
            x_label=d.get("x_label", "x"),
            y_label=d.get("y_label", "y"),
            name=d.get("name", ""),
            notes=tuple(d.get("notes", ())),
        )

    def same_observations(self, other: Dataset) -> bool:
        """Whether two datasets hold the same used points and standard deviations."""
        if self.n != other.n:
            return False
        same_xy = np.array_equal(self.x_used, other.x_used) and np.array_equal(
            self.y_used, other.y_used
        )
        if not same_xy:
            return False
        if (self.sigma is None) != (other.sigma is None):
            return False
        s1, s2 = self.sigma_used, other.sigma_used
        return s1 is None or s2 is None or np.array_equal(s1, s2)


def _column_name(data: pd.DataFrame, name: object, role: str) -> str:
    if not isinstance(name, str):
        raise DataError(f"{role} must name a column of data (a string), got {type(name).__name__}.")
    if name not in data.columns:
        cols = [str(c) for c in data.columns]
        hint = difflib.get_close_matches(name, cols, n=1)
        did = f" Did you mean {hint[0]!r}?" if hint else ""
        raise DataError(f"{role}={name!r} is not a column of data; columns are {cols}.{did}")
    return name


def _column(data: pd.DataFrame, name: object, role: str) -> tuple[NDArray[Any], str]:
    name = _column_name(data, name, role)
    col = data[name]
    if not (pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col)):
        sample = [v for v in col.tolist() if not _is_number(v)][:3]
        raise DataError(
            f"Column {name!r} ({role}) is not numeric (dtype {col.dtype}; e.g. {sample}). "
            "Convert it, e.g. pd.to_numeric(df[col], errors='coerce'), and drop the rows that fail."
        )
    return col.to_numpy(dtype=float, na_value=np.nan), name


def _is_number(v: object) -> bool:
    return isinstance(v, (int, float, np.number)) and not isinstance(v, bool)


def _array(a: ArrayLike, role: str) -> FloatArray:
    try:
        arr = np.asarray(a)
    except Exception as exc:  # ragged lists etc.
        raise DataError(f"{role} could not be read as an array: {exc}.") from exc
    if arr.dtype == object or arr.dtype.kind in "USbM":
        try:
            arr = arr.astype(float)
        except (TypeError, ValueError) as exc:
            raise DataError(
                f"{role} must be numeric; it holds {arr.dtype} values such as {arr.ravel()[:3]!r}. "
                "Convert them to numbers first."
            ) from exc
    if arr.dtype.kind == "c":
        raise DataError(f"{role} is complex; give real numbers.")
    arr = np.asarray(arr, dtype=float)
    if arr.ndim != 1:
        if arr.ndim == 2 and 1 in arr.shape:
            arr = arr.ravel()
        else:
            raise DataError(f"{role} must be one-dimensional, got shape {arr.shape}.")
    return arr


def _include_mask(exclude: ArrayLike | None, row: NDArray[np.int64], n_input: int) -> BoolArray:
    """Turn ``exclude`` (input rows: indices or a boolean mask) into an include mask.

    The mask is over the kept rows (after NaN rows were dropped).
    """
    inc = np.ones(row.shape, dtype=bool)
    if exclude is None:
        return inc
    ex = np.asarray(exclude)
    if ex.size == 0:
        return inc
    if ex.dtype == bool:
        if ex.shape != (n_input,):
            raise DataError(
                f"exclude as a boolean mask must have one entry per input row ({n_input}), "
                f"got shape {ex.shape}."
            )
        return ~ex[row]
    if ex.dtype.kind not in "iu":
        raise DataError(
            f"exclude must be row indices (integers) or a boolean mask, got dtype {ex.dtype}."
        )
    bad = ex[(ex < 0) | (ex >= n_input)]
    if bad.size:
        raise DataError(
            f"exclude names rows {bad[:5].tolist()} outside 0..{n_input - 1}; "
            "use indices of the input rows."
        )
    return ~np.isin(row, ex)


def make_dataset(
    x: ArrayLike | str | None = None,
    y: ArrayLike | str | None = None,
    *,
    data: pd.DataFrame | Mapping[str, Any] | None = None,
    sigma: ArrayLike | str | None = None,
    exclude: ArrayLike | None = None,
    name: str = "",
) -> Dataset:
    """Validate observations and build a :class:`Dataset`.

    Parameters
    ----------
    x, y : array-like or str
        The observations, or column names of ``data``.
    data : DataFrame or mapping, optional
        A table holding the columns named by ``x``, ``y`` (and ``sigma``).
    sigma : array-like or str, optional
        Standard deviation of each y (positive), or a column name.
    exclude : array-like, optional
        Input rows to leave out of the fit: integer indices or a boolean mask (True = exclude).

    Raises
    ------
    DataError
        Length mismatch, infinite values, non-numeric or unknown columns, bad sigma.

    Notes
    -----
    Rows where x, y or sigma is NaN are dropped and counted (``n_dropped``); infinite values are
    an error because they are almost always a unit or transform mistake.
    """
    x_label, y_label = "x", "y"
    if data is not None:
        df = data if isinstance(data, pd.DataFrame) else pd.DataFrame(dict(data))
        if x is None or y is None:
            raise DataError("With data=..., give the column names too: x='col', y='col'.")
        xa, x_label = _column(df, x, "x")
        ya, y_label = _column(df, y, "y")
        sa = (
            None
            if sigma is None
            else (
                _column(df, sigma, "sigma")[0] if isinstance(sigma, str) else _array(sigma, "sigma")
            )
        )
    else:
        if x is None or y is None:
            raise DataError("Give both x and y (arrays), or data=DataFrame with column names.")
        if isinstance(x, str) or isinstance(y, str):
            raise DataError(
                f"x={x!r}, y={y!r} look like column names but no data= table was given."
            )
        xa, ya = _array(x, "x"), _array(y, "y")
        if isinstance(sigma, str):
            raise DataError(f"sigma={sigma!r} looks like a column name but no data= was given.")
        sa = None if sigma is None else _array(sigma, "sigma")
        for src, attr in ((x, "name"), (y, "name")):
            label = getattr(src, attr, None)
            if isinstance(label, str) and label:
                if src is x:
                    x_label = label
                else:
                    y_label = label
    if xa.shape != ya.shape:
        raise DataError(
            f"x and y must have the same length; got {xa.size} x values and {ya.size} y values."
        )
    if sa is not None:
        if sa.ndim == 0 or sa.shape == ():
            sa = np.full(xa.shape, float(sa))
        if sa.shape != xa.shape:
            raise DataError(f"sigma must have one value per point ({xa.size}), got {sa.size}.")
    n_input = xa.size
    for arr, role in ((xa, "x"), (ya, "y"), (sa, "sigma")):
        if arr is not None and np.isinf(arr).any():
            idx = np.flatnonzero(np.isinf(arr))[:5].tolist()
            raise DataError(
                f"{role} holds infinite values at rows {idx}; remove or correct them "
                "(an infinity usually means a failed transform such as log(0))."
            )
    nan = np.isnan(xa) | np.isnan(ya)
    if sa is not None:
        nan |= np.isnan(sa)
    keep = ~nan
    row = np.flatnonzero(keep).astype(np.int64)
    inc = _include_mask(exclude, row, n_input)
    xk, yk = xa[keep], ya[keep]
    sk = None if sa is None else sa[keep]
    if sk is not None and np.any(sk <= 0):
        idx = row[sk <= 0][:5].tolist()
        raise DataError(
            f"sigma must be positive; rows {idx} have sigma <= 0. Give their standard deviation, "
            "or exclude those rows."
        )
    notes: tuple[str, ...] = ()
    if nan.any():
        notes = (_nan_note(int(nan.sum())),)
    if xk.size == 0:
        raise DataError("No finite observations are left after dropping NaN rows.")
    return Dataset(
        x=_frozen(xk),
        y=_frozen(yk),
        include=_frozen(inc),
        row=_frozen(row),
        sigma=None if sk is None else _frozen(sk),
        n_dropped=int(nan.sum()),
        n_input=n_input,
        x_label=str(x_label),
        y_label=str(y_label),
        name=name,
        notes=notes,
    )


def _nan_note(k: int) -> str:
    return f"{k} row(s) with a missing (NaN) value were dropped."


def as_datasets(datasets: Dataset | Sequence[Dataset]) -> tuple[Dataset, ...]:
    """Normalise one dataset or several to a tuple (the fitting core's input)."""
    if isinstance(datasets, Dataset):
        return (datasets,)
    return tuple(datasets)


# ============================================================================ groups
def group_label(key: object) -> str:
    """The display label of a group key: the value itself, or ``"a / b"`` for several columns.

    Parameters
    ----------
    key : object
        A value of the ``by`` column, or a tuple of values when ``by`` names several columns.

    Returns
    -------
    str
    """
    if isinstance(key, tuple):
        return " / ".join(str(k) for k in key)
    return str(key)


def labels_of(keys: Sequence[object]) -> tuple[str, ...]:
    """Display labels of group keys; distinct keys with the same text get ``#2``, ``#3``."""
    if not any(isinstance(k, tuple) for k in keys):
        plain = tuple(str(k) for k in keys)
        if len(set(plain)) == len(plain):
            return plain  # the usual case, thousands of groups: no text shared
    out: list[str] = []
    seen: set[str] = set()
    for k in keys:
        lab = group_label(k)
        base, i = lab, 1
        while lab in seen:
            i += 1
            lab = f"{base} #{i}"
        out.append(lab)
        seen.add(lab)
    return tuple(out)


class GroupPositions(Sequence[NDArray[np.intp]]):
    """Each group's row positions in the table (``Groups.positions``): views of one array.

    Group ``g``'s rows, in table order, are ``order[offsets[g]:offsets[g + 1]]``: one sort of
    the rows by group instead of one array per group.
    """

    def __init__(self, order: NDArray[np.intp], offsets: NDArray[np.intp]) -> None:
        self.order, self.offsets = order, offsets

    def __len__(self) -> int:
        return int(self.offsets.size - 1)

    def __getitem__(self, i: Any) -> Any:
        n = len(self)
        if isinstance(i, slice):
            return tuple(self[j] for j in range(*i.indices(n)))
        j = int(i)
        if j < 0:
            j += n
        if not 0 <= j < n:
            raise IndexError(f"group {i} out of range (there are {n}).")
        return self.order[self.offsets[j] : self.offsets[j + 1]]


class GroupDatasets(Sequence["Dataset | None"]):
    """Each group's :class:`Dataset`, built when first asked for (``Groups.datasets``).

    A batch fit reads its groups from the arrays of :class:`Groups`; a Dataset is made only for
    a group that needs one (its per-group fit, ``batch[group]``, the JSON form), from the
    table's columns as :func:`split_groups` read them, and kept.
    """

    def __init__(
        self,
        n: int,
        *,
        order: NDArray[np.intp],
        offsets: NDArray[np.intp],
        x: FloatArray,
        y: FloatArray,
        sigma: FloatArray | None,
        nan: BoolArray,
        exclude: BoolArray | None,
        x_label: str,
        y_label: str,
        labels: Sequence[str],
        made: Mapping[int, Dataset | None],
    ) -> None:
        self._n = n
        self._order, self._offsets = order, offsets
        self._x, self._y, self._sigma, self._nan, self._exclude = x, y, sigma, nan, exclude
        self._x_label, self._y_label, self._labels = x_label, y_label, labels
        self._made: dict[int, Dataset | None] = dict(made)

    def __len__(self) -> int:
        return self._n

    def __iter__(self) -> Iterator[Dataset | None]:
        return (self._get(i) for i in range(self._n))

    def __getitem__(self, i: Any) -> Any:
        if isinstance(i, slice):
            return tuple(self._get(j) for j in range(*i.indices(self._n)))
        j = int(i)
        if j < 0:
            j += self._n
        if not 0 <= j < self._n:
            raise IndexError(f"group {i} out of range (there are {self._n}).")
        return self._get(j)

    def replaced(self, g: int, dataset: Dataset | None) -> GroupDatasets:
        """A copy with group ``g``'s Dataset replaced (the arrays are shared, nothing is built)."""
        out = copy.copy(self)
        out._made = {**self._made, g: dataset}
        return out

    def _get(self, g: int) -> Dataset | None:
        if g not in self._made:
            self._made[g] = self._build(g)
        return self._made[g]

    def _build(self, g: int) -> Dataset:
        # The Dataset make_dataset builds from these finite rows (tests/test_data.py checks
        # they are the same), without its per-call checks.
        pos = self._order[self._offsets[g] : self._offsets[g + 1]]
        nan = self._nan[pos]
        keep = ~nan
        row = np.flatnonzero(keep).astype(np.int64)
        k = int(nan.sum())
        ex = None if self._exclude is None else self._exclude[pos]
        return Dataset(
            x=_frozen(self._x[pos][keep]),
            y=_frozen(self._y[pos][keep]),
            include=_frozen(np.ones(row.size, dtype=bool) if ex is None else ~ex[row]),
            row=_frozen(row),
            sigma=None if self._sigma is None else _frozen(self._sigma[pos][keep]),
            n_dropped=k,
            n_input=len(pos),
            x_label=self._x_label,
            y_label=self._y_label,
            name=self._labels[g],
            notes=(_nan_note(k),) if k else (),
        )


@dataclass(frozen=True, eq=False)
class Groups:
    """A long table checked and split by its group columns (:func:`split_groups`).

    Attributes
    ----------
    by : tuple of str
        The grouping columns.
    keys : tuple
        Each group's key (a value of ``by``, or a tuple of values for several columns), sorted.
    labels : tuple of str
        Their display labels (:func:`labels_of`).
    positions : GroupPositions
        Each group's row positions in the table, in table order (a sequence of int arrays).
    datasets : sequence of Dataset or None
        Each group's observations (a :class:`GroupDatasets`, built on use, or a tuple); None
        where the group's data could not be read (with ``errors="keep"``), its error then in
        ``errors``.
    errors : tuple of DataError or None
        Why a group's data could not be read (``errors="keep"`` only; the message is about
        that group's rows, numbered within the group).
    constants : tuple of dict
        Each group's values of the ``constants`` columns.
    n_used, n_dropped : ndarray of int, shape (G,)
        Each group's used points and dropped NaN rows (0 and 0 where ``datasets`` is None).
    used_x, used_y : ndarray
        Every group's used points one group after the other (``datasets[g].x_used`` is
        ``used_x[used_offsets[g]:used_offsets[g + 1]]``).
    used_sigma : ndarray or None
        Their standard deviations, None when the table has none.
    used_offsets : ndarray of int, shape (G + 1,)
        Where each group's used points start in ``used_x``.
    """

    by: tuple[str, ...]
    keys: tuple[Any, ...]
    labels: tuple[str, ...]
    positions: GroupPositions
    datasets: Sequence[Dataset | None]
    errors: tuple[DataError | None, ...]
    constants: tuple[dict[str, float], ...]
    n_used: NDArray[np.int64]
    n_dropped: NDArray[np.int64]
    used_x: FloatArray
    used_y: FloatArray
    used_sigma: FloatArray | None
    used_offsets: NDArray[np.intp]

    def __len__(self) -> int:
        return len(self.keys)

    def padded(
        self, idx: Sequence[int] | NDArray[np.intp], *, fill: str = "nan"
    ) -> tuple[FloatArray, FloatArray, FloatArray | None, BoolArray]:
        """The used points of groups ``idx`` as padded ``(len(idx), N)`` arrays, in one scatter.

        Parameters
        ----------
        idx : sequence of int
            The groups, in the order of the rows wanted.
        fill : {"nan", "first"}
            Padding: NaN, or a group's first point (x 1.0, y 0.0 for a group without points)
            with sigma 1, as :meth:`BatchProblem.from_groups` pads.

        Returns
        -------
        (x, y, sigma or None, mask)
            ``mask`` is True for a real point.
        """
        ix = np.asarray(idx, dtype=np.intp)
        lens = self.n_used[ix]
        n = int(lens.max()) if lens.size else 0
        mask = np.arange(n)[None, :] < lens[:, None]
        starts = self.used_offsets[ix]
        total = int(lens.sum())
        flat = np.arange(total) + np.repeat(starts - (np.cumsum(lens) - lens), lens)
        has = lens > 0
        first = np.minimum(starts, max(self.used_x.size - 1, 0))
        out: list[FloatArray | None] = []
        for arr, empty in ((self.used_x, 1.0), (self.used_y, 0.0), (self.used_sigma, 1.0)):
            if arr is None:
                out.append(None)
                continue
            if fill == "nan":
                a = np.full((ix.size, n), np.nan)
            else:
                pad = np.full(ix.size, empty)
                if arr is not self.used_sigma and arr.size:
                    pad[has] = arr[first[has]]
                a = np.repeat(pad[:, None], n, axis=1)
            a[mask] = arr[flat]
            out.append(a)
        x, y, s = out
        assert x is not None and y is not None
        return x, y, s, mask


def _used_arrays(
    datasets: Sequence[Dataset | None], has_sigma: bool
) -> tuple[FloatArray, FloatArray, FloatArray | None, NDArray[np.intp]]:
    """The used points of datasets made one by one, joined (the group-by-group split)."""
    ds = [d for d in datasets if d is not None]
    n = np.array([0 if d is None else d.n for d in datasets], dtype=np.intp)
    off = np.zeros(len(datasets) + 1, dtype=np.intp)
    off[1:] = np.cumsum(n)

    def cat(parts: list[FloatArray]) -> FloatArray:
        return np.concatenate(parts) if parts else np.zeros(0)

    sig = None
    if has_sigma:
        sig = cat([d.sigma_used for d in ds if d.sigma_used is not None])
    return cat([d.x_used for d in ds]), cat([d.y_used for d in ds]), sig, off


def plain_key(key: Any, several: bool = True) -> Any:
    """A group key as plain Python values (numpy scalars unwrapped).

    With one group column (not ``several``) pandas' 1-tuple key is unboxed.
    """
    k = key if several else (key[0] if isinstance(key, tuple) else key)
    if isinstance(k, tuple):
        return tuple(v.item() if isinstance(v, np.generic) else v for v in k)
    return k.item() if isinstance(k, np.generic) else k


def _numeric_column(col: pd.Series) -> bool:
    return bool(pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col))


def check_group_columns(
    data: pd.DataFrame, by: Sequence[str], constants: Sequence[str] = ()
) -> None:
    """Check a table's group (and per-group constant) columns: present, and no group missing.

    Raises
    ------
    DataError
        A column the table does not have (with the closest name), or a group column with a
        missing value (naming the first rows).
    """
    for role, names in (("by", by), ("constants", constants)):
        for c in names:
            if c not in data.columns:
                cols = [str(k) for k in data.columns]
                hint = difflib.get_close_matches(str(c), cols, n=1)
                did = f" Did you mean {hint[0]!r}?" if hint else ""
                raise DataError(
                    f"{role}= names column {c!r}, which the table does not have; its columns "
                    f"are {cols}.{did}"
                )
    for c in by:
        miss = data[c].isna().to_numpy()
        if miss.any():
            rows = np.flatnonzero(miss)[:5].tolist()
            raise DataError(
                f"the group column {c!r} is empty (NaN) in rows {rows}: every row needs a group. "
                "Fill those cells or drop the rows before fitting."
            )


def split_groups(
    data: Any,
    x: str,
    y: str,
    by: Sequence[str],
    *,
    sigma: ArrayLike | str | None = None,
    exclude: ArrayLike | None = None,
    constants: Sequence[str] = (),
    errors: str = "raise",
    caller: str = "fit_global",
) -> Groups:
    """Check a long table (one row per observation) and split it into one Dataset per group.

    Parameters
    ----------
    data : DataFrame
        The table, with the x, y and group columns.
    x, y : str
        Column names of the observations.
    by : sequence of str
        Grouping column(s); every row needs a value in each.
    sigma : str or array_like, optional
        Column name (or one value per table row) of the standard deviation of each y.
    exclude : array_like, optional
        Rows to leave out: positions (0-based) or a boolean mask over the rows.
    constants : sequence of str
        Columns that must hold one finite number per group (read into ``Groups.constants``).
    errors : {"raise", "keep"}
        What a group whose data cannot be read does: ``"raise"`` raises its
        :class:`~curvewright.errors.DataError` (naming the group); ``"keep"`` records it in
        ``Groups.errors`` (dataset None) and goes on, and reads a column of mixed Python
        objects group by group, so only the groups holding a non-number fail.
    caller : str
        The function named in the error about a table that is not a DataFrame.

    Returns
    -------
    Groups

    Raises
    ------
    DataError
        Not a DataFrame, a missing column, a group column with a missing value, bad
        ``exclude`` or ``sigma``, a constant that varies within a group, and (with
        ``errors="raise"``) whatever :func:`make_dataset` refuses in a group.
    """
    if errors not in ("raise", "keep"):
        raise ValueError(f"errors must be 'raise' or 'keep', got {errors!r}.")
    if not isinstance(data, pd.DataFrame):
        raise DataError(
            f"{caller} needs data= as a pandas DataFrame holding the x, y and group columns; "
            f"got {type(data).__name__}."
        )
    check_group_columns(data, by, constants)
    for role, col in (("x", x), ("y", y)):
        if not isinstance(col, str):
            raise DataError(
                f"{role}= must be a column name of data= in a grouped fit, got "
                f"{type(col).__name__}; put the values in the table."
            )
    if errors == "keep":
        # A missing column is a mistake in the call, not in one group: say it once.
        named: list[tuple[str, object]] = [("x", x), ("y", y), ("sigma", sigma)]
        for role, name in named:
            if isinstance(name, str):
                _column_name(data, name, role)
    n_rows = len(data)
    mask = np.zeros(n_rows, dtype=bool)
    if exclude is not None:
        ex = np.asarray(exclude)
        if ex.dtype == bool:
            if ex.shape != (n_rows,):
                raise DataError(
                    f"exclude as a mask needs one value per table row ({n_rows}), got {ex.size}."
                )
            mask = ex.copy()
        else:
            try:
                idx = ex.astype(int).ravel()
            except (TypeError, ValueError) as exc:
                raise DataError(
                    "exclude must be row positions (integers) or a boolean mask."
                ) from exc
            if idx.size and (idx.min() < -n_rows or idx.max() >= n_rows):
                raise DataError(f"exclude has row positions outside 0..{n_rows - 1}.")
            mask[idx] = True
    sig_col: str | None = None
    sig_arr: FloatArray | None = None
    if isinstance(sigma, str):
        sig_col = sigma
    elif sigma is not None:
        sig_arr = np.asarray(sigma, dtype=float).ravel()
        if sig_arr.size != n_rows:
            raise DataError(
                f"sigma needs one value per table row ({n_rows}), got {sig_arr.size}; or give "
                "a column name."
            )
    # Numeric columns are read once as arrays and sliced per group (the same values and
    # messages as reading each group's sub-table, without building thousands of sub-tables).
    cols = [c for c in (x, y, sig_col) if c is not None]
    whole: dict[str, FloatArray] = {}
    if all(c in data.columns for c in cols) and all(_numeric_column(data[c]) for c in cols):
        whole = {c: data[c].to_numpy(dtype=float, na_value=np.nan) for c in cols}
    clean: BoolArray | None = None
    if whole:
        xa, ya = whole[x], whole[y]
        sa = whole[sig_col] if sig_col is not None else sig_arr
        nan_all = np.isnan(xa) | np.isnan(ya)
        bad_all = np.isinf(xa) | np.isinf(ya)
        if sa is not None:
            nan_all |= np.isnan(sa)
            with np.errstate(invalid="ignore"):
                bad_all |= np.isinf(sa) | (sa <= 0)
        # Rows make_dataset accepts as they are; a group with any other row goes through it.
        clean = ~bad_all
    # Each row's group number (groups sorted by key) and the sorted keys, instead of pandas'
    # dict of one index array per group: the rows of group g are order[off[g]:off[g + 1]].
    grouped = data.groupby(list(by), sort=True, dropna=False, observed=True)
    codes = grouped.ngroup().to_numpy(dtype=np.intp)
    index = grouped.size().index
    several = len(by) > 1
    labels: tuple[str, ...] | None = None
    if several:
        keys = [plain_key(k) for k in index]
    elif index.dtype.kind in "iu" or index.inferred_type == "string":
        # Integer or text keys (well numbers, compound names): already plain and distinct,
        # so their labels are their text, made without a Python call per group.
        keys = index.tolist()
        labels = tuple(map(str, keys))
    else:  # plain_key(k, False), inline: one call less per group
        raw = [c[0] if isinstance(c, tuple) else c for c in index.tolist()]
        keys = [k.item() if isinstance(k, np.generic) else k for k in raw]
    if labels is None:
        labels = labels_of(keys)
    order = np.argsort(codes, kind="stable").astype(np.intp, copy=False)
    off = np.zeros(len(keys) + 1, dtype=np.intp)
    off[1:] = np.cumsum(np.bincount(codes, minlength=len(keys)))
    group_rows = GroupPositions(order, off)
    if clean is not None and not constants:
        return _split_whole(
            by, keys, labels, group_rows, xa, ya, sa, nan_all, clean,
            mask if exclude is not None else None, x, y, errors,
        )  # fmt: skip
    datasets: list[Dataset | None] = []
    errs: list[DataError | None] = []
    consts: list[dict[str, float]] = []
    for pos, label in zip(group_rows, labels, strict=True):
        sub = None if whole and not constants else data.iloc[pos].reset_index(drop=True)
        cv: dict[str, float] = {}
        for c in constants:
            assert sub is not None
            col = pd.to_numeric(sub[c], errors="coerce").to_numpy(dtype=float)
            if not np.all(np.isfinite(col)):
                raise DataError(
                    f"constant column {c!r} is missing or not a finite number in group {label!r}; "
                    "each group needs one numeric value there."
                )
            if np.any(col != col[0]):
                raise DataError(
                    f"constant column {c!r} varies within group {label!r} (values "
                    f"{sorted(set(col.tolist()))[:5]}); a constant must be the same on every row "
                    f"of a group. Add {c!r} to by= to split the group, or correct the table."
                )
            cv[c] = float(col[0])
        ex_g = mask[pos] if exclude is not None else None
        try:
            if whole:
                ds = make_dataset(
                    whole[x][pos],
                    whole[y][pos],
                    sigma=whole[sig_col][pos]
                    if sig_col is not None
                    else (None if sig_arr is None else sig_arr[pos]),
                    exclude=ex_g,
                    name=label,
                )
                ds = replace(ds, x_label=x, y_label=y)
            else:
                assert sub is not None
                if errors == "keep":
                    sub = sub.infer_objects()
                ds = make_dataset(
                    x,
                    y,
                    data=sub,
                    sigma=sig_col
                    if sig_col is not None
                    else (None if sig_arr is None else sig_arr[pos]),
                    exclude=ex_g,
                    name=label,
                )
        except DataError as exc:
            # The same error, saying which group (a DataError subclass stays itself).
            if errors == "raise":
                raise type(exc)(f"group {label!r}: {exc}") from exc
            datasets.append(None)
            errs.append(exc)
        else:
            datasets.append(ds)
            errs.append(None)
        consts.append(cv)
    has_sigma = sig_col is not None or sig_arr is not None
    ux, uy, us, uoff = _used_arrays(datasets, has_sigma)
    return Groups(
        by=tuple(by),
        keys=tuple(keys),
        labels=labels,
        positions=group_rows,
        datasets=tuple(datasets),
        errors=tuple(errs),
        constants=tuple(consts),
        n_used=np.diff(uoff).astype(np.int64),
        n_dropped=np.array([0 if d is None else d.n_dropped for d in datasets], dtype=np.int64),
        used_x=ux,
        used_y=uy,
        used_sigma=us,
        used_offsets=uoff,
    )


def _split_whole(
    by: Sequence[str],
    keys: list[Any],
    labels: tuple[str, ...],
    positions: GroupPositions,
    xa: FloatArray,
    ya: FloatArray,
    sa: FloatArray | None,
    nan_all: BoolArray,
    clean: BoolArray,
    exclude: BoolArray | None,
    x: str,
    y: str,
    errors: str,
) -> Groups:
    """:func:`split_groups` of numeric columns: array operations over the table sorted by group.

    The rows are ordered by group once (each group's rows in table order); per-group counts
    of NaN rows, of rows ``make_dataset`` refuses (infinite, sigma <= 0) and of used points
    are sums over each group's run of rows (``np.add.reduceat``). A group with a refused row
    or no finite row goes through :func:`make_dataset` (its message, its error); the Datasets
    of the others are made only when asked for (:class:`GroupDatasets`).
    """
    pos = positions
    G = len(pos)
    order, off = pos.order, pos.offsets
    counts = np.diff(off)
    starts = off[:-1]
    nan_s = nan_all[order]
    n_nan = np.add.reduceat(nan_s.astype(np.int64), starts) if G else np.zeros(0, np.int64)
    n_bad = np.add.reduceat((~clean[order]).astype(np.int64), starts) if G else n_nan
    ok = (n_bad == 0) & (n_nan < counts)
    gid = np.repeat(np.arange(G), counts)
    used = ~nan_s & ok[gid]
    if exclude is not None:
        used &= ~exclude[order]
    made: dict[int, Dataset | None] = {}
    errs: list[DataError | None] = [None] * G
    for g in np.flatnonzero(~ok).tolist():
        p = pos[g]
        try:
            ds = make_dataset(
                xa[p], ya[p], sigma=None if sa is None else sa[p],
                exclude=None if exclude is None else exclude[p], name=labels[g],
            )  # fmt: skip
        except DataError as exc:
            # The same error, saying which group (a DataError subclass stays itself).
            if errors == "raise":
                raise type(exc)(f"group {labels[g]!r}: {exc}") from exc
            made[g], errs[g] = None, exc
        else:  # a refused value on a row make_dataset drops anyway (sigma 0 beside a NaN y)
            made[g] = replace(ds, x_label=x, y_label=y)
    datasets = GroupDatasets(
        G, order=order, offsets=off, x=xa, y=ya, sigma=sa, nan=nan_all, exclude=exclude,
        x_label=x, y_label=y, labels=labels, made=made,
    )  # fmt: skip
    n_dropped = np.where(ok, n_nan, 0).astype(np.int64)
    for g, d in made.items():
        if d is not None:
            n_dropped[g] = d.n_dropped
    if any(d is not None for d in made.values()):
        ux, uy, us, uoff = _used_arrays(list(datasets), sa is not None)
    else:
        uoff = np.zeros(G + 1, dtype=np.intp)
        uoff[1:] = np.cumsum(np.add.reduceat(used.astype(np.intp), starts) if G else [])
        sel = order[used]
        ux, uy, us = xa[sel], ya[sel], None if sa is None else sa[sel]
    return Groups(
        by=tuple(by),
        keys=tuple(keys),
        labels=labels,
        positions=pos,
        datasets=datasets,
        errors=tuple(errs),
        constants=({},) * G,
        n_used=np.diff(uoff).astype(np.int64),
        n_dropped=n_dropped,
        used_x=ux,
        used_y=uy,
        used_sigma=us,
        used_offsets=uoff,
    )


# ----------------------------------------------------------------------- x axis scale
# The axis rules belong to the data (the widget and the figures both draw on them).
def auto_x_scale(x: NDArray[np.float64]) -> Scale:
    """``"log"`` when no x is negative and the positive x span more than two decades.

    Zero x (untreated controls in a dose-response) do not veto a log axis: they are listed as
    off the axis by :func:`data_view` instead.
    """
    if x.size == 0 or np.any(x < 0):
        return "linear"
    pos = x[x > 0]
    if pos.size < 2:
        return "linear"
    return "log" if float(pos.max()) / float(pos.min()) > 100.0 else "linear"


def check_scale(value: object, which: str) -> Scale:
    """Validate an axis scale name."""
    if value == "linear":
        return "linear"
    if value == "log":
        return "log"
    raise DataError(f"{which} must be 'linear' or 'log', got {value!r}.")


def sample_x(x: NDArray[np.float64], scale: Scale, n: int = 240) -> NDArray[np.float64]:
    """``n`` x values across the data's range, evenly spaced on the axis (decades on log x).

    A curve sampled this way looks smooth on the axis it is drawn on. On a log axis only the
    positive x count (zero-dose controls sit off the axis).
    """
    finite = x[np.isfinite(x)]
    if scale == "log":
        finite = finite[finite > 0]
    if finite.size == 0:
        return np.linspace(0.0, 1.0, n) if scale == "linear" else np.logspace(-2, 2, n)
    lo, hi = float(finite.min()), float(finite.max())
    if scale == "log":
        a, b = math.log10(lo), math.log10(hi)
        pad = 0.05 * (b - a) if b > a else 0.5
        return np.logspace(a - pad, b + pad, n)
    pad = 0.05 * (hi - lo) if hi > lo else (abs(lo) or 1.0) * 0.5
    return np.linspace(lo - pad, hi + pad, n)
