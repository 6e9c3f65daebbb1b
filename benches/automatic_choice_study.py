"""Measures the automatic choice's selection rules on the cases of docs/automatic-choice.md.

For each rule (score x stable choice x tail guard) and each case, prints what the weights it
hands over do downstream, next to uniform weights and every single estimator:

- demo: ``sw.demo_data()`` (2,000 source, 1,000 target rows); target MSE of a weighted linear fit
  of daily kWh (the demo's target labels exist only because its data are invented);
- gauss1d: source N(1, 0.5^2), target N(2, 0.25^2), 250 rows a side, six seeds; NMSE of the
  weights against the analytic ratio at 2,000 fresh source rows (scipy.stats.norm);
- cancer: selection bias on scikit-learn's bundled breast-cancer data (Zadrozny 2004 set-up,
  known ratio 1 / s(x)), six seeds; NMSE at the source rows;
- sinc: misspecified linear fit of sinc(x) under the same Gaussian shift, 150 source rows
  (setting of Sugiyama, Krauledat & Mueller 2007), six seeds; target MSE;
- diabetes / cancer_clf: selection bias on scikit-learn's bundled diabetes (regression, target
  MSE of a weighted linear fit) and breast-cancer data (classification, target log-loss of a
  weighted logistic regression), six seeds.

Single estimators are shown with their raw weights. Run from the repository root:

    nice .venv/bin/python benches/automatic_choice_study.py [--seeds 6] [--cases demo,gauss1d,...]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.metrics import log_loss
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
import _shift_cases as cases  # noqa: E402

import shiftweight as sw  # noqa: E402

RULES = {
    "raw J (before)": dict(score="least_squares", prefer_stable=False, tail_k=1.0),
    "capped J": dict(score="capped_least_squares", prefer_stable=False, tail_k=1.0),
    "capped J + k<0.7": dict(score="capped_least_squares", prefer_stable=False, tail_k=0.7),
    "capped J + k<0.7 + 1SE-ESS": dict(score="capped_least_squares", prefer_stable=True, tail_k=0.7),
    "capped J + k<1 + 1SE-ESS": dict(score="capped_least_squares", prefer_stable=True, tail_k=1.0),
    "relative PE + k<0.7 + 1SE-ESS": dict(score="relative_pearson", prefer_stable=True, tail_k=0.7),
}

SINGLES = {
    "ulsif": lambda: sw.LeastSquaresRatio(),
    "rulsif_0.1": lambda: sw.LeastSquaresRatio(alpha=0.1),
    "kliep": lambda: sw.KLRatio(),
    "clf_linear": lambda: sw.ClassifierRatio(l2=None),
    "clf_quadratic": lambda: sw.ClassifierRatio(features="quadratic", l2=None),
    "clf_fourier": lambda: sw.ClassifierRatio(features="fourier"),
    "kmm": lambda: sw.KernelMeanMatching(),
}


def weighted_linear_mse(xs, ys, xt, yt, w):
    m = LinearRegression().fit(xs, ys, sample_weight=w)
    return float(np.mean((m.predict(xt) - yt) ** 2))


def weighted_logistic_loss(xs, ys, xt, yt, w):
    m = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    m.fit(xs, ys, logisticregression__sample_weight=w)
    return float(log_loss(yt, m.predict_proba(xt)[:, 1], labels=[0, 1]))


def case_rows(name, seed):
    """(source, target, judge) where judge(estimator fitted or None, source weights) -> risk."""
    if name == "demo":
        d = sw.demo_data()
        s, t = d["source"], d["target"]
        return s, t, lambda est, w: weighted_linear_mse(s, d["y_source"], t, d["y_target"], w)
    if name == "gauss1d":
        s, t, e, truth = cases.gaussian_1d(250, seed)
        return s, t, lambda est, w: cases.nmse(np.ones(len(e)) if est is None else est.ratio(e), truth)
    if name == "cancer":
        s, t, truth = cases.breast_cancer_selection(seed)
        return s, t, lambda est, w: cases.nmse(w, truth)
    if name == "sinc":
        xs, ys, _, xt, yt, _ = cases.sinc_regression_toy(seed)
        return xs, xt, lambda est, w: weighted_linear_mse(xs, ys, xt, yt, w)
    if name == "diabetes":
        xs, ys, xt, yt, _ = cases.labelled_selection("diabetes", seed, columns=(2, 3))
        return xs, xt, lambda est, w: weighted_linear_mse(xs, ys, xt, yt, w)
    if name == "cancer_clf":
        xs, ys, xt, yt, _ = cases.labelled_selection("breast_cancer", seed)
        return xs, xt, lambda est, w: weighted_logistic_loss(xs, ys, xt, yt, w)
    raise ValueError(name)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--seeds", type=int, default=6)
    ap.add_argument("--cases", default="demo,gauss1d,cancer,sinc,diabetes,cancer_clf")
    ap.add_argument("--no-singles", action="store_true")
    ap.add_argument("--rules", default="", help="comma-separated rule labels (default: all)")
    args = ap.parse_args()
    names = args.cases.split(",")
    for case in names:
        seeds = [0] if case == "demo" else list(range(args.seeds))
        risks: dict = {}
        picks: dict = {}
        t0 = time.perf_counter()
        for seed in seeds:
            s, t, judge = case_rows(case, seed)
            risks.setdefault("uniform", []).append(judge(None, np.ones(len(s))))
            if not args.no_singles:
                for label, make in SINGLES.items():
                    if label == "kmm" and case == "gauss1d":
                        continue  # transductive: no weights at the fresh evaluation rows
                    est = make().fit(s, t)
                    risks.setdefault(label, []).append(judge(est, est.source_weights_))
            chosen_rules = [r for r in args.rules.split(",") if r] or list(RULES)
            for label, rule in ((k, RULES[k]) for k in chosen_rules):
                auto = sw.AutoRatio(seed=seed, **rule).fit(s, t)
                risks.setdefault(label, []).append(judge(auto, auto.source_weights_))
                cap = "" if auto.cap_ is None else f"@{auto.cap_:.3g}"
                picks.setdefault(label, []).append(f"{auto.chosen_}{cap}")
        print(f"\n## {case} ({len(seeds)} seed(s), {time.perf_counter() - t0:.0f} s)")
        print(f"{'weights':32s} {'mean risk':>10s} {'worst':>10s}  chosen")
        for label, v in risks.items():
            print(f"{label:32s} {np.mean(v):10.4f} {np.max(v):10.4f}  {' '.join(picks.get(label, []))}")


if __name__ == "__main__":
    main()
