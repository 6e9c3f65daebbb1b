"""Fitted models across processes and threads: spawn, fork after use, thread-count independence."""

import multiprocessing as mp

import numpy as np
import pytest

import shiftweight as sw


def _data():
    rng = np.random.default_rng(0)
    return rng.normal(0, 1, (400, 3)), rng.normal(0.5, 1, (300, 3)), rng.normal(0.2, 1, (5000, 3))


def _score(args):
    est, x = args
    return est.ratio(x)


def _fit_and_score(_):
    s, t, x = _data()
    return sw.LeastSquaresRatio(n_basis=30).fit(s, t).ratio(x)


def test_spawned_workers_get_identical_ratios():
    s, t, x = _data()
    est = sw.LeastSquaresRatio(n_basis=30).fit(s, t)
    want = est.ratio(x)
    with mp.get_context("spawn").Pool(2) as pool:
        got = pool.map(_score, [(est, x[:2500]), (est, x[2500:])])
    np.testing.assert_array_equal(np.concatenate(got), want)


@pytest.mark.skipif("fork" not in mp.get_all_start_methods(), reason="fork start method unavailable")
def test_fork_after_using_the_thread_pool_does_not_hang():
    s, t, x = _data()
    want = sw.LeastSquaresRatio(n_basis=30).fit(s, t).ratio(x)  # the parent's pool is now running
    with mp.get_context("fork").Pool(2) as pool:
        result = pool.map_async(_fit_and_score, range(2))
        got = result.get(timeout=120)  # a hang fails here instead of blocking the suite
    for g in got:
        np.testing.assert_array_equal(g, want)


def test_results_do_not_depend_on_the_thread_count():
    s, t, x = _data()
    before = sw.get_threads()
    try:
        out = []
        for n in (1, 2, 3):
            sw.set_threads(n)
            assert sw.get_threads() == n
            est = sw.LeastSquaresRatio(n_basis=30).fit(s, t)
            out.append((est.source_weights_, est.ratio(x)))
        for w, r in out[1:]:
            np.testing.assert_array_equal(w, out[0][0])
            np.testing.assert_array_equal(r, out[0][1])
    finally:
        sw.set_threads(0)
    assert sw.get_threads() == before
