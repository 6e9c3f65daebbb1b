"""Pictures of weights and shifts (needs matplotlib: ``pip install shiftweight[plot]``).

Every function draws on ``ax`` (a new figure's Axes when None) and returns that Axes, so plots
compose with the rest of a notebook. matplotlib is imported inside each function: importing
shiftweight, or this module, does not import it.

- ``weights(w)``: histogram of the weights on a log axis, with the Kish effective sample size and
  the Pareto k of the upper tail written on the plot.
- ``clip_tradeoff(t)``: what clipping buys (ESS fraction) and costs (moved weight) per clip level.
- ``feature_shift(table)``: per-feature effect sizes from :func:`shiftweight.feature_shift`.
- ``ratio_along(est, X, feature)``: the fitted ratio along one feature, the others at their median.

Cautions: weighting corrects covariate shift only (not label or concept shift), and fails where
the source does not cover the target; a tidy picture does not replace validation on labelled
target data.
"""

from __future__ import annotations

import math
from typing import Any, Optional, Union

import numpy as np

from . import _native
from ._tables import is_table_input
from ._validation import as_matrix, as_vector
from ._weights import ClipTradeoff
from ._weights import clip_tradeoff as _clip_tradeoff
from ._weights import effective_sample_size as _ess
from ._weights import pareto_k as _pareto_k

__all__ = ["weights", "clip_tradeoff", "feature_shift", "ratio_along"]


def _axes(ax: Any) -> Any:
    if ax is not None:
        return ax
    import matplotlib.pyplot as plt

    _, ax = plt.subplots()
    return ax


def ess_label(w: Any) -> str:
    """The effective-sample-size text that :func:`weights` writes on its plot."""
    arr = as_vector(w, "w")
    ess = _ess(arr)
    return "ESS " + _native.ess_words(ess, arr.shape[0], "rows")


def pareto_k_label(w: Any) -> str:
    """The Pareto k text that :func:`weights` writes on its plot."""
    k = _pareto_k(as_vector(w, "w"))
    return "Pareto k n/a (tail too small)" if math.isnan(k) else f"Pareto k {k:.2f}"


def weights(w: Any, ax: Any = None, bins: int = 50) -> Any:
    """Histogram of importance weights on a log x-axis, with ESS and Pareto k written on it.

    Zero weights cannot sit on a log axis; their count is written instead. The Pareto k
    (Vehtari et al. 2024) reads: below 0.5 good, 0.5 to 0.7 usable, above 0.7 unreliable.
    Returns the Axes.

    >>> import matplotlib; matplotlib.use("Agg")
    >>> import shiftweight as sw
    >>> ax = sw.plot.weights([0.5, 1.0, 1.0, 2.0])
    >>> ax.get_xscale(), ax.texts[0].get_text().splitlines()[0]   # Kish: 4.5^2 / 6.25 = 3.24
    ('log', 'ESS 3 of 4 rows (81%)')
    """
    arr = as_vector(w, "w")
    ax = _axes(ax)
    pos = arr[arr > 0]
    if pos.size:
        lo, hi = float(pos.min()), float(pos.max())
        if hi <= lo:
            lo, hi = lo / 1.5, hi * 1.5
        edges = np.geomspace(lo, hi, int(bins) + 1)
        ax.hist(pos, bins=edges, color="tab:blue", alpha=0.8)
    ax.set_xscale("log")
    ax.axvline(1.0, color="grey", linestyle="--", linewidth=1)
    ax.set_xlabel("importance weight (log scale)")
    ax.set_ylabel("rows")
    lines = [ess_label(arr), pareto_k_label(arr)]
    n_zero = int(arr.size - pos.size)
    if n_zero:
        lines.append(f"{n_zero} zero weight(s) not shown")
    ax.text(
        0.98,
        0.95,
        "\n".join(lines),
        transform=ax.transAxes,
        ha="right",
        va="top",
        fontsize="small",
        bbox=dict(boxstyle="round", facecolor="white", alpha=0.8),
    )
    ax.set_title("Importance weights")
    return ax


def clip_tradeoff(tradeoff_or_w: Union[ClipTradeoff, Any], ax: Any = None) -> Any:
    """ESS fraction and mean shift per clip level (from a :class:`ClipTradeoff` or raw weights).

    The x-axis is the clip point as a quantile of the weights (1 = no clipping). The ESS fraction
    (left axis) is what clipping buys in variance; the mean shift (right axis, the share of the
    total weight taken from the clipped rows) is what it costs in bias. Returns the main Axes.
    """
    t = tradeoff_or_w if isinstance(tradeoff_or_w, ClipTradeoff) else _clip_tradeoff(tradeoff_or_w)
    ax = _axes(ax)
    q = t.column("quantile")
    ax.plot(q, t.column("ess_fraction"), marker="o", color="tab:blue", label="ESS fraction")
    ax.set_xlabel("clip point (quantile of the weights; 1 = no clipping)")
    ax.set_ylabel("ESS / n", color="tab:blue")
    ax.set_ylim(0.0, 1.05)
    right = ax.twinx()
    right.plot(q, t.column("mean_shift"), marker="s", color="tab:red", label="mean shift")
    right.set_ylabel("share of weight moved (bias proxy)", color="tab:red")
    ax.set_title(f"Clipping trade-off (n={t.n})")
    return ax


def feature_shift(table: Any, ax: Any = None, top: Optional[int] = None, effect: str = "smd") -> Any:
    """Horizontal bars of per-feature effect size from :func:`shiftweight.feature_shift`.

    ``effect`` is a column of the table: ``"smd"`` (standardised mean difference, target minus
    source; the default) or ``"wasserstein_sd"`` (Wasserstein-1 distance in pooled sds) or
    ``"auc_drop"``. ``top`` keeps the most-shifted features only. Features whose effect is
    undefined (constant columns) get a zero-length bar. Returns the Axes.
    """
    if effect not in ("smd", "wasserstein_sd", "auc_drop"):
        raise ValueError(f"`effect` must be 'smd', 'wasserstein_sd' or 'auc_drop', got {effect!r}")
    rows = list(table.rows)
    if top is not None:
        if int(top) < 1:
            raise ValueError(f"`top` must be at least 1, got {top}")
        rows = rows[: int(top)]
    ax = _axes(ax)
    names = [str(r["feature"]) for r in rows][::-1]
    values = [0.0 if r.get(effect) is None else float(r[effect]) for r in rows][::-1]
    colors = ["tab:red" if v > 0 else "tab:blue" for v in values]
    ax.barh(np.arange(len(names)), values, color=colors)
    ax.set_yticks(np.arange(len(names)))
    ax.set_yticklabels(names)
    ax.axvline(0.0, color="black", linewidth=0.8)
    label = {
        "smd": "standardised mean difference (target - source)",
        "wasserstein_sd": "Wasserstein distance / pooled sd",
        "auc_drop": "classifier AUC lost when permuted",
    }[effect]
    ax.set_xlabel(label)
    ax.set_title("Feature shift, most-shifted at the top")
    return ax


def ratio_along(estimator: Any, X: Any, feature: Union[int, str], ax: Any = None, points: int = 100) -> Any:
    """The fitted ratio w(x) along one feature, every other feature held at its median in ``X``.

    ``feature`` is a column position or, for named columns, a name. The grid spans the 1st to the
    99th percentile of that feature in ``X``; a rug marks the observed values. A slice through
    one feature hides interactions; read it as a sketch, not the whole ratio. Returns the Axes.

    ``X`` may be a table with categorical columns or missing values (a pandas or polars DataFrame,
    a pyarrow Table) when the estimator was fitted on tables: the other columns are then held at
    the median of their present values (numeric) or their most frequent level (categorical), and
    ``feature`` must be a numeric column.
    """
    if is_table_input(X):
        return _ratio_along_table(estimator, X, feature, ax, points)
    mat, names = as_matrix(X, "X")
    if isinstance(feature, str):
        if names is None or feature not in names:
            raise ValueError(f"feature {feature!r} is not a column of `X` (columns: {names})")
        j = list(names).index(feature)
    else:
        j = int(feature)
        if not 0 <= j < mat.shape[1]:
            raise ValueError(f"feature index {j} is out of range for {mat.shape[1]} column(s)")
    label = names[j] if names is not None else f"feature {j}"
    col = mat[:, j]
    lo, hi = np.percentile(col, [1.0, 99.0])
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    grid = np.linspace(lo, hi, int(points))
    rows = np.tile(np.median(mat, axis=0), (grid.size, 1))
    rows[:, j] = grid
    if names is not None:
        import pandas as pd

        query: Any = pd.DataFrame(rows, columns=list(names))
    else:
        query = rows
    w = estimator.ratio(query)
    ax = _axes(ax)
    ax.plot(grid, w, color="tab:blue")
    ax.axhline(1.0, color="grey", linestyle="--", linewidth=1)
    ax.plot(col, np.zeros_like(col), "|", color="black", alpha=0.2, markersize=8)
    ax.set_xlabel(str(label))
    ax.set_ylabel("w(x) = p_target / p_source")
    ax.set_title(f"Ratio along {label} (others at their median)")
    return ax


def _ratio_along_table(estimator: Any, X: Any, feature: Union[int, str], ax: Any, points: int) -> Any:
    import pandas as pd

    frame = X if isinstance(X, pd.DataFrame) else X.to_pandas()
    names = [str(c) for c in frame.columns]
    if isinstance(feature, str):
        if feature not in names:
            raise ValueError(f"feature {feature!r} is not a column of `X` (columns: {names})")
        j = names.index(feature)
    else:
        j = int(feature)
        if not 0 <= j < len(names):
            raise ValueError(f"feature index {j} is out of range for {len(names)} column(s)")
    label = names[j]
    col = frame.iloc[:, j]
    if not (pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype)):
        raise ValueError(f"feature {label!r} is not numeric (dtype {col.dtype}); pick a numeric column")
    values = col.to_numpy(dtype=np.float64, na_value=np.nan)
    values = values[~np.isnan(values)]
    if values.size == 0:
        raise ValueError(f"feature {label!r} has no present values")
    lo, hi = np.percentile(values, [1.0, 99.0])
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
    grid = np.linspace(lo, hi, int(points))
    # One row of typical values, repeated: medians of numbers, most frequent levels otherwise.
    typical = {}
    for name in frame.columns:
        c = frame[name]
        if pd.api.types.is_numeric_dtype(c.dtype) and not pd.api.types.is_bool_dtype(c.dtype):
            typical[name] = pd.Series(np.full(grid.size, float(c.median())), dtype=c.dtype)
        else:
            top = c.mode(dropna=True)
            typical[name] = pd.Series([top.iloc[0] if len(top) else None] * grid.size, dtype=c.dtype)
    query = pd.DataFrame(typical)
    query[frame.columns[j]] = pd.Series(grid, dtype=np.float64)
    w = estimator.ratio(query)
    ax = _axes(ax)
    ax.plot(grid, w, color="tab:blue")
    ax.axhline(1.0, color="grey", linestyle="--", linewidth=1)
    ax.plot(values, np.zeros_like(values), "|", color="black", alpha=0.2, markersize=8)
    ax.set_xlabel(label)
    ax.set_ylabel("w(x) = p_target / p_source")
    ax.set_title(f"Ratio along {label} (others at their median or most frequent level)")
    return ax
