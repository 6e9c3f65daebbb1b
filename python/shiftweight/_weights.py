"""Checking and stabilising importance weights (computed in the Rust core).

- ``stabilize(w, ...)``: flattening (Shimodaira 2000), Pareto smoothing of the largest weights
  (PSIS, Vehtari et al. 2024), clipping, truncation at sqrt(n) times the mean weight (Ionides 2008)
  and normalisation to mean 1, always in that order.
- ``effective_sample_size(w)``: Kish (1965) ESS, (sum w)^2 / sum w^2.
- ``pareto_k(w)``: shape of a generalised Pareto distribution fitted to the largest weights
  (Zhang & Stephens 2009; tail size of Vehtari et al. 2024).
- ``diagnose(w, groups=None)``: all of the above plus concentration, quantiles and plain-language
  warnings, as a :class:`WeightDiagnosis`.
- ``clip_tradeoff(w)`` and ``clip_for_ess(w, ess_fraction)``: what clipping the largest weights
  buys in ESS and costs in moved weight.
- ``check_overlap(...)``: the share of target rows the source barely covers.

Cautions: weighting corrects covariate shift only (not label or concept shift). No weighting
fixes missing support: where the source does not cover the target, weights are extrapolations.
Validate on labelled target data, and follow the regulations and review processes of your domain
when weights feed decisions about people.
"""

from __future__ import annotations

import html
import json
import math
from typing import Any, Dict, List, Optional, Sequence, Tuple, Union

import numpy as np

from . import _native
from ._native import ShiftweightError
from ._tables import as_table
from ._validation import as_count, as_vector

__all__ = [
    "stabilize",
    "StabilizeReport",
    "effective_sample_size",
    "pareto_k",
    "diagnose",
    "WeightDiagnosis",
    "clip_tradeoff",
    "ClipTradeoff",
    "clip_for_ess",
    "check_overlap",
    "OverlapReport",
]

_CAUTION = (
    "Weighting corrects covariate shift only, and fails where the source does not cover the target; "
    "validate on labelled target data before relying on it."
)


def _weights(w: Any, name: str = "weights") -> np.ndarray:
    return as_vector(w, name)


def _fmt(x: Optional[float], digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    if x != 0 and (abs(x) >= 1e5 or abs(x) < 1e-3):
        return f"{x:.{digits}g}"
    return f"{x:.{digits}f}"


def _html_table(rows: Sequence[Tuple[str, str]], title: str, notes: Sequence[str] = ()) -> str:
    body = "".join(
        f"<tr><th style='text-align:left'>{html.escape(k)}</th><td style='text-align:right'>{html.escape(v)}</td></tr>"
        for k, v in rows
    )
    extra = "".join(f"<li>{html.escape(n)}</li>" for n in notes)
    notes_html = f"<ul>{extra}</ul>" if extra else ""
    return (
        f"<div><strong>{html.escape(title)}</strong><table>{body}</table>{notes_html}"
        f"<p style='font-size:smaller'>{html.escape(_CAUTION)}</p></div>"
    )


class _Document:
    """A result that lives as a versioned JSON document (format tag + version + body)."""

    _format = ""

    def __init__(self, document: str):
        doc = json.loads(document)
        if doc.get("format") != self._format:
            raise _native.ModelFileError(f"format is {doc.get('format')!r}, expected {self._format!r}")
        self._doc = doc
        self._body: Dict[str, Any] = doc["model"]

    def to_dict(self) -> Dict[str, Any]:
        """The result as plain Python values (a deep copy)."""
        return json.loads(json.dumps(self._body))

    def to_json(self) -> str:
        """The versioned JSON document."""
        return json.dumps(self._doc)

    @classmethod
    def from_json(cls, text: str):
        """Reads a document written by ``to_json``."""
        return cls(text)

    def __reduce__(self):
        return (type(self).from_json, (self.to_json(),))

    def __eq__(self, other: Any) -> bool:
        return type(other) is type(self) and other._body == self._body

    __hash__ = None  # type: ignore[assignment]


# ------------------------------------------------------------------------------------------------
# Stabilisation
# ------------------------------------------------------------------------------------------------


class StabilizeReport:
    """What :func:`stabilize` did: the steps in order, rows each changed, the bounds in force.

    Attributes: ``steps`` (list of dicts with ``step``, ``rows_changed``, ``value``, ``note``),
    ``lower_used``, ``upper_used`` (bounds on the output), ``smoothing_k`` (Pareto k fitted when
    smoothing), ``n``, ``options``.
    """

    def __init__(self, record: Dict[str, Any]):
        self._record = record
        self.n: int = record["n"]
        self.options: Dict[str, Any] = record["options"]
        self.steps: List[Dict[str, Any]] = record["steps"]
        self.lower_used: Optional[float] = record["lower_used"]
        self.upper_used: Optional[float] = record["upper_used"]
        tail = record.get("smoothing_tail")
        self.smoothing_k: Optional[float] = tail["k"] if tail else None

    def to_dict(self) -> Dict[str, Any]:
        return json.loads(json.dumps(self._record))

    def to_json(self) -> str:
        return json.dumps(self._record)

    @classmethod
    def from_json(cls, text: str) -> StabilizeReport:
        return cls(json.loads(text))

    def __reduce__(self):
        return (StabilizeReport.from_json, (self.to_json(),))

    def __repr__(self) -> str:
        lines = [f"StabilizeReport(n={self.n})"]
        for s in self.steps:
            lines.append(
                f"  {s['step']:<15} rows changed {s['rows_changed']:>8}  value {_fmt(s['value'])}  {s['note']}"
            )
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        rows = [(s["step"], f"{s['rows_changed']} rows; value {_fmt(s['value'])}") for s in self.steps]
        return _html_table(rows, f"Stabilised {self.n} weights", [s["note"] for s in self.steps])


def stabilize(
    w: Any,
    lower: Optional[float] = None,
    upper: Optional[float] = None,
    upper_quantile: Optional[float] = None,
    truncate: bool = False,
    power: float = 1.0,
    smooth: bool = False,
    normalize: bool = True,
    return_report: bool = False,
) -> Union[np.ndarray, Tuple[np.ndarray, StabilizeReport]]:
    """Stabilises importance weights. Steps run in this order, each only when asked for:

    1. ``power`` in [0, 1]: w <- w**power (Shimodaira 2000); 0 makes all non-zero weights equal.
    2. ``smooth``: Pareto smoothing of the largest weights (PSIS, Vehtari et al. 2024); order is
       kept, only the tail changes, a tail of fewer than 5 rows is left alone.
    3. ``upper_quantile`` in (0, 1]: clip from above at that quantile of the weights.
    4. ``lower``, ``upper``, ``truncate`` and ``normalize`` together. With ``normalize=True`` (the
       default) the result has mean exactly 1 and the bounds hold *after* normalisation: every
       weight lies in [lower, min(upper, sqrt(n) if truncate)] (so ``lower <= 1 <= upper``).
       ``truncate`` is Ionides' (2008) rule: no weight above sqrt(n) times the mean weight. With
       ``normalize=False`` the bounds are on the scale of the weights given, and truncation is at
       sqrt(n) times their mean.

    Returns the stabilised weights (1-D float64, input order), or ``(weights, StabilizeReport)``
    when ``return_report=True``. Clipping and truncation trade bias for variance; see
    :func:`clip_tradeoff`. No step repairs weights where the source does not cover the target.

    Examples
    --------
    >>> import shiftweight as sw
    >>> sw.stabilize([1.0, 1.0, 1.0, 1.0, 16.0], upper=2.0).tolist()
    [0.75, 0.75, 0.75, 0.75, 2.0]
    >>> w, report = sw.stabilize([1.0, 4.0, 9.0], power=0.5, normalize=False, return_report=True)
    >>> w.tolist(), [s["step"] for s in report.steps]
    ([1.0, 2.0, 3.0], ['flatten'])
    """
    arr = _weights(w)

    def opt(x: Optional[float]) -> Optional[float]:
        return None if x is None else float(x)

    out, record = _native.stabilize(
        arr, opt(lower), opt(upper), opt(upper_quantile), bool(truncate), float(power), bool(smooth), bool(normalize)
    )
    if return_report:
        return out, StabilizeReport(json.loads(record))
    return out


# ------------------------------------------------------------------------------------------------
# ESS and Pareto k
# ------------------------------------------------------------------------------------------------


def effective_sample_size(w: Any, relative: bool = False) -> float:
    """Kish (1965) effective sample size (sum w)^2 / sum w^2; with ``relative=True``, divided by n.

    Equal weights give n (the largest possible); a single non-zero weight gives 1.

    >>> import shiftweight as sw
    >>> sw.effective_sample_size([1, 1, 1, 1]), sw.effective_sample_size([0, 0, 5, 0])
    (4.0, 1.0)
    """
    arr = _weights(w)
    ess = _native.effective_sample_size(arr)
    return ess / arr.shape[0] if relative else ess


def pareto_k(w: Any) -> float:
    """Pareto k of the upper tail of the weights (NaN when it cannot be estimated).

    The shape of a generalised Pareto distribution fitted (Zhang & Stephens 2009) to the largest
    M = ceil(min(n/5, 3 sqrt(n))) weights (Vehtari et al. 2024). k < 0.5 good; 0.5 to 0.7 usable;
    above 0.7, or above 1 - 1/log10(n) for small n, unreliable. NaN for fewer than ~25 weights or
    when the largest weights are all equal (a bounded tail).
    """
    fit = json.loads(_native.pareto_k(_weights(w)))
    return float("nan") if fit["k"] is None else float(fit["k"])


# ------------------------------------------------------------------------------------------------
# Diagnosis
# ------------------------------------------------------------------------------------------------


class WeightDiagnosis(_Document):
    """What :func:`diagnose` found. Attributes:

    ``n``, ``mean`` (the raw mean weight), ``mean_std_error`` and ``mean_upper_bound`` (its standard
    error and one-sided 99.9% upper bound; None below two weights), ``mean_too_low`` (True when that
    bound is below 1/2: true importance weights average 1 over the source rows, and their average
    is the share of the target the source covers), ``ess`` and ``ess_fraction`` (Kish 1965),
    ``pareto_k`` (None when it cannot be estimated), ``verdict`` (``"good"``, ``"usable"`` or
    ``"unreliable"``; unreliable also when ``mean_too_low``), ``k_threshold`` (the
    sample-size-dependent bound min(0.7, 1 - 1/log10 n)), ``tail_size``, ``top1_share`` (share of
    the total weight in the largest 1% of rows), ``rows_for_half`` (fewest rows carrying half the
    weight), ``max_over_mean``, ``quantiles`` (dict level -> value), ``n_zero``, ``warnings``
    (plain language), ``groups`` (list of per-group dicts: group, n, ess, ess_fraction,
    weight_share, row_share).
    """

    _format = "shiftweight.weight-diagnosis"

    def __init__(self, document: str):
        super().__init__(document)
        b = self._body
        self.n: int = b["n"]
        self.mean: float = b["mean"]
        self.mean_std_error: Optional[float] = b.get("mean_std_error")
        self.mean_upper_bound: Optional[float] = b.get("mean_upper_bound")
        self.mean_too_low: bool = bool(b.get("mean_too_low", False))
        self.ess: float = b["ess"]
        self.ess_fraction: float = b["ess_fraction"]
        self.pareto_k: Optional[float] = b["pareto_k"]
        self.verdict: str = b["verdict"]
        self.k_threshold: float = b["tail"]["k_threshold"]
        self.tail_size: int = b["tail"]["tail_size"]
        self.top1_share: float = b["top1_share"]
        self.top1_rows: int = b["top1_rows"]
        self.rows_for_half: int = b["rows_for_half"]
        self.max_over_mean: float = b["max_over_mean"]
        self.quantiles: Dict[float, float] = {float(p): float(v) for p, v in b["quantiles"]}
        self.n_zero: int = b["n_zero"]
        self.warnings: List[str] = list(b["warnings"])
        self.groups: List[Dict[str, Any]] = list(b["groups"])

    @classmethod
    def from_json(cls, text: str) -> WeightDiagnosis:
        return cls(_native.diagnosis_from_json(text))

    def _rows(self) -> List[Tuple[str, str]]:
        rows = [
            ("rows", str(self.n)),
            ("mean weight (should be about 1)", self._mean_text()),
            ("effective sample size (Kish)", _native.ess_words(self.ess, self.n, "rows")),
            ("Pareto k", f"{_fmt(self.pareto_k, 2)} -> {self.verdict} (unreliable above {self.k_threshold:.2f})"),
            ("weight in top 1% of rows", f"{100 * self.top1_share:.1f}% ({self.top1_rows} rows)"),
            ("rows carrying half the weight", str(self.rows_for_half)),
            ("largest weight / mean", _fmt(self.max_over_mean)),
            ("zero weights", str(self.n_zero)),
        ]
        q = ", ".join(f"{100 * p:g}%: {_fmt(v)}" for p, v in self.quantiles.items())
        rows.append(("quantiles", q))
        for g in self.groups:
            rows.append(
                (
                    f"group {g['group']}",
                    f"n {g['n']}, ESS {g['ess']:.1f} ({100 * g['ess_fraction']:.1f}%), "
                    f"{100 * g['weight_share']:.1f}% of weight",
                )
            )
        return rows

    def _mean_text(self) -> str:
        text = _fmt(self.mean)
        if self.mean_upper_bound is not None:
            text += f" (99.9% upper bound {_fmt(self.mean_upper_bound)})"
        if self.mean_too_low:
            text += " -> too low: the weights miss much of the target"
        return text

    def __repr__(self) -> str:
        lines = [f"WeightDiagnosis: verdict {self.verdict}"]
        lines += [f"  {k:<31} {v}" for k, v in self._rows()]
        if self.warnings:
            lines.append("  warnings:")
            lines += [f"  - {w}" for w in self.warnings]
        lines.append(f"  note: {_CAUTION}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        return _html_table(self._rows(), f"Weight diagnosis: {self.verdict}", self.warnings)


def diagnose(w: Any, groups: Any = None) -> WeightDiagnosis:
    """Checks importance weights before they are used; returns a :class:`WeightDiagnosis`.

    ``groups`` (optional, one label per row, e.g. the class labels) adds the effective sample size
    within each group: a weighted classifier can lose a class whose rows all get tiny weights.

    The verdict follows the Pareto k thresholds of Vehtari et al. (2024): ``good`` (k < 0.5),
    ``usable`` (0.5 <= k <= 0.7), ``unreliable`` (k > 0.7, or above 1 - 1/log10(n) for small n, or
    a tail that could not be checked). The verdict is also ``unreliable`` when the mean weight is far
    below 1 (its one-sided 99.9% upper bound below 1/2): the source mean of the true ratio is the
    share of the target that the source covers (Sugiyama, Suzuki & Kanamori 2012), so such weights
    miss much of the target or do not normalise. Pass raw estimates (e.g. ``source_weights_``) or
    weights rescaled to mean 1, not weights rescaled to sum 1. Runs in O(n) with selection, no full
    sort.

    ``diagnose`` sees only the source weights, so it cannot see target rows that no source row
    resembles (a level or a missing pattern the source never has): weights of source rows are
    silent about them. Count those with ``check_overlap(est.ratio(target), source=source,
    target=target)``, which takes the tables.

    >>> import shiftweight as sw
    >>> sw.diagnose([1.0] * 1000).verdict
    'good'
    """
    arr = _weights(w)
    if groups is None:
        return WeightDiagnosis(_native.diagnose(arr))
    labels = np.asarray(groups)
    if labels.ndim != 1 or labels.shape[0] != arr.shape[0]:
        raise ShiftweightError(f"`groups` must be 1-D with {arr.shape[0]} labels, got shape {labels.shape}")
    names, codes = np.unique(labels, return_inverse=True)
    codes = np.ascontiguousarray(codes.reshape(-1), dtype=np.int64)
    return WeightDiagnosis(_native.diagnose(arr, codes, [str(n) for n in names]))


# ------------------------------------------------------------------------------------------------
# Clipping trade-off
# ------------------------------------------------------------------------------------------------

_CLIP_COLUMNS = ["quantile", "upper", "rows_clipped", "ess", "ess_fraction", "mean_shift"]


class ClipTradeoff(_Document):
    """One row per clip level, most clipping first. Columns:

    ``quantile`` (the clip point as a quantile of the weights), ``upper`` (the bound of the clipped
    weights after normalisation to mean 1; ``stabilize(w, upper=...)`` reproduces the row),
    ``rows_clipped``, ``ess``, ``ess_fraction``, and ``mean_shift`` (bias proxy: the share of the
    total weight taken from the clipped rows).
    """

    _format = "shiftweight.clip-tradeoff"

    def __init__(self, document: str):
        super().__init__(document)
        self.n: int = self._body["n"]
        self.rows: List[Dict[str, Any]] = list(self._body["levels"])

    def __len__(self) -> int:
        return len(self.rows)

    def __iter__(self):
        return iter(self.rows)

    def __getitem__(self, i: int) -> Dict[str, Any]:
        return self.rows[i]

    def column(self, name: str) -> np.ndarray:
        """One column as an array."""
        if name not in _CLIP_COLUMNS:
            raise KeyError(f"no column {name!r}; columns are {_CLIP_COLUMNS}")
        return np.array([np.nan if r[name] is None else r[name] for r in self.rows], dtype=float)

    def to_pandas(self):
        """The table as a pandas DataFrame (needs pandas)."""
        import pandas as pd

        return pd.DataFrame([{c: r[c] for c in _CLIP_COLUMNS} for r in self.rows], columns=_CLIP_COLUMNS)

    def _cells(self) -> List[List[str]]:
        return [
            [
                _fmt(r["quantile"], 4),
                _fmt(r["upper"]),
                str(r["rows_clipped"]),
                f"{r['ess']:.1f}",
                f"{r['ess_fraction']:.3f}",
                f"{r['mean_shift']:.4f}",
            ]
            for r in self.rows
        ]

    def __repr__(self) -> str:
        cells = [_CLIP_COLUMNS] + self._cells()
        widths = [max(len(row[j]) for row in cells) for j in range(len(_CLIP_COLUMNS))]
        lines = [f"ClipTradeoff (n={self.n})"]
        lines += ["  " + "  ".join(c.rjust(wd) for c, wd in zip(row, widths)) for row in cells]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        head = "".join(f"<th>{c}</th>" for c in _CLIP_COLUMNS)
        body = "".join(
            "<tr>" + "".join(f"<td style='text-align:right'>{html.escape(c)}</td>" for c in row) + "</tr>"
            for row in self._cells()
        )
        return (
            f"<div><strong>Clipping trade-off (n={self.n})</strong><table><tr>{head}</tr>{body}</table>"
            "<p style='font-size:smaller'>More clipping raises the effective sample size (less variance) and "
            "moves weight away from the rows the target needs most (more bias).</p></div>"
        )


def clip_tradeoff(w: Any, quantiles: Optional[Sequence[float]] = None) -> ClipTradeoff:
    """For a range of upper clip levels, the ESS fraction and the mean shift of the normalised weights.

    ``quantiles`` are the clip points as quantiles of the weights in (0, 1] (default 0.5, 0.75,
    0.9, 0.95, 0.98, 0.99, 0.995, 0.999, 0.9999, 1). Use :func:`clip_for_ess` to pick a level.

    >>> import shiftweight as sw
    >>> t = sw.clip_tradeoff([1.0, 1.0, 1.0, 5.0], quantiles=[0.5, 1.0])
    >>> [round(r["ess_fraction"], 3) for r in t]
    [1.0, 0.571]
    """
    arr = _weights(w)
    qs = None if quantiles is None else [float(q) for q in quantiles]
    return ClipTradeoff(_native.clip_tradeoff(arr, qs))


def clip_for_ess(w: Any, ess_fraction: float) -> Dict[str, Any]:
    """The least clipping from above that reaches ``ess_fraction`` (ESS / n, in (0, 1]).

    Returns a dict with the columns of :class:`ClipTradeoff`; pass its ``upper`` to
    ``stabilize(w, upper=...)`` to get those weights. Unclipped weights are returned when they
    already reach the fraction; an error is raised when zero weights make it unreachable.
    """
    return json.loads(_native.clip_for_ess(_weights(w), float(ess_fraction)))


# ------------------------------------------------------------------------------------------------
# Support overlap
# ------------------------------------------------------------------------------------------------


class OverlapReport(_Document):
    """Result of :func:`check_overlap`: ``n_target``, ``limit``, ``tolerance``, ``n_poorly_covered``,
    ``share_poorly_covered``, ``max_ratio``, ``median_ratio``, ``flagged``, ``source`` and
    ``warnings`` (always ending with the caution that no weighting fixes missing support), and
    ``support_gaps`` and ``n_outside_support``: the target levels and missing values the source
    never has and the target rows with any of them, counted only when ``check_overlap`` was given
    the tables (``[]`` and 0 otherwise, and when there are none)."""

    _format = "shiftweight.overlap-report"

    def __init__(self, document: str):
        super().__init__(document)
        self.support_gaps: List[Dict[str, Any]] = []
        self.n_outside_support: int = 0
        for k, v in self._body.items():
            setattr(self, k, v)

    def _rows(self) -> List[Tuple[str, str]]:
        b = self._body
        return [
            ("target rows", str(b["n_target"])),
            (
                f"barely covered (ratio > {_fmt(b['limit'])})",
                f"{b['n_poorly_covered']} ({100 * b['share_poorly_covered']:.2f}%)",
            ),
            ("largest ratio", _fmt(b["max_ratio"])),
            ("median ratio", _fmt(b["median_ratio"])),
            ("flagged", "yes" if b["flagged"] else "no"),
        ]

    def __repr__(self) -> str:
        lines = [f"OverlapReport: {'FLAGGED' if self._body['flagged'] else 'ok'}"]
        lines += [f"  {k:<30} {v}" for k, v in self._rows()]
        lines += [f"  - {w}" for w in self._body["warnings"]]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        return _html_table(self._rows(), "Support overlap", self._body["warnings"])


def check_overlap(
    target_ratios: Any = None,
    *,
    probabilities: Any = None,
    n_source: Optional[int] = None,
    n_target: Optional[int] = None,
    limit: float = 20.0,
    tolerance: float = 0.01,
    source: Any = None,
    target: Any = None,
    categorical: Optional[Sequence[str]] = None,
    numeric: Optional[Sequence[str]] = None,
) -> OverlapReport:
    """How much of the target does the source barely cover?

    Give either ``target_ratios`` (w(x) = p_target / p_source at the *target* rows, e.g.
    ``est.ratio(target)``) or ``probabilities`` (a source-vs-target classifier's probability of
    "target" at the target rows, preferably out-of-fold) with ``n_source`` and ``n_target`` (the
    sizes it was trained on; the ratio is p / (1 - p) * n_source / n_target). A target row is
    barely covered when its ratio exceeds ``limit`` (default 20: the source density there is below
    1/20 of the target density); the report is flagged when more than ``tolerance`` (default 1%)
    of the target rows are. No weighting fixes missing support.

    With ``source`` and ``target`` tables (DataFrames or pyarrow Tables; ``target_ratios`` at the
    rows of ``target``), the report also counts the target rows with a level, or a missing value,
    that the source never has in some column (``support_gaps``, ``n_outside_support``, one warning
    per column and level): no weighting can cover those rows. ``categorical``/``numeric`` override
    column types.
    """
    if (target_ratios is None) == (probabilities is None):
        raise ShiftweightError("give exactly one of `target_ratios` or `probabilities`")
    if (source is None) != (target is None):
        raise ShiftweightError("give both `source` and `target` tables, or neither")
    if source is not None:
        if target_ratios is None:
            raise ShiftweightError("`source` and `target` tables need `target_ratios` (not `probabilities`)")
        return OverlapReport(
            _native.check_overlap_tables(
                as_vector(target_ratios, "target_ratios"),
                float(limit),
                float(tolerance),
                as_table(source, "source", categorical, numeric),
                as_table(target, "target", categorical, numeric),
            )
        )
    if target_ratios is not None:
        return OverlapReport(
            _native.check_overlap(as_vector(target_ratios, "target_ratios"), float(limit), float(tolerance))
        )
    if n_source is None or n_target is None:
        raise ShiftweightError("`probabilities` need `n_source` and `n_target` (the class sizes of the classifier)")
    p = as_vector(probabilities, "probabilities")
    return OverlapReport(
        _native.check_overlap_probabilities(
            p, as_count(n_source, "n_source"), as_count(n_target, "n_target"), float(limit), float(tolerance)
        )
    )
