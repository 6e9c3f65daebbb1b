"""sw.plot: every function returns an Axes with the numbers it claims (Agg backend, no display)."""

import subprocess
import sys

import numpy as np
import pytest

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.axes import Axes  # noqa: E402

import shiftweight as sw  # noqa: E402


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _texts(ax):
    return "\n".join(t.get_text() for t in ax.texts)


def test_importing_shiftweight_does_not_import_matplotlib():
    code = (
        "import sys, shiftweight as sw\n"
        "assert 'matplotlib' not in sys.modules, 'imported by shiftweight'\n"
        "p = sw.plot\n"
        "assert 'matplotlib' not in sys.modules, 'imported by shiftweight.plot'\n"
        "print(p.__name__)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "shiftweight.plot"


def test_weights_histogram_annotates_kish_ess_and_pareto_k():
    rng = np.random.default_rng(3)
    w = rng.lognormal(0.0, 1.0, 500)
    ax = sw.plot.weights(w)
    assert isinstance(ax, Axes)
    assert ax.get_xscale() == "log"
    ess = w.sum() ** 2 / (w**2).sum()  # reference: Kish (1965), (sum w)^2 / sum w^2 with numpy
    assert abs(sw.effective_sample_size(w) - ess) < 1e-9 * ess
    text = _texts(ax)
    # Whole rows, rounded half away from zero: the one rule of reports and messages.
    assert f"ESS {int(np.floor(ess + 0.5))} of 500 rows" in text
    assert f"Pareto k {sw.pareto_k(w):.2f}" in text
    # every positive weight is counted once in the histogram
    assert sum(p.get_height() for p in ax.patches) == 500


def test_weights_histogram_reports_zero_weights_and_uses_given_axes():
    _fig, ax0 = plt.subplots()
    w = np.r_[np.zeros(3), np.ones(10)]
    ax = sw.plot.weights(w, ax=ax0)
    assert ax is ax0
    text = _texts(ax)
    assert "3 zero weight(s) not shown" in text
    assert "ESS 10 of 13 rows" in text  # (10)^2 / 10 = 10 by hand (Kish 1965)
    assert "n/a" in text  # fewer than ~25 rows: no tail fit


def test_clip_tradeoff_accepts_report_or_raw_weights():
    rng = np.random.default_rng(4)
    w = rng.lognormal(0.0, 1.2, 400)
    t = sw.clip_tradeoff(w)
    ax1 = sw.plot.clip_tradeoff(t)
    ax2 = sw.plot.clip_tradeoff(w)
    for ax in (ax1, ax2):
        assert isinstance(ax, Axes)
        (line,) = ax.get_lines()
        np.testing.assert_array_equal(line.get_xdata(), t.column("quantile"))
        np.testing.assert_array_equal(line.get_ydata(), t.column("ess_fraction"))
    # the unclipped level (quantile 1) has the Kish ESS fraction of the raw weights
    last = t.column("quantile") == 1.0
    ess_frac = w.sum() ** 2 / (w**2).sum() / w.size  # reference: Kish (1965) with numpy
    assert abs(t.column("ess_fraction")[last][0] - ess_frac) < 1e-9


def test_feature_shift_bars_one_per_feature_with_table_effects():
    rng = np.random.default_rng(5)
    src = rng.normal(0, 1, (300, 4))
    tgt = rng.normal(0, 1, (300, 4)) + [0.0, 0.8, 0.0, -0.4]
    table = sw.feature_shift(src, tgt, feature_names=["a", "b", "c", "d"], repeats=1)
    ax = sw.plot.feature_shift(table)
    assert isinstance(ax, Axes)
    assert len(ax.patches) == 4
    widths = [p.get_width() for p in ax.patches][::-1]  # most-shifted is drawn at the top
    np.testing.assert_allclose(widths, [r["smd"] for r in table.rows])
    assert [t.get_text() for t in ax.get_yticklabels()][::-1] == table.features
    # the planted +0.8 sd shift of "b" shows as the largest bar, with the right sign
    # reference: analytic, mean shift of 0.8 unit-variance sd
    b = table.features.index("b")
    assert 0.5 < widths[b] < 1.1
    ax_top = sw.plot.feature_shift(table, top=2)
    assert len(ax_top.patches) == 2


def test_ratio_along_follows_the_estimator_with_others_at_median():
    rng = np.random.default_rng(6)
    src = rng.normal(0, 1, (300, 2))
    tgt = rng.normal(0, 1, (300, 2)) + [1.0, 0.0]
    est = sw.LeastSquaresRatio(n_basis=40).fit(src, tgt)
    ax = sw.plot.ratio_along(est, src, 0, points=25)
    assert isinstance(ax, Axes)
    line = ax.get_lines()[0]
    grid = np.linspace(*np.percentile(src[:, 0], [1, 99]), 25)  # reference: numpy.percentile
    query = np.column_stack([grid, np.full(25, np.median(src[:, 1]))])  # reference: numpy.median
    np.testing.assert_allclose(line.get_xdata(), grid)
    np.testing.assert_allclose(line.get_ydata(), est.ratio(query))
    # the target sits to the right on feature 0, so the ratio rises along it
    # reference: analytic, N(1,1)/N(0,1) = exp(x - 1/2) is increasing
    y = np.asarray(line.get_ydata())
    assert y[-1] > y[0]


def test_ratio_along_uses_column_names_of_frames():
    pd = pytest.importorskip("pandas")
    f = sw.demo_data(300, 200, seed=2, as_frame=True)
    d = {"source": f["source_numeric"], "target": f["target_numeric"]}  # complete numeric view
    est = sw.LeastSquaresRatio(n_basis=30).fit(d["source"], d["target"])
    ax = sw.plot.ratio_along(est, d["source"], "outdoor_temp_c", points=10)
    assert ax.get_xlabel() == "outdoor_temp_c"
    assert isinstance(d["source"], pd.DataFrame)
    with pytest.raises(ValueError, match="not a column"):
        sw.plot.ratio_along(est, d["source"], "no_such_column")


def test_ratio_along_takes_typed_tables():
    # The demo's recorded tables: `heating` categorical, gaps in `home_age_years`. The curve is the
    # estimator's own ratio at rows built from typical values, so it must equal est.ratio on a
    # frame made by hand (pandas median of present values, most frequent level).
    pd = pytest.importorskip("pandas")
    d = sw.demo_data(300, 200, seed=2, as_frame=True)
    src = d["source"]
    est = sw.LeastSquaresRatio(n_basis=30).fit(src, d["target"])
    ax = sw.plot.ratio_along(est, src, "home_age_years", points=7)
    y = ax.lines[0].get_ydata()
    present = src["home_age_years"].dropna().to_numpy()
    grid = np.linspace(*np.percentile(present, [1.0, 99.0]), 7)
    rows = pd.DataFrame({c: [src[c].median()] * 7 for c in src.columns if c != "heating"})
    rows["heating"] = pd.Categorical([src["heating"].mode()[0]] * 7, categories=src["heating"].cat.categories)
    rows["home_age_years"] = grid
    np.testing.assert_array_equal(y, est.ratio(rows))
    with pytest.raises(ValueError, match="'heating' is not numeric"):
        sw.plot.ratio_along(est, src, "heating")
