use super::factor::*;
use super::sqp::*;
use super::*;
use faer::prelude::*;
use rand_distr::{Distribution, Normal};

fn gauss(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
    let mut r = crate::random::rng(seed);
    let g = Normal::new(mean, sd).unwrap();
    (0..n).map(|_| g.sample(&mut r)).collect()
}

/// A 1-D KLIEP problem: n rows from N(mean, sd^2), the first b of them as centres, the
/// n x b kernel matrix at width `sigma`, and the constraint vector h_l = `h(l)`.
fn one_d_problem(
    n: usize,
    b: usize,
    (mean, sd): (f64, f64),
    sigma: f64,
    seed: u64,
    h: impl Fn(usize) -> f64,
) -> (Vec<f64>, Vec<f64>) {
    let t = gauss(n, mean, sd, seed);
    let tv = MatrixView::new(&t, n, 1).unwrap();
    let cv = MatrixView::new(&t[..b], b, 1).unwrap();
    (kernel_matrix(tv, cv, sigma), (0..b).map(h).collect())
}

fn normal_pdf(x: f64, m: f64, s: f64) -> f64 {
    (-(x - m) * (x - m) / (2.0 * s * s)).exp() / (s * (2.0 * std::f64::consts::PI).sqrt())
}

#[test]
fn batch_equals_solving_each_fold_alone_on_its_own_rows() {
    // Three held-out-fold problems solved as a batch must give what each gives alone on a
    // matrix holding only its training rows (the claim of `solve_kliep_batch`).
    let (n, b) = (120, 12);
    let t = gauss(n, 2.0, 0.25, 5);
    let centres: Vec<f64> = t[..b].to_vec();
    let tv = MatrixView::new(&t, n, 1).unwrap();
    let cv = MatrixView::new(&centres, b, 1).unwrap();
    let a = kernel_matrix(tv, cv, 0.3);
    let fold: Vec<usize> = (0..n).map(|i| i % 3).collect();
    let h: Vec<Vec<f64>> = (0..3)
        .map(|f| (0..b).map(|l| 0.02 + 0.01 * ((l + f) % 5) as f64).collect())
        .collect();
    let problems: Vec<(Vec<f64>, Option<usize>)> =
        (0..3).map(|f| (h[f].clone(), Some(f))).collect();
    let together = solve_kliep_batch(&a, b, Some(&fold), &problems, 1e-10, 10_000);
    for f in 0..3 {
        let own: Vec<f64> = (0..n)
            .filter(|t| fold[*t] != f)
            .flat_map(|t| a[t * b..(t + 1) * b].to_vec())
            .collect();
        let alone = solve_kliep_batch(&own, b, None, &[(h[f].clone(), None)], 1e-10, 10_000);
        let (x, y) = (together[f].as_ref().unwrap(), alone[0].as_ref().unwrap());
        assert_eq!(x.iterations, y.iterations, "fold {f}");
        assert!((x.objective - y.objective).abs() < 1e-10, "fold {f}");
        for (p, q) in x.alpha.iter().zip(&y.alpha) {
            assert!(
                (p - q).abs() <= 1e-8 * q.abs().max(1.0),
                "fold {f}: {p} vs {q}"
            );
        }
    }
}

#[test]
fn sqp_reaches_the_optimum_of_the_plain_em_iteration() {
    // Reference: the multiplicative EM update for mixture proportions, p_l <- p_l g_l
    // (Cover 1984, IEEE Trans. Inf. Theory 30; Dempster, Laird, Rubin 1977), written out
    // here independently of the solver and run for many steps; both must reach the same
    // maximum, and the solver's certified gap must hold against it.
    for (sigma, seed) in [(0.15, 3u64), (0.5, 4), (1.0, 5)] {
        let (n, b) = (200, 15);
        let (a, h) = one_d_problem(n, b, (2.0, 0.5), sigma, seed, |l| {
            0.05 + 0.02 * (l % 7) as f64
        });
        let sol = solve_kliep_batch(&a, b, None, &[(h.clone(), None)], 1e-9, 10_000)
            .pop()
            .flatten()
            .unwrap();
        let f = |p: &[f64]| -> f64 {
            (0..n)
                .map(|t| (0..b).map(|l| a[t * b + l] / h[l] * p[l]).sum::<f64>().ln())
                .sum::<f64>()
                / n as f64
        };
        // EM until its own certified gap (Cover 1984) is below 1e-10.
        let mut p = vec![1.0 / b as f64; b];
        let mut em_gap = f64::INFINITY;
        for _ in 0..400_000 {
            let u: Vec<f64> = (0..n)
                .map(|t| (0..b).map(|l| a[t * b + l] / h[l] * p[l]).sum::<f64>())
                .collect();
            let g: Vec<f64> = (0..b)
                .map(|l| (0..n).map(|t| a[t * b + l] / h[l] / u[t]).sum::<f64>() / n as f64)
                .collect();
            em_gap = g.iter().cloned().fold(0.0f64, f64::max).ln().max(0.0);
            if em_gap <= 1e-10 {
                break;
            }
            for l in 0..b {
                p[l] *= g[l];
            }
        }
        assert!(
            em_gap <= 1e-10,
            "sigma {sigma}: the reference EM did not converge"
        );
        let p_sqp: Vec<f64> = sol.alpha.iter().zip(&h).map(|(x, hh)| x * hh).collect();
        let total: f64 = p_sqp.iter().sum();
        assert!(
            (total - 1.0).abs() < 1e-12,
            "sigma {sigma}: h'alpha = {total}"
        );
        assert!(p_sqp.iter().all(|v| *v >= 0.0));
        let (f_sqp, f_em) = (f(&p_sqp), f(&p));
        assert!((f_sqp - sol.objective).abs() < 1e-12);
        assert!(sol.gap <= 1e-9, "sigma {sigma}: gap {}", sol.gap);
        // Both are within their gap bounds of the same maximum.
        assert!(
            (f_sqp - f_em).abs() <= 1e-9,
            "sigma {sigma}: sqp {f_sqp} em {f_em}"
        );
    }
}

#[test]
fn updated_cholesky_factor_matches_a_fresh_faer_factorisation() {
    // Reference: faer's own Cholesky factorisation (Mat::llt) of the same submatrix, formed
    // afresh after every update; and L L' = A entry by entry.
    let n = 30;
    let g = gauss(n * (n + 5), 0.0, 1.0, 21);
    let gm = MatRef::from_row_major_slice(&g, n, n + 5);
    let a = gm * gm.transpose();
    let ridge = 1e-9;
    let mut idx: Vec<usize> = (0..20).collect();
    let mut f = Cholesky::factor(idx.len(), |i, j| a[(idx[i], idx[j])], ridge).unwrap();
    // Fix and free columns in a pattern like the active-set method's.
    let steps: [(bool, usize); 8] = [
        (false, 3),
        (true, 25),
        (false, 0),
        (false, 17),
        (true, 21),
        (true, 29),
        (false, 5),
        (true, 3),
    ];
    for (add, which) in steps {
        if add {
            let col: Vec<f64> = idx.iter().map(|&j| a[(which, j)]).collect();
            assert!(f.append(&col, a[(which, which)]));
            idx.push(which);
        } else {
            f.remove(which);
            idx.remove(which);
        }
        let k = idx.len();
        let sub = Mat::from_fn(k, k, |i, j| {
            a[(idx[i], idx[j])] + if i == j { ridge } else { 0.0 }
        });
        for i in 0..k {
            for j in 0..=i {
                let llt: f64 = (0..=j).map(|p| f.rows[i][p] * f.rows[j][p]).sum();
                assert!(
                    (llt - sub[(i, j)]).abs() <= 1e-10 * (1.0 + sub[(i, i)]),
                    "({i}, {j})"
                );
            }
        }
        let rhs: Vec<f64> = (0..k).map(|i| (i as f64 * 0.7).sin()).collect();
        let z = f.solve(&rhs);
        let reference = sub
            .llt(faer::Side::Lower)
            .unwrap()
            .solve(Mat::from_fn(k, 1, |i, _| rhs[i]));
        for i in 0..k {
            assert!((z[i] - reference[(i, 0)]).abs() <= 1e-8 * (1.0 + reference[(i, 0)].abs()));
        }
    }
    // A copy of a column, with its diagonal lowered, would make the block indefinite: it is
    // refused and the factor is left as it was.
    let dup: Vec<f64> = idx.iter().map(|&j| a[(idx[0], j)]).collect();
    let mut g = Cholesky {
        rows: f.rows.clone(),
        ridge: 0.0,
    };
    assert!(!g.append(&dup, a[(idx[0], idx[0])] - 1e-6));
    assert_eq!(g.rows, f.rows);
}

#[test]
fn both_curvature_sources_solve_the_qp_subproblem_to_its_kkt_conditions() {
    // The bound-constrained QP min 1/2 y'Hy + c'y, y >= 0, is solved when y >= 0,
    // (Hy + c)_l = 0 where y_l > 0 and (Hy + c)_l >= 0 where y_l = 0 (the KKT conditions;
    // Nocedal & Wright 2006, section 16.5). H and c are written out here densely from their
    // definitions, independently of the solver's blocks and passes. Narrow widths make the
    // active-set method free and fix many columns, which exercises both curvature sources.
    for (sigma, seed) in [(0.08, 11u64), (0.15, 12), (0.6, 13)] {
        let (n, b) = (300, 40);
        let (a, h) = one_d_problem(n, b, (0.0, 1.0), sigma, seed, |l| {
            0.05 + 0.03 * (l % 5) as f64
        });
        let rows = ProblemRows {
            a: &a,
            b,
            row_fold: None,
            skip: None,
        };
        let nf = n as f64;
        // A point away from the optimum: uneven positive x.
        let x: Vec<f64> = (0..b)
            .map(|l| (1.0 + (l % 3) as f64) / (2.0 * b as f64))
            .collect();
        let alpha: Vec<f64> = x.iter().zip(&h).map(|(x, h)| x / h).collect();
        let u: Vec<f64> = (0..n)
            .map(|r| (0..b).map(|l| a[r * b + l] * alpha[l]).sum())
            .collect();
        let m: Vec<f64> = (0..b)
            .map(|l| (0..n).map(|r| a[r * b + l] / h[l] / u[r]).sum::<f64>() / nf)
            .collect();
        let mean_log = u.iter().map(|v| v.ln()).sum::<f64>() / nf;
        let cur = SqpPoint {
            phi: -mean_log + x.iter().sum::<f64>(),
            x,
            alpha,
            mean_log,
            m: m.clone(),
        };
        let hess = |i: usize, j: usize| -> f64 {
            (0..n)
                .map(|r| a[r * b + i] * a[r * b + j] / (u[r] * u[r]))
                .sum::<f64>()
                / (nf * h[i] * h[j])
        };
        let active: Vec<usize> = (0..b).collect();
        let mut solutions = Vec::new();
        for mode in [BlockMode::Whole, BlockMode::Grown] {
            let mut free = active.clone();
            let y = sqp_subproblem(&rows, &h, &active, &cur, &mut free, nf, mode);
            let scale = 1.0 + y.iter().cloned().fold(0.0f64, f64::max);
            assert!(y.iter().all(|v| *v >= 0.0), "{mode:?} sigma {sigma}");
            for l in 0..b {
                let g = (0..b).map(|j| hess(l, j) * y[j]).sum::<f64>() + 1.0 - 2.0 * m[l];
                if y[l] > 0.0 {
                    assert!(
                        g.abs() <= 1e-7 * scale,
                        "{mode:?} sigma {sigma}: column {l} free with gradient {g}"
                    );
                } else {
                    assert!(
                        g >= -1e-7 * scale,
                        "{mode:?} sigma {sigma}: column {l} fixed with multiplier {g}"
                    );
                }
            }
            solutions.push(y);
        }
        for (l, (whole, grown)) in solutions[0].iter().zip(&solutions[1]).enumerate() {
            assert!(
                (whole - grown).abs() <= 1e-8 * (1.0 + whole),
                "sigma {sigma}: the two sources disagree at column {l}"
            );
        }
    }
}

#[test]
fn constraint_holds_and_perturbations_do_not_improve() {
    let n = 150;
    let s = gauss(n, 1.0, 0.5, 1);
    let t = gauss(n, 2.0, 0.25, 2);
    let sv = MatrixView::new(&s, n, 1).unwrap();
    let tv = MatrixView::new(&t, n, 1).unwrap();
    let fit = KLRatio::new().n_basis(40).fit(sv, tv).unwrap();
    // Normalisation constraint: mean source weight = 1 on the fitted rows.
    let mean: f64 = fit.source_weights.iter().sum::<f64>() / n as f64;
    assert!((mean - 1.0).abs() < 1e-9, "mean source weight {mean}");
    // Optimality: no feasible perturbation (move mass between two centres, keeping the
    // constraint) increases the objective. Reference: KKT conditions of a concave program
    // (Boyd & Vandenberghe 2004, section 5.5.3).
    let RatioForm::KernelExpansion {
        sigma,
        centres,
        coef,
    } = &fit.form
    else {
        panic!()
    };
    let (_, zs, zt, _) = standardise_pair(sv, tv);
    let b = centres.rows();
    let kt = kernel_matrix(zt.view(), centres.view(), *sigma);
    let ks = kernel_matrix(zs.view(), centres.view(), *sigma);
    let h: Vec<f64> = (0..b)
        .map(|l| (0..n).map(|i| ks[i * b + l]).sum::<f64>() / n as f64)
        .collect();
    let obj = |a: &[f64]| -> f64 {
        (0..n)
            .map(|t| (0..b).map(|l| kt[t * b + l] * a[l]).sum::<f64>().ln())
            .sum::<f64>()
            / n as f64
    };
    let f0 = obj(coef);
    for (i, j) in [(0, 1), (3, 7), (10, 20), (b - 1, 0)] {
        for step in [1e-3, -1e-3] {
            let mut a = coef.clone();
            // keep h'a fixed: a_i += step / h_i, a_j -= step / h_j.
            a[i] += step / h[i];
            a[j] -= step / h[j];
            if a[i] < 0.0 || a[j] < 0.0 {
                continue;
            }
            assert!(
                obj(&a) <= f0 + 1e-6,
                "perturbation ({i},{j},{step}) improved the objective"
            );
        }
    }
}

#[test]
fn gaussian_pair_error_is_small_and_falls_with_n() {
    // Analytic ratio of N(2, 0.25^2) over N(1, 0.5^2) (a covariate-shift toy, from memory).
    let mut nmse = Vec::new();
    for &n in &[100usize, 800] {
        let s = gauss(n, 1.0, 0.5, 10 + n as u64);
        let t = gauss(n, 2.0, 0.25, 20 + n as u64);
        let fit = KLRatio::new()
            .n_basis(100)
            .fit(
                MatrixView::new(&s, n, 1).unwrap(),
                MatrixView::new(&t, n, 1).unwrap(),
            )
            .unwrap();
        let test = gauss(2000, 1.0, 0.5, 99);
        let w = fit.ratio(MatrixView::new(&test, 2000, 1).unwrap()).unwrap();
        let truth: Vec<f64> = test
            .iter()
            .map(|x| normal_pdf(*x, 2.0, 0.25) / normal_pdf(*x, 1.0, 0.5))
            .collect();
        let (sw, st): (f64, f64) = (w.iter().sum(), truth.iter().sum());
        let e: f64 = w
            .iter()
            .zip(&truth)
            .map(|(a, b)| (a / sw - b / st).powi(2))
            .sum();
        nmse.push(e * 2000.0);
    }
    // Baseline: uniform weights (no correction) against the same analytic truth.
    let test = gauss(2000, 1.0, 0.5, 99);
    let truth: Vec<f64> = test
        .iter()
        .map(|x| normal_pdf(*x, 2.0, 0.25) / normal_pdf(*x, 1.0, 0.5))
        .collect();
    let st: f64 = truth.iter().sum();
    let uniform: f64 = truth
        .iter()
        .map(|b| (1.0 / 2000.0 - b / st).powi(2))
        .sum::<f64>()
        * 2000.0;
    assert!(nmse[1] < nmse[0], "NMSE did not fall with n: {nmse:?}");
    assert!(
        nmse[1] < 0.1 * uniform,
        "NMSE {nmse:?} not well below uniform weights' {uniform}"
    );
}

#[test]
fn both_cv_variants_run_and_bad_parameters_are_named() {
    let s = gauss(60, 0.0, 1.0, 5);
    let t = gauss(60, 0.5, 1.0, 6);
    let (sv, tv) = (
        MatrixView::new(&s, 60, 1).unwrap(),
        MatrixView::new(&t, 60, 1).unwrap(),
    );
    for cv in [KliepCv::SourceAndTarget, KliepCv::TargetOnly] {
        let fit = KLRatio::new().n_basis(20).cv(cv).fit(sv, tv).unwrap();
        assert_eq!(fit.selection.table.len(), 7);
    }
    for est in [
        KLRatio::new().folds(1),
        KLRatio::new().n_basis(0),
        KLRatio::new().tol(0.0),
        KLRatio::new().sigma_multiples(vec![]),
    ] {
        assert!(matches!(
            est.fit(sv, tv),
            Err(Error::InvalidParameter { .. })
        ));
    }
    assert!(KliepCv::from_name("nope").is_err());
}
