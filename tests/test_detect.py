"""Shift detection: shift_test (classifier, MMD) and feature_shift, checked against scipy, numpy,
hand-worked examples and the binomial distribution of rejections under the null."""

import json
import pickle

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import cdist, pdist

import shiftweight as sw
from shiftweight import _native


def _gauss(rng, n, d, shift=0.0, col=0):
    x = rng.normal(0.0, 1.0, (n, d))
    x[:, col] += shift
    return x


# ---------------------------------------------------------------- Kolmogorov-Smirnov


@pytest.mark.parametrize("n1,n2,seed", [(7, 7, 0), (12, 30, 1), (40, 25, 2), (200, 150, 3), (600, 600, 4)])
def test_ks_matches_scipy_exact(n1, n2, seed):
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 1, n1)
    b = rng.normal(0.4, 1, n2)
    d, p, mode = _native.ks_two_sample(a, b, "auto")
    ref = stats.ks_2samp(a, b, method="exact")  # reference: scipy.stats.ks_2samp
    assert mode == "exact"
    assert d == pytest.approx(ref.statistic, abs=1e-15)
    assert p == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    # The default "auto" choice of scipy is the exact distribution at these sizes too.
    assert p == pytest.approx(stats.ks_2samp(a, b).pvalue, rel=1e-9, abs=1e-300)


def test_ks_matches_scipy_with_ties():
    rng = np.random.default_rng(5)
    a = rng.integers(0, 15, 60).astype(float)
    b = rng.integers(2, 17, 45).astype(float)
    d, p, _ = _native.ks_two_sample(a, b, "exact")
    ref = stats.ks_2samp(a, b, method="exact")  # reference: scipy.stats.ks_2samp
    assert d == pytest.approx(ref.statistic, abs=1e-15)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)


# Grid of (n, x) for the one-sample Kolmogorov distribution: every region of Simard & L'Ecuyer
# (2011): n x <= 1 and n x >= n - 1 (Ruben-Gambino), x >= 1/2, Durbin's matrix, Pomeranz, the
# Pelz-Good series and Miller's one-sided tail, on both sides of n = 140 and n = 100,000.
KS_N = [1, 2, 3, 5, 10, 20, 50, 100, 140, 141, 200, 500, 1_000, 5_000, 10_000, 50_000, 100_000, 100_001]
KS_Z = [0.3, 0.5, 0.6, 0.8, 0.9, 1.0, 1.1, 1.3, 1.5, 1.8, 2.0, 2.5, 3.0, 4.0, 5.0, 8.0, 13.0]


def _ks_grid(n):
    xs = {z / np.sqrt(n) for z in KS_Z}
    xs |= {0.6 / n, 0.9 / n, 1.0 / n, 1.5 / n, 0.3, 0.5, 0.55, 0.7, 0.95, 1 - 0.5 / n}
    return sorted(x for x in xs if 0 < x < 1)


@pytest.mark.parametrize("n", KS_N)
def test_kolmogorov_sf_matches_scipy_kstwo(n):
    # reference: scipy.stats.kstwo.sf (Simard & L'Ecuyer 2011), from p = 1 down to about 1e-300.
    for x in _ks_grid(n):
        ref = stats.kstwo.sf(x, n)
        got = _native.kolmogorov_sf(n, x)
        assert got == pytest.approx(ref, rel=1e-9, abs=1e-300), (n, x, got, ref)


def test_kolmogorov_sf_at_a_million_matches_scipy_kstwo():
    # As above at n = 10^6, on fewer points (scipy's exact one-sided tail takes seconds here):
    # Pelz-Good below n x^2 = 2.2, Miller's tail above, the exact x >= 1/2 branch.
    n = 1_000_000
    for x in [z / np.sqrt(n) for z in (0.5, 1.0, 1.4, 2.0)] + [0.55, 0.95]:
        ref = stats.kstwo.sf(x, n)  # reference: scipy.stats.kstwo.sf
        assert _native.kolmogorov_sf(n, x) == pytest.approx(ref, rel=1e-9, abs=1e-300), x


def test_kolmogorov_sf_beyond_a_million_is_the_smirnov_sum():
    # Above about n = 10^6 scipy.special.smirnov switches to an approximation (measured: at
    # x = 13 / sqrt(n) its value jumps by 1.3% between n = 1,000,000 and 1,013,000 while the exact
    # value moves by 0.02%), so the tail is checked against the exact positive sum of Birnbaum &
    # Tingey (1951), P(D_n^+ >= x) = sum_j x/p_j Binomial(j; n, p_j), p_j = x + j/n, written out
    # with scipy.stats.binom.logpmf. Two-sided: Miller (1956), P(D_n >= x) ~ 2 P(D_n^+ >= x).
    n = 2_000_000
    for z in (1.6, 4.0, 13.0):
        x = z / np.sqrt(n)
        t = n * x
        j = np.arange(0, int(np.floor(n - t)) + 1)
        logs = np.log(t) - np.log(t + j) + stats.binom.logpmf(j, n, (t + j) / n)  # reference: scipy.stats.binom
        top = logs.max()
        ref = 2 * np.exp(top + np.log(np.exp(logs - top).sum()))
        assert _native.kolmogorov_sf(n, x) == pytest.approx(ref, rel=1e-8)
    # Below n x^2 = 2.2 both use the Pelz-Good (1976) series: reference scipy.stats.kstwo.sf.
    for z in (0.5, 1.0, 1.4):
        x = z / np.sqrt(n)
        assert _native.kolmogorov_sf(n, x) == pytest.approx(stats.kstwo.sf(x, n), rel=1e-9)


def test_ks_asymptotic_mode_matches_scipy_asymp():
    # Above 10,000 rows per sample the p-value is P(D_e >= d) of the one-sample distribution at
    # e = round(n1 n2 / (n1 + n2)), as scipy's asymptotic method; from p ~ 0.5 down to ~ 1e-40.
    rng = np.random.default_rng(6)
    for shift in (0.0, 0.02, 0.05, 0.08, 0.2):
        a = rng.normal(0, 1, 12_000)
        b = rng.normal(shift, 1, 11_000)
        d, p, mode = _native.ks_two_sample(a, b, "auto")
        ref = stats.ks_2samp(a, b, method="asymp")  # reference: scipy.stats.ks_2samp
        assert mode == "asymptotic"
        assert d == pytest.approx(ref.statistic, abs=1e-15)
        assert p == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)


@pytest.mark.parametrize(
    "n1,n2,shift", [(8, 5, 1.0), (30, 45, 0.5), (7, 3_000, 0.8), (400, 350, 0.3), (2_000, 900, 2.0)]
)
def test_ks_asymptotic_mode_small_effective_n_matches_scipy(n1, n2, shift):
    rng = np.random.default_rng(n1 + n2)
    a = rng.normal(0, 1, n1)
    b = rng.normal(shift, 1, n2)
    d, p, mode = _native.ks_two_sample(a, b, "asymptotic")
    ref = stats.ks_2samp(a, b, method="asymp")  # reference: scipy.stats.ks_2samp
    assert mode == "asymptotic"
    assert d == pytest.approx(ref.statistic, abs=1e-15)
    assert p == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)


# ---------------------------------------------------------------- AUC / Mann-Whitney


def test_auc_equals_mann_whitney_u_over_n1n2():
    rng = np.random.default_rng(7)
    pos = np.round(rng.normal(0.5, 1, 83), 1)  # rounding creates ties
    neg = np.round(rng.normal(0.0, 1, 61), 1)
    auc, u, _se, lo, hi = _native.auc_summary(pos, neg)
    ref = stats.mannwhitneyu(pos, neg)  # reference: scipy.stats.mannwhitneyu
    assert u == pytest.approx(ref.statistic, abs=1e-9)
    assert auc == pytest.approx(ref.statistic / (83 * 61), abs=1e-12)
    assert lo <= auc <= hi


def test_auc_std_error_is_delong():
    # reference: DeLong, DeLong & Clarke-Pearson (1988), placement values computed directly with
    # numpy over all pairs: V10_i = mean_j psi(x_i, y_j), V01_j = mean_i psi(x_i, y_j).
    rng = np.random.default_rng(8)
    pos = np.round(rng.normal(0.7, 1, 40), 1)
    neg = np.round(rng.normal(0.0, 1, 55), 1)
    psi = (pos[:, None] > neg[None, :]) + 0.5 * (pos[:, None] == neg[None, :])
    v10, v01 = psi.mean(axis=1), psi.mean(axis=0)
    se_ref = np.sqrt(v10.var(ddof=1) / 40 + v01.var(ddof=1) / 55)
    auc, _, se, lo, hi = _native.auc_summary(pos, neg)
    assert auc == pytest.approx(psi.mean(), abs=1e-12)
    assert se == pytest.approx(se_ref, rel=1e-10)
    z = stats.norm.ppf(0.975)  # reference: scipy.stats.norm
    assert lo == pytest.approx(auc - z * se, rel=1e-9)
    assert hi == pytest.approx(min(1.0, auc + z * se), rel=1e-9)


def test_mann_whitney_normal_p_matches_scipy():
    rng = np.random.default_rng(9)
    pos = np.round(rng.normal(0.3, 1, 120), 1)
    neg = np.round(rng.normal(0.0, 1, 90), 1)
    u, p = _native.mann_whitney_greater(pos, neg)
    # reference: scipy.stats.mannwhitneyu (asymptotic, tie and continuity corrected)
    ref = stats.mannwhitneyu(pos, neg, alternative="greater", method="asymptotic")
    assert u == pytest.approx(ref.statistic)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)


# ---------------------------------------------------------------- chi-square


@pytest.mark.parametrize(
    "table",
    [
        [[10, 20], [20, 10]],  # 2 x 2: Yates' correction (scipy's default)
        [[3, 40], [9, 31]],  # 2 x 2 with a small cell
        [[12, 30, 8, 50], [20, 25, 15, 40]],  # 2 x 4: no correction
    ],
)
def test_chi_square_matches_scipy(table):
    t = np.asarray(table, dtype=float)
    stat, p, dof = _native.chi_square_two_rows(t[0], t[1])
    ref = stats.chi2_contingency(t)  # reference: scipy.stats.chi2_contingency (correction=True)
    assert stat == pytest.approx(ref.statistic, rel=1e-12)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)
    assert dof == ref.dof


# ---------------------------------------------------------------- Benjamini-Hochberg

# The fifteen p-values of the worked example of Benjamini & Hochberg (1995, section 4; from memory).
BH_EXAMPLE = [
    0.0001,
    0.0004,
    0.0019,
    0.0095,
    0.0201,
    0.0278,
    0.0298,
    0.0344,
    0.0459,
    0.3240,
    0.4262,
    0.5719,
    0.6528,
    0.7590,
    1.0000,
]


def test_bh_hand_worked_example():
    adj = np.asarray(_native.benjamini_hochberg(np.asarray(BH_EXAMPLE)))
    # Worked by hand with the step-up rule of Benjamini & Hochberg (1995): m p_(k) / k, then the
    # running minimum from the largest p down.
    m = 15
    raw = [m * p / (k + 1) for k, p in enumerate(BH_EXAMPLE)]
    by_hand = [
        0.0015,
        0.003,
        0.0095,
        0.035625,
        0.0603,
        raw[6],
        raw[6],
        0.0645,
        0.0765,
        0.486,
        raw[10],
        raw[11],
        raw[12],
        raw[13],
        1.0,
    ]
    np.testing.assert_allclose(adj, by_hand, rtol=1e-12)
    assert int((adj <= 0.05).sum()) == 4  # the paper rejects four hypotheses at q = 0.05


def test_bh_matches_scipy_false_discovery_control():
    if not hasattr(stats, "false_discovery_control"):
        pytest.skip("scipy < 1.11 has no false_discovery_control")
    rng = np.random.default_rng(10)
    p = np.concatenate([rng.uniform(0, 1, 40), rng.uniform(0, 1e-3, 10)])
    rng.shuffle(p)
    adj = _native.benjamini_hochberg(p)
    ref = stats.false_discovery_control(p, method="bh")  # reference: scipy.stats.false_discovery_control
    np.testing.assert_allclose(adj, ref, rtol=1e-12)


# ---------------------------------------------------------------- MMD^2


def test_mmd2_equals_direct_numpy_formula():
    rng = np.random.default_rng(11)
    src = _gauss(rng, 9, 3)
    tgt = _gauss(rng, 6, 3, shift=0.8)
    res = sw.shift_test(src, tgt, method="mmd", sigma=1.3, permutations=19)
    # reference: Gretton et al. (2012), eq. 3, written out with numpy on features standardised
    # on the pooled rows (sample sd, ddof = 1).
    pooled = np.vstack([src, tgt])
    z = (pooled - pooled.mean(0)) / pooled.std(0, ddof=1)
    k = np.exp(-cdist(z, z, "sqeuclidean") / (2 * 1.3**2))
    m, n = 9, 6
    kxx, kyy, kxy = k[:m, :m], k[m:, m:], k[:m, m:]
    direct = (kxx.sum() - np.trace(kxx)) / (m * (m - 1)) + (kyy.sum() - np.trace(kyy)) / (n * (n - 1)) - 2 * kxy.mean()
    assert res.mmd2 == pytest.approx(direct, rel=1e-10)
    assert res.statistic == res.mmd2
    assert res.estimator == "quadratic"
    # Median heuristic: the median of the pairwise distances of the standardised pooled rows
    # (15 rows, 105 pairs: an odd count, so the median is one distance).
    auto = sw.shift_test(src, tgt, method="mmd", permutations=19)
    assert auto.sigma == pytest.approx(np.median(pdist(z)), rel=1e-12)  # reference: numpy.median


# ---------------------------------------------------------------- calibration under the null


def _binomial_99(reps, alpha=0.05):
    lo, hi = stats.binom.interval(0.99, reps, alpha)  # reference: scipy.stats.binom
    return lo, hi


@pytest.mark.parametrize(
    "method,kwargs,n,reps",
    [
        ("classifier", {}, 30, 200),  # permutation test with refits
        ("classifier", {"max_permutation_rows": 0}, 100, 300),  # held-out split, normal U
        ("mmd", {}, 30, 300),  # permutation test on the kernel matrix
        # block estimator (16 blocks of 50 rows), rows relabelled within blocks. Student's t on the
        # studentised block mean gave 4 of 300 here (below the interval): see the mmd module docs.
        ("mmd", {"max_kernel_rows": 0}, 400, 300),
    ],
)
def test_false_alarm_rate_is_nominal(method, kwargs, n, reps):
    # Same distribution on both sides: P(p <= 0.05) must be 0.05 (B = 39 permutations make the
    # permutation p-value's level exactly 2/40 = 0.05). Rejections ~ Binomial(reps, 0.05).
    rejections = 0
    for r in range(reps):
        rng = np.random.default_rng(1000 + r)
        src, tgt = _gauss(rng, n, 2), _gauss(rng, n, 2)
        res = sw.shift_test(src, tgt, method=method, permutations=39, seed=r, **kwargs)
        rejections += res.p_value <= 0.05
    lo, hi = _binomial_99(reps)
    assert lo <= rejections <= hi, (rejections, lo, hi)


# ---------------------------------------------------------------- power


def test_half_sd_shift_in_one_of_five_features_is_found():
    # A 0.5-sd mean shift of feature 2 of 5, n = 500 per side: both tests reject in almost all
    # replicates (here at least 9 of 10) and feature_shift puts feature 2 first every time.
    reps = 10
    found = {"classifier": 0, "mmd": 0, "mmd_block": 0}
    for r in range(reps):
        rng = np.random.default_rng(2000 + r)
        src, tgt = _gauss(rng, 500, 5), _gauss(rng, 500, 5, shift=0.5, col=2)
        for method in ("classifier", "mmd"):
            found[method] += sw.shift_test(src, tgt, method=method, permutations=39, seed=r).p_value <= 0.05
        # The block MMD estimator (20 blocks of 50 rows) keeps its power here too.
        found["mmd_block"] += (
            sw.shift_test(src, tgt, method="mmd", max_kernel_rows=0, permutations=39, seed=r).p_value <= 0.05
        )
        table = sw.feature_shift(src, tgt, seed=r, repeats=2)
        assert table.features[0] == "2"
        assert table[0]["auc_drop"] == max(row["auc_drop"] for row in table.rows)
    assert found["classifier"] >= 9 and found["mmd"] >= 9 and found["mmd_block"] >= 9, found


# ---------------------------------------------------------------- feature_shift table


def test_feature_shift_rows_agree_with_scipy_and_numpy():
    pd = pytest.importorskip("pandas")
    rng = np.random.default_rng(12)
    n_s, n_t = 150, 120
    src = pd.DataFrame(
        {
            "temperature": rng.normal(12, 4, n_s),
            "heating": (rng.uniform(size=n_s) < 0.3).astype(float),
            "occupants": rng.integers(1, 6, n_s).astype(float),
        }
    )
    tgt = pd.DataFrame(
        {
            "temperature": rng.normal(8, 4, n_t),
            "heating": (rng.uniform(size=n_t) < 0.6).astype(float),
            "occupants": rng.integers(1, 6, n_t).astype(float),
        }
    )
    table = sw.feature_shift(src, tgt)
    frame = table.to_pandas()
    assert list(frame["feature"])[:2] == ["temperature", "heating"]
    assert set(frame["feature"]) == {"temperature", "heating", "occupants"}
    assert list(frame["p_value"]) == sorted(frame["p_value"])
    by = {r["feature"]: r for r in table.rows}
    a, b = src["temperature"].to_numpy(), tgt["temperature"].to_numpy()
    ks = stats.ks_2samp(a, b)  # reference: scipy.stats.ks_2samp
    assert by["temperature"]["test"] == "ks"
    assert by["temperature"]["statistic"] == pytest.approx(ks.statistic, abs=1e-15)
    assert by["temperature"]["p_value"] == pytest.approx(ks.pvalue, rel=1e-9)
    sd = np.sqrt(((n_s - 1) * a.var(ddof=1) + (n_t - 1) * b.var(ddof=1)) / (n_s + n_t - 2))
    assert by["temperature"]["smd"] == pytest.approx((b.mean() - a.mean()) / sd, rel=1e-12)
    # reference: scipy.stats.wasserstein_distance
    assert by["temperature"]["wasserstein_sd"] == pytest.approx(stats.wasserstein_distance(a, b) / sd, rel=1e-10)
    for name in ("heating", "occupants"):
        counts = pd.crosstab(
            np.r_[np.zeros(n_s), np.ones(n_t)], np.r_[src[name].to_numpy(), tgt[name].to_numpy()]
        ).to_numpy()
        ref = stats.chi2_contingency(counts)  # reference: scipy.stats.chi2_contingency
        assert by[name]["test"] == "chi_square"
        assert by[name]["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
        assert by[name]["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
        assert by[name]["dof"] == ref.dof
    ps = [by[f]["p_value"] for f in ("temperature", "heating", "occupants")]
    if hasattr(stats, "false_discovery_control"):
        ref_adj = stats.false_discovery_control(ps)  # reference: scipy.stats.false_discovery_control
        got = [by[f]["p_adjusted"] for f in ("temperature", "heating", "occupants")]
        np.testing.assert_allclose(got, ref_adj, rtol=1e-12)


def test_feature_shift_is_seeded_and_serialises():
    rng = np.random.default_rng(13)
    src, tgt = _gauss(rng, 80, 3), _gauss(rng, 80, 3, shift=0.5, col=1)
    a = sw.feature_shift(src, tgt, feature_names=["x", "y", "z"], seed=4)
    b = sw.feature_shift(src, tgt, feature_names=["x", "y", "z"], seed=4)
    assert a.to_json() == b.to_json()
    again = sw.FeatureShiftTable.from_json(a.to_json())
    assert again.rows == a.rows
    assert pickle.loads(pickle.dumps(a)).rows == a.rows
    assert "FeatureShiftTable" in repr(a) and "<table>" in a._repr_html_()
    with pytest.raises(sw.ShiftweightError, match="feature_names"):
        sw.feature_shift(src, tgt, feature_names=["x"])


# ---------------------------------------------------------------- result objects and errors


def test_shift_test_result_object():
    rng = np.random.default_rng(14)
    src, tgt = _gauss(rng, 60, 2), _gauss(rng, 60, 2, shift=1.0)
    res = sw.shift_test(src, tgt, permutations=49, seed=3)
    assert res.method == "classifier" and res.p_value_method == "permutation"
    assert res.statistic == res.auc and res.auc_ci[0] <= res.auc <= res.auc_ci[1]
    assert res.p_value == pytest.approx(1 / 50)  # smallest attainable: (1 + 0) / (1 + 49)
    assert res.n_source == 60 and res.n_target == 60
    assert "shift test (classifier)" in repr(res)
    assert "<strong>" in res._repr_html_()
    assert res.to_dict()["details"]["kind"] == "classifier"
    assert sw.ShiftTestResult.from_json(res.to_json()) == res
    assert pickle.loads(pickle.dumps(res)) == res
    assert json.loads(res.to_json())["format"] == "shiftweight.shift-test"
    same = sw.shift_test(src, tgt, permutations=49, seed=3)
    assert same == res  # seeded
    big = sw.shift_test(src, tgt, method="mmd", max_kernel_rows=50, permutations=10)
    assert big.estimator == "block" and big.p_value_method == "block_permutation"
    assert big.permutations == 10 and big.p_value >= 1 / 11


def test_shift_test_errors_name_the_problem():
    rng = np.random.default_rng(15)
    src = _gauss(rng, 20, 2)
    with pytest.raises(sw.ShiftweightError, match="method"):
        sw.shift_test(src, src, method="kolmogorov")
    with pytest.raises(sw.ShiftweightError, match="target"):
        sw.shift_test(src, _gauss(rng, 20, 3))
    with pytest.raises(sw.ShiftweightError, match="permutations"):
        sw.shift_test(src, src, permutations=0)
    bad = src.copy()
    bad[3, 1] = np.nan
    with pytest.raises(sw.ShiftweightError, match="row 3, column 1"):
        sw.shift_test(bad, src, method="mmd")
