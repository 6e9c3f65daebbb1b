//! Speed of the weight diagnostics and stabilisation (seeded lognormal weights, sigma 1.5).
//!
//! Target: `diagnose` of 10,000,000 weights well under a second on 2 cores.
//! Run: `cargo bench -p shiftweight --bench weights`.

use criterion::{criterion_group, criterion_main, Criterion};
use rand::SeedableRng;
use rand_distr::{Distribution, LogNormal};
use shiftweight::diagnostics::{clip_tradeoff, diagnose, effective_sample_size, pareto_k};
use shiftweight::weights::{stabilize, StabilizeOptions};
use std::hint::black_box;
use std::time::Duration;

/// Seeded heavy-ish weights.
fn weights(n: usize) -> Vec<f64> {
    let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(0x6265_6e63);
    let d = LogNormal::new(0.0, 1.5).expect("valid lognormal");
    (0..n).map(|_| d.sample(&mut r)).collect()
}

/// One shared configuration: few samples, the inputs are large.
fn config() -> Criterion {
    Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(8))
}

fn bench(c: &mut Criterion) {
    let big = weights(10_000_000);
    c.bench_function("diagnose 10M", |b| {
        b.iter(|| diagnose(black_box(&big), None).expect("valid"))
    });
    c.bench_function("effective_sample_size 10M", |b| {
        b.iter(|| effective_sample_size(black_box(&big)).expect("valid"))
    });
    c.bench_function("pareto_k 10M", |b| {
        b.iter(|| pareto_k(black_box(&big)).expect("valid"))
    });
    let mid = weights(1_000_000);
    let opts = StabilizeOptions::new().smooth(true).truncate(true);
    c.bench_function("stabilize smooth+truncate 1M", |b| {
        b.iter(|| stabilize(black_box(&mid), &opts).expect("valid"))
    });
    c.bench_function("clip_tradeoff 1M", |b| {
        b.iter(|| clip_tradeoff(black_box(&mid), None).expect("valid"))
    });
}

criterion_group! {
    name = benches;
    config = config();
    targets = bench
}
criterion_main!(benches);
