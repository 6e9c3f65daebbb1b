"""Label shift: LabelShift (EM and BBSE), adjusted probabilities, the predicted-class mix test and
the helpers, checked on simulated label shift over scikit-learn's bundled data sets (digits, wine,
breast cancer: the target resampled to known class proportions), against scipy.optimize, numpy,
sklearn.metrics.log_loss and the binomial distribution of rejections (scipy.stats.binom).

Long replicate sweeps carry the ``study`` marker; the unmarked tests are small, seeded and fast.
"""

import json
import pickle
from functools import cache

import numpy as np
import pytest
from scipy import optimize, stats
from sklearn import datasets
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import log_loss
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import shiftweight as sw

# Target class proportions of the simulated cases (invented; far from each source mix).
_TARGET_MIX = {
    "breast_cancer": np.array([0.75, 0.25]),  # source about (0.37, 0.63)
    "wine": np.array([0.6, 0.3, 0.1]),  # source about (0.33, 0.40, 0.27)
    "digits": np.arange(1, 11) / 55.0,  # source about uniform
}


@cache
def _data(name):
    # scikit-learn's bundled data sets (sklearn.datasets.load_breast_cancer / load_wine / load_digits).
    loader = {
        "breast_cancer": datasets.load_breast_cancer,
        "wine": datasets.load_wine,
        "digits": datasets.load_digits,
    }[name]
    x, y = loader(return_X_y=True)
    return np.asarray(x, dtype=float), np.asarray(y)


def _classifier():
    return make_pipeline(StandardScaler(), LogisticRegression(C=0.1, max_iter=2000))


def _simulate(name, q, seed, n_target=None):
    """One replicate: a random half of the rows is the labelled source (its natural mix); the
    classifier's out-of-fold probabilities on it and the full-source classifier's probabilities
    on a target drawn from the other half with class counts ~ Multinomial(n_target, q)."""
    x, y = _data(name)
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(y))
    src, pool = order[: len(y) // 2], order[len(y) // 2 :]
    xs, ys = x[src], y[src]
    ps = sw.out_of_fold_proba(_classifier(), xs, ys, folds=5, seed=seed)
    clf = _classifier().fit(xs, ys)
    # Drawn without replacement, so target rows are independent draws of p(x | y): the largest
    # target whose expected class counts fit the pool (or n_target when given).
    by_class = [pool[y[pool] == j] for j in range(len(q))]
    fit = int(min(len(b) / qj for b, qj in zip(by_class, q) if qj > 0) * 0.9)
    n_t = fit if n_target is None else n_target
    counts = np.minimum(rng.multinomial(n_t, q), [len(b) for b in by_class])
    tgt = np.concatenate([rng.choice(b, size=c, replace=False) for b, c in zip(by_class, counts)])
    return ps, ys, clf.predict_proba(x[tgt]), y[tgt]


# ---------------------------------------------------------------- simulated label shift


def _simulate_held_out(name, q, seed):
    """Like ``_simulate`` but one classifier, fitted on a stratified half of the source, scores the
    other half (the labelled rows passed on) and the target (benches/label_shift_study.py, way
    ``held-out``): fast enough for the unmarked suite."""
    x, y = _data(name)
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(y))
    src, pool = order[: len(y) // 2], order[len(y) // 2 :]
    by_class = [pool[y[pool] == j] for j in range(len(q))]
    n_t = int(min(len(b) / qj for b, qj in zip(by_class, q) if qj > 0) * 0.9)
    counts = np.minimum(rng.multinomial(n_t, q), [len(b) for b in by_class])
    tgt = np.concatenate([rng.choice(b, size=c, replace=False) for b, c in zip(by_class, counts)])
    ys = y[src]
    halves = [rng.permutation(np.flatnonzero(ys == j)) for j in np.unique(ys)]
    fit = np.concatenate([h[: len(h) // 2] for h in halves])
    cal = np.concatenate([h[len(h) // 2 :] for h in halves])
    clf = _classifier().fit(x[src][fit], ys[fit])
    return clf.predict_proba(x[src][cal]), ys[cal], clf.predict_proba(x[tgt])


def _coverage_and_error(simulate, name, replicates, bootstrap):
    """Share of (replicate, class) checks whose 95% interval holds the true share, and the mean
    L1 error sum_j |q_hat_j - q_j|, for EM and BBSE."""
    q = _TARGET_MIX[name]
    cover = {"em": [], "bbse": []}
    err = {"em": [], "bbse": []}
    for r in range(replicates):
        ps, ys, pt, *_ = simulate(name, q, seed=1000 + r)
        for method in ("em", "bbse"):
            est = sw.LabelShift(method=method, bootstrap=bootstrap, seed=r).fit(ps, ys, pt)
            low, high = est.interval_
            cover[method].extend((low <= q) & (q <= high))
            err[method].append(np.abs(est.target_proportions_ - q).sum())
    return {m: (float(np.mean(cover[m])), float(np.mean(err[m]))) for m in cover}


@pytest.mark.parametrize("name", ["breast_cancer", "wine"])
def test_interval_coverage_small(name):
    # The check on a small seeded sweep (25 replicates; the study below and
    # benches/label_shift_study.py run 100): scikit-learn's bundled data sets with the target
    # resampled to a known mix; the 95% intervals hold the true shares in at least 90% of checks.
    res = _coverage_and_error(_simulate_held_out, name, replicates=25, bootstrap=100)
    for method, (coverage, _) in res.items():
        assert coverage >= 0.9, (name, method, coverage)


@pytest.mark.study
@pytest.mark.parametrize("name", ["breast_cancer", "wine", "digits"])
def test_interval_coverage_and_em_at_least_as_accurate_as_bbse(name):
    # 100 seeded replicates of the documented workflow (out-of-fold source probabilities, target
    # scored by the classifier refitted on all source rows), as `benches/label_shift_study.py
    # --ways oof` (docs/label-shift.md records the figures). Coverage of the 95% intervals >= 90%
    # for both methods (the criterion); calibrated EM's mean L1 error at most BBSE's
    # (the ordering reported by Alexandari, Kundaje & Shrikumar 2020, ICML).
    res = _coverage_and_error(_simulate, name, replicates=100, bootstrap=200)
    for method, (coverage, _) in res.items():
        assert coverage >= 0.9, (name, method, coverage)
    assert res["em"][1] <= res["bbse"][1], (name, res)


def test_no_shift_intervals_hold_the_source_mix():
    # No label shift: the target is drawn with the source's own mix, so the estimated shares
    # should match the source's within their 95% intervals in at least 90% of checks (the issue's
    # criterion), on 25 seeded replicates of breast cancer and wine (scikit-learn bundled data).
    checks = []
    for name in ["breast_cancer", "wine"]:
        _, y = _data(name)
        q = np.bincount(y) / len(y)
        for r in range(25):
            ps, ys, pt = _simulate_held_out(name, q, seed=2000 + r)
            est = sw.LabelShift(bootstrap=100, seed=r).fit(ps, ys, pt)
            low, high = est.interval_
            checks.extend((low <= q) & (q <= high))
    assert np.mean(checks) >= 0.9, np.mean(checks)


def test_adjusted_probabilities_lower_target_log_loss():
    # Saerens, Latinne & Decaestecker 2002: the prior-adjusted posteriors fit the shifted target
    # better; measured with sklearn.metrics.log_loss on the target labels.
    for k, name in enumerate(["breast_cancer", "wine", "digits"]):
        q = _TARGET_MIX[name]
        ps, ys, pt, yt = _simulate(name, q, seed=77 + k)
        labels = np.arange(len(q))
        est = sw.LabelShift(bootstrap=0).fit(ps, ys, pt)
        before = log_loss(yt, pt, labels=labels)
        after = log_loss(yt, est.adjust_probabilities(pt), labels=labels)
        assert after < before, (name, before, after)
        bbse = sw.LabelShift(method="bbse").fit(ps, ys, pt)
        assert log_loss(yt, bbse.adjust_probabilities(pt), labels=labels) < before, name


# ---------------------------------------------------------------- no label shift


def _mix_test_rejections(name, replicates, seed):
    # A classifier fitted once on a third of the rows; each replicate splits the remaining rows at
    # random into "source" and "target" halves: one distribution, so the null holds exactly.
    x, y = _data(name)
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(y))
    train, rest = order[: len(y) // 3], order[len(y) // 3 :]
    proba = _classifier().fit(x[train], y[train]).predict_proba(x[rest])
    reject = 0
    for r in range(replicates):
        perm = rng.permutation(len(rest))
        half = len(rest) // 2
        res = sw.class_mix_test(proba[perm[:half]], proba[perm[half:]], permutations=199, seed=r)
        reject += res.p_value <= 0.05
    return reject


@pytest.mark.parametrize("name,replicates", [("wine", 200), ("digits", 200)])
def test_mix_test_level_under_no_shift(name, replicates):
    # The rejection count at level 0.05 lies inside its binomial 99% interval
    # (scipy.stats.binom.interval). Chi-square p-values with Yates' correction for two classes are
    # conservative, so only the upper end is a check there; both ends here.
    reject = _mix_test_rejections(name, replicates, seed=5)
    low, high = stats.binom.interval(0.99, replicates, 0.05)
    assert low <= reject <= high, (reject, low, high)


def test_mix_test_detects_label_shift_and_matches_scipy():
    ps, _ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=3)
    res = sw.class_mix_test(ps, pt)
    # Same statistic as scipy.stats.chi2_contingency on the 2 x K table of predicted classes.
    table = np.vstack([np.bincount(ps.argmax(1), minlength=3), np.bincount(pt.argmax(1), minlength=3)])
    ref = stats.chi2_contingency(table)
    assert res.p_value_method == "chi_square"
    assert res.statistic == pytest.approx(ref.statistic, rel=1e-10)
    assert res.p_value == pytest.approx(ref.pvalue, rel=1e-8)
    assert res.source_counts.tolist() == table[0].tolist()
    assert any("covariate shift" in n for n in res.notes)
    assert sw.ClassMixTestResult.from_json(res.to_json()) == res


# ---------------------------------------------------------------- exact formulas


def test_em_fixed_point_equals_direct_maximisation():
    # Saerens et al. 2002: EM climbs the target log-likelihood L(q) = sum_i ln sum_y q_y pi_iy / p_y
    # over the simplex. Reference: scipy.optimize.minimize (SLSQP) on the same L, with the
    # calibrated posteriors pi recomputed in numpy from the fitted calibration.
    rng = np.random.default_rng(11)
    k, n_s, n_t = 3, 300, 200
    ys = rng.integers(0, k, n_s)
    yt = rng.choice(k, n_t, p=[0.6, 0.3, 0.1])

    def proba(y):
        logits = rng.normal(0, 1, (len(y), k))
        logits[np.arange(len(y)), y] += 1.5
        e = np.exp(logits)
        return e / e.sum(1, keepdims=True)

    ps, pt = proba(ys), proba(yt)
    res = sw.LabelShift(bootstrap=0).fit(ps, ys, pt).result_
    cal = res.em["calibration"]
    z = cal["inverse_temperature"] * np.log(pt) + np.asarray(cal["bias"])
    pi = np.exp(z - z.max(1, keepdims=True))
    pi /= pi.sum(1, keepdims=True)
    prior = res.source_proportions

    def neg_l(q):
        return -np.log(pi @ (q / prior)).sum()

    opt = optimize.minimize(
        neg_l,
        prior,
        method="SLSQP",
        bounds=[(1e-9, 1.0)] * k,
        constraints=[{"type": "eq", "fun": lambda q: q.sum() - 1.0}],
        options={"ftol": 1e-14, "maxiter": 500},
    )
    assert opt.success
    np.testing.assert_allclose(res.target_proportions, opt.x, atol=1e-5)
    assert neg_l(res.target_proportions) <= opt.fun + 1e-8
    # And the calibrated posteriors average to the source shares on the source rows (the bias
    # terms' first-order condition; Alexandari et al. 2020).
    zs = cal["inverse_temperature"] * np.log(ps) + np.asarray(cal["bias"])
    pis = np.exp(zs - zs.max(1, keepdims=True))
    pis /= pis.sum(1, keepdims=True)
    np.testing.assert_allclose(pis.mean(0), prior, atol=1e-7)


def test_bbse_equals_numpy_formula():
    # Lipton, Wang & Smola 2018: w = C^{-1} mu with C[i, j] = P_s(yhat = i, y = j), and q = p * w.
    # Recomputed in numpy (numpy.linalg.solve), with the delta-method covariance of the module docs.
    ps, ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=21)
    res = sw.LabelShift(method="bbse", level=0.9).fit(ps, ys, pt).result_
    k = ps.shape[1]
    yhat_s, yhat_t = ps.argmax(1), pt.argmax(1)
    joint = np.zeros((k, k))
    np.add.at(joint, (yhat_s, ys), 1.0 / len(ys))
    mu = np.bincount(yhat_t, minlength=k) / len(yhat_t)
    p = np.bincount(ys, minlength=k) / len(ys)
    q = p * np.linalg.solve(joint, mu)
    b = res.bbse
    np.testing.assert_allclose(b["raw_proportions"], q, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(b["confusion"], joint / p, rtol=1e-12)
    a = joint / p
    counts = np.bincount(ys, minlength=k)
    mid = (np.diag(mu) - np.outer(mu, mu)) / len(yhat_t)
    for j in range(k):
        mid += q[j] ** 2 * (np.diag(a[:, j]) - np.outer(a[:, j], a[:, j])) / counts[j]
    a_inv = np.linalg.inv(a)
    se = np.sqrt(np.diag(a_inv @ mid @ a_inv.T))
    np.testing.assert_allclose(b["std_errors"], se, rtol=1e-9)
    z = stats.norm.ppf(0.95)  # scipy.stats.norm: two-sided 90% interval
    np.testing.assert_allclose(res.interval_low, np.clip(q - z * se, 0, 1), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(b["condition_number"], np.linalg.cond(a), rtol=1e-8)


def test_adjusted_probabilities_formula():
    # p_t(y | x) proportional to w(y) p_s(y | x) (Saerens et al. 2002, eq. 2.4), BBSE (no calibration).
    ps, ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=4)
    est = sw.LabelShift(method="bbse").fit(ps, ys, pt)
    ref = pt * est.class_weights_
    ref /= ref.sum(1, keepdims=True)
    np.testing.assert_allclose(est.adjust_probabilities(pt), ref, rtol=1e-12)
    np.testing.assert_allclose(est.class_weights_, est.target_proportions_ / est.source_proportions_)


# ---------------------------------------------------------------- API, words, files, errors


def test_weighted_logistic_works_directly_and_weights_feed_diagnose():
    x, y = _data("breast_cancer")
    x = StandardScaler().fit_transform(x)
    rng = np.random.default_rng(8)
    order = rng.permutation(len(y))
    src, pool = order[:300], order[300:]
    ps = sw.out_of_fold_proba(sw.WeightedLogistic(l2=10.0), x[src], y[src], folds=5, seed=1)
    np.testing.assert_allclose(ps.sum(1), 1.0)
    clf = sw.WeightedLogistic(l2=10.0).fit(x[src], y[src])
    tgt = np.concatenate([rng.choice(pool[y[pool] == 0], 150), rng.choice(pool[y[pool] == 1], 50)])
    est = sw.LabelShift(bootstrap=50).fit(ps, y[src], clf.predict_proba(x[tgt]))
    assert abs(est.target_proportions_[0] - 0.75) < 0.08
    w = est.sample_weight(y[src])
    np.testing.assert_allclose(w, est.class_weights_[y[src]])
    # The class weights go through the same tools as importance weights.
    d = sw.diagnose(w, groups=y[src])
    assert len(d.groups) == 2
    assert sw.stabilize(w).mean() == pytest.approx(1.0)
    # Retraining with them moves the predicted mix towards the target's.
    refit = sw.WeightedLogistic(l2=10.0).fit(x[src], y[src], sample_weight=w)
    assert refit.predict(x[tgt]).mean() < clf.predict(x[tgt]).mean()


def test_out_of_fold_proba_matches_manual_folds():
    # Each row scored by a model fitted without its fold (sklearn LogisticRegression refitted here).
    x, y = _data("wine")
    oof = sw.out_of_fold_proba(_classifier(), x, y, folds=3, seed=2)
    from shiftweight import _native

    fold = _native.stratified_kfold_assignment(y.astype(float), 3, 2)
    for f in range(3):
        m = _classifier().fit(x[fold != f], y[fold != f])
        np.testing.assert_allclose(oof[fold == f], m.predict_proba(x[fold == f]), rtol=1e-10)
    # Stratified: each fold holds each class's share up to one row.
    for j in range(3):
        c = np.bincount(fold[y == j], minlength=3)
        assert c.max() - c.min() <= 1


def test_string_labels_classes_json_pickle_and_words():
    ps, ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=9)
    names = np.array(["barolo", "grignolino", "barbera"])
    est = sw.LabelShift(bootstrap=30, classes=names).fit(ps, names[ys], pt)
    assert est.result_.classes == names.tolist()
    np.testing.assert_allclose(est.sample_weight(["barbera", "barolo"]), est.class_weights_[[2, 0]])
    again = sw.LabelShiftResult.from_json(est.to_json())
    assert again == est.result_
    assert pickle.loads(pickle.dumps(est.result_)) == est.result_
    np.testing.assert_allclose(again.adjust_probabilities(pt), est.adjust_probabilities(pt))
    text, page = repr(est.result_), est.result_.to_html()
    for words in ["barbera", "interval", "covariate shift", "p(x | y)", "labelled target"]:
        assert words in text and words in page, words
    assert json.loads(est.to_json())["format"] == "shiftweight.label-shift"
    assert sw.LabelShift().get_params()["method"] == "em"


def test_class_matched_rows_have_the_requested_mix():
    y = np.repeat([0, 1, 2], [50, 80, 40])
    rows = sw.class_matched_rows(y, [0.5, 0.25, 0.25], seed=3)
    counts = np.bincount(y[rows], minlength=3)
    assert counts.tolist() == [50, 25, 25]
    assert np.all(np.diff(rows) > 0)


def test_errors_name_the_argument():
    ps, ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=1)
    with pytest.raises(sw.ShiftweightError, match="class"):
        # Class 2 absent from the labelled source rows.
        sw.LabelShift().fit(ps[ys < 2], ys[ys < 2], pt)
    with pytest.raises(sw.ShiftweightError, match="target_probabilities"):
        sw.LabelShift().fit(ps, ys, pt[:, :2])
    with pytest.raises(sw.ShiftweightError, match="source_labels"):
        sw.LabelShift().fit(ps, ys[:-1], pt)
    with pytest.raises(sw.ShiftweightError, match="sums to"):
        sw.LabelShift().fit(ps * 0.9, ys, pt)
    with pytest.raises(sw.ShiftweightError, match="method"):
        sw.LabelShift(method="other").fit(ps, ys, pt)
    with pytest.raises(sw.ShiftweightError, match="bootstrap"):
        sw.LabelShift(bootstrap=5).fit(ps, ys, pt)
    with pytest.raises(sw.ShiftweightError, match="labels"):
        sw.LabelShift(bootstrap=0).fit(ps, ys, pt).sample_weight([0, 7])
    with pytest.raises(sw.NotFittedError):
        sw.LabelShift().adjust_probabilities(pt)
    with pytest.raises(sw.ModelFileError):
        sw.LabelShiftResult.from_json('{"format": "shiftweight.label-shift", "version": 1, "model": {}}')


def test_near_singular_and_singular_confusion_matrix():
    rng = np.random.default_rng(0)
    ys = rng.integers(0, 3, 600)
    # Classes 1 and 2 nearly indistinguishable: a near-singular confusion matrix gives a warning.
    p = np.where(ys[:, None] == 0, [0.8, 0.1, 0.1], [0.1, 0.45, 0.45])
    p = p + rng.normal(0, 0.02, (len(ys), 1)) * [0, 1, -1]
    est = sw.LabelShift(bootstrap=0).fit(p, ys, p[:200])
    assert any("near-singular" in w for w in est.warnings_), est.warnings_
    # Class 2 never predicted: the matrix is singular; an error naming it with BBSE as the
    # method, a warning with EM (whose estimate is still given).
    q = np.where(ys[:, None] == 0, [0.8, 0.1, 0.1], [0.1, 0.5, 0.4])
    with pytest.raises(sw.ShiftweightError, match=r"singular.*\[2\]"):
        sw.LabelShift(method="bbse").fit(q, ys, q[:200])
    em = sw.LabelShift(bootstrap=0).fit(q, ys, q[:200])
    assert em.result_.bbse is None
    assert any("not available" in w for w in em.warnings_), em.warnings_


def test_report_section_from_python(tmp_path):
    # The label-shift section of the HTML report: the same numbers as the estimate (its JSON
    # document is the source), alone (LabelShiftResult.write_report) or added to the covariate
    # report (sw.write_report(label_shift=...)); pages are checked as XML by the standard
    # library's xml.etree (an independent parser).
    import xml.etree.ElementTree as ET

    ps, ys, pt, _ = _simulate("wine", _TARGET_MIX["wine"], seed=3)
    est = sw.LabelShift(bootstrap=50, classes=[0, 1, 2]).fit(ps, ys, pt)
    test = sw.class_mix_test(ps, pt)
    summary = est.result_.write_report(tmp_path / "mix.html", mix_test=test, json_path=tmp_path / "mix.json")
    assert "Estimated target class mix" in summary
    page = (tmp_path / "mix.html").read_text()
    root = ET.fromstring(page.replace("<!DOCTYPE html>", ""))
    section = next(e for e in root.iter() if e.get("id") == "label-shift")
    rows = [[("".join(td.itertext())) for td in tr] for tr in section.iter("tr") if tr.find("td") is not None]
    shares = [float(r[2]) for r in rows[:3]]
    np.testing.assert_allclose(shares, est.target_proportions_, atol=5e-4)  # printed to 3 digits
    assert "p(x | y)" in page
    report = json.loads((tmp_path / "mix.json").read_text())
    np.testing.assert_array_equal([r["target_share"] for r in report["label_shift"]["rows"]], est.target_proportions_)
    assert report["label_shift"]["mix_test"]["p_value"] == test.p_value

    x, _ = _data("wine")
    sw.write_report(x[:80], x[80:], tmp_path / "full.html", permutations=19, label_shift=est, mix_test=test)
    full = (tmp_path / "full.html").read_text()
    assert 'id="label-shift"' in full and 'id="shift"' in full
    with pytest.raises(sw.ShiftweightError, match="label_shift"):
        sw.write_report(x[:80], x[80:], tmp_path / "bad.html", label_shift=sw.LabelShift())
    with pytest.raises(sw.ShiftweightError, match="mix_test"):
        est.result_.write_report(tmp_path / "bad.html", mix_test="yes")  # type: ignore[arg-type]
    assert not (tmp_path / "bad.html").exists()
