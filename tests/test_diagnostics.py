"""Weight diagnostics: ESS, Pareto k, diagnose, clipping trade-off, overlap check."""

import json
import math
import pickle

import numpy as np
import pytest
from scipy import stats

import shiftweight as sw


def kish(w):
    # reference: Kish (1965), (sum w)^2 / sum w^2, evaluated with numpy
    w = np.asarray(w, dtype=float)
    return w.sum() ** 2 / (w**2).sum()


# ---------------------------------------------------------------- effective sample size


def test_ess_equal_weights_give_n():
    # common practice: equal weights give the largest possible ESS, n
    assert sw.effective_sample_size(np.full(123, 0.7)) == pytest.approx(123.0, rel=1e-14)
    assert sw.effective_sample_size(np.full(123, 0.7), relative=True) == pytest.approx(1.0, rel=1e-14)


def test_ess_single_nonzero_weight_gives_one():
    w = np.zeros(50)
    w[17] = 3.5
    assert sw.effective_sample_size(w) == pytest.approx(1.0, rel=1e-15)  # Kish (1965)


def test_ess_worked_example_by_hand():
    # By hand: w = (1, 1, 2, 4): (8)^2 / (1 + 1 + 4 + 16) = 64 / 22 (Kish 1965 formula)
    assert sw.effective_sample_size([1, 1, 2, 4]) == pytest.approx(64 / 22, rel=1e-15)
    assert sw.effective_sample_size([1, 1, 2, 4], relative=True) == pytest.approx(16 / 22, rel=1e-15)


def test_ess_matches_numpy_on_random_weights():
    w = stats.lognorm.rvs(s=1.2, size=5000, random_state=1)
    assert sw.effective_sample_size(w) == pytest.approx(kish(w), rel=1e-12)


# ---------------------------------------------------------------- Pareto k


@pytest.mark.parametrize("xi", [0.2, 0.5, 0.8, 1.0])
def test_pareto_k_recovers_the_shape_of_genpareto_draws(xi):
    # reference: scipy.stats.genpareto with shape c = xi; the exceedances of a GPD over a threshold
    # are GPD with the same shape, so k estimates xi. n = 10,000 gives a tail of M = 300 rows.
    # Tolerance: 3 standard errors of the mean of 4 replicates, with the per-replicate standard error
    # (1 + xi) / sqrt(M) of the GPD shape estimate (asymptotic, Smith 1985; from memory).
    ks = [sw.pareto_k(stats.genpareto.rvs(c=xi, size=10_000, random_state=seed)) for seed in range(4)]
    tol = 3 * (1 + xi) / math.sqrt(300) / math.sqrt(len(ks))
    assert abs(np.mean(ks) - xi) < tol, (ks, tol)


def test_light_tailed_weights_have_small_k():
    # Lognormal with small sigma: all moments finite (tail shape 0; from memory) -> k < 0.5.
    w = stats.lognorm.rvs(s=0.25, size=10_000, random_state=2)
    assert sw.pareto_k(w) < 0.5
    assert sw.diagnose(w).verdict == "good"


def test_pareto_k_is_nan_when_it_cannot_be_estimated():
    assert math.isnan(sw.pareto_k([1.0, 2.0, 3.0]))
    assert math.isnan(sw.pareto_k(np.ones(500)))  # bounded tail


# ---------------------------------------------------------------- diagnose


def test_diagnose_against_numpy():
    w = stats.lognorm.rvs(s=1.5, size=20_001, random_state=3)
    w[:7] = 0.0
    d = sw.diagnose(w)
    assert d.n == w.size and d.n_zero == 7
    assert d.ess == pytest.approx(kish(w), rel=1e-12)
    assert d.ess_fraction == pytest.approx(kish(w) / w.size, rel=1e-12)
    for level, value in d.quantiles.items():
        assert value == pytest.approx(np.quantile(w, level), rel=1e-12)  # reference: numpy.quantile
    s = np.sort(w)[::-1]
    top = math.ceil(0.01 * w.size)
    assert d.top1_rows == top
    assert d.top1_share == pytest.approx(s[:top].sum() / w.sum(), rel=1e-12)
    need = int(np.searchsorted(np.cumsum(s), 0.5 * w.sum())) + 1  # reference: numpy cumsum
    assert abs(d.rows_for_half - need) <= 1
    assert d.max_over_mean == pytest.approx(w.max() / w.mean(), rel=1e-12)
    assert d.pareto_k == pytest.approx(sw.pareto_k(w), rel=1e-12)
    assert d.verdict in ("good", "usable", "unreliable")


def test_verdict_thresholds_follow_vehtari_2024():
    # k < 0.5 good, 0.5-0.7 usable, > 0.7 unreliable (Vehtari et al. 2024)
    for xi, seeds in [(0.1, range(3)), (1.3, range(3))]:
        for seed in seeds:
            d = sw.diagnose(stats.genpareto.rvs(c=xi, size=5000, random_state=seed))
            if d.pareto_k < 0.5:
                assert d.verdict == "good"
            elif d.pareto_k <= min(0.7, 1 - 1 / math.log10(5000)):
                assert d.verdict == "usable"
            else:
                assert d.verdict == "unreliable"
    assert sw.diagnose(stats.genpareto.rvs(c=1.3, size=5000, random_state=9)).verdict == "unreliable"
    assert sw.diagnose(stats.genpareto.rvs(c=0.1, size=5000, random_state=9)).verdict == "good"


def test_warnings_name_the_concentration():
    w = np.ones(10_000)
    w[:10] = 1e5  # 10 rows carry 1e6 of 1.00999e6 total
    d = sw.diagnose(w)
    assert d.rows_for_half == 6  # by hand: 5 rows hold 5e5 < 0.505e6, 6 rows exceed it
    assert any("6 rows" in m and "half of the total weight" in m for m in d.warnings)


def test_group_ess_matches_numpy_per_class():
    # reference: scikit-learn's bundled breast-cancer data, weights from a known selection rule
    from sklearn.datasets import load_breast_cancer

    X, y = load_breast_cancer(return_X_y=True)
    rng = np.random.default_rng(0)
    w = np.exp(0.8 * (X[:, 0] - X[:, 0].mean()) / X[:, 0].std()) * rng.uniform(0.5, 1.5, size=y.size)
    labels = np.where(y == 1, "benign", "malignant")
    d = sw.diagnose(w, groups=labels)
    got = {g["group"]: g for g in d.groups}
    for name in ("benign", "malignant"):
        sel = labels == name
        assert got[name]["n"] == sel.sum()
        assert got[name]["ess"] == pytest.approx(kish(w[sel]), rel=1e-12)
        assert got[name]["weight_share"] == pytest.approx(w[sel].sum() / w.sum(), rel=1e-12)
    with pytest.raises(sw.ShiftweightError, match="groups"):
        sw.diagnose(w, groups=labels[:-1])


def test_diagnosis_serialises_and_displays():
    d = sw.diagnose(stats.lognorm.rvs(s=1.0, size=2000, random_state=4), groups=np.arange(2000) % 2)
    doc = json.loads(d.to_json())
    assert doc["format"] == "shiftweight.weight-diagnosis" and doc["version"] == 1
    again = sw.WeightDiagnosis.from_json(d.to_json())
    assert again.to_dict() == d.to_dict()
    assert pickle.loads(pickle.dumps(d)).to_dict() == d.to_dict()
    assert "verdict" in repr(d) and "Pareto k" in repr(d)
    html = d._repr_html_()
    assert html.count("<tr>") >= 8 and "covariate shift only" in html
    with pytest.raises(sw.ModelFileError):
        sw.WeightDiagnosis.from_json('{"format": "other", "version": 1, "model": {}}')


# ---------------------------------------------------------------- mean weight


def test_mean_check_against_numpy_and_scipy():
    w = stats.lognorm.rvs(s=0.8, scale=0.3, size=500, random_state=12)
    d = sw.diagnose(w)
    se = w.std(ddof=1) / math.sqrt(w.size)  # reference: numpy.std with ddof=1
    assert d.mean == pytest.approx(w.mean(), rel=1e-12)
    assert d.mean_std_error == pytest.approx(se, rel=1e-10)
    # reference: scipy.stats.norm.ppf, the one-sided 99.9% normal bound
    assert d.mean_upper_bound == pytest.approx(w.mean() + stats.norm.ppf(0.999) * se, rel=1e-9)
    assert d.mean_too_low == (d.mean_upper_bound < 0.5)


def test_weights_missing_part_of_the_target_are_unreliable():
    # Analytic: target = q * source distribution + (1 - q) * mass where the source has none. The
    # ratio is q on the whole source support, so E_source[w] = q, the covered share of the target
    # (Sugiyama, Suzuki & Kanamori 2012). Here the source is N(0, 1) and the target 25% N(0, 1),
    # 75% N(12, 1); the ratio on the source rows is 0.25 up to the N(12, 1) density, which is
    # below 1e-20 for x < 3 (reference: scipy.stats.norm.pdf).
    rng = np.random.default_rng(13)
    xs = rng.normal(0.0, 1.0, 300)
    w = 0.25 + 0.75 * stats.norm.pdf(xs, 12.0) / stats.norm.pdf(xs)
    assert w.mean() == pytest.approx(0.25, abs=1e-6)
    d = sw.diagnose(w)
    assert d.mean_too_low and d.verdict == "unreliable"
    assert any("far below 1" in m for m in d.warnings)
    # Pareto k alone would call these weights fine (a flat tail).
    assert d.pareto_k is None or d.pareto_k < 0.5
    # Rescaled to mean 1 (as stabilize does), the same weights pass the mean check.
    d1 = sw.diagnose(sw.stabilize(w))
    assert not d1.mean_too_low and d1.mean == pytest.approx(1.0, abs=1e-12)
    assert "too low" in repr(d) and "too low" in d._repr_html_()
    assert json.loads(d.to_json())["model"]["mean_too_low"] is True


def test_correct_weights_are_not_flagged_by_the_mean():
    # Analytic Gaussian pair N(0, 1) -> N(mu, 1): w(x) = exp(mu x - mu^2 / 2), E_source[w] = 1
    # (reference: ratio of two normal densities). Small samples, a few seeds.
    for mu, n in [(0.5, 60), (1.0, 300)]:
        for seed in range(4):
            x = np.random.default_rng(seed).normal(0.0, 1.0, n)
            assert not sw.diagnose(np.exp(mu * x - mu * mu / 2)).mean_too_low, (mu, n, seed)


def test_diagnosis_documents_without_the_mean_check_still_load():
    d = sw.diagnose(stats.lognorm.rvs(s=0.5, size=300, random_state=14))
    doc = json.loads(d.to_json())
    for key in ("mean_std_error", "mean_upper_bound", "mean_too_low"):
        del doc["model"][key]
    old = sw.WeightDiagnosis.from_json(json.dumps(doc))
    assert old.mean_upper_bound is None and old.mean_too_low is False and old.verdict == d.verdict


# ---------------------------------------------------------------- clipping trade-off


def test_clip_tradeoff_matches_numpy():
    w = stats.genpareto.rvs(c=0.7, size=3000, random_state=5)
    t = sw.clip_tradeoff(w)
    wn = w / w.mean()
    for row in t:
        # reference: numpy.quantile and the Kish formula on min(w, t) (mean shift = 1 - mean)
        c = np.minimum(wn, np.quantile(wn, row["quantile"]))
        assert row["ess"] == pytest.approx(kish(c), rel=1e-9)
        assert row["mean_shift"] == pytest.approx(1 - c.mean(), abs=1e-12)
        assert row["upper"] == pytest.approx(c.max() / c.mean(), rel=1e-12)
        assert row["rows_clipped"] == int((wn > np.quantile(wn, row["quantile"])).sum())
    # common practice: clipping more trades bias (mean shift) for variance (ESS)
    assert np.all(np.diff(t.column("ess_fraction")) <= 1e-12)
    assert np.all(np.diff(t.column("mean_shift")) <= 1e-12)
    df = t.to_pandas()
    assert list(df.columns) == ["quantile", "upper", "rows_clipped", "ess", "ess_fraction", "mean_shift"]
    assert len(df) == len(t) == 10
    assert "ess_fraction" in repr(t) and "<table>" in t._repr_html_()
    assert pickle.loads(pickle.dumps(t)) == t


def test_clip_picker_reaches_the_requested_ess_with_least_clipping():
    w = stats.genpareto.rvs(c=0.9, size=5000, random_state=6)
    pick = sw.clip_for_ess(w, 0.6)
    assert 0.6 <= pick["ess_fraction"] < 0.6 + 1e-6
    out = sw.stabilize(w, upper=pick["upper"])
    assert sw.effective_sample_size(out, relative=True) == pytest.approx(pick["ess_fraction"], rel=1e-9)
    # Slightly less clipping falls short of the target: clip point t = upper * (1 - mean_shift).
    wn = w / w.mean()
    t = pick["upper"] * (1 - pick["mean_shift"])
    assert kish(np.minimum(wn, t)) / w.size == pytest.approx(pick["ess_fraction"], rel=1e-9)
    assert kish(np.minimum(wn, 1.001 * t)) / w.size < 0.6
    with pytest.raises(sw.ShiftweightError, match="ess_fraction"):
        sw.clip_for_ess(w, 1.5)


# ---------------------------------------------------------------- no overlap


def test_no_overlap_is_unreliable_and_flagged():
    # Analytic Gaussian pair: source N(0, 1), target N(4, 1): w(x) = exp(4x - 8).
    rng = np.random.default_rng(7)
    xs = rng.normal(0.0, 1.0, 2000)
    xt = rng.normal(4.0, 1.0, 2000)
    ratio = lambda x: np.exp(4 * x - 8)  # noqa: E731  reference: ratio of two normal densities
    d = sw.diagnose(ratio(xs))
    assert d.verdict == "unreliable"
    assert d.warnings
    rep = sw.check_overlap(ratio(xt))
    assert rep.flagged and rep.share_poorly_covered > 0.5
    assert any("No weighting fixes missing support" in m for m in rep.warnings)
    # The same from a classifier: scikit-learn LogisticRegression, out-of-fold probabilities.
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import cross_val_predict

    X = np.concatenate([xs, xt]).reshape(-1, 1)
    lab = np.r_[np.zeros(xs.size), np.ones(xt.size)]
    p = cross_val_predict(LogisticRegression(), X, lab, cv=5, method="predict_proba")[:, 1]
    rep = sw.check_overlap(probabilities=p[xs.size :], n_source=xs.size, n_target=xt.size)
    assert rep.flagged and rep.source == "probabilities"
    assert pickle.loads(pickle.dumps(rep)) == rep
    assert "FLAGGED" in repr(rep)


def test_good_overlap_is_not_flagged():
    # Analytic Gaussian pair with a small shift: source N(0, 1), target N(0.3, 1).
    rng = np.random.default_rng(8)
    xs = rng.normal(0.0, 1.0, 3000)
    xt = rng.normal(0.3, 1.0, 3000)
    ratio = lambda x: np.exp(0.3 * x - 0.045)  # noqa: E731  reference: ratio of two normal densities
    assert sw.diagnose(ratio(xs)).verdict == "good"
    rep = sw.check_overlap(ratio(xt))
    assert not rep.flagged and rep.n_poorly_covered == 0


def test_overlap_arguments_are_checked():
    with pytest.raises(sw.ShiftweightError, match="exactly one"):
        sw.check_overlap()
    with pytest.raises(sw.ShiftweightError, match="n_source"):
        sw.check_overlap(probabilities=[0.5])
    with pytest.raises(sw.ShiftweightError, match="probabilities"):
        sw.check_overlap(probabilities=[1.5], n_source=1, n_target=1)
    with pytest.raises(sw.ShiftweightError, match="limit"):
        sw.check_overlap([1.0, 2.0], limit=0.5)
