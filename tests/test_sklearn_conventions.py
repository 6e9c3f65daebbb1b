"""scikit-learn conventions for every estimator class, checked with scikit-learn's own tools.

The ratio estimators are two-sample estimators (``fit(source, target)``, no ``y``), so only the
scikit-learn checks that do not call ``fit(X, y)`` apply to them; README.md lists the others and
why they do not apply.
"""

import pickle

import numpy as np
import pytest

sklearn = pytest.importorskip("sklearn")
from sklearn.base import clone  # noqa: E402
from sklearn.exceptions import NotFittedError as SkNotFittedError  # noqa: E402
from sklearn.utils import estimator_checks as ec  # noqa: E402
from sklearn.utils.validation import check_is_fitted  # noqa: E402

import shiftweight as sw  # noqa: E402


def _two_sample():
    rng = np.random.default_rng(0)
    return rng.normal(0, 1, (120, 2)), rng.normal(0.5, 1, (100, 2))


def _xy(kind):
    rng = np.random.default_rng(1)
    X = rng.normal(size=(120, 2))
    y = X @ [1.0, -0.5] + 0.1 * rng.normal(size=120)
    return X, (y > 0).astype(float) if kind == "classifier" else y


# (estimator with small settings, a hyperparameter and a new value for it, "two_sample"/"regressor"/...)
CASES = [
    (sw.LeastSquaresRatio(n_basis=20), "n_basis", 15, "two_sample"),
    (sw.KLRatio(n_basis=20, folds=3), "folds", 2, "two_sample"),
    (sw.KernelMeanMatching(block_rows=200), "bound", 50.0, "two_sample"),
    (sw.ClassifierRatio(folds=3), "l2", 10.0, "two_sample"),
    (sw.AutoRatio(candidates=[sw.ClassifierRatio(folds=3)], folds=2), "se_margin", 2.0, "two_sample"),
    (sw.WeightedLogistic(), "l2", 0.5, "classifier"),
    (sw.WeightedRidge(), "l2", 0.5, "regressor"),
]
IDS = [type(c[0]).__name__ for c in CASES]


def _fit(est, kind):
    if kind == "two_sample":
        return est.fit(*_two_sample())
    X, y = _xy(kind)
    return est.fit(X, y)


def _output(est, kind):
    if kind == "two_sample":
        if isinstance(est, sw.KernelMeanMatching):
            return est.source_weights_  # transductive: weights of the fitted rows only
        return est.ratio(_two_sample()[1])
    return est.predict(_xy(kind)[0])


@pytest.mark.parametrize("est, param, value, kind", CASES, ids=IDS)
def test_params_round_trip_and_clone(est, param, value, kind):
    params = est.get_params()
    assert param in params
    other = type(est)(**params)
    assert other.get_params().keys() == params.keys()
    assert est.set_params(**{param: value}) is est
    assert est.get_params()[param] == value
    est.set_params(**{param: params[param]})
    with pytest.raises(ValueError):
        est.set_params(no_such_parameter=1)
    c = clone(est)  # reference: sklearn.base.clone (it verifies the constructor stores params as given)
    assert type(c) is type(est) and c is not est
    assert c.get_params().keys() == params.keys()


@pytest.mark.parametrize("est, param, value, kind", CASES, ids=IDS)
def test_sklearn_checks_that_do_not_fit(est, param, value, kind):
    name = type(est).__name__
    # reference: sklearn.utils.estimator_checks (the checks that do not call fit(X, y))
    ec.check_no_attributes_set_in_init(name, clone(est))
    ec.check_get_params_invariance(name, clone(est))
    ec.check_set_params(name, clone(est))
    ec.check_parameters_default_constructible(name, clone(est))


@pytest.mark.parametrize("est, param, value, kind", CASES, ids=IDS)
def test_not_fitted_then_fit_returns_self_with_trailing_underscore_attributes(est, param, value, kind):
    est = clone(est)
    with pytest.raises(SkNotFittedError):
        check_is_fitted(est)  # reference: sklearn.utils.validation.check_is_fitted
    with pytest.raises(sw.NotFittedError):
        est.ratio(_two_sample()[1]) if kind == "two_sample" else est.predict(_xy(kind)[0])
    with pytest.raises(sw.NotFittedError):
        est.to_json()
    before = set(vars(est))
    assert _fit(est, kind) is est
    check_is_fitted(est)  # reference: sklearn.utils.validation.check_is_fitted
    learned = [k for k in set(vars(est)) - before if not k.startswith("_")]
    assert learned, "fit set no learned attribute"
    assert all(k.endswith("_") for k in learned), learned
    assert est.get_params().keys() == type(est)().get_params().keys()  # fit did not touch params


@pytest.mark.parametrize("est, param, value, kind", CASES, ids=IDS)
def test_pickle_round_trip_after_fit(est, param, value, kind):
    est = _fit(clone(est), kind)
    back = pickle.loads(pickle.dumps(est))
    assert type(back) is type(est)
    assert back.get_params().keys() == est.get_params().keys()
    np.testing.assert_array_equal(_output(back, kind), _output(est, kind))


def test_pipeline_grid_search_with_package_weights_selects_by_weighted_score():
    from sklearn.linear_model import Ridge
    from sklearn.metrics import make_scorer, mean_squared_error
    from sklearn.model_selection import GridSearchCV, KFold
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    d = sw.demo_data(400, 200, seed=3)
    X, y, target = d["source"], d["y_source"], d["target"]
    w = sw.stabilize(sw.ClassifierRatio(folds=3).fit(X, target).source_weights_, upper_quantile=0.99)
    pipe = Pipeline([("scale", StandardScaler()), ("ridge", Ridge())])
    grid = {"ridge__alpha": [0.01, 1.0, 100.0]}
    cv = KFold(4, shuffle=True, random_state=0)

    # Weighted scoring: a scorer that takes sample_weight, with the weights routed to it through
    # the params of fit (metadata routing), and the same weights routed to the Ridge step's fit.
    sklearn.set_config(enable_metadata_routing=True)
    try:
        scorer = make_scorer(mean_squared_error, greater_is_better=False).set_score_request(sample_weight=True)
        routed = Pipeline(
            [
                ("scale", StandardScaler().set_fit_request(sample_weight=False)),
                ("ridge", Ridge().set_fit_request(sample_weight=True)),
            ]
        )
        search = GridSearchCV(routed, grid, scoring=scorer, cv=cv).fit(X, y, sample_weight=w)
    finally:
        sklearn.set_config(enable_metadata_routing=False)

    # The same selection by hand: weighted fit and weighted held-out MSE per fold.
    # reference: sklearn.metrics.mean_squared_error with sample_weight, averaged over KFold splits
    by_hand = {}
    for alpha in grid["ridge__alpha"]:
        errs = []
        for tr, te in cv.split(X):
            m = clone(pipe).set_params(ridge__alpha=alpha).fit(X[tr], y[tr], ridge__sample_weight=w[tr])
            errs.append(mean_squared_error(y[te], m.predict(X[te]), sample_weight=w[te]))
        by_hand[alpha] = np.mean(errs)
    np.testing.assert_allclose(-search.cv_results_["mean_test_score"], [by_hand[a] for a in grid["ridge__alpha"]])
    assert search.best_params_["ridge__alpha"] == min(by_hand, key=by_hand.get)
