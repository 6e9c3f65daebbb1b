"""Label shift: the class mix changes between source and target, the look of each class does not.

Everything works on a classifier's class probabilities, so any classifier can be used:

- :class:`LabelShift` estimates the target's class proportions q(y) from out-of-fold probabilities
  on labelled source rows and probabilities on unlabelled target rows. Default: maximum likelihood
  by EM (Saerens, Latinne & Decaestecker 2002) on probabilities calibrated by bias-corrected
  temperature scaling fitted on the source (Alexandari, Kundaje & Shrikumar 2020), with a seeded
  percentile-bootstrap interval; alternative: the confusion-matrix method BBSE (Lipton, Wang &
  Smola 2018) with a delta-method interval. It then gives the class weights w(y) = q(y) / p(y)
  (``sample_weight``, for retraining; they go through :func:`stabilize` and :func:`diagnose` like
  any weights) and prior-adjusted probabilities p_t(y | x) proportional to w(y) p_s(y | x)
  (``adjust_probabilities``, for the existing model without retraining).
- :func:`class_mix_test` tests whether the predicted-class mix differs between source and target
  (black-box shift detection, Rabanser, Guennemann & Lipton 2019).
- :func:`class_matched_rows` picks a source subsample with the estimated target class mix: a
  covariate shift test between it and the target asks whether anything is left once the class mix
  is accounted for.
- :func:`out_of_fold_proba` gives out-of-fold probabilities of any scikit-learn-style classifier
  (including :class:`WeightedLogistic`) with stratified, seeded folds.

The computations run in the Rust core (``shiftweight::label``) with the GIL released.

Cautions: label-shift correction assumes p(x | y) and the classifier's errors are the same in both
populations; it does not correct covariate or concept shift; it needs a classifier that tells the
classes apart; with few target rows the proportions are uncertain. Decisions about people still
need validation on labelled target rows and the review of their domain.
"""

from __future__ import annotations

import html
import json
import os
from typing import Any, Dict, List, Optional, Sequence, Tuple

import numpy as np

from . import _native
from ._base import ParamsMixin
from ._native import ShiftweightError
from ._validation import NotFittedError, as_count, as_matrix, as_seed, as_vector

__all__ = [
    "LabelShift",
    "LabelShiftResult",
    "ClassMixTestResult",
    "class_mix_test",
    "class_matched_rows",
    "out_of_fold_proba",
]


def _proba(x: Any, name: str) -> np.ndarray:
    arr, _ = as_matrix(x, name)
    return arr


def _fmt_p(p: float) -> str:
    return f"{p:.3g}" if p >= 1e-4 else f"{p:.2e}"


def _encode(labels: Any, classes: np.ndarray, name: str) -> np.ndarray:
    """Codes 0..K-1 of ``labels`` in the order of ``classes``; names the first unknown label."""
    y = np.asarray(labels)
    if y.ndim != 1:
        raise ShiftweightError(f"`{name}` must be 1-D but has shape {y.shape}")
    try:
        order = np.argsort(classes, kind="stable")
        pos = np.clip(np.searchsorted(classes[order], y), 0, len(classes) - 1)
        codes = order[pos]
        bad = np.flatnonzero(classes[codes] != y)
    except TypeError:
        raise ShiftweightError(
            f"`{name}` holds labels of another type than the classes {classes.tolist()}"
        ) from None
    if bad.size:
        i = int(bad[0])
        raise ShiftweightError(
            f"`{name}` row {i} has label {y[i]!r}, which is not one of the classes {classes.tolist()}"
        )
    return np.ascontiguousarray(codes, dtype=np.float64)


class LabelShiftResult:
    """A fitted label-shift estimate: what :meth:`LabelShift.fit` found (also ``result_``).

    Attributes
    ----------
    method : ``"em"`` or ``"bbse"``, the estimate reported in ``target_proportions``.
    classes : class names (strings), in probability-column order.
    source_proportions, target_proportions : p(y) of the labelled source rows and the estimated
        q(y) of the target (arrays summing to 1).
    interval_low, interval_high : the ``level`` interval of each q(y) (None for EM with
        ``bootstrap=0``); ``interval_method`` says how it was obtained.
    class_weights : w(y) = q(y) / p(y).
    bbse, em : dicts with each method's details (None when not computed): BBSE's raw solution,
        standard errors, confusion matrix and condition number; EM's iterations, calibration
        (inverse temperature and biases) and log-likelihood gain.
    n_source, n_target, level, seed, warnings : facts of the fit.
    """

    _format = "shiftweight.label-shift"

    def __init__(self, document: str):
        doc = json.loads(document)
        if doc.get("format") != self._format or doc.get("version") != 1:
            raise _native.ModelFileError(f"not a {self._format} document of version 1")
        self._doc = doc
        b = doc["model"]
        k = int(b["n_classes"])
        self.method: str = b["method"]
        self.classes: List[str] = list(b["class_names"]) if b.get("class_names") else [str(j) for j in range(k)]
        self.n_source: int = int(b["n_source"])
        self.n_target: int = int(b["n_target"])
        self.level: float = float(b["level"])
        self.source_proportions = np.asarray(b["source_proportions"], dtype=float)
        self.target_proportions = np.asarray(b["target_proportions"], dtype=float)
        low, high = b.get("interval_low"), b.get("interval_high")
        self.interval_low: Optional[np.ndarray] = None if low is None else np.asarray(low, dtype=float)
        self.interval_high: Optional[np.ndarray] = None if high is None else np.asarray(high, dtype=float)
        self.interval_method: str = b["interval_method"]
        self.class_weights = np.asarray(b["class_weights"], dtype=float)
        self.bbse: Optional[Dict[str, Any]] = b.get("bbse")
        self.em: Optional[Dict[str, Any]] = b.get("em")
        self.seed: int = int(b["seed"])
        self.warnings: List[str] = list(b["warnings"])

    def adjust_probabilities(self, proba: Any) -> np.ndarray:
        """Prior-adjusted probabilities p_t(y | x) proportional to w(y) p_s(y | x) (Saerens et al.
        2002), for rows scored by the source classifier; with EM the calibration fitted on the
        source is applied first, as EM used it. Shape (n, K), rows sum to 1."""
        return _native.label_shift_adjust(self.to_json(), _proba(proba, "proba"))

    def to_dict(self) -> Dict[str, Any]:
        """The estimate as plain Python values (the ``model`` part of the JSON document)."""
        return json.loads(json.dumps(self._doc["model"]))

    def to_json(self) -> str:
        """The versioned JSON document ``{"format": "shiftweight.label-shift", ...}``."""
        return json.dumps(self._doc)

    @classmethod
    def from_json(cls, text: str) -> LabelShiftResult:
        """Reads a document written by :meth:`to_json` or by the command line."""
        # The core checks format, version and consistency (lengths, weights, calibration).
        return cls(_native.label_shift_from_json(text))

    def __reduce__(self):
        return (type(self).from_json, (self.to_json(),))

    def __eq__(self, other: object) -> bool:
        return isinstance(other, LabelShiftResult) and self._doc == other._doc

    __hash__ = None  # type: ignore[assignment]

    def _interval(self, j: int) -> str:
        if self.interval_low is None or self.interval_high is None:
            return "-"
        return f"{self.interval_low[j]:.3f} to {self.interval_high[j]:.3f}"

    def _table(self) -> Tuple[List[str], List[List[str]]]:
        head = ["class", "source share", "target share", f"{100 * self.level:g}% interval", "class weight"]
        rows = [
            [
                c,
                f"{self.source_proportions[j]:.3f}",
                f"{self.target_proportions[j]:.3f}",
                self._interval(j),
                f"{self.class_weights[j]:.3f}",
            ]
            for j, c in enumerate(self.classes)
        ]
        return head, rows

    def _summary(self) -> str:
        name = {"em": "EM on calibrated probabilities", "bbse": "confusion-matrix method (BBSE)"}[self.method]
        cond = ""
        if self.bbse is not None:
            cond = f"; confusion-matrix condition number {self.bbse['condition_number']:.1f}"
        return (
            f"target class mix by {name}: {self.n_source} labelled source rows, {self.n_target} target "
            f"rows; interval: {self.interval_method}{cond}"
        )

    def __repr__(self) -> str:
        head, rows = self._table()
        cells = [head] + rows
        widths = [max(len(r[c]) for r in cells) for c in range(len(head))]
        lines = ["LabelShiftResult", "  " + self._summary()]
        lines += ["  " + "  ".join(v.ljust(w) for v, w in zip(r, widths)) for r in cells]
        lines += [f"  warning: {w}" for w in self.warnings]
        lines.append(f"  note: {_native.TELLING_APART}")
        lines.append(f"  caution: {_native.LABEL_SHIFT_CAUTION}")
        return "\n".join(lines)

    def to_html(self) -> str:
        """An HTML fragment: the table of shares, intervals and weights, warnings, guidance and
        cautions (also what notebooks show)."""
        head, rows = self._table()
        th = "".join(f"<th>{html.escape(c)}</th>" for c in head)
        body = "".join("<tr>" + "".join(f"<td>{html.escape(v)}</td>" for v in r) + "</tr>" for r in rows)
        warn = "".join(f"<li><strong>warning:</strong> {html.escape(w)}</li>" for w in self.warnings)
        return (
            f"<div><strong>Label shift: estimated target class mix</strong>"
            f"<p>{html.escape(self._summary())}</p>"
            f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"
            f"<ul>{warn}<li>{html.escape(_native.TELLING_APART)}</li></ul>"
            f"<p><em>{html.escape(_native.LABEL_SHIFT_CAUTION)}</em></p></div>"
        )

    def _repr_html_(self) -> str:
        return self.to_html()

    def write_report(
        self,
        path: str | os.PathLike[str],
        mix_test: Optional[ClassMixTestResult] = None,
        json_path: Optional[str | os.PathLike[str]] = None,
    ) -> str:
        """Writes the HTML report page of this estimate (the same page as the command line's
        ``class-mix --report``): shares with their intervals, method, class weights, the
        predicted-class mix test when ``mix_test`` is given (:func:`class_mix_test` on the same
        probabilities), warnings and cautions. The file is replaced atomically. ``json_path``:
        also write the JSON report. Returns the report's summary paragraph. To add this section
        to the covariate-shift report, pass ``label_shift=`` to :func:`write_report`."""
        if mix_test is not None and not isinstance(mix_test, ClassMixTestResult):
            raise ShiftweightError(
                f"`mix_test` must be a ClassMixTestResult (from sw.class_mix_test), got {type(mix_test).__name__}"
            )
        return str(
            _native.write_label_shift_report(
                self.to_json(),
                None if mix_test is None else mix_test.to_json(),
                os.fspath(path),
                None if json_path is None else os.fspath(json_path),
            )
        )


class LabelShift(ParamsMixin):
    """Estimates the target's class proportions under label shift, and corrects for them.

    Parameters
    ----------
    method : ``"em"`` (default; EM maximum likelihood on probabilities calibrated on the source by
        bias-corrected temperature scaling) or ``"bbse"`` (confusion-matrix method). Both are
        computed when possible; ``method`` picks the one reported and used for the weights.
    level : confidence level of the intervals, in (0, 1).
    bootstrap : bootstrap replicates of the EM interval (0 = no interval, else >= 20).
    seed : seed of the bootstrap.
    max_iter : largest number of EM iterations.
    classes : the class labels in probability-column order (e.g. ``clf.classes_``). Default: the
        sorted distinct source labels, or 0..K-1 when the labels are whole numbers that fit the K
        probability columns (so a class absent from the source is reported, not silently dropped).

    Attributes (after ``fit``)
    --------------------------
    classes_, source_proportions_, target_proportions_, interval_ (pair of arrays or None),
    class_weights_, warnings_, result_ (a :class:`LabelShiftResult`, which prints, renders in
    notebooks and saves as JSON).

    Pass out-of-fold probabilities for the source rows (:func:`out_of_fold_proba`), never
    probabilities of rows the classifier was trained on: they are overconfident and bias both the
    confusion matrix and the calibration.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> ys = rng.integers(0, 2, 2000); yt = (rng.random(2000) < 0.7).astype(int)
    >>> score = lambda y: rng.normal(2.0 * y - 1.0, 1.0)
    >>> def proba(s): p1 = 1 / (1 + np.exp(-2 * s)); return np.column_stack([1 - p1, p1])
    >>> est = sw.LabelShift(bootstrap=50).fit(proba(score(ys)), ys, proba(score(yt)))
    >>> bool(abs(est.target_proportions_[1] - 0.7) < 0.05)
    True
    >>> w = est.sample_weight(ys)        # w(y_i), usable as sample_weight for retraining
    >>> sw.diagnose(w, groups=ys).verdict
    'good'
    """

    def __init__(
        self,
        method: str = "em",
        level: float = 0.95,
        bootstrap: int = 200,
        seed: int = 0,
        max_iter: int = 10_000,
        classes: Optional[Sequence[Any]] = None,
    ):
        self.method = method
        self.level = level
        self.bootstrap = bootstrap
        self.seed = seed
        self.max_iter = max_iter
        self.classes = classes

    def _classes_for(self, y: np.ndarray, k: int) -> np.ndarray:
        if self.classes is not None:
            classes = np.asarray(self.classes)
            if classes.ndim != 1 or classes.shape[0] != k:
                raise ShiftweightError(
                    f"`classes` has {classes.size} entries but the probabilities have {k} columns"
                )
            if np.unique(classes).shape[0] != k:
                raise ShiftweightError(f"`classes` has repeated entries: {classes.tolist()}")
            return classes
        found = np.unique(y)
        if found.shape[0] == k:
            return found
        if y.dtype.kind in "iu" or (y.dtype.kind == "f" and np.all(np.mod(y, 1) == 0)):
            if found.size and found.min() >= 0 and found.max() < k:
                return np.arange(k)
        raise ShiftweightError(
            f"`source_labels` holds {found.shape[0]} distinct labels but the probabilities have {k} "
            "columns; pass classes= in column order (e.g. clf.classes_)"
        )

    def fit(self, source_proba: Any, source_labels: Any, target_proba: Any) -> LabelShift:
        """Estimates the target class proportions.

        ``source_proba`` (n_s, K): out-of-fold class probabilities of labelled source rows;
        ``source_labels`` (n_s,): their labels; ``target_proba`` (n_t, K): probabilities of the
        unlabelled target rows from the classifier trained on the source.
        """
        ps = _proba(source_proba, "source_proba")
        pt = _proba(target_proba, "target_proba")
        y = np.asarray(source_labels)
        if y.ndim != 1 or y.shape[0] != ps.shape[0]:
            raise ShiftweightError(f"`source_labels` must be 1-D with {ps.shape[0]} labels, got shape {y.shape}")
        classes = self._classes_for(y, ps.shape[1])
        codes = _encode(y, classes, "source_labels")
        text = _native.label_shift_fit(
            ps,
            codes,
            pt,
            str(self.method),
            float(self.level),
            as_count(self.bootstrap, "bootstrap"),
            as_seed(self.seed),
            as_count(self.max_iter, "max_iter"),
            [str(c) for c in classes],
        )
        self.classes_ = classes
        self.result_ = LabelShiftResult(text)
        r = self.result_
        self.source_proportions_ = r.source_proportions
        self.target_proportions_ = r.target_proportions
        self.interval_ = None if r.interval_low is None else (r.interval_low, r.interval_high)
        self.class_weights_ = r.class_weights
        self.warnings_ = r.warnings
        return self

    def _fitted(self) -> LabelShiftResult:
        r = getattr(self, "result_", None)
        if r is None:
            raise NotFittedError(
                "this LabelShift is not fitted yet; call fit(source_proba, source_labels, target_proba)"
            )
        return r

    def sample_weight(self, labels: Any) -> np.ndarray:
        """w(y_i) = q(y_i) / p(y_i) of every row with label ``labels[i]``: weights that make the
        labelled source rows look like the target's class mix (pass as ``sample_weight`` when
        retraining; check them with :func:`diagnose`, tame them with :func:`stabilize`)."""
        r = self._fitted()
        codes = _encode(labels, self.classes_, "labels").astype(np.int64)
        return r.class_weights[codes]

    def adjust_probabilities(self, proba: Any) -> np.ndarray:
        """Prior-adjusted probabilities for the target (see :meth:`LabelShiftResult.adjust_probabilities`)."""
        return self._fitted().adjust_probabilities(proba)

    def class_matched_rows(self, labels: Any, seed: Optional[int] = None) -> np.ndarray:
        """Indices of a source subsample whose class mix is the estimated target mix (see
        :func:`class_matched_rows`); ``seed`` defaults to the estimator's."""
        self._fitted()
        return class_matched_rows(
            labels, self.target_proportions_, classes=self.classes_, seed=self.seed if seed is None else seed
        )

    def to_json(self) -> str:
        """The estimate's JSON document (``result_.to_json()``)."""
        return self._fitted().to_json()


class ClassMixTestResult:
    """Outcome of :func:`class_mix_test`.

    Attributes: ``statistic`` (Pearson's chi-square of the 2 x K table of predicted classes),
    ``p_value``, ``p_value_method`` (``chi_square`` or ``permutation``), ``dof``, ``min_expected``
    (smallest expected count), ``permutations``, ``source_counts`` and ``target_counts`` (rows
    predicted as each class), ``seed``, ``notes`` (how to read the result, including how to tell
    label shift from covariate shift).
    """

    _format = "shiftweight.class-mix-test"

    def __init__(self, document: str):
        doc = json.loads(document)
        if doc.get("format") != self._format or doc.get("version") != 1:
            raise _native.ModelFileError(f"not a {self._format} document of version 1")
        self._doc = doc
        b = doc["model"]
        self.statistic: float = float(b["statistic"])
        self.p_value: float = float(b["p_value"])
        self.p_value_method: str = b["p_value_method"]
        self.dof: int = int(b["dof"])
        self.min_expected: float = float(b["min_expected"])
        self.permutations: int = int(b["permutations"])
        self.source_counts = np.asarray(b["source_counts"], dtype=np.int64)
        self.target_counts = np.asarray(b["target_counts"], dtype=np.int64)
        self.seed: int = int(b["seed"])
        self.notes: List[str] = list(b["notes"])

    def to_dict(self) -> Dict[str, Any]:
        """The result as plain Python values."""
        return json.loads(json.dumps(self._doc["model"]))

    def to_json(self) -> str:
        """The versioned JSON document ``{"format": "shiftweight.class-mix-test", ...}``."""
        return json.dumps(self._doc)

    @classmethod
    def from_json(cls, text: str) -> ClassMixTestResult:
        """Reads a document written by :meth:`to_json` (format and version are checked)."""
        return cls(_native.class_mix_test_from_json(text))

    def __reduce__(self):
        return (type(self).from_json, (self.to_json(),))

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ClassMixTestResult) and self._doc == other._doc

    __hash__ = None  # type: ignore[assignment]

    def _lines(self) -> List[str]:
        perms = f", {self.permutations} permutations" if self.permutations else ""
        ns, nt = int(self.source_counts.sum()), int(self.target_counts.sum())
        src = ", ".join(f"{c / ns:.3f}" for c in self.source_counts)
        tgt = ", ".join(f"{c / nt:.3f}" for c in self.target_counts)
        return [
            f"predicted-class mix test: p = {_fmt_p(self.p_value)} [{self.p_value_method}{perms}]",
            f"chi-square {self.statistic:.4g} on {self.dof} degree(s) of freedom",
            f"predicted-class shares: source ({ns} rows) {src}; target ({nt} rows) {tgt}",
        ]

    def __repr__(self) -> str:
        notes = [f"  note: {n}" for n in self.notes]
        return "\n".join(["ClassMixTestResult"] + ["  " + s for s in self._lines()] + notes)

    def to_html(self) -> str:
        """An HTML fragment with the test, the predicted-class shares and how to read them."""
        lines = self._lines()
        items = "".join(f"<li>{html.escape(s)}</li>" for s in lines[1:] + self.notes)
        return f"<div><strong>{html.escape(lines[0])}</strong><ul>{items}</ul></div>"

    def _repr_html_(self) -> str:
        return self.to_html()


def class_mix_test(
    source_proba: Any,
    target_proba: Any,
    permutations: int = 2_000,
    min_expected: float = 5.0,
    seed: int = 0,
) -> ClassMixTestResult:
    """Tests whether the predicted-class mix of the target differs from the source's.

    Black-box shift detection (Rabanser, Guennemann & Lipton 2019): Pearson's chi-square test of
    the 2 x K table of predicted classes (largest probability) of held-out source rows and target
    rows (Yates-corrected for two classes, as scipy.stats.chi2_contingency); when an expected count
    is below ``min_expected``, a permutation p-value of the same statistic with ``permutations``
    seeded shuffles. The classifier must not have been trained on the source rows tested (use
    out-of-fold probabilities). A change of predicted mix is what label shift produces, but a
    covariate shift produces it too: read ``notes``.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> p = rng.dirichlet([1, 1, 1], 500)
    >>> bool(sw.class_mix_test(p[:250], p[250:]).p_value > 0.01)
    True
    """
    ps = _proba(source_proba, "source_proba")
    pt = _proba(target_proba, "target_proba")
    text = _native.class_mix_test(ps, pt, as_count(permutations, "permutations"), float(min_expected), as_seed(seed))
    return ClassMixTestResult(text)


def class_matched_rows(
    labels: Any, proportions: Any, classes: Any = None, seed: int = 0
) -> np.ndarray:
    """Indices (sorted) of a source subsample whose class mix is ``proportions``.

    The largest N with N q_j <= n_j for every class j, and floor(N q_j) rows of class j drawn
    without replacement (seeded). Run a covariate shift test (:func:`shift_test`) between these
    rows and the target: if the signal found against the whole source vanishes, a change of class
    mix explains the shift. ``classes``: the labels in the order of ``proportions`` (default: the
    sorted distinct labels).

    >>> import shiftweight as sw
    >>> sw.class_matched_rows([0, 0, 0, 0, 1, 1, 1, 1], [0.25, 0.75]).size
    5
    """
    q = as_vector(proportions, "proportions")
    y = np.asarray(labels)
    cls = np.unique(y) if classes is None else np.asarray(classes)
    if cls.shape[0] != q.shape[0]:
        raise ShiftweightError(f"`proportions` has {q.shape[0]} shares but there are {cls.shape[0]} classes")
    codes = _encode(y, cls, "labels")
    return _native.class_matched_rows(codes, q, as_seed(seed))


def out_of_fold_proba(estimator: Any, X: Any, y: Any, folds: int = 5, seed: int = 0) -> np.ndarray:
    """Out-of-fold class probabilities of ``estimator`` on (X, y): each row is scored by a copy
    fitted on the other folds. Folds are stratified by class and seeded (each fold holds every
    class's share up to one row). Columns follow the sorted distinct labels (scikit-learn's
    ``classes_`` order). ``estimator`` needs ``fit(X, y)`` and ``predict_proba(X)``; copies are made
    with ``sklearn.base.clone`` when scikit-learn is installed, else from ``get_params()``.

    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(100, 2)); y = (X[:, 0] > 0).astype(int)
    >>> sw.out_of_fold_proba(sw.WeightedLogistic(), X, y).shape
    (100, 2)
    """
    x, _ = as_matrix(X, "X")
    labels = np.asarray(y)
    if labels.ndim != 1 or labels.shape[0] != x.shape[0]:
        raise ShiftweightError(f"`y` must be 1-D with {x.shape[0]} labels, got shape {labels.shape}")
    classes, codes = np.unique(labels, return_inverse=True)
    fold = _native.stratified_kfold_assignment(
        np.ascontiguousarray(codes.reshape(-1), dtype=np.float64), as_count(folds, "folds"), as_seed(seed)
    )
    out = np.zeros((x.shape[0], classes.shape[0]))
    for f in range(int(folds)):
        test = fold == f
        model = _clone(estimator)
        model.fit(x[~test], labels[~test])
        p = np.asarray(model.predict_proba(x[test]), dtype=float)
        fitted = np.asarray(getattr(model, "classes_", classes))
        if fitted.shape[0] != p.shape[1]:
            raise ShiftweightError(
                f"the estimator returned {p.shape[1]} probability columns for {fitted.shape[0]} classes"
            )
        cols = np.searchsorted(classes, fitted)
        out[np.ix_(np.flatnonzero(test), cols)] = p
    return out


def _clone(estimator: Any) -> Any:
    try:
        from sklearn.base import clone
    except ImportError:
        return type(estimator)(**estimator.get_params())
    return clone(estimator)
