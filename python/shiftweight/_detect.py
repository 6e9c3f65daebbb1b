"""Is there a shift, and where? Two-sample tests and per-feature shift tables.

``shift_test`` answers "do the target inputs differ from the source inputs by more than sampling
noise?" with a p-value that is valid under the null hypothesis of one common distribution;
``feature_shift`` answers "in which features?". Both run in the Rust core with the GIL released;
every random step is seeded.

A small p-value says the samples differ; it does not say the difference matters (read the AUC,
MMD^2 and the standardised effect sizes for that), nor that importance weighting will fix it:
weighting corrects covariate shift only (not label or concept shift) and fails where the source
does not cover the target.
"""

from __future__ import annotations

import html
import json
from typing import Any, ClassVar, Dict, List, Optional, Sequence

from . import _native
from ._tables import as_table, is_table_input, plain
from ._validation import as_count, as_matrix, as_seed, check_same_columns

__all__ = ["shift_test", "feature_shift", "ShiftTestResult", "FeatureShiftTable"]

_CAUTION = (
    "A small p-value means the inputs differ by more than sampling noise; it does not measure how "
    "much the difference matters. Weighting corrects covariate shift only and needs overlapping support."
)


def _tables(source: Any, target: Any, categorical: Any, numeric: Any):
    """Both inputs as typed tables when either needs the typed path, else None."""
    if is_table_input(source, categorical, numeric) or is_table_input(target, categorical, numeric):
        return as_table(source, "source", categorical, numeric), as_table(target, "target", categorical, numeric)
    return None


def _pair(source: Any, target: Any, categorical: Any = None, numeric: Any = None):
    tables = _tables(source, target, categorical, numeric)
    if tables is not None:
        zs, zt, _, names, _ = _native.encode_pair(*tables)
        return zs, zt, names
    s, names_s = as_matrix(plain(source), "source")
    t, names_t = as_matrix(plain(target), "target")
    if t.shape[1] != s.shape[1]:
        raise _native.ShiftweightError(
            f"`target` has {t.shape[1]} feature column(s) but `source` has {s.shape[1]}"
        )
    check_same_columns(names_s, names_t, "source", "target")
    return s, t, names_s or names_t


def _fmt_p(p: float) -> str:
    return f"{p:.3g}" if p >= 1e-4 else f"{p:.2e}"


class ShiftTestResult:
    """Outcome of :func:`shift_test`.

    Attributes
    ----------
    method : ``"classifier"`` or ``"mmd"``.
    statistic : the AUC (classifier) or MMD^2 (mmd).
    p_value : the p-value; ``p_value_method`` says how it was obtained (``permutation``,
        ``held_out_normal`` or ``block_permutation``) and ``permutations`` how many were used.
    n_source, n_target, n_features, seed, notes : facts of the run.
    details : dict of method-specific facts. Classifier: ``auc``, ``auc_std_error``,
        ``auc_ci_low``, ``auc_ci_high``, ``classifier``, ``l2``, ``folds``, ``n_scored``. MMD:
        ``mmd2``, ``sigma``, ``sigma_from_median``, ``estimator`` (``quadratic`` or ``block``),
        ``blocks``, ``block_size``.
    """

    def __init__(self, document: Dict[str, Any]):
        self._doc = document
        body = document["model"]
        self.method: str = body["method"]
        self.statistic: float = float(body["statistic"])
        self.p_value: float = float(body["p_value"])
        self.p_value_method: str = body["p_value_method"]
        self.permutations: int = int(body["permutations"])
        self.n_source: int = int(body["n_source"])
        self.n_target: int = int(body["n_target"])
        self.n_features: int = int(body["n_features"])
        self.seed: int = int(body["seed"])
        self.details: Dict[str, Any] = dict(body["details"])
        self.notes: List[str] = list(body["notes"])

    # Method-specific conveniences.
    @property
    def auc(self) -> Optional[float]:
        """AUC of the classifier test (None for MMD)."""
        return self.details.get("auc")

    @property
    def auc_ci(self) -> Optional[tuple]:
        """95% DeLong interval of the AUC (None for MMD)."""
        if "auc_ci_low" not in self.details:
            return None
        return (self.details["auc_ci_low"], self.details["auc_ci_high"])

    @property
    def mmd2(self) -> Optional[float]:
        """MMD^2 estimate (None for the classifier test)."""
        return self.details.get("mmd2")

    @property
    def sigma(self) -> Optional[float]:
        """Kernel width in standardised units (None for the classifier test)."""
        return self.details.get("sigma")

    @property
    def estimator(self) -> Optional[str]:
        """``quadratic`` or ``block`` (None for the classifier test)."""
        return self.details.get("estimator")

    def to_dict(self) -> Dict[str, Any]:
        """The result as plain Python values (the ``model`` part of the JSON document)."""
        return json.loads(json.dumps(self._doc["model"]))

    def to_json(self) -> str:
        """The versioned JSON document ``{"format": "shiftweight.shift-test", ...}``."""
        return json.dumps(self._doc)

    @classmethod
    def from_json(cls, text: str) -> ShiftTestResult:
        """Reads a document written by :meth:`to_json` (format and version are checked)."""
        doc = json.loads(text)
        if doc.get("format") != "shiftweight.shift-test" or doc.get("version") != 1:
            raise _native.ModelFileError("not a shiftweight.shift-test document of version 1")
        return cls(doc)

    def _summary_lines(self) -> List[str]:
        if self.method == "classifier":
            d = self.details
            effect = f"AUC {d['auc']:.3f} (95% CI {d['auc_ci_low']:.3f} to {d['auc_ci_high']:.3f})"
            how = d["classifier"]
        else:
            d = self.details
            effect = f"MMD^2 {d['mmd2']:.4g} (Gaussian kernel, sigma {d['sigma']:.3g}, {d['estimator']} estimator)"
            how = "kernel two-sample test (Gretton et al. 2012)"
        perms = f", {self.permutations} permutations" if self.permutations else ""
        return [
            f"shift test ({self.method}): p = {_fmt_p(self.p_value)} [{self.p_value_method}{perms}]",
            effect,
            f"{self.n_source} source rows, {self.n_target} target rows, {self.n_features} features; {how}",
        ]

    def __repr__(self) -> str:
        return "\n".join(["ShiftTestResult"] + ["  " + s for s in self._summary_lines()])

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        items = "".join(f"<li>{html.escape(s)}</li>" for s in self._summary_lines()[1:] + self.notes)
        head = html.escape(self._summary_lines()[0])
        return (
            f"<div><strong>{head}</strong><ul>{items}</ul>"
            f"<p><em>{html.escape(_CAUTION)}</em></p></div>"
        )

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ShiftTestResult) and self._doc == other._doc


def shift_test(
    source: Any,
    target: Any,
    method: str = "classifier",
    permutations: int = 200,
    seed: int = 0,
    *,
    folds: int = 5,
    l2: float = 1.0,
    max_permutation_rows: int = 5_000,
    sigma: Optional[float] = None,
    max_kernel_rows: int = 5_000,
    block_size: Optional[int] = None,
    categorical: Optional[Sequence[str]] = None,
    numeric: Optional[Sequence[str]] = None,
) -> ShiftTestResult:
    """Tests whether ``target`` rows come from the same distribution as ``source`` rows.

    Parameters
    ----------
    source, target : 2-D arrays or DataFrames with the same columns.
    method : ``"classifier"`` (Lopez-Paz & Oquab 2017: out-of-fold AUC of a logistic
        source-vs-target classifier on standardised features; sees location shifts along any
        direction) or ``"mmd"`` (Gretton et al. 2012: unbiased MMD^2 with a Gaussian kernel at the
        median-heuristic width; sees any difference of distribution, including spread and shape).
    permutations : label permutations of the permutation p-value, (1 + #exceed) / (1 + B).
    seed : seed of folds, permutations, splits and subsamples.
    folds, l2, max_permutation_rows : classifier options. Up to ``max_permutation_rows`` pooled
        rows every row is scored by ``folds``-fold cross-fitting and the p-value is a permutation
        test with refits; above it one seeded half trains, the other is scored, and the p-value is
        the normal approximation of the Mann-Whitney U.
    sigma, max_kernel_rows, block_size : MMD options. Up to ``max_kernel_rows`` pooled rows the
        full kernel matrix is used with a permutation p-value; above it the block estimator
        (blocks of about sqrt(n) rows, at most 250; Zaremba et al. 2013) whose p-value comes from
        relabelling the rows within every block ``permutations`` times (exact level).
    categorical, numeric : column-type overrides for tables; DataFrames and pyarrow Tables with
        text, categorical or boolean columns or missing values are encoded on the pooled rows
        first (``docs/tables.md``) and tested in that space.

    Returns
    -------
    ShiftTestResult with ``statistic``, ``p_value``, ``method`` and method-specific details.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (200, 3)), rng.normal(0, 1, (200, 3)) + [0.8, 0, 0]
    >>> res = sw.shift_test(src, tgt, permutations=99)
    >>> res.p_value <= 0.01
    True
    """
    s, t, _ = _pair(source, target, categorical, numeric)
    if method == "classifier":
        text = _native.shift_test_classifier(
            s,
            t,
            as_count(permutations, "permutations"),
            as_seed(seed),
            as_count(folds, "folds"),
            float(l2),
            as_count(max_permutation_rows, "max_permutation_rows"),
        )
    elif method == "mmd":
        text = _native.shift_test_mmd(
            s,
            t,
            as_count(permutations, "permutations"),
            as_seed(seed),
            None if sigma is None else float(sigma),
            as_count(max_kernel_rows, "max_kernel_rows"),
            None if block_size is None else as_count(block_size, "block_size"),
        )
    else:
        raise _native.ShiftweightError(f"`method` must be \"classifier\" or \"mmd\", got {method!r}")
    return ShiftTestResult(json.loads(text))


_COLUMNS = [
    "feature",
    "kind",
    "test",
    "statistic",
    "p_value",
    "p_adjusted",
    "smd",
    "wasserstein_sd",
    "auc_drop",
    "n_distinct",
    "dof",
    "ks_mode",
    "index",
]
# Columns present only for typed tables (categorical effect sizes and missing rates).
_TABLE_COLUMNS = [
    "tv_distance",
    "top_level",
    "top_level_source",
    "top_level_target",
    "pooled_levels",
    "missing_source",
    "missing_target",
]


class FeatureShiftTable:
    """Per-feature shift summaries, most-shifted first (result of :func:`feature_shift`).

    Columns: ``feature`` (name), ``kind`` (continuous / categorical), ``test`` (ks / chi_square),
    ``statistic``, ``p_value``, ``p_adjusted`` (Benjamini-Hochberg 1995), ``smd`` (standardised
    mean difference, target minus source), ``wasserstein_sd`` (Wasserstein-1 distance over the
    pooled sd), ``auc_drop`` (classifier AUC lost when the feature is permuted), ``n_distinct``,
    ``dof``, ``ks_mode``, ``index`` (column position in the input).
    """

    def __init__(self, document: Dict[str, Any]):
        self._doc = document
        body = document["model"]
        self.rows: List[Dict[str, Any]] = [dict(r) for r in body["rows"]]
        self.classifier_auc: float = float(body["classifier_auc"])
        self.n_source: int = int(body["n_source"])
        self.n_target: int = int(body["n_target"])
        self.seed: int = int(body["seed"])
        self.notes: List[str] = list(body["notes"])

    def __len__(self) -> int:
        return len(self.rows)

    def __getitem__(self, i: int) -> Dict[str, Any]:
        return self.rows[i]

    @property
    def features(self) -> List[str]:
        """Feature names, most-shifted first."""
        return [r["feature"] for r in self.rows]

    def to_pandas(self):
        """A pandas DataFrame, one row per feature, most-shifted first."""
        import pandas as pd

        cols = _COLUMNS + [c for c in _TABLE_COLUMNS if any(c in r for r in self.rows)]
        return pd.DataFrame([{c: r.get(c) for c in cols} for r in self.rows], columns=cols)

    def to_dict(self) -> Dict[str, Any]:
        """The table as plain Python values."""
        return json.loads(json.dumps(self._doc["model"]))

    def to_json(self) -> str:
        """The versioned JSON document ``{"format": "shiftweight.feature-shift", ...}``."""
        return json.dumps(self._doc)

    @classmethod
    def from_json(cls, text: str) -> FeatureShiftTable:
        """Reads a document written by :meth:`to_json`."""
        doc = json.loads(text)
        if doc.get("format") != "shiftweight.feature-shift" or doc.get("version") != 1:
            raise _native.ModelFileError("not a shiftweight.feature-shift document of version 1")
        return cls(doc)

    @staticmethod
    def _cell(v: Any) -> str:
        if v is None:
            return "-"
        if isinstance(v, float):
            return _fmt_p(v) if abs(v) < 1e-4 and v != 0 else f"{v:.4g}"
        return str(v)

    _SHOWN: ClassVar[List[str]] = [
        "feature", "test", "statistic", "p_value", "p_adjusted", "smd", "wasserstein_sd", "auc_drop"
    ]

    def __repr__(self) -> str:
        cells = [self._SHOWN] + [[self._cell(r[c]) for c in self._SHOWN] for r in self.rows]
        widths = [max(len(row[k]) for row in cells) for k in range(len(self._SHOWN))]
        lines = ["  ".join(v.ljust(w) for v, w in zip(row, widths)) for row in cells]
        head = (
            f"FeatureShiftTable: {len(self.rows)} features, most-shifted first "
            f"(classifier AUC {self.classifier_auc:.3f}; {self.n_source} source, {self.n_target} target rows)"
        )
        return "\n".join([head] + lines)

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        th = "".join(f"<th>{html.escape(c)}</th>" for c in self._SHOWN)
        body = "".join(
            "<tr>" + "".join(f"<td>{html.escape(self._cell(r[c]))}</td>" for c in self._SHOWN) + "</tr>"
            for r in self.rows
        )
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<div><strong>Feature shift, most-shifted first</strong> "
            f"(classifier AUC {self.classifier_auc:.3f})<table><thead><tr>{th}</tr></thead>"
            f"<tbody>{body}</tbody></table><ul>{notes}</ul>"
            f"<p><em>{html.escape(_CAUTION)} p_adjusted: Benjamini-Hochberg.</em></p></div>"
        )


def feature_shift(
    source: Any,
    target: Any,
    feature_names: Optional[Sequence[str]] = None,
    *,
    max_categories: int = 10,
    folds: int = 5,
    l2: float = 1.0,
    repeats: int = 5,
    max_importance_rows: int = 50_000,
    seed: int = 0,
    categorical: Optional[Sequence[str]] = None,
    numeric: Optional[Sequence[str]] = None,
) -> FeatureShiftTable:
    """Which features moved: one two-sample test per feature, sorted most-shifted first.

    Columns with at most ``max_categories`` distinct values get a chi-square test on counts
    (Yates-corrected for two categories, as scipy.stats.chi2_contingency); the others a two-sample
    Kolmogorov-Smirnov test (exact p-values up to 10,000 rows per sample, as
    scipy.stats.ks_2samp). P-values are adjusted by Benjamini-Hochberg (1995). Effect sizes are in
    pooled standard deviations. ``auc_drop`` is the fall in the out-of-fold AUC of the classifier
    test's logistic classifier when the feature is permuted (``repeats`` seeded permutations,
    on at most ``max_importance_rows`` pooled rows). DataFrame column names are used when
    ``feature_names`` is None.

    Tables (DataFrames or pyarrow Tables with text, categorical or boolean columns or missing
    values; ``categorical``/``numeric`` override types) get one row per column: categorical
    columns a chi-square test of their level counts (levels with an expected count below 5 pooled
    into one cell), with ``tv_distance`` and the level that moved most (``top_level``); numeric
    columns the tests above on their present values; and every column with a missing value a
    second row ``"<column> (missing)"`` with a two-proportion z-test of the missing rates
    (``missing_source``, ``missing_target``). All p-values are adjusted together.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(1)
    >>> src = rng.normal(0, 1, (300, 3))
    >>> tgt = rng.normal(0, 1, (300, 3)) + [0, 0.7, 0]
    >>> sw.feature_shift(src, tgt, feature_names=["a", "b", "c"]).features[0]
    'b'
    """
    tables = _tables(source, target, categorical, numeric)
    if tables is not None:
        text = _native.feature_shift_table(
            tables[0],
            tables[1],
            as_count(max_categories, "max_categories"),
            as_count(folds, "folds"),
            float(l2),
            as_count(repeats, "repeats"),
            as_count(max_importance_rows, "max_importance_rows"),
            as_seed(seed),
        )
        return FeatureShiftTable(json.loads(text))
    s, t, names = _pair(source, target)
    if feature_names is not None:
        names = [str(v) for v in feature_names]
        if len(names) != s.shape[1]:
            raise _native.ShiftweightError(
                f"`feature_names` has {len(names)} names but the data have {s.shape[1]} columns"
            )
    text = _native.feature_shift(
        s,
        t,
        names,
        as_count(max_categories, "max_categories"),
        as_count(folds, "folds"),
        float(l2),
        as_count(repeats, "repeats"),
        as_count(max_importance_rows, "max_importance_rows"),
        as_seed(seed),
    )
    return FeatureShiftTable(json.loads(text))
