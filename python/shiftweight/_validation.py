"""Input conversion shared by every public function.

Accepted inputs: numpy arrays of any real dtype and memory order (bool counts as 0/1), pandas
and polars DataFrames with numeric columns, and nested sequences of numbers. Everything is
converted once to a C-contiguous float64 array (no copy when it already is one); float32 input is
converted to float64 because the core computes in double precision. Column names of DataFrames
are kept. Non-finite values are reported by the core with their row and column.
"""

from __future__ import annotations

from typing import Any, Optional, Sequence, Tuple

import numpy as np

from ._native import ShiftweightError

__all__ = ["as_matrix", "as_vector", "as_count", "as_seed", "check_same_columns", "NotFittedError"]


class NotFittedError(ShiftweightError, AttributeError):
    """Raised when a method that needs a fitted estimator is called before ``fit``."""


def _frame_kind(x: Any) -> Optional[str]:
    mod = type(x).__module__.split(".")[0]
    if mod == "pandas" and hasattr(x, "columns") and hasattr(x, "dtypes"):
        return "pandas"
    if mod == "polars" and hasattr(x, "columns") and hasattr(x, "schema"):
        return "polars"
    return None


def _check_numeric_array(arr: np.ndarray, name: str, columns: Optional[Sequence[str]] = None) -> None:
    if arr.dtype.kind in "fiub":
        return
    what = {"O": "object", "U": "string", "S": "bytes", "c": "complex", "M": "datetime", "m": "timedelta"}
    kind = what.get(arr.dtype.kind, str(arr.dtype))
    if arr.dtype.kind == "O" and arr.ndim == 2:
        # Name the first column that does not convert to float.
        for j in range(arr.shape[1]):
            try:
                arr[:, j].astype(np.float64)
            except (TypeError, ValueError):
                col = columns[j] if columns is not None else j
                raise ShiftweightError(
                    f"`{name}` column {col!r} is not numeric (holds {type(arr[0, j]).__name__} values)"
                ) from None
        return
    raise ShiftweightError(f"`{name}` has dtype {kind}; numeric (int, float or bool) values are required")


def as_matrix(x: Any, name: str) -> Tuple[np.ndarray, Optional[list]]:
    """Converts ``x`` to a C-contiguous float64 (rows, features) array and its column names."""
    kind = _frame_kind(x)
    names: Optional[list] = None
    if kind == "pandas":
        names = [str(c) for c in x.columns]
        for col, dt in zip(x.columns, x.dtypes):
            if getattr(dt, "kind", "O") not in "fiub":
                raise ShiftweightError(
                    f"`{name}` column {str(col)!r} is not numeric (dtype {dt}); encode or drop it first"
                )
        arr = x.to_numpy(dtype=np.float64)
    elif kind == "polars":
        names = [str(c) for c in x.columns]
        for col, dt in x.schema.items():
            if not (dt.is_numeric() or str(dt) == "Boolean"):
                raise ShiftweightError(
                    f"`{name}` column {col!r} is not numeric (dtype {dt}); encode or drop it first"
                )
        arr = x.to_numpy().astype(np.float64, copy=False)
    else:
        arr = np.asarray(x)
        _check_numeric_array(arr, name)
    if arr.ndim != 2:
        if arr.ndim == 1:
            raise ShiftweightError(
                f"`{name}` must be 2-D (rows x features) but is 1-D with {arr.shape[0]} values; "
                "use x.reshape(-1, 1) for a single feature"
            )
        raise ShiftweightError(f"`{name}` must be 2-D (rows x features) but has shape {arr.shape}")
    arr = np.ascontiguousarray(arr, dtype=np.float64)
    return arr, names


def as_vector(x: Any, name: str, n: Optional[int] = None) -> np.ndarray:
    """Converts ``x`` to a contiguous float64 vector, optionally checking its length."""
    if _frame_kind(x) is not None:
        raise ShiftweightError(f"`{name}` must be 1-D, not a DataFrame")
    arr = np.asarray(x)
    _check_numeric_array(arr, name)
    if arr.ndim != 1:
        raise ShiftweightError(f"`{name}` must be 1-D but has shape {arr.shape}")
    if n is not None and arr.shape[0] != n:
        raise ShiftweightError(f"`{name}` has length {arr.shape[0]} but {n} was expected")
    return np.ascontiguousarray(arr, dtype=np.float64)


def check_same_columns(names_a: Optional[list], names_b: Optional[list], a: str, b: str) -> None:
    """Raises when two named inputs disagree on column names or their order."""
    if names_a is None or names_b is None or names_a == names_b:
        return
    if sorted(names_a) == sorted(names_b):
        raise ShiftweightError(f"`{b}` has the same columns as `{a}` but in another order: {names_b} vs {names_a}")
    missing = [c for c in names_a if c not in names_b]
    extra = [c for c in names_b if c not in names_a]
    raise ShiftweightError(f"`{b}` columns differ from `{a}`: missing {missing}, unexpected {extra}")


_U64_MAX = 2**64 - 1


def as_count(value: Any, name: str) -> int:
    """A non-negative whole number for an integer option (row counts, folds, iterations).

    The core checks each option's own range (e.g. folds >= 2) and names it; this only makes sure
    the value is a whole number that fits an unsigned 64-bit integer, so a negative, fractional,
    boolean or non-numeric value gets a ``ShiftweightError`` naming the option instead of a
    conversion error from the binding.
    """
    if isinstance(value, (bool, np.bool_)):
        raise ShiftweightError(f"`{name}` must be a whole number, got {value!r}")
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        value = int(value)
    if not isinstance(value, (int, np.integer)):
        raise ShiftweightError(f"`{name}` must be a whole number, got {value!r}")
    value = int(value)
    if not 0 <= value <= _U64_MAX:
        raise ShiftweightError(f"`{name}` must be a whole number >= 0, got {value}")
    return value


def as_seed(value: Any, name: str = "seed") -> int:
    """A seed: a whole number in [0, 2**64)."""
    return as_count(value, name)
