"""Weighted logistic and ridge regression against scikit-learn, model files, and the
misspecified-regression toy under covariate shift."""

import pickle

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression, Ridge

import shiftweight as sw
from _shift_cases import sinc_regression_toy as toy


def _data(seed, n, d, binary):
    rng = np.random.default_rng(seed)
    scales = np.linspace(0.5, 20.0, d)
    X = rng.normal(size=(n, d)) * scales + np.linspace(-3, 50, d)
    z = (X - X.mean(0)) / X.std(0)
    eta = z @ rng.normal(size=d) * 0.8 + 0.3
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(int) if binary else eta + rng.normal(size=n)
    w = rng.exponential(size=n)
    return X, y, w


@pytest.mark.parametrize("seed,n,d,l2", [(0, 80, 1, 1.0), (1, 300, 4, 0.1), (2, 500, 8, 10.0), (3, 200, 3, 1e-3)])
def test_weighted_logistic_equals_sklearn(seed, n, d, l2):
    X, y, w = _data(seed, n, d, True)
    ours = sw.WeightedLogistic(l2=l2).fit(X, y, sample_weight=w)
    # reference: sklearn.linear_model.LogisticRegression(C=1/l2) with the same sample_weight
    ref = LogisticRegression(C=1.0 / l2, solver="newton-cholesky", tol=1e-12, max_iter=1000).fit(X, y, sample_weight=w)
    np.testing.assert_allclose(ours.coef_, ref.coef_, rtol=0, atol=1e-5)
    np.testing.assert_allclose(ours.intercept_, ref.intercept_, rtol=0, atol=1e-5)
    np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), rtol=0, atol=1e-6)


@pytest.mark.parametrize("seed,n,d,l2", [(0, 50, 1, 1.0), (1, 300, 5, 0.1), (2, 400, 8, 25.0), (3, 30, 3, 0.0)])
def test_weighted_ridge_equals_sklearn(seed, n, d, l2):
    X, y, w = _data(seed, n, d, False)
    ours = sw.WeightedRidge(l2=l2).fit(X, y, sample_weight=w)
    # reference: sklearn.linear_model.Ridge(alpha=l2) with the same sample_weight
    ref = Ridge(alpha=l2, solver="cholesky").fit(X, y, sample_weight=w)
    np.testing.assert_allclose(ours.coef_, ref.coef_, rtol=0, atol=1e-5)
    assert abs(ours.intercept_ - ref.intercept_) < 1e-5
    np.testing.assert_allclose(ours.predict(X), ref.predict(X), rtol=0, atol=1e-6 * np.abs(y).max())


def test_labels_keep_their_names_and_bad_labels_are_rejected():
    X, y, w = _data(4, 100, 2, True)
    labels = np.where(y == 1, "yes", "no")
    m = sw.WeightedLogistic().fit(X, labels, sample_weight=w)
    assert set(m.predict(X)) <= {"yes", "no"}
    with pytest.raises(sw.ShiftweightError, match="two classes"):
        sw.WeightedLogistic().fit(X, np.arange(100) % 3)
    with pytest.raises(sw.ShiftweightError, match="sample_weight"):
        sw.WeightedLogistic().fit(X, y, sample_weight=-w)


def test_pickle_and_json_round_trips():
    X, y, w = _data(5, 120, 3, True)
    clf = sw.WeightedLogistic(l2=0.5).fit(X, y, sample_weight=w)
    again = pickle.loads(pickle.dumps(clf))
    np.testing.assert_array_equal(again.predict_proba(X), clf.predict_proba(X))
    loaded = sw.linear_model_from_json(clf.to_json())
    assert isinstance(loaded, sw.WeightedLogistic) and loaded.l2 == 0.5
    np.testing.assert_array_equal(loaded.predict_proba(X), clf.predict_proba(X))
    Xr, yr, wr = _data(6, 60, 2, False)
    reg = sw.WeightedRidge(l2=2.0).fit(Xr, yr, sample_weight=wr)
    np.testing.assert_array_equal(sw.linear_model_from_json(reg.to_json()).predict(Xr), reg.predict(Xr))
    with pytest.raises(sw.ModelFileError):
        sw.linear_model_from_json(reg.to_json().replace("shiftweight.linear-model", "something.else"))


# The toy set-up of the covariate-shift literature (from memory): a straight line fitted to the
# curved function sinc(x), source inputs N(1, 0.5^2), target inputs N(2, 0.25^2).
def test_weighted_fit_has_lower_target_error_under_misspecification():
    gains = []
    for seed in range(10):
        xs, ys, ws, xt, yt, _ = toy(seed)
        plain = sw.WeightedRidge(l2=1e-6).fit(xs, ys)
        weighted = sw.WeightedRidge(l2=1e-6).fit(xs, ys, sample_weight=ws)
        gains.append(np.mean((yt - plain.predict(xt)) ** 2) - np.mean((yt - weighted.predict(xt)) ** 2))
    # Shimodaira (2000): under misspecification, weighting by the true ratio lowers target risk.
    assert np.mean(gains) > 0 and np.mean(np.array(gains) > 0) >= 0.8
