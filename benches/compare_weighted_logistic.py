"""Side-by-side timing: shiftweight's WeightedLogistic against scikit-learn's LogisticRegression on
the same seeded data and weights (the same objective: C = 1 / l2, intercept unpenalised).

    .venv/bin/maturin develop --release   # time a release build of the extension
    .venv/bin/python benches/compare_weighted_logistic.py --rows 1000000 --features 20

Prints both wall-clock times, the ratio, and the largest coefficient difference.
"""

import argparse
import time

import numpy as np
from sklearn.linear_model import LogisticRegression

import shiftweight as sw


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--features", type=int, default=20)
    ap.add_argument("--l2", type=float, default=1.0)
    ap.add_argument("--solver", default="lbfgs", help="scikit-learn solver (lbfgs, newton-cholesky, ...)")
    a = ap.parse_args()
    rng = np.random.default_rng(7)
    X = rng.uniform(-2, 2, size=(a.rows, a.features))
    beta = np.where(np.arange(a.features) % 2 == 0, 0.5, -0.3)
    y = (rng.random(a.rows) < 1 / (1 + np.exp(-X @ beta))).astype(int)
    w = rng.exponential(size=a.rows)

    t0 = time.perf_counter()
    ours = sw.WeightedLogistic(l2=a.l2).fit(X, y, sample_weight=w)
    t_ours = time.perf_counter() - t0

    t0 = time.perf_counter()
    ref = LogisticRegression(C=1 / a.l2, solver=a.solver, tol=1e-8, max_iter=1000).fit(X, y, sample_weight=w)
    t_ref = time.perf_counter() - t0

    print(f"rows={a.rows} features={a.features} l2={a.l2}")
    print(f"shiftweight WeightedLogistic: {t_ours:.3f} s")
    print(f"scikit-learn LogisticRegression({a.solver}): {t_ref:.3f} s")
    print(f"ratio scikit-learn / shiftweight: {t_ref / t_ours:.2f}")
    print(f"largest coefficient difference: {np.abs(ours.coef_ - ref.coef_).max():.2e}")


if __name__ == "__main__":
    main()
