use super::*;
use crate::data::Matrix;
use rand_distr::{Distribution, Normal};

fn gaussian_rows(n: usize, d: usize, mean: f64, seed: u64) -> Matrix {
    let mut r = crate::random::rng(seed);
    let nd = Normal::new(mean, 1.0).unwrap();
    Matrix::new((0..n * d).map(|_| nd.sample(&mut r)).collect(), n, d).unwrap()
}

/// Direct kernel k(x, c) by the textbook formula, for the brute-force reference.
fn k(x: &[f64], c: &[f64], sigma: f64) -> f64 {
    let sq: f64 = x.iter().zip(c).map(|(a, b)| (a - b) * (a - b)).sum();
    (-sq / (2.0 * sigma * sigma)).exp()
}

/// Brute-force leave-one-out: remove source row i and target row i, rebuild H and h from
/// scratch, solve with a dense solver, clip at zero, score the held-out pair.
fn brute_force_loo(
    s: &Matrix,
    t: &Matrix,
    held: &[(usize, usize)],
    c: &Matrix,
    sigma: f64,
    lam: f64,
    alpha: f64,
) -> f64 {
    let b = c.rows();
    let feats = |x: &[f64]| -> Vec<f64> { (0..b).map(|l| k(x, c.row(l), sigma)).collect() };
    let mut total = 0.0;
    for &(i_s, i_t) in held {
        let mut h_mat = Mat::<f64>::zeros(b, b);
        let mut h = vec![0.0; b];
        let (ns1, nt1) = (s.rows() as f64 - 1.0, t.rows() as f64 - 1.0);
        for r in (0..s.rows()).filter(|r| *r != i_s) {
            let f = feats(s.row(r));
            for p in 0..b {
                for q in 0..b {
                    h_mat[(p, q)] += (1.0 - alpha) * f[p] * f[q] / ns1;
                }
            }
        }
        for r in (0..t.rows()).filter(|r| *r != i_t) {
            let f = feats(t.row(r));
            for p in 0..b {
                h[p] += f[p] / nt1;
                for q in 0..b {
                    h_mat[(p, q)] += alpha * f[p] * f[q] / nt1;
                }
            }
        }
        let theta = solve_theta(&h_mat, &h, lam).unwrap();
        let rs: f64 = feats(s.row(i_s))
            .iter()
            .zip(&theta)
            .map(|(a, b)| a * b)
            .sum();
        let rt: f64 = feats(t.row(i_t))
            .iter()
            .zip(&theta)
            .map(|(a, b)| a * b)
            .sum();
        total += (1.0 - alpha) * rs * rs / 2.0 + alpha * rt * rt / 2.0 - rt;
    }
    total / held.len() as f64
}

fn closed_form(
    s: &Matrix,
    t: &Matrix,
    held: &[(usize, usize)],
    c: &Matrix,
    sigma: f64,
    lams: &[f64],
    alpha: f64,
) -> Vec<f64> {
    let (n_s, n_t) = (s.rows(), t.rows());
    let ss = kernel_sums(s.view(), c.view(), &[sigma], true);
    let st = kernel_sums(t.view(), c.view(), &[sigma], alpha > 0.0);
    let mut base = ss.gram[0].clone().unwrap() * Scale((1.0 - alpha) / (n_s as f64 - 1.0));
    if alpha > 0.0 {
        base += st.gram[0].clone().unwrap() * Scale(alpha / (n_t as f64 - 1.0));
    }
    let is: Vec<usize> = held.iter().map(|p| p.0).collect();
    let it: Vec<usize> = held.iter().map(|p| p.1).collect();
    let c_sq = kernel::row_sq_norms(c.view());
    let b = c.rows();
    let mut ds = vec![0.0; held.len() * b];
    let mut dt = vec![0.0; held.len() * b];
    kernel::sq_distances_into(s.view().select_rows(&is).view(), c.view(), &c_sq, &mut ds);
    kernel::sq_distances_into(t.view().select_rows(&it).view(), c.view(), &c_sq, &mut dt);
    loo_scores(
        &base,
        &st.sum[0],
        &ds,
        &dt,
        sigma,
        held.len(),
        n_s,
        n_t,
        alpha,
        lams,
    )
    .unwrap()
}

// Reference: Kanamori, Hido, Sugiyama (2009), JMLR 10, section 3.4 — the closed-form LOOCV
// score must equal explicit leave-one-out refits (here rebuilt from scratch and solved densely).
#[test]
fn closed_form_loocv_equals_brute_force_refits() {
    let s = gaussian_rows(23, 2, 0.0, 1);
    let t = gaussian_rows(17, 2, 0.7, 2);
    let c = t.view().select_rows(&[0, 3, 5, 8, 11, 16]);
    let lams = [1e-3, 0.1, 2.0];
    for &alpha in &[0.0, 0.3] {
        for &sigma in &[0.6, 1.5] {
            // Every pair (m = n_t) and a subset of pairs with mismatched indices.
            let all: Vec<(usize, usize)> = (0..17).map(|i| (i, i)).collect();
            let some = vec![(2usize, 9usize), (20, 1), (7, 16), (0, 4)];
            for held in [all, some] {
                let fast = closed_form(&s, &t, &held, &c, sigma, &lams, alpha);
                for (li, &lam) in lams.iter().enumerate() {
                    let slow = brute_force_loo(&s, &t, &held, &c, sigma, lam, alpha);
                    assert!(
                        (fast[li] - slow).abs() <= 1e-9 * (1.0 + slow.abs()),
                        "alpha {alpha} sigma {sigma} lam {lam}: closed form {} vs brute force {slow}",
                        fast[li]
                    );
                }
            }
        }
    }
}

// Property (no outside reference): the fixed-chunk reductions make every result bitwise
// identical whatever the number of threads. Sizes span several row chunks and LOOCV blocks.
#[test]
fn fit_and_scores_are_bitwise_identical_for_any_thread_count() {
    let s = gaussian_rows(5000, 3, 0.0, 11);
    let t = gaussian_rows(3000, 3, 0.5, 12);
    let x = gaussian_rows(7000, 3, 0.2, 13);
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let est = LeastSquaresRatio::new().n_basis(60).max_cv_rows(1500);
            let m = est.fit(s.view(), t.view()).unwrap();
            let w = m.ratio(x.view()).unwrap();
            let scores: Vec<f64> = m.selection.table.iter().map(|r| r.score).collect();
            let logit = crate::learn::WeightedLogistic::new()
                .fit(
                    s.view(),
                    &(0..s.rows())
                        .map(|i| (i % 3 == 0) as u8 as f64)
                        .collect::<Vec<_>>(),
                    Some(&m.source_weights),
                )
                .unwrap();
            (m.to_json().unwrap(), w, scores, logit.coef)
        })
    };
    let one = run(1);
    for threads in [2, 3] {
        let other = run(threads);
        assert!(one.0 == other.0, "model differs with {threads} threads");
        assert!(
            one.1 == other.1,
            "scores of rows differ with {threads} threads"
        );
        assert!(
            one.2 == other.2,
            "LOOCV table differs with {threads} threads"
        );
        assert!(
            one.3 == other.3,
            "logistic coefficients differ with {threads} threads"
        );
    }
}

#[test]
fn out_of_range_parameters_are_rejected_by_name() {
    for (est, name) in [
        (LeastSquaresRatio::new().alpha(1.0), "alpha"),
        (LeastSquaresRatio::new().alpha(-0.1), "alpha"),
        (LeastSquaresRatio::new().sigma(Some(-1.0)), "sigma"),
        (LeastSquaresRatio::new().lam(Some(0.0)), "lam"),
        (LeastSquaresRatio::new().n_basis(0), "n_basis"),
        (LeastSquaresRatio::new().lambda_grid(vec![]), "lambda_grid"),
    ] {
        match est.check() {
            Err(Error::InvalidParameter { name: n, .. }) => assert_eq!(n, name),
            other => panic!("expected an error naming {name}, got {other:?}"),
        }
    }
}

#[test]
fn mismatched_and_non_finite_inputs_are_errors() {
    let s = gaussian_rows(10, 2, 0.0, 1);
    let t = gaussian_rows(10, 3, 0.0, 2);
    assert!(matches!(
        LeastSquaresRatio::new().fit(s.view(), t.view()),
        Err(Error::FeatureCountMismatch { .. })
    ));
    let mut bad = gaussian_rows(10, 2, 0.0, 3).into_vec();
    bad[7] = f64::INFINITY;
    let bad = Matrix::new(bad, 10, 2).unwrap();
    match LeastSquaresRatio::new().fit(s.view(), bad.view()) {
        Err(Error::NonFinite {
            argument,
            row,
            column,
            ..
        }) => {
            assert_eq!((argument.as_str(), row, column), ("target", 3, 1))
        }
        other => panic!("{other:?}"),
    }
}
