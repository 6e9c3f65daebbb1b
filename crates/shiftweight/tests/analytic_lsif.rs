//! uLSIF / RuLSIF against analytic density ratios of Gaussian pairs.
//!
//! Reference for the truth: the ratio of two normal densities in closed form (common::normal_ratio).
//! The 1-D pair, source N(1, 0.5^2) and target N(2, 0.25^2), is a toy of the covariate-shift
//! literature (from memory). NMSE is mean((w_hat - w)^2) / mean(w^2) after rescaling both to mean 1
//! on held-out source rows; "uniform" is the NMSE of w_hat = 1 (no correction).

mod common;
use common::{gaussian, nmse, normal_ratio};
use shiftweight::{LeastSquaresRatio, RatioEstimator};

fn run(
    est: &LeastSquaresRatio,
    n: usize,
    ms: &[f64],
    ss: f64,
    mt: &[f64],
    st: f64,
    seed: u64,
) -> (f64, f64) {
    let s = gaussian(n, ms, ss, seed);
    let t = gaussian(n, mt, st, seed + 1000);
    let held = gaussian(2000, ms, ss, seed + 2000);
    let model = est.clone().seed(seed).fit(s.view(), t.view()).unwrap();
    let w = model.ratio(held.view()).unwrap();
    let truth: Vec<f64> = (0..held.rows())
        .map(|i| normal_ratio(held.row(i), ms, ss, mt, st))
        .collect();
    (nmse(&w, &truth), nmse(&vec![1.0; truth.len()], &truth))
}

fn mean_nmse(
    est: &LeastSquaresRatio,
    n: usize,
    ms: &[f64],
    ss: f64,
    mt: &[f64],
    st: f64,
) -> (f64, f64) {
    let seeds = 3;
    let (mut e, mut u) = (0.0, 0.0);
    for seed in 0..seeds {
        let (a, b) = run(est, n, ms, ss, mt, st, seed);
        e += a / seeds as f64;
        u += b / seeds as f64;
    }
    (e, u)
}

#[test]
fn one_dimensional_toy_is_recovered_and_improves_with_n() {
    let est = LeastSquaresRatio::new().n_basis(100);
    let (small, uniform) = mean_nmse(&est, 200, &[1.0], 0.5, &[2.0], 0.25);
    let (large, _) = mean_nmse(&est, 2400, &[1.0], 0.5, &[2.0], 0.25);
    eprintln!("1-D NMSE: n=200 {small:.3}, n=2400 {large:.3}, uniform {uniform:.3}");
    assert!(large < 0.15, "NMSE {large} at n = 2400");
    assert!(
        large < 0.6 * small,
        "NMSE should shrink with n: {small} -> {large}"
    );
    assert!(
        small < 0.5 * uniform,
        "better than no correction: {small} vs {uniform}"
    );
}

#[test]
fn five_dimensional_mean_shift_beats_uniform_and_improves_with_n() {
    // Source N(0, I_5), target N(e_1, I_5): true log-ratio x_1 - 1/2.
    let est = LeastSquaresRatio::new().n_basis(100);
    let ms = [0.0; 5];
    let mt = [1.0, 0.0, 0.0, 0.0, 0.0];
    let (small, uniform) = mean_nmse(&est, 400, &ms, 1.0, &mt, 1.0);
    let (large, _) = mean_nmse(&est, 3200, &ms, 1.0, &mt, 1.0);
    eprintln!("5-D NMSE: n=400 {small:.3}, n=3200 {large:.3}, uniform {uniform:.3}");
    // Kernel estimators gain little over uniform weights in 5 dimensions; the classifier and the
    // automatic choice address that. Here we require a real gain and improvement with n.
    assert!(large < 0.9 * uniform, "NMSE {large} vs uniform {uniform}");
    assert!(
        large < small,
        "NMSE should shrink with n: {small} -> {large}"
    );
}

#[test]
fn relative_ratio_matches_its_analytic_form() {
    // RuLSIF estimates r_alpha = p_t / (alpha p_t + (1 - alpha) p_s) (Yamada et al. 2013).
    let alpha = 0.2;
    let (ms, ss, mt, st) = ([1.0], 0.5, [2.0], 0.25);
    let s = gaussian(1500, &ms, ss, 5);
    let t = gaussian(1500, &mt, st, 6);
    let held = gaussian(2000, &ms, ss, 7);
    let model = LeastSquaresRatio::new()
        .alpha(alpha)
        .n_basis(100)
        .fit(s.view(), t.view())
        .unwrap();
    let w = model.ratio(held.view()).unwrap();
    let truth: Vec<f64> = (0..held.rows())
        .map(|i| {
            let r = normal_ratio(held.row(i), &ms, ss, &mt, st);
            r / (alpha * r + 1.0 - alpha)
        })
        .collect();
    let e = nmse(&w, &truth);
    eprintln!("RuLSIF alpha=0.2 NMSE {e:.3}");
    assert!(e < 0.1, "relative-ratio NMSE {e}");
    let max = w.iter().cloned().fold(0.0, f64::max);
    assert!(
        max < 1.2 / alpha,
        "relative ratio is bounded by 1/alpha (up to estimation error): max {max}"
    );
}
