"""Weighted learners and importance-weighted cross-validation on typed tables (pandas, polars,
pyarrow): against scikit-learn on an independently written encoding, by column name, and across
the three frame libraries."""

import pickle
import warnings

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pytest
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline

import shiftweight as sw


def _reference_encoding(train: pd.DataFrame, frame: pd.DataFrame) -> pd.DataFrame:
    """The encoding docs/tables.md describes, written independently with pandas: a numeric column
    becomes (x - mean) / sd with the mean and sample standard deviation (ddof=1) of its present
    training values, missing values 0, plus an indicator column ``x (missing)`` when the training
    rows have a missing value; a categorical column becomes pandas.get_dummies over the levels seen
    in the training rows (a level never seen gets 0 in all of them, as documented). Fewer than 30
    levels here, so nothing is pooled."""
    parts = {}
    for name in train.columns:
        col = train[name]
        if isinstance(col.dtype, pd.CategoricalDtype) or col.dtype == object:
            levels = sorted(set(col.dropna().astype(str)))
            dummies = pd.get_dummies(frame[name].astype(str), dtype=float)
            for lv in levels:
                parts[f"{name}={lv}"] = dummies[lv] if lv in dummies else 0.0
            if col.isna().any():
                parts[f"{name}=(missing)"] = frame[name].isna().astype(float)
        else:
            mean, sd = col.mean(skipna=True), col.std(ddof=1, skipna=True)
            parts[name] = ((frame[name] - mean) / sd).fillna(0.0)
            if col.isna().any():
                parts[f"{name} (missing)"] = frame[name].isna().astype(float)
    return pd.DataFrame(parts, index=frame.index)


class _ReferenceEncoder(TransformerMixin, BaseEstimator):
    """_reference_encoding as a scikit-learn transformer (fitted on each training fold)."""

    def fit(self, X, y=None):
        self.train_ = X
        return self

    def transform(self, X):
        return _reference_encoding(self.train_, X).to_numpy()


@pytest.fixture(scope="module")
def demo():
    return sw.demo_data(300, 150, seed=1, as_frame=True)


def _weights(frame):
    # Any fixed positive weights serve the equivalence checks.
    return np.exp(0.05 * frame["outdoor_temp_c"].to_numpy())


def test_ridge_on_a_typed_table_equals_sklearn_ridge_on_the_encoding(demo):
    s, t, y = demo["source"], demo["target"], demo["y_source"]
    w = _weights(s)
    ours = sw.WeightedRidge(l2=2.0).fit(s, y, sample_weight=w)
    z_s = _reference_encoding(s, s)
    # reference: sklearn.linear_model.Ridge(alpha=l2) with the same sample_weight on the same
    # encoded matrix (two double-precision solves of the same normal equations)
    ref = Ridge(alpha=2.0).fit(z_s.to_numpy(), y, sample_weight=w)
    assert set(ours.feature_names_in_) == set(z_s.columns)
    coef = dict(zip(ours.feature_names_in_, ours.coef_))
    np.testing.assert_allclose([coef[c] for c in z_s.columns], ref.coef_, rtol=1e-9, atol=1e-9)
    assert ours.intercept_ == pytest.approx(ref.intercept_, rel=1e-10)
    np.testing.assert_allclose(ours.predict(t), ref.predict(_reference_encoding(s, t).to_numpy()), rtol=1e-10)


def test_logistic_on_a_typed_table_equals_sklearn_logistic_on_the_encoding(demo):
    s, t = demo["source"], demo["target"]
    y = (demo["y_source"] > np.median(demo["y_source"])).astype(int)
    w = _weights(s)
    ours = sw.WeightedLogistic(l2=1.0).fit(s, y, sample_weight=w)
    z_s = _reference_encoding(s, s)
    # reference: sklearn.linear_model.LogisticRegression(C=1/l2) with the same sample_weight
    ref = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    ref.fit(z_s.to_numpy(), y, sample_weight=w)
    coef = dict(zip(ours.feature_names_in_, ours.coef_[0]))
    np.testing.assert_allclose([coef[c] for c in z_s.columns], ref.coef_[0], rtol=0, atol=1e-5)
    p_ref = ref.predict_proba(_reference_encoding(s, t).to_numpy())
    np.testing.assert_allclose(ours.predict_proba(t), p_ref, rtol=0, atol=1e-6)


def test_columns_are_found_by_name(demo):
    s, t, y = demo["source"], demo["target"], demo["y_source"]
    m = sw.WeightedRidge().fit(s, y, sample_weight=_weights(s))
    expected = m.predict(t)
    shuffled = t[list(reversed(t.columns))].assign(meter_id=np.arange(len(t)))
    assert np.array_equal(m.predict(shuffled), expected)
    with pytest.raises(sw.ShiftweightError, match="heating"):
        m.predict(t.drop(columns=["heating"]))


def test_pandas_polars_and_pyarrow_give_bitwise_equal_predictions(demo):
    s, t, y = demo["source"], demo["target"], demo["y_source"]
    w = _weights(s)
    frames = {
        "pandas": (s, t),
        "polars": (pl.from_pandas(s), pl.from_pandas(t)),
        "pyarrow": (pa.Table.from_pandas(s, preserve_index=False), pa.Table.from_pandas(t, preserve_index=False)),
    }
    preds = []
    for fs, _ in frames.values():
        m = sw.WeightedRidge(l2=0.5).fit(fs, y, sample_weight=w)
        preds += [m.predict(g) for _, g in frames.values()]
    assert all(np.array_equal(p, preds[0]) for p in preds[1:])


def test_nullable_text_and_boolean_columns_are_encoded():
    # pandas string and nullable boolean columns with pd.NA; the reference is the same rows given
    # as a pandas category column and floats, which the encoding must treat identically.
    rng = np.random.default_rng(3)
    n = 60
    tariff = pd.array(rng.choice(["flat", "night", "peak"], n), dtype="string")
    tariff[[4, 9]] = pd.NA
    solar = pd.array(rng.random(n) < 0.4, dtype="boolean")
    solar[7] = pd.NA
    kwh = rng.normal(10, 2, n)
    text = pd.DataFrame({"tariff": tariff, "solar": solar, "kwh": kwh})
    as_categories = pd.DataFrame(
        {
            "tariff": pd.Categorical([None if v is pd.NA else v for v in tariff]),
            "solar": pd.Categorical(
                [None if v is pd.NA else ("true" if v else "false") for v in solar], categories=["false", "true"]
            ),
            "kwh": kwh,
        }
    )
    y = rng.normal(size=n)
    a = sw.WeightedRidge().fit(text, y)
    b = sw.WeightedRidge().fit(as_categories, y)
    assert list(a.feature_names_in_) == list(b.feature_names_in_)
    assert "tariff=(missing)" in a.feature_names_in_ and "solar=(missing)" in a.feature_names_in_
    assert np.array_equal(a.predict(text), b.predict(as_categories))


def test_unseen_level_warns_and_is_recorded(demo):
    s, t, y = demo["source"], demo["target"], demo["y_source"]
    m = sw.WeightedRidge().fit(s, y)
    new = t.head(5).copy()
    new["heating"] = new["heating"].cat.add_categories(["wood"])
    new.loc[new.index[[1, 3]], "heating"] = "wood"
    with pytest.warns(UserWarning, match="wood"):
        m.predict(new)
    assert m.unseen_ == [{"column": "heating", "level": "wood", "rows": 2, "first_row": 1}]


def test_model_files_and_pickles_keep_the_encoding(demo):
    s, t = demo["source"], demo["target"]
    y = (demo["y_source"] > np.median(demo["y_source"])).astype(int)
    m = sw.WeightedLogistic().fit(s, y)
    back = sw.linear_model_from_json(m.to_json())
    assert list(back.feature_names_in_) == list(m.feature_names_in_)
    assert np.array_equal(back.predict_proba(t), m.predict_proba(t))
    again = pickle.loads(pickle.dumps(m))
    assert np.array_equal(again.predict_proba(t), m.predict_proba(t))


def test_without_penalty_the_typed_path_predicts_as_the_matrix_path(demo):
    # Least squares with an intercept has fitted values invariant under any invertible affine map
    # of the columns (analytic), so the standardised encoding of numeric columns cannot change
    # them when l2 = 0. numeric= forces the typed path on an all-numeric frame.
    x = demo["source_numeric"]
    y = demo["y_source"]
    w = _weights(x)
    typed = sw.WeightedRidge(l2=0.0).fit(x, y, sample_weight=w, numeric=list(x.columns))
    plain = sw.WeightedRidge(l2=0.0).fit(x.to_numpy(), y, sample_weight=w)
    assert typed.model_.schema is not None and plain.model_.schema is None
    t = demo["target_numeric"]
    np.testing.assert_allclose(typed.predict(t), plain.predict(t.to_numpy()), rtol=1e-9)


def test_iw_cross_validate_on_typed_frames_equals_a_sklearn_pipeline(demo):
    s, y = demo["source"], demo["y_source"]
    w = _weights(s)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # every level and the gaps occur in every training fold
        ours = sw.iw_cross_validate(sw.WeightedRidge(l2=1.0), s, y, w, cv=5, scoring="squared_error", seed=0)
    # reference: the encoding refitted on each training fold (_ReferenceEncoder) followed by
    # sklearn.linear_model.Ridge(alpha=1), on the same folds and weights
    ref = sw.iw_cross_validate(
        make_pipeline(_ReferenceEncoder(), Ridge(alpha=1.0)), s, y, w, cv=5, scoring="squared_error", seed=0
    )
    np.testing.assert_allclose(ours.per_fold, ref.per_fold, rtol=1e-9)
    assert ours.estimate == pytest.approx(ref.estimate, rel=1e-9)


def test_iw_cross_validate_on_numeric_frames_agrees_with_the_matrix_path(demo):
    x, y = demo["source_numeric"], demo["y_source"]
    w = _weights(x)
    for frame in (x, pl.from_pandas(x)):
        a = sw.iw_cross_validate(sw.WeightedRidge(), frame, y, w, cv=4, scoring="squared_error", seed=2)
        b = sw.iw_cross_validate(sw.WeightedRidge(), x.to_numpy(), y, w, cv=4, scoring="squared_error", seed=2)
        assert np.array_equal(a.per_fold, b.per_fold) and a.estimate == b.estimate


def test_iw_cross_validate_on_polars_and_pyarrow_typed_frames(demo):
    s, y = demo["source"], demo["y_source"]
    w = _weights(s)
    base = sw.iw_cross_validate(sw.WeightedRidge(), s, y, w, cv=3, scoring="squared_error", seed=1)
    for frame in (pl.from_pandas(s), pa.Table.from_pandas(s, preserve_index=False)):
        other = sw.iw_cross_validate(sw.WeightedRidge(), frame, y, w, cv=3, scoring="squared_error", seed=1)
        assert np.array_equal(base.per_fold, other.per_fold)
