"""Importance-weighted linear models (Shimodaira 2000) with scikit-learn conventions.

``WeightedLogistic(l2=a)`` minimises sum_i w_i logloss_i + (a/2)||beta||^2 with the intercept
unpenalised, i.e. scikit-learn's ``LogisticRegression(C=1/a)``; ``WeightedRidge(l2=a)`` minimises
sum_i w_i (y_i - x_i beta - b)^2 + a||beta||^2, i.e. ``Ridge(alpha=a)``. Both run in the Rust core
with the GIL released, and serialise to JSON so a Rust service can load them.

Typed tables (pandas/polars DataFrames and pyarrow Tables with text, categorical or boolean columns
or missing values, or any frame with ``categorical=``/``numeric=``) are encoded by the core on the
training rows (numeric columns standardised, with a missing indicator when a value is missing;
categorical columns one-hot; see ``docs/tables.md``); the model keeps the encoding and predicts on
tables by column name. Coefficients then belong to the encoded columns (``feature_names_in_``) and
the penalty acts on them.
"""

from __future__ import annotations

from typing import Any, Optional, Sequence, Tuple

import numpy as np

from . import _native
from ._base import ParamsMixin
from ._tables import as_table, is_table_input, plain, report_unseen
from ._validation import NotFittedError, as_count, as_matrix, as_vector, check_same_columns

__all__ = ["WeightedLogistic", "WeightedRidge", "linear_model_from_json"]


class _LinearBase(ParamsMixin):
    def _check_fitted(self):
        m = getattr(self, "model_", None)
        if m is None:
            raise NotFittedError(f"this {type(self).__name__} is not fitted yet; call fit(X, y) first")
        return m

    def _encode(self, X: Any, categorical: Any, numeric: Any) -> Tuple[Any, int, Optional[list]]:
        """(typed table or float64 matrix, rows, column names) of the training rows ``X``."""
        if is_table_input(X, categorical, numeric):
            table = as_table(X, "X", categorical, numeric)
            return table, table.rows, None
        x, names = as_matrix(plain(X), "X")
        return x, x.shape[0], names

    def _fitted(self, model: Any, names: Optional[list]) -> None:
        self.model_ = model
        self.n_features_in_ = len(model.coef)
        names = model.feature_names if model.feature_names is not None else names
        if names is not None:
            self.feature_names_in_ = np.asarray(names, dtype=object)
        elif hasattr(self, "feature_names_in_"):
            del self.feature_names_in_
        self.warnings_ = list(model.warnings)

    def _values(self, X: Any, what: str) -> np.ndarray:
        """``what`` (decision_function, predict or predict_proba) of the core model at ``X``: by
        column name through the stored encoding for a model fitted on a table, else on a matrix."""
        m = self._check_fitted()
        schema = m.schema
        if schema is not None:
            cat = [n for n, k in schema if k == "categorical"]
            num = [n for n, k in schema if k == "numeric"]
            table = as_table(X, "X", cat, num, columns=[n for n, _ in schema])
            values, unseen = getattr(m, what + "_table")(table)
            self.unseen_ = report_unseen(unseen, stacklevel=4)
            return values
        x, names = as_matrix(plain(X), "X")
        if x.shape[1] != len(m.coef):
            raise _native.ShiftweightError(
                f"`X` has {x.shape[1]} feature column(s) but the model was fitted on {len(m.coef)}"
            )
        fitted_names = getattr(self, "feature_names_in_", None)
        check_same_columns(None if fitted_names is None else list(fitted_names), names, "the fitted data", "X")
        return getattr(m, what)(x)

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

    def fit(
        self,
        X: Any,
        y: Any,
        sample_weight: Any = None,
        categorical: Optional[Sequence[str]] = None,
        numeric: Optional[Sequence[str]] = None,
    ) -> WeightedLogistic:
        """Fits on rows ``X`` (a matrix or a typed table, see the module documentation), labels
        ``y`` (two classes) and optional non-negative ``sample_weight``. ``categorical`` /
        ``numeric`` override column types of a DataFrame or Arrow table."""
        x, n, names = self._encode(X, categorical, numeric)
        y_arr = np.asarray(y)
        if y_arr.ndim != 1 or y_arr.shape[0] != n:
            raise _native.ShiftweightError(f"`y` must be 1-D with {n} labels, got shape {y_arr.shape}")
        classes = np.unique(y_arr)
        if classes.shape[0] != 2:
            raise _native.ShiftweightError(
                f"`y` must hold exactly two classes for binary logistic regression; found {classes.shape[0]}"
            )
        y01 = np.ascontiguousarray(y_arr == classes[1], dtype=np.float64)
        w = self._weights(sample_weight, n)
        l2, max_iter = float(self.l2), as_count(self.max_iter, "max_iter")
        if isinstance(x, np.ndarray):
            model = _native.fit_weighted_logistic(x, y01, w, l2, max_iter)
        else:
            model = _native.fit_weighted_logistic_table(x, y01, w, l2, max_iter)
        self._fitted(model, names)
        self.classes_ = classes
        self.coef_ = np.asarray(self.model_.coef).reshape(1, -1)
        self.intercept_ = np.array([self.model_.intercept])
        self.n_iter_ = self.model_.n_iter
        return self

    def __setstate__(self, state):
        super().__setstate__(state)

    def decision_function(self, X: Any) -> np.ndarray:
        return self._values(X, "decision_function")

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, shape (n, 2), columns in the order of ``classes_``."""
        p1 = self._values(X, "predict_proba")
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

    def fit(
        self,
        X: Any,
        y: Any,
        sample_weight: Any = None,
        categorical: Optional[Sequence[str]] = None,
        numeric: Optional[Sequence[str]] = None,
    ) -> WeightedRidge:
        """Fits on rows ``X`` (a matrix or a typed table, see the module documentation), targets
        ``y`` and optional non-negative ``sample_weight``. ``categorical`` / ``numeric`` override
        column types of a DataFrame or Arrow table."""
        x, n, names = self._encode(X, categorical, numeric)
        y_arr = as_vector(y, "y", n)
        w = self._weights(sample_weight, n)
        if isinstance(x, np.ndarray):
            model = _native.fit_weighted_ridge(x, y_arr, w, float(self.l2))
        else:
            model = _native.fit_weighted_ridge_table(x, y_arr, w, float(self.l2))
        self._fitted(model, names)
        self.coef_ = np.asarray(self.model_.coef)
        self.intercept_ = float(self.model_.intercept)
        return self

    def predict(self, X: Any) -> np.ndarray:
        return self._values(X, "predict")

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

    Coefficients and predictions are restored exactly, and a model fitted on a typed table keeps
    its encoding (it predicts on tables by column name). The document records the penalty but not
    the original class labels, nor the column names of a model fitted on a matrix: a restored
    ``WeightedLogistic`` has ``classes_ == [0, 1]``. Raises ``ModelFileError`` for another format or version.

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
        logistic._fitted(model, None)
        return logistic
    ridge = WeightedRidge(l2=float(model.l2))
    ridge.model_ = model
    ridge.coef_ = np.asarray(model.coef)
    ridge.intercept_ = float(model.intercept)
    ridge._fitted(model, None)
    return ridge
