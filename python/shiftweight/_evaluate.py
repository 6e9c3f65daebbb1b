"""Estimating target-population performance before target labels exist.

- ``iw_cross_validate``: importance-weighted cross-validation (IWCV; Sugiyama, Krauledat, Mueller
  2007, JMLR 8) for any scikit-learn-compatible model. In every fold the training part is fitted
  with its weights (passed as ``sample_weight``) and the held-out part is scored with its weights.
- ``compare_weighting``: the same estimate for weighted and unweighted training side by side,
  paired over the same folds, with a plain-words verdict.
- ``weighted_metric``: a weighted metric with a confidence interval that accounts for the weights.

The Python layer only loops over folds and calls the user's model; per-row losses, weighted means,
standard errors, intervals and the verdict are computed in the Rust core (``shiftweight::metrics``).

Cautions: these estimates assume covariate shift only (p(y | x) unchanged) and weights that reflect
the target population; they are unreliable when few rows carry the weight (low effective sample
size). Confirm on labelled target data before decisions depend on them.
"""

from __future__ import annotations

import copy
import html
import inspect
from typing import Any, Callable, Dict, List, Mapping, Optional, Sequence, Tuple, Union

import numpy as np

from . import _native
from ._validation import as_vector

__all__ = [
    "iw_cross_validate",
    "compare_weighting",
    "weighted_metric",
    "CrossValidatedRisk",
    "WeightingComparison",
    "MetricEstimate",
]

_METRIC_NAMES = ("log_loss", "brier", "accuracy", "squared_error", "absolute_error")

_CAUTION = (
    "Weighting corrects covariate shift only (not label or concept shift), needs the source to "
    "cover the target, and these are estimates: confirm on labelled target data."
)


# ----------------------------------------------------------------------------- helpers


def _n_rows(X: Any) -> int:
    shape = getattr(X, "shape", None)
    if shape is not None and len(shape) >= 1:
        return int(shape[0])
    return len(X)


def _take(X: Any, idx: np.ndarray) -> Any:
    """Rows ``idx`` of an array, a pandas/polars frame or series, a pyarrow Table, or a sequence."""
    if hasattr(X, "iloc"):
        return X.iloc[idx]
    mod = type(X).__module__.split(".")[0]
    if mod == "polars":
        return X[idx]
    if mod == "pyarrow" and hasattr(X, "take"):
        return X.take(idx)
    if isinstance(X, np.ndarray):
        return X[idx]
    return np.asarray(X)[idx]


def _model_name(model: Any) -> str:
    return type(model).__name__


def _clone(model: Any) -> Any:
    """An unfitted copy with the same hyperparameters (scikit-learn's ``clone`` when available)."""
    try:
        from sklearn.base import clone  # type: ignore

        return clone(model)
    except ImportError:
        pass
    except Exception:  # not a scikit-learn estimator: fall through
        pass
    if hasattr(model, "get_params"):
        try:
            return type(model)(**model.get_params())
        except Exception:
            pass
    return copy.deepcopy(model)


def _sample_weight_key(model: Any) -> Optional[str]:
    """The keyword under which ``model.fit`` takes per-row weights, or None when it takes none."""
    fit = getattr(model, "fit", None)
    if fit is None:
        raise TypeError(f"{_model_name(model)} has no fit method; iw_cross_validate needs a scikit-learn-style model")
    steps = getattr(model, "steps", None)
    if isinstance(steps, list) and steps and hasattr(model, "named_steps"):
        # A scikit-learn Pipeline routes fit parameters as "<step>__<param>" to its final step.
        name, last = steps[-1]
        inner = _sample_weight_key(last) if last not in (None, "passthrough") else None
        return None if inner is None else f"{name}__{inner}"
    try:
        params = inspect.signature(fit).parameters
    except (TypeError, ValueError):
        return None
    if "sample_weight" in params:
        return "sample_weight"
    if any(p.kind == p.VAR_KEYWORD for p in params.values()):
        return "sample_weight"
    return None


def _fit(model: Any, X: Any, y: Any, w: Optional[np.ndarray], key: Optional[str]) -> Any:
    if w is None:
        return model.fit(X, y) or model
    if key is None:
        raise TypeError(
            f"{_model_name(model)}.fit does not accept sample_weight, so importance weights cannot be "
            "passed to it; use a model whose fit takes sample_weight (e.g. sw.WeightedLogistic, "
            "sw.WeightedRidge, or most scikit-learn estimators)"
        )
    fitted = model.fit(X, y, **{key: w})
    return model if fitted is None else fitted


def _splits(
    cv: Any, X: Any, y: Any, n: int, seed: int
) -> Tuple[List[Tuple[np.ndarray, np.ndarray]], Optional[np.ndarray]]:
    """(train, test) index pairs and, for an integer cv, the fold of every row."""
    if isinstance(cv, (int, np.integer)) and not isinstance(cv, bool):
        fold = np.asarray(_native.kfold_assignment(n, int(cv), int(seed)))
        rows = np.arange(n)
        return [(rows[fold != k], rows[fold == k]) for k in range(int(cv))], fold
    if hasattr(cv, "split"):
        pairs = [(np.asarray(tr), np.asarray(te)) for tr, te in cv.split(X, y)]
        if not pairs:
            raise _native.ShiftweightError("`cv` produced no splits")
        fold = np.full(n, -1, dtype=np.int64)
        partition = True
        for k, (_, te) in enumerate(pairs):
            if np.any(fold[te] >= 0):
                partition = False
            fold[te] = k
        return pairs, (fold if partition and np.all(fold >= 0) else None)
    raise _native.ShiftweightError(
        f"`cv` must be an int (number of folds) or a splitter with a split(X, y) method, got {type(cv).__name__}"
    )


def _check_scoring(scoring: Any) -> Tuple[str, bool]:
    """(name, greater_is_better) of a scoring argument."""
    if callable(scoring):
        return getattr(scoring, "__name__", "custom"), bool(getattr(scoring, "greater_is_better", False))
    if not isinstance(scoring, str) or scoring not in _METRIC_NAMES:
        raise _native.ShiftweightError(
            f"invalid value for `scoring`: {scoring!r}; use one of {list(_METRIC_NAMES)} or a callable "
            "(y_true, y_pred, sample_weight)"
        )
    return scoring, _native.metric_properties(scoring)[0]


def _encode(y: np.ndarray, classes: np.ndarray, what: str) -> np.ndarray:
    """Positions of the labels ``y`` in ``classes``; unseen labels raise."""
    classes = np.asarray(classes)
    order = np.argsort(classes, kind="stable")
    pos = np.searchsorted(classes[order], y)
    pos = np.clip(pos, 0, len(classes) - 1)
    found = classes[order][pos] == y
    if not np.all(found):
        bad = np.asarray(y)[~found][0]
        raise _native.ShiftweightError(f"{what}: label {bad!r} is not one of the model's classes {list(classes)}")
    return np.ascontiguousarray(order[pos], dtype=np.float64)


def _row_values(metric: str, fitted: Any, X: Any, y: Any, what: str) -> np.ndarray:
    """Per-row metric values of a fitted model on rows ``X`` with labels ``y`` (computed in the core)."""
    y = np.asarray(y)
    if metric in ("log_loss", "brier"):
        if not hasattr(fitted, "predict_proba"):
            raise TypeError(f"scoring={metric!r} needs predict_proba, which {_model_name(fitted)} does not have")
        classes = getattr(fitted, "classes_", None)
        if classes is None:
            raise TypeError(f"scoring={metric!r} needs the fitted model's classes_ attribute ({_model_name(fitted)})")
        proba = np.ascontiguousarray(fitted.predict_proba(X), dtype=np.float64)
        codes = _encode(y, classes, what)
        return _native.metric_row_values(metric, codes, proba)
    pred = np.asarray(fitted.predict(X))
    if metric == "accuracy":
        labels = np.unique(np.concatenate([y.astype(object), pred.astype(object)]).astype(str))
        yt = _encode(y.astype(str), labels, what)
        yp = _encode(pred.astype(str), labels, what)
        return _native.metric_row_values(metric, yt, yp.reshape(-1, 1))
    yt = as_vector(y, "y")
    yp = np.ascontiguousarray(pred, dtype=np.float64).reshape(-1, 1)
    return _native.metric_row_values(metric, yt, yp)


def _fmt(v: float) -> str:
    return "nan" if v is None or not np.isfinite(v) else f"{v:.4g}"


# ----------------------------------------------------------------------------- results


class CrossValidatedRisk:
    """Result of :func:`iw_cross_validate`.

    Attributes
    ----------
    estimate : float
        IWCV estimate of the target risk (mean over folds of the weighted held-out means); lower is
        better for losses, higher for accuracy (see ``greater_is_better``).
    std_error : float
        Its standard error (per-fold standard errors combined; for a callable scoring, the spread
        of the fold values). Cross-validation standard errors are somewhat optimistic.
    per_fold : ndarray
        Weighted value of every fold.
    per_fold_std_error, per_fold_ess, per_fold_n : ndarray
        Standard error, Kish effective sample size and number of held-out rows of every fold.
    unweighted_estimate, unweighted_std_error : float
        The same held-out predictions averaged without weights: the ordinary CV estimate, which
        describes the source population.
    per_fold_unweighted : ndarray
    scoring : str
    greater_is_better : bool
    folds : ndarray or None
        Fold of every row when the splits partition the rows (usable with scikit-learn's
        ``PredefinedSplit``), else None.
    """

    def __init__(self, summary: Mapping[str, Any], scoring: str, greater_is_better: bool, folds: Optional[np.ndarray]):
        self.estimate = float(summary["estimate"])
        self.std_error = float(summary["std_error"])
        self.unweighted_estimate = float(summary["unweighted_estimate"])
        self.unweighted_std_error = float(summary["unweighted_std_error"])
        per = summary["per_fold"]
        self.per_fold = np.array([f["estimate"] for f in per], dtype=float)
        self.per_fold_std_error = np.array([f["std_error"] for f in per], dtype=float)
        self.per_fold_ess = np.array([f["ess"] for f in per], dtype=float)
        self.per_fold_n = np.array([f["n"] for f in per], dtype=int)
        self.per_fold_unweighted = np.asarray(summary["per_fold_unweighted"], dtype=float)
        self.scoring = scoring
        self.greater_is_better = greater_is_better
        self.folds = folds

    @property
    def n_folds(self) -> int:
        return int(self.per_fold.shape[0])

    def to_dict(self) -> Dict[str, Any]:
        """Plain-Python summary (JSON-serialisable apart from NaN)."""
        return {
            "scoring": self.scoring,
            "greater_is_better": self.greater_is_better,
            "estimate": self.estimate,
            "std_error": self.std_error,
            "unweighted_estimate": self.unweighted_estimate,
            "unweighted_std_error": self.unweighted_std_error,
            "per_fold": self.per_fold.tolist(),
            "per_fold_std_error": self.per_fold_std_error.tolist(),
            "per_fold_ess": self.per_fold_ess.tolist(),
            "per_fold_n": self.per_fold_n.tolist(),
            "per_fold_unweighted": self.per_fold_unweighted.tolist(),
        }

    def _lines(self) -> List[str]:
        lines = [
            f"estimated target {self.scoring}: {_fmt(self.estimate)} (standard error {_fmt(self.std_error)}) "
            f"over {self.n_folds} folds",
            f"without weights (source estimate): {_fmt(self.unweighted_estimate)} "
            f"(standard error {_fmt(self.unweighted_std_error)})",
        ]
        if np.all(np.isfinite(self.per_fold_ess)):
            lines.append(
                "effective rows per held-out fold: "
                + ", ".join(f"{e:.0f}/{n}" for e, n in zip(self.per_fold_ess, self.per_fold_n))
            )
            if np.min(self.per_fold_ess) < 30:
                lines.append("caution: few effective rows in some folds; the estimate is unreliable")
        return lines

    def __repr__(self) -> str:
        return "CrossValidatedRisk(\n  " + "\n  ".join(self._lines()) + "\n)"

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        rows = "".join(
            f"<tr><td>{k}</td><td>{_fmt(v)}</td><td>{_fmt(s)}</td><td>{_fmt(u)}</td><td>{e:.1f}</td><td>{n}</td></tr>"
            for k, (v, s, u, e, n) in enumerate(
                zip(
                    self.per_fold, self.per_fold_std_error, self.per_fold_unweighted, self.per_fold_ess, self.per_fold_n
                )
            )
        )
        return (
            f"<div><b>Importance-weighted cross-validation ({html.escape(self.scoring)})</b><br>"
            f"estimated target value: <b>{_fmt(self.estimate)}</b> &plusmn; {_fmt(self.std_error)} "
            f"(without weights: {_fmt(self.unweighted_estimate)} &plusmn; {_fmt(self.unweighted_std_error)})"
            "<table><tr><th>fold</th><th>weighted</th><th>std. error</th><th>unweighted</th>"
            f"<th>effective rows</th><th>rows</th></tr>{rows}</table>"
            f"<small>{html.escape(_CAUTION)}</small></div>"
        )


class WeightingComparison:
    """Result of :func:`compare_weighting`.

    Attributes
    ----------
    weighted, unweighted : CrossValidatedRisk
        IWCV estimates of the target risk of the model trained with and without weights (both scored
        with the weights on the same held-out rows).
    difference : float
        ``weighted.estimate - unweighted.estimate``.
    difference_std_error : float
        Its standard error, paired over the same held-out rows.
    verdict : str
        ``favours_weighting``, ``favours_no_weighting`` or ``no_clear_difference``.
    message : str
        The verdict in plain words.
    """

    def __init__(
        self,
        weighted: CrossValidatedRisk,
        unweighted: CrossValidatedRisk,
        difference: float,
        difference_std_error: float,
        verdict: str,
        z: float,
    ):
        self.weighted = weighted
        self.unweighted = unweighted
        self.difference = float(difference)
        self.difference_std_error = float(difference_std_error)
        self.verdict = verdict
        self.z = z
        self.message = self._message()

    def _message(self) -> str:
        s = self.weighted.scoring
        better = "higher" if self.weighted.greater_is_better else "lower"
        numbers = (
            f"estimated target {s} ({better} is better) is {_fmt(self.weighted.estimate)} "
            f"(standard error {_fmt(self.weighted.std_error)}) with weighted training and "
            f"{_fmt(self.unweighted.estimate)} (standard error {_fmt(self.unweighted.std_error)}) without; "
            f"the paired difference is {self.difference:+.4g} (standard error {_fmt(self.difference_std_error)})"
        )
        if self.verdict == "favours_weighting":
            head = (
                "The evidence favours training with the weights: the "
                + numbers
                + f", more than {self.z:g} standard errors in its favour."
            )
        elif self.verdict == "favours_no_weighting":
            head = (
                "The evidence favours training without the weights: the "
                + numbers
                + f", more than {self.z:g} standard errors against weighting."
            )
        else:
            head = (
                "The evidence does not clearly favour either: the " + numbers + f", within {self.z:g} standard errors. "
                "Weighting adds variance, so without a clear gain the unweighted fit is the safer default."
            )
        ess = self.weighted.per_fold_ess
        if np.all(np.isfinite(ess)) and np.min(ess) < 30:
            head += (
                f" Caution: some held-out folds have only {np.min(ess):.0f} effective rows, "
                "so these estimates are unreliable."
            )
        return head + " " + _CAUTION

    def to_dict(self) -> Dict[str, Any]:
        return {
            "weighted": self.weighted.to_dict(),
            "unweighted": self.unweighted.to_dict(),
            "difference": self.difference,
            "difference_std_error": self.difference_std_error,
            "verdict": self.verdict,
            "message": self.message,
        }

    def __repr__(self) -> str:
        return f"WeightingComparison(verdict={self.verdict!r})\n{self.message}"

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        w, u = self.weighted, self.unweighted
        return (
            f"<div><b>Weighted versus unweighted training ({html.escape(w.scoring)}, estimated on the target)</b>"
            "<table><tr><th></th><th>estimate</th><th>std. error</th></tr>"
            f"<tr><td>with weights</td><td>{_fmt(w.estimate)}</td><td>{_fmt(w.std_error)}</td></tr>"
            f"<tr><td>without weights</td><td>{_fmt(u.estimate)}</td><td>{_fmt(u.std_error)}</td></tr>"
            f"<tr><td>difference (paired)</td><td>{self.difference:+.4g}</td>"
            f"<td>{_fmt(self.difference_std_error)}</td></tr>"
            f"</table><p>{html.escape(self.message)}</p></div>"
        )


class MetricEstimate:
    """Result of :func:`weighted_metric`: ``estimate``, ``std_error``, ``lower``, ``upper``,
    ``confidence``, ``method``, ``ess`` (Kish effective sample size), ``n``."""

    def __init__(self, d: Mapping[str, Any], metric: str, method: str):
        self.metric = metric
        self.method = method
        self.estimate = float(d["estimate"])
        self.std_error = float(d["std_error"])
        self.lower = float(d["lower"])
        self.upper = float(d["upper"])
        self.confidence = float(d["confidence"])
        self.ess = float(d["ess"])
        self.n = int(d["n"])

    def to_dict(self) -> Dict[str, Any]:
        return {
            k: getattr(self, k)
            for k in ("metric", "method", "estimate", "std_error", "lower", "upper", "confidence", "ess", "n")
        }

    def __repr__(self) -> str:
        return (
            f"MetricEstimate({self.metric}={_fmt(self.estimate)}, {self.confidence:.0%} interval "
            f"[{_fmt(self.lower)}, {_fmt(self.upper)}] ({self.method}), effective rows {self.ess:.1f} of {self.n})"
        )

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        return f"<div>{html.escape(repr(self))}</div>"


# ----------------------------------------------------------------------------- public functions


def _evaluate_folds(model, X, y, w, pairs, metric, custom, use_weights):
    """Fits a clone per fold (with or without weights) and returns per-entry values, weights and
    fold ids (built-in metrics) or per-fold values (callables)."""
    key = _sample_weight_key(model)
    if use_weights and key is None:
        _fit(model, None, None, w, None)  # raises the clear error naming the model
    y_arr = np.asarray(y) if not hasattr(y, "iloc") else y
    values, weights, fold_ids, per_fold, per_fold_plain = [], [], [], [], []
    for k, (tr, te) in enumerate(pairs):
        m = _clone(model)
        fitted = _fit(m, _take(X, tr), _take(y_arr, tr), w[tr] if use_weights else None, key)
        X_te, y_te = _take(X, te), np.asarray(_take(y_arr, te))
        if custom is not None:
            pred = fitted.predict(X_te)
            per_fold.append(float(custom(y_te, pred, sample_weight=w[te])))
            per_fold_plain.append(float(custom(y_te, pred, sample_weight=None)))
        else:
            v = _row_values(metric, fitted, X_te, y_te, f"fold {k}")
            values.append(v)
            weights.append(w[te])
            fold_ids.append(np.full(len(te), k, dtype=np.int64))
    if custom is not None:
        return per_fold, per_fold_plain
    return np.concatenate(values), np.ascontiguousarray(np.concatenate(weights)), np.concatenate(fold_ids)


def _custom_summary(per_fold: List[float], per_fold_plain: List[float]) -> Dict[str, Any]:
    est, se = _native.fold_average(per_fold)
    uest, use = _native.fold_average(per_fold_plain)
    nan = float("nan")
    return {
        "estimate": est,
        "std_error": se,
        "unweighted_estimate": uest,
        "unweighted_std_error": use,
        "per_fold": [{"estimate": v, "std_error": nan, "ess": nan, "n": 0} for v in per_fold],
        "per_fold_unweighted": per_fold_plain,
    }


def _prepare(model, X, y, weights, cv, scoring, seed):
    n = _n_rows(X)
    if _n_rows(y) != n:
        raise _native.ShiftweightError(f"`y` has {_n_rows(y)} rows but `X` has {n}")
    w = as_vector(weights, "weights", n)
    _native.validate_weights(w, n, "weights")
    name, gib = _check_scoring(scoring)
    pairs, fold = _splits(cv, X, y, n, seed)
    custom = scoring if callable(scoring) else None
    return w, name, gib, pairs, fold, custom


def iw_cross_validate(
    model: Any,
    X: Any,
    y: Any,
    weights: Any,
    cv: Union[int, Any] = 5,
    scoring: Union[str, Callable[..., float]] = "log_loss",
    seed: int = 0,
) -> CrossValidatedRisk:
    """Importance-weighted cross-validation (Sugiyama, Krauledat, Mueller 2007).

    Estimates the risk of ``model`` on the target population from labelled source rows ``X, y``
    and their importance weights ``weights`` (w(x) = p_target(x) / p_source(x)). In each fold an
    unfitted copy of ``model`` is fitted on the training part with its weights, passed unchanged as
    ``sample_weight`` (rescaling weights changes the balance between data and any penalty), and the
    held-out part is scored with its weights (self-normalised weighted mean). The estimate is the
    mean over folds.

    Parameters
    ----------
    model : scikit-learn-compatible estimator whose ``fit`` accepts ``sample_weight`` (a Pipeline is
        routed to its final step). Not modified.
    X, y : source rows and labels (arrays or DataFrames; passed to the model as given).
    weights : 1-D non-negative importance weights, one per row.
    cv : int or splitter
        Number of folds (seeded shuffled K-fold from the core, see ``result.folds``) or any object
        with ``split(X, y)`` such as scikit-learn's ``KFold`` or ``StratifiedKFold``.
    scoring : ``"log_loss"``, ``"brier"`` (binary), ``"accuracy"``, ``"squared_error"``,
        ``"absolute_error"``, or a callable ``(y_true, y_pred, sample_weight) -> float`` applied to
        ``model.predict`` per fold (set ``greater_is_better = True`` on it for a score).
    seed : int
        Seed of the fold assignment when ``cv`` is an int.

    Returns
    -------
    CrossValidatedRisk

    Cautions: valid for covariate shift only; needs weights that reflect the target and support
    overlap; low effective sample sizes (see ``per_fold_ess``) make the estimate unreliable.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(200, 2)); y = (X[:, 0] + rng.normal(size=200) > 0).astype(int)
    >>> w = np.exp(0.5 * X[:, 0])                      # rows with large x0 are more common in the target
    >>> r = sw.iw_cross_validate(sw.WeightedLogistic(), X, y, w, cv=5, scoring="log_loss")
    >>> r.per_fold.shape, bool(r.std_error > 0)
    ((5,), True)
    """
    w, name, gib, pairs, fold, custom = _prepare(model, X, y, weights, cv, scoring, seed)
    out = _evaluate_folds(model, X, y, w, pairs, name, custom, use_weights=True)
    summary: Mapping[str, Any]
    if custom is not None:
        summary = _custom_summary(*out)
    else:
        values, ww, ids = out
        summary = _native.cross_validated(values, ww, ids, len(pairs))
    return CrossValidatedRisk(summary, name, gib, fold)


def compare_weighting(
    model: Any,
    X: Any,
    y: Any,
    weights: Any,
    cv: Union[int, Any] = 5,
    scoring: Union[str, Callable[..., float]] = "log_loss",
    seed: int = 0,
    z: float = 2.0,
) -> WeightingComparison:
    """Does weighted training help on the target? Estimates the target risk of ``model`` trained
    with and without the weights, side by side on the same folds.

    Both versions are scored with the weights on the same held-out rows (IWCV), so both numbers
    estimate performance on the target population; their difference is paired row by row, which
    removes shared noise. The verdict needs a difference larger than ``z`` standard errors.
    Arguments are those of :func:`iw_cross_validate`.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(1)
    >>> X = rng.normal(size=(300, 1)); y = X[:, 0] ** 2 + 0.1 * rng.normal(size=300)
    >>> w = np.exp(X[:, 0] - 0.5)                      # the target sits to the right
    >>> c = sw.compare_weighting(sw.WeightedRidge(l2=1e-3), X, y, w, scoring="squared_error")
    >>> c.verdict in ("favours_weighting", "favours_no_weighting", "no_clear_difference")
    True
    """
    w, name, gib, pairs, fold, custom = _prepare(model, X, y, weights, cv, scoring, seed)
    a = _evaluate_folds(model, X, y, w, pairs, name, custom, use_weights=True)
    b = _evaluate_folds(model, X, y, w, pairs, name, custom, use_weights=False)
    if custom is not None:
        diff, se, verdict = _native.compare_weighting_per_fold(a[0], b[0], gib, float(z))
        return WeightingComparison(
            CrossValidatedRisk(_custom_summary(*a), name, gib, fold),
            CrossValidatedRisk(_custom_summary(*b), name, gib, fold),
            diff,
            se,
            verdict,
            float(z),
        )
    r = _native.compare_weighting(a[0], b[0], a[1], a[2], len(pairs), gib, float(z))
    return WeightingComparison(
        CrossValidatedRisk(r["weighted"], name, gib, fold),
        CrossValidatedRisk(r["unweighted"], name, gib, fold),
        r["difference"],
        r["difference_std_error"],
        r["verdict"],
        float(z),
    )


def weighted_metric(
    y_true: Any,
    y_pred: Any,
    weights: Any = None,
    metric: str = "squared_error",
    confidence: float = 0.95,
    method: str = "normal",
    n_boot: int = 2000,
    seed: int = 0,
    labels: Optional[Sequence[Any]] = None,
) -> MetricEstimate:
    """A weighted metric with a confidence interval that accounts for the weights.

    The estimate is the self-normalised weighted mean of the per-row values. ``method="normal"``
    gives estimate +- z * (linearisation standard error), whose width grows as the Kish effective
    sample size falls; ``method="bootstrap"`` gives a seeded percentile bootstrap over rows.

    ``y_pred`` is a vector of predictions for ``accuracy``, ``squared_error`` and
    ``absolute_error``; for ``log_loss`` and ``brier`` it is either an (n, k) matrix of class
    probabilities with columns in the order of ``labels`` (default: the sorted labels of
    ``y_true``) or, for binary 0/1 labels, a vector of probabilities of class 1.

    Examples
    --------
    >>> import shiftweight as sw
    >>> r = sw.weighted_metric([1.0, 2.0, 3.0], [1.5, 2.0, 2.0], weights=[1, 1, 2])
    >>> round(r.estimate, 4)                            # (0.25 + 0 + 2 * 1) / 4
    0.5625
    """
    if metric not in _METRIC_NAMES:
        raise _native.ShiftweightError(f"invalid value for `metric`: {metric!r}; use one of {list(_METRIC_NAMES)}")
    yt = np.asarray(y_true)
    if yt.ndim != 1:
        raise _native.ShiftweightError(f"`y_true` must be 1-D but has shape {yt.shape}")
    n = yt.shape[0]
    w = None if weights is None else as_vector(weights, "weights", n)
    yp = np.asarray(y_pred)
    if yp.shape[0] != n:
        raise _native.ShiftweightError(f"`y_pred` has {yp.shape[0]} rows but `y_true` has {n}")
    if metric in ("log_loss", "brier"):
        if yp.ndim == 1:
            codes = as_vector(yt, "y_true", n)
            if not np.all((codes == 0) | (codes == 1)):
                raise _native.ShiftweightError("with a 1-D `y_pred` of probabilities, `y_true` must hold 0/1 labels")
            p = as_vector(yp, "y_pred", n)
            proba = np.ascontiguousarray(np.column_stack([1.0 - p, p]))
        else:
            classes = np.unique(yt) if labels is None else np.asarray(labels)
            if yp.shape[1] != len(classes):
                raise _native.ShiftweightError(
                    f"`y_pred` has {yp.shape[1]} probability columns but there are {len(classes)} labels; pass `labels`"
                )
            codes = _encode(yt, classes, "y_true")
            proba = np.ascontiguousarray(yp, dtype=np.float64)
        values = _native.metric_row_values(metric, codes, proba)
    elif metric == "accuracy":
        all_labels = np.unique(np.concatenate([yt.astype(str), yp.astype(str)]))
        values = _native.metric_row_values(
            metric,
            _encode(yt.astype(str), all_labels, "y_true"),
            _encode(yp.astype(str), all_labels, "y_pred").reshape(-1, 1),
        )
    else:
        values = _native.metric_row_values(
            metric, as_vector(yt, "y_true", n), as_vector(yp, "y_pred", n).reshape(-1, 1)
        )
    d = _native.metric_interval(values, w, float(confidence), method, int(n_boot), int(seed))
    return MetricEstimate(d, metric, method)
