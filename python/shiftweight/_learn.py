"""Importance-weighted linear models (Shimodaira 2000) with scikit-learn conventions.

``WeightedLogistic(l2=a)`` minimises sum_i w_i logloss_i + (a/2)||beta||^2 with the intercept
unpenalised, i.e. scikit-learn's ``LogisticRegression(C=1/a)``; ``WeightedRidge(l2=a)`` minimises
sum_i w_i (y_i - x_i beta - b)^2 + a||beta||^2, i.e. ``Ridge(alpha=a)``. Both run in the Rust core
with the GIL released, and serialise to JSON so a Rust service can load them.
"""

from __future__ import annotations

from typing import Any, Optional

import numpy as np

from . import _native
from ._base import ParamsMixin
from ._validation import NotFittedError, as_count, as_matrix, as_vector

__all__ = ["WeightedLogistic", "WeightedRidge", "linear_model_from_json"]


class _LinearBase(ParamsMixin):
    def _check_fitted(self):
        m = getattr(self, "model_", None)
        if m is None:
            raise NotFittedError(f"this {type(self).__name__} is not fitted yet; call fit(X, y) first")
        return m

    def _x(self, X: Any) -> np.ndarray:
        m = self._check_fitted()
        x, _ = as_matrix(X, "X")
        if x.shape[1] != len(m.coef):
            raise _native.ShiftweightError(
                f"`X` has {x.shape[1]} feature column(s) but the model was fitted on {len(m.coef)}"
            )
        return x

    def _weights(self, sample_weight: Any, n: int) -> Optional[np.ndarray]:
        if sample_weight is None:
            return None
        return as_vector(sample_weight, "sample_weight", n)

    def to_json(self) -> str:
        """The JSON model document (format ``shiftweight.linear-model``)."""
        return self._check_fitted().to_json()

    def __getstate__(self):
        state = {k: v for k, v in self.__dict__.items() if k != "model_"}
        m = getattr(self, "model_", None)
        state["__model_json__"] = m.to_json() if m is not None else None
        return state

    def __setstate__(self, state):
        state = dict(state)
        text = state.pop("__model_json__", None)
        self.__dict__.update(state)
        if text is not None:
            self.model_ = _native.LinearModel.from_json(text)


class WeightedLogistic(_LinearBase):
    """Importance-weighted binary logistic regression (Newton's method in the Rust core).

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> X = np.array([[0.0], [1.0], [2.0], [3.0]]); y = np.array([0, 0, 1, 1])
    >>> clf = sw.WeightedLogistic(l2=1.0).fit(X, y, sample_weight=[1, 2, 2, 1])
    >>> clf.predict(X).tolist()
    [0, 0, 1, 1]
    """

    _estimator_type = "classifier"

    _sklearn_kind = "classifier"

    def __init__(self, l2: float = 1.0, max_iter: int = 100):
        self.l2 = l2
        self.max_iter = max_iter

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> WeightedLogistic:
        x, names = as_matrix(X, "X")
        y_arr = np.asarray(y)
        if y_arr.ndim != 1 or y_arr.shape[0] != x.shape[0]:
            raise _native.ShiftweightError(f"`y` must be 1-D with {x.shape[0]} labels, got shape {y_arr.shape}")
        classes = np.unique(y_arr)
        if classes.shape[0] != 2:
            raise _native.ShiftweightError(
                f"`y` must hold exactly two classes for binary logistic regression; found {classes.shape[0]}"
            )
        y01 = np.ascontiguousarray(y_arr == classes[1], dtype=np.float64)
        w = self._weights(sample_weight, x.shape[0])
        self.model_ = _native.fit_weighted_logistic(x, y01, w, float(self.l2), as_count(self.max_iter, "max_iter"))
        self.classes_ = classes
        self.n_features_in_ = x.shape[1]
        if names is not None:
            self.feature_names_in_ = np.asarray(names, dtype=object)
        self.coef_ = np.asarray(self.model_.coef).reshape(1, -1)
        self.intercept_ = np.array([self.model_.intercept])
        self.n_iter_ = self.model_.n_iter
        return self

    def __setstate__(self, state):
        super().__setstate__(state)

    def decision_function(self, X: Any) -> np.ndarray:
        return self._check_fitted().decision_function(self._x(X))

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, shape (n, 2), columns in the order of ``classes_``."""
        p1 = self._check_fitted().predict_proba(self._x(X))
        return np.column_stack([1.0 - p1, p1])

    def predict(self, X: Any) -> np.ndarray:
        positive = self.decision_function(X) > 0  # raises NotFittedError before fit
        return self.classes_[positive.astype(int)]

    def score(self, X: Any, y: Any, sample_weight: Any = None) -> float:
        """(Weighted) accuracy."""
        correct = (self.predict(X) == np.asarray(y)).astype(float)
        return float(np.average(correct, weights=sample_weight))


class WeightedRidge(_LinearBase):
    """Importance-weighted ridge regression (closed form in the Rust core).

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> X = np.array([[0.0], [1.0], [2.0]]); y = np.array([1.0, 3.0, 5.0])
    >>> m = sw.WeightedRidge(l2=0.0).fit(X, y)
    >>> round(float(m.coef_[0]), 6), round(float(m.intercept_), 6)
    (2.0, 1.0)
    """

    _estimator_type = "regressor"

    _sklearn_kind = "regressor"

    def __init__(self, l2: float = 1.0):
        self.l2 = l2

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> WeightedRidge:
        x, names = as_matrix(X, "X")
        y_arr = as_vector(y, "y", x.shape[0])
        w = self._weights(sample_weight, x.shape[0])
        self.model_ = _native.fit_weighted_ridge(x, y_arr, w, float(self.l2))
        self.n_features_in_ = x.shape[1]
        if names is not None:
            self.feature_names_in_ = np.asarray(names, dtype=object)
        self.coef_ = np.asarray(self.model_.coef)
        self.intercept_ = float(self.model_.intercept)
        return self

    def predict(self, X: Any) -> np.ndarray:
        return self._check_fitted().predict(self._x(X))

    def score(self, X: Any, y: Any, sample_weight: Any = None) -> float:
        """(Weighted) coefficient of determination R^2."""
        y = np.asarray(y, dtype=float)
        pred = self.predict(X)
        w = np.ones_like(y) if sample_weight is None else np.asarray(sample_weight, dtype=float)
        ybar = np.average(y, weights=w)
        return float(1.0 - np.sum(w * (y - pred) ** 2) / np.sum(w * (y - ybar) ** 2))


def linear_model_from_json(text: str) -> _LinearBase:
    """Restores a fitted ``WeightedLogistic`` or ``WeightedRidge`` from its JSON document
    (format ``shiftweight.linear-model``, as written by ``to_json()`` in Python or
    ``LinearModel::to_json`` in Rust).

    Coefficients and predictions are restored exactly. The document records the penalty but not
    the original class labels or column names: a restored ``WeightedLogistic`` has
    ``classes_ == [0, 1]``. Raises ``ModelFileError`` for another format or version.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> m = sw.WeightedRidge(l2=0.5).fit(np.array([[0.0], [1.0], [2.0]]), np.array([1.0, 2.0, 4.0]))
    >>> same = sw.linear_model_from_json(m.to_json())
    >>> type(same).__name__, bool(np.allclose(same.predict([[3.0]]), m.predict([[3.0]])))
    ('WeightedRidge', True)
    """
    model = _native.LinearModel.from_json(text)
    if model.kind == "logistic":
        logistic = WeightedLogistic(l2=float(model.l2))
        logistic.model_ = model
        logistic.classes_ = np.array([0, 1])
        logistic.coef_ = np.asarray(model.coef).reshape(1, -1)
        logistic.intercept_ = np.array([model.intercept])
        logistic.n_iter_ = model.n_iter
        logistic.n_features_in_ = len(model.coef)
        return logistic
    ridge = WeightedRidge(l2=float(model.l2))
    ridge.model_ = model
    ridge.coef_ = np.asarray(model.coef)
    ridge.intercept_ = float(model.intercept)
    ridge.n_features_in_ = len(model.coef)
    return ridge
