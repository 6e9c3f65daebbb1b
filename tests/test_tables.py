"""Typed tables: pandas, polars and pyarrow inputs with text, categorical, boolean and missing
values through the estimators, feature_shift and shift_test; scoring by column name; checks
against known ratios, a real dataset and scipy."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa  # type: ignore[import-untyped]
import pytest
from scipy import stats

import shiftweight as sw

LEVELS = np.array(["gas", "heat_pump", "oil"])


def mixed_frame(n, p_levels, mean, seed, missing=0.05):
    """Heating type (categorical, level shares `p_levels`) x temperature N(mean, 1), independent,
    with a boolean and a few missing temperatures."""
    rng = np.random.default_rng(seed)
    heating = rng.choice(LEVELS, size=n, p=p_levels)
    temp = rng.normal(mean, 1.0, n)
    temp_obs = temp.copy()
    temp_obs[rng.random(n) < missing] = np.nan
    weekend = rng.random(n) < 2 / 7
    df = pd.DataFrame({"heating": heating, "temp": temp_obs, "weekend": weekend})
    return df, heating, temp


P_S = np.array([0.5, 0.3, 0.2])
P_T = np.array([0.2, 0.3, 0.5])


def true_ratio(heating, temp, shift=0.5):
    # Product of the level-frequency ratio and the ratio of N(shift, 1) to N(0, 1) densities:
    # exp(shift x - shift^2 / 2) (normal density formula).
    q = dict(zip(LEVELS, P_T / P_S))
    return np.array([q[h] for h in heating]) * np.exp(shift * temp - shift**2 / 2)


def nmse(est, truth):
    e, t = est / est.mean(), truth / truth.mean()
    return float(np.mean((e - t) ** 2) / np.mean(t**2))


def test_pandas_polars_pyarrow_give_bitwise_identical_weights():
    s, _, _ = mixed_frame(200, P_S, 0.0, 1)
    t, _, _ = mixed_frame(150, P_T, 0.5, 2)
    s["tariff"] = pd.Categorical(np.where(np.arange(200) % 3 == 0, "night", "flat"))
    t["tariff"] = pd.Categorical(np.where(np.arange(150) % 2 == 0, "night", "flat"))
    s.loc[5, "heating"] = None
    t["kwh"] = pd.array([1, None] * 75, dtype="Int64")
    s["kwh"] = pd.array([2, 3, None, 4] * 50, dtype="Int64")
    out = {}
    for name, conv in {
        "pandas": lambda d: d,
        "polars": pl.from_pandas,
        "pyarrow": lambda d: pa.Table.from_pandas(d, preserve_index=False),
    }.items():
        for est in (sw.ClassifierRatio(folds=3), sw.LeastSquaresRatio(n_basis=40)):
            m = est.fit(conv(s), conv(t))
            out.setdefault(type(est).__name__, []).append((name, m.ratio(conv(t)), m.source_weights_))
    for kind, rows in out.items():
        base = rows[0]
        for other in rows[1:]:
            assert np.array_equal(base[1], other[1]), (kind, other[0])
            assert np.array_equal(base[2], other[2]), (kind, other[0])


def test_scoring_by_name_unseen_levels_and_missing_columns():
    s, _, _ = mixed_frame(200, P_S, 0.0, 3)
    t, _, _ = mixed_frame(150, P_T, 0.5, 4)
    m = sw.ClassifierRatio(folds=3).fit(s, t)
    w = m.ratio(t)
    shuffled = t[["weekend", "temp", "heating"]].assign(extra="ignored")
    assert np.array_equal(m.ratio(shuffled), w)
    odd = t.head(4).copy()
    odd.loc[odd.index[1], "heating"] = "wood"
    with pytest.warns(UserWarning, match="wood"):
        w2 = m.ratio(odd)
    assert w2.shape == (4,) and np.all(np.isfinite(w2))
    assert m.unseen_ == [{"column": "heating", "level": "wood", "rows": 1, "first_row": 1}]
    with pytest.raises(sw.ShiftweightError, match="`X` has no column named `heating`"):
        m.ratio(t[["temp", "weekend"]])
    again = sw.from_json(m.to_json())
    assert np.array_equal(again.ratio(t), w)
    assert json.loads(m.to_json())["version"] == 2


def test_identifier_column_is_refused_and_overrides_apply():
    s, _, _ = mixed_frame(60, P_S, 0.0, 5)
    t, _, _ = mixed_frame(60, P_T, 0.5, 6)
    s["meter"] = [f"m{i}" for i in range(60)]
    t["meter"] = [f"n{i}" for i in range(60)]
    with pytest.raises(sw.ShiftweightError, match=r"`meter`.*identifier"):
        sw.ClassifierRatio(folds=2).fit(s, t)
    s2, t2 = s.drop(columns="meter"), t.drop(columns="meter")
    s2["zone"], t2["zone"] = np.arange(60) % 3, np.arange(60) % 2
    m = sw.ClassifierRatio(folds=2).fit(s2, t2, categorical=["zone"])
    assert "zone=0" in list(m.feature_names_in_)


@pytest.mark.parametrize(
    "make",
    [lambda: sw.ClassifierRatio(folds=5), lambda: sw.LeastSquaresRatio()],
    ids=["classifier", "ulsif"],
)
def test_mixed_table_known_ratio_nmse_small_and_falls_with_n(make):
    # Source: heating shares P_S, temperature N(0, 1); target: shares P_T, N(0.5, 1). The true
    # ratio is the product of the share ratio and the normal density ratio (see true_ratio).
    errs = []
    for n in (300, 3000):
        s, hs, ts = mixed_frame(n, P_S, 0.0, 10 + n, missing=0.0)
        t, _, _ = mixed_frame(n, P_T, 0.5, 20 + n, missing=0.0)
        s = s.astype({"weekend": str})
        t = t.astype({"weekend": str})
        m = make().fit(s, t)
        errs.append(nmse(m.ratio(s), true_ratio(hs, ts)))
    assert errs[1] < errs[0], errs
    assert errs[1] < 0.1, errs


def test_palmer_penguins_selection_on_island():
    # Palmer penguins (Gorman, Williams & Fraser 2014, PLoS ONE 9(3): e90081), as shipped by the
    # palmerpenguins package. Source rows are kept with a known probability s(x) that depends on
    # the island; the target is the whole table, so the true weight is proportional to 1/s(x)
    # (Zadrozny 2004).
    from palmerpenguins import load_penguins

    df = load_penguins().drop(columns=["year"])
    keep_prob = {"Biscoe": 0.9, "Dream": 0.5, "Torgersen": 0.15}
    s_x = df["island"].map(keep_prob).to_numpy()
    rng = np.random.default_rng(7)
    source = df[rng.random(len(df)) < s_x].reset_index(drop=True)
    w = sw.ClassifierRatio(folds=5).fit(source, df).ratio(source)
    inv = 1.0 / source["island"].map(keep_prob).to_numpy()
    rho = stats.spearmanr(w, inv).statistic
    assert rho > 0.5, rho
    table = sw.feature_shift(source, df, repeats=2)
    assert table.features[0] == "island", table.to_pandas().head()


def test_chi_square_and_missing_rate_match_scipy():
    s, _, _ = mixed_frame(400, P_S, 0.0, 30, missing=0.05)
    t, _, _ = mixed_frame(300, P_T, 0.0, 31, missing=0.15)
    rows = {r["feature"]: r for r in sw.feature_shift(s, t, repeats=1).to_dict()["rows"]}
    # Chi-square of the 2 x 3 table of level counts: scipy.stats.chi2_contingency.
    counts = np.array([[np.sum(d["heating"] == lv) for lv in LEVELS] for d in (s, t)])
    ref = stats.chi2_contingency(counts)
    assert rows["heating"]["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
    assert rows["heating"]["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
    # Two-proportion z-test of the missing rates, pooled variance, with scipy.stats.norm.
    k1, k2 = int(s["temp"].isna().sum()), int(t["temp"].isna().sum())
    n1, n2 = len(s), len(t)
    p = (k1 + k2) / (n1 + n2)
    z = (k2 / n2 - k1 / n1) / np.sqrt(p * (1 - p) * (1 / n1 + 1 / n2))
    miss = rows["temp (missing)"]
    assert miss["statistic"] == pytest.approx(z, rel=1e-12)
    assert miss["p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-9)
    assert miss["missing_source"] == pytest.approx(k1 / n1)


def test_shift_test_on_tables():
    s, _, _ = mixed_frame(200, P_S, 0.0, 40)
    t, _, _ = mixed_frame(200, P_T, 0.0, 41)
    res = sw.shift_test(pl.from_pandas(s), pl.from_pandas(t), permutations=49)
    assert res.p_value <= 0.05
    same = sw.shift_test(s, mixed_frame(200, P_S, 0.0, 42)[0], permutations=49)
    assert same.p_value > 0.01


def test_check_overlap_counts_levels_absent_from_the_source():
    s, _, _ = mixed_frame(100, P_S, 0.0, 50, missing=0.0)
    t, _, _ = mixed_frame(80, P_T, 0.0, 51, missing=0.0)
    t.loc[t.index[:6], "heating"] = "wood"
    t.loc[t.index[3:10], "temp"] = np.nan
    w = np.ones(len(t))
    rep = sw.check_overlap(w, source=s, target=t)
    gaps = {(g["column"], g["level"]): g["target_rows"] for g in rep.support_gaps}
    assert gaps == {("heating", "wood"): 6, ("temp", None): 7}
    assert rep.n_outside_support == 10  # rows 0-9: 6 with "wood", 7 missing, 3 with both
    assert rep.flagged
    assert any("`heating`" in m and "wood" in m for m in rep.warnings)


def test_public_functions_take_the_demo_tables(tmp_path):
    # The demo's recorded tables (categorical `heating`, gaps in `home_age_years`) through every
    # public function that takes rows (the learners: tests/test_learn_tables.py).
    d = sw.demo_data(300, 150, seed=1, as_frame=True)
    s, t = d["source"], d["target"]
    rows = {r["feature"]: r for r in sw.feature_shift(s, t, repeats=2).to_dict()["rows"]}
    # The heating row is the chi-square of the 2 x 4 table of level counts:
    # scipy.stats.chi2_contingency (every expected count is above 5 here, so nothing is pooled).
    counts = np.array([[np.sum(x["heating"] == lv) for lv in x["heating"].cat.categories] for x in (s, t)])
    ref = stats.chi2_contingency(counts)
    assert ref.expected_freq.min() >= 5
    assert rows["heating"]["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
    assert np.isfinite(rows["heating"]["auc_drop"])
    assert "home_age_years (missing)" in rows
    assert sw.shift_test(s, t, permutations=19).p_value <= 0.05  # smallest p is 1/20
    est = sw.LeastSquaresRatio(n_basis=40).fit(s, t)
    # Every level and the gaps occur in the source, so no target row is outside its support.
    rep = sw.check_overlap(est.ratio(t), source=s, target=t)
    assert rep.n_outside_support == 0 and rep.support_gaps == []
    summary = sw.write_report(s, t, tmp_path / "r.html", permutations=9)
    assert "heating" in (tmp_path / "r.html").read_text() and summary
    model = sw.WeightedRidge().fit(s, d["y_source"], sample_weight=est.ratio(s))
    assert "heating=gas" in model.feature_names_in_ and model.predict(t).shape == (len(t),)
