"""Weighted split conformal prediction (Tibshirani, Barber, Candes, Ramdas 2019) on the
misspecified-regression toy, and agreement with ordinary split conformal under equal weights."""

import math

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import shiftweight as sw
from _shift_cases import sinc_regression_toy as toy

# The toy set-up of the covariate-shift literature (from memory): a straight line fitted to the
# curved function sinc(x), source inputs N(1, 0.5^2), target inputs N(2, 0.25^2).

def _coverage(seed, weighted, alpha=0.1):
    # The weighted quantile is conservative by up to the largest normalised weight, so the
    # calibration set is large enough for that excess to sit below the Monte-Carlo error.
    xs, ys, ws, xt, yt, wt = toy(seed, n_source=3200, n_target=400, noise=0.3)
    model = sw.WeightedRidge(l2=1e-6).fit(xs[:200], ys[:200])
    if weighted:
        r = sw.conformal_intervals(model, xs[200:], ys[200:], ws[200:], xt, wt, alpha=alpha)
    else:
        r = sw.conformal_intervals(model, xs[200:], ys[200:], None, xt, None, alpha=alpha)
    return r.covers(yt).mean()


def test_weighted_intervals_cover_the_target_and_unweighted_ones_do_not():
    reps = 60
    cov_w = np.array([_coverage(s, True) for s in range(reps)])
    cov_u = np.array([_coverage(s, False) for s in range(reps)])
    se_w = cov_w.std(ddof=1) / math.sqrt(reps)
    se_u = cov_u.std(ddof=1) / math.sqrt(reps)
    # Tibshirani et al. (2019), Corollary 1: with the true ratio, target coverage >= 1 - alpha; the
    # Monte-Carlo error is estimated from the replicates.
    assert abs(cov_w.mean() - 0.90) < 3 * se_w + 0.01
    # Without weights the calibration residuals come from the source, where the straight line fits
    # better: split conformal under-covers on the target.
    assert cov_u.mean() < 0.90 - 3 * se_u


def _ordinary_split_conformal(scores, alpha):
    # reference: split conformal quantile by hand with numpy (Lei, G'Sell, Rinaldo, Tibshirani,
    # Wasserman 2018): the ceil((1 - alpha)(n + 1))-th smallest score, infinite beyond n.
    n = len(scores)
    k = math.ceil((1 - alpha) * (n + 1))
    return np.inf if k > n else np.sort(scores)[k - 1]


@pytest.mark.parametrize("n,alpha", [(200, 0.1), (57, 0.2), (19, 0.05), (10, 0.05)])
def test_equal_weights_equal_ordinary_split_conformal(n, alpha):
    xs, ys, _, xt, _, _ = toy(n, n_source=2 * n, n_target=30)
    model = sw.WeightedRidge(l2=1e-6).fit(xs[:n], ys[:n])
    q = _ordinary_split_conformal(np.abs(ys[n:] - model.predict(xs[n:])), alpha)
    pred = model.predict(xt)
    for cw, w in [(None, None), (np.ones(n), np.ones(30)), (np.full(n, 3.0), np.full(30, 3.0))]:
        r = sw.conformal_intervals(model, xs[n:], ys[n:], cw, xt, w, alpha=alpha)
        np.testing.assert_array_equal(r.lower, pred - q)
        np.testing.assert_array_equal(r.upper, pred + q)
        assert r.n_infinite == (30 if np.isinf(q) else 0)


def test_heavy_weight_gives_an_honest_infinite_interval():
    xs, ys, ws, _, _, _ = toy(3, n_source=200)
    model = sw.WeightedRidge().fit(xs[:100], ys[:100])
    r = sw.conformal_intervals(
        model, xs[100:], ys[100:], ws[100:], np.array([[2.0], [1.0]]), np.array([1e6, 1.0]), alpha=0.1
    )
    assert r.n_infinite == 1 and np.isinf(r.upper[0]) and np.isfinite(r.upper[1])
    assert "infinite" in repr(r)
    with pytest.raises(sw.ShiftweightError, match="neither"):
        sw.conformal_intervals(model, xs[100:], ys[100:], ws[100:], xs[:2], None)
    with pytest.raises(sw.ShiftweightError, match="alpha"):
        sw.conformal_intervals(model, xs[100:], ys[100:], None, xs[:2], None, alpha=1.5)


def test_equal_weight_class_sets_equal_ordinary_split_conformal():
    X, y = load_breast_cancer(return_X_y=True)  # reference data: Wolberg, Street, Mangasarian (1995)
    rng = np.random.default_rng(0)
    perm = rng.permutation(len(y))
    tr, cal, te = perm[:200], perm[200:400], perm[400:]
    clf = make_pipeline(StandardScaler(), LogisticRegression(C=0.05)).fit(X[tr], y[tr])
    alpha = 0.05
    r = sw.conformal_sets(clf, X[cal], y[cal], None, X[te], None, alpha=alpha)
    p_cal = clf.predict_proba(X[cal])[np.arange(len(cal)), y[cal]]
    q = _ordinary_split_conformal(1 - p_cal, alpha)
    expected = 1 - clf.predict_proba(X[te]) <= q  # reference: numpy, the score 1 - p(y | x)
    np.testing.assert_array_equal(r.sets, expected)
    assert r.covers(y[te]).mean() >= 0.9  # exchangeable rows: coverage near 1 - alpha = 0.95
    assert all(isinstance(s, list) for s in r.as_lists())
