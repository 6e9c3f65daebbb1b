//! Shared configuration of the criterion benches: seeded data and one criterion setup.
#![allow(dead_code)]

use criterion::Criterion;
use rand_distr::{Distribution, Normal};
use shiftweight::Matrix;

/// The crate's seeded generator (ChaCha8 seeded from a u64), for reproducible test data.
pub fn rng(seed: u64) -> rand_chacha::ChaCha8Rng {
    rand::SeedableRng::seed_from_u64(seed)
}
use std::time::Duration;

/// n rows, d features, N(shift, 1) in the first feature and N(0, 1) elsewhere; seeded.
pub fn gaussian(n: usize, d: usize, shift: f64, seed: u64) -> Matrix {
    let mut r = rng(seed);
    let nd = Normal::new(0.0, 1.0).unwrap();
    let data = (0..n * d)
        .map(|k| nd.sample(&mut r) + if k % d == 0 { shift } else { 0.0 })
        .collect();
    Matrix::new(data, n, d).unwrap()
}

/// Few samples, bounded time: the measured steps take from milliseconds to seconds.
pub fn slow_config() -> Criterion {
    Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(20))
}

/// Sub-millisecond to tens of milliseconds per step: more samples, short runs.
pub fn fast_config() -> Criterion {
    Criterion::default()
        .sample_size(30)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5))
}
