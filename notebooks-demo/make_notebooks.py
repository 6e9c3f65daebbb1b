"""Writes the demo notebooks (without outputs) from the cells below: `python make_notebooks.py`.

Edit the cells here, not the .ipynb files; tests/test_notebooks.py executes the notebooks.
The data are the invented demo scenario of shiftweight (sw.demo_data): household electricity use
in a mild coastal town (source, labelled) and a colder inland town (target).
"""

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

HERE = Path(__file__).resolve().parent

CAUTIONS = """**Before you rely on any of this**

- Importance weighting corrects *covariate shift* only: the inputs change, the rule linking inputs to
  the outcome does not. It cannot fix label shift or a changed rule (concept shift).
- It needs *support overlap*: every kind of target row must also occur in the source. Where the
  source has no rows like a target row, weights are guesses.
- Validate on labelled target data as soon as any exist. Here the demo provides target labels so
  that the estimates can be checked; in practice you would not have them yet.
- When the model feeds decisions about people (credit, health, hiring), the regulations and review
  processes of your domain come first."""

NB1 = [
    new_markdown_cell(
        """# Detect, weigh, diagnose and stabilise

An (invented) electricity supplier has a model of daily household consumption fitted on a mild
coastal town. It wants to use the model for an inland town with colder winters, larger and older
homes and more electric heating. This notebook asks, in order:

1. Do the inland households differ from the coastal ones, and in which features?
2. How much should each coastal household count to represent the inland town? (importance
   weights w(x) = p_target(x) / p_source(x))
3. Are those weights trustworthy, and how much do they cost in effective sample size?
4. How can extreme weights be tamed, and at what price?

"""
        + CAUTIONS
    ),
    new_code_cell(
        """import matplotlib
matplotlib.use("Agg")  # draws without a display; remove this line in an interactive session
import numpy as np
import shiftweight as sw

sw.set_threads(2)
d = sw.demo_data(n_source=800, n_target=400, seed=0, as_frame=True)
source, target = d["source"], d["target"]  # DataFrames: `heating` is categorical, some ages missing
source.describe(include="all").round(2)"""
    ),
    new_markdown_cell(
        """## 1. Is there a shift?

`sw.shift_test` trains a classifier to tell source rows from target rows. If it does better than
chance (AUC above 0.5 by more than sampling noise), the inputs differ. A small p-value only says
that they differ, not by how much that matters."""
    ),
    new_code_cell(
        """test = sw.shift_test(source, target, permutations=50, seed=0)
test"""
    ),
    new_markdown_cell(
        """## Where is the shift?

`sw.feature_shift` runs one two-sample test per feature (p-values adjusted for testing several
features) and reports effect sizes in standard deviations, most-shifted first. The bar chart shows
the standardised mean difference, target minus source."""
    ),
    new_code_cell(
        """table = sw.feature_shift(source, target, repeats=2, seed=0)
table"""
    ),
    new_code_cell("""sw.plot.feature_shift(table);"""),
    new_markdown_cell(
        """## 2. Estimate the weights, choosing the estimator from the data

Several estimators can produce w(x): uLSIF and RuLSIF fit the ratio directly as a sum of kernels,
and a classifier that tells source from target rows gives it through its odds. `sw.AutoRatio`
scores each candidate on rows it did not see, without labels, by the held-out least-squares
criterion J(w) = 1/2 mean_source(w^2) - mean_target(w), which differs from the squared error to the
true ratio by a constant, so lower is better. Each candidate chooses its own hyperparameters on
the other folds. Equal weights (J = -0.5) are always a candidate and are kept unless another
candidate beats them by more than one standard error. The winner is refitted on all rows.

The default candidates are uLSIF, RuLSIF and the classifier with linear, quadratic and random
Fourier features; `candidates=` takes your own list."""
    ),
    new_code_cell(
        """auto = sw.AutoRatio(seed=0).fit(source, target)
print("chosen:", auto.chosen_)
auto.score_table()  # best first; std_error is over the held-out folds"""
    ),
    new_markdown_cell(
        """How to read the table: a score far below the others *with a standard error of the same size*
comes from a few held-out rows with very large weights. It still wins the comparison, but it
says that the target has rows the source barely covers, where the ratio is huge and hard to
estimate. Keep that in mind for the diagnosis below.

The chosen estimator, refitted on all rows, is `auto.chosen_estimator_` (None if equal weights
won); `auto` itself scores new rows with it. The source weights are what weighted training will
use."""
    ),
    new_code_cell(
        """est = auto  # scores new rows with the refitted winner
w = auto.source_weights_
w[:5]"""
    ),
    new_markdown_cell(
        """The fitted ratio along one feature, the others held at their median: inland homes are
colder, so coastal households on cold days should count more."""
    ),
    new_code_cell("""sw.plot.ratio_along(est, source, "outdoor_temp_c");"""),
    new_markdown_cell(
        """## 3. Diagnose

A few very large weights make any weighted estimate noisy. The *effective sample size* (Kish)
says how many equally weighted rows the weights are worth; the *Pareto k* of the largest weights
says whether their tail is tame (below 0.5), usable (0.5 to 0.7) or unreliable (above 0.7; the
limit is lower for a few hundred weights, and the diagnosis prints the one that applies)."""
    ),
    new_code_cell(
        """diag = sw.diagnose(w)
diag"""
    ),
    new_code_cell("""sw.plot.weights(w);"""),
    new_markdown_cell(
        """Overlap: what share of the *target* rows does the source barely cover? A large share means
weighting cannot help there, whatever the method."""
    ),
    new_code_cell("""sw.check_overlap(est.ratio(target))"""),
    new_markdown_cell(
        """## 4. Stabilise

Clipping the largest weights raises the effective sample size (less variance) but moves weight
away from the rows the target needs most (more bias). The table and the curve show the trade-off;
`clip_for_ess` picks the least clipping that reaches a chosen effective sample size."""
    ),
    new_code_cell(
        """tradeoff = sw.clip_tradeoff(w)
tradeoff"""
    ),
    new_code_cell("""sw.plot.clip_tradeoff(tradeoff);"""),
    new_code_cell(
        """level = sw.clip_for_ess(w, 0.5)
w_stable, report = sw.stabilize(w, upper=level["upper"], return_report=True)
print(report)
print("ESS before:", round(sw.effective_sample_size(w), 1), " after:", round(sw.effective_sample_size(w_stable), 1))"""
    ),
    new_markdown_cell(
        """The stabilised weights are the input of the second notebook, which retrains the model with
them and checks, on the demo's target labels, whether that helped."""
    ),
]

NB2 = [
    new_markdown_cell(
        """# Retrain with weights and evaluate

The first notebook estimated how much each coastal (source) household should count to represent
the inland (target) town. Here we use those weights to

1. estimate how well a model will do on the target *before* target labels exist
   (importance-weighted cross-validation),
2. compare training with and without the weights,
3. fit the weighted model and, because this is a demo, check it against the target labels,
4. put prediction intervals on target rows that keep their coverage under the shift.

"""
        + CAUTIONS
    ),
    new_code_cell(
        """import numpy as np
import shiftweight as sw
from sklearn.linear_model import Ridge

sw.set_threads(2)
d = sw.demo_data(n_source=800, n_target=400, seed=0, as_frame=True)
records, records_target = d["source"], d["target"]  # as recorded: `heating` categorical, gaps
source, target = d["source_numeric"], d["target_numeric"]  # the same rows as numbers, for Ridge
y_source = d["y_source"]  # daily kWh of the coastal households
y_target = d["y_target"]  # known only because this is a demo; unknown in practice

est = sw.AutoRatio(seed=0).fit(records, records_target)  # the automatic choice of the first notebook
w = sw.stabilize(est.source_weights_, upper_quantile=0.99)
sw.diagnose(w)"""
    ),
    new_markdown_cell(
        """## 1. Target performance before target labels

`iw_cross_validate` scores each held-out fold with the weights, so the average estimates the
error on the *target* population. The model is a plain linear model (scikit-learn's `Ridge`); the
true consumption rule is not linear, so where the model is evaluated matters."""
    ),
    new_code_cell(
        """model = Ridge(alpha=1.0)
risk = sw.iw_cross_validate(model, source, y_source, w, cv=5, scoring="squared_error", seed=0)
risk"""
    ),
    new_markdown_cell(
        """## 2. Weighted or not?

`compare_weighting` trains the model with and without the weights on the same folds and scores
both with the weights. The verdict needs a difference larger than two standard errors; "no clear
difference" is a common and honest outcome."""
    ),
    new_code_cell(
        """comparison = sw.compare_weighting(model, source, y_source, w, cv=5, scoring="squared_error", seed=0)
comparison"""
    ),
    new_markdown_cell(
        """## 3. Fit and check against the target labels

Fit once with and once without the weights, then measure the squared error on the target rows.
In practice this step waits until some target labels exist; do not skip it then."""
    ),
    new_code_cell(
        """weighted = Ridge(alpha=1.0).fit(source, y_source, sample_weight=w)
plain = Ridge(alpha=1.0).fit(source, y_source)
for name, m in [("weighted", weighted), ("unweighted", plain)]:
    print(name, sw.weighted_metric(y_target, m.predict(target), metric="squared_error"))
print("IWCV estimate of the weighted model's target error:", round(risk.estimate, 3))"""
    ),
    new_markdown_cell(
        """Compare the IWCV estimate with the error measured on the target labels. In this scenario the
overlap check of the first notebook flags a large share of target rows as barely covered by the
source: errors there are invisible to any estimate built from source rows, so expect IWCV to be
optimistic. This is exactly why labelled target data must have the last word."""
    ),
    new_markdown_cell(
        """## 4. Prediction intervals for target rows

Weighted split conformal prediction: calibrate the residuals on source rows the model did not
see, weighted towards the target. The intervals aim to contain 90% of target outcomes. Target
rows far from any source row get wide (or infinite) intervals: that is the method being honest
about missing overlap."""
    ),
    new_code_cell(
        """n = len(source)
fit_rows, cal_rows = np.arange(n) < n // 2, np.arange(n) >= n // 2
m = Ridge(alpha=1.0).fit(source[fit_rows], y_source[fit_rows], sample_weight=w[fit_rows])
intervals = sw.conformal_intervals(
    m, source[cal_rows], y_source[cal_rows], est.ratio(records[cal_rows]), target, est.ratio(records_target),
    alpha=0.1,
)
print(intervals)
print("share of target outcomes covered (demo labels):", round(float(intervals.covers(y_target).mean()), 3))"""
    ),
    new_markdown_cell(
        """Read the measured coverage together with the number of infinite intervals. Rows with an
infinite interval are covered trivially, which says nothing useful about them; many such rows push
the share above 90%. The share can also fall short of 90%: the guarantee assumes the weights are
right, and weights are extrapolations where the source barely covers the target."""
    ),
]


def write(cells, name):
    nb = new_notebook(cells=cells)
    for i, cell in enumerate(nb.cells):
        cell.id = f"cell-{i:02d}"  # stable ids: regenerating does not churn the files
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    nbformat.validate(nb)
    nbformat.write(nb, str(HERE / name))


if __name__ == "__main__":
    write(NB1, "01_detect_weigh_diagnose.ipynb")
    write(NB2, "02_retrain_and_evaluate.ipynb")
