"""Fit on a sample on one machine, score every row everywhere: Dask with worker processes."""

import numpy as np
import pytest

import shiftweight as sw

pd = pytest.importorskip("pandas")
dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("dask.distributed")


def _score_partition(part, est):
    return pd.Series(est.ratio(part), index=part.index, dtype="float64")


def test_dask_local_cluster_scores_partitions_identically():
    d = sw.demo_data(1500, 800, seed=3, as_frame=True)
    est = sw.LeastSquaresRatio(n_basis=40).fit(d["source"], d["target"])
    big = sw.demo_data(20000, 10, seed=4, as_frame=True)["source"]
    want = est.ratio(big)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        with distributed.Client(cluster):
            ddf = dd.from_pandas(big, npartitions=6)
            scored = ddf.map_partitions(_score_partition, est, meta=("weight", "float64"))
            got = scored.compute().to_numpy()
    np.testing.assert_array_equal(got, want)


def test_polars_frame_matches_numpy():
    pl = pytest.importorskip("polars")
    d = sw.demo_data(400, 300, seed=5)
    src = pl.DataFrame(d["source"], schema=d["feature_names"], orient="row")
    tgt = pl.DataFrame(d["target"], schema=d["feature_names"], orient="row")
    a = sw.LeastSquaresRatio(n_basis=30).fit(src, tgt)
    b = sw.LeastSquaresRatio(n_basis=30).fit(d["source"], d["target"])
    np.testing.assert_array_equal(a.source_weights_, b.source_weights_)
    assert list(a.feature_names_in_) == d["feature_names"]
    # A text column is a categorical column of a typed table; one the target lacks is named.
    with pytest.raises(sw.ShiftweightError, match="`target` has no column named `town`"):
        sw.LeastSquaresRatio().fit(src.with_columns(pl.lit("x").alias("town")), tgt)
