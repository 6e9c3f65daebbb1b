"""Density-ratio estimator classes: thin scikit-learn-style fronts over the Rust core.

Every class follows the same contract: the constructor holds hyperparameters only; ``fit(source,
target)`` returns ``self``; ``ratio(X)`` returns a 1-D float64 array of w(x) = p_target(x) /
p_source(x); learned attributes end in ``_``; ``to_json()`` writes the versioned model document
and ``shiftweight.from_json(text)`` reads it back; pickling works (the state is the same JSON).
"""

from __future__ import annotations

import json
import warnings
from typing import TYPE_CHECKING, Any, Dict, List, Optional, Sequence

import numpy as np

from . import _native
from ._base import ParamsMixin
from ._tables import as_table, is_table_input, plain, report_unseen
from ._validation import NotFittedError, as_count, as_matrix, as_seed, as_vector, check_same_columns

__all__ = [
    "RatioEstimatorBase",
    "LeastSquaresRatio",
    "KLRatio",
    "KernelMeanMatching",
    "ClassifierRatio",
    "AutoRatio",
    "ratio_from_probabilities",
    "from_json",
    "register_kind",
]

_KIND_TO_CLASS: Dict[str, type] = {}


def register_kind(kind: str):
    """Class decorator: maps a model-file estimator kind to its Python class."""

    def deco(cls):
        _KIND_TO_CLASS[kind] = cls
        return cls

    return deco


class RatioEstimatorBase(ParamsMixin):
    """Shared behaviour of the ratio estimators. Subclasses implement ``_fit_native``."""

    if TYPE_CHECKING:  # declarations for type checkers only (the key layouts live in _native.pyi)
        model_: _native.RatioModel
        source_weights_: np.ndarray
        selection_: _native._Selection
        warnings_: List[str]

    def _fit_native(self, source: np.ndarray, target: np.ndarray, names: Optional[list]) -> Any:
        raise NotImplementedError

    def fit(
        self,
        source: Any,
        target: Any,
        categorical: Optional[Sequence[str]] = None,
        numeric: Optional[Sequence[str]] = None,
    ) -> RatioEstimatorBase:
        """Fits on ``source`` (training inputs) and ``target`` (deployment inputs); returns self.

        Both are 2-D arrays or tables with the same columns; the GIL is released while fitting.
        pandas/polars DataFrames and pyarrow Tables with text, categorical or boolean columns or
        missing values are typed tables: they are encoded on the pooled rows (see
        ``docs/tables.md``), the encoding is stored in the model, and ``ratio`` then takes tables
        with the same columns by name. ``categorical`` / ``numeric`` override column types.
        """
        if is_table_input(source, categorical, numeric) or is_table_input(target, categorical, numeric):
            ts = as_table(source, "source", categorical, numeric)
            tt = as_table(target, "target", categorical, numeric)
            zs, zt, encoding, names, notes = _native.encode_pair(ts, tt)
            model = self._fit_native(zs, zt, names)
            self._set_fitted(_native.attach_encoding(model, encoding, notes))
            return self
        s, names_s = as_matrix(plain(source), "source")
        t, names_t = as_matrix(plain(target), "target")
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
        schema = _native.model_schema(model)
        if schema is not None:
            cat = [n for n, k in schema if k == "categorical"]
            num = [n for n, k in schema if k == "numeric"]
            table = as_table(X, "X", cat, num, columns=[n for n, _ in schema])
            w, unseen = _native.ratio_table(model, table)
            self.unseen_ = report_unseen(unseen)
            return w
        x, names = as_matrix(plain(X), "X")
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
            _restore(self, _native.RatioModel.from_json(text))


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

    _native_kind = "least_squares"

    def _native_params(self) -> Dict[str, Any]:
        """The arguments of the native fit function (also how ``AutoRatio`` passes a candidate)."""
        return dict(
            sigma=None if self.sigma is None else float(self.sigma),
            lam=None if self.lam is None else float(self.lam),
            n_basis=as_count(self.n_basis, "n_basis"),
            alpha=float(self.alpha),
            seed=as_seed(self.seed),
            sigma_multiples=[float(v) for v in self.sigma_multiples],
            lambda_grid=[float(v) for v in self.lambda_grid],
            max_cv_rows=as_count(self.max_cv_rows, "max_cv_rows"),
        )

    def _fit_native(self, source, target, names):
        return _native.fit_ratio(source, target, self._native_kind, self._native_params(), names)

    def _extract(self, model):
        chosen = model.selection["chosen"]
        self.sigma_ = chosen["sigma"]
        self.lam_ = chosen["lam"]
        self.median_distance_ = chosen.get("median_distance")
        self.cv_scores_ = model.selection["table"]


@register_kind("kliep")
class KLRatio(RatioEstimatorBase):
    """KLIEP (Sugiyama et al. 2008): the ratio that makes the target rows most likely.

    Fits r(x) = sum_l alpha_l exp(-||x - c_l||^2 / (2 sigma^2)) on standardised features with
    ``n_basis`` centres drawn from the target, maximising mean_target log r(x) subject to
    mean_source r(x) = 1 and alpha >= 0. The solver is sequential quadratic programming with the
    exact Hessian (Kim et al. 2020), usually 1 to 25 iterations per fit; it stops when a certified
    bound on the distance to the optimum (Cover 1984) is below ``tol``. Weights are non-negative
    and average exactly 1 over the fitted source rows.

    An unset ``sigma`` is chosen by ``folds``-fold likelihood cross-validation over
    ``sigma_multiples`` x (median pairwise distance). ``cv="source_and_target"`` (default) holds
    out source rows as well as target rows: the normalisation is fitted on training-fold source
    rows and the held-out score is re-normalised on the held-out source rows, so widths whose
    weights explode on unseen source rows lose. ``cv="target_only"`` is the paper's criterion,
    which holds out target rows only and was measured to pick such widths far more often.
    Among the widths, the widest whose mean held-out score is within ``se_margin`` standard
    errors (over folds) of the best is chosen (the one-standard-error rule, Breiman et al. 1984):
    the held-out likelihood leans towards narrow widths whose ratio spikes where source rows are
    sparse, and a wider width with a statistically indistinguishable score is the safer choice.

    Weighting corrects covariate shift only and needs the source to cover the target; validate on
    labelled target data before relying on the weights.

    Parameters
    ----------
    sigma : float or None
        Kernel width in standardised units (> 0); None chooses it by likelihood CV.
    n_basis : int
        Number of kernel centres (default 200; capped at the number of target rows).
    folds : int
        Cross-validation folds (>= 2).
    seed : int
        Seed of centres, folds and the median-heuristic subsample.
    cv : {"source_and_target", "target_only"}
        Which rows the cross-validation holds out.
    sigma_multiples : sequence of float
        The width grid, as multiples of the median distance.
    tol : float
        Stopping tolerance on the certified objective gap.
    max_iter : int
        Most solver iterations per fit (a cap that should never bind; a warning is recorded if
        reached).
    se_margin : float
        Margin of the one-standard-error width rule, in standard errors (>= 0; 0 picks the width
        with the best mean score).

    Attributes
    ----------
    sigma_ : chosen width; ``cv_scores_``: list of dicts (sigma, std_error, score), the score being
    minus the mean held-out log-likelihood (lower is better) and std_error its fold-to-fold
    standard error; ``objective_``: mean target log r at the fit;
    ``source_weights_``: weights of the source rows; ``model_``: the native fitted model.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (300, 2)), rng.normal(0.5, 1, (300, 2))
    >>> est = sw.KLRatio(n_basis=50).fit(src, tgt)
    >>> round(float(est.source_weights_.mean()), 6)
    1.0
    >>> w = est.ratio(np.array([[-1.0, -1.0], [1.0, 1.0]]))
    >>> bool(w[1] > w[0])
    True
    """

    def __init__(
        self,
        sigma: Optional[float] = None,
        n_basis: int = 200,
        folds: int = 5,
        seed: int = 0,
        cv: str = "source_and_target",
        sigma_multiples: Sequence[float] = (0.125, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0),
        tol: float = 1e-6,
        max_iter: int = 10_000,
        se_margin: float = 1.0,
    ):
        self.sigma = sigma
        self.n_basis = n_basis
        self.folds = folds
        self.seed = seed
        self.cv = cv
        self.sigma_multiples = sigma_multiples
        self.tol = tol
        self.max_iter = max_iter
        self.se_margin = se_margin

    _native_kind = "kliep"

    def _native_params(self) -> Dict[str, Any]:
        return dict(
            sigma=None if self.sigma is None else float(self.sigma),
            n_basis=as_count(self.n_basis, "n_basis"),
            folds=as_count(self.folds, "folds"),
            seed=as_seed(self.seed),
            cv=str(self.cv),
            sigma_multiples=[float(v) for v in self.sigma_multiples],
            tol=float(self.tol),
            max_iter=as_count(self.max_iter, "max_iter"),
            se_margin=float(self.se_margin),
        )

    def _fit_native(self, source, target, names):
        return _native.fit_ratio(source, target, self._native_kind, self._native_params(), names)

    def _extract(self, model):
        chosen = model.selection["chosen"]
        self.sigma_ = chosen["sigma"]
        self.median_distance_ = chosen.get("median_distance")
        self.objective_ = chosen.get("objective")
        self.cv_scores_ = model.selection["table"]


@register_kind("kmm")
class KernelMeanMatching(RatioEstimatorBase):
    """Kernel mean matching, KMM (Huang et al. 2007): weights that match the target's kernel mean.

    Solves, for the n source rows, the quadratic program
    min 1/2 beta' (K + ridge * sqrt(n) I) beta - kappa' beta subject to 0 <= beta_i <= ``bound``
    and |sum(beta) - n| <= n * eps, where K is the Gaussian kernel matrix of the source rows and
    kappa_i = (n / n_target) sum_j k(x_i, t_j) (standardised features). No density is fitted.

    The ridge term keeps the solution from over-fitting sampling noise: without it the exact
    matching drives many weights to 0 and was measured worse than uniform weights on Gaussian
    shifts (5-D mean shift, n = 300: NMSE 4.25 against 0.27 for uniform weights). An unset
    ``sigma`` or ``ridge`` is chosen by the discrepancy principle (Morozov 1966): even the true
    weights do not match the target's kernel mean exactly, their squared MMD to the target has
    expectation (E_source[w^2] - E k(t, t')) / n, so matching more closely than that fits noise.
    For each (width, ridge) on the grid, KMM is solved, its squared MMD D to the target (at the
    median-heuristic width) and its noise level N = (mean(beta^2) - U) / n are computed (U: the
    U-statistic of E k(t, t')), and the largest ridge, then the widest width, with D <= N is
    chosen (the smallest D - N if none reaches it, and ``warnings_`` says so). The table
    ``cv_scores_`` lists D as ``score`` and N as ``noise_level``. This replaced a held-out
    matching score, which always preferred the smallest ridge; the measurements are in the
    README. Above ``block_rows`` source rows, the selection uses the first seeded block.

    KMM is transductive: it gives weights for the source rows it was fitted on
    (``source_weights_``) and nothing else; ``ratio(X)`` raises ``UnsupportedOperationError``.
    Use ``KLRatio`` or ``LeastSquaresRatio`` when new rows must be scored.

    Above ``block_rows`` source rows, the rows are split into seeded blocks of at most
    ``block_rows`` rows, each matched against the whole target, so time grows linearly with the
    source size and memory stays bounded; each weight then carries the matching error of KMM at
    the block size (more variance than one exact solve, no systematic bias from the split).

    Weighting corrects covariate shift only and needs the source to cover the target; weights at
    the bound flag target regions the source barely covers. Validate on labelled target data.

    Parameters
    ----------
    sigma : float or None
        Kernel width in standardised units; None chooses it, with the ridge, by the discrepancy
        principle among ``sigma_multiples`` x (median pairwise distance).
    bound : float
        Upper bound B on every weight (default 1000).
    eps : float or None
        Tolerance on the mean weight; None uses (sqrt(n) - 1) / sqrt(n) for n source rows per QP
        (the setting of Huang et al. 2007's experiments, from memory).
    block_rows : int
        Largest number of source rows solved as one QP.
    seed : int
        Seed of the median-heuristic subsample, the block assignment and the target subsample
        (above 10,000 target rows) of the selection's noise level.
    ridge : float or None
        Ridge coefficient c (>= 0; c * sqrt(n) is added to the diagonal of K); None chooses it.
    sigma_multiples : sequence of float
        Candidate widths as multiples of the median distance, when ``sigma`` is None.
    ridge_grid : sequence of float
        Candidate ridge coefficients, when ``ridge`` is None.

    Attributes
    ----------
    source_weights_ : the weights beta; ``sigma_``, ``ridge_``, ``eps_``: the values used;
    ``cv_scores_``: per (sigma, ridge), the squared MMD to the target (``score``) and its noise
    level (``noise_level``), empty when nothing was chosen;
    ``n_blocks_``; ``model_``: the native fitted model.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (200, 1)), rng.normal(0.5, 1, (200, 1))
    >>> est = sw.KernelMeanMatching().fit(src, tgt)
    >>> est.source_weights_.shape
    (200,)
    >>> bool(est.source_weights_[src[:, 0] > 1].mean() > est.source_weights_[src[:, 0] < -1].mean())
    True
    """

    def __init__(
        self,
        sigma: Optional[float] = None,
        bound: float = 1000.0,
        eps: Optional[float] = None,
        block_rows: int = 500,
        seed: int = 0,
        ridge: Optional[float] = None,
        sigma_multiples: Sequence[float] = (0.25, 0.5, 1.0, 2.0),
        ridge_grid: Sequence[float] = (0.01, 0.1, 1.0),
    ):
        self.sigma = sigma
        self.bound = bound
        self.eps = eps
        self.block_rows = block_rows
        self.seed = seed
        self.ridge = ridge
        self.sigma_multiples = sigma_multiples
        self.ridge_grid = ridge_grid

    _native_kind = "kmm"

    def _native_params(self) -> Dict[str, Any]:
        """The parameters of the native fit, one entry per field of the core configuration."""
        return dict(
            sigma=None if self.sigma is None else float(self.sigma),
            bound=float(self.bound),
            eps=None if self.eps is None else float(self.eps),
            block_rows=as_count(self.block_rows, "block_rows"),
            seed=as_seed(self.seed),
            ridge=None if self.ridge is None else float(self.ridge),
            sigma_multiples=[float(v) for v in self.sigma_multiples],
            ridge_grid=[float(v) for v in self.ridge_grid],
        )

    def _fit_native(self, source, target, names):
        return _native.fit_ratio(source, target, self._native_kind, self._native_params(), names)

    def _extract(self, model):
        chosen = model.selection["chosen"]
        self.sigma_ = chosen["sigma"]
        self.ridge_ = chosen["ridge"]
        self.eps_ = chosen["eps"]
        self.n_blocks_ = int(chosen["n_blocks"])
        self.cv_scores_ = model.selection["table"]
        self.median_distance_ = chosen.get("median_distance")

    def ratio(self, X: Any) -> np.ndarray:
        """Not available: KMM weights exist only for the fitted source rows.

        Raises ``UnsupportedOperationError``; use ``source_weights_``, or ``KLRatio`` /
        ``LeastSquaresRatio`` to score new rows.
        """
        self._check_fitted()
        return super().ratio(X)


@register_kind("classifier")
class ClassifierRatio(RatioEstimatorBase):
    """Density ratio from a logistic classifier of target-vs-source rows (Bickel et al. 2009).

    Fits an L2-penalised logistic regression of "is this row from the target?" on a feature map of
    the pooled-standardised rows, minimising sum_i logloss_i + (l2/2)||beta||^2 with the intercept
    unpenalised (scikit-learn's ``LogisticRegression(C=1/l2)``), and turns its log-odds eta(x) into
    a weight with the class-prior correction: log w(x) = eta(x) + ln(n_source / n_target).

    Source weights are cross-fitted: each source row's weight comes from the model fitted with its
    fold held out, so no weight is scored by a model that saw its row. ``ratio(X)`` on new rows
    uses the model fitted on all rows. Scales to millions of rows; prefer it when the log-ratio is
    smooth (linear or quadratic in the features), when there are many features, or when kernel
    methods are too slow.

    Parameters
    ----------
    l2 : float or None
        Penalty strength (> 0); None chooses it from ``l2_grid`` by out-of-fold log-loss.
    features : {"linear", "quadratic", "fourier"}
        Feature map: the standardised features; plus all pairwise products (the log-ratio of two
        Gaussians is exactly quadratic); or ``n_fourier`` random Fourier features of a Gaussian
        kernel (Rahimi & Recht 2007) with width ``fourier_sigma`` (None: median heuristic).
    folds : int
        Cross-fitting folds (>= 2).
    seed : int
        Seed of the folds and the Fourier frequencies.
    n_fourier : int
        Number of random Fourier features (default 100).
    fourier_sigma : float or None
        Width of the Fourier kernel in standardised units.
    l2_grid : sequence of float
        Penalties tried when ``l2`` is None.

    Attributes
    ----------
    l2_ : penalty used; ``cv_scores_``: out-of-fold log-loss per penalty; ``coef_``, ``intercept_``:
    the all-rows classifier on the mapped standardised features; ``log_prior_ratio_``:
    ln(n_source / n_target); ``source_weights_``: cross-fitted source weights.

    Weighting corrects covariate shift only, needs the source to cover the target, and should be
    validated on labelled target data.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (400, 2)), rng.normal(0.5, 1, (400, 2))
    >>> est = sw.ClassifierRatio(features="quadratic").fit(src, tgt)
    >>> w = est.ratio(np.array([[-1.0, -1.0], [1.0, 1.0]]))
    >>> bool(w[1] > w[0]), est.source_weights_.shape
    (True, (400,))
    """

    _native_kind = "classifier"

    def __init__(
        self,
        l2: Optional[float] = 1.0,
        features: str = "linear",
        folds: int = 5,
        seed: int = 0,
        n_fourier: int = 100,
        fourier_sigma: Optional[float] = None,
        l2_grid: Sequence[float] = (0.01, 0.1, 1.0, 10.0, 100.0, 1000.0),
    ):
        self.l2 = l2
        self.features = features
        self.folds = folds
        self.seed = seed
        self.n_fourier = n_fourier
        self.fourier_sigma = fourier_sigma
        self.l2_grid = l2_grid

    def _native_params(self) -> Dict[str, Any]:
        """The arguments of the native fit function (also how ``AutoRatio`` passes a candidate)."""
        return dict(
            l2=None if self.l2 is None else float(self.l2),
            features=str(self.features),
            n_fourier=as_count(self.n_fourier, "n_fourier"),
            fourier_sigma=None if self.fourier_sigma is None else float(self.fourier_sigma),
            folds=as_count(self.folds, "folds"),
            seed=as_seed(self.seed),
            l2_grid=[float(v) for v in self.l2_grid],
        )

    def _fit_native(self, source, target, names):
        return _native.fit_ratio(source, target, self._native_kind, self._native_params(), names)

    def _extract(self, model):
        chosen = model.selection["chosen"]
        self.l2_ = chosen["l2"]
        self.fourier_sigma_ = chosen.get("fourier_sigma")
        self.cv_scores_ = model.selection["table"]
        form = json.loads(model.form_json())
        self.features_ = form["map"]["map"]
        self.coef_ = np.asarray(form["coef"], dtype=np.float64)
        self.intercept_ = float(form["intercept"])
        self.log_prior_ratio_ = float(form["log_prior_ratio"])


class AutoRatio(RatioEstimatorBase):
    """Chooses a ratio estimator and the cap on its weights from held-out rows (no labels needed).

    Every candidate is fitted on the other folds of both samples (choosing its own
    hyperparameters there) and judged by the weights it would hand over: its estimate rescaled
    and capped, g = min(s w, c), for each cap c in Ionides' sqrt(n) (Ionides 2008), 10, 5 and 3
    times the mean weight, s making the capped source weights average 1. With the default
    ``score="capped_least_squares"`` the held-out criterion is J(g) = 1/2 mean_source(g^2) -
    mean_target(g), which differs from the squared error to the true ratio by a constant
    (Kanamori, Hido, Sugiyama 2009); capped weights are bounded, so a heavy tail cannot buy a low
    score. Each candidate keeps its best cap. ``score="relative_pearson"`` scores the bounded
    relative ratio g / (g/2 + 1/2) instead (Yamada et al. 2013); ``score="least_squares"`` scores
    raw weights without a cap. The measurements behind the default are in
    docs/automatic-choice.md.

    Uniform weights (w = 1, score -0.5) are always a candidate. A candidate is eligible if its
    mean score beats uniform's by more than ``se_margin`` of its standard errors and the Pareto
    tail shape k of its held-out raw source weights is below ``tail_k`` (1: at k >= 1 the fitted
    tail has no finite mean, so the estimate is not a credible ratio; Vehtari et al. 2024).
    Among eligible candidates within one standard error of the best, the one with the largest
    effective sample size wins (``prefer_stable``).
    With none eligible, uniform weights are kept and ``warnings_`` says that no correction was
    found to help. The winner is refitted on all rows and its cap applied: ``ratio`` and
    ``source_weights_`` are the capped weights, ``mass * min(scale * w, cap_)`` with the scale
    that gives ``min(scale * w, cap_)`` mean 1 and ``mass`` (``raw_mean_``) the raw source weights'
    mean, so the cap moves weight between rows without hiding how much the raw estimate puts on
    the source; ``raw_ratio`` is the estimate before the cap. Above ``max_rows`` rows in a
    sample, candidates are scored on a seeded subsample of that many rows.

    KMM cannot be a candidate: it is transductive (no weights for held-out rows, so no honest
    held-out score).

    Parameters
    ----------
    candidates : None, list or dict
        None: uLSIF, RuLSIF (alpha 0.1), KLIEP and the classifier with linear, quadratic and
        Fourier features; the quadratic one only up to 20 columns (its d(d+3)/2 features make the
        fit cost grow like d^4: measured 0.32 s per fit at d = 20, 19.5 s at d = 40 on 1,000 +
        1,000 rows), and ``warnings_`` says when it is left out. Otherwise estimator instances,
        ``(name, estimator)`` pairs, or a dict ``{name: estimator}`` (names default to the
        estimator's repr).
    folds : int
        Held-out folds (>= 2).
    seed : int
        Seed of the folds, the subsample and the default candidates.
    se_margin : float
        Standard errors by which a candidate must beat uniform weights to be eligible.
    score : str
        "capped_least_squares", "relative_pearson" or "least_squares".
    prefer_stable : bool
        Among candidates within one standard error of the best, take the largest effective sample
        size (else the lowest mean).
    tail_k : float
        Pareto k of the held-out raw source weights at or above which a candidate is not chosen.
    max_rows : int
        Rows per sample above which candidates are scored on a seeded subsample (>= 100).

    Attributes
    ----------
    chosen_ : name of the chosen candidate ("uniform" for no correction); ``scores_``: list of
    dicts (name, score, std_error, pareto_k, excluded, cap, ess_fraction), uniform first, where
    ``pareto_k`` is the tail shape of the held-out raw source weights (None when it cannot be
    estimated), ``excluded`` is True for candidates the heavy-tail guard kept from being chosen,
    ``cap`` the candidate's best cap on the mean-1 scale and ``ess_fraction`` the effective sample
    size of its held-out capped source weights as a fraction of the rows; ``cap_``: the cap
    applied to the winner on the mean-1 scale (None for uniform weights or raw scores);
    ``raw_mean_``: the mean of the winner's raw source weights, which the capped weights keep
    (a value far below 1 means the source covers only part of the target; None without a cap);
    ``chosen_estimator_``: the
    refitted winner as its own class, sharing the capped model (None for uniform);
    ``source_weights_``: the weights handed over.

    Examples
    --------
    >>> import numpy as np, shiftweight as sw
    >>> rng = np.random.default_rng(0)
    >>> src, tgt = rng.normal(0, 1, (300, 2)), rng.normal(1, 1, (300, 2))
    >>> auto = sw.AutoRatio(candidates=[sw.ClassifierRatio(), ("ulsif", sw.LeastSquaresRatio(n_basis=50))])
    >>> auto = auto.fit(src, tgt)
    >>> [row["name"] for row in auto.scores_]
    ['uniform', 'ClassifierRatio()', 'ulsif']
    >>> auto.chosen_ != "uniform"
    True
    """

    def __init__(
        self,
        candidates: Any = None,
        folds: int = 5,
        seed: int = 0,
        se_margin: float = 1.0,
        score: str = "capped_least_squares",
        prefer_stable: bool = True,
        tail_k: float = 1.0,
        max_rows: int = 20000,
    ):
        self.candidates = candidates
        self.folds = folds
        self.seed = seed
        self.se_margin = se_margin
        self.score = score
        self.prefer_stable = prefer_stable
        self.tail_k = tail_k
        self.max_rows = max_rows

    def _candidate_specs(self):
        if self.candidates is None:
            return None
        items = self.candidates.items() if isinstance(self.candidates, dict) else self.candidates
        specs = []
        for item in items:
            name, est = item if isinstance(item, tuple) else (repr(item), item)
            if not hasattr(est, "_native_params") or getattr(est, "_native_kind", "kmm") == "kmm":
                raise _native.ShiftweightError(
                    f"candidate {name!r} ({type(est).__name__}) cannot enter AutoRatio: a candidate must be a "
                    "shiftweight ratio estimator that scores held-out rows (KMM is transductive and cannot)"
                )
            specs.append((str(name), est._native_kind, est._native_params()))
        return specs

    def _fit_native(self, source, target, names):
        return _native.fit_auto(
            source,
            target,
            self._candidate_specs(),
            as_count(self.folds, "folds"),
            as_seed(self.seed),
            float(self.se_margin),
            str(self.score),
            bool(self.prefer_stable),
            float(self.tail_k),
            as_count(self.max_rows, "max_rows"),
            feature_names=names,
        )

    def _extract(self, model):
        sel = model.selection
        self.chosen_ = sel["candidate"]
        self.scores_ = [
            {
                "name": n,
                "score": r["score"],
                "std_error": r["std_error"],
                "pareto_k": r.get("pareto_k"),
                "excluded": bool(r.get("excluded", 0.0)),
                "cap": r.get("cap"),
                "ess_fraction": r.get("ess_fraction"),
            }
            for n, r in zip(sel["labels"], sel["table"])
        ]
        cap = model.cap
        self.cap_ = None if cap is None else cap[1]
        self.raw_mean_ = None if cap is None else cap[2]
        cls = _KIND_TO_CLASS.get(model.kind)
        if cls is None:
            self.chosen_estimator_ = None
        else:
            est = cls()
            est._set_fitted(model)
            self.chosen_estimator_ = est

    def raw_ratio(self, X: Any) -> np.ndarray:
        """The chosen estimator's w(x) before the cap (for analysis; ``ratio`` gives the weights to use)."""
        model = self._check_fitted()
        x, names = as_matrix(X, "X")
        if x.shape[1] != model.n_features:
            raise _native.ShiftweightError(
                f"`X` has {x.shape[1]} feature column(s) but the model was fitted on {model.n_features}"
            )
        check_same_columns(model.feature_names, names, "the fitted data", "X")
        return model.raw_ratio(x)

    def decision_summary(self) -> str:
        """The automatic choice in plain words: which estimator and why (score, standard error,
        effective sample size), which cap, what was excluded and why, or that uniform weights were
        kept because no correction was found to help."""
        return self._check_fitted().decision_summary() or ""

    def __repr__(self) -> str:
        base = super().__repr__()
        model = getattr(self, "model_", None)
        if model is None:
            return base
        return f"{base}\n  fitted: {model.decision_summary()}"

    def score_table(self):
        """The score table as a pandas DataFrame (needs pandas): candidates that may be chosen first,
        each group by score (best first); the heavy-tail-excluded ones last."""
        import pandas as pd

        self._check_fitted()
        table = pd.DataFrame(self.scores_)
        return table.sort_values(["excluded", "score"], kind="stable").reset_index(drop=True)


def ratio_from_probabilities(p_target: Any, n_source: int, n_target: int, clip: float = 1e-6) -> np.ndarray:
    """Importance weights from any classifier's out-of-fold probabilities P(target | x).

    w_i = p_i / (1 - p_i) * n_source / n_target, where ``n_source`` and ``n_target`` are the
    numbers of source and target rows the classifier was trained on (the class-prior correction;
    Bickel et al. 2009). Use out-of-fold probabilities (e.g. scikit-learn's ``cross_val_predict``
    with ``method="predict_proba"``) so no weight comes from a model that saw its row. A
    probability outside (0, 1) or non-finite raises ``ShiftweightError`` naming its index;
    probabilities within ``clip`` of 0 or 1 are clipped, with a warning giving their count.

    Examples
    --------
    >>> import shiftweight as sw
    >>> sw.ratio_from_probabilities([0.5, 0.2], n_source=300, n_target=100)
    array([3.  , 0.75])
    """
    p = as_vector(p_target, "p_target")
    for name, v in (("n_source", n_source), ("n_target", n_target)):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 1:
            raise _native.ShiftweightError(f"`{name}` must be a positive integer (a row count), got {v!r}")
    w, n_clipped = _native.weights_from_probabilities(p, int(n_source), int(n_target), float(clip))
    if n_clipped:
        warnings.warn(
            f"{n_clipped} of {p.shape[0]} probabilities were within {clip:g} of 0 or 1 and were clipped to "
            f"[{clip:g}, {1 - clip:g}]: the classifier is nearly certain there, so those weights are unreliable "
            "(check support overlap)",
            UserWarning,
            stacklevel=2,
        )
    return w


def from_json(text: str) -> RatioEstimatorBase:
    """Restores a fitted estimator from its JSON model document.

    The learned state is restored exactly (identical ratios); constructor hyperparameters take
    their defaults, and the chosen values are in the learned attributes and ``selection_``.
    Raises ``ModelFileError`` for another format, another version or an inconsistent model.
    """
    model = _native.RatioModel.from_json(text)
    cls: Optional[type] = AutoRatio if "candidate" in model.selection else _KIND_TO_CLASS.get(model.kind)
    if cls is None:
        raise _native.ModelFileError(f"no Python class for estimator kind {model.kind!r}")
    return _restore(cls(), model)


def _restore(est: RatioEstimatorBase, model: Any) -> RatioEstimatorBase:
    """Sets the learned attributes from a loaded model; a document whose selection record lacks
    what its estimator kind records (a hand-edited file) gives ``ModelFileError``."""
    try:
        est._set_fitted(model)
    except (KeyError, TypeError, ValueError, IndexError) as e:
        raise _native.ModelFileError(
            f"model file rejected: the {model.kind} model's selection record is incomplete or malformed ({e!r})"
        ) from None
    return est
