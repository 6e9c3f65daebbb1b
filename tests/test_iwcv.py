"""Importance-weighted cross-validation, the weighted-versus-unweighted comparison and weighted
metrics with intervals."""


import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import (
    accuracy_score,
    brier_score_loss,
    log_loss,
    mean_absolute_error,
    mean_squared_error,
)
from sklearn.model_selection import KFold, PredefinedSplit, cross_val_score
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import shiftweight as sw
from _shift_cases import sinc_regression_toy as toy


# The toy set-up of the covariate-shift literature (from memory): a straight line fitted to the
# curved function sinc(x), source inputs N(1, 0.5^2), target inputs N(2, 0.25^2).
def _cancer():
    X, y = load_breast_cancer(return_X_y=True)  # reference data: Wolberg, Street, Mangasarian (1995)
    return X, y


@pytest.mark.parametrize(
    "scoring,sk_scoring,kind",
    [
        ("log_loss", "neg_log_loss", "clf"),
        ("brier", "neg_brier_score", "clf"),
        ("accuracy", "accuracy", "clf"),
        ("squared_error", "neg_mean_squared_error", "reg"),
        ("absolute_error", "neg_mean_absolute_error", "reg"),
    ],
)
def test_equal_weights_equal_cross_val_score(scoring, sk_scoring, kind):
    X, y = _cancer()
    if kind == "clf":
        model = make_pipeline(StandardScaler(), LogisticRegression(C=0.5))
        target = y
    else:
        model = Ridge(alpha=1.0)
        target = X[:, 0] + 0.1 * X[:, 1]
        X = X[:, 2:8]
    cv = KFold(5, shuffle=True, random_state=0)
    r = sw.iw_cross_validate(model, X, target, np.ones(len(target)), cv=cv, scoring=scoring)
    # reference: sklearn.model_selection.cross_val_score on the same folds
    ref = cross_val_score(model, X, target, cv=cv, scoring=sk_scoring)
    sign = 1.0 if sk_scoring == "accuracy" else -1.0
    np.testing.assert_allclose(r.per_fold, sign * ref, rtol=1e-10, atol=1e-12)
    assert abs(r.estimate - sign * ref.mean()) < 1e-10
    assert abs(r.unweighted_estimate - r.estimate) < 1e-12
    np.testing.assert_allclose(r.per_fold_ess, r.per_fold_n)  # common practice: equal weights give ESS = n


def test_integer_cv_folds_are_reusable_in_sklearn():
    X, y = _cancer()
    model = make_pipeline(StandardScaler(), LogisticRegression())
    r = sw.iw_cross_validate(model, X, y, np.ones(len(y)), cv=4, scoring="accuracy", seed=3)
    assert r.folds is not None and sorted(set(r.folds)) == [0, 1, 2, 3]
    # reference: sklearn.model_selection.cross_val_score with PredefinedSplit of the same folds
    ref = cross_val_score(model, X, y, cv=PredefinedSplit(r.folds), scoring="accuracy")
    np.testing.assert_allclose(r.per_fold, ref, rtol=0, atol=1e-12)


def test_weighted_folds_equal_sklearn_weighted_metrics():
    X, y = _cancer()
    rng = np.random.default_rng(0)
    w = rng.exponential(size=len(y))
    cv = KFold(3, shuffle=True, random_state=1)
    model = make_pipeline(StandardScaler(), LogisticRegression(C=0.3))
    r = sw.iw_cross_validate(model, X, y, w, cv=cv, scoring="log_loss")
    # reference: per fold, sklearn's fit with sample_weight and sklearn.metrics.log_loss with sample_weight
    for k, (tr, te) in enumerate(cv.split(X, y)):
        m = make_pipeline(StandardScaler(), LogisticRegression(C=0.3))
        m.fit(X[tr], y[tr], logisticregression__sample_weight=w[tr])
        assert abs(r.per_fold[k] - log_loss(y[te], m.predict_proba(X[te]), sample_weight=w[te])) < 1e-9
        # reference: Kish (1965) effective sample size
        assert abs(r.per_fold_ess[k] - w[te].sum() ** 2 / (w[te] ** 2).sum()) < 1e-9
    # a callable scoring gets the fold weights
    rc = sw.iw_cross_validate(model, X, y, w, cv=cv, scoring=accuracy_score)
    for k, (tr, te) in enumerate(cv.split(X, y)):
        m = make_pipeline(StandardScaler(), LogisticRegression(C=0.3))
        m.fit(X[tr], y[tr], logisticregression__sample_weight=w[tr])
        assert abs(rc.per_fold[k] - accuracy_score(y[te], m.predict(X[te]), sample_weight=w[te])) < 1e-12


def test_model_without_sample_weight_gets_a_clear_error():
    X, y = _cancer()
    with pytest.raises(TypeError, match="KNeighborsClassifier"):
        sw.iw_cross_validate(KNeighborsClassifier(), X, y, np.ones(len(y)), scoring="accuracy")
    with pytest.raises(sw.ShiftweightError, match="scoring"):
        sw.iw_cross_validate(LogisticRegression(), X, y, np.ones(len(y)), scoring="auc")
    with pytest.raises(sw.ShiftweightError, match="weights"):
        sw.iw_cross_validate(LogisticRegression(), X, y, -np.ones(len(y)))


def test_iwcv_tracks_target_error_better_than_plain_cv_on_the_toy():
    # Sugiyama, Krauledat, Mueller (2007): IWCV is (almost) unbiased for the target risk; plain CV
    # estimates the source risk. Set-up: the toy of test_learn (from memory).
    err_iw, err_plain, err_iw_u, err_plain_u = [], [], [], []
    for seed in range(8):
        xs, ys, ws, xt, yt, _ = toy(seed)
        model = sw.WeightedRidge(l2=1e-6)
        c = sw.compare_weighting(model, xs, ys, ws, cv=5, scoring="squared_error", seed=seed)
        true_w = np.mean((yt - sw.WeightedRidge(l2=1e-6).fit(xs, ys, sample_weight=ws).predict(xt)) ** 2)
        true_u = np.mean((yt - sw.WeightedRidge(l2=1e-6).fit(xs, ys).predict(xt)) ** 2)
        err_iw.append(abs(c.weighted.estimate - true_w))
        err_plain.append(abs(c.weighted.unweighted_estimate - true_w))
        err_iw_u.append(abs(c.unweighted.estimate - true_u))
        err_plain_u.append(abs(c.unweighted.unweighted_estimate - true_u))
    assert np.mean(err_iw) < np.mean(err_plain)
    assert np.mean(err_iw_u) < np.mean(err_plain_u)


def test_selection_bias_on_breast_cancer():
    # Zadrozny (2004) set-up: the target is an unbiased sample; the source keeps rows with a known
    # probability s(x) that depends on x only, so the true weights are 1 / s(x).
    X, y = _cancer()
    z = (X[:, 0] - X[:, 0].mean()) / X[:, 0].std()  # mean radius, standardised
    s = 0.05 + 0.9 / (1.0 + np.exp(-4.0 * (np.abs(z - 0.3) - 1.0)))  # rarely keeps the ambiguous middle
    within, optimistic = 0, 0
    seeds = range(10)
    for seed in seeds:
        rng = np.random.default_rng(seed)
        perm = rng.permutation(len(y))
        pool, test = perm[:300], perm[300:]
        keep = pool[rng.random(300) < s[pool]]
        Xs, ys, ws = X[keep], y[keep], 1.0 / s[keep]
        model = make_pipeline(StandardScaler(), LogisticRegression(C=0.1))
        r = sw.iw_cross_validate(model, Xs, ys, ws, cv=5, scoring="log_loss", seed=seed)
        fitted = make_pipeline(StandardScaler(), LogisticRegression(C=0.1))
        fitted.fit(Xs, ys, logisticregression__sample_weight=ws)
        losses = -np.log(np.clip(fitted.predict_proba(X[test])[np.arange(len(test)), y[test]], 1e-15, 1))
        target, target_se = losses.mean(), losses.std(ddof=1) / np.sqrt(len(test))
        # The measured target error is itself an estimate: the two standard errors combine.
        if abs(r.estimate - target) <= 2 * np.hypot(r.std_error, target_se):
            within += 1
        if r.unweighted_estimate < target:
            optimistic += 1
    assert within >= 7
    # Known direction: the source under-represents the hard middle, so plain CV is optimistic.
    assert optimistic >= 8


def test_comparison_says_it_in_words():
    xs, ys, ws, _, _, _ = toy(0, n_source=300)
    c = sw.compare_weighting(sw.WeightedRidge(l2=1e-6), xs, ys, ws, scoring="squared_error")
    assert c.verdict in ("favours_weighting", "favours_no_weighting", "no_clear_difference")
    assert "weight" in c.message and "target" in c.message
    assert abs(c.difference - (c.weighted.estimate - c.unweighted.estimate)) < 1e-12
    assert "WeightingComparison" in repr(c) and "<table>" in c._repr_html_()
    d = c.to_dict()
    assert d["verdict"] == c.verdict and len(d["weighted"]["per_fold"]) == 5


def test_result_object_conveniences():
    xs, ys, ws, _, _, _ = toy(1)
    r = sw.iw_cross_validate(sw.WeightedRidge(), xs, ys, ws, scoring="squared_error")
    assert "effective rows" in repr(r) and "<table>" in r._repr_html_()
    assert r.to_dict()["estimate"] == r.estimate and len(r.per_fold_ess) == 5


# ------------------------------------------------------------------ weighted metrics with intervals


def test_weighted_metric_equals_sklearn_weighted_metrics():
    rng = np.random.default_rng(2)
    n = 200
    w = rng.exponential(size=n)
    y = rng.normal(size=n)
    p = y + rng.normal(size=n)
    # reference: sklearn.metrics with sample_weight
    assert (
        abs(sw.weighted_metric(y, p, w, "squared_error").estimate - mean_squared_error(y, p, sample_weight=w)) < 1e-12
    )
    assert (
        abs(sw.weighted_metric(y, p, w, "absolute_error").estimate - mean_absolute_error(y, p, sample_weight=w)) < 1e-12
    )
    lab = (rng.random(n) < 0.4).astype(int)
    prob = np.clip(0.4 + 0.3 * (lab - 0.4) + 0.2 * rng.normal(size=n), 0.01, 0.99)
    assert abs(sw.weighted_metric(lab, prob, w, "log_loss").estimate - log_loss(lab, prob, sample_weight=w)) < 1e-12
    assert (
        abs(sw.weighted_metric(lab, prob, w, "brier").estimate - brier_score_loss(lab, prob, sample_weight=w)) < 1e-12
    )
    pred = (prob > 0.5).astype(int)
    assert (
        abs(sw.weighted_metric(lab, pred, w, "accuracy").estimate - accuracy_score(lab, pred, sample_weight=w)) < 1e-12
    )
    P = np.column_stack([1 - prob, prob])
    assert abs(sw.weighted_metric(lab, P, w, "log_loss").estimate - log_loss(lab, P, sample_weight=w)) < 1e-12


def test_equal_weight_interval_is_the_classical_one():
    rng = np.random.default_rng(3)
    y, p = rng.normal(size=150), rng.normal(size=150)
    r = sw.weighted_metric(y, p, None, "absolute_error", confidence=0.9)
    v = np.abs(y - p)
    # reference: scipy.stats.sem and scipy.stats.norm.ppf
    assert abs(r.std_error - stats.sem(v)) < 1e-12
    assert abs(r.upper - (v.mean() + stats.norm.ppf(0.95) * stats.sem(v))) < 1e-12
    assert abs(r.ess - 150) < 1e-9


def test_normal_weighted_interval_covers_the_target_value():
    # Analytic truth: x ~ N(0, 1) on the source, N(0.5, 1) on the target, so w(x) = exp(0.5 x - 0.125)
    # and the target mean of the per-row value x^2 is 1 + 0.5^2 = 1.25.
    reps, hits = 120, 0
    for seed in range(reps):
        rng = np.random.default_rng(100 + seed)
        x = rng.normal(size=300)
        w = np.exp(0.5 * x - 0.125)
        r = sw.weighted_metric(x, np.zeros_like(x), w, "squared_error", confidence=0.9)
        hits += r.lower <= 1.25 <= r.upper
    # Monte-Carlo error of a 90% coverage over 120 replicates: sd sqrt(0.9 * 0.1 / 120) ~ 0.027.
    assert abs(hits / reps - 0.9) < 3 * np.sqrt(0.09 / reps)


def test_bootstrap_interval_matches_an_independent_numpy_bootstrap():
    rng = np.random.default_rng(7)
    x = rng.normal(size=400)
    w = np.exp(0.5 * x - 0.125)
    r = sw.weighted_metric(
        x, np.zeros_like(x), w, "squared_error", confidence=0.9, method="bootstrap", n_boot=4000, seed=1
    )
    assert (
        r.to_dict()
        == sw.weighted_metric(
            x, np.zeros_like(x), w, "squared_error", confidence=0.9, method="bootstrap", n_boot=4000, seed=1
        ).to_dict()
    )  # seeded
    # reference: a percentile bootstrap of the weighted mean written with numpy (Efron 1979)
    v = x**2
    idx = np.random.default_rng(0).integers(0, 400, size=(4000, 400))
    stats_ = (w[idx] * v[idx]).sum(1) / w[idx].sum(1)
    lo, hi = np.quantile(stats_, [0.05, 0.95])
    sd = stats_.std()
    # Both are Monte-Carlo estimates of the same quantiles: they agree to a small fraction of the spread.
    assert abs(r.lower - lo) < 0.1 * sd and abs(r.upper - hi) < 0.1 * sd
