"""Density-ratio estimator classes: thin scikit-learn-style fronts over the Rust core.

Every class follows the same contract: the constructor holds hyperparameters only; ``fit(source,
target)`` returns ``self``; ``ratio(X)`` returns a 1-D float64 array of w(x) = p_target(x) /
p_source(x); learned attributes end in ``_``; ``to_json()`` writes the versioned model document
and ``shiftweight.from_json(text)`` reads it back; pickling works (the state is the same JSON).
"""

from __future__ import annotations

from typing import Any, Dict, Optional, Sequence

import numpy as np

from . import _native
from ._base import ParamsMixin
from ._validation import NotFittedError, as_matrix, check_same_columns

__all__ = ["RatioEstimatorBase", "LeastSquaresRatio", "from_json", "register_kind"]

_KIND_TO_CLASS: Dict[str, type] = {}


def register_kind(kind: str):
    """Class decorator: maps a model-file estimator kind to its Python class."""

    def deco(cls):
        _KIND_TO_CLASS[kind] = cls
        return cls

    return deco


class RatioEstimatorBase(ParamsMixin):
    """Shared behaviour of the ratio estimators. Subclasses implement ``_fit_native``."""

    def _fit_native(self, source: np.ndarray, target: np.ndarray, names: Optional[list]) -> Any:
        raise NotImplementedError

    def fit(self, source: Any, target: Any) -> "RatioEstimatorBase":
        """Fits on ``source`` (training inputs) and ``target`` (deployment inputs); returns self.

        Both are 2-D arrays or DataFrames with the same columns; the GIL is released while fitting.
        """
        s, names_s = as_matrix(source, "source")
        t, names_t = as_matrix(target, "target")
        if t.shape[1] != s.shape[1]:
            raise _native.ShiftweightError(
                f"`target` has {t.shape[1]} feature column(s) but `source` has {s.shape[1]}"
            )
        check_same_columns(names_s, names_t, "source", "target")
        self._set_fitted(self._fit_native(s, t, names_s or names_t))
        return self

    def _set_fitted(self, model: Any) -> None:
        self.model_ = model
        self.n_features_in_ = model.n_features
        names = model.feature_names
        if names is not None:
            self.feature_names_in_ = np.asarray(names, dtype=object)
        elif hasattr(self, "feature_names_in_"):
            del self.feature_names_in_
        self.source_weights_ = model.source_weights
        self.selection_ = model.selection
        self.warnings_ = list(model.warnings)
        self._extract(model)

    def _extract(self, model: Any) -> None:
        """Sets estimator-specific learned attributes."""

    def _check_fitted(self) -> Any:
        model = getattr(self, "model_", None)
        if model is None:
            raise NotFittedError(f"this {type(self).__name__} is not fitted yet; call fit(source, target) first")
        return model

    def ratio(self, X: Any) -> np.ndarray:
        """w(x) = p_target(x) / p_source(x) at every row of ``X`` (1-D float64).

        The GIL is released while scoring; rows are processed in fixed-size chunks in parallel.
        """
        model = self._check_fitted()
        x, names = as_matrix(X, "X")
        if x.shape[1] != model.n_features:
            raise _native.ShiftweightError(
                f"`X` has {x.shape[1]} feature column(s) but the model was fitted on {model.n_features}"
            )
        check_same_columns(model.feature_names, names, "the fitted data", "X")
        return model.ratio(x)

    def to_json(self) -> str:
        """The versioned JSON model document (the safe exchange format)."""
        return self._check_fitted().to_json()

    def __getstate__(self) -> Dict[str, Any]:
        state = {k: v for k, v in self.__dict__.items() if not k.endswith("_")}
        model = getattr(self, "model_", None)
        state["__model_json__"] = model.to_json() if model is not None else None
        return state

    def __setstate__(self, state: Dict[str, Any]) -> None:
        state = dict(state)
        text = state.pop("__model_json__", None)
        self.__dict__.update(state)
        if text is not None:
            self._set_fitted(_native.RatioModel.from_json(text))


@register_kind("least_squares")
class LeastSquaresRatio(RatioEstimatorBase):
    """uLSIF (Kanamori, Hido, Sugiyama 2009) and, with ``alpha > 0``, RuLSIF (Yamada et al. 2013).

    Fits r(x) = sum_l theta_l exp(-||x - c_l||^2 / (2 sigma^2)) on standardised features with
    ``n_basis`` centres drawn from the target, minimising the squared error to the true ratio.
    Unset ``sigma`` / ``lam`` are chosen by exact closed-form leave-one-out cross-validation over
    ``sigma_multiples`` x (median pairwise distance) and ``lambda_grid``.

    With ``alpha > 0`` the estimate is the relative ratio p_t / (alpha p_t + (1 - alpha) p_s),
    bounded by 1/alpha: more stable under weak overlap, biased towards 1.

    Parameters
    ----------
    sigma : float or None
        Kernel width in standardised units (> 0); None chooses it by LOOCV.
    lam : float or None
        Ridge strength (> 0); None chooses it by LOOCV.
    n_basis : int
        Number of kernel centres (default 200; capped at the number of target rows).
    alpha : float
        Relative-ratio mixing in [0, 1); 0 is uLSIF.
    seed : int
        Seed of centres, the median-heuristic subsample and held-out pairs.
    sigma_multiples, lambda_grid : sequences of float
        The cross-validation grid.
    max_cv_rows : int
        At most this many held-out pairs in LOOCV (a seeded subset above it).

    Attributes
    ----------
    sigma_, lam_ : chosen hyperparameters; ``cv_scores_``: list of dicts (sigma, lam, score);
    ``source_weights_``: weights of the source rows; ``model_``: the native fitted model.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (300, 2)), rng.normal(0.5, 1, (300, 2))
    >>> est = sw.LeastSquaresRatio(n_basis=50).fit(src, tgt)
    >>> w = est.ratio(np.array([[-1.0, -1.0], [1.0, 1.0]]))
    >>> bool(w[1] > w[0])
    True
    """

    def __init__(
        self,
        sigma: Optional[float] = None,
        lam: Optional[float] = None,
        n_basis: int = 200,
        alpha: float = 0.0,
        seed: int = 0,
        sigma_multiples: Sequence[float] = (0.25, 0.5, 1.0, 2.0, 4.0),
        lambda_grid: Sequence[float] = (1e-3, 1e-2, 1e-1, 1.0, 10.0),
        max_cv_rows: int = 10_000,
    ):
        self.sigma = sigma
        self.lam = lam
        self.n_basis = n_basis
        self.alpha = alpha
        self.seed = seed
        self.sigma_multiples = sigma_multiples
        self.lambda_grid = lambda_grid
        self.max_cv_rows = max_cv_rows

    def _fit_native(self, source, target, names):
        return _native.fit_least_squares(
            source,
            target,
            None if self.sigma is None else float(self.sigma),
            None if self.lam is None else float(self.lam),
            int(self.n_basis),
            float(self.alpha),
            int(self.seed),
            [float(v) for v in self.sigma_multiples],
            [float(v) for v in self.lambda_grid],
            int(self.max_cv_rows),
            names,
        )

    def _extract(self, model):
        chosen = model.selection["chosen"]
        self.sigma_ = chosen["sigma"]
        self.lam_ = chosen["lam"]
        self.median_distance_ = chosen.get("median_distance")
        self.cv_scores_ = model.selection["table"]


def from_json(text: str) -> RatioEstimatorBase:
    """Restores a fitted estimator from its JSON model document.

    The learned state is restored exactly (identical ratios); constructor hyperparameters take
    their defaults, and the chosen values are in the learned attributes and ``selection_``.
    Raises ``ModelFileError`` for another format, another version or an inconsistent model.
    """
    model = _native.RatioModel.from_json(text)
    cls = _KIND_TO_CLASS.get(model.kind)
    if cls is None:
        raise _native.ModelFileError(f"no Python class for estimator kind {model.kind!r}")
    est = cls()
    est._set_fitted(model)
    return est
