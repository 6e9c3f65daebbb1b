"""`shiftweight class-mix` writes the same estimate as the Python ``sw.LabelShift`` and
``sw.class_mix_test`` on the same probabilities (the library is the reference: one core, two
front doors), reads CSV and Parquet with columns by name, writes its report section, and on bad
input exits with status 2 naming the column and row, writing nothing."""

import pathlib
import subprocess

import numpy as np
import pytest

import shiftweight as sw


def _proba(rng: np.random.Generator, n: int, share: float) -> tuple[np.ndarray, np.ndarray]:
    # Invented scores: class 1 scores about +1, class 0 about -1; probabilities by a logistic map.
    y = (rng.random(n) < share).astype(int)
    s = rng.normal(2.0 * y - 1.0, 1.0)
    p1 = 1.0 / (1.0 + np.exp(-2.0 * s))
    return y, np.column_stack([1.0 - p1, p1])


def _write_inputs(tmp_path: pathlib.Path) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(4)
    ys, ps = _proba(rng, 400, 0.3)
    _, pt = _proba(rng, 300, 0.7)
    names = ["p_no", "p_yes"]
    # Columns in another order than --columns, and an extra column, to check reading by name.
    with open(tmp_path / "s.csv", "w") as f:
        f.write("p_yes,note,label,p_no\n")
        f.write("".join(f"{b!r},x,{names[y]},{a!r}\n" for y, (a, b) in zip(ys, ps.tolist())))
    with open(tmp_path / "t.csv", "w") as f:
        f.write("id,p_no,p_yes\n" + "".join(f"r{i},{a!r},{b!r}\n" for i, (a, b) in enumerate(pt.tolist())))
    return ys, ps, pt


def _run(cli: pathlib.Path, cwd: pathlib.Path, *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(cli), "class-mix", *args], cwd=cwd, capture_output=True, text=True)


def _read(path: pathlib.Path) -> np.ndarray:
    return np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")


def test_class_mix_matches_python_and_writes_files(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    ys, ps, pt = _write_inputs(tmp_path)
    args = ["--source", "s.csv", "--label", "label", "--target", "t.csv", "--columns", "p_no,p_yes"]
    out = ["--out", "mix.csv", "--json", "mix.json", "--weights", "w.csv", "--adjusted", "adj.csv", "--key", "id"]
    run = _run(cli, tmp_path, *args, *out, "--report", "mix.html", "--seed", "3")
    assert run.returncode == 0, run.stderr
    assert "covariate shift" in run.stdout and "p(x | y)" in run.stdout
    classes = ["p_no", "p_yes"]
    labels = np.where(ys == 1, "p_yes", "p_no")
    est = sw.LabelShift(seed=3, classes=classes).fit(ps, labels, pt)
    from_cli = sw.LabelShiftResult.from_json((tmp_path / "mix.json").read_text())
    assert from_cli == est.result_
    table = _read(tmp_path / "mix.csv")
    assert list(table["class"]) == classes
    np.testing.assert_array_equal(table["target_share"], est.target_proportions_)
    assert est.interval_ is not None
    low, high = est.interval_
    np.testing.assert_array_equal(table["interval_low"], low)
    np.testing.assert_array_equal(table["interval_high"], high)
    np.testing.assert_array_equal(table["class_weight"], est.class_weights_)
    w = _read(tmp_path / "w.csv")
    np.testing.assert_array_equal(w["weight"], est.sample_weight(labels))
    adj = _read(tmp_path / "adj.csv")
    assert adj["id"][0] == "r0" and adj["id"][-1] == f"r{len(pt) - 1}"
    np.testing.assert_array_equal(np.column_stack([adj["p_no"], adj["p_yes"]]), est.adjust_probabilities(pt))
    # The printed mix test is the library's (default 2,000 permutations when counts are small).
    test = sw.class_mix_test(ps, pt, seed=3)
    p_text = f"{test.p_value:.4f}" if test.p_value >= 1e-4 else f"{test.p_value:.1e}"
    assert f"p = {p_text}" in run.stdout
    page = (tmp_path / "mix.html").read_text()
    assert 'id="label-shift"' in page and "p(x | y)" in page and "p_yes" in page
    assert "loads nothing from elsewhere" in page


def test_class_mix_bbse_and_parquet(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    ys, ps, pt = _write_inputs(tmp_path)
    pq.write_table(pa.table({"y": ys, "a": ps[:, 0], "b": ps[:, 1]}), tmp_path / "s.parquet")
    pq.write_table(pa.table({"a": pt[:, 0], "b": pt[:, 1]}), tmp_path / "t.parquet")
    args = ["--source", "s.parquet", "--label", "y", "--target", "t.parquet", "--columns", "a,b"]
    run = _run(cli, tmp_path, *args, "--method", "bbse", "--out", "mix.csv", "--json", "mix.json", "--quiet")
    assert run.returncode == 0, run.stderr
    est = sw.LabelShift(method="bbse", classes=["a", "b"]).fit(ps, np.where(ys == 1, "b", "a"), pt)
    assert sw.LabelShiftResult.from_json((tmp_path / "mix.json").read_text()) == est.result_
    assert run.stdout == ""


def test_class_mix_bad_input_writes_nothing(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    _write_inputs(tmp_path)
    common = ["--target", "t.csv", "--columns", "p_no,p_yes", "--out", "bad_mix.csv", "--report", "bad.html"]
    # A label that is neither a column name nor a class number.
    (tmp_path / "bad.csv").write_text("label,p_no,p_yes\np_no,0.9,0.1\nmaybe,0.5,0.5\n")
    bad = _run(cli, tmp_path, "--source", "bad.csv", "--label", "label", *common)
    assert bad.returncode == 2 and "`label`" in bad.stderr and "maybe" in bad.stderr and "data row 2" in bad.stderr
    # A probability that is not a number names the file, row and column.
    (tmp_path / "text.csv").write_text("label,p_no,p_yes\np_no,0.9,0.1\np_yes,high,0.5\n")
    bad = _run(cli, tmp_path, "--source", "text.csv", "--label", "label", *common)
    assert bad.returncode == 2 and "`p_no`" in bad.stderr and "data row 2" in bad.stderr
    # A row that does not sum to 1 (core check) and a missing label column.
    (tmp_path / "sum.csv").write_text("label,p_no,p_yes\np_no,0.9,0.3\np_yes,0.2,0.8\n")
    bad = _run(cli, tmp_path, "--source", "sum.csv", "--label", "label", *common)
    assert bad.returncode == 2 and "source_probabilities" in bad.stderr and "row 0" in bad.stderr
    bad = _run(cli, tmp_path, "--source", "s.csv", "--label", "klass", *common)
    assert bad.returncode == 2 and "`klass`" in bad.stderr
    assert not (tmp_path / "bad_mix.csv").exists() and not (tmp_path / "bad.html").exists()
    assert not list(tmp_path.glob(".*partial"))


def test_class_mix_drop_missing(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    ys, ps, pt = _write_inputs(tmp_path)
    lines = (tmp_path / "t.csv").read_text().splitlines()
    lines[3] = "r2,NA,NA"  # data row 3
    (tmp_path / "t_gap.csv").write_text("\n".join(lines) + "\n")
    args = ["--source", "s.csv", "--label", "label", "--target", "t_gap.csv", "--columns", "p_no,p_yes"]
    bad = _run(cli, tmp_path, *args, "--out", "mix.csv")
    assert bad.returncode == 2 and "data row 3" in bad.stderr and "--drop-missing" in bad.stderr
    run = _run(cli, tmp_path, *args, "--out", "mix.csv", "--json", "mix.json", "--drop-missing", "--seed", "3")
    assert run.returncode == 0, run.stderr
    assert "dropped 0 source and 1 target rows" in run.stdout
    keep = np.delete(pt, 2, axis=0)
    est = sw.LabelShift(seed=3, classes=["p_no", "p_yes"]).fit(ps, np.where(ys == 1, "p_yes", "p_no"), keep)
    assert sw.LabelShiftResult.from_json((tmp_path / "mix.json").read_text()) == est.result_
