"""KernelMeanMatching (KMM) against outside references: an independent scipy.optimize solve of the
same quadratic program, analytic Gaussian ratios, and scikit-learn's bundled breast-cancer data."""

import json
import pickle
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats
from sklearn.datasets import load_breast_cancer

import shiftweight as sw

sys.path.insert(0, str(Path(__file__).parent))
from _shift_cases import nmse as shared_nmse  # noqa: E402


def nmse(w_est, w_true):
    """Normalised mean squared error of two weight vectors, each rescaled to sum to 1, times n."""
    a = w_est / w_est.sum()
    b = w_true / w_true.sum()
    return float(len(a) * np.sum((a - b) ** 2))


def gaussian_1d(n, m, seed):
    # Source N(1, 0.5^2), target N(2, 0.25^2): a toy from the covariate-shift literature (from memory).
    rng = np.random.default_rng(seed)
    return rng.normal(1.0, 0.5, (n, 1)), rng.normal(2.0, 0.25, (m, 1))


def kmm_problem(s, t, sigma, ridge=0.0):
    """K (+ ridge * sqrt(n) I) and kappa of the KMM QP (Huang et al. 2007) on pooled-standardised
    rows, in numpy."""
    pooled = np.concatenate([s, t])
    mean, sd = pooled.mean(0), pooled.std(0, ddof=1)
    zs, zt = (s - mean) / sd, (t - mean) / sd
    sq = lambda a, b: ((a[:, None, :] - b[None, :, :]) ** 2).sum(-1)
    K = np.exp(-sq(zs, zs) / (2 * sigma**2))
    kappa = len(s) / len(t) * np.exp(-sq(zs, zt) / (2 * sigma**2)).sum(1)
    return K + ridge * np.sqrt(len(s)) * np.eye(len(s)), kappa


@pytest.mark.parametrize("ridge", [0.0, None])  # 0: the paper's QP; None: the chosen ridge
def test_qp_solution_matches_independent_scipy_solve_and_constraints_hold(ridge):
    s, t = gaussian_1d(40, 30, seed=1)
    bound = 10.0
    est = sw.KernelMeanMatching(bound=bound, ridge=ridge).fit(s, t)
    beta = est.source_weights_
    n = len(s)
    eps = (np.sqrt(n) - 1) / np.sqrt(n)
    assert est.eps_ == pytest.approx(eps)
    K, kappa = kmm_problem(s, t, est.sigma_, est.ridge_)
    f = lambda b: 0.5 * b @ K @ b - kappa @ b
    # reference: scipy.optimize.minimize(method="SLSQP") on the same QP
    res = optimize.minimize(
        f,
        np.ones(n),
        jac=lambda b: K @ b - kappa,
        method="SLSQP",
        bounds=[(0, bound)] * n,
        constraints=[
            {"type": "ineq", "fun": lambda b: n * (1 + eps) - b.sum()},
            {"type": "ineq", "fun": lambda b: b.sum() - n * (1 - eps)},
        ],
        options={"ftol": 1e-12, "maxiter": 500},
    )
    assert res.success, res.message
    scale = abs(res.fun)
    assert abs(f(beta) - res.fun) <= 1e-6 * scale, (f(beta), res.fun)
    assert np.all(beta >= 0) and np.all(beta <= bound)
    assert abs(beta.sum() - n) <= n * eps + 1e-6


def test_binding_eps_constraint_matches_scipy():
    # A tight eps makes the sum constraint active; still the same optimum as SLSQP.
    s, t = gaussian_1d(30, 30, seed=2)
    est = sw.KernelMeanMatching(bound=50.0, eps=0.01).fit(s, t)
    beta, n = est.source_weights_, len(s)
    K, kappa = kmm_problem(s, t, est.sigma_, est.ridge_)
    f = lambda b: 0.5 * b @ K @ b - kappa @ b
    # reference: scipy.optimize.minimize(method="SLSQP")
    res = optimize.minimize(
        f, np.ones(n), jac=lambda b: K @ b - kappa, method="SLSQP", bounds=[(0, 50.0)] * n,
        constraints=[
            {"type": "ineq", "fun": lambda b: n * 1.01 - b.sum()},
            {"type": "ineq", "fun": lambda b: b.sum() - n * 0.99},
        ],
        options={"ftol": 1e-12, "maxiter": 500},
    )
    assert res.success, res.message
    assert abs(f(beta) - res.fun) <= 1e-6 * abs(res.fun)
    assert abs(beta.sum() - n) <= n * 0.01 + 1e-6


# Measured over 20 seeds per size (2026-12-02; NMSE as a fraction of uniform weights' NMSE on the
# same rows): with the held-out choice, medians 0.078, 0.034, 0.054, 0.056 at n = 100, 200, 400,
# 800 (800 runs as two seeded blocks of 400). Choosing per seed, with the truth, the best of a 3 x 3
# grid (sigma 1/4, 1/2, 1 x the median distance; ridge 0.01, 0.1, 1): medians 0.031, 0.025, 0.025,
# 0.035. Over a wider grid (12 other seeds, exact solves up to n = 800, NMSE of
# tests/_shift_cases.py, uniform 0.88 to 0.97; sigma 1/16 to 1 x median, ridge 1e-4 to 1, 5 x 5)
# the per-seed hindsight best had medians 0.013, 0.021, 0.009, 0.013 at n = 100, 200, 400, 800 (a
# minimum over 25 noisy settings flatters small n most); the held-out choice 0.124, 0.048, 0.030,
# 0.040. On 24 further seeds with the defaults the medians were 0.076 at n = 100 and 0.070 at 400
# (means 0.168 and 0.106, pulled by draws above 0.5).
# Later measurements (2026-12-02, NMSE of tests/_shift_cases.py on the fitted rows, uniform about
# 0.93) correct the reading that the plateau belongs to the estimator. With the setting held fixed
# the QP's error does fall with n: over 10 seeds, (1/2 median, ridge 0.1) gives means 0.106, 0.081,
# 0.043, 0.027 at n = 100, 200, 400, 800 and the per-seed best of a 4 x 4 grid 0.061, 0.055, 0.023,
# 0.015 (test_gaussian_1d_fixed_setting_mean_nmse_falls_with_n checks this on fresh seeds). What
# does not fall reliably is the default, whose setting the held-out matching error chooses: that
# error chose the smallest ridge of the grid, 0.01, in 30 of 30 fits at n = 100, 200, 400 (and on
# the one score table we printed, n = 400, ridge 0.01 scored lowest at every width): closer matching
# of the fitted source rows lowers it, while at small widths ridge 0.01 sometimes gives weights far
# off the truth (10 seeds, 1/4 median: mean 0.419, median 0.286 at n = 100). Over 48
# seeds the defaults gave means 0.163 (sd 0.324) at n = 100 and 0.102 (sd 0.125) at 400, medians
# 0.065 and 0.035, but means of groups of 12 seeds overlap (0.094 to 0.248 against 0.062 to 0.147),
# so a test on 12 draws could not state the fall honestly. Tried and not adopted: holding out source
# rows too and scoring them with the weights the QP's optimality conditions give a new row
# (beta(x) = clip((kappa(x) - sum_j k(x, x_j) beta_j + nu) / (c sqrt(n)), 0, B)); on 16 seeds the
# means were 0.110 and 0.076 at n = 100 and 400 against 0.258 and 0.080 for the defaults.
@pytest.mark.xfail(
    strict=True,
    reason="known open problem (measured 2026-12-02): the held-out matching error chooses the smallest "
    "ridge of the grid every time, and that choice sometimes gives weights far off the truth; on this "
    "draw NMSE is 0.006 at n = 100 but 0.065 at n = 400 (uniform 0.93). See the comment above.",
)
def test_gaussian_1d_nmse_small_and_falls_with_n():
    errs = []
    for n in (100, 400):
        s, t = gaussian_1d(n, n, seed=10 + n)
        # reference: scipy.stats.norm.pdf (analytic ratio of the two normal densities)
        truth = stats.norm.pdf(s[:, 0], 2.0, 0.25) / stats.norm.pdf(s[:, 0], 1.0, 0.5)
        errs.append(nmse(sw.KernelMeanMatching().fit(s, t).source_weights_, truth))
    assert errs[1] < errs[0], errs
    assert errs[1] < 0.5, errs


def test_gaussian_1d_fixed_setting_mean_nmse_falls_with_n():
    # With (sigma, ridge) fixed, the QP's weights converge: the mean NMSE over seeded draws falls
    # from n = 100 to n = 400. One draw cannot show it (the per-draw sd is as large as the fall),
    # so the claim is about the mean over 12 draws, as for KLIEP. The two settings are the best
    # fixed grid points of the exploration described above; the seeds below were not used there.
    for mult, ridge in [(0.5, 0.1), (1.0, 0.01)]:
        means, uniform = [], []
        for n in (100, 400):
            errs, unif = [], []
            for seed in range(12):
                s, t = gaussian_1d(n, n, seed=[n, seed])
                # reference: scipy.stats.norm.pdf (analytic ratio of the two normal densities)
                truth = stats.norm.pdf(s[:, 0], 2.0, 0.25) / stats.norm.pdf(s[:, 0], 1.0, 0.5)
                est = sw.KernelMeanMatching(sigma_multiples=(mult,), ridge_grid=(ridge,)).fit(s, t)
                assert est.cv_scores_ == []  # one candidate: no selection ran
                errs.append(shared_nmse(est.source_weights_, truth))
                unif.append(shared_nmse(np.ones(n), truth))
            means.append(np.mean(errs))
            uniform.append(np.mean(unif))
        # Measured at this commit: 0.101 -> 0.054 at (1/2, 0.1) and 0.079 -> 0.054 at (1, 0.01),
        # uniform weights 0.93.
        assert means[1] < means[0], (mult, ridge, means)
        # Small: an order of magnitude below uniform weights (our own bar, not a published one).
        assert means[1] < 0.1 * uniform[1], (mult, ridge, means, uniform)


# Without the ridge (ridge=0, the paper's QP) this case gives NMSE 4.25 against 0.27 for uniform
# weights (measured on this case before the ridge was added).
def test_gaussian_5d_mean_shift_beats_uniform():
    d, n = 5, 300
    mu = np.zeros(d)
    mu[0] = 0.5
    rng = np.random.default_rng(4)
    s, t = rng.normal(0, 1, (n, d)), rng.normal(0, 1, (n, d)) + mu
    # reference: scipy.stats.multivariate_normal.pdf (analytic ratio)
    truth = stats.multivariate_normal.pdf(s, mu) / stats.multivariate_normal.pdf(s, np.zeros(d))
    err = nmse(sw.KernelMeanMatching().fit(s, t).source_weights_, truth)
    assert err < nmse(np.ones(n), truth), err


def test_breast_cancer_weights_correlate_with_true_inverse_selection():
    # Zadrozny (2004) selection on load_breast_cancer (Wolberg, Street, Mangasarian 1995):
    # target = random subsample; source = rows kept with known probability s(x).
    X, _ = load_breast_cancer(return_X_y=True)
    X = X[:, :5]
    rng = np.random.default_rng(1)
    z = (X[:, 0] - X[:, 0].mean()) / X[:, 0].std()
    s_prob = 1.0 / (1.0 + np.exp(-(0.3 + 1.2 * z)))
    keep = rng.random(len(X)) < s_prob
    target = X[rng.random(len(X)) < 0.5]
    est = sw.KernelMeanMatching().fit(X[keep], target)
    # reference: scipy.stats.spearmanr; true weights proportional to 1/s(x) (Zadrozny 2004)
    rho = stats.spearmanr(est.source_weights_, 1.0 / s_prob[keep]).statistic
    assert rho > 0.5, rho


def test_blocked_solution_stays_close_to_exact():
    s, t = gaussian_1d(400, 300, seed=8)
    exact = sw.KernelMeanMatching(block_rows=400).fit(s, t)
    blocked = sw.KernelMeanMatching(block_rows=200).fit(s, t)
    assert exact.n_blocks_ == 1 and blocked.n_blocks_ == 2
    # reference: numpy.corrcoef; both estimate the same ratio (analytic, scipy.stats.norm.pdf)
    r = np.corrcoef(exact.source_weights_, blocked.source_weights_)[0, 1]
    assert r > 0.9, r
    truth = stats.norm.pdf(s[:, 0], 2.0, 0.25) / stats.norm.pdf(s[:, 0], 1.0, 0.5)
    assert nmse(blocked.source_weights_, truth) < 2.0 * nmse(exact.source_weights_, truth) + 0.05


def test_transductive_error_pickle_and_json():
    s, t = gaussian_1d(50, 50, seed=3)
    est = sw.KernelMeanMatching().fit(s, t)
    with pytest.raises(sw.UnsupportedOperationError, match="source_weights_"):
        est.ratio(s)
    again = pickle.loads(pickle.dumps(est))
    np.testing.assert_array_equal(again.source_weights_, est.source_weights_)
    loaded = sw.from_json(est.to_json())
    assert isinstance(loaded, sw.KernelMeanMatching)
    assert json.loads(est.to_json())["model"]["form"]["form"] == "source_only"
    with pytest.raises(sw.ShiftweightError, match="bound"):
        sw.KernelMeanMatching(bound=-1.0).fit(s, t)


def test_ridge_zero_is_the_unregularised_qp_and_selection_table_is_complete():
    s, t = gaussian_1d(60, 50, seed=3)
    est = sw.KernelMeanMatching(ridge_grid=(0.0, 0.1), sigma_multiples=(0.5, 1.0)).fit(s, t)
    # Every (sigma, ridge) candidate was scored; the chosen one has the lowest mean score.
    pairs = {(round(r["sigma"] / est.median_distance_, 6), r["ridge"]) for r in est.cv_scores_}
    assert pairs == {(0.5, 0.0), (0.5, 0.1), (1.0, 0.0), (1.0, 0.1)}
    best = min(est.cv_scores_, key=lambda r: r["score"])
    assert (best["sigma"], best["ridge"]) == (est.sigma_, est.ridge_)
    fixed = sw.KernelMeanMatching(sigma=est.sigma_, ridge=est.ridge_).fit(s, t)
    np.testing.assert_array_equal(fixed.source_weights_, est.source_weights_)
    assert fixed.cv_scores_ == []
    with pytest.raises(sw.ShiftweightError, match="ridge"):
        sw.KernelMeanMatching(ridge=-1.0).fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="ridge_grid"):
        sw.KernelMeanMatching(ridge_grid=()).fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="folds"):
        sw.KernelMeanMatching(folds=1).fit(s, t)
