"""Typed tables from DataFrames: conversion of pandas, polars and pyarrow inputs to the core's
typed table (conversion only; the inference rules, the encoding and every algorithm live in the
Rust core, see ``docs/tables.md``).

Column types as they arrive:

- numbers (numpy ints/floats, pandas nullable ``Int*``/``Float*``, polars and Arrow numeric types)
  are numeric; missing values (NaN, None, ``pd.NA``, nulls) become NaN;
- booleans (numpy/pandas ``bool`` and ``boolean``, polars ``Boolean``, Arrow ``bool``) are
  categorical with the levels ``"false"`` and ``"true"``;
- pandas ``category``, polars ``Categorical``/``Enum`` and Arrow dictionary columns are categorical;
- text (pandas ``object``/``string``, polars ``String``, Arrow ``string``) is typed by the core's
  inference rules (all numbers -> numeric, else categorical; an all-distinct text column is refused
  as a likely row identifier).

``categorical=[...]`` and ``numeric=[...]`` override the type of the named columns.
"""

from __future__ import annotations

import warnings
from typing import Any, Dict, List, Optional, Sequence, Tuple

import numpy as np

from . import _native

__all__ = ["is_table_input", "as_table", "plain", "report_unseen"]


def plain(x: Any) -> Any:
    """A pyarrow Table of numbers without missing values as a float64 matrix (the matrix path);
    any other input unchanged."""
    if _frame_kind(x) == "pyarrow":
        return np.column_stack([np.asarray(c.to_numpy(), dtype=np.float64) for c in x.columns])
    return x


def _vector(values: Any, dtype: Any) -> np.ndarray:
    """A C-contiguous, aligned vector of ``dtype``: the array itself when it already is one (no
    copy), else a copy. Arrays rebuilt from a byte buffer (a Dask worker's unpickled partition)
    can be unaligned, and the native side reads only aligned memory."""
    return np.require(values, dtype=dtype, requirements=["C", "A"])


def _module(x: Any) -> str:
    return type(x).__module__.split(".")[0]


def _frame_kind(x: Any) -> Optional[str]:
    mod = _module(x)
    if mod == "pandas" and hasattr(x, "columns") and hasattr(x, "dtypes"):
        return "pandas"
    if mod == "polars" and hasattr(x, "columns") and hasattr(x, "schema"):
        return "polars"
    if mod == "pyarrow" and hasattr(x, "schema") and hasattr(x, "column_names"):
        return "pyarrow"
    return None


def is_table_input(
    x: Any, categorical: Optional[Sequence[str]] = None, numeric: Optional[Sequence[str]] = None
) -> bool:
    """True when ``x`` needs the typed path: a pyarrow Table, or a pandas/polars frame with a
    non-numeric column or a missing value, or when a type override is given."""
    if categorical or numeric:
        return _frame_kind(x) is not None
    kind = _frame_kind(x)
    if kind == "pyarrow":
        import pyarrow as pa  # type: ignore[import-untyped]
        import pyarrow.compute as pc  # type: ignore[import-untyped]

        for c in x.columns:
            t = c.type
            if not (pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t)):
                return True
            if c.null_count > 0 or (pa.types.is_floating(t) and pc.any(pc.is_nan(c)).as_py()):
                return True
        return False
    if kind == "pandas":
        for dt in x.dtypes:
            if getattr(dt, "kind", "O") not in "fiub" or str(dt)[0].isupper():
                return True
        return bool(x.isna().to_numpy().any())
    if kind == "polars":
        import polars as pl

        for dt in x.schema.values():
            if not (dt.is_numeric() or dt == pl.Boolean):
                return True
        return bool(sum(x.null_count().row(0)) > 0) or any(
            bool(x[c].is_nan().any()) for c, dt in x.schema.items() if dt.is_float()
        )
    return False


def _kind_for(name: str, categorical: Sequence[str], numeric: Sequence[str]) -> Optional[str]:
    if name in categorical:
        return "categorical"
    if name in numeric:
        return "numeric"
    return None


def _text(values: Sequence[Any]) -> List[Optional[str]]:
    out: List[Optional[str]] = []
    for v in values:
        if v is None or (isinstance(v, float) and v != v):
            out.append(None)
        else:
            try:
                import pandas as pd

                if v is pd.NA or v is pd.NaT:
                    out.append(None)
                    continue
            except ImportError:  # pragma: no cover - pandas is optional
                pass
            out.append(str(v))
    return out


def _pandas_columns(x: Any) -> List[Tuple[str, str, Any]]:
    import pandas as pd

    cols: List[Tuple[str, str, Any]] = []
    for name in x.columns:
        s = x[name]
        dt = s.dtype
        key = str(name)
        if isinstance(dt, pd.CategoricalDtype):
            levels = [str(c) for c in dt.categories]
            codes = _vector(s.cat.codes.to_numpy(), np.int64)
            cols.append((key, "categorical", (levels, codes)))
        elif pd.api.types.is_bool_dtype(dt):
            cols.append((key, "bool", [None if v is pd.NA else bool(v) for v in s.tolist()]))
        elif pd.api.types.is_numeric_dtype(dt):
            cols.append((key, "numeric", _vector(s.to_numpy(dtype=np.float64, na_value=np.nan), np.float64)))
        else:
            cols.append((key, "text", _text(s.tolist())))
    return cols


def _polars_columns(x: Any) -> List[Tuple[str, str, Any]]:
    import polars as pl

    cols: List[Tuple[str, str, Any]] = []
    for name, dt in x.schema.items():
        s = x[name]
        key = str(name)
        if dt == pl.Boolean:
            cols.append((key, "bool", s.to_list()))
        elif dt.is_numeric():
            arr = s.cast(pl.Float64).fill_null(float("nan")).to_numpy()
            cols.append((key, "numeric", _vector(arr, np.float64)))
        elif isinstance(dt, (pl.Categorical, pl.Enum)):
            cols.append((key, "text_categorical", s.cast(pl.String).to_list()))
        else:
            cols.append((key, "text", _text(s.cast(pl.String).to_list())))
    return cols


def _arrow_columns(x: Any) -> List[Tuple[str, str, Any]]:
    import pyarrow as pa
    import pyarrow.compute as pc

    cols: List[Tuple[str, str, Any]] = []
    for name in x.column_names:
        c = x.column(name)
        t = c.type
        key = str(name)
        if pa.types.is_boolean(t):
            cols.append((key, "bool", c.to_pylist()))
        elif pa.types.is_integer(t) or pa.types.is_floating(t):
            arr = pc.fill_null(pc.cast(c, pa.float64()), float("nan")).to_numpy()
            cols.append((key, "numeric", _vector(arr, np.float64)))
        elif pa.types.is_dictionary(t):
            cols.append((key, "text_categorical", _text(c.to_pylist())))
        else:
            cols.append((key, "text", _text(pc.cast(c, pa.string()).to_pylist())))
    return cols


def as_table(
    x: Any,
    name: str,
    categorical: Optional[Sequence[str]] = None,
    numeric: Optional[Sequence[str]] = None,
    columns: Optional[Sequence[str]] = None,
) -> Any:
    """Converts a pandas/polars DataFrame or a pyarrow Table to the core's typed table.

    ``columns`` keeps only those columns (when scoring: the ones a fitted model reads; the others
    are ignored without being typed).
    """
    kind = _frame_kind(x)
    if kind is None:
        raise _native.ShiftweightError(
            f"`{name}` must be a pandas or polars DataFrame or a pyarrow Table to use typed columns "
            "(categorical=/numeric=); numpy arrays are numeric matrices"
        )
    cat = [str(c) for c in (categorical or [])]
    num = [str(c) for c in (numeric or [])]
    both = sorted(set(cat) & set(num))
    if both:
        raise _native.ShiftweightError(f"columns {both} are listed as both categorical and numeric")
    raw = {"pandas": _pandas_columns, "polars": _polars_columns, "pyarrow": _arrow_columns}[kind](x)
    names = [c[0] for c in raw]
    for c in cat + num:
        if c not in names and columns is None:
            raise _native.ShiftweightError(f"`{name}` has no column named {c!r} (given in categorical= or numeric=)")
    keep = set(columns) if columns is not None else None
    specs = []
    for key, tag, payload in raw:
        if keep is not None and key not in keep:
            continue
        override = _kind_for(key, cat, num)
        if tag == "text_categorical":
            tag, override = "text", override or "categorical"
        specs.append((key, tag, payload, override))
    if not specs:
        raise _native.ShiftweightError(f"`{name}` has no columns to use")
    return _native.Table(specs)


def report_unseen(unseen: List[Tuple[str, Optional[str], int, int]], stacklevel: int = 3) -> List[Dict[str, Any]]:
    """The core's counts of values never seen when fitting, as dicts (the ``unseen_`` attribute);
    warns once naming them when there are any."""
    if unseen:
        parts = ", ".join(
            f"{r} row(s) with {'a missing value' if lv is None else repr(lv)} in {c!r}" for c, lv, r, _ in unseen
        )
        warnings.warn(
            f"values never seen when fitting: {parts}; those rows are scored as documented "
            "(an extrapolation: no source row resembles them)",
            stacklevel=stacklevel,
        )
    return [{"column": c, "level": lv, "rows": r, "first_row": f} for c, lv, r, f in unseen]
