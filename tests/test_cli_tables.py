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
