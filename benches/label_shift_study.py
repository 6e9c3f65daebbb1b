"""Interval coverage and accuracy of the label-shift estimates (EM on calibrated probabilities and
BBSE) on simulated label shift over scikit-learn's bundled data sets.

Each replicate (seeded) splits the rows of a data set at random into a labelled source half and a
target pool; the target is drawn from the pool without replacement with class counts
~ Multinomial(n_t, q) for a known mix q, so target rows are independent draws of p(x | y) and the
truth is the population mix q. Two ways of producing the probabilities are compared:

- ``oof``: out-of-fold probabilities on the source (``sw.out_of_fold_proba``, 5 folds) and target
  probabilities from a classifier refitted on all source rows (the confusion matrix and the
  calibration are then measured on other models than the one that scores the target);
- ``held-out``: the source half is split again; a classifier fitted on one part scores the other
  part (the labelled rows passed to ``LabelShift``) and the target (one model for both).

Per data set and way it prints, for EM and BBSE: the share of (replicate, class) checks whose
``level`` interval holds the true share (and a Monte-Carlo standard error), the mean L1 error
sum_j |q_hat_j - q_j| and how often EM's error is at most BBSE's. The classifier is
scikit-learn's ``LogisticRegression`` (C = 0.1) after ``StandardScaler``.

    .venv/bin/python benches/label_shift_study.py --replicates 100

Takes a few minutes on 2 cores (``--only digits`` etc. to run one data set).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from sklearn import datasets
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import StratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import shiftweight as sw

# Target mixes (invented, far from each source mix); the same as tests/test_label_shift.py.
TARGET_MIX = {
    "breast_cancer": np.array([0.75, 0.25]),  # source about (0.37, 0.63)
    "wine": np.array([0.6, 0.3, 0.1]),  # source about (0.33, 0.40, 0.27)
    "digits": np.arange(1, 11) / 55.0,  # source about uniform
}
LOADERS = {
    "breast_cancer": datasets.load_breast_cancer,
    "wine": datasets.load_wine,
    "digits": datasets.load_digits,
}


def classifier():
    return make_pipeline(StandardScaler(), LogisticRegression(C=0.1, max_iter=2000))


def draw_target(rng, y, pool, q, n_target=None):
    """Target row indices from ``pool``: class counts ~ Multinomial(n_t, q), without replacement."""
    by_class = [pool[y[pool] == j] for j in range(len(q))]
    fit = int(min(len(b) / qj for b, qj in zip(by_class, q) if qj > 0) * 0.9)
    n_t = fit if n_target is None else n_target
    counts = np.minimum(rng.multinomial(n_t, q), [len(b) for b in by_class])
    return np.concatenate([rng.choice(b, size=c, replace=False) for b, c in zip(by_class, counts)])


def simulate(x, y, q, seed, way):
    """(source probabilities, source labels, target probabilities) of one replicate."""
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(y))
    src, pool = order[: len(y) // 2], order[len(y) // 2 :]
    tgt = draw_target(rng, y, pool, q)
    xs, ys = x[src], y[src]
    if way == "oof":
        ps = sw.out_of_fold_proba(classifier(), xs, ys, folds=5, seed=seed)
        clf = classifier().fit(xs, ys)
        return ps, ys, clf.predict_proba(x[tgt])
    if way == "oof-mean":
        # the fold models score the target too; its probabilities are their mean
        ps = np.zeros((len(ys), len(q)))
        pt = np.zeros((len(tgt), len(q)))
        for fit_rows, held in StratifiedKFold(5, shuffle=True, random_state=seed).split(xs, ys):
            clf = classifier().fit(xs[fit_rows], ys[fit_rows])
            ps[held] = clf.predict_proba(xs[held])
            pt += clf.predict_proba(x[tgt]) / 5
        return ps, ys, pt
    # held-out: stratified halves of the source, one model scores the labelled half and the target
    fit_rows, cal_rows = [], []
    for j in np.unique(ys):
        rows = rng.permutation(np.flatnonzero(ys == j))
        fit_rows.append(rows[: len(rows) // 2])
        cal_rows.append(rows[len(rows) // 2 :])
    f, c = np.concatenate(fit_rows), np.concatenate(cal_rows)
    clf = classifier().fit(xs[f], ys[f])
    return clf.predict_proba(xs[c]), ys[c], clf.predict_proba(x[tgt])


def study(name, way, replicates, bootstrap, level):
    x, y = LOADERS[name](return_X_y=True)
    x = np.asarray(x, dtype=float)
    q = TARGET_MIX[name]
    cover = {"em": [], "bbse": []}
    err = {"em": [], "bbse": []}
    for r in range(replicates):
        ps, ys, pt = simulate(x, y, q, seed=1000 + r, way=way)
        for method in ("em", "bbse"):
            est = sw.LabelShift(method=method, bootstrap=bootstrap, level=level, seed=r).fit(ps, ys, pt)
            low, high = est.interval_
            cover[method].extend((low <= q) & (q <= high))
            err[method].append(float(np.abs(est.target_proportions_ - q).sum()))
    out = {}
    for m in ("em", "bbse"):
        c = np.asarray(cover[m], dtype=float)
        out[m] = (c.mean(), np.sqrt(c.mean() * (1 - c.mean()) / len(c)), float(np.mean(err[m])))
    wins = float(np.mean(np.asarray(err["em"]) <= np.asarray(err["bbse"])))
    return out, wins


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--replicates", type=int, default=100)
    ap.add_argument("--bootstrap", type=int, default=200)
    ap.add_argument("--level", type=float, default=0.95)
    ap.add_argument("--only", default="breast_cancer,wine,digits")
    ap.add_argument("--ways", default="oof,held-out")
    a = ap.parse_args()
    print(f"{a.replicates} replicates, {a.bootstrap} bootstrap replicates, {100 * a.level:g}% intervals")
    print("data set       way       EM coverage (se)  BBSE coverage (se)  EM L1   BBSE L1  EM <= BBSE  seconds")
    for name in a.only.split(","):
        for way in a.ways.split(","):
            t0 = time.perf_counter()
            res, wins = study(name, way, a.replicates, a.bootstrap, a.level)
            em, bb = res["em"], res["bbse"]
            print(
                f"{name:<14} {way:<9} {em[0]:.3f} ({em[1]:.3f})     {bb[0]:.3f} ({bb[1]:.3f})       "
                f"{em[2]:.4f}  {bb[2]:.4f}   {wins:.2f}        {time.perf_counter() - t0:.0f}",
                flush=True,
            )


if __name__ == "__main__":
    main()
