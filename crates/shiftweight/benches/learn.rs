//! Weighted logistic regression at scale: 1,000,000 rows, d = 20, seeded data and weights.
//! Run with `cargo bench -p shiftweight --bench learn`; the side-by-side comparison with
//! scikit-learn is `benches/compare_weighted_logistic.py`.

use criterion::{criterion_group, criterion_main, Criterion};
use rand::{Rng, SeedableRng};
use shiftweight::learn::{sigmoid, WeightedLogistic};
use shiftweight::MatrixView;
use std::hint::black_box;
use std::time::Duration;

/// Seeded rows, labels from a logistic model, and exponential-like positive weights.
fn data(n: usize, d: usize, seed: u64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let beta: Vec<f64> = (0..d)
        .map(|j| if j % 2 == 0 { 0.5 } else { -0.3 })
        .collect();
    let mut x = Vec::with_capacity(n * d);
    let mut y = Vec::with_capacity(n);
    let mut w = Vec::with_capacity(n);
    for _ in 0..n {
        let row: Vec<f64> = (0..d).map(|_| r.random_range(-2.0..2.0)).collect();
        let eta: f64 = row.iter().zip(&beta).map(|(a, b)| a * b).sum();
        y.push(if r.random::<f64>() < sigmoid(eta) {
            1.0
        } else {
            0.0
        });
        w.push(-(1.0 - r.random::<f64>()).ln());
        x.extend(row);
    }
    (x, y, w)
}

fn weighted_logistic(c: &mut Criterion) {
    let (n, d) = (1_000_000, 20);
    let (x, y, w) = data(n, d, 7);
    let view = MatrixView::new(&x, n, d).expect("shape");
    let mut g = c.benchmark_group("weighted_logistic");
    g.sample_size(10).measurement_time(Duration::from_secs(20));
    g.bench_function("n=1e6,d=20,l2=1", |b| {
        b.iter(|| {
            black_box(
                WeightedLogistic::new()
                    .l2(1.0)
                    .fit(view, &y, Some(&w))
                    .expect("fit"),
            )
        })
    });
    g.finish();
}

criterion_group!(benches, weighted_logistic);
criterion_main!(benches);
