"""Stabilising weights: sw.stabilize against formulas evaluated with numpy."""

import math
import pickle

import numpy as np
import pytest
from scipy import stats

import shiftweight as sw


def heavy(n, xi, seed):
    # reference: scipy.stats.genpareto (GPD with shape xi, scale 1)
    return stats.genpareto.rvs(c=xi, size=n, random_state=seed)


def tail_size(n):
    # M = ceil(min(0.2 n, 3 sqrt(n))) (Vehtari et al. 2024, PSIS; from memory)
    return math.ceil(min(0.2 * n, 3 * math.sqrt(n)))


def test_normalisation_gives_mean_one_and_keeps_proportions():
    w = heavy(3001, 0.6, 1)
    out = sw.stabilize(w)
    assert abs(out.mean() - 1.0) < 1e-12  # reference: numpy.mean
    np.testing.assert_allclose(out, w / w.mean(), rtol=1e-12)  # reference: numpy, w / mean(w)


def test_bounds_hold_after_normalisation():
    w = heavy(2000, 0.9, 2)
    out, rep = sw.stabilize(w, lower=0.2, upper=5.0, return_report=True)
    assert abs(out.mean() - 1.0) < 1e-12
    assert out.min() >= 0.2 and out.max() <= 5.0
    assert [s["step"] for s in rep.steps] == ["lower", "upper", "normalize"]
    assert rep.upper_used == 5.0 and rep.lower_used == 0.2
    # The rows at the bounds are exactly those the report counts.
    assert rep.steps[0]["rows_changed"] == int((out == 0.2).sum())
    assert rep.steps[1]["rows_changed"] == int((out == 5.0).sum())
    # Rows strictly inside keep their proportions to the input (one common scale).
    inside = (out > 0.2) & (out < 5.0)
    ratio = out[inside] / w[inside]
    np.testing.assert_allclose(ratio, ratio[0], rtol=1e-12)


def test_truncation_follows_ionides():
    # Ionides (2008): truncate at sqrt(n) * mean weight.
    w = heavy(2500, 1.0, 3)
    n = w.shape[0]
    raw = sw.stabilize(w, truncate=True, normalize=False)
    np.testing.assert_allclose(raw, np.minimum(w, math.sqrt(n) * w.mean()), rtol=1e-12)  # reference: numpy
    out = sw.stabilize(w, truncate=True)
    assert abs(out.mean() - 1.0) < 1e-12
    assert out.max() <= math.sqrt(n)  # after normalisation the mean is 1, so the level is sqrt(n)
    assert (out == math.sqrt(n)).sum() >= 1


def test_quantile_clipping_and_flattening_match_numpy():
    w = heavy(1000, 0.5, 4)
    out = sw.stabilize(w, upper_quantile=0.9, normalize=False)
    np.testing.assert_allclose(out, np.minimum(w, np.quantile(w, 0.9)), rtol=1e-12)  # reference: numpy.quantile
    out = sw.stabilize(w, power=0.5)
    ref = np.sqrt(w)  # Shimodaira (2000) flattening w^lambda, lambda = 0.5
    np.testing.assert_allclose(out, ref / ref.mean(), rtol=1e-12)
    flat = sw.stabilize(np.array([0.0, 2.0, 8.0]), power=0.0)
    np.testing.assert_allclose(flat, [0.0, 1.5, 1.5])  # zero weights stay zero


def test_pareto_smoothing_keeps_order_and_changes_only_the_tail():
    n = 4000
    w = heavy(n, 0.9, 5)
    out, rep = sw.stabilize(w, smooth=True, normalize=False, return_report=True)
    m = tail_size(n)
    order = np.argsort(w, kind="stable")
    # Below the tail: untouched.
    np.testing.assert_array_equal(out[order[: n - m]], w[order[: n - m]])
    # Order kept (non-decreasing along the input order of the weights).
    assert np.all(np.diff(out[order]) >= 0)
    changed = int((out != w).sum())
    assert 0 < changed <= m
    assert rep.steps[0]["step"] == "smooth" and rep.steps[0]["rows_changed"] == changed
    assert rep.smoothing_k is not None and 0.5 < rep.smoothing_k < 1.4
    assert out.max() <= w.max()
    # Smoothing lowers the variance of the heavy tail's weights (the point of PSIS): ESS rises.
    assert sw.effective_sample_size(out) > sw.effective_sample_size(w)


def test_pareto_smoothing_leaves_short_tails_alone():
    w = np.array([3.0, 1.0, 2.0, 50.0, 4.0, 0.5, 7.0, 1.5, 2.5, 9.0])
    out, rep = sw.stabilize(w, smooth=True, normalize=False, return_report=True)
    np.testing.assert_array_equal(out, w)
    assert rep.steps[0]["rows_changed"] == 0
    assert "left unchanged" in rep.steps[0]["note"]


def test_tied_weights_stay_tied_after_smoothing():
    w = heavy(2000, 0.8, 6)
    top = np.argsort(w)[-3:]
    w[top] = w[top].max()  # three tied largest weights
    out = sw.stabilize(w, smooth=True, normalize=False)
    assert np.unique(out[top]).size == 1


@pytest.mark.parametrize(
    "kwargs, name",
    [
        (dict(power=1.5), "power"),
        (dict(upper=0.5), "upper"),
        (dict(lower=2.0), "lower"),
        (dict(upper_quantile=0.0), "upper_quantile"),
        (dict(upper_quantile=1.5), "upper_quantile"),
    ],
)
def test_bad_options_name_the_argument(kwargs, name):
    with pytest.raises(sw.ShiftweightError, match=f"`{name}`"):
        sw.stabilize([1.0, 2.0, 3.0], **kwargs)


def test_bad_weights_are_rejected():
    with pytest.raises(sw.ShiftweightError, match="entry 1"):
        sw.stabilize([1.0, -2.0])
    with pytest.raises(sw.ShiftweightError, match="all weights are zero"):
        sw.stabilize([0.0, 0.0])
    with pytest.raises(sw.ShiftweightError, match=r"non-finite|finite"):
        sw.stabilize([1.0, np.nan])
    with pytest.raises(sw.ShiftweightError, match="1-D"):
        sw.stabilize(np.ones((2, 2)))


def test_report_round_trips_and_prints():
    _, rep = sw.stabilize([1.0, 2.0, 30.0, 4.0], upper=2.0, return_report=True)
    again = pickle.loads(pickle.dumps(rep))
    assert again.to_dict() == rep.to_dict()
    assert "upper" in repr(rep) and "<table>" in rep._repr_html_()
