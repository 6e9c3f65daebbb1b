"""Prediction intervals and sets that stay valid on the target population: weighted split
conformal prediction (Tibshirani, Barber, Candes, Ramdas 2019, "Conformal prediction under
covariate shift", NeurIPS 32).

Fit a model on one part of the source rows, keep the other part for calibration, and give the
importance weights of the calibration rows and of the rows to predict. Each new row gets its own
threshold on the non-conformity score: the (1 - alpha) quantile of the calibration scores weighted
by w_i, with the new row's own weight w(x) placed at +infinity. Where w(x) is large compared with
the calibration weight mass, the honest answer is an infinite interval (or the set of all classes),
and it is reported as such. With no weights this is ordinary split conformal prediction.

The quantile computation lives in the Rust core (``shiftweight::conformal``); this module calls the
user's model and converts arrays.

Cautions: the coverage guarantee holds for covariate shift with the true weights; estimated
weights give approximate coverage. Check coverage on labelled target data when you can.
"""

from __future__ import annotations

import html
from typing import Any, Dict, List

import numpy as np

from . import _native
from ._evaluate import _encode, _n_rows
from ._validation import as_vector

__all__ = ["conformal_intervals", "conformal_sets", "ConformalIntervals", "ConformalSets"]


def _weights_pair(cal_weights: Any, weights: Any, n_cal: int, n: int):
    if (cal_weights is None) != (weights is None):
        raise _native.ShiftweightError(
            "give importance weights for both the calibration rows (`cal_weights`) and the rows to predict "
            "(`weights`), or for neither (ordinary split conformal)"
        )
    if cal_weights is None:
        return None, None
    return as_vector(cal_weights, "cal_weights", n_cal), as_vector(weights, "weights", n)


class ConformalIntervals:
    """Result of :func:`conformal_intervals`.

    Attributes
    ----------
    prediction, lower, upper : ndarray
        Point prediction and interval ends of every row (``-inf``/``inf`` where infinite).
    threshold : ndarray
        Half-width of every interval (the weighted residual quantile; ``inf`` where infinite).
    n_infinite : int
        Rows whose interval is the whole line: their weight is too large for the calibration rows to
        say anything there (poor coverage of that region by the source).
    alpha : float
        Miscoverage level (target coverage 1 - alpha).
    """

    def __init__(self, prediction, lower, upper, threshold, n_infinite, alpha):
        self.prediction = prediction
        self.lower = lower
        self.upper = upper
        self.threshold = threshold
        self.n_infinite = int(n_infinite)
        self.alpha = float(alpha)

    def covers(self, y: Any) -> np.ndarray:
        """Boolean array: is each label inside its interval?"""
        y = as_vector(y, "y", self.lower.shape[0])
        return (self.lower <= y) & (y <= self.upper)

    def to_dict(self) -> Dict[str, Any]:
        return {
            "alpha": self.alpha,
            "prediction": self.prediction.tolist(),
            "lower": self.lower.tolist(),
            "upper": self.upper.tolist(),
            "n_infinite": self.n_infinite,
        }

    def to_pandas(self):
        import pandas as pd

        return pd.DataFrame({"prediction": self.prediction, "lower": self.lower, "upper": self.upper})

    def _summary(self) -> str:
        finite = np.isfinite(self.threshold)
        med = f"{2 * np.median(self.threshold[finite]):.4g}" if finite.any() else "none finite"
        s = f"{self.lower.shape[0]} rows at {1 - self.alpha:.0%} target coverage; median width {med}"
        if self.n_infinite:
            s += (
                f"; {self.n_infinite} infinite interval(s): those rows weigh too much relative to the "
                "calibration rows (the source barely covers them)"
            )
        return s

    def __repr__(self) -> str:
        return f"ConformalIntervals({self._summary()})"

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        return f"<div><b>Weighted conformal intervals</b>: {html.escape(self._summary())}</div>"


class ConformalSets:
    """Result of :func:`conformal_sets`.

    Attributes
    ----------
    sets : ndarray of bool, shape (n, k)
        ``sets[i, c]`` is True when ``classes[c]`` is in row i's prediction set.
    classes : ndarray
    threshold : ndarray
        Score threshold of every row (``inf``: every class is in the set).
    n_infinite : int
    alpha : float
    """

    def __init__(self, sets, classes, threshold, n_infinite, alpha):
        self.sets = sets
        self.classes = classes
        self.threshold = threshold
        self.n_infinite = int(n_infinite)
        self.alpha = float(alpha)

    @property
    def sizes(self) -> np.ndarray:
        """Number of classes in every set."""
        return self.sets.sum(axis=1)

    def as_lists(self) -> List[list]:
        """Every set as a list of class labels."""
        return [self.classes[row].tolist() for row in self.sets]

    def covers(self, y: Any) -> np.ndarray:
        """Boolean array: is each label in its set? (Labels not among the classes are not covered.)"""
        y = np.asarray(y)
        out = np.zeros(y.shape[0], dtype=bool)
        for c, label in enumerate(self.classes):
            hit = y == label
            out[hit] = self.sets[hit, c]
        return out

    def _summary(self) -> str:
        s = f"{self.sets.shape[0]} rows at {1 - self.alpha:.0%} target coverage; mean set size {self.sizes.mean():.3g}"
        if self.n_infinite:
            s += f"; {self.n_infinite} row(s) get every class (too much weight relative to the calibration rows)"
        return s

    def to_dict(self) -> Dict[str, Any]:
        return {
            "alpha": self.alpha,
            "classes": self.classes.tolist(),
            "sets": self.as_lists(),
            "n_infinite": self.n_infinite,
        }

    def __repr__(self) -> str:
        return f"ConformalSets({self._summary()})"

    def _repr_html_(self) -> str:
        return self.to_html()

    def to_html(self) -> str:
        """This result as an HTML fragment (what a notebook displays); for the full report of a
        source/target pair see :func:`shiftweight.write_report`."""
        return f"<div><b>Weighted conformal prediction sets</b>: {html.escape(self._summary())}</div>"


def conformal_intervals(
    model: Any,
    X_cal: Any,
    y_cal: Any,
    cal_weights: Any,
    X: Any,
    weights: Any,
    alpha: float = 0.1,
) -> ConformalIntervals:
    """Regression intervals with target coverage 1 - ``alpha`` (weighted split conformal,
    absolute-residual score).

    Parameters
    ----------
    model : a fitted regressor with ``predict`` (fitted on source rows *not* in the calibration set).
    X_cal, y_cal : calibration rows from the source, with labels.
    cal_weights : importance weights of the calibration rows (None: ordinary split conformal).
    X : rows to predict (typically target rows).
    weights : importance weights of the rows to predict (None together with ``cal_weights``).
    alpha : miscoverage level in (0, 1).

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(400, 1)); y = 2 * X[:, 0] + rng.normal(size=400)
    >>> model = sw.WeightedRidge().fit(X[:200], y[:200])
    >>> r = sw.conformal_intervals(model, X[200:], y[200:], None, np.zeros((1, 1)), None, alpha=0.1)
    >>> bool(r.lower[0] < 0 < r.upper[0]), r.n_infinite
    (True, 0)
    """
    n_cal, n = _n_rows(X_cal), _n_rows(X)
    cw, w = _weights_pair(cal_weights, weights, n_cal, n)
    y = as_vector(np.asarray(y_cal), "y_cal", n_cal)
    pred_cal = as_vector(np.asarray(model.predict(X_cal), dtype=np.float64), "model.predict(X_cal)", n_cal)
    pred = as_vector(np.asarray(model.predict(X), dtype=np.float64), "model.predict(X)", n)
    lower, upper, threshold, n_inf = _native.conformal_intervals(y, pred_cal, cw, pred, w, float(alpha))
    return ConformalIntervals(pred, lower, upper, threshold, n_inf, alpha)


def conformal_sets(
    model: Any,
    X_cal: Any,
    y_cal: Any,
    cal_weights: Any,
    X: Any,
    weights: Any,
    alpha: float = 0.1,
) -> ConformalSets:
    """Classification prediction sets with target coverage 1 - ``alpha`` (weighted split
    conformal with the score 1 - p(y | x)).

    ``model`` is a fitted classifier with ``predict_proba`` and ``classes_``; the other arguments
    are those of :func:`conformal_intervals`.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(400, 1)); y = (X[:, 0] + rng.normal(size=400) > 0).astype(int)
    >>> clf = sw.WeightedLogistic().fit(X[:200], y[:200])
    >>> s = sw.conformal_sets(clf, X[200:], y[200:], None, np.array([[-3.0], [0.0]]), None, alpha=0.2)
    >>> s.as_lists()[0]
    [0]
    """
    n_cal, n = _n_rows(X_cal), _n_rows(X)
    cw, w = _weights_pair(cal_weights, weights, n_cal, n)
    classes = getattr(model, "classes_", None)
    if classes is None or not hasattr(model, "predict_proba"):
        raise TypeError(
            f"conformal_sets needs a fitted classifier with predict_proba and classes_, got {type(model).__name__}"
        )
    classes = np.asarray(classes)
    codes = _encode(np.asarray(y_cal), classes, "y_cal")
    p_cal = np.ascontiguousarray(model.predict_proba(X_cal), dtype=np.float64)
    p = np.ascontiguousarray(model.predict_proba(X), dtype=np.float64)
    sets, threshold, n_inf = _native.conformal_sets(p_cal, codes, cw, p, w, float(alpha))
    return ConformalSets(np.asarray(sets), classes, threshold, n_inf, alpha)
