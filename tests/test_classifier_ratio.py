"""ClassifierRatio and ratio_from_probabilities through the Python door."""

import json
import pickle

import numpy as np
import pytest
from scipy import stats

import shiftweight as sw
from _shift_cases import breast_cancer_selection, gaussian_1d, gaussian_mean_shift, nmse


def _mean_nmse(make_case, est, n, seeds=(1, 2, 3)):
    out = []
    for seed in seeds:
        s, t, e, truth = make_case(n, seed)
        out.append(nmse(est.fit(s, t).ratio(e), truth))
    return float(np.mean(out))


def test_gaussian_1d_nmse_small_and_shrinks_with_n():
    # reference: analytic ratio of N(2, 0.25^2) over N(1, 0.5^2) (scipy.stats.norm.pdf); the
    # log-ratio is quadratic, so the quadratic feature map contains it. The penalty is chosen from
    # the data: at n = 200 the fixed default l2 = 1 shrinks the (negative) curvature enough for
    # the weights to blow up in the source tail (NMSE about 1 here, measured).
    est = sw.ClassifierRatio(features="quadratic", l2=None)
    small, large = _mean_nmse(gaussian_1d, est, 200), _mean_nmse(gaussian_1d, est, 2000)
    _, _, e, truth = gaussian_1d(200, 1)
    uniform = nmse(np.ones(len(e)), truth)
    assert large < 0.1, (small, large)
    assert large < small, (small, large)
    assert small < uniform, (small, uniform)


def test_gaussian_5d_mean_shift_nmse_small_and_shrinks_with_n():
    # reference: analytic ratio of N(mu, I) over N(0, I) (scipy.stats.multivariate_normal); the
    # log-ratio is linear, so the linear feature map contains it.
    est = sw.ClassifierRatio(features="linear")
    small, large = _mean_nmse(gaussian_mean_shift, est, 200), _mean_nmse(gaussian_mean_shift, est, 2000)
    _, _, e, truth = gaussian_mean_shift(200, 1)
    assert large < 0.05, (small, large)
    assert large < small, (small, large)
    assert small < nmse(np.ones(len(e)), truth)


def test_quadratic_features_recover_exact_gaussian_log_ratio():
    # reference: analytic log-ratio of N(2, 0.25^2) over N(1, 0.5^2):
    # ln 2 - (x - 2)^2 / 0.125 + (x - 1)^2 / 0.5 = -6 x^2 + 28 x - 30 + ln 2 (worked by hand from
    # the normal density; checked numerically against scipy.stats.norm.logpdf below).
    s, t, _, _ = gaussian_1d(5000, 11)
    est = sw.ClassifierRatio(features="quadratic", l2=1e-3).fit(s, t)
    x = np.linspace(1.6, 2.4, 9)
    logw = np.log(est.ratio(x[:, None]))
    truth = stats.norm.logpdf(x, 2.0, 0.25) - stats.norm.logpdf(x, 1.0, 0.5)
    np.testing.assert_allclose(np.polyfit(x, truth, 2), [-6.0, 28.0, -30.0 + np.log(2.0)], rtol=1e-9)
    coef = np.polyfit(x, logw, 2)  # exact: the fitted log-ratio is a quadratic in x
    np.testing.assert_allclose(coef[0], -6.0, rtol=0.1)
    assert np.max(np.abs(logw - truth)) < 0.15, np.abs(logw - truth)


def _pooled_standardised(s, t):
    pooled = np.vstack([s, t])
    return (pooled - pooled.mean(0)) / pooled.std(0, ddof=1), np.r_[np.zeros(len(s)), np.ones(len(t))]


@pytest.mark.parametrize("features", ["linear", "quadratic"])
def test_logistic_fit_matches_scikit_learn(features):
    # reference: sklearn.linear_model.LogisticRegression(C=1/l2) on the pooled-standardised rows
    # (the objective sum logloss + l2/2 |beta|^2 with an unpenalised intercept).
    from sklearn.linear_model import LogisticRegression

    rng = np.random.default_rng(4)
    s = rng.normal(0.0, 1.0, (300, 3)) * [1.0, 2.0, 0.5] + [3.0, -1.0, 0.0]
    t = rng.normal(0.4, 1.2, (200, 3)) * [1.0, 2.0, 0.5] + [3.0, -1.0, 0.0]
    l2 = 2.0
    est = sw.ClassifierRatio(l2=l2, features=features).fit(s, t)
    z, y = _pooled_standardised(s, t)
    if features == "quadratic":
        d = z.shape[1]
        z = np.hstack([z] + [z[:, [j]] * z[:, [k]] for j in range(d) for k in range(j, d)])
    ref = LogisticRegression(C=1.0 / l2, solver="newton-cholesky", tol=1e-12, max_iter=1000).fit(z, y)
    np.testing.assert_allclose(est.coef_, ref.coef_[0], atol=1e-5)
    assert abs(est.intercept_ - ref.intercept_[0]) < 1e-5
    # ratio(X) = P(t|x)/P(s|x) * n_s/n_t with the all-rows classifier (Bickel et al. 2009).
    p = ref.predict_proba(z[:10])[:, 1]
    np.testing.assert_allclose(est.ratio(s[:10]), p / (1 - p) * 300 / 200, rtol=1e-4)
    assert est.log_prior_ratio_ == pytest.approx(np.log(300 / 200), rel=1e-15)


def test_breast_cancer_selection_weights_track_true_inverse_selection():
    # reference: Zadrozny (2004) selection bias on sklearn.datasets.load_breast_cancer (Wolberg,
    # Street, Mangasarian 1995): the true ratio is proportional to 1 / s(x);
    # scipy.stats.spearmanr / pearsonr for the correlations.
    # 134 source rows, 30 features: the penalty is chosen from the data (with the fixed default
    # l2 = 1 the fit overfits: Spearman 0.55, Pearson 0.09, largest weight about 2000, measured).
    s, t, inv_s = breast_cancer_selection(seed=0)
    est = sw.ClassifierRatio(l2=None).fit(s, t)
    rho = stats.spearmanr(est.source_weights_, inv_s).statistic
    r = stats.pearsonr(est.source_weights_, inv_s).statistic
    assert rho > 0.6 and r > 0.5, (rho, r)


def test_l2_chosen_by_out_of_fold_log_loss():
    s, t, _, _ = gaussian_1d(300, 5)
    est = sw.ClassifierRatio(l2=None, features="quadratic").fit(s, t)
    scores = {row["l2"]: row["score"] for row in est.cv_scores_}
    assert sorted(scores) == [0.01, 0.1, 1.0, 10.0, 100.0, 1000.0]
    assert est.l2_ == min(scores, key=scores.get)
    # Out-of-fold log-loss is below the constant guess -sum p log p (a fact of the log-loss).
    assert min(scores.values()) < np.log(2.0)


def test_source_weights_are_cross_fitted_not_from_the_all_rows_model():
    s, t, _, _ = gaussian_mean_shift(300, 6)
    est = sw.ClassifierRatio().fit(s, t)
    assert not np.array_equal(est.source_weights_, est.ratio(s))
    assert np.corrcoef(est.source_weights_, est.ratio(s))[0, 1] > 0.9


@pytest.mark.parametrize("features", ["linear", "quadratic", "fourier"])
def test_pickle_and_json_round_trips_are_bitwise(features):
    s, t, _, _ = gaussian_mean_shift(150, 7, d=3)
    est = sw.ClassifierRatio(features=features, n_fourier=30, seed=2).fit(s, t)
    x = np.random.default_rng(8).normal(size=(50, 3))
    w = est.ratio(x)
    for other in (pickle.loads(pickle.dumps(est)), sw.from_json(est.to_json())):
        assert isinstance(other, sw.ClassifierRatio)
        np.testing.assert_array_equal(other.ratio(x), w)
        np.testing.assert_array_equal(other.source_weights_, est.source_weights_)
        assert other.features_ == features
    assert pickle.loads(pickle.dumps(est)).get_params() == est.get_params()
    if features == "fourier":
        form = json.loads(est.to_json())["model"]["form"]
        assert form["map"]["frequencies"]["rows"] == 30 and len(form["map"]["offsets"]) == 30
        assert est.fourier_sigma_ > 0


def test_model_file_with_wrong_coefficient_count_is_rejected():
    s, t, _, _ = gaussian_mean_shift(100, 9, d=2)
    doc = json.loads(sw.ClassifierRatio(features="quadratic").fit(s, t).to_json())
    doc["model"]["form"]["coef"] = doc["model"]["form"]["coef"][:-1]
    with pytest.raises(sw.ModelFileError, match="coefficients"):
        sw.from_json(json.dumps(doc))


def test_bad_settings_and_inputs_raise_specific_errors():
    s, t, _, _ = gaussian_mean_shift(50, 10, d=2)
    with pytest.raises(sw.ShiftweightError, match="features"):
        sw.ClassifierRatio(features="cubic").fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="l2"):
        sw.ClassifierRatio(l2=-1.0).fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="folds"):
        sw.ClassifierRatio(folds=1).fit(s, t)
    with pytest.raises(sw.NotFittedError):
        sw.ClassifierRatio().ratio(s)
    bad = s.copy()
    bad[3, 1] = np.nan
    with pytest.raises(sw.ShiftweightError, match="row 3, column 1"):
        sw.ClassifierRatio().fit(bad, t)


def test_ratio_from_probabilities_matches_class_prior_formula():
    # reference: w = p / (1 - p) * n_source / n_target (Bickel et al. 2009; common practice),
    # with out-of-fold probabilities from sklearn.model_selection.cross_val_predict.
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import cross_val_predict

    s, t, _, _ = gaussian_mean_shift(300, 12, d=3)
    X, y = np.vstack([s, t[:150]]), np.r_[np.zeros(300), np.ones(150)]
    p = cross_val_predict(LogisticRegression(), X, y, cv=5, method="predict_proba")[:, 1]
    w = sw.ratio_from_probabilities(p[:300], n_source=300, n_target=150)
    np.testing.assert_allclose(w, p[:300] / (1 - p[:300]) * 2.0, rtol=1e-12)


def test_ratio_from_probabilities_errors_and_clipping_warning():
    with pytest.raises(sw.ShiftweightError, match="entry 2"):
        sw.ratio_from_probabilities([0.2, 0.5, 1.0], 10, 10)
    for bad in (0.0, -0.1, 1.5, np.nan, np.inf):
        with pytest.raises(sw.ShiftweightError, match="entry 1"):
            sw.ratio_from_probabilities([0.2, bad], 10, 10)
    for n in (0, -3, 2.5):
        with pytest.raises(sw.ShiftweightError, match="n_source"):
            sw.ratio_from_probabilities([0.2], n, 10)
    with pytest.warns(UserWarning, match="2 of 4 probabilities"):
        w = sw.ratio_from_probabilities([1e-9, 0.5, 1 - 1e-9, 0.3], 10, 10, clip=1e-6)
    np.testing.assert_allclose(w[[0, 2]], [1e-6 / (1 - 1e-6), (1 - 1e-6) / 1e-6])
