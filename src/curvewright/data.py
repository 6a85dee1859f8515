"""Datasets: validated x, y and standard deviations with an exclusion mask.

A :class:`Dataset` is what a fit consumes. The fitting core takes a tuple of them so global fits
across several datasets can share parameters later; today's ``fit`` passes one.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .errors import DataError

__all__ = ["Dataset", "make_dataset"]

FloatArray = NDArray[np.float64]
BoolArray = NDArray[np.bool_]


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


def _column(data: pd.DataFrame, name: object, role: str) -> tuple[NDArray[Any], str]:
    if not isinstance(name, str):
        raise DataError(f"{role} must name a column of data (a string), got {type(name).__name__}.")
    if name not in data.columns:
        cols = [str(c) for c in data.columns]
        hint = difflib.get_close_matches(name, cols, n=1)
        did = f" Did you mean {hint[0]!r}?" if hint else ""
        raise DataError(f"{role}={name!r} is not a column of data; columns are {cols}.{did}")
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
        notes = (f"{int(nan.sum())} row(s) with a missing (NaN) value were dropped.",)
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


def as_datasets(datasets: Dataset | Sequence[Dataset]) -> tuple[Dataset, ...]:
    """Normalise one dataset or several to a tuple (the fitting core's input)."""
    if isinstance(datasets, Dataset):
        return (datasets,)
    return tuple(datasets)
