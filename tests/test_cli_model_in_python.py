"""A model file written by the `shiftweight` command loads in Python and gives the same ratios."""

import subprocess

import numpy as np

import shiftweight as sw


def _write(path, names, x):
    np.savetxt(path, x, delimiter=",", header=",".join(names), comments="", fmt="%.17g")


def test_cli_model_file_scores_like_the_cli_and_the_library(cli, tmp_path):
    d = sw.demo_data(300, 200, seed=11)
    names = d["feature_names"]
    _write(tmp_path / "s.csv", names, d["source"])
    _write(tmp_path / "t.csv", names, d["target"])
    def run(*a):
        return subprocess.run([str(cli), *a], cwd=tmp_path, capture_output=True, text=True)
    r = run("weigh", "--source", "s.csv", "--target", "t.csv", "--estimator", "lsif",
            "--out", "w.csv", "--model", "m.json")
    assert r.returncode == 0, r.stderr
    r = run("apply", "--model", "m.json", "--input", "t.csv", "--out", "a.csv")
    assert r.returncode == 0, r.stderr
    est = sw.from_json((tmp_path / "m.json").read_text())
    cli_ratios = np.loadtxt(tmp_path / "a.csv", delimiter=",", skiprows=1)
    np.testing.assert_array_equal(est.ratio(d["target"]), cli_ratios)
    # The same fit from Python: identical source weights (same data, seed and thread-independent sums).
    cli_weights = np.loadtxt(tmp_path / "w.csv", delimiter=",", skiprows=1)
    lib = sw.LeastSquaresRatio(seed=0).fit(d["source"], d["target"])
    np.testing.assert_array_equal(lib.source_weights_, cli_weights)
    assert list(est.feature_names_in_) == names
