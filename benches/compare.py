#!/usr/bin/env python3
"""Side-by-side timings: shiftweight against straightforward numpy / scipy / scikit-learn code.

Run with ``make compare`` (full sizes) or ``make compare-quick`` (small sizes, about a minute), or
directly: ``.venv/bin/python benches/compare.py [--quick] [--only ulsif,scoring] [--threads 2]``.
The ``tables`` workload times the command-line binary (build it first with
``cargo build --release -p shiftweight-cli``) against pyarrow's CSV and Parquet readers.
Use a release build of the extension (``maturin develop --release``) for figures worth quoting.
This script is not part of the test suite.

For every workload both sides get the same data and do the same computation: the reference reads
the basis centres, the standardiser and the hyperparameter grid from the fitted model's JSON
document, uses the same number of folds / held-out pairs / permutations, and is written here from
the published formulas. Repeats alternate (shiftweight, reference, shiftweight, ...) so that load
changes on the machine hit both sides alike. The table reports median wall-clock times, their
ratio (reference / shiftweight: > 1 means shiftweight is faster) and the accuracy of both sides
(NMSE against the analytic ratio where the truth is known, agreement of results otherwise), so a
speed-up never comes from doing less.

Workloads whose shiftweight estimator is not present in the installed package are skipped with a
message; ``--check-references`` runs their reference side alone against the analytic truth.

Data: source rows ~ N(0, I_d), target rows ~ N(delta e_1, I_d). The true ratio is
w(x) = exp(delta x_1 - delta^2 / 2) (a ratio of two Gaussian densities).
NMSE (Sugiyama et al. 2008): mean over evaluation rows of (w_hat / mean(w_hat) - w / mean(w))^2,
evaluated on fresh source rows.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import sys
import time


def parse_args(argv=None):
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--quick", action="store_true", help="small sizes; finishes in about a minute")
    p.add_argument("--only", default="", help="comma-separated workloads (default: all)")
    p.add_argument("--repeats", type=int, default=None, help="alternating repeats per side (default 3; quick 3)")
    p.add_argument("--threads", type=int, default=None, help="threads for both sides (default: all cores)")
    p.add_argument("--check-references", action="store_true",
                   help="run the reference side alone when shiftweight lacks the estimator")
    p.add_argument("--json", default=None, help="also write the results table to this JSON file")
    p.add_argument("--delta", type=float, default=0.5, help="mean shift of the first feature in the target")
    # Sizes; defaults are the workloads.
    p.add_argument("--ulsif-n", type=int, default=20_000, help="uLSIF: rows of source and of target")
    p.add_argument("--ulsif-d", type=int, default=10)
    p.add_argument("--basis", type=int, default=200, help="kernel centres (uLSIF, KLIEP, scoring)")
    p.add_argument("--cv-rows", type=int, default=10_000, help="uLSIF max_cv_rows (held-out pairs)")
    p.add_argument("--kliep-n", type=int, default=20_000)
    p.add_argument("--clf-n", type=int, default=500_000, help="classifier ratio: rows of source and of target")
    p.add_argument("--clf-d", type=int, default=20)
    p.add_argument("--logit-n", type=int, default=1_000_000, help="weighted logistic regression rows")
    p.add_argument("--logit-d", type=int, default=20)
    p.add_argument("--kmm-n", type=int, default=2_000, help="KMM: rows of source and of target")
    p.add_argument("--kmm-large-n", type=int, default=50_000, help="KMM blocked variant: source rows")
    p.add_argument("--mmd-n", type=int, default=2_000, help="MMD: rows of source and of target")
    p.add_argument("--mmd-perms", type=int, default=1_000)
    p.add_argument("--score-n", type=int, default=1_000_000, help="rows scored")
    p.add_argument("--tables-rows", type=int, default=1_000_000,
                   help="tables: rows of the 20-column file (15 numeric, 5 text) read and scored")
    p.add_argument("--tables-dir", default=None,
                   help="tables: folder for the generated files (default: a temporary folder); "
                        "files already there are reused")
    p.add_argument("--cli", default=None,
                   help="tables: the shiftweight binary (default: target/release/shiftweight)")
    p.add_argument("--l2", type=float, default=1.0, help="penalty of the logistic models (sklearn C = 1/l2)")
    p.add_argument("--settle", type=float, default=0.0,
                   help="seconds to pause before every timed call (default 0; see SETTLE_S)")
    p.add_argument("--blas-thread-timeout", type=int, default=None,
                   help="set OPENBLAS_THREAD_TIMEOUT (4-30) before numpy loads: OpenBLAS's idle "
                        "worker threads then spin for 2^N cycles instead of the default (see SETTLE_S)")
    args = p.parse_args(argv)
    if args.quick:
        args.ulsif_n, args.kliep_n, args.clf_n, args.logit_n = 2_000, 1_000, 20_000, 50_000
        args.kmm_n, args.mmd_n, args.mmd_perms, args.score_n = 300, 500, 200, 100_000
        args.kmm_large_n = 5_000
        args.tables_rows = 100_000
        args.cv_rows = args.ulsif_n  # every pair held out: the LOOCV tables must agree to rounding
    if args.repeats is None:
        args.repeats = 3
    return args


ARGS = parse_args()
if ARGS.threads:
    # Before numpy is imported, so its BLAS pool obeys it too.
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "RAYON_NUM_THREADS"):
        os.environ[var] = str(ARGS.threads)

if ARGS.blas_thread_timeout is not None:
    os.environ["OPENBLAS_THREAD_TIMEOUT"] = str(ARGS.blas_thread_timeout)

import numpy as np  # noqa: E402
import scipy.linalg  # noqa: E402
import scipy.optimize  # noqa: E402
from scipy.spatial.distance import pdist  # noqa: E402

import shiftweight as sw  # noqa: E402

if ARGS.threads:
    sw.set_threads(ARGS.threads)


# ----------------------------------------------------------------------------------------------
# Shared helpers
# ----------------------------------------------------------------------------------------------

def gaussian_pair(n_s, n_t, d, delta, seed):
    rng = np.random.default_rng(seed)
    s = rng.standard_normal((n_s, d))
    t = rng.standard_normal((n_t, d))
    t[:, 0] += delta
    return s, t


def true_ratio(x, delta):
    # reference: ratio of the densities N(delta e_1, I) / N(0, I), analytic
    return np.exp(delta * x[:, 0] - delta * delta / 2.0)


def nmse(w_hat, w_true):
    # reference: normalised mean squared error, Sugiyama et al. 2008 (KLIEP paper), section 5
    a = np.asarray(w_hat, dtype=float)
    b = np.asarray(w_true, dtype=float)
    if not np.isfinite(a).all() or a.mean() <= 0:
        return float("nan")
    return float(np.mean((a / a.mean() - b / b.mean()) ** 2))


def rel_diff(a, b):
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return float(np.max(np.abs(a - b)) / max(np.max(np.abs(b)), 1e-300))


def model_doc(est):
    """The fitted model's JSON document (the inner ``model`` object)."""
    return json.loads(est.to_json())["model"]


def standardise_like(doc, x):
    st = doc["standardizer"]
    return (x - np.asarray(st["mean"])) / np.asarray(st["scale"])


def pooled_standardiser(s, t):
    """Pooled mean and sample standard deviation (ddof = 1), as the fitted standardiser."""
    both = np.vstack([s, t])
    mean = both.mean(axis=0)
    scale = both.std(axis=0, ddof=1)
    scale[scale <= 1e-12 * np.maximum(np.abs(mean), 1e-300)] = 1.0
    return mean, scale


def centres_of(doc):
    c = doc["form"]["centres"]
    return np.asarray(c["data"], dtype=float).reshape(c["rows"], c["cols"])


def gauss_kernel(x, c, sigma, c_sq=None):
    """exp(-||x - c||^2 / (2 sigma^2)), squared distances through one matrix product."""
    if c_sq is None:
        c_sq = np.einsum("ij,ij->i", c, c)
    sq = np.einsum("ij,ij->i", x, x)[:, None] + c_sq[None, :] - 2.0 * (x @ c.T)
    np.maximum(sq, 0.0, out=sq)
    sq *= -0.5 / (sigma * sigma)
    return np.exp(sq, out=sq)


def median_distance(z, seed, subsample=1000):
    # common practice: median heuristic on a subsample (Garreau, Jitkrittum, Kanagawa 2017)
    if len(z) > subsample:
        z = z[np.sort(np.random.default_rng(seed).choice(len(z), subsample, replace=False))]
    return float(np.median(pdist(z)))


# Pause before every timed call (`--settle SECONDS`, default 0: none). OpenBLAS's worker threads
# keep spinning for a while after a BLAS call returns, which slows whatever runs next on a 2-core
# machine: measured here (MMD workload), a shiftweight call started right after a numpy product
# took 0.200 s against 0.169 s after a 0.3 s pause, while numpy's own time did not depend on what
# ran before it (0.324 s vs 0.320 s). Pauses have their own cost on this virtual machine: the
# reference MMD computation alone, repeated with pauses of 0 / 0.3 / 1.0 s, had medians
# 0.50-0.52 / 0.52-0.53 / 0.70 s (single runs 0.48-1.01 s). The default runs back to back, which
# can only understate shiftweight's ratio; both figures are in benches/README.md.
# `--blas-thread-timeout 4` addresses the same effect without pausing: OpenBLAS reads
# OPENBLAS_THREAD_TIMEOUT when it loads, and its idle workers spin for 2^N cycles before they sleep
# (the default is 2^28 cycles, about 0.1 s at 3 GHz: from memory, OpenBLAS's THREAD_TIMEOUT). With
# N = 4 they sleep at once. The reference's own time was not changed by it (MMD: 0.585 s with it,
# 0.582 s without, medians of 7); benches/README.md gives the figures with and without.
SETTLE_S = ARGS.settle


def alternate(sw_fn, ref_fn, repeats):
    """Runs sw, ref, sw, ref, ... ``repeats`` times each, pausing SETTLE_S before each call;
    returns (sw_times, ref_times, sw_out, ref_out)."""
    ts, tr, out_s, out_r = [], [], None, None
    for _ in range(repeats):
        if SETTLE_S > 0:
            time.sleep(SETTLE_S)
        t0 = time.perf_counter()
        out_s = sw_fn()
        ts.append(time.perf_counter() - t0)
        if SETTLE_S > 0:
            time.sleep(SETTLE_S)
        t0 = time.perf_counter()
        out_r = ref_fn()
        tr.append(time.perf_counter() - t0)
    return ts, tr, out_s, out_r


def timed(fn, repeats):
    ts, out = [], None
    for _ in range(repeats):
        if SETTLE_S > 0:
            time.sleep(SETTLE_S)
        t0 = time.perf_counter()
        out = fn()
        ts.append(time.perf_counter() - t0)
    return ts, out


RESULTS = []


def record(name, size, ts, tr, acc_sw, acc_ref, note=""):
    ms = statistics.median(ts) if ts else float("nan")
    mr = statistics.median(tr) if tr else float("nan")
    row = dict(workload=name, size=size, sw_s=ms, ref_s=mr, ratio=mr / ms if ts and tr else float("nan"),
               sw_accuracy=acc_sw, ref_accuracy=acc_ref, note=note)
    RESULTS.append(row)
    print(f"  {name}: shiftweight {ms:.4g} s, reference {mr:.4g} s, ratio {row['ratio']:.2f}x"
          f" | {acc_sw} | {acc_ref} {('| ' + note) if note else ''}", flush=True)


def missing(*names):
    absent = [n for n in names if not hasattr(sw, n)]
    return absent


# ----------------------------------------------------------------------------------------------
# uLSIF with closed-form leave-one-out CV (Kanamori, Hido, Sugiyama 2009, JMLR 10, section 3.4)
# ----------------------------------------------------------------------------------------------

def ref_ulsif(s, t, centres, sigma_multiples, lambdas, max_cv_rows, seed, median_from_model):
    """numpy uLSIF: standardise on pooled rows, Gaussian design matrices, LOOCV over the grid.

    Held-out unit: the i-th source and i-th target row together (one pair), each removed from the
    full statistics; above ``max_cv_rows`` pairs a seeded subset of pairs is held out, as in the
    library. For each pair the held-out solution is the Sherman-Morrison update of
    (S_s/(n_s-1) + lambda I)^{-1} (the paper's closed form), vectorised over pairs:
        A = S_s/(n_s-1) + lambda I,  h_i = (sum_t - k_t,i)/(n_t-1),  u_i = k_s,i
        theta_i = A^-1 h_i + A^-1 u_i (u_i' A^-1 h_i) / ((n_s-1) - u_i' A^-1 u_i),  clipped at 0
        score = mean_i [ (k_s,i' theta_i)^2 / 2 - k_t,i' theta_i ]
    Returns (source weights, scores table, chosen (sigma, lam), theta, standardiser).
    """
    n_s, n_t = len(s), len(t)
    mean, scale = pooled_standardiser(s, t)
    zs, zt = (s - mean) / scale, (t - mean) / scale
    med_own = median_distance(np.vstack([zs, zt]), seed)  # same work as the library; grid uses the model's
    med = median_from_model if median_from_model is not None else med_own
    sigmas = [m * med for m in sigma_multiples]
    b = len(centres)
    c_sq = np.einsum("ij,ij->i", centres, centres)
    m = min(n_s, n_t, max_cv_rows)
    rng = np.random.default_rng(seed)
    i_s = np.sort(rng.choice(n_s, m, replace=False)) if m < n_s else np.arange(n_s)
    i_t = np.sort(rng.choice(n_t, m, replace=False)) if m < n_t else np.arange(n_t)
    table, best = [], (np.inf, None, None)
    stats = {}
    eye = np.eye(b)
    for sigma in sigmas:
        ks = gauss_kernel(zs, centres, sigma, c_sq)
        kt = gauss_kernel(zt, centres, sigma, c_sq)
        gram, sum_t = ks.T @ ks, kt.sum(axis=0)
        stats[sigma] = (gram, sum_t)
        u = ks[i_s].T  # b x m
        v = ((sum_t[:, None] - kt[i_t].T) / (n_t - 1))  # b x m
        kht = kt[i_t].T
        for lam in lambdas:
            a = gram / (n_s - 1) + lam * eye
            cf = scipy.linalg.cho_factor(a, lower=True)
            au = scipy.linalg.cho_solve(cf, u)
            av = scipy.linalg.cho_solve(cf, v)
            num = np.einsum("ij,ij->j", u, av)
            den = (n_s - 1) - np.einsum("ij,ij->j", u, au)
            theta = np.maximum(av + au * (num / den), 0.0)
            rs = np.einsum("ij,ij->j", u, theta)
            rt = np.einsum("ij,ij->j", kht, theta)
            score = float(np.mean(rs * rs / 2.0 - rt))
            table.append((sigma, lam, score))
            if score < best[0]:
                best = (score, sigma, lam)
    _, sigma, lam = best
    gram, sum_t = stats[sigma]
    theta = np.maximum(scipy.linalg.solve(gram / n_s + lam * eye, sum_t / n_t, assume_a="pos"), 0.0)
    w_source = gauss_kernel(zs, centres, sigma, c_sq) @ theta
    return w_source, table, (sigma, lam), theta, (mean, scale), med_own


def score_kernel_expansion(x, mean, scale, centres, sigma, coef, chunk=8192):
    """numpy scoring of sum_l coef_l k(x, c_l) on standardised rows, in row chunks."""
    out = np.empty(len(x))
    c_sq = np.einsum("ij,ij->i", centres, centres)
    for a in range(0, len(x), chunk):
        z = (x[a:a + chunk] - mean) / scale
        out[a:a + chunk] = gauss_kernel(z, centres, sigma, c_sq) @ coef
    return np.maximum(out, 0.0)


def workload_ulsif(args):
    n, d = args.ulsif_n, args.ulsif_d
    s, t = gaussian_pair(n, n, d, args.delta, seed=1)
    x_eval, _ = gaussian_pair(20_000, 1, d, 0.0, seed=9)
    mult = (0.25, 0.5, 1.0, 2.0, 4.0)
    lams = (1e-3, 1e-2, 1e-1, 1.0, 10.0)

    def run_sw():
        return sw.LeastSquaresRatio(n_basis=args.basis, sigma_multiples=mult, lambda_grid=lams,
                                    max_cv_rows=args.cv_rows, seed=0).fit(s, t)

    est = run_sw()  # warm-up; also gives the centres and the median for the reference
    doc = model_doc(est)
    centres = centres_of(doc)
    med = est.median_distance_

    def run_ref():
        return ref_ulsif(s, t, centres, mult, lams, args.cv_rows, 0, med)

    ts, tr, est, ref = alternate(run_sw, run_ref, args.repeats)
    w_src_ref, table, (sig_r, lam_r), theta_r, (mean_r, scale_r), _ = ref
    doc = model_doc(est)
    w_sw = est.ratio(x_eval)
    w_ref = score_kernel_expansion(x_eval, mean_r, scale_r, centres, sig_r, theta_r)
    truth = true_ratio(x_eval, args.delta)
    sw_table = [r["score"] for r in est.cv_scores_]
    ref_table = [r[2] for r in table]
    same_pairs = min(n, args.cv_rows) == n
    note = (f"chosen sw (sigma={est.sigma_:.3g}, lam={est.lam_:g}) ref (sigma={sig_r:.3g}, lam={lam_r:g}); "
            f"LOOCV table max rel diff {rel_diff(sw_table, ref_table):.1e}"
            + (" (same held-out pairs)" if same_pairs else " (different seeded subsets of pairs)")
            + f"; standardiser max rel diff {rel_diff(doc['standardizer']['scale'], scale_r):.1e}")
    record("ulsif_fit_loocv", f"{n}+{n}x{d}, b={len(centres)}, 5x5, cv pairs {min(n, args.cv_rows)}",
           ts, tr, f"NMSE {nmse(w_sw, truth):.4f}", f"NMSE {nmse(w_ref, truth):.4f}", note)


def workload_scoring(args):
    d = args.ulsif_d
    s, t = gaussian_pair(5_000, 5_000, d, args.delta, seed=2)
    est = sw.LeastSquaresRatio(sigma=3.0, lam=0.1, n_basis=args.basis).fit(s, t)
    doc = model_doc(est)
    st = doc["standardizer"]
    mean, scale = np.asarray(st["mean"]), np.asarray(st["scale"])
    centres, sigma, coef = centres_of(doc), doc["form"]["sigma"], np.asarray(doc["form"]["coef"])
    x, _ = gaussian_pair(args.score_n, 1, d, 0.2, seed=3)
    ts, tr, w_sw, w_ref = alternate(lambda: est.ratio(x),
                                    lambda: score_kernel_expansion(x, mean, scale, centres, sigma, coef),
                                    args.repeats)
    rate = args.score_n / statistics.median(ts)
    record("score_rows", f"{args.score_n}x{d}, b={len(centres)}", ts, tr,
           f"{rate:,.0f} rows/s", f"max rel diff {rel_diff(w_sw, w_ref):.1e}")


# ----------------------------------------------------------------------------------------------
# KLIEP with likelihood cross-validation (Sugiyama et al. 2008, AISM 60)
# ----------------------------------------------------------------------------------------------
#
# Both sides solve the same problems to the same certified accuracy (the defaults of sw.KLRatio):
# - problem: maximise mean_t log(K_t alpha) s.t. mean_s K_s alpha = 1, alpha >= 0 (Sugiyama et al.
#   2008, eq. 5), Gaussian kernels at the model's centres, on the model's standardised features;
# - stopping rule: the certified gap bound log(max_l g_l) <= tol = 1e-6 (Cover 1984), where g is
#   the gradient in p = h * alpha; the reference also stops after 10,000 EM steps;
# - width selection: the model's width grid (read from its CV table), 5-fold likelihood CV holding
#   out source AND target rows (the default `source_and_target` variant), with the SAME fold
#   assignment (shiftweight's seeded kfold_assignment, read through the extension, with the seeds
#   KLRatio uses), the constraint fitted on training-fold source rows, centres whose target row is
#   held out dropped in that fold, held-out score mean_t log r(x_t) - log mean_s r(x_s), and the
#   one-standard-error rule (widest width within 1 SE of the best mean);
# - final fit at the chosen width on every row.
# The solvers differ, and that is where the speed-up comes from: shiftweight uses sequential
# quadratic programming with the exact Hessian (Kim, Carbonetto, Stephens & Anitescu 2020,
# J. Comput. Graph. Statist. 29), 1 to ~25 iterations per fit; the reference is the first-order
# method written from the published formulas, the multiplicative EM update p_l <- p_l g_l (Cover
# 1984, IEEE Trans. Inf. Theory 30; the EM algorithm for mixture weights), started at the centre of
# the simplex, with squared extrapolation (SQUAREM, Varadhan & Roland 2008, Scand. J. Statist. 35,
# scheme S3: step length s = min(-|r| / |v|, -1), jump kept only if non-negative and not lowering
# the objective, else the plain second EM step), two matrix-vector products per pass (numpy/BLAS).
# The row prints both final objectives and gap bounds, so that neither side can be faster by
# stopping earlier.

KLIEP_TOL, KLIEP_MAX_ITER, KLIEP_FOLDS, KLIEP_SE_MARGIN = 1e-6, 10_000, 5, 1.0
# Seed tags of KLRatio's fold assignments (crates/shiftweight/src/ratio/kliep.rs).
KLIEP_TARGET_FOLD_TAG, KLIEP_SOURCE_FOLD_TAG = 0x6B6C_6965_7074, 0x6B6C_6965_7073


def kliep_solve(a, h, tol=KLIEP_TOL, max_iter=KLIEP_MAX_ITER):
    """EM with SQUAREM for max mean log(a alpha) s.t. h' alpha = 1, alpha >= 0; columns with
    h_l = 0 keep alpha_l = 0. Returns (alpha, objective, gap bound, EM steps) or None when some
    row has no kernel mass."""
    active = h > 0
    a, hh = a[:, active], h[active]
    n = a.shape[0]

    def evaluate(al):
        u = a @ al
        if not (np.all(u > 0) and np.all(np.isfinite(u))):
            return None
        m = (a.T @ (1.0 / u)) / n / hh
        return float(np.mean(np.log(u))), m, max(float(np.log(m.max())), 0.0)

    alpha = 1.0 / (len(hh) * hh)
    it = 0
    r = evaluate(alpha)
    if r is None:
        return None
    f0, m0, gap0 = r
    while True:
        if gap0 <= tol or it >= max_iter:
            break
        a1 = alpha * m0
        it += 1
        r = evaluate(a1)
        if r is None:
            return None
        f1, m1, gap1 = r
        if gap1 <= tol or it >= max_iter:
            alpha, f0, m0, gap0 = a1, f1, m1, gap1
            continue
        a2 = a1 * m1
        it += 1
        rr = a1 - alpha
        v = a2 - a1 - rr
        nr, nv = np.linalg.norm(rr), np.linalg.norm(v)
        nxt = a2
        if nv > 0 and np.isfinite(nr) and np.isfinite(nv):
            s = min(-nr / nv, -1.0)
            ext = alpha - 2.0 * s * rr + s * s * v
            if s < -1.0 and np.all(ext >= 0) and np.all(np.isfinite(ext)):
                nxt = ext
        r = evaluate(nxt)
        if r is not None and r[0] >= f1:
            alpha, (f0, m0, gap0) = nxt, r
        else:
            r = evaluate(a2)
            if r is None:
                return None
            alpha, (f0, m0, gap0) = a2, r
    # The EM update keeps h'alpha = 1 only up to rounding, and after thousands of steps the drift
    # (measured up to 4e-5) inflates the objective by log(h'alpha): report the normalised point.
    alpha = alpha / float(hh @ alpha)
    r = evaluate(alpha)
    if r is None:
        return None
    f0, _, gap0 = r
    full = np.zeros(len(h))
    full[active] = alpha
    return full, f0, gap0, it


def ref_kliep(zs, zt, centres, centre_rows, sigmas, fold_t, fold_s, folds=KLIEP_FOLDS,
              se_margin=KLIEP_SE_MARGIN):
    """KLIEP with source-and-target likelihood CV and the one-standard-error rule, on standardised
    rows; returns ((sigma, alpha), per-width (mean, se) of minus the held-out log-likelihood)."""
    c_sq = np.einsum("ij,ij->i", centres, centres)
    stats = []
    for sigma in sigmas:
        kt = gauss_kernel(zt, centres, sigma, c_sq)
        ks = gauss_kernel(zs, centres, sigma, c_sq)
        per_fold = []
        for k in range(folds):
            h = ks[fold_s != k].mean(axis=0)
            h[fold_t[centre_rows] == k] = 0.0
            sol = kliep_solve(kt[fold_t != k], h)
            if sol is None:
                per_fold = None
                break
            alpha = sol[0]
            rt = kt[fold_t == k] @ alpha
            mean_s = float(np.mean(ks[fold_s == k] @ alpha))
            if not (np.all(rt > 0) and mean_s > 0 and np.isfinite(mean_s)):
                per_fold = None
                break
            per_fold.append(-(np.mean(np.log(rt)) - np.log(mean_s)))
        if per_fold is None:
            stats.append((np.inf, np.nan))
        else:
            v = np.asarray(per_fold)
            stats.append((float(v.mean()), float(v.std(ddof=1) / np.sqrt(len(v)))))
    best = min(range(len(sigmas)), key=lambda i: stats[i][0])
    limit = stats[best][0] + se_margin * stats[best][1]
    chosen = max((i for i in range(len(sigmas)) if stats[i][0] <= limit), key=lambda i: sigmas[i])
    sigma = sigmas[chosen]
    kt = gauss_kernel(zt, centres, sigma, c_sq)
    h = gauss_kernel(zs, centres, sigma, c_sq).mean(axis=0)
    sol = kliep_solve(kt, h)
    return (sigma, sol[0], sol[1], sol[2], sol[3]), stats


def workload_kliep(args):
    n, d = args.kliep_n, args.ulsif_d
    s, t = gaussian_pair(n, n, d, args.delta, seed=4)
    x_eval, _ = gaussian_pair(20_000, 1, d, 0.0, seed=9)
    truth = true_ratio(x_eval, args.delta)
    if missing("KLRatio", "_native"):
        print("  kliep_cv: skipped, sw.KLRatio is not in this build")
        return
    seed = 0

    def run_sw():
        return sw.KLRatio(n_basis=args.basis, seed=seed).fit(s, t)

    # The first shiftweight fit is timed as repeat 1; its model gives centres, standardiser, grid.
    t0 = time.perf_counter()
    est = run_sw()
    ts = [time.perf_counter() - t0]
    doc = model_doc(est)
    centres = centres_of(doc)
    sigmas = [r["sigma"] for r in est.selection_["table"]]
    zs, zt = standardise_like(doc, s), standardise_like(doc, t)
    # Target rows the centres were drawn from (nearest standardised row; distance ~0).
    d2 = np.einsum("ij,ij->i", zt, zt)[None, :] - 2.0 * centres @ zt.T
    centre_rows = np.argmin(d2, axis=1)
    assert np.allclose(zt[centre_rows], centres, rtol=0, atol=1e-9)
    native = sw._native
    fold_t = np.asarray(native.kfold_assignment(n, KLIEP_FOLDS, seed ^ KLIEP_TARGET_FOLD_TAG))
    fold_s = np.asarray(native.kfold_assignment(n, KLIEP_FOLDS, seed ^ KLIEP_SOURCE_FOLD_TAG))

    def run_ref():
        return ref_kliep(zs, zt, centres, centre_rows, sigmas, fold_t, fold_s)

    t0 = time.perf_counter()
    model, stats = run_ref()
    tr = [time.perf_counter() - t0]
    if args.repeats > 1:
        ts2, tr2, est, (model, stats) = alternate(run_sw, run_ref, args.repeats - 1)
        ts, tr = ts + ts2, tr + tr2
    w_sw = est.ratio(x_eval)
    mean, scale = np.asarray(doc["standardizer"]["mean"]), np.asarray(doc["standardizer"]["scale"])
    w_ref = score_kernel_expansion(x_eval, mean, scale, centres, model[0], model[1])
    cv_sw = np.array([r["score"] for r in est.selection_["table"]])
    cv_ref = np.array([m for m, _ in stats])
    chosen = est.selection_["chosen"]
    record("kliep_cv", f"{n}+{n}x{d}, b={len(centres)}, {len(sigmas)} widths, 5 folds", ts, tr,
           f"NMSE {nmse(w_sw, truth):.4f}", f"NMSE {nmse(w_ref, truth):.4f}",
           f"chosen sigma sw {est.sigma_:.4g} ref {model[0]:.4g}; same folds; "
           f"CV table max rel diff {rel_diff(cv_sw, cv_ref):.1e}; "
           f"final fit: objective sw {chosen['objective']:.8f} ref {model[2]:.8f}, gap bound "
           f"sw {chosen['gap_bound']:.1e} ref {model[3]:.1e}, iterations sw {chosen['iterations']:.0f} "
           f"ref {model[4]} EM steps")


# ----------------------------------------------------------------------------------------------
# Weighted logistic regression against scikit-learn LogisticRegression(lbfgs)
# ----------------------------------------------------------------------------------------------

def logistic_objective(x, y, w, coef, intercept, l2):
    # sum_i w_i logloss_i + (l2/2)|beta|^2, intercept unpenalised (sklearn C = 1/l2)
    eta = x @ coef + intercept
    return float(np.sum(w * (np.logaddexp(0.0, eta) - y * eta)) + 0.5 * l2 * coef @ coef)


def workload_logistic(args):
    from sklearn.linear_model import LogisticRegression

    n, d = args.logit_n, args.logit_d
    rng = np.random.default_rng(5)
    x = rng.standard_normal((n, d))
    beta = rng.normal(0, 0.5, d)
    y = (rng.random(n) < 1 / (1 + np.exp(-(x @ beta - 0.3)))).astype(float)
    w = np.exp(rng.normal(0, 0.5, n))

    def run_sw():
        return sw.WeightedLogistic(l2=args.l2).fit(x, y, sample_weight=w)

    def run_ref():
        return LogisticRegression(C=1.0 / args.l2, solver="lbfgs", tol=1e-6, max_iter=1000).fit(
            x, y, sample_weight=w)

    ts, tr, m_sw, m_ref = alternate(run_sw, run_ref, args.repeats)
    c_sw, b_sw = np.asarray(m_sw.coef_).ravel(), float(np.ravel(m_sw.intercept_)[0])
    c_ref, b_ref = m_ref.coef_.ravel(), float(m_ref.intercept_[0])
    f_sw = logistic_objective(x, y, w, c_sw, b_sw, args.l2)
    f_ref = logistic_objective(x, y, w, c_ref, b_ref, args.l2)
    fmin = min(f_sw, f_ref)
    record("weighted_logistic", f"{n}x{d}", ts, tr,
           f"objective excess {(f_sw - fmin) / abs(fmin):.1e}", f"objective excess {(f_ref - fmin) / abs(fmin):.1e}",
           f"coef max rel diff {rel_diff(c_sw, c_ref):.1e}; sklearn tol=1e-6")


# ----------------------------------------------------------------------------------------------
# Classifier ratio with 5-fold cross-fitting (probabilistic classification, Bickel et al. 2009)
# ----------------------------------------------------------------------------------------------

def ref_classifier_ratio(s, t, l2, folds=5, seed=0):
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import StratifiedKFold

    x = np.vstack([s, t])
    y = np.r_[np.zeros(len(s)), np.ones(len(t))]
    p = np.empty(len(x))
    for tr_idx, te_idx in StratifiedKFold(folds, shuffle=True, random_state=seed).split(x, y):
        m = LogisticRegression(C=1.0 / l2, solver="lbfgs", tol=1e-6, max_iter=1000).fit(x[tr_idx], y[tr_idx])
        p[te_idx] = m.predict_proba(x[te_idx])[:, 1]
    p = np.clip(p[: len(s)], 1e-12, 1 - 1e-12)
    # w = P(target|x)/P(source|x) * n_s/n_t (class-prior correction)
    return p / (1 - p) * len(s) / len(t)


def workload_classifier(args):
    n, d = args.clf_n, args.clf_d
    s, t = gaussian_pair(n, n, d, args.delta, seed=6)
    truth = true_ratio(s, args.delta)
    if missing("ClassifierRatio"):
        if not args.check_references:
            print("  classifier_ratio: skipped, sw.ClassifierRatio is not in this build")
            return
        tr, w_ref = timed(lambda: ref_classifier_ratio(s, t, args.l2), args.repeats)
        record("classifier_ratio (reference only)", f"{n}+{n}x{d}, 5-fold", [], tr, "n/a",
               f"NMSE {nmse(w_ref, truth):.4f}")
        return

    # shiftweight side: public name from DESIGN.md (estimator added on another branch)
    def run_sw():
        return sw.ClassifierRatio(l2=args.l2).fit(s, t)

    ts, tr, est, w_ref = alternate(run_sw, lambda: ref_classifier_ratio(s, t, args.l2), args.repeats)
    w_sw = np.asarray(est.source_weights_)
    record("classifier_ratio", f"{n}+{n}x{d}, 5-fold", ts, tr,
           f"NMSE {nmse(w_sw, truth):.4f}", f"NMSE {nmse(w_ref, truth):.4f}",
           "out-of-fold source weights; folds: own stratified assignment")


# ----------------------------------------------------------------------------------------------
# KMM (Huang et al. 2007): the QP through scipy
# ----------------------------------------------------------------------------------------------

def ref_kmm(s, t, sigma, bound=1000.0, eps=None):
    """min 1/2 beta' K beta - kappa' beta  s.t. 0 <= beta <= B, |sum beta - n_s| <= n_s eps,
    K_ij = k(x_i, x_j) on source rows, kappa_i = n_s/n_t sum_j k(x_i, x'_j) (Huang et al. 2007).

    Solved through scipy by Lagrangian duality on the one sum constraint (the QP is convex): for a
    multiplier mu, the box-constrained QP with linear term kappa - mu is solved by L-BFGS-B; the
    sum of the solution falls as mu grows, so scipy's brentq finds the mu that puts it on the
    violated edge of the band (mu = 0 when the unconstrained-sum solution is already inside).
    (SLSQP on the whole problem took 21 s at 300 + 300 rows on the bench machine: unusable at 2,000.)"""
    n_s, n_t = len(s), len(t)
    mean, scale = pooled_standardiser(s, t)
    zs, zt = (s - mean) / scale, (t - mean) / scale
    if eps is None:
        eps = (np.sqrt(n_s) - 1) / np.sqrt(n_s)
    k = gauss_kernel(zs, zs, sigma)
    kappa = n_s / n_t * gauss_kernel(zs, zt, sigma).sum(axis=1)
    lo, hi = n_s * (1 - eps), n_s * (1 + eps)
    start = [np.ones(n_s)]

    def solve(mu):
        lin = kappa - mu
        res = scipy.optimize.minimize(lambda b: 0.5 * b @ k @ b - lin @ b, start[0], jac=lambda b: k @ b - lin,
                                      method="L-BFGS-B", bounds=[(0.0, bound)] * n_s,
                                      options={"maxiter": 5000, "ftol": 1e-15, "gtol": 1e-10})
        start[0] = res.x
        return res.x

    beta = solve(0.0)
    total = beta.sum()
    if total > hi or total < lo:
        edge = hi if total > hi else lo
        big = float(np.abs(kappa).max() + bound * k.sum(axis=1).max() + 1.0)
        bracket = (0.0, big) if total > hi else (-big, 0.0)
        mu = scipy.optimize.brentq(lambda m: solve(m).sum() - edge, *bracket, xtol=1e-12, rtol=1e-12)
        beta = solve(mu)
    return beta, 0.5 * beta @ k @ beta - kappa @ beta


def workload_kmm(args):
    n, d = args.kmm_n, args.ulsif_d
    s, t = gaussian_pair(n, n, d, args.delta, seed=7)
    truth = true_ratio(s, args.delta)
    if missing("KernelMeanMatching"):
        if not args.check_references:
            print("  kmm_qp: skipped, sw.KernelMeanMatching is not in this build")
            return
        mean, scale = pooled_standardiser(s, t)
        sigma = median_distance(np.vstack([(s - mean) / scale, (t - mean) / scale]), 0)
        tr, (beta, _) = timed(lambda: ref_kmm(s, t, sigma), args.repeats)
        record("kmm_qp (reference only)", f"{n}+{n}x{d}", [], tr, "n/a", f"NMSE {nmse(beta, truth):.4f}")
        return

    # shiftweight side: the paper's QP at the median-heuristic width (ridge 0, no held-out
    # selection), so that both sides solve the same program
    def run_sw():
        return sw.KernelMeanMatching(seed=0, sigma_multiples=(1.0,), ridge=0.0, block_rows=n).fit(s, t)

    est = run_sw()
    chosen = est.selection_["chosen"]
    sigma = chosen.get("sigma", getattr(est, "sigma_", None))
    kw = {}
    if "bound" in chosen:
        kw["bound"] = chosen["bound"]
    if "eps" in chosen:
        kw["eps"] = chosen["eps"]
    ts, tr, est, (beta, obj_ref) = alternate(run_sw, lambda: ref_kmm(s, t, sigma, **kw), args.repeats)
    b_sw = np.asarray(est.source_weights_)
    record("kmm_qp", f"{n}+{n}x{d}", ts, tr, f"NMSE {nmse(b_sw, truth):.4f}", f"NMSE {nmse(beta, truth):.4f}",
           f"weights rel L2 diff {np.linalg.norm(b_sw - beta) / np.linalg.norm(beta):.1e}; scipy L-BFGS-B + brentq on the sum multiplier")

    # The scalable variant with its defaults (blocks of 500, width and ridge chosen on the first
    # block), shiftweight only: no reference solves one QP over this many rows.
    big = args.kmm_large_n
    s2, _ = gaussian_pair(big, 1, d, args.delta, seed=8)
    truth2 = true_ratio(s2, args.delta)
    ts2, est2 = timed(lambda: sw.KernelMeanMatching(seed=0).fit(s2, t), 1)
    record("kmm_blocked", f"{big}+{n}x{d}, {est2.n_blocks_} blocks", ts2, [],
           f"NMSE {nmse(np.asarray(est2.source_weights_), truth2):.4f}", f"uniform NMSE {nmse(np.ones(big), truth2):.4f}",
           f"sigma {est2.sigma_:.3g}, ridge {est2.ridge_:g}; no reference (one QP of this size is out of reach)")


# ----------------------------------------------------------------------------------------------
# MMD permutation test (Gretton et al. 2012), all permutations as one matrix product
# ----------------------------------------------------------------------------------------------

def ref_mmd(s, t, sigma, permutations, seed=0):
    """Biased MMD^2 = v' K v with v = 1/n_s on source rows and -1/n_t on target rows; the observed
    labels and every permutation are the columns of one signed matrix V, so all statistics come
    from one product K V. p-value = (1 + #{perm >= observed}) / (1 + permutations)."""
    n_s, n_t = len(s), len(t)
    mean, scale = pooled_standardiser(s, t)
    z = (np.vstack([s, t]) - mean) / scale
    k = gauss_kernel(z, z, sigma)
    base = np.r_[np.full(n_s, 1.0 / n_s), np.full(n_t, -1.0 / n_t)]
    rng = np.random.default_rng(seed)
    v = np.empty((n_s + n_t, permutations + 1))
    v[:, 0] = base
    for j in range(permutations):
        v[:, j + 1] = base[rng.permutation(n_s + n_t)]
    stats = np.einsum("ij,ij->j", v, k @ v)
    return float(stats[0]), float((1 + np.sum(stats[1:] >= stats[0])) / (1 + permutations))


def workload_mmd(args):
    n, d, perms = args.mmd_n, args.ulsif_d, args.mmd_perms
    s, t = gaussian_pair(n, n, d, 0.2, seed=8)
    if missing("shift_test"):
        if not args.check_references:
            print("  mmd_permutation: skipped, sw.shift_test is not in this build")
            return
        mean, scale = pooled_standardiser(s, t)
        sigma = median_distance(np.vstack([(s - mean) / scale, (t - mean) / scale]), 0)
        tr, (stat, p) = timed(lambda: ref_mmd(s, t, sigma, perms), args.repeats)
        record("mmd_permutation (reference only)", f"{n}+{n}x{d}, {perms} perms", [], tr, "n/a",
               f"MMD^2 {stat:.4g}, p {p:.3g}")
        return

    # shiftweight side: public names from DESIGN.md (test added on another branch)
    def run_sw():
        return sw.shift_test(s, t, method="mmd", permutations=perms, seed=0)

    res = run_sw()
    details = getattr(res, "details", None) or {}
    sigma = details.get("sigma") if isinstance(details, dict) else None
    if sigma is None:
        sigma = getattr(res, "sigma", None)
    if sigma is None:
        mean, scale = pooled_standardiser(s, t)
        sigma = median_distance(np.vstack([(s - mean) / scale, (t - mean) / scale]), 0)
    ts, tr, res, (stat, p) = alternate(run_sw, lambda: ref_mmd(s, t, sigma, perms), args.repeats)
    record("mmd_permutation", f"{n}+{n}x{d}, {perms} perms", ts, tr,
           f"stat {res.statistic:.4g}, p {res.p_value:.3g}", f"MMD^2 {stat:.4g}, p {p:.3g}",
           "p-values differ by permutation draw only")


# ----------------------------------------------------------------------------------------------
# Tables: reading CSV / Parquet with text columns (command line against pyarrow), and `apply`
# ----------------------------------------------------------------------------------------------

TABLE_LEVELS = {
    "region": ["north", "south", "east", "west", "coast", "hills", "city", "valley"],
    "tariff": ["flat", "day-night", "dynamic"],
    "heating": ["gas", "heat pump", "oil", "electric", "district"],
    "dwelling": ["flat", "terraced", "semi", "detached"],
    "channel": ["web", "phone", "shop", "agent", "partner", "mail"],
}


def table_frame(n, shift, seed):
    """A pyarrow table of n rows: x01..x15 ~ N(shift e_1, I) and five text columns whose level
    frequencies move with ``shift``; about 1% of the values of x02 and of `tariff` are missing."""
    import pyarrow as pa
    rng = np.random.default_rng(seed)
    cols = {}
    x = rng.standard_normal((n, 15))
    x[:, 0] += shift
    for j in range(15):
        v = pa.array(x[:, j])
        if j == 1:
            v = pa.array(np.where(rng.random(n) < 0.01, np.nan, x[:, j]), from_pandas=True)
        cols[f"x{j + 1:02d}"] = v
    for name, levels in TABLE_LEVELS.items():
        p = np.arange(1, len(levels) + 1, dtype=float) ** (1.0 + shift)
        codes = rng.choice(len(levels), size=n, p=p / p.sum())
        text = np.asarray(levels, dtype=object)[codes]
        if name == "tariff":
            text = np.where(rng.random(n) < 0.01, None, text)
        cols[name] = pa.array(text, type=pa.string())
    return pa.table(cols)


def cli_run(cli, *a):
    """Runs the binary under /usr/bin/time; returns (seconds, peak resident memory in MB) of that
    one process. (The rusage of a forked child would start from this Python process's memory.)"""
    import subprocess
    import tempfile
    with tempfile.NamedTemporaryFile("r", suffix=".rss") as rss:
        t0 = time.perf_counter()
        p = subprocess.run(["/usr/bin/time", "-f", "%M", "-o", rss.name, cli, "--quiet", *a],
                           stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        dt = time.perf_counter() - t0
        if p.returncode != 0:
            sys.exit(f"{cli} {' '.join(a)} failed: {p.stderr}")
        kb = float(rss.read().strip().splitlines()[-1])
    return dt, kb / 1024.0


def workload_tables(args):
    try:
        import pyarrow.csv as pacsv
        import pyarrow.parquet as pq
    except ImportError:
        print("  skipped: pyarrow is not installed")
        return
    import tempfile
    cli = args.cli or os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))),
                                   "target", "release", "shiftweight")
    if not os.path.exists(cli):
        print(f"  skipped: {cli} not found (cargo build --release -p shiftweight-cli)")
        return
    folder = args.tables_dir or tempfile.mkdtemp(prefix="sw-tables-")
    os.makedirs(folder, exist_ok=True)
    n = args.tables_rows
    csv_path = os.path.join(folder, f"rows{n}.csv")
    pq_snappy = os.path.join(folder, f"rows{n}.snappy.parquet")
    pq_zstd = os.path.join(folder, f"rows{n}.zstd.parquet")
    if not all(os.path.exists(p) for p in (csv_path, pq_snappy, pq_zstd)):
        tab = table_frame(n, 0.3, seed=1)
        pacsv.write_csv(tab, csv_path)
        pq.write_table(tab, pq_snappy, compression="snappy")
        pq.write_table(tab, pq_zstd, compression="zstd")
    mb = os.path.getsize(csv_path) / 1e6
    size = f"{n}x20 (5 text), CSV {mb:.0f} MB"

    # Reading: every column typed (numbers / levels with gaps) on both sides.
    for label, path, ref in [
        ("read_csv", csv_path, lambda: pacsv.read_csv(csv_path)),
        ("read_parquet_snappy", pq_snappy, lambda: pq.read_table(pq_snappy)),
        ("read_parquet_zstd", pq_zstd, lambda: pq.read_table(pq_zstd)),
    ]:
        mem = []

        def run_sw(path=path, mem=mem):
            dt, rss = cli_run(cli, "columns", "--input", path)
            mem.append(rss)
            return dt

        ts, tr, _, tab = alternate(run_sw, ref, args.repeats)
        record(label, size, ts, tr, f"peak RSS {max(mem):.0f} MB", f"{tab.num_rows} rows read",
               "command line: process start + read + per-column summary (`columns`)")

    # `apply`: a uLSIF model fitted on 20,000 + 20,000 rows, scoring n rows and n/4 rows.
    src = os.path.join(folder, "fit_source.csv")
    tgt = os.path.join(folder, "fit_target.csv")
    model = os.path.join(folder, "model.json")
    if not os.path.exists(model):
        pacsv.write_csv(table_frame(20_000, 0.0, seed=2), src)
        pacsv.write_csv(table_frame(20_000, 0.3, seed=3), tgt)
        cli_run(cli, "weigh", "--source", src, "--target", tgt, "--estimator", "lsif",
                "--out", os.path.join(folder, "fit_weights.csv"), "--model", model)
    quarter = os.path.join(folder, f"rows{n // 4}.csv")
    if not os.path.exists(quarter):
        pacsv.write_csv(table_frame(n // 4, 0.3, seed=1), quarter)
    out = os.path.join(folder, "applied.csv")
    for rows, path in [(n // 4, quarter), (n, csv_path)]:
        mem = []

        def run_apply(path=path, mem=mem):
            dt, rss = cli_run(cli, "apply", "--model", model, "--input", path, "--out", out)
            mem.append(rss)
            return dt

        ts, _ = timed(run_apply, args.repeats)
        record("apply_encode_score", f"{rows}x20 (5 text), uLSIF 200 centres", ts, [],
               f"peak RSS {max(mem):.0f} MB", "n/a", "no reference: memory should not grow with rows")


WORKLOADS = {
    "ulsif": workload_ulsif,
    "scoring": workload_scoring,
    "kliep": workload_kliep,
    "classifier": workload_classifier,
    "logistic": workload_logistic,
    "kmm": workload_kmm,
    "mmd": workload_mmd,
    "tables": workload_tables,
}


def main(args):
    chosen = [w for w in args.only.split(",") if w] or list(WORKLOADS)
    unknown = [w for w in chosen if w not in WORKLOADS]
    if unknown:
        sys.exit(f"unknown workload(s) {unknown}; choose from {list(WORKLOADS)}")
    try:
        import threadpoolctl
        blas = [f"{i.get('internal_api')} {i.get('version')} ({i.get('num_threads')} threads)"
                for i in threadpoolctl.threadpool_info()]
    except Exception:  # threadpoolctl is optional
        blas = ["unknown"]
    print(f"shiftweight {sw.__version__}, numpy {np.__version__}, python {platform.python_version()}, "
          f"cpus {os.cpu_count()}, threads {args.threads or 'all'}, BLAS {', '.join(blas)}, "
          f"OPENBLAS_THREAD_TIMEOUT={os.environ.get('OPENBLAS_THREAD_TIMEOUT', 'unset')}, "
          f"settle {args.settle} s")
    print(f"load average before: {os.getloadavg()}; repeats {args.repeats} per side, alternating")
    for w in chosen:
        print(f"[{w}]", flush=True)
        WORKLOADS[w](args)
    print(f"load average after: {os.getloadavg()}")
    print("\n| workload | size | shiftweight (median s) | reference (median s) | ratio | shiftweight accuracy | reference accuracy | note |")
    print("|---|---|---|---|---|---|---|---|")
    for r in RESULTS:
        print(f"| {r['workload']} | {r['size']} | {r['sw_s']:.4g} | {r['ref_s']:.4g} | {r['ratio']:.2f}x | "
              f"{r['sw_accuracy']} | {r['ref_accuracy']} | {r['note']} |")
    if args.json:
        with open(args.json, "w") as f:
            json.dump(dict(load=os.getloadavg(), threads=args.threads, results=RESULTS), f, indent=1)


if __name__ == "__main__":
    main(ARGS)
