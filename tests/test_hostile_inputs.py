"""Hostile inputs at every public entry point.

Each case calls one entry point with one kind of bad or awkward input and expects one of:

- ``err(name)``: a ``sw.ShiftweightError`` (a ValueError) whose message names the argument;
- ``finite``: a result whose numeric outputs are all finite (the documented handling, e.g. a
  constant column gives finite weights and a warning);
- ``either(name)``: one of the two (edge cases where refusing and answering are both sensible).

Never a panic (``sw.InternalError``), never another exception type, never NaN or inf output.
Sizes are tiny so the whole file runs in seconds.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import shiftweight as sw

RNG = np.random.default_rng(7)
S = RNG.normal(0.0, 1.0, (14, 2))
T = RNG.normal(0.5, 1.0, (12, 2))
W = RNG.uniform(0.2, 3.0, 14)
Y_REG = S[:, 0] * 2.0 + RNG.normal(0, 0.3, 14)
Y_BIN = (S[:, 0] + 0.3 * RNG.normal(size=14) > 0).astype(int)
if len(set(Y_BIN)) < 2:  # pragma: no cover - guard for the seeded draw
    Y_BIN[:2] = [0, 1]


def with_value(a, i, j, v):
    a = np.array(a, dtype=float)
    a[i, j] = v
    return a


def constant_col(a):
    a = np.array(a, dtype=float)
    a[:, 1] = 3.0
    return a


def duplicated(a):
    return np.vstack([a[:3]] * (len(a) // 3 + 1))[: len(a)]


def obj(a):
    o = np.array(a, dtype=object)
    o[0, 0] = "x"
    return o


# The matrix variants shared by every (source, target) entry point: (id, source, target, outcome).
def pair_variants(min_one_row="either"):
    return [
        ("nan_source", with_value(S, 2, 1, np.nan), T, ("err", "source")),
        ("inf_target", S, with_value(T, 3, 0, np.inf), ("err", "target")),
        ("neg_inf_source", with_value(S, 0, 0, -np.inf), T, ("err", "source")),
        ("empty_source", np.zeros((0, 2)), T, ("err", "source")),
        ("empty_target", S, np.zeros((0, 2)), ("err", "target")),
        ("one_row_source", S[:1], T, (min_one_row, "source")),
        ("zero_features", np.zeros((14, 0)), np.zeros((12, 0)), ("err", "source")),
        ("mismatched_features", S, np.hstack([T, T[:, :1]]), ("err", "target")),
        ("constant_column", constant_col(S), constant_col(T), ("finite", None)),
        ("duplicated_rows", duplicated(S), duplicated(T), ("finite", None)),
        ("huge_values", S * 1e300, T * 1e300, ("either", "source")),
        ("tiny_values", S * 1e-300, T * 1e-300, ("finite", None)),
        ("int_arrays", np.round(S * 3).astype(np.int64), np.round(T * 3).astype(np.int32), ("finite", None)),
        ("bool_arrays", S > 0, T > 0.5, ("finite", None)),
        ("object_array", obj(S), T, ("err", "source")),
        ("one_d", S[:, 0], T, ("err", "source")),
        ("three_d", S.reshape(14, 2, 1), T, ("err", "source")),
    ]


def numeric_leaves(x):
    """Every float inside a result (arrays, floats, dicts, lists, documents)."""
    if isinstance(x, np.ndarray):
        if x.dtype.kind in "fc":
            yield from x.ravel().tolist()
        return
    if isinstance(x, (float, np.floating)):
        yield float(x)
        return
    if isinstance(x, dict):
        for v in x.values():
            yield from numeric_leaves(v)
        return
    if isinstance(x, (list, tuple)):
        for v in x:
            yield from numeric_leaves(v)
        return
    if hasattr(x, "to_dict"):
        yield from numeric_leaves(x.to_dict())


def check_outcome(call, outcome, allow_nan_keys=()):
    kind, name = outcome
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = call()
    except sw.InternalError as e:  # a panic crossed the boundary
        pytest.fail(f"internal failure: {e}")
    except sw.ShiftweightError as e:
        assert isinstance(e, ValueError)
        if kind == "finite":
            pytest.fail(f"expected a finite result, got {type(e).__name__}: {e}")
        names = (name,) if isinstance(name, str) else name
        assert any(f"`{n}`" in str(e) for n in names), f"message does not name {names}: {e}"
        return None
    if kind == "err":
        pytest.fail(f"expected an error naming `{name}`, got {result!r}")
    bad = [v for v in numeric_leaves(result) if not np.isfinite(v)]
    assert not bad, f"non-finite output {bad[:5]}"
    return result


# ------------------------------------------------------------------------------------------------
# Ratio estimators: fit and ratio
# ------------------------------------------------------------------------------------------------

ESTIMATORS = {
    "lsif": lambda: sw.LeastSquaresRatio(n_basis=6, sigma_multiples=(0.5, 1.0), lambda_grid=(0.1, 1.0)),
    "rulsif": lambda: sw.LeastSquaresRatio(n_basis=6, alpha=0.5, sigma=1.0, lam=0.1),
    "kliep": lambda: sw.KLRatio(n_basis=6, folds=2, sigma_multiples=(0.5, 1.0)),
    "kmm": lambda: sw.KernelMeanMatching(),
    "classifier": lambda: sw.ClassifierRatio(folds=2),
    "classifier_fourier": lambda: sw.ClassifierRatio(
        folds=2, features="fourier", n_fourier=8, l2=None, l2_grid=(0.1, 1.0)
    ),
    "auto": lambda: sw.AutoRatio(folds=2),
}


def fitted_weights(est):
    return est.source_weights_


@pytest.mark.parametrize("est_name", list(ESTIMATORS))
@pytest.mark.parametrize("case", pair_variants(), ids=lambda c: c[0])
def test_estimator_fit(est_name, case):
    _, s, t, outcome = case

    def call():
        est = ESTIMATORS[est_name]().fit(s, t)
        return est.source_weights_

    w = check_outcome(call, outcome)
    if w is not None:
        assert np.all(w >= 0)
        assert w.shape == (np.asarray(s).shape[0],)


@pytest.mark.parametrize("est_name", ["lsif", "kliep"])
def test_constant_column_is_reported(est_name):
    est = ESTIMATORS[est_name]().fit(constant_col(S), constant_col(T))
    assert any("column 1" in w and "constant" in w for w in est.warnings_), est.warnings_
    assert np.all(np.isfinite(est.ratio(constant_col(T))))


@pytest.mark.parametrize("est_name", ["lsif", "kliep", "classifier"])
@pytest.mark.parametrize("factor", [1e300, 1e-300])
def test_extreme_units_give_the_same_weights(est_name, factor):
    # reference: analytic invariance. Rescaling every feature by one factor c multiplies both
    # densities by the same Jacobian |c|^-d, so w(x) = p_t(x) / p_s(x) is unchanged; features are
    # standardised, so the fitted weights must agree up to rounding.
    base = ESTIMATORS[est_name]().fit(S, T).source_weights_
    est = ESTIMATORS[est_name]().fit(S * factor, T * factor)
    assert not any("constant" in w for w in est.warnings_), est.warnings_
    np.testing.assert_allclose(est.source_weights_, base, rtol=1e-6)


HYPERPARAMETERS = [
    ("lsif_negative_sigma", lambda: sw.LeastSquaresRatio(sigma=-1.0), "sigma"),
    ("lsif_zero_sigma", lambda: sw.LeastSquaresRatio(sigma=0.0), "sigma"),
    ("lsif_nan_sigma", lambda: sw.LeastSquaresRatio(sigma=float("nan")), "sigma"),
    ("lsif_negative_lam", lambda: sw.LeastSquaresRatio(lam=-1.0), "lam"),
    ("lsif_alpha_one", lambda: sw.LeastSquaresRatio(alpha=1.0), "alpha"),
    ("lsif_alpha_above_one", lambda: sw.LeastSquaresRatio(alpha=1.5), "alpha"),
    ("lsif_negative_alpha", lambda: sw.LeastSquaresRatio(alpha=-0.1), "alpha"),
    ("lsif_zero_basis", lambda: sw.LeastSquaresRatio(n_basis=0), "n_basis"),
    ("lsif_negative_basis", lambda: sw.LeastSquaresRatio(n_basis=-3), "n_basis"),
    ("lsif_negative_multiple", lambda: sw.LeastSquaresRatio(sigma_multiples=(-1.0,)), "sigma_multiples"),
    ("lsif_empty_grid", lambda: sw.LeastSquaresRatio(lambda_grid=()), "lambda_grid"),
    ("lsif_negative_seed", lambda: sw.LeastSquaresRatio(seed=-1), "seed"),
    ("kliep_negative_sigma", lambda: sw.KLRatio(sigma=-1.0), "sigma"),
    ("kliep_zero_folds", lambda: sw.KLRatio(folds=0), "folds"),
    ("kliep_one_fold", lambda: sw.KLRatio(folds=1), "folds"),
    # More folds than rows: the error names the data and the rows the folds need.
    ("kliep_more_folds_than_rows", lambda: sw.KLRatio(folds=100), ("folds", "source")),
    ("kliep_bad_cv", lambda: sw.KLRatio(cv="nonsense"), "cv"),
    ("kliep_negative_tol", lambda: sw.KLRatio(tol=-1.0), "tol"),
    ("kliep_zero_iter", lambda: sw.KLRatio(max_iter=0), "max_iter"),
    ("kmm_negative_sigma", lambda: sw.KernelMeanMatching(sigma=-1.0), "sigma"),
    ("kmm_zero_bound", lambda: sw.KernelMeanMatching(bound=0.0), "bound"),
    ("kmm_negative_eps", lambda: sw.KernelMeanMatching(eps=-0.5), "eps"),
    ("kmm_zero_block", lambda: sw.KernelMeanMatching(block_rows=0), "block_rows"),
    ("classifier_negative_l2", lambda: sw.ClassifierRatio(l2=-1.0), "l2"),
    ("classifier_zero_folds", lambda: sw.ClassifierRatio(l2=None, folds=0), "folds"),
    ("classifier_more_folds_than_rows", lambda: sw.ClassifierRatio(l2=None, folds=100), ("folds", "source")),
    ("classifier_bad_features", lambda: sw.ClassifierRatio(features="cubic"), "features"),
    ("classifier_zero_fourier", lambda: sw.ClassifierRatio(features="fourier", n_fourier=0), "n_fourier"),
    (
        "classifier_negative_fourier_sigma",
        lambda: sw.ClassifierRatio(features="fourier", fourier_sigma=-1.0),
        "fourier_sigma",
    ),
    ("auto_zero_folds", lambda: sw.AutoRatio(folds=0), "folds"),
    ("auto_more_folds_than_rows", lambda: sw.AutoRatio(folds=100), ("folds", "source")),
    ("auto_negative_margin", lambda: sw.AutoRatio(se_margin=-1.0), "se_margin"),
]


@pytest.mark.parametrize("case", HYPERPARAMETERS, ids=lambda c: c[0])
def test_estimator_hyperparameters(case):
    _, make, name = case
    check_outcome(lambda: make().fit(S, T).source_weights_, ("err", name))


SCORING_ROWS = [
    ("nan", with_value(T, 1, 1, np.nan), ("err", "X")),
    ("inf", with_value(T, 0, 0, -np.inf), ("err", "X")),
    ("empty", np.zeros((0, 2)), ("finite", None)),
    ("one_row", T[:1], ("finite", None)),
    ("wrong_width", T[:, :1], ("err", "X")),
    ("zero_features", np.zeros((3, 0)), ("err", "X")),
    ("huge", T * 1e300, ("finite", None)),
    ("tiny", T * 1e-300, ("finite", None)),
    ("int", np.round(T).astype(np.int16), ("finite", None)),
    ("bool", T > 0, ("finite", None)),
    ("object", obj(T), ("err", "X")),
    ("one_d", T[:, 0], ("err", "X")),
    ("three_d", T.reshape(12, 2, 1), ("err", "X")),
]

_FITTED: dict = {}


def fitted(est_name):
    if est_name not in _FITTED:
        _FITTED[est_name] = ESTIMATORS[est_name]().fit(S, T)
    return _FITTED[est_name]


@pytest.mark.parametrize("est_name", [e for e in ESTIMATORS if e != "kmm"])
@pytest.mark.parametrize("case", SCORING_ROWS, ids=lambda c: c[0])
def test_ratio(est_name, case):
    _, x, outcome = case
    r = check_outcome(lambda: fitted(est_name).ratio(x), outcome)
    if r is not None:
        assert r.shape == (np.asarray(x).shape[0],) and np.all(r >= 0)


def test_kmm_ratio_on_new_rows_is_unsupported():
    with pytest.raises(sw.UnsupportedOperationError, match="source rows"):
        fitted("kmm").ratio(T)


def test_unfitted_ratio_is_not_fitted_error():
    with pytest.raises(sw.NotFittedError):
        sw.LeastSquaresRatio().ratio(T)


# ------------------------------------------------------------------------------------------------
# Detection
# ------------------------------------------------------------------------------------------------

DETECTORS = {
    "classifier": lambda s, t, **kw: sw.shift_test(s, t, method="classifier", permutations=9, folds=2, **kw),
    "mmd": lambda s, t, **kw: sw.shift_test(s, t, method="mmd", permutations=9, **kw),
    "feature_shift": lambda s, t, **kw: sw.feature_shift(s, t, folds=2, repeats=1, **kw),
}


def detection_outputs(res):
    if isinstance(res, sw.ShiftTestResult):
        return [res.statistic, res.p_value]
    return res.to_dict() if hasattr(res, "to_dict") else res


@pytest.mark.parametrize("det", list(DETECTORS))
@pytest.mark.parametrize("case", pair_variants(), ids=lambda c: c[0])
def test_detection(det, case):
    _, s, t, outcome = case
    check_outcome(lambda: detection_outputs(DETECTORS[det](s, t)), outcome)


DETECTION_PARAMS = [
    ("classifier", dict(permutations=-1), "permutations"),
    ("classifier", dict(folds=0), "folds"),
    ("classifier", dict(folds=100), ("folds", "source and target together")),
    ("classifier", dict(l2=-1.0), "l2"),
    ("classifier", dict(seed=-5), "seed"),
    ("mmd", dict(sigma=-1.0), "sigma"),
    ("mmd", dict(sigma=float("inf")), "sigma"),
    ("mmd", dict(block_size=0), "block_size"),
    ("feature_shift", dict(max_categories=-1), "max_categories"),
    ("feature_shift", dict(repeats=-1), "repeats"),
    ("feature_shift", dict(folds=0), "folds"),
    ("feature_shift", dict(feature_names=["only_one"]), "feature_names"),
]


@pytest.mark.parametrize("case", DETECTION_PARAMS, ids=lambda c: f"{c[0]}-{c[2]}-{next(iter(c[1].values()))}")
def test_detection_parameters(case):
    det, kw, name = case
    kw = dict(kw)
    if det == "classifier" and ("folds" in kw or "permutations" in kw):
        kw.setdefault("permutations", 9)
        fn = lambda: sw.shift_test(S, T, method="classifier", **kw)  # noqa: E731
    elif det == "feature_shift" and ("folds" in kw or "repeats" in kw):
        kw.setdefault("repeats", 1)
        fn = lambda: sw.feature_shift(S, T, **kw)  # noqa: E731
    else:
        fn = lambda: detection_outputs(DETECTORS[det](S, T, **kw))  # noqa: E731
    check_outcome(fn, ("err", name))


def test_unknown_test_method():
    check_outcome(lambda: sw.shift_test(S, T, method="bogus"), ("err", "method"))


# ------------------------------------------------------------------------------------------------
# Weight functions: stabilize, effective_sample_size, pareto_k, diagnose, clip_tradeoff,
# check_overlap
# ------------------------------------------------------------------------------------------------

WEIGHT_FUNCS = {
    "stabilize": lambda w: sw.stabilize(w, truncate=True, smooth=True),
    "ess": lambda w: sw.effective_sample_size(w),
    "pareto_k": lambda w: [v for v in [sw.pareto_k(w)] if not np.isnan(v)],  # NaN is documented
    "diagnose": lambda w: [sw.diagnose(w).ess, sw.diagnose(w).mean, sw.diagnose(w).verdict],
    "clip_tradeoff": lambda w: sw.clip_tradeoff(w).to_dict(),
    "check_overlap": lambda w: sw.check_overlap(w).to_dict(),
}

WEIGHT_VARIANTS = [
    ("negative", np.r_[W[:-1], -1.0], ("err", "w")),
    ("nan", np.r_[np.nan, W[1:]], ("err", "w")),
    ("inf", np.r_[W[:-1], np.inf], ("err", "w")),
    ("all_zero", np.zeros(14), ("err", "w")),
    ("empty", np.zeros(0), ("err", "w")),
    ("one", np.array([2.0]), ("either", "w")),
    ("two_d", W.reshape(7, 2), ("err", "w")),
    ("object", np.array(["a"] * 14, dtype=object), ("err", "w")),
    ("string", np.array(["1.0"] * 14), ("err", "w")),
    ("int", np.arange(1, 15), ("finite", None)),
    ("bool", np.arange(14) % 2 == 0, ("finite", None)),
    ("huge", W * 1e300, ("finite", None)),
    ("tiny", W * 1e-300, ("finite", None)),
    ("denormal", np.r_[W, 5e-324], ("finite", None)),
    ("mixed_extremes", np.r_[W * 1e-300, 1e300], ("finite", None)),
    ("duplicated", np.ones(14), ("finite", None)),
    ("one_nonzero", np.r_[np.zeros(13), 1.0], ("finite", None)),
]


def weight_arg(func):
    # The Python argument is `w`; the core names it `weights`. Either is clear.
    return ("target_ratios",) if func == "check_overlap" else ("w", "weights")


@pytest.mark.parametrize("func", list(WEIGHT_FUNCS))
@pytest.mark.parametrize("case", WEIGHT_VARIANTS, ids=lambda c: c[0])
def test_weight_functions(func, case):
    _, w, (kind, _name) = case
    names = weight_arg(func)
    if func == "stabilize" and case[0] == "one_nonzero":
        # Truncation at sqrt(n) times the mean cannot give mean 1 with one non-zero weight.
        kind, names = "either", ("truncate",)
    check_outcome(lambda: WEIGHT_FUNCS[func](w), (kind, names))


WEIGHT_PARAMS = [
    ("stabilize_negative_power", lambda: sw.stabilize(W, power=-1.0), "power"),
    ("stabilize_power_above_one", lambda: sw.stabilize(W, power=2.0), "power"),
    ("stabilize_nan_power", lambda: sw.stabilize(W, power=float("nan")), "power"),
    ("stabilize_zero_quantile", lambda: sw.stabilize(W, upper_quantile=0.0), "upper_quantile"),
    ("stabilize_quantile_above_one", lambda: sw.stabilize(W, upper_quantile=1.5), "upper_quantile"),
    ("stabilize_lower_above_upper", lambda: sw.stabilize(W, lower=2.0, upper=1.5), "lower"),
    ("stabilize_negative_upper", lambda: sw.stabilize(W, upper=-1.0, normalize=False), "upper"),
    ("stabilize_nan_lower", lambda: sw.stabilize(W, lower=float("nan")), "lower"),
    ("clip_zero_quantile", lambda: sw.clip_tradeoff(W, quantiles=[0.0]), "quantiles"),
    ("clip_quantile_above_one", lambda: sw.clip_tradeoff(W, quantiles=[2.0]), "quantiles"),
    ("clip_empty_quantiles", lambda: sw.clip_tradeoff(W, quantiles=[]), "quantiles"),
    ("clip_for_ess_zero", lambda: sw.clip_for_ess(W, 0.0), "ess_fraction"),
    ("clip_for_ess_above_one", lambda: sw.clip_for_ess(W, 1.5), "ess_fraction"),
    ("overlap_negative_limit", lambda: sw.check_overlap(W, limit=-1.0), "limit"),
    ("overlap_tolerance_above_one", lambda: sw.check_overlap(W, tolerance=2.0), "tolerance"),
    (
        "overlap_probability_above_one",
        lambda: sw.check_overlap(probabilities=[0.5, 1.5], n_source=10, n_target=10),
        "probabilities",
    ),
    (
        "overlap_nan_probability",
        lambda: sw.check_overlap(probabilities=[0.5, np.nan], n_source=10, n_target=10),
        "probabilities",
    ),
    ("overlap_zero_sizes", lambda: sw.check_overlap(probabilities=[0.5], n_source=0, n_target=10), "n_source"),
    ("overlap_negative_sizes", lambda: sw.check_overlap(probabilities=[0.5], n_source=10, n_target=-1), "n_target"),
    ("overlap_both_inputs", lambda: sw.check_overlap(W, probabilities=[0.5]), "target_ratios"),
    ("diagnose_groups_wrong_length", lambda: sw.diagnose(W, groups=[0, 1]), "groups"),
]


@pytest.mark.parametrize("case", WEIGHT_PARAMS, ids=lambda c: c[0])
def test_weight_parameters(case):
    _, fn, name = case
    check_outcome(lambda: WEIGHT_FUNCS_RESULT(fn()), ("err", name))


def WEIGHT_FUNCS_RESULT(r):
    return r.to_dict() if hasattr(r, "to_dict") else r


# ------------------------------------------------------------------------------------------------
# Weighted learners, IWCV, conformal intervals
# ------------------------------------------------------------------------------------------------

LEARNERS = {
    "logistic": (lambda: sw.WeightedLogistic(), Y_BIN),
    "ridge": (lambda: sw.WeightedRidge(), Y_REG),
}

LEARNER_VARIANTS = [
    ("nan_X", with_value(S, 1, 0, np.nan), None, None, ("err", "X")),
    ("inf_X", with_value(S, 1, 0, np.inf), None, None, ("err", "X")),
    ("empty_X", np.zeros((0, 2)), "empty", None, ("err", ("X", "y"))),
    ("zero_features", np.zeros((14, 0)), None, None, ("err", "X")),
    ("one_d_X", S[:, 0], None, None, ("err", "X")),
    ("three_d_X", S.reshape(14, 2, 1), None, None, ("err", "X")),
    ("object_X", obj(S), None, None, ("err", "X")),
    ("int_X", np.round(S * 3).astype(int), None, None, ("finite", None)),
    ("bool_X", S > 0, None, None, ("finite", None)),
    ("constant_column", constant_col(S), None, None, ("finite", None)),
    ("duplicated_rows", duplicated(S), None, None, ("finite", None)),
    ("huge_X", S * 1e300, None, None, ("either", "X")),
    ("tiny_X", S * 1e-300, None, None, ("either", "X")),
    ("negative_weight", S, None, np.r_[-1.0, W[1:]], ("err", "sample_weight")),
    ("nan_weight", S, None, np.r_[np.nan, W[1:]], ("err", "sample_weight")),
    ("zero_weights", S, None, np.zeros(14), ("err", "sample_weight")),
    ("short_weights", S, None, W[:5], ("err", "sample_weight")),
    ("huge_weights", S, None, W * 1e300, ("finite", None)),
    ("wrong_y_length", S, "short", None, ("err", "y")),
    ("nan_y", S, "nan", None, ("err", "y")),
]


def learner_y(base, mode):
    if mode == "empty":
        return base[:0]
    if mode == "short":
        return base[:5]
    if mode == "nan":
        y = base.astype(float).copy()
        y[0] = np.nan
        return y
    return base


@pytest.mark.parametrize("learner", list(LEARNERS))
@pytest.mark.parametrize("case", LEARNER_VARIANTS, ids=lambda c: c[0])
def test_learners(learner, case):
    _, x, ymode, w, outcome = case
    make, ybase = LEARNERS[learner]
    y = learner_y(ybase, ymode)
    if learner == "logistic" and ymode == "nan":
        outcome = ("err", "y")  # NaN is a third "class"

    def call():
        m = make().fit(x, y, sample_weight=w)
        return [np.asarray(m.coef_, dtype=float), float(np.ravel(m.intercept_)[0])]

    check_outcome(call, outcome)


@pytest.mark.parametrize(
    "case",
    [
        ("logistic_negative_l2", lambda: sw.WeightedLogistic(l2=-1.0), Y_BIN, "l2"),
        ("logistic_zero_iter", lambda: sw.WeightedLogistic(max_iter=0), Y_BIN, "max_iter"),
        ("ridge_negative_l2", lambda: sw.WeightedRidge(l2=-1.0), Y_REG, "l2"),
        ("ridge_nan_l2", lambda: sw.WeightedRidge(l2=float("nan")), Y_REG, "l2"),
    ],
    ids=lambda c: c[0],
)
def test_learner_hyperparameters(case):
    _, make, y, name = case
    check_outcome(lambda: make().fit(S, y).coef_, ("err", name))


def test_learner_scoring_rows():
    m = sw.WeightedRidge().fit(S, Y_REG)
    check_outcome(lambda: m.predict(with_value(S, 0, 0, np.nan)), ("err", "X"))
    check_outcome(lambda: m.predict(S[:, :1]), ("err", "X"))
    check_outcome(lambda: m.predict(np.zeros((0, 2))), ("finite", None))


IWCV_CASES = [
    ("zero_folds", dict(cv=0), W, ("err", "folds")),
    ("one_fold", dict(cv=1), W, ("err", "folds")),
    ("more_folds_than_rows", dict(cv=100), W, ("err", "folds")),
    ("negative_weights", dict(cv=2), np.r_[-1.0, W[1:]], ("err", "weights")),
    ("nan_weights", dict(cv=2), np.r_[np.nan, W[1:]], ("err", "weights")),
    ("zero_weights", dict(cv=2), np.zeros(14), ("err", "weights")),
    ("short_weights", dict(cv=2), W[:3], ("err", "weights")),
    ("two_d_weights", dict(cv=2), W.reshape(7, 2), ("err", "weights")),
    ("bad_scoring", dict(cv=2, scoring="nonsense"), W, ("err", "scoring")),
    ("huge_weights", dict(cv=2), W * 1e300, ("finite", None)),
    ("ok", dict(cv=2), W, ("finite", None)),
]


@pytest.mark.parametrize("case", IWCV_CASES, ids=lambda c: c[0])
def test_iw_cross_validate(case):
    _, kw, w, outcome = case
    kw = dict(kw)

    def call():
        kw.setdefault("scoring", "squared_error")
        r = sw.iw_cross_validate(sw.WeightedRidge(), S, Y_REG, w, **kw)
        return [r.estimate, np.asarray(r.per_fold, dtype=float)]

    check_outcome(call, outcome)


_RIDGE = sw.WeightedRidge().fit(S[:7], Y_REG[:7])
CONFORMAL_CASES = [
    ("alpha_one", dict(alpha=1.0), ("err", "alpha")),
    ("alpha_zero", dict(alpha=0.0), ("err", "alpha")),
    ("alpha_negative", dict(alpha=-0.1), ("err", "alpha")),
    ("alpha_nan", dict(alpha=float("nan")), ("err", "alpha")),
    ("negative_cal_weights", dict(cal_weights=np.r_[-1.0, W[1:7]]), ("err", "cal_weights")),
    ("nan_weights", dict(weights=np.r_[np.nan, W[1:12]]), ("err", "weights")),
    ("short_cal_weights", dict(cal_weights=W[:3]), ("err", "cal_weights")),
    ("short_weights", dict(weights=W[:3]), ("err", "weights")),
    ("nan_y_cal", dict(y_cal=np.r_[np.nan, Y_REG[8:]]), ("err", "y_cal")),
    ("nan_X", dict(X=with_value(T, 0, 0, np.nan)), ("err", "X")),
    (
        "empty_cal",
        dict(X_cal=S[:0], y_cal=Y_REG[:0], cal_weights=W[:0]),
        ("err", ("calibration rows", "X_cal", "y_cal", "cal_weights")),
    ),
    ("huge_weights", dict(cal_weights=W[7:] * 1e300, weights=W[:12] * 1e300), ("either", "weights")),
    ("ok", dict(), ("either", None)),
]


@pytest.mark.parametrize("case", CONFORMAL_CASES, ids=lambda c: c[0])
def test_conformal_intervals(case):
    _, kw, outcome = case
    args = dict(X_cal=S[7:], y_cal=Y_REG[7:], cal_weights=W[7:], X=T, weights=W[:12], alpha=0.2)
    args.update(kw)

    def call():
        r = sw.conformal_intervals(
            _RIDGE, args["X_cal"], args["y_cal"], args["cal_weights"], args["X"], args["weights"], alpha=args["alpha"]
        )
        # Infinite bounds are the documented answer when the calibration weight cannot reach 1 - alpha.
        finite = np.isfinite(r.upper)
        assert r.n_infinite == int((~finite).sum())
        return [r.lower[finite], r.upper[finite]]

    if outcome[0] == "either" and outcome[1] is None:
        outcome = ("finite", None)
    check_outcome(call, outcome)


# ------------------------------------------------------------------------------------------------
# Model files (details in test_model_files.py)
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("text", ["", "{", "null", "[]", "42", '"text"', "{}", '{"format": 1}', "\x00\x01", "{" * 5000])
def test_from_json_rejects_junk(text):
    with pytest.raises(sw.ModelFileError, match="model file"):
        sw.from_json(text)
