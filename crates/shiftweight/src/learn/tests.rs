//! Tests of the weighted linear models.

use super::logistic::log1p_unit;
use super::*;

#[test]
fn ridge_without_penalty_is_weighted_least_squares_by_hand() {
    // y = 1 + 2x exactly: any weights recover it.
    let x = [0.0, 1.0, 2.0, 3.0];
    let y = [1.0, 3.0, 5.0, 7.0];
    let m = WeightedRidge::new()
        .l2(0.0)
        .fit(
            MatrixView::new(&x, 4, 1).unwrap(),
            &y,
            Some(&[1.0, 2.0, 3.0, 4.0]),
        )
        .unwrap();
    assert!((m.coef[0] - 2.0).abs() < 1e-12 && (m.intercept - 1.0).abs() < 1e-12);
}

#[test]
fn weights_are_checked() {
    assert!(validate_weights(&[1.0, -1.0], 2, "w").is_err());
    assert!(validate_weights(&[0.0, 0.0], 2, "w").is_err());
    assert!(validate_weights(&[1.0], 2, "w").is_err());
    assert!(validate_weights(&[1.0, f64::NAN], 2, "w").is_err());
}

#[test]
fn log1p_unit_matches_std_ln_1p() {
    // Reference: Rust's f64::ln_1p (the platform libm) over [0, 1], including both sides of
    // the sqrt(2) - 1 switch and tiny arguments; a few units in the last place.
    let mut worst = 0.0f64;
    for k in 0..=100_000 {
        let u = k as f64 / 100_000.0;
        for v in [
            u,
            u * 1e-9,
            (std::f64::consts::SQRT_2 - 1.0) * (1.0 + (u - 0.5) * 1e-12),
        ] {
            let (a, b) = (log1p_unit(v), v.ln_1p());
            let rel = if b == 0.0 {
                a.abs()
            } else {
                ((a - b) / b).abs()
            };
            worst = worst.max(rel);
        }
    }
    assert!(worst < 4.0 * f64::EPSILON, "worst relative error {worst:e}");
}

#[test]
fn logistic_gradient_vanishes_at_solution() {
    let x: Vec<f64> = (0..40).map(|i| (i as f64 - 20.0) / 7.0).collect();
    // Overlapping classes: more ones on the right, some on both sides.
    let y: Vec<f64> = (0..40)
        .map(|i| {
            if (i * 37) % 11 < 3 + 5 * usize::from(i > 20) {
                1.0
            } else {
                0.0
            }
        })
        .collect();
    let w: Vec<f64> = (0..40).map(|i| 0.5 + (i % 3) as f64).collect();
    let m = WeightedLogistic::new()
        .l2(0.3)
        .fit(MatrixView::new(&x, 40, 1).unwrap(), &y, Some(&w))
        .unwrap();
    let (mut g0, mut g1) = (0.3 * m.coef[0], 0.0);
    for i in 0..40 {
        let r = w[i] * (sigmoid(m.coef[0] * x[i] + m.intercept) - y[i]);
        g0 += r * x[i];
        g1 += r;
    }
    assert!(g0.abs() < 1e-8 && g1.abs() < 1e-8, "gradient {g0} {g1}");
}

/// Overlapping two-class rows in 3 columns (deterministic), with zero weights on every fifth
/// row as in a cross-fitting fold.
fn fold_like_problem(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut x = Vec::with_capacity(3 * n);
    let mut y = Vec::with_capacity(n);
    for i in 0..n {
        let a = ((i * 7919) % 1000) as f64 / 250.0 - 2.0;
        let b = ((i * 104_729) % 997) as f64 / 300.0 - 1.5;
        let c = ((i * 31) % 101) as f64 / 50.0 - 1.0;
        x.extend_from_slice(&[a, b, c]);
        let s = 0.8 * a - 0.5 * b + 0.2 * c + 0.3;
        y.push(
            if ((i * 2_654_435_761) % 1000) as f64 / 1000.0 < sigmoid(s) {
                1.0
            } else {
                0.0
            },
        );
    }
    let w = (0..n).map(|i| if i % 5 == 2 { 0.0 } else { 1.0 }).collect();
    (x, y, w)
}

#[test]
fn warm_start_reaches_the_same_optimum_as_the_usual_start() {
    // Strict convexity (l2 > 0): the optimum does not depend on the start, so a start near it
    // (as cross-fitting gives) and a start far from it must agree to the tolerance. 420,000
    // rows take the large-input path (start subsample, scaling from the subsample).
    for n in [3_000usize, 420_000] {
        let (x, y, w) = fold_like_problem(n);
        let xv = MatrixView::new(&x, n, 3).unwrap();
        let (c0, b0, _) = fit_logistic_unchecked(xv, &y, &w, 1.0, 100, 1e-10).unwrap();
        for start in [
            (vec![0.0, 0.0, 0.0], 0.0),
            (vec![5.0, -3.0, 1.0], -2.0),
            (c0.iter().map(|c| c * 1.01).collect(), b0 - 0.01),
        ] {
            let (c1, b1, _) =
                fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&start.0, start.1)).unwrap();
            for (a, b) in c0.iter().zip(&c1).chain([(&b0, &b1)]) {
                assert!(
                    (a - b).abs() <= 1e-7 * (1.0 + a.abs()),
                    "n = {n}, start {start:?}: {c0:?} {b0} vs {c1:?} {b1}"
                );
            }
        }
    }
}

#[test]
fn warm_start_of_the_wrong_length_or_not_finite_is_rejected() {
    let (x, y, w) = fold_like_problem(100);
    let xv = MatrixView::new(&x, 100, 3).unwrap();
    for (c, b) in [(vec![0.0, 0.0], 0.0), (vec![0.0, f64::NAN, 0.0], 0.0)] {
        let e = fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&c, b)).unwrap_err();
        assert!(e.to_string().contains("warm start"), "{e}");
    }
}
