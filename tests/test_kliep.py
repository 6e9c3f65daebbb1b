"""KLRatio (KLIEP) against outside references: analytic Gaussian ratios, scipy.optimize, and
scikit-learn's bundled breast-cancer data with a known selection mechanism."""

import pickle

import numpy as np
import pytest
from scipy import optimize, stats
from sklearn.datasets import load_breast_cancer

import shiftweight as sw


def nmse(w_est, w_true):
    """Normalised mean squared error of two weight vectors, each rescaled to sum to 1, times n."""
    a = w_est / w_est.sum()
    b = w_true / w_true.sum()
    return float(len(a) * np.sum((a - b) ** 2))


def gaussian_1d(n, seed):
    # Source N(1, 0.5^2), target N(2, 0.25^2): a toy from the covariate-shift literature (from memory).
    rng = np.random.default_rng(seed)
    return rng.normal(1.0, 0.5, (n, 1)), rng.normal(2.0, 0.25, (n, 1))


def true_ratio_1d(x):
    # reference: scipy.stats.norm.pdf (analytic ratio of the two normal densities)
    return stats.norm.pdf(x[:, 0], 2.0, 0.25) / stats.norm.pdf(x[:, 0], 1.0, 0.5)


# Without the one-standard-error width rule (se_margin=0) this case picks median/8 at n = 1000 and
# gives NMSE 2,598 (measured); see test_one_standard_error_rule_picks_widest_within_margin.
def test_gaussian_1d_nmse_small_and_falls_with_n():
    held_out = np.random.default_rng(99).normal(1.0, 0.5, (3000, 1))
    truth = true_ratio_1d(held_out)
    errs = []
    for n in (100, 1000):
        s, t = gaussian_1d(n, seed=n)
        est = sw.KLRatio(n_basis=100).fit(s, t)
        errs.append(nmse(est.ratio(held_out), truth))
    assert errs[1] < errs[0], errs
    assert errs[1] < 0.3, errs


def test_one_standard_error_rule_picks_widest_within_margin():
    # The rule (Breiman, Friedman, Olshen, Stone 1984, section 3.4.3; Hastie, Tibshirani,
    # Friedman 2009, section 7.10) recomputed here from the reported per-width table.
    s, t = gaussian_1d(300, seed=300)
    chosen = {}
    for margin in (0.0, 1.0):
        est = sw.KLRatio(n_basis=50, se_margin=margin).fit(s, t)
        rows = est.cv_scores_
        best = min(rows, key=lambda r: r["score"])
        limit = best["score"] + margin * best["std_error"]
        expected = max(r["sigma"] for r in rows if r["score"] <= limit)
        assert est.sigma_ == expected, (margin, rows)
        chosen[margin] = est.sigma_
    assert chosen[0.0] <= chosen[1.0]
    with pytest.raises(sw.ShiftweightError, match="se_margin"):
        sw.KLRatio(se_margin=-1.0).fit(s, t)


@pytest.mark.study  # 24 KLIEP fits with 5-fold CV: a long study, run by `make study`
def test_gaussian_5d_mean_shift_nmse_small_and_falls_with_n():
    # Source N(0, I_5), target N(mu, I_5), mu = (0.5, 0, 0, 0, 0): log-ratio mu'x - |mu|^2/2 (analytic).
    # NMSE is a random quantity whose spread over draws (sd 0.06 at n = 200) is larger than the fall
    # from n = 200 to 1,500 (about 0.06), so one draw per size cannot show the fall: one draw with
    # seed n at 100 basis functions gave 0.097 at 200 and 0.101 at 1,500 (another NMSE scale). The
    # claim is about the expected NMSE, so the test compares means over 12 seeded draws per size.
    # Measured with these seeds and this file's nmse: mean 0.155 (sd 0.062) at n = 200, 0.098
    # (sd 0.015) at 1,500; uniform weights 0.264. On 16 other seeds, in the units of
    # tests/_shift_cases.py's nmse (uniform 0.209): 0.110, 0.078 and 0.073 at n = 200, 1,500 and
    # 4,000. The fall levels off: the bias of a positive Gaussian-sum model for an exp-linear ratio.
    d = 5
    mu = np.zeros(d)
    mu[0] = 0.5
    held_out = np.random.default_rng(7).normal(0, 1, (3000, d))
    # reference: scipy.stats.multivariate_normal.pdf
    truth = stats.multivariate_normal.pdf(held_out, mu) / stats.multivariate_normal.pdf(held_out, np.zeros(d))
    uniform = nmse(np.ones(len(held_out)), truth)
    errs = []
    for n in (200, 1500):
        per_draw = []
        for seed in range(12):
            rng = np.random.default_rng([n, seed])
            s, t = rng.normal(0, 1, (n, d)), rng.normal(0, 1, (n, d)) + mu
            per_draw.append(nmse(sw.KLRatio().fit(s, t).ratio(held_out), truth))
        errs.append(float(np.mean(per_draw)))
    assert errs[1] < errs[0], errs
    assert errs[1] < 0.5 * uniform, (errs, uniform)


def test_constraint_holds_and_matches_independent_scipy_solve():
    s, t = gaussian_1d(60, seed=3)
    est = sw.KLRatio(sigma=0.5, n_basis=8).fit(s, t)
    # The normalisation constraint: mean source weight = 1 on the fitted rows (Sugiyama et al. 2008).
    assert abs(est.source_weights_.mean() - 1.0) < 1e-9
    # Independent solve of the same problem with scipy.optimize.minimize(method="SLSQP").
    centres = np.asarray(
        __import__("json").loads(est.to_json())["model"]["form"]["centres"]["data"]
    ).reshape(-1, 1)
    mean = np.concatenate([s, t]).mean(0)
    sd = np.concatenate([s, t]).std(0, ddof=1)
    zs, zt = (s - mean) / sd, (t - mean) / sd
    def k(a, c):
        return np.exp(-((a - c.T) ** 2) / (2 * 0.5**2))
    kt, ks = k(zt, centres), k(zs, centres)
    h = ks.mean(0)
    def obj(a):
        return -np.mean(np.log(kt @ a))
    res = optimize.minimize(
        obj,
        np.full(len(h), 1.0 / h.sum()),
        method="SLSQP",
        bounds=[(0, None)] * len(h),
        constraints=[{"type": "eq", "fun": lambda a: h @ a - 1.0}],
        options={"ftol": 1e-12, "maxiter": 1000},
    )
    assert res.success
    assert abs(est.objective_ - (-res.fun)) < 1e-5, (est.objective_, -res.fun)
    # reference: scipy solution evaluated on our rows gives the same weights (ratio is unique in
    # value on the target rows for a strictly concave log; compare the target-row ratios).
    ours = est.ratio(t)
    theirs = kt @ res.x
    assert np.max(np.abs(ours - theirs)) < 1e-2 * np.max(theirs)


def _breast_cancer_selection(seed):
    # Zadrozny (2004) selection set-up on load_breast_cancer (Wolberg, Street, Mangasarian 1995):
    # target = random subsample; source = rows kept with known probability s(x).
    X, _ = load_breast_cancer(return_X_y=True)
    X = X[:, :5]
    rng = np.random.default_rng(seed)
    z = (X[:, 0] - X[:, 0].mean()) / X[:, 0].std()
    s_prob = 1.0 / (1.0 + np.exp(-(0.3 + 1.2 * z)))
    keep = rng.random(len(X)) < s_prob
    target = X[rng.random(len(X)) < 0.5]
    return X[keep], target, 1.0 / s_prob[keep]


def test_breast_cancer_weights_correlate_with_true_inverse_selection():
    src, tgt, w_true = _breast_cancer_selection(seed=1)
    est = sw.KLRatio(n_basis=100).fit(src, tgt)
    # reference: scipy.stats.spearmanr; true weights proportional to 1/s(x) (Zadrozny 2004)
    rho = stats.spearmanr(est.source_weights_, w_true).statistic
    assert rho > 0.5, rho


def test_cv_table_variants_pickle_and_json():
    s, t = gaussian_1d(150, seed=5)
    est = sw.KLRatio(n_basis=40).fit(s, t)
    assert len(est.cv_scores_) == 7
    best = min(est.cv_scores_, key=lambda r: r["score"])
    assert best["sigma"] == est.sigma_
    paper = sw.KLRatio(n_basis=40, cv="target_only").fit(s, t)
    assert "target rows" in paper.selection_["criterion"]
    again = pickle.loads(pickle.dumps(est))
    np.testing.assert_array_equal(again.ratio(s), est.ratio(s))
    loaded = sw.from_json(est.to_json())
    assert isinstance(loaded, sw.KLRatio)
    np.testing.assert_array_equal(loaded.ratio(t), est.ratio(t))
    with pytest.raises(sw.ShiftweightError, match="cv"):
        sw.KLRatio(cv="sideways").fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="folds"):
        sw.KLRatio(folds=1).fit(s, t)


def test_a_tolerance_below_floating_point_reach_ends_with_a_warning_not_max_iter():
    # With tol far below what f64 can certify, the solver must stop once the objective no longer
    # moves (not run on to max_iter) and say why. The gap bound it reports must still be a valid
    # bound, checked against an independent run of the EM update for mixture weights (Cover
    # 1984), whose objective is a lower bound of the maximum and whose own certified bound
    # log(max g) caps the maximum from above.
    rng = np.random.default_rng(0)
    s, t = rng.normal(0, 1, (300, 1)), rng.normal(0.5, 1, (300, 1))
    est = sw.KLRatio(sigma=1.0, tol=1e-300, max_iter=10_000).fit(s, t)
    chosen = est.selection_["chosen"]
    assert chosen["iterations"] < 100, chosen
    assert chosen["gap_bound"] > 0.0
    assert any("floating-point precision" in w for w in est.warnings_), est.warnings_
    doc = __import__("json").loads(est.to_json())["model"]
    centres = np.asarray(doc["form"]["centres"]["data"]).reshape(-1, 1)
    mean = np.concatenate([s, t]).mean(0)
    sd = np.concatenate([s, t]).std(0, ddof=1)
    zs, zt = (s - mean) / sd, (t - mean) / sd
    def k(a):
        return np.exp(-((a - centres.T) ** 2) / 2.0)
    kt, h = k(zt), k(zs).mean(0)
    m = kt / h  # columns scaled so that p = h * alpha lies on the simplex
    p = np.full(len(h), 1.0 / len(h))
    for _ in range(20_000):
        u = m @ p
        g = m.T @ (1.0 / u) / len(u)
        p *= g
    u = m @ p
    g = m.T @ (1.0 / u) / len(u)
    f_em, gap_em = np.mean(np.log(u)), np.log(g.max())
    f_sw = np.mean(np.log(kt @ np.asarray(doc["form"]["coef"])))
    # f_em <= max <= f_sw + gap_sw and f_sw <= max <= f_em + gap_em.
    assert f_em <= f_sw + chosen["gap_bound"] + 1e-12, (f_em, f_sw, chosen["gap_bound"])
    assert f_sw <= f_em + gap_em + 1e-12, (f_em, f_sw, gap_em)
    assert gap_em > chosen["gap_bound"]  # 20,000 EM steps certify less than the solver did
