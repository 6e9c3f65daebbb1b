"""Reproducibility for an audit: the same inputs, seed and thread count give bitwise-identical
weights across runs and across Python, the CLI (the Rust core driven from files) and a model file
passed between them.

The CLI binary is read from target/debug (build it with `cargo build -p shiftweight-cli`); the
CLI tests are skipped with a message when it is missing.
"""

from __future__ import annotations

import json
import pathlib
import subprocess

import numpy as np
import pytest

import shiftweight as sw

ROOT = pathlib.Path(__file__).resolve().parents[1]
CLI = ROOT / "target" / "debug" / "shiftweight"
needs_cli = pytest.mark.skipif(not CLI.exists(), reason="build the CLI first: cargo build -p shiftweight-cli")

RNG = np.random.default_rng(5)
SOURCE = RNG.normal(0.0, 1.0, (150, 3))
TARGET = RNG.normal(0.0, 1.0, (120, 3)) + [0.7, 0.0, -0.3]
NEW = RNG.normal(0.3, 1.0, (40, 3))
NAMES = ["a", "b", "c"]


def write_csv(path, x, names=NAMES):
    # repr() is the shortest text that reads back to the same double, so the CLI parses exactly
    # the values Python holds.
    lines = [",".join(names)] + [",".join(repr(float(v)) for v in row) for row in x]
    path.write_text("\n".join(lines) + "\n")


def read_weights(path):
    lines = path.read_text().splitlines()
    assert lines[0] == "weight"
    return np.array([float(v) for v in lines[1:]])


def run_cli(*args):
    proc = subprocess.run([str(CLI), "--quiet", *map(str, args)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return proc


def python_weights(threads, seed=0):
    before = sw.get_threads()
    try:
        sw.set_threads(threads)
        est = sw.LeastSquaresRatio(n_basis=40, seed=seed).fit(SOURCE, TARGET)
        return est, est.source_weights_.copy(), est.ratio(NEW)
    finally:
        sw.set_threads(before if before else 0)


def test_repeated_python_fits_are_bitwise_identical():
    _, w1, r1 = python_weights(2, seed=4)
    _, w2, r2 = python_weights(2, seed=4)
    np.testing.assert_array_equal(w1, w2)
    np.testing.assert_array_equal(r1, r2)
    for make in (lambda: sw.KLRatio(n_basis=30, folds=3, seed=4), lambda: sw.ClassifierRatio(folds=3, seed=4)):
        a, b = make().fit(SOURCE, TARGET), make().fit(SOURCE, TARGET)
        np.testing.assert_array_equal(a.source_weights_, b.source_weights_)
        assert a.to_json() == b.to_json()


@needs_cli
@pytest.mark.parametrize("threads", [1, 2])
def test_cli_weigh_equals_python_bitwise(tmp_path, threads):
    write_csv(tmp_path / "source.csv", SOURCE)
    write_csv(tmp_path / "target.csv", TARGET)
    write_csv(tmp_path / "new.csv", NEW)
    run_cli(
        "--threads", threads, "--seed", 0, "weigh",
        "--source", tmp_path / "source.csv", "--target", tmp_path / "target.csv",
        "--estimator", "lsif", "--n-basis", 40,
        "--out", tmp_path / "w.csv", "--model", tmp_path / "model.json",
    )
    est, w_py, r_py = python_weights(threads)
    w_cli = read_weights(tmp_path / "w.csv")
    np.testing.assert_array_equal(w_cli, w_py)

    # The CLI's model file, loaded in Python, is the same model: identical weights and ratios.
    loaded = sw.from_json((tmp_path / "model.json").read_text())
    np.testing.assert_array_equal(loaded.source_weights_, w_py)
    np.testing.assert_array_equal(loaded.ratio(NEW), r_py)
    assert json.loads(loaded.to_json())["model"]["form"] == json.loads(est.to_json())["model"]["form"]

    # Scoring new rows with the saved model from the CLI equals Python's ratio.
    run_cli(
        "--threads",
        threads,
        "apply",
        "--model",
        tmp_path / "model.json",
        "--input",
        tmp_path / "new.csv",
        "--out",
        tmp_path / "r.csv",
    )
    np.testing.assert_array_equal(read_weights(tmp_path / "r.csv"), r_py)


@needs_cli
def test_cli_weights_do_not_depend_on_the_thread_count(tmp_path):
    write_csv(tmp_path / "source.csv", SOURCE)
    write_csv(tmp_path / "target.csv", TARGET)
    out = []
    for threads in (1, 2, 3):
        dest = tmp_path / f"w{threads}.csv"
        run_cli(
            "--threads",
            threads,
            "weigh",
            "--source",
            tmp_path / "source.csv",
            "--target",
            tmp_path / "target.csv",
            "--estimator",
            "rulsif",
            "--alpha",
            0.2,
            "--n-basis",
            30,
            "--out",
            dest,
        )
        out.append(read_weights(dest))
    for w in out[1:]:
        np.testing.assert_array_equal(w, out[0])


@needs_cli
def test_cli_exit_codes_for_bad_input_and_io(tmp_path):
    write_csv(tmp_path / "source.csv", SOURCE)
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b,c\n1,2,x\n")
    common = ["weigh", "--source", tmp_path / "source.csv", "--estimator", "lsif", "--out", tmp_path / "w.csv"]
    p = subprocess.run([str(CLI), "--quiet", *map(str, common), "--target", str(bad)], capture_output=True, text=True)
    assert p.returncode == 2 and "panicked" not in p.stderr, p.stderr
    p = subprocess.run(
        [str(CLI), "--quiet", *map(str, common), "--target", str(tmp_path / "missing.csv")],
        capture_output=True,
        text=True,
    )
    assert p.returncode == 3 and "panicked" not in p.stderr, p.stderr
    (tmp_path / "m.json").write_text('{"format": "shiftweight.ratio-model", "version": 9, "model": {}}')
    p = subprocess.run(
        [
            str(CLI),
            "--quiet",
            "apply",
            "--model",
            str(tmp_path / "m.json"),
            "--input",
            str(bad),
            "--out",
            str(tmp_path / "r.csv"),
        ],
        capture_output=True,
        text=True,
    )
    assert p.returncode == 2 and "version 9" in p.stderr, p.stderr
    assert not (tmp_path / "r.csv").exists()  # nothing half-written
