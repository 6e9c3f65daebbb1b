"""KernelMeanMatching (KMM) against outside references: an independent scipy.optimize solve of the
same quadratic program, analytic Gaussian ratios, and scikit-learn's bundled breast-cancer data."""

import json
import pickle

import numpy as np
import pytest
from scipy import optimize, stats
from sklearn.datasets import load_breast_cancer

import shiftweight as sw
from _shift_cases import nmse as shared_nmse


def nmse(w_est, w_true):
    """Normalised mean squared error of two weight vectors, each rescaled to sum to 1, times n."""
    a = w_est / w_est.sum()
    b = w_true / w_true.sum()
    return float(len(a) * np.sum((a - b) ** 2))


def gaussian_1d(n, m, seed):
    # Source N(1, 0.5^2), target N(2, 0.25^2): a toy from the covariate-shift literature (from memory).
    rng = np.random.default_rng(seed)
    return rng.normal(1.0, 0.5, (n, 1)), rng.normal(2.0, 0.25, (m, 1))


def pooled_standardised(s, t):
    """Both samples standardised with the mean and sd (ddof 1) of the pooled rows, in numpy."""
    pooled = np.concatenate([s, t])
    mean, sd = pooled.mean(0), pooled.std(0, ddof=1)
    return (s - mean) / sd, (t - mean) / sd


def gauss_kernel(a, b, sigma):
    return np.exp(-((a[:, None, :] - b[None, :, :]) ** 2).sum(-1) / (2 * sigma**2))


def kmm_problem(s, t, sigma, ridge=0.0):
    """K (+ ridge * sqrt(n) I) and kappa of the KMM QP (Huang et al. 2007) on pooled-standardised
    rows, in numpy."""
    zs, zt = pooled_standardised(s, t)
    K = gauss_kernel(zs, zs, sigma)
    kappa = len(s) / len(t) * gauss_kernel(zs, zt, sigma).sum(1)
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
    def f(b):
        return 0.5 * b @ K @ b - kappa @ b
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
    def f(b):
        return 0.5 * b @ K @ b - kappa @ b
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


# History of the default's choice of (sigma, ridge) on this pair. Until 2026-12-03 it was a held-out
# matching score (KMM solved on target folds, scored by the squared MMD to the held-out fold). With
# it the default's error did not fall reliably with n: over 48 seeds, means 0.163 (sd 0.324) at
# n = 100 and 0.102 (sd 0.125) at n = 400, with means of 12-seed groups overlapping (0.094 to 0.248
# against 0.062 to 0.147); on another 24 seeds the medians were 0.076 and 0.070. The cause: it
# chose the smallest ridge of the grid in 30 of 30 fits, because closer matching of the same source
# rows always scores better, and at small widths that gives weights far off the truth. With the
# setting held fixed the QP's error does fall (10 seeds, 1/2 median and ridge 0.1: means 0.106,
# 0.081, 0.043, 0.027 at n = 100, 200, 400, 800). The default now uses the discrepancy principle
# (Morozov 1966; module docs of ratio::kmm): on the exploration's 24 seeds (default_rng([n, 5000+k]))
# it gave means 0.134 -> 0.070 against 0.150 -> 0.104 for the held-out score. The seeds below,
# default_rng([n, k]), were not used in that exploration. NMSE of tests/_shift_cases.py on the
# fitted rows; uniform weights score about 0.93.
@pytest.mark.parametrize(
    "grid",
    [
        # 12 seeds x 2 sizes x 12 candidate solves: a long study, run by `make study`
        pytest.param(None, marks=pytest.mark.study, id="default_choice"),
        pytest.param(((0.5,), (0.1,)), id="fixed_half_median_ridge_0.1"),
        pytest.param(((1.0,), (0.01,)), id="fixed_median_ridge_0.01"),
    ],
)
def test_gaussian_1d_mean_nmse_small_and_falls_with_n(grid):
    # One draw cannot show the fall (the per-draw sd is as large as the fall), so the claim is about
    # the mean over 12 seeded draws, as for KLIEP. The fixed settings are the best fixed grid points
    # of the exploration; for them a one-point grid means no selection runs.
    means, uniform = [], []
    for n in (100, 400):
        errs, unif = [], []
        for seed in range(12):
            s, t = gaussian_1d(n, n, seed=[n, seed])
            # reference: scipy.stats.norm.pdf (analytic ratio of the two normal densities)
            truth = stats.norm.pdf(s[:, 0], 2.0, 0.25) / stats.norm.pdf(s[:, 0], 1.0, 0.5)
            if grid is None:
                est = sw.KernelMeanMatching().fit(s, t)
                assert len(est.cv_scores_) == 12  # 4 widths x 3 ridges were scored
            else:
                est = sw.KernelMeanMatching(sigma_multiples=grid[0], ridge_grid=grid[1]).fit(s, t)
                assert est.cv_scores_ == []  # one candidate: no selection ran
            errs.append(shared_nmse(est.source_weights_, truth))
            unif.append(shared_nmse(np.ones(n), truth))
        means.append(np.mean(errs))
        uniform.append(np.mean(unif))
    # Measured: for the fixed settings (2026-12-02) 0.101 -> 0.054 at (1/2, 0.1) and 0.079 -> 0.054
    # at (1, 0.01); for the default choice (2026-12-03) 0.157 -> 0.079; uniform weights 0.93.
    assert means[1] < means[0], (grid, means)
    # Small: an order of magnitude below uniform weights (our own bar, not a published one).
    assert means[1] < 0.1 * uniform[1], (grid, means, uniform)


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


def test_ridge_zero_is_the_unregularised_qp_and_selection_follows_the_discrepancy_rule():
    s, t = gaussian_1d(60, 50, seed=3)
    est = sw.KernelMeanMatching(ridge_grid=(0.0, 0.1), sigma_multiples=(0.5, 1.0)).fit(s, t)
    # Every (sigma, ridge) candidate was scored.
    pairs = {(round(r["sigma"] / est.median_distance_, 6), r["ridge"]) for r in est.cv_scores_}
    assert pairs == {(0.5, 0.0), (0.5, 0.1), (1.0, 0.0), (1.0, 0.1)}
    # Each row's squared MMD D and noise level N, recomputed in numpy from that candidate's weights
    # at the median-heuristic evaluation width (reference: numpy; the squared MMD of Gretton et al.
    # 2012, JMLR 13, with the target-target term as the U-statistic of Hoeffding 1948).
    n, m = len(s), len(t)
    K, kappa = kmm_problem(s, t, est.median_distance_)
    _, zt = pooled_standardised(s, t)
    ktt = gauss_kernel(zt, zt, est.median_distance_)
    u = (ktt.sum() - m) / (m * (m - 1))
    for row in est.cv_scores_:
        b = sw.KernelMeanMatching(sigma=row["sigma"], ridge=row["ridge"]).fit(s, t).source_weights_
        d = b @ K @ b / n**2 - 2 * b @ kappa / n**2 + u
        noise = (np.mean(b**2) - u) / n
        assert row["score"] == pytest.approx(d, rel=1e-6, abs=1e-9), (row, d)
        assert row["noise_level"] == pytest.approx(noise, rel=1e-6, abs=1e-9), (row, noise)
    # The rule: the largest ridge, then the widest width, with D <= N; else the smallest D - N.
    within = [r for r in est.cv_scores_ if r["score"] <= r["noise_level"]]
    if within:
        pick = max(within, key=lambda r: (r["ridge"], r["sigma"]))
    else:
        pick = min(est.cv_scores_, key=lambda r: r["score"] - r["noise_level"])
    assert (pick["sigma"], pick["ridge"]) == (est.sigma_, est.ridge_)
    fixed = sw.KernelMeanMatching(sigma=est.sigma_, ridge=est.ridge_).fit(s, t)
    np.testing.assert_array_equal(fixed.source_weights_, est.source_weights_)
    assert fixed.cv_scores_ == []
    with pytest.raises(sw.ShiftweightError, match="ridge"):
        sw.KernelMeanMatching(ridge=-1.0).fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="ridge_grid"):
        sw.KernelMeanMatching(ridge_grid=()).fit(s, t)


def test_selection_says_when_no_candidate_reaches_its_noise_level():
    # With only very large ridges the weights shrink towards zero mass, so the squared MMD to the
    # target stays far above its noise level: the fallback (smallest excess) is used and said.
    s, t = gaussian_1d(80, 60, seed=9)
    est = sw.KernelMeanMatching(sigma_multiples=(1.0,), ridge_grid=(100.0, 1000.0)).fit(s, t)
    assert all(r["score"] > r["noise_level"] for r in est.cv_scores_)
    assert any("noise level" in w for w in est.warnings_), est.warnings_
    pick = min(est.cv_scores_, key=lambda r: r["score"] - r["noise_level"])
    assert pick["ridge"] == est.ridge_
    # The default grid on the same data reaches it, and says nothing of the kind.
    default = sw.KernelMeanMatching().fit(s, t)
    assert not any("noise level" in w for w in default.warnings_), default.warnings_
