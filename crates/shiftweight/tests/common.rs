//! Shared helpers for the integration tests: Gaussian samples and their analytic density ratio.
#![allow(dead_code)]

use rand_distr::{Distribution, Normal};
use shiftweight::Matrix;

/// The crate's seeded generator (ChaCha8 seeded from a u64), for reproducible test data.
pub fn rng(seed: u64) -> rand_chacha::ChaCha8Rng {
    rand::SeedableRng::seed_from_u64(seed)
}

/// n rows of independent N(mean_j, sd^2) features.
pub fn gaussian(n: usize, means: &[f64], sd: f64, seed: u64) -> Matrix {
    let mut r = rng(seed);
    let mut data = Vec::with_capacity(n * means.len());
    for _ in 0..n {
        for &m in means {
            data.push(Normal::new(m, sd).unwrap().sample(&mut r));
        }
    }
    Matrix::new(data, n, means.len()).unwrap()
}

/// Analytic ratio of two isotropic normal densities N(mt, st^2 I) / N(ms, ss^2 I) at x.
/// Reference: the normal density formula; the ratio of two normal densities is closed form.
pub fn normal_ratio(x: &[f64], ms: &[f64], ss: f64, mt: &[f64], st: f64) -> f64 {
    let d = x.len() as f64;
    let qs: f64 = x
        .iter()
        .zip(ms)
        .map(|(a, m)| (a - m) * (a - m))
        .sum::<f64>()
        / (ss * ss);
    let qt: f64 = x
        .iter()
        .zip(mt)
        .map(|(a, m)| (a - m) * (a - m))
        .sum::<f64>()
        / (st * st);
    ((ss / st).ln() * d - 0.5 * qt + 0.5 * qs).exp()
}

/// Normalised mean squared error of estimated weights against the truth, both rescaled to mean 1:
/// mean((w_hat - w)^2) / mean(w^2).
pub fn nmse(est: &[f64], truth: &[f64]) -> f64 {
    let me = est.iter().sum::<f64>() / est.len() as f64;
    let mt = truth.iter().sum::<f64>() / truth.len() as f64;
    let num: f64 = est
        .iter()
        .zip(truth)
        .map(|(e, t)| (e / me - t / mt).powi(2))
        .sum();
    let den: f64 = truth.iter().map(|t| (t / mt).powi(2)).sum();
    num / den
}
