"""The command line reads Parquet files written by pyarrow and by polars (zstd and snappy pages,
dictionary-encoded text, nulls) as exactly the same typed rows as the same data in CSV: the
weights written by `shiftweight weigh` are identical whichever file was read."""

import pathlib
import subprocess

import numpy as np
import pytest

pa = pytest.importorskip("pyarrow")
pacsv = pytest.importorskip("pyarrow.csv")
pq = pytest.importorskip("pyarrow.parquet")
pl = pytest.importorskip("polars")

LEVELS = ["gas", "heat pump", "oil", "district"]


def _rows(n: int, shift: float, seed: int) -> dict:
    """Invented household rows: two numbers (values with 3 decimals, so CSV text reads back
    exactly), a heating type whose mix moves with ``shift``, and a few gaps in each."""
    rng = np.random.default_rng(seed)
    x1 = np.round(rng.normal(shift, 1.0, n), 3)
    x2 = np.round(rng.normal(0.0, 1.0, n), 3).tolist()
    p = np.array([4.0, 1.0 + 3.0 * shift, 2.0, 1.0])
    heating = [LEVELS[k] for k in rng.choice(4, size=n, p=p / p.sum())]
    for i in range(3, n, 29):
        x2[i] = None
        heating[i + 1 if i + 1 < n else i] = None
    return {"x1": x1.tolist(), "x2": x2, "heating": heating}


def _weigh(cli: pathlib.Path, cwd: pathlib.Path, source: str, target: str) -> np.ndarray:
    r = subprocess.run(
        [str(cli), "--quiet", "weigh", "--source", source, "--target", target,
         "--estimator", "lsif", "--out", "w.csv"],
        cwd=cwd, capture_output=True, text=True,
    )
    assert r.returncode == 0, r.stderr
    return np.loadtxt(cwd / "w.csv", delimiter=",", skiprows=1)


def test_parquet_from_pyarrow_and_polars_reads_like_csv(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    src, tgt = _rows(240, 0.0, seed=1), _rows(200, 0.6, seed=2)
    pacsv.write_csv(pa.table(src), tmp_path / "s.csv")
    pacsv.write_csv(pa.table(tgt), tmp_path / "t.csv")
    reference = _weigh(cli, tmp_path, "s.csv", "t.csv")
    assert reference.shape == (240,) and np.all(np.isfinite(reference))

    # pyarrow: plain strings with snappy; dictionary-encoded strings with zstd.
    pq.write_table(pa.table(src), tmp_path / "s_pa_snappy.parquet", compression="snappy")
    dict_table = pa.table(
        {**src, "heating": pa.array(src["heating"]).dictionary_encode()}
    )
    assert pa.types.is_dictionary(dict_table.schema.field("heating").type)
    pq.write_table(dict_table, tmp_path / "s_pa_zstd.parquet", compression="zstd")
    # polars: a Categorical column (written as a dictionary) with zstd, and strings with snappy.
    frame = pl.DataFrame(src).with_columns(pl.col("heating").cast(pl.Categorical))
    frame.write_parquet(tmp_path / "s_pl_zstd.parquet", compression="zstd")
    pl.DataFrame(src).write_parquet(tmp_path / "s_pl_snappy.parquet", compression="snappy")

    for name in ["s_pa_snappy", "s_pa_zstd", "s_pl_zstd", "s_pl_snappy"]:
        w = _weigh(cli, tmp_path, f"{name}.parquet", "t.csv")
        np.testing.assert_array_equal(w, reference, err_msg=name)

    # The text column is read as categorical with its levels and its gaps counted.
    r = subprocess.run([str(cli), "columns", "--input", "s_pl_zstd.parquet"],
                       cwd=tmp_path, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    line = next(ln for ln in r.stdout.splitlines() if ln.startswith("heating"))
    n_gaps = sum(v is None for v in src["heating"])
    assert line.split()[1:3] == ["categorical", str(n_gaps)], r.stdout


def test_types_can_be_given_on_the_command_line(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    (tmp_path / "t.csv").write_text("code,size\n01,1.5\n02,x\n10,2\n")

    def run(*a: str) -> subprocess.CompletedProcess:
        return subprocess.run([str(cli), "columns", "--input", "t.csv", *a],
                              cwd=tmp_path, capture_output=True, text=True)

    r = run()
    assert r.returncode == 0, r.stderr
    kinds = {ln.split()[0]: ln.split()[1] for ln in r.stdout.splitlines()[2:]}
    assert kinds == {"code": "numeric", "size": "categorical"}, r.stdout
    # --categorical keeps the text as written (leading zeros); --numeric refuses text by row.
    r = run("--categorical", "code")
    assert r.returncode == 0 and '"01"' in r.stdout, r.stdout + r.stderr
    r = run("--numeric", "size")
    assert r.returncode == 2
    assert "data row 2" in r.stderr and "`size`" in r.stderr and "--categorical size" in r.stderr


def test_weights_as_parquet_equal_the_csv_weights(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    # `weigh` and `apply` write Parquet for a .parquet name; pyarrow.parquet.read_table reads it
    # back, and the values are bitwise the CSV output's (CSV text of a float64 reads back exactly).
    src, tgt = _rows(240, 0.0, seed=3), _rows(200, 0.6, seed=4)
    src["id"] = [f"h{i:04d}" for i in range(240)]
    pacsv.write_csv(pa.table(src), tmp_path / "s.csv")
    pacsv.write_csv(pa.table(tgt), tmp_path / "t.csv")

    def run(*a: str) -> None:
        r = subprocess.run([str(cli), "--quiet", *a], cwd=tmp_path, capture_output=True, text=True)
        assert r.returncode == 0, r.stderr

    for out in ["w.csv", "w.parquet"]:
        run("weigh", "--source", "s.csv", "--target", "t.csv", "--key", "id", "--estimator", "lsif",
            "--out", out, "--model", "m.json")
    want = pacsv.read_csv(tmp_path / "w.csv")
    got = pq.read_table(tmp_path / "w.parquet")
    assert got.column_names == ["id", "weight"]
    assert got.schema.field("weight").type == pa.float64()
    assert got.column("id").to_pylist() == src["id"]
    np.testing.assert_array_equal(got.column("weight").to_numpy(), want.column("weight").to_numpy())

    # apply: 5,000 rows in chunks of 2,048, so the Parquet file holds several record batches.
    new = _rows(5000, 0.3, seed=5)
    pacsv.write_csv(pa.table(new), tmp_path / "new.csv")
    for out in ["a.csv", "a.pq"]:
        run("apply", "--model", "m.json", "--input", "new.csv", "--out", out, "--chunk-rows", "2048")
    want = pacsv.read_csv(tmp_path / "a.csv").column("weight").to_numpy()
    got = pq.read_table(tmp_path / "a.pq")
    assert got.column_names == ["weight"] and got.num_rows == 5000
    np.testing.assert_array_equal(got.column("weight").to_numpy(), want)
    assert not list(tmp_path.glob(".*.partial")), "no temporary file is left behind"


def test_cli_weights_on_text_and_gaps_equal_the_library(cli: pathlib.Path, tmp_path: pathlib.Path) -> None:
    # The same CSV files (text column, empty cells) through `shiftweight weigh` and through
    # sw.LeastSquaresRatio().fit on pandas.read_csv frames, same seed and options: the same
    # typed rows, the same encoding, bitwise the same weights.
    pd = pytest.importorskip("pandas")
    import shiftweight as sw

    src, tgt = _rows(240, 0.0, seed=6), _rows(200, 0.6, seed=7)
    pacsv.write_csv(pa.table(src), tmp_path / "s.csv")
    pacsv.write_csv(pa.table(tgt), tmp_path / "t.csv")
    assert ",," in (tmp_path / "s.csv").read_text() or '""' in (tmp_path / "s.csv").read_text()
    r = subprocess.run(
        [str(cli), "--quiet", "--seed", "4", "weigh", "--source", "s.csv", "--target", "t.csv",
         "--estimator", "lsif", "--n-basis", "60", "--out", "w.csv"],
        cwd=tmp_path, capture_output=True, text=True,
    )
    assert r.returncode == 0, r.stderr
    cli_w = np.loadtxt(tmp_path / "w.csv", delimiter=",", skiprows=1)
    s, t = pd.read_csv(tmp_path / "s.csv"), pd.read_csv(tmp_path / "t.csv")
    assert s["heating"].isna().any() and s["x2"].isna().any()
    est = sw.LeastSquaresRatio(n_basis=60, seed=4).fit(s, t)
    np.testing.assert_array_equal(cli_w, est.source_weights_)


def test_parquet_levels_keep_their_order_of_first_appearance(
    cli: pathlib.Path, tmp_path: pathlib.Path
) -> None:
    # 70,000 rows, more than one 65,536-row batch, written four ways: dictionary pages whose
    # dictionary is in reverse order of appearance (one row group, and row groups of 30,000 rows
    # so that a batch spans row groups), plain (non-dictionary) pages, and small pages. A level first seen in
    # the third row group and one first seen after the first batch must still come in order of
    # first appearance (pandas.unique returns uniques in order of appearance), with the nulls
    # counted (pyarrow's null_count), exactly as the same rows read from CSV; `apply` with a key
    # gives bitwise the CSV weights and the same keys.
    pd = pytest.importorskip("pandas")
    n = 70_000
    rng = np.random.default_rng(11)
    x1 = np.round(rng.normal(0.0, 1.0, n), 3)
    heating = np.array(["gas", "heat pump"], dtype=object)[rng.integers(0, 2, n)]
    heating[40_000::7] = "oil"       # first seen in the second row group
    heating[66_000::5] = "district"  # first seen after the first 65,536-row batch
    heating[::31] = None
    tab = pa.table({
        "id": [f"r{i}" for i in range(n)],
        "x1": x1,
        "heating": pa.array(heating.tolist(), type=pa.string()),
    })
    order = list(pd.unique(pd.Series(heating).dropna()))
    assert sorted(order[:2]) == ["gas", "heat pump"] and order[2:] == ["oil", "district"]
    gaps = tab.column("heating").null_count
    pacsv.write_csv(tab, tmp_path / "rows.csv")
    reversed_dict = pa.DictionaryArray.from_arrays(
        pa.array([None if v is None else order[::-1].index(v) for v in heating], type=pa.int32()),
        pa.array(order[::-1]),
    )
    # The dictionary column once in one row group (its dictionary pages kept as written, in
    # reverse order of appearance) and once in row groups of 30,000 rows.
    pq.write_table(tab.set_column(2, "heating", reversed_dict), tmp_path / "dict.parquet")
    pq.write_table(tab.set_column(2, "heating", reversed_dict), tmp_path / "dict_groups.parquet",
                   row_group_size=30_000, compression="snappy")
    pq.write_table(tab, tmp_path / "plain.parquet", row_group_size=30_000, use_dictionary=False,
                   compression="zstd")
    pq.write_table(tab, tmp_path / "pages.parquet", row_group_size=30_000, data_page_size=4096)
    assert pq.ParquetFile(tmp_path / "dict_groups.parquet").metadata.num_row_groups == 3
    assert pq.read_table(tmp_path / "dict.parquet").column("heating").chunk(0).dictionary.to_pylist() == order[::-1]

    def run(*a: str) -> str:
        r = subprocess.run([str(cli), "--quiet", *a], cwd=tmp_path, capture_output=True, text=True)
        assert r.returncode == 0, r.stderr
        return r.stdout

    def table_lines(name: str) -> list:
        return run("columns", "--input", name, "--key", "id").splitlines()[1:]

    want = table_lines("rows.csv")
    line = next(ln for ln in want if ln.startswith("heating"))
    assert line.split()[1:3] == ["categorical", str(gaps)], want
    assert line.split(None, 4)[4] == "(" + ", ".join(f'"{v}"' for v in order) + ")", want
    for name in ["dict.parquet", "dict_groups.parquet", "plain.parquet", "pages.parquet"]:
        assert table_lines(name) == want, name

    small = tab.slice(0, 300)
    pacsv.write_csv(small.slice(0, 150), tmp_path / "s.csv")
    pacsv.write_csv(small.slice(150, 150), tmp_path / "t.csv")
    run("weigh", "--source", "s.csv", "--target", "t.csv", "--key", "id", "--estimator", "lsif",
        "--out", "fit.csv", "--model", "m.json")
    run("apply", "--model", "m.json", "--input", "rows.csv", "--key", "id", "--out", "a.csv")
    ref = pacsv.read_csv(tmp_path / "a.csv")
    assert ref.num_rows == n
    for name in ["dict.parquet", "dict_groups.parquet", "plain.parquet", "pages.parquet"]:
        run("apply", "--model", "m.json", "--input", name, "--key", "id", "--out", "a.pq")
        got = pq.read_table(tmp_path / "a.pq")
        assert got.column("id").to_pylist() == tab.column("id").to_pylist(), name
        np.testing.assert_array_equal(got.column("weight").to_numpy(),
                                      ref.column("weight").to_numpy(), err_msg=name)
