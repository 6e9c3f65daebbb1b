"""LeastSquaresRatio (uLSIF / RuLSIF) through the Python door."""

import json
import pickle
import threading

import numpy as np
import pytest

import shiftweight as sw


def _gauss(n, d, mean, seed):
    return np.random.default_rng(seed).normal(mean, 1.0, size=(n, d))


@pytest.fixture(scope="module")
def fitted():
    s, t = _gauss(300, 3, 0.0, 1), _gauss(250, 3, 0.6, 2)
    return s, t, sw.LeastSquaresRatio(n_basis=40, seed=3).fit(s, t)


@pytest.mark.parametrize("alpha", [0.0, 0.25])
def test_coefficients_solve_the_normal_equations_numpy(alpha):
    # reference: numpy.linalg.solve on H and h rebuilt with numpy from the model file's centres,
    # width and standardiser (Kanamori et al. 2009 eq. for uLSIF; Yamada et al. 2013 for RuLSIF).
    s, t = _gauss(200, 2, 0.0, 5), _gauss(150, 2, 0.8, 6)
    est = sw.LeastSquaresRatio(n_basis=30, alpha=alpha, seed=1).fit(s, t)
    m = json.loads(est.to_json())["model"]
    mean, scale = np.array(m["standardizer"]["mean"]), np.array(m["standardizer"]["scale"])
    form = m["form"]
    c = np.array(form["centres"]["data"]).reshape(form["centres"]["rows"], form["centres"]["cols"])
    sigma, lam = form["sigma"], est.lam_

    def phi(x):
        z = (x - mean) / scale
        sq = ((z[:, None, :] - c[None, :, :]) ** 2).sum(-1)
        return np.exp(-sq / (2 * sigma**2))

    ps, pt = phi(s), phi(t)
    H = (1 - alpha) * ps.T @ ps / len(s) + alpha * pt.T @ pt / len(t)
    h = pt.mean(0)
    theta = np.maximum(0.0, np.linalg.solve(H + lam * np.eye(len(c)), h))
    np.testing.assert_allclose(form["coef"], theta, rtol=1e-7, atol=1e-10)
    # And the ratio is the kernel expansion with those coefficients.
    np.testing.assert_allclose(est.ratio(s[:20]), phi(s[:20]) @ theta, rtol=1e-9, atol=1e-12)


def test_learned_attributes_and_selection(fitted):
    s, _t, est = fitted
    assert est.source_weights_.shape == (len(s),)
    assert est.sigma_ > 0 and est.lam_ > 0
    assert len(est.cv_scores_) == 25
    best = min(est.cv_scores_, key=lambda r: r["score"])
    assert (best["sigma"], best["lam"]) == (est.sigma_, est.lam_)
    assert est.n_features_in_ == 3


def test_pickle_and_json_round_trips_are_bitwise(fitted):
    _s, _t, est = fitted
    x = _gauss(100, 3, 0.3, 9)
    w = est.ratio(x)
    for other in (pickle.loads(pickle.dumps(est)), sw.from_json(est.to_json())):
        np.testing.assert_array_equal(other.ratio(x), w)
        np.testing.assert_array_equal(other.source_weights_, est.source_weights_)
    assert pickle.loads(pickle.dumps(est)).get_params() == est.get_params()


def test_model_file_rejects_other_formats_and_versions(fitted):
    doc = json.loads(fitted[2].to_json())
    for key, value, words in [("format", "something-else", "format"), ("version", 99, "version")]:
        bad = dict(doc, **{key: value})
        with pytest.raises(sw.ModelFileError, match=words):
            sw.from_json(json.dumps(bad))
    with pytest.raises(sw.ModelFileError, match="truncated"):
        sw.from_json(fitted[2].to_json()[:200])
    broken = json.loads(fitted[2].to_json())
    broken["model"]["form"]["coef"] = broken["model"]["form"]["coef"][:-1]
    with pytest.raises(sw.ModelFileError, match="coefficients"):
        sw.from_json(json.dumps(broken))


def test_same_seed_same_weights_different_seed_different_centres():
    s, t = _gauss(200, 2, 0.0, 1), _gauss(200, 2, 0.5, 2)
    a = sw.LeastSquaresRatio(n_basis=20, seed=4).fit(s, t).source_weights_
    b = sw.LeastSquaresRatio(n_basis=20, seed=4).fit(s, t).source_weights_
    c = sw.LeastSquaresRatio(n_basis=20, seed=5).fit(s, t).source_weights_
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_bad_inputs_get_specific_errors(fitted):
    s, t, est = fitted
    bad = t.copy()
    bad[4, 2] = np.nan
    with pytest.raises(sw.ShiftweightError, match=r"target.*row 4, column 2"):
        sw.LeastSquaresRatio().fit(s, bad)
    with pytest.raises(ValueError, match="feature column"):
        est.ratio(np.ones((3, 2)))
    with pytest.raises(sw.ShiftweightError, match="1-D"):
        est.ratio(np.ones(3))
    with pytest.raises(sw.ShiftweightError, match="shape"):
        est.ratio(np.ones((2, 3, 1)))
    with pytest.raises(sw.ShiftweightError, match="string"):
        est.ratio(np.array([["a", "b", "c"]]))
    with pytest.raises(sw.ShiftweightError, match="alpha"):
        sw.LeastSquaresRatio(alpha=1.0).fit(s, t)
    with pytest.raises(sw.ShiftweightError, match="at least 2"):
        sw.LeastSquaresRatio().fit(s[:1], t)
    with pytest.raises(sw.NotFittedError):
        sw.LeastSquaresRatio().ratio(s)


def test_dataframes_keep_names_and_match_numpy():
    pytest.importorskip("pandas")
    f = sw.demo_data(300, 200, seed=2, as_frame=True)
    # The complete numeric view of the demo rows, as DataFrames.
    d = {"source": f["source_numeric"], "target": f["target_numeric"],
         "feature_names": list(f["source_numeric"].columns)}
    a = sw.LeastSquaresRatio(n_basis=30).fit(d["source"], d["target"])
    b = sw.LeastSquaresRatio(n_basis=30).fit(d["source"].to_numpy(), d["target"].to_numpy())
    np.testing.assert_array_equal(a.source_weights_, b.source_weights_)
    assert list(a.feature_names_in_) == d["feature_names"]
    with pytest.raises(sw.ShiftweightError, match="another order"):
        a.ratio(d["target"][d["feature_names"][::-1]])
    renamed = d["target"].rename(columns={"occupants": "people"})
    with pytest.raises(sw.ShiftweightError, match=r"missing.*occupants"):
        sw.LeastSquaresRatio().fit(d["source"], renamed)
    text = d["source"].assign(town="coast")
    # A text column is a categorical column of a typed table; one the target lacks is named.
    with pytest.raises(sw.ShiftweightError, match="`target` has no column named `town`"):
        sw.LeastSquaresRatio().fit(text, d["target"])


def test_float32_and_fortran_order_give_the_float64_result(fitted):
    _s, _t, est = fitted
    x = _gauss(50, 3, 0.2, 4)
    np.testing.assert_array_equal(est.ratio(np.asfortranarray(x)), est.ratio(x))
    x32 = x.astype(np.float32)
    np.testing.assert_array_equal(est.ratio(x32), est.ratio(x32.astype(np.float64)))


def test_concurrent_scoring_from_threads(fitted):
    _s, _t, est = fitted
    x = _gauss(20000, 3, 0.0, 11)
    want = est.ratio(x)
    out = [None] * 6

    def work(i):
        out[i] = est.ratio(x)

    threads = [threading.Thread(target=work, args=(i,)) for i in range(6)]
    for th in threads:
        th.start()
    for th in threads:
        th.join()
    for got in out:
        np.testing.assert_array_equal(got, want)


def test_sklearn_clone_and_params():
    base = pytest.importorskip("sklearn.base")
    est = sw.LeastSquaresRatio(alpha=0.1, n_basis=17)
    c = base.clone(est)
    assert c.get_params() == est.get_params() and c is not est
    est.set_params(n_basis=5)
    assert est.n_basis == 5
    with pytest.raises(ValueError, match="invalid parameter"):
        est.set_params(nope=1)
    assert "alpha=0.1" in repr(c)


@pytest.mark.skipif(
    not hasattr(sw._native, "_provoke_internal_failure"),
    reason="extension built without the `test-hooks` cargo feature (`make develop` enables it)",
)
def test_panics_never_reach_python():
    with pytest.raises(sw.InternalError, match="internal error"):
        sw._native._provoke_internal_failure()
